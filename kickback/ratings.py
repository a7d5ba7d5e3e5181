"""Checks of the figures against the parts' ratings, with derating, and the verdict.

The rating rules are written once, as columns over n ≥ 1 variants (:func:`check_columns`): the
batch engine's many variants and one simulated case (:func:`rating_checks`, a view of its one row
as :class:`Check` rows) run the same rules on the result contract's figure columns
(:func:`kickback.figures.figure_columns`) and the case values read by key path
(:func:`kickback.keypath.value_getter`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kickback.case import Case, part_label
from kickback.conventions import AVALANCHE_NEGLIGIBLE, LEAKAGE_MARGIN, ON_STATE_FRACTION
from kickback.figures import Figures, figure_columns
from kickback.keypath import value_getter
from kickback.models.factory import chain_leakage
from kickback.models.thermal import wunsch_bell_rating


@dataclass(frozen=True)
class Check:
    """One rating check.

    Attributes
    ----------
    part : str — which part ("switch", "clamp 'D1' diode 1", "case")
    quantity : str — what is checked, with its unit in words
    value : float or None — the figure [SI]; None when it does not occur
    limit : float or None — the allowed value after derating [SI]; None: no rating (fails)
    margin : float or None — (limit − value)/limit; negative when failing
    passed : bool
    unit : str — SI unit symbol of value and limit
    note : str — how the limit was formed
    """

    part: str
    quantity: str
    value: float | None
    limit: float | None
    margin: float | None
    passed: bool
    unit: str
    note: str = ""

    def to_dict(self) -> dict:
        return {"part": self.part, "quantity": self.quantity, "value": self.value, "limit": self.limit,
                "margin": self.margin, "pass": self.passed, "unit": self.unit}


@dataclass(frozen=True, eq=False)
class Note:
    """How a check's limit was formed, per variant: ``texts[pick[k]]`` filled with ``args[·][k]``.

    The words are formed only when a row is read (:meth:`at`), never for every variant of a
    large run.
    """

    texts: tuple[str, ...]
    args: dict = field(default_factory=dict)
    pick: np.ndarray | None = None  # index into texts per variant (None: texts[0])

    def at(self, k: int) -> str:
        """The note of variant ``k``."""
        text = self.texts[0 if self.pick is None else int(self.pick[k])]
        return text.format(**{a: (v if np.ndim(v) == 0 else v[k]) for a, v in self.args.items()})


@dataclass(frozen=True, eq=False)
class CheckColumn:
    """One check over the variants: arrays of shape (n,).

    Attributes
    ----------
    part, quantity, unit : str
    value, limit, margin : float arrays — NaN where the figure or the limit does not exist
    passed : bool array — the check passes (True where it does not apply)
    applies : bool array — the variant has this check
    note : Note — how the limit was formed
    """

    part: str
    quantity: str
    unit: str
    value: np.ndarray
    limit: np.ndarray
    margin: np.ndarray
    passed: np.ndarray
    applies: np.ndarray
    note: Note = field(default_factory=lambda: Note(("",)))

    @property
    def name(self) -> str:
        return f"{self.part}: {self.quantity}"

    def row(self, k: int) -> Check:
        """Variant ``k`` as a :class:`Check` (NaN → None)."""
        return Check(self.part, self.quantity, _opt(self.value[k]), _opt(self.limit[k]), _opt(self.margin[k]),
                     bool(self.passed[k]), self.unit, self.note.at(k))


def blank_column(part: str, quantity: str, unit: str, n: int) -> CheckColumn:
    """A check no variant of n has (yet): NaN values, passing, ``applies`` False, no note."""
    return CheckColumn(part, quantity, unit, np.full(n, np.nan), np.full(n, np.nan), np.full(n, np.nan),
                       np.ones(n, bool), np.zeros(n, bool))


def put_rows(column: CheckColumn, rows, other: CheckColumn) -> CheckColumn:
    """``column`` with the variants ``rows`` taken from ``other`` (the same check of another run of
    them); the note is not kept (a table of variants from several runs has none)."""
    arrays = [a.copy() for a in (column.value, column.limit, column.margin, column.passed, column.applies)]
    for a, b in zip(arrays, (other.value, other.limit, other.margin, other.passed, other.applies), strict=True):
        a[rows] = b
    return CheckColumn(column.part, column.quantity, column.unit or other.unit, *arrays)


def _opt(x) -> float | None:
    x = float(x)
    return None if np.isnan(x) else x


def rows(columns, k: int = 0) -> list[Check]:
    """The checks variant ``k`` has, as :class:`Check` rows in the rules' order."""
    return [c.row(k) for c in columns if c.applies[k]]


