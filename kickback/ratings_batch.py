"""The rating checks of :mod:`kickback.ratings` as columns over many variants of one case.

The rows are those of :func:`kickback.ratings.rating_checks` (same part, quantity, limit and
pass rule; tests/test_batch.py compares them row by row); a row a variant does not have (no
rating given; no breakdown voltage and no avalanche rating) is marked ``applies = False`` there
and does not count against it.
Junction-temperature rows need a thermal network, which the batch engine does not model (such
variants are reported as not simulated).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.figures import ON_STATE_FRACTION
from kickback.ratings import AVALANCHE_NEGLIGIBLE, avalanche_check_applies


@dataclass(frozen=True)
class CheckColumn:
    """One check over the variants: arrays of shape (n,).

    Attributes
    ----------
    part, quantity, unit : str
    value, limit, margin : float arrays — NaN where the figure or the limit does not exist
    passed : bool array — the check passes (True where it does not apply)
    applies : bool array — the variant has this check
    """

    part: str
    quantity: str
    unit: str
    value: np.ndarray
    limit: np.ndarray
    margin: np.ndarray
    passed: np.ndarray
    applies: np.ndarray

    @property
    def name(self) -> str:
        return f"{self.part}: {self.quantity}"


def _col(part, quantity, unit, value, rating, fraction, applies):
    limit = rating * fraction
    with np.errstate(invalid="ignore", divide="ignore"):
        margin = np.where(limit > 0, (limit - value) / limit, np.nan)
    ok = applies & np.isfinite(value) & np.isfinite(limit)
    passed = np.where(applies, ok & (value <= limit), True)
    return CheckColumn(part, quantity, unit, value, np.where(applies, limit, np.nan),
                       np.where(applies, margin, np.nan), passed, applies)


def check_columns(case, cols: dict, get, n: int) -> dict:
    """Every check row of ``case`` over the variants; name → :class:`CheckColumn`.

    Parameters
    ----------
    case : Case — the base case (its structure: ratings present, element types)
    cols : dict — figure columns from :func:`kickback.figures_batch.run_columns`
    get : callable — ``get(path)`` → (n,) values of a case key (the varied values or the case's)
    n : int
    """
    out = {}
    dv = get("checks.derating")
    ed = get("checks.energy_derating")
    de = np.where(np.isfinite(ed), ed, dv)
    all_ = np.ones(n, bool)

    def put(c):
        out[c.name] = c

    peak = cols["switch.peak_voltage_V"]
    rv = get("switch.rated_voltage")
    if case.switch.rated_voltage is not None or np.any(np.isfinite(rv)):
        put(_col("switch", "peak voltage", "V", peak, rv, dv, np.isfinite(rv)))
    e_av = cols["switch.avalanche_energy_J"]
    ra = get("switch.rated_avalanche_energy")
    # the row exists by the ratings (kickback.ratings.avalanche_check_applies), not by the value
    has_av = avalanche_check_applies(get("switch.breakdown_voltage"), ra)
    if np.any(has_av):
        avalanches = ~(e_av <= AVALANCHE_NEGLIGIBLE * cols["coil.stored_energy_J"])
        c = _col("switch", "avalanche energy", "J", e_av, ra, de, has_av)
        put(CheckColumn(c.part, c.quantity, c.unit, c.value, c.limit, c.margin,
                        np.where(has_av, np.where(np.isfinite(ra), c.passed, ~avalanches), True), has_av))
    for k, cl in enumerate(case.clamps):
        for j, el in enumerate(cl.elements):
            pre = f"clamps[{k}].elements[{j}]."
            key = f"clamp[{k}].element[{j}]."
            part = f"{cl.name}: {el.name or f'{el.type} {j + 1}'}"

            def rated(name, key=key):
                r = get(key + name)
                return r, np.isfinite(r)

            if el.type == "diode":
                r, has = rated("rated_reverse_voltage")
                if np.any(has):
                    put(_col(part, "reverse voltage", "V", cols[pre + "standoff_voltage_V"], r, dv, has))
                r, has = rated("rated_surge_current")
                if np.any(has):
                    put(_col(part, "peak current", "A", cols[pre + "peak_current_A"], r, dv, has))
            elif el.type in ("zener", "tvs"):
                r, has = rated("rated_pulse_energy")
                if np.any(has):
                    put(_col(part, "pulse energy", "J", cols[pre + "energy_J"], r, de, has))
                r, has = rated("rated_peak_power")
                if np.any(has):
                    width = cols[pre + "pulse_width_s"]
                    rw, has_w = rated("rated_pulse_width")
                    with np.errstate(invalid="ignore", divide="ignore"):
                        moved = np.where(has_w & (width > 0), r * np.sqrt(rw / width), r)  # Wunsch–Bell
                    put(_col(part, "peak power", "W", cols[pre + "peak_power_W"], moved, de, has))
                r, has = rated("standoff_voltage")
                if el.type == "tvs" and len(cl.elements) == 1 and np.any(has):  # kickback.ratings.WORKING_NOTE
                    put(_col(part, "working voltage", "V", get("supply.voltage"), r, 1.0, has))
            elif el.type in ("resistor", "varistor"):
                r, has = rated("rated_energy")
                if np.any(has):
                    put(_col(part, "pulse energy", "J", cols[pre + "energy_J"], r, de, has))
            elif el.type == "capacitor":
                r, has = rated("rated_voltage")
                if np.any(has):
                    put(_col(part, "peak voltage", "V", cols[pre + "peak_voltage_V"], r, dv, has))
        mc = get("checks.max_clamp_energy")
        if np.any(np.isfinite(mc)):
            put(_col(cl.name, "clamp energy", "J", cols[f"clamps[{k}].energy_J"], mc, 1.0, np.isfinite(mc)))
        # a clamp that conducts while the switch is on fails (kickback.ratings.on_state_check)
        on_i = np.abs(cols[f"clamps[{k}].on_state_current_A"])
        lim = ON_STATE_FRACTION * np.abs(cols["coil.initial_current_A"])
        conducts = np.isfinite(on_i) & (on_i > lim)
        if np.any(conducts):
            put(CheckColumn(cl.name, "current while the switch is on", "A", on_i, np.where(conducts, 0.0, np.nan),
                            np.full(n, np.nan), ~conducts, conducts))
    s = case.switch
    if s.type == "bjt" and s.gain is not None and s.drive_voltage is not None and s.base_resistance is not None:
        i_b = (get("switch.drive_voltage") - get("switch.base_emitter_voltage")) / get("switch.base_resistance")
        need = get("switch.overdrive") * cols["coil.initial_current_A"] / get("switch.gain")
        with np.errstate(invalid="ignore", divide="ignore"):
            margin = np.where(need > 0, (i_b - need) / need, np.nan)
        put(CheckColumn("switch", "base current", "A", i_b, need, margin, i_b >= need, all_))
    if s.type == "mosfet" and s.gate_voltage is not None and s.on_resistance_gate_voltage is not None:
        vg, vspec = get("switch.gate_voltage"), get("switch.on_resistance_gate_voltage")
        with np.errstate(invalid="ignore", divide="ignore"):
            margin = np.where(vspec > 0, (vg - vspec) / vspec, np.nan)
        put(CheckColumn("switch", "gate voltage", "V", vg, vspec, margin, vg >= vspec, all_))
    for key, name, quantity, unit in (("checks.max_peak_voltage", "switch.peak_voltage_V", "peak switch voltage", "V"),
                                      ("checks.max_release_time", "coil.release_s", "release time", "s"),
                                      ("checks.max_decay_time", "coil.decay_s.to_zero", "decay to zero", "s")):
        lim = get(key)
        if np.any(np.isfinite(lim)):
            has = np.isfinite(lim)
            c = _col("case", quantity, unit, cols[name], lim, 1.0, has)
            # a time that does not occur fails its limit (as in kickback.ratings)
            put(CheckColumn(c.part, c.quantity, c.unit, c.value, c.limit, c.margin,
                            np.where(has, c.passed & np.isfinite(cols[name]), True), has))
    return out
