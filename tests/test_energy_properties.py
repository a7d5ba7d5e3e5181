"""Properties of the turn-off over random valid cases (hypothesis, derandomized).

Properties and their sources:

- The energy ledger closes (DESIGN §3: a relative residual above 0.1 % is a defect; the ledger is
  conservation of energy, e.g. Alexander & Sadiku, Fundamentals of Electric Circuits, ch. 6–7).
- The switch node peaks at or above the supply (derived: the coil current keeps flowing into the
  node after turn-off, so the node rises until a path takes it; every clamp family below takes
  the current only above the supply).
- Every figure is finite and the run ends before its time bound (DESIGN §2/§3 result contract).
- A higher clamp voltage ends the decay sooner (derived from the first-order RL form
  t0 = (L/R) ln(1 + R i0/Vc), which falls as Vc rises — Alexander & Sadiku ch. 7 — and, beyond the
  ideal limit, from comparing L di/dt = Vs − v − R i for two node voltages v₁ ≥ v₂).

All component values are invented demo values drawn from wide ranges.
"""

from __future__ import annotations

import dataclasses
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.simulation import simulate

FAMILIES = ("shockley", "diode-zener", "tvs-to-ground", "rc-snubber")

#: derandomized (fixed seed), no example database; examples per family, so that every family is
#: drawn (a single derandomized run of 25 examples over all families drew mostly one family)
SETTINGS = settings(derandomize=True, max_examples=9, deadline=None, database=None)


def log_uniform(lo: float, hi: float):
    """Floats spread evenly in log between lo and hi."""
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: min(max(10.0**e, lo), hi))


@st.composite
def base_parts(draw):
    vs = draw(st.floats(5.0, 60.0))
    coil = Coil(draw(log_uniform(1e-3, 1.0)), draw(log_uniform(1.0, 200.0)))
    kind = draw(st.sampled_from(["ideal", "mosfet"]))
    fall = draw(st.one_of(st.just(0.0), log_uniform(10e-9, 2e-6)))
    cap = draw(st.one_of(st.just(0.0), log_uniform(10e-12, 2e-9)))
    r_on = draw(log_uniform(0.01, 0.5)) if kind == "mosfet" else 0.0
    return vs, coil, dict(type=kind, on_resistance=r_on, fall_time=fall, capacitance=cap)


def _clamp(family: str, draw, vs: float, coil: Coil, sw: dict) -> tuple[Clamp, dict]:
    i0 = vs / (coil.resistance + sw["on_resistance"])
    if family == "shockley":
        el = Element("diode", model="shockley", forward_voltage=draw(st.floats(0.6, 1.1)), at_current=1.0,
                     ideality=draw(st.floats(1.0, 2.5)), series_resistance=draw(log_uniform(1e-3, 0.2)))
        return Clamp("D", "coil", (el,)), sw
    if family == "diode-zener":
        return Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=draw(st.floats(0.5, 1.0))),
                                     Element("zener", voltage=draw(st.floats(0.2, 3.0)) * vs,
                                             dynamic_resistance=draw(st.one_of(st.just(0.0),
                                                                               log_uniform(0.01, 5.0)))))), sw
    if family == "tvs-to-ground":
        return Clamp("TVS", "switch", (Element("tvs", voltage=draw(st.floats(1.1, 3.0)) * vs,
                                               dynamic_resistance=draw(st.one_of(st.just(0.0),
                                                                                 log_uniform(0.01, 5.0)))),)), sw
    # RC snubber sized the usual way (common practice, no source): characteristic impedance
    # sqrt(L/C_s) such that i0·sqrt(L/C_s) is 1–5 × the supply, R_s 0.3–1 × that impedance;
    # a breakdown voltage 1.5–4 × the supply catches what the snubber lets through.
    z = draw(st.floats(1.0, 5.0)) * vs / i0
    cs = coil.inductance / z**2
    rs = draw(st.floats(0.3, 1.0)) * z
    sw = dict(sw, breakdown_voltage=draw(st.floats(1.5, 4.0)) * vs)
    return Clamp("RC", "coil", (Element("resistor", resistance=rs), Element("capacitor", capacitance=cs))), sw


@st.composite
def random_cases(draw, family: str):
    vs, coil, sw = draw(base_parts())
    clamp, sw = _clamp(family, draw, vs, coil, sw)
    return Case(f"random {family} (demo)", Supply(vs), coil, Switch(**sw), (clamp,))


def _all_numbers(obj, prefix=""):
    for fld in dataclasses.fields(obj):
        val = getattr(obj, fld.name)
        if isinstance(val, tuple) and val and dataclasses.is_dataclass(val[0]):
            for n, item in enumerate(val):
                yield from _all_numbers(item, f"{prefix}{fld.name}[{n}].")
        elif isinstance(val, float | int) and not isinstance(val, bool):
            yield prefix + fld.name, val


@pytest.mark.parametrize("family", FAMILIES)
@SETTINGS
@given(data=st.data())
def test_random_case_closes_the_ledger(family, data):
    case = data.draw(random_cases(family), label="case")
    f = simulate(case).figures
    bad = [f"{name} = {val}" for name, val in _all_numbers(f) if not math.isfinite(val)]
    assert not bad, "non-finite figures: " + ", ".join(bad)
    assert not f.bound_hit, f"run stopped at its time bound {f.end_time_s:.3g} s"
    for name in ("to_10_percent_s", "to_1_percent_s", "to_zero_s"):
        assert getattr(f, name) is not None, f"{name} missing though the current decays to zero"
    assert f.to_10_percent_s <= f.to_1_percent_s <= f.to_zero_s, "decay times out of order"
    assert abs(f.energy_balance_error) < 1e-3, f"energy balance error {f.energy_balance_error:.2e} (limit 1e-3)"
    vs = case.supply.voltage
    assert f.peak_voltage_V >= vs * (1 - 1e-9), f"peak {f.peak_voltage_V:.6g} V below the supply {vs:.6g} V"


def _with_clamp_voltage(case: Case, factor: float) -> Case:
    """The same case with the breakdown element's voltage scaled by ``factor``."""
    clamp = case.clamps[0]
    els = tuple(dataclasses.replace(el, voltage=el.voltage * factor) if el.type in ("zener", "tvs") else el
                for el in clamp.elements)
    return dataclasses.replace(case, clamps=(dataclasses.replace(clamp, elements=els),))


@pytest.mark.parametrize("family", ["diode-zener", "tvs-to-ground"])
@SETTINGS
@given(data=st.data())
def test_higher_clamp_voltage_ends_decay_sooner(family, data):
    case = data.draw(random_cases(family), label="case")
    factor = data.draw(st.floats(1.2, 2.0), label="factor")
    low = simulate(case).figures
    high = simulate(_with_clamp_voltage(case, factor)).figures
    assert high.to_zero_s < low.to_zero_s, (
        f"clamp voltage ×{factor:.3g}: time to zero {high.to_zero_s:.6g} s, not below {low.to_zero_s:.6g} s")
    assert high.peak_voltage_V > low.peak_voltage_V, (
        f"clamp voltage ×{factor:.3g}: peak {high.peak_voltage_V:.6g} V, not above {low.peak_voltage_V:.6g} V")
    # derived: the clamp takes the stored energy faster, so the coil resistance gets less of it
    assert high.resistance_energy_J < low.resistance_energy_J, "resistance energy did not fall"