#: how the working-voltage check of a lone TVS is formed
WORKING_NOTE = ("the supply against the stand-off voltage V_WM, not derated (V_WM is already the datasheet's "
                "largest voltage with no conduction): a lone TVS holds the supply whenever it must not conduct")


def _margin(num, den):
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def _at_most(part, quantity, unit, value, rating, fraction, applies, note) -> CheckColumn:
    """``value ≤ rating × fraction``; margin (limit − value)/limit."""
    value = np.asarray(value, float)
    limit = rating * fraction
    margin = _margin(limit - value, limit)
    ok = applies & np.isfinite(value) & np.isfinite(limit)
    passed = np.where(applies, ok & (value <= limit), True)
    return CheckColumn(part, quantity, unit, value, np.where(applies, limit, np.nan),
                       np.where(applies, margin, np.nan), passed, applies, note)


def _at_least(part, quantity, unit, value, minimum, note) -> CheckColumn:
    """``value ≥ minimum``; margin (value − minimum)/minimum; every variant has it."""
    value, minimum = np.broadcast_arrays(np.asarray(value, float), np.asarray(minimum, float))
    return CheckColumn(part, quantity, unit, value, minimum, _margin(value - minimum, minimum), value >= minimum,
                       np.ones(value.shape, bool), note)


def _junction(part, value, limit, ambient) -> CheckColumn:
    """Junction temperature; the margin is the share of the allowed rise above ambient left."""
    applies = np.isfinite(value) & np.isfinite(limit)
    note = Note(("Foster network from {a:.1f} °C ambient; margin of the allowed rise",), {"a": ambient - 273.15})
    return CheckColumn(part, "junction temperature", "K", value, np.where(applies, limit, np.nan),
                       np.where(applies, _margin(limit - value, limit - ambient), np.nan),
                       np.where(applies, value <= limit, True), applies, note)


def avalanche_check_applies(breakdown_voltage, rated_avalanche_energy) -> bool:
    """Whether a case has the switch's avalanche-energy check: by its ratings, not by the figure.

    The row exists when the switch can break down (``breakdown_voltage`` given) or has an
    avalanche rating, whatever energy a run books: a check the case calls for is never dropped
    because its value came out zero or negative. Scalars or arrays (NaN: not given).
    """
    bv = np.asarray(np.nan if breakdown_voltage is None else breakdown_voltage, float)
    ra = np.asarray(np.nan if rated_avalanche_energy is None else rated_avalanche_energy, float)
    out = np.isfinite(bv) | np.isfinite(ra)
    return bool(out) if out.ndim == 0 else out


def check_columns(case: Case, cols: dict, get, n: int) -> dict:
    """Every check row of ``case`` over n variants: name ("part: quantity") → :class:`CheckColumn`.

    Voltage and current ratings are multiplied by ``checks.derating``, energy and power ratings
    by ``checks.energy_derating`` (default: the same fraction). Derating to 80 % is common
    practice, no source. A row a variant does not have (no rating given; no breakdown voltage and
    no avalanche rating) has ``applies = False`` there and does not count against it; a row no
    variant has is left out.

    Parameters
    ----------
    case : Case — the base case (its structure: element types, which drive is given)
    cols : dict — figure columns, names of the result contract (:func:`kickback.figures.figure_columns`)
    get : callable — ``get(path)`` → (n,) values of a case key (:func:`kickback.keypath.value_getter`)
    n : int — variants
    """
    return {c.name: c for c in check_list(case, cols, get, n)}


