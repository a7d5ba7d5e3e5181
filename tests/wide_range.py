"""Random valid cases over the ranges engineers use (DESIGN.md §9), one per integer seed.

``draw(seed)`` gives a :class:`Drawn` case: its TOML text (so that a failing case can be saved
and run as it is), its family and what it has. The ranges: supply 3–400 V, coil inductance
10 µH–5 H, coil resistance 0.1 Ω–5 kΩ, fall time 0–10 µs, switch and winding capacitance
0–10 nF (values spanning decades are drawn log-uniform, numpy's seeded generator), the three
switch types with and without breakdown, every clamp family and chain — Shockley and
constant-drop diodes, Zener and TVS (uni- and bidirectional), resistors, RC, varistors,
diode + varistor, diode + resistor + capacitor, clamps in parallel, no clamp — and, for the
detailed engine, thermal networks, a saturating coil, a ``[drive]`` and a ``[motor]``.

What keeps a draw a valid design (rejection, then another draw from the same stream):

* the on-state current is 1 mA–30 A and the stored energy at most 50 J; the time constant
  L/R is 1 µs–2 s (coils outside these are not switched by a single transistor — common
  practice, no source);
* the coil current has a path at turn-off that dissipates: the switch breaks down or a clamp
  holds a resistive or breakdown element (a lone capacitor only rings);
* nothing conducts from the supply for ever after turn-off: a clamp across the switch, and a
  clamp across the coil that conducts either way, holds off more than the supply (breakdown
  and varistor voltages 1.1–4 × the supply); a resistor alone sits across the coil only;
* every element carries its ratings (so the checks exist), drawn around the expected stress
  so that both verdicts occur.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: families of a clamp chain across the coil (sw to +) and across the switch (sw to ground)
COIL_FAMILIES = ("diode", "diode+resistor", "diode+zener", "diode+tvs", "tvs-bi", "varistor", "diode+varistor",
                 "resistor", "rc", "diode+rc")
SWITCH_FAMILIES = ("zener", "tvs", "tvs-bi", "varistor", "rc", "capacitor", "diode+zener")
#: features the batch engine does not cover (the detailed engine alone runs them)
EXTRAS = ("thermal", "saturating", "drive", "motor")


@dataclass(frozen=True)
class Drawn:
    """One drawn case.

    Attributes
    ----------
    seed : int
    text : str — the case file (TOML)
    families : tuple of str — "coil:diode+zener", "switch:rc", … (empty: no clamp)
    extras : tuple of str — members of :data:`EXTRAS`
    fitted : bool — a Shockley diode or a varistor (the batch engine uses its stated fit)
    """

    seed: int
    text: str
    families: tuple[str, ...]
    extras: tuple[str, ...]
    fitted: bool

    @property
    def label(self) -> str:
        parts = list(self.families) or ["no clamp"]
        return ",".join(parts + list(self.extras))


def _log(rng, lo, hi):
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _q(x: float, unit: str) -> str:
    return f'"{x!r} {unit}"'


class _Writer:
    def __init__(self):
        self.lines: list[str] = []

    def table(self, name):
        self.lines += ["", name]

    def put(self, key, value):
        self.lines.append(f"{key} = {value}")


def _diode(w, rng, vs, i0, fitted: list):
    w.put("type", '"diode"')
    if rng.random() < 0.5:
        fitted.append(True)
        w.put("model", '"shockley"')
        vf = rng.uniform(0.5, 1.3)
        at = _log(rng, 0.1, 10.0) * max(i0, 1e-3)
        w.put("forward_voltage", _q(vf, "V"))
        w.put("at_current", _q(at, "A"))
        w.put("ideality", repr(float(rng.uniform(1.0, 2.5))))
        if rng.random() < 0.7:
            w.put("series_resistance", _q(min(_log(rng, 1e-3, 1.0), 0.5 * vf / at), "Ω"))
    else:
        w.put("model", '"constant-drop"')
        w.put("forward_voltage", _q(rng.uniform(0.3, 1.2), "V"))
        if rng.random() < 0.5:
            w.put("series_resistance", _q(_log(rng, 1e-3, 1.0), "Ω"))
    w.put("rated_reverse_voltage", _q(vs * _log(rng, 1.0, 6.0), "V"))
    w.put("rated_surge_current", _q(i0 * _log(rng, 0.7, 20.0), "A"))


def _breakdown(w, rng, kind, volts, energy, bidirectional=False):
    w.put("type", f'"{kind}"')
    w.put("voltage", _q(volts, "V"))
    if rng.random() < 0.7:
        w.put("dynamic_resistance", _q(_log(rng, 1e-3, 20.0), "Ω"))
    if kind == "tvs":
        w.put("bidirectional", "true" if bidirectional else "false")
    w.put("rated_pulse_energy", _q(energy * _log(rng, 0.05, 5.0), "J"))
    if rng.random() < 0.4:
        w.put("rated_peak_power", _q(_log(rng, 1.0, 1e4), "W"))
        if rng.random() < 0.5:
            w.put("rated_pulse_width", _q(_log(rng, 1e-5, 1e-2), "s"))


def _thermal(w, rng):
    """A Foster network of 1–3 stages and its junction limit (125–175 °C)."""
    stages = int(rng.integers(1, 4))
    w.put("thermal_resistance", "[" + ", ".join(_q(_log(rng, 0.05, 5.0), "K/W") for _ in range(stages)) + "]")
    w.put("thermal_tau", "[" + ", ".join(_q(_log(rng, 1e-5, 1.0), "s") for _ in range(stages)) + "]")
    w.put("max_junction_temperature", _q(rng.uniform(398.15, 448.15), "K"))


def _element(w, n_clamp, name):
    w.table("[[clamp.element]]")
    w.put("name", f'"{name}"')


def _chain(w, rng, family, across, vs, i0, energy, k, fitted: list, thermal=False):
    """Write clamp k of ``family`` across ``across``; ``thermal``: a Foster network on its first
    element that is not a capacitor."""
    w.table("[[clamp]]")
    w.put("name", f'"C{k}"')
    w.put("across", f'"{across}"')
    parts = family.split("+")
    for j, part in enumerate(parts):
        _element(w, k, f"C{k}E{j}")
        if part == "diode":
            _diode(w, rng, vs, i0, fitted)
        elif part in ("zener", "tvs", "tvs-bi"):
            # across the switch (and bidirectional across the coil) it must hold off the supply
            must_hold = across == "switch" or part == "tvs-bi"
            volts = vs * _log(rng, 1.1, 4.0) if must_hold else vs * _log(rng, 0.1, 3.0)
            _breakdown(w, rng, "tvs" if part.startswith("tvs") else "zener", volts, energy,
                       bidirectional=part == "tvs-bi")
        elif part == "varistor":
            fitted.append(True)
            w.put("type", '"varistor"')
            hold = across == "switch" or len(parts) == 1
            volts = vs * _log(rng, 1.2, 4.0) if hold else vs * _log(rng, 0.2, 3.0)
            w.put("voltage", _q(volts, "V"))
            w.put("exponent", repr(float(rng.uniform(8.0, 45.0))))
            w.put("rated_energy", _q(energy * _log(rng, 0.05, 5.0), "J"))
        elif part == "resistor":
            w.put("type", '"resistor"')
            w.put("resistance", _q(vs / i0 * _log(rng, 0.05, 20.0), "Ω"))
            w.put("rated_energy", _q(energy * _log(rng, 0.05, 5.0), "J"))
        elif part == "rc":
            w.put("type", '"resistor"')
            w.put("resistance", _q(vs / i0 * _log(rng, 0.05, 5.0), "Ω"))
            w.put("rated_energy", _q(energy * _log(rng, 0.05, 5.0), "J"))
            if thermal:
                _thermal(w, rng)
                thermal = False
            _element(w, k, f"C{k}E{j}c")
            _capacitor(w, rng, vs, i0, energy)
        elif part == "capacitor":
            _capacitor(w, rng, vs, i0, energy)
        else:
            raise ValueError(part)
        if thermal and part != "capacitor":
            _thermal(w, rng)
            thermal = False


def _capacitor(w, rng, vs, i0, energy):
    # sized so that ½·C·V² with V a few × the supply takes a share of the stored energy
    v = vs * _log(rng, 1.5, 6.0)
    c = min(max(2.0 * energy * _log(rng, 0.1, 3.0) / v**2, 100e-12), 100e-6)
    w.put("type", '"capacitor"')
    w.put("capacitance", _q(c, "F"))
    w.put("rated_voltage", _q(vs * _log(rng, 1.5, 8.0), "V"))


def draw(seed: int, *, extras: bool = True) -> Drawn:
    """The valid case of ``seed`` (see the module docstring for the ranges and the rules).

    Parameters
    ----------
    seed : int
    extras : bool — allow the features only the detailed engine runs (thermal, saturating coil,
        [drive], [motor]); False: every case is one the batch engine covers
    """
    rng = np.random.default_rng(np.random.SeedSequence([seed, 14]))
    while True:
        vs = _log(rng, 3.0, 400.0)
        L = _log(rng, 10e-6, 5.0)
        R = _log(rng, 0.1, 5000.0)
        i0 = vs / R
        if 1e-3 <= i0 <= 30.0 and 0.5 * L * i0**2 <= 50.0 and 1e-6 <= L / R <= 2.0:
            break
    energy = 0.5 * L * i0**2
    w = _Writer()
    w.lines.append(f'title = "random valid case {seed} (demo data)"')
    w.table("[supply]")
    w.put("voltage", _q(vs, "V"))
    w.table("[coil]")
    w.put("inductance", _q(L, "H"))
    w.put("resistance", _q(R, "Ω"))
    if rng.random() < 0.5:
        w.put("capacitance", _q(_log(rng, 1e-12, 10e-9), "F"))
    release = rng.random() < 0.7
    if release:
        w.put("release_current", _q(i0 * rng.uniform(0.1, 0.7), "A"))
        w.put("release_delay", _q(_log(rng, 1e-5, 5e-3), "s"))
    chosen: list[str] = []
    if extras:
        for x, p in (("thermal", 0.08), ("saturating", 0.06), ("drive", 0.06), ("motor", 0.05)):
            if rng.random() < p:
                chosen.append(x)
    if "saturating" in chosen:
        w.put("saturation_current", _q(i0 * _log(rng, 0.5, 5.0), "A"))
    w.table("[switch]")
    kind = ("ideal", "bjt", "mosfet")[int(rng.integers(3))]
    w.put("type", f'"{kind}"')
    if kind == "bjt":
        w.put("saturation_voltage", _q(min(rng.uniform(0.05, 0.5), 0.2 * vs), "V"))
    elif kind == "mosfet":
        w.put("on_resistance", _q(_log(rng, 1e-3, 0.2) * max(R, 1.0) ** 0.3, "Ω"))
    if rng.random() < 0.75:
        w.put("fall_time", _q(_log(rng, 1e-9, 10e-6), "s"))
    if rng.random() < 0.7:
        w.put("capacitance", _q(_log(rng, 1e-12, 10e-9), "F"))
    breakdown = rng.random() < 0.6
    vbr = vs * _log(rng, 1.2, 4.0)
    if breakdown:
        w.put("breakdown_voltage", _q(vbr, "V"))
        if rng.random() < 0.5:
            w.put("avalanche_resistance", _q(_log(rng, 1e-3, 10.0), "Ω"))
        w.put("rated_voltage", _q(vbr * rng.uniform(0.6, 1.0), "V"))
        if rng.random() < 0.7:
            w.put("rated_avalanche_energy", _q(energy * _log(rng, 0.05, 5.0), "J"))
    else:
        w.put("rated_voltage", _q(vs * _log(rng, 1.2, 8.0), "V"))
    on_switch = "thermal" in chosen and rng.random() < 0.6
    if on_switch:
        _thermal(w, rng)
    fitted: list = []
    families: list[str] = []
    n_clamps = int(rng.choice([0, 1, 1, 1, 1, 2, 2, 3]))
    need_path = not breakdown
    for _ in range(n_clamps):
        across = "coil" if rng.random() < 0.65 else "switch"
        pool = COIL_FAMILIES if across == "coil" else SWITCH_FAMILIES
        families.append(f"{across}:{pool[int(rng.integers(len(pool)))]}")
    if need_path and not any(f.split(":")[1] not in ("capacitor",) for f in families):
        families.append(f"coil:{COIL_FAMILIES[int(rng.integers(len(COIL_FAMILIES)))]}")
    for k, fam in enumerate(families):
        across, family = fam.split(":")
        _chain(w, rng, family, across, vs, i0, energy, k, fitted, thermal="thermal" in chosen and not on_switch)
        on_switch = on_switch or "thermal" in chosen  # one network on a clamp element at most
    if "thermal" in chosen and not any(ln.startswith("thermal_resistance") for ln in w.lines):
        chosen.remove("thermal")  # no clamp and not on the switch: no network after all
    w.table("[checks]")
    w.put("derating", repr(float(rng.uniform(0.5, 1.0))))
    if release and rng.random() < 0.6:
        w.put("max_release_time", _q(L / R * _log(rng, 0.05, 5.0), "s"))
    if rng.random() < 0.3:
        w.put("max_peak_voltage", _q(vs * _log(rng, 1.5, 6.0), "V"))
    if rng.random() < 0.2 and families:
        w.put("max_clamp_energy", _q(energy * _log(rng, 0.1, 3.0), "J"))
    if rng.random() < 0.2:
        w.put("max_decay_time", _q(L / R * _log(rng, 0.1, 10.0), "s"))
    if "drive" in chosen:
        w.table("[drive]")
        w.put("frequency", _q(_log(rng, 100.0, 50e3), "Hz"))
        w.put("duty", repr(float(rng.uniform(0.1, 0.9))))
    if "motor" in chosen:
        w.table("[motor]")
        k_e = _log(rng, 1e-3, 0.5)
        w.put("back_emf_constant", repr(k_e))
        omega = vs * rng.uniform(0.1, 0.7) / k_e
        if rng.random() < 0.5:
            w.put("speed", repr(omega))
        else:
            w.put("inertia", repr(_log(rng, 1e-6, 1e-3)))
            w.put("viscous_friction", repr(_log(rng, 1e-7, 1e-4)))
    text = "\n".join(w.lines).replace("\n\n\n", "\n\n") + "\n"
    return Drawn(seed, text, tuple(families), tuple(chosen), bool(fitted))