def rating_checks(case: Case, fig: Figures) -> list[Check]:
    """Every applicable check of one case's figures, one row each (the rules of
    :func:`check_columns` on its one row)."""
    return rows(check_list(case, figure_columns(fig), value_getter(case, {}, 1), 1))


def check_list(case: Case, cols: dict, get, n: int) -> list[CheckColumn]:
    """The columns of :func:`check_columns`, as a list in the rules' order."""
    out: list[CheckColumn] = []
    dv = get("checks.derating")
    ed = get("checks.energy_derating")
    de = np.where(np.isfinite(ed), ed, dv)
    vnote, enote = Note(("rating × {f:g}",), {"f": dv}), Note(("rating × {f:g}",), {"f": de})
    limit_note = Note(("case limit",))
    ambient = get("checks.ambient_temperature")

    def put(c):
        if np.any(c.applies):
            out.append(c)

    peak = cols["switch.peak_voltage_V"]
    rv = get("switch.rated_voltage")
    put(_at_most("switch", "peak voltage", "V", peak, rv, dv, np.isfinite(rv), vnote))
    e_av = cols["switch.avalanche_energy_J"]
    ra = get("switch.rated_avalanche_energy")
    has_av = avalanche_check_applies(get("switch.breakdown_voltage"), ra)
    if np.any(has_av):  # the row exists by the ratings, not by the value
        avalanches = ~(e_av <= AVALANCHE_NEGLIGIBLE * cols["coil.stored_energy_J"])
        rated = np.isfinite(ra)
        c = _at_most("switch", "avalanche energy", "J", e_av, ra, de, has_av, Note(
            ("rating × {f:g}", "the switch avalanches but has no avalanche rating",
             "not avalanche-rated: it must not avalanche"), {"f": de}, np.where(rated, 0, np.where(avalanches, 1, 2))))
        put(CheckColumn(c.part, c.quantity, c.unit, c.value, c.limit, c.margin,
                        np.where(has_av & ~rated, ~avalanches, c.passed), has_av, c.note))
    for k, cl in enumerate(case.clamps):
        for j, el in enumerate(cl.elements):
            pre = f"clamps[{k}].elements[{j}]."
            key = f"clamp[{k}].element[{j}]."
            part = cl.element_label(j)

            def rated(name, key=key):
                r = get(key + name)
                return r, np.isfinite(r)

            if el.type == "diode":
                r, has = rated("rated_reverse_voltage")
                put(_at_most(part, "reverse voltage", "V", cols[pre + "standoff_voltage_V"], r, dv, has, vnote))
                r, has = rated("rated_surge_current")
                put(_at_most(part, "peak current", "A", cols[pre + "peak_current_A"], r, dv, has, vnote))
            elif el.type in ("zener", "tvs"):
                r, has = rated("rated_pulse_energy")
                put(_at_most(part, "pulse energy", "J", cols[pre + "energy_J"], r, de, has, enote))
                r, has = rated("rated_peak_power")
                if np.any(has):
                    put(_peak_power(part, cols[pre + "peak_power_W"], cols[pre + "pulse_width_s"], r,
                                    get(key + "rated_pulse_width"), de, has))
                r, has = rated("standoff_voltage")
                if el.type == "tvs" and len(cl.elements) == 1:
                    put(_at_most(part, "working voltage", "V", get("supply.voltage"), r, 1.0, has,
                                 Note((WORKING_NOTE,))))
            elif el.type in ("resistor", "varistor"):
                r, has = rated("rated_energy")
                put(_at_most(part, "pulse energy", "J", cols[pre + "energy_J"], r, de, has, enote))
            elif el.type == "capacitor":
                r, has = rated("rated_voltage")
                put(_at_most(part, "peak voltage", "V", cols[pre + "peak_voltage_V"], r, dv, has, vnote))
            if pre + "junction_peak_K" in cols:
                put(_junction(part, cols[pre + "junction_peak_K"], get(key + "max_junction_temperature"), ambient))
        mc = get("checks.max_clamp_energy")
        put(_at_most(cl.name, "clamp energy", "J", cols[f"clamps[{k}].energy_J"], mc, 1.0, np.isfinite(mc),
                     limit_note))
        put(_on_state(cl, cols[f"clamps[{k}].on_state_current_A"], cols["coil.initial_current_A"]))
    if "switch.junction_peak_K" in cols:
        put(_junction("switch", cols["switch.junction_peak_K"], get("switch.max_junction_temperature"), ambient))
    out += _drive(case, cols, get)
    for key, name, quantity, unit, missing in (
            ("checks.max_peak_voltage", "switch.peak_voltage_V", "peak switch voltage", "V", ""),
            ("checks.max_release_time", "coil.release_s", "release time", "s",
             "no release time (no release_current, or the current never fell below it)"),
            ("checks.max_decay_time", "coil.decay_s.to_zero", "decay to zero", "s",
             "the current did not reach zero in the run")):
        lim = get(key)
        # a time that does not occur fails its limit
        pick = None if not missing else (~np.isfinite(cols[name])).astype(int)
        put(_at_most("case", quantity, unit, cols[name], lim, 1.0, np.isfinite(lim),
                     Note(("case limit", missing), pick=pick)))
    return out


def _peak_power(part, value, width, rating, rated_width, fraction, has) -> CheckColumn:
    """Peak pulse power against its rating; a rating at another pulse width is moved to this
    pulse's equivalent rectangular width by P ∝ t^(−1/2) (Wunsch and Bell 1968, an approximation)."""
    moved = np.isfinite(rated_width) & (width > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        limit = np.where(moved, wunsch_bell_rating(rating, rated_width, width), rating)
    note = Note(("rating × {f:g}",
                 "rated {P:.4g} W at {w:.3g} s, moved to the {t:.3g} s equivalent pulse by P ∝ t^-1/2 "
                 "(Wunsch–Bell, approximate) × {f:g}"),
                {"f": fraction, "P": rating, "w": rated_width, "t": width}, moved.astype(int))
    return _at_most(part, "peak power", "W", value, limit, fraction, has, note)


def _on_state(cl, on_current, initial_current) -> CheckColumn:
    """A clamp that conducts while the switch is on fails; the row appears only where it does.

    A clamp is meant to take the coil's current only after turn-off; one that conducts in the DC
    on-state (a lone Zener across the coil conducts forward) loads the supply and the switch and
    heats itself for as long as the switch is on. It conducts when its on-state current exceeds
    ``ON_STATE_FRACTION`` × the initial coil current and ``LEAKAGE_MARGIN`` × the chain's reverse
    leakage (:func:`kickback.models.factory.chain_leakage`: a reverse-biased diode's saturation
    current is leakage, not conduction); the limit is 0 A, with no margin.
    """
    on_i = np.abs(on_current)
    lim = np.maximum(ON_STATE_FRACTION * np.abs(initial_current), LEAKAGE_MARGIN * chain_leakage(cl.elements))
    conducts = np.isfinite(on_i) & (on_i > lim)
    return CheckColumn(cl.name, "current while the switch is on", "A", on_i, np.where(conducts, 0.0, np.nan),
                       np.full(on_i.shape, np.nan), ~conducts, conducts,
                       Note(("a clamp must not conduct while the switch is on",)))


def _drive(case, cols, get) -> list[CheckColumn]:
    """On-state drive: BJT base current against overdrive × I_C/β; MOSFET gate voltage against the
    gate voltage its on-resistance is specified at."""
    s = case.switch
    out = []
    if s.type == "bjt" and s.gain is not None and s.drive_voltage is not None and s.base_resistance is not None:
        i_b = (get("switch.drive_voltage") - get("switch.base_emitter_voltage")) / get("switch.base_resistance")
        od = get("switch.overdrive")
        need = od * cols["coil.initial_current_A"] / get("switch.gain")
        out.append(_at_least("switch", "base current", "A", i_b, need, Note(
            ("needs {o:g} × I_C/β (overdrive: common practice 1.5–2, no source)",), {"o": od})))
    if s.type == "mosfet" and s.gate_voltage is not None and s.on_resistance_gate_voltage is not None:
        out.append(_at_least("switch", "gate voltage", "V", get("switch.gate_voltage"),
                             get("switch.on_resistance_gate_voltage"),
                             Note(("at least the gate voltage the on-resistance is specified at",))))
    return out


def pwm_checks(case: Case, pf) -> list[Check]:
    """Checks of one duty's steady state: junction temperatures (periodic peak), diode average
    current, repetitive avalanche energy per cycle (the column rules above on one row)."""
    ck, s = case.checks, case.switch

    def a(x):
        return np.array([np.nan if x is None else float(x)])

    tag = f" (duty {pf.duty:g})"
    amb = a(ck.ambient_temperature)
    out: list[CheckColumn] = [_junction("switch" + tag, a(pf.switch_junction_peak_K), a(s.max_junction_temperature),
                                        amb)]
    if pf.avalanche_energy_J > 1e-12:
        ra = a(s.rated_repetitive_avalanche_energy)
        c = _at_most("switch" + tag, "repetitive avalanche energy", "J", a(pf.avalanche_energy_J), ra,
                     ck.energy_fraction, np.ones(1, bool), Note(
                         ("per cycle", "the switch avalanches every cycle but has no repetitive rating"),
                         pick=(~np.isfinite(ra)).astype(int)))
        out.append(CheckColumn(c.part, c.quantity, c.unit, c.value, c.limit, c.margin, c.passed & np.isfinite(ra),
                               c.applies, c.note))
    flat = [(cl, el) for cl in case.clamps for el in cl.elements]
    for (cl, el), ef in zip(flat, pf.elements, strict=True):
        part = part_label(cl.name, ef["element"]) + tag
        if el.type == "diode":
            r = a(el.rated_average_current)
            out.append(_at_most(part, "average current", "A", a(abs(ef["mean_A"])), r, ck.derating, np.isfinite(r),
                                Note(("rating × {f:g}",), {"f": ck.derating})))
        out.append(_junction(part, a(ef["junction_peak_K"]), a(el.max_junction_temperature), amb))
    return rows(out)


#: a switch given no breakdown_voltage whose node rises above this multiple of its voltage rating
#: gets a finding: a real MOSFET or transistor avalanches a little above its rated voltage (about
#: 1.1–1.3 × the rating — common practice, from memory), so the node could not go that high
NO_BREAKDOWN_RATED_RATIO = 1.5
#: the same without a voltage rating: this multiple of the supply voltage (common practice, no source)
NO_BREAKDOWN_SUPPLY_RATIO = 5.0


def no_breakdown_finding(case, peak_voltage: float) -> str | None:
    """A finding when a switch with no ``breakdown_voltage`` rings far above what a real part holds.

    Above :data:`NO_BREAKDOWN_RATED_RATIO` × ``rated_voltage`` (or, with no rating,
    :data:`NO_BREAKDOWN_SUPPLY_RATIO` × the supply) the peak is an artefact of a switch that never
    breaks down; the case should give the part's breakdown voltage. None below the threshold.
    """
    from kickback.units import format_quantity as q

    s = case.switch
    if s.breakdown_voltage is not None:
        return None
    if s.rated_voltage is not None:
        limit, basis = NO_BREAKDOWN_RATED_RATIO * s.rated_voltage, \
            f"{NO_BREAKDOWN_RATED_RATIO:g} × its {q(s.rated_voltage, 'V')} rating"
    else:
        limit, basis = NO_BREAKDOWN_SUPPLY_RATIO * case.supply.voltage, \
            f"{NO_BREAKDOWN_SUPPLY_RATIO:g} × the {q(case.supply.voltage, 'V')} supply"
    if not peak_voltage > limit:
        return None
    return (f"the switch node rings to {q(peak_voltage, 'V')}, above {basis}, because the case gives the switch no "
            "breakdown_voltage: a real part avalanches near its voltage rating and the node stops there; give "
            "switch.breakdown_voltage (and rated_avalanche_energy) to see the avalanche")


def with_switch_findings(case, figures):
    """``figures`` with :func:`no_breakdown_finding` added to its findings when it applies."""
    from dataclasses import replace

    note = no_breakdown_finding(case, figures.peak_voltage_V)
    return figures if note is None else replace(figures, findings=figures.findings + (note,))
