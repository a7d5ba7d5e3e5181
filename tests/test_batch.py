"""The batch engine against closed forms and against the detailed engine.

Sources of the expected values, all computed in this file:

- First-order RL decay against a constant clamp voltage: C. K. Alexander and M. N. O. Sadiku,
  Fundamentals of Electric Circuits, ch. 7. With L di/dt = −Vc − R i the current is
  i(t) = (i0 + Vc/R) e^{−tR/L} − Vc/R, the time to a current i is (L/R) ln((i0 + Vc/R)/(i + Vc/R)),
  the charge to that time Q = (L (i0 − i) − Vc t)/R and the energy in R is ½L(i0² − i²) − Vc·Q
  (the coil's own balance). The clamp takes V_clamp·Q, the supply delivers Vs·Q for a clamp to
  ground (and nothing for a clamp across the coil).
- Series RLC (coil into the switch capacitance; an RC snubber across the coil): the same book,
  ch. 8, solved with scipy.linalg.expm and located with scipy.optimize.brentq.
- The detailed engine (kickback's Radau reference) at rtol 1e-9, its regularising resistance
  lowered to 1e-9 of the voltage scale (kickback.circuit.REGULARIZATION; the batch engine holds
  ideal laws exactly, the detailed engine books that resistance to the element outside a pin).

Every component value is an invented demo value.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from agreement_reference import EXAMPLES, reference
from hypothesis import HealthCheck, Phase, assume, given, settings
from hypothesis import strategies as st
from scipy import linalg, optimize

from kickback import load_case
from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.simulation import simulate


def _settings():
    return settings(derandomize=True, max_examples=EXAMPLES, deadline=None, database=None,
                    phases=(Phase.explicit, Phase.generate),  # no shrinking: each example runs the reference
                    suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow])
ZERO = 1e-9  # the engines' "at zero" level, × i0 (kickback.engine.detailed.ZERO_FRACTION)


def _close(got, want, rtol, what, atol=0.0):
    assert got is not None and want is not None, f"{what}: got {got}, expected {want}"
    assert abs(got - want) <= max(rtol * abs(want), atol), (
        f"{what}: got {got:.12g}, expected {want:.12g} (relative {abs(got - want) / max(abs(want), 1e-300):.2e}, "
        f"allowed {rtol:g}" + (f", absolute {atol:.2g}" if atol else "") + ")")


# ------------------------------------------------------------------------------- closed forms
def _first_order(L, R, i0, vc, i_end):
    """(time, charge, energy in R) from i0 down to i_end against the constant clamp voltage vc (ch. 7)."""
    t = L / R * math.log((i0 + vc / R) / (i_end + vc / R))
    q = (L * (i0 - i_end) - vc * t) / R
    return t, q, 0.5 * L * (i0**2 - i_end**2) - vc * q


@pytest.mark.parametrize(("vs", "L", "R", "family", "values"), [
    pytest.param(24.0, 0.08, 30.0, "coil", (0.7, 24.0), id="D+Z-across-coil"),
    pytest.param(12.0, 0.01, 40.0, "coil", (0.9, 5.6), id="D+Z-low-voltage"),
    pytest.param(24.0, 0.08, 30.0, "switch", (36.0,), id="TVS-to-ground"),
    pytest.param(24.0, 0.08, 30.0, "avalanche", (60.0,), id="avalanche"),
    pytest.param(48.0, 1.0, 2.0, "switch", (100.0,), id="TVS-low-R"),
])
def test_constant_clamp_closed_form(vs, L, R, family, values):
    """Ideal instant switch, constant clamp voltage: every figure to 1e-9 of the closed form."""
    sw = Switch("ideal", breakdown_voltage=values[0] if family == "avalanche" else None)
    clamps = ()
    if family == "coil":
        clamps = (Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=values[0]),
                                        Element("zener", voltage=values[1]))),)
    elif family == "switch":
        clamps = (Clamp("TVS", "switch", (Element("tvs", voltage=values[0]),)),)
    f = simulate(Case("closed form (demo)", Supply(vs), Coil(L, R), sw, clamps), engine="batch").figures
    i0 = vs / R
    v_clamp = sum(values)
    vc = v_clamp if family == "coil" else v_clamp - vs
    t0, q, er = _first_order(L, R, i0, vc, ZERO * i0)
    for frac, got in ((0.1, f.to_10_percent_s), (0.01, f.to_1_percent_s)):
        _close(got, _first_order(L, R, i0, vc, frac * i0)[0], 1e-9, f"time to {frac:g} of i0")
    _close(f.to_zero_s, t0, 1e-9, "time to 1e-9·i0")
    _close(f.resistance_energy_J, er, 1e-9, "energy in the coil resistance")
    e_clamp = f.avalanche_energy_J if family == "avalanche" else f.clamps[0].energy_J
    _close(e_clamp, v_clamp * q, 1e-9, "clamp energy V_clamp·Q")
    _close(f.supply_energy_J, 0.0 if family == "coil" else vs * q, 1e-9, "supply energy", atol=1e-15)
    peak = vs + v_clamp if family == "coil" else v_clamp
    _close(f.peak_voltage_V, peak, 1e-12, "peak voltage")
    assert f.peak_time_s == 0.0, "an instant switch against an ideal clamp peaks at t = 0"
    assert abs(f.energy_balance_error) <= 1e-9


def _rlc_state(A, x0, t):
    return linalg.expm(A * t) @ x0


@pytest.mark.parametrize(("L", "R", "C", "i0"), [
    pytest.param(10e-3, 100.0, 1e-9, 0.5, id="10mH-100ohm-1nF"),
    pytest.param(1e-3, 20.0, 2e-9, 1.0, id="1mH-20ohm-2nF"),
    pytest.param(1e-3, 2 * math.sqrt(1e-3 / 2e-9), 2e-9, 1.0, id="critically-damped"),
])
def test_lc_ringing_closed_form(L, R, C, i0):
    """Coil into the switch capacitance (series RLC from the supply): peak at the first current
    zero, to 1e-9 (scipy.linalg.expm + brentq), through critical damping."""
    vs = 24.0
    f = simulate(Case("LC (demo)", Supply(vs), Coil(L, R, initial_current=i0), Switch("ideal", capacitance=C)),
                 engine="batch").figures
    A = np.array([[-R / L, -1.0 / L], [1.0 / C, 0.0]])  # states i, v − Vs
    x0 = np.array([i0, -vs])
    grid = np.linspace(0.0, 4 * math.pi * math.sqrt(L * C), 4001)[1:]
    signs = np.array([_rlc_state(A, x0, t)[0] for t in grid])
    k = int(np.argmax(signs <= 0))  # first grid point past the first current zero
    t_pk = optimize.brentq(lambda t: _rlc_state(A, x0, t)[0], grid[k - 1], grid[k], xtol=1e-22, rtol=1e-15)
    _close(f.peak_time_s, t_pk, 1e-9, "peak time (first zero of the coil current)")
    _close(f.peak_voltage_V, vs + _rlc_state(A, x0, t_pk)[1], 1e-9, "peak voltage")
    assert abs(f.energy_balance_error) <= 1e-9


@pytest.mark.parametrize(("rs", "cs"), [pytest.param(47.0, 1e-6, id="47ohm-1uF"),
                                        pytest.param(220.0, 100e-9, id="220ohm-100nF"),
                                        pytest.param(2 * math.sqrt(0.08 / 1e-6) - 30.0, 1e-6, id="critical")])
def test_rc_snubber_closed_form(rs, cs):
    """RC snubber across the coil, instant ideal switch: node peak and resistor energy to 1e-9.

    The snubber loop is L di/dt = −(R + R_s) i − v_C, C_s dv_C/dt = i with v_C(0) = −Vs; the node is
    Vs + R_s i + v_C (ch. 8). Its peak is where d/dt (R_s i + v_C) = 0 (brentq on the expm
    solution); the energies over the run are in the ratio E(R_s)/E(R) = R_s/R (same current).
    """
    vs, L, R = 24.0, 0.08, 30.0
    clamp = Clamp("RC", "coil", (Element("resistor", resistance=rs), Element("capacitor", capacitance=cs)))
    f = simulate(Case("RC (demo)", Supply(vs), Coil(L, R), Switch("ideal"), (clamp,)), engine="batch").figures
    A = np.array([[-(R + rs) / L, -1.0 / L], [1.0 / cs, 0.0]])
    x0 = np.array([vs / R, -vs])

    def slope(t):
        x = _rlc_state(A, x0, t)
        dx = A @ x
        return rs * dx[0] + dx[1]

    t_pk = 0.0  # the node starts at its highest when the snubber resistor's step is the larger
    if slope(0.0) > 0:
        t_hi = 1e-6
        while slope(t_hi) > 0:
            t_hi *= 2
        t_pk = optimize.brentq(slope, 0.0, t_hi, xtol=1e-22, rtol=1e-15)
    x = _rlc_state(A, x0, t_pk)
    _close(f.peak_voltage_V, vs + rs * x[0] + x[1], 1e-9, "snubber peak voltage")
    _close(f.peak_time_s, t_pk, 1e-9, "snubber peak time", atol=1e-300)
    _close(f.clamps[0].elements[0].energy_J / f.resistance_energy_J, rs / R, 1e-9, "E(R_s)/E(R) = R_s/R")
    assert abs(f.energy_balance_error) <= 1e-9


def test_two_identical_clamps_share_the_energy():
    """Coincident events: two identical D+Z clamps (dynamic resistance r) start and stop together
    and each takes half of what one clamp of r/2 takes (derived: parallel identical chains)."""
    vs, L, R = 24.0, 0.08, 30.0

    def dz(r):
        return Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                                     Element("zener", voltage=24.0, dynamic_resistance=r)))

    sw = Switch("mosfet", on_resistance=0.1, fall_time=200e-9, capacitance=300e-12)
    two = simulate(Case("two (demo)", Supply(vs), Coil(L, R), sw, (dz(3.0), dz(3.0))), engine="batch").figures
    one = simulate(Case("one (demo)", Supply(vs), Coil(L, R), sw, (dz(1.5),)), engine="batch").figures
    _close(two.clamps[0].energy_J, 0.5 * one.clamps[0].energy_J, 1e-9, "each of two clamps: half the energy")
    _close(two.clamps[1].energy_J, two.clamps[0].energy_J, 1e-12, "identical clamps: identical energy")
    _close(two.to_zero_s, one.to_zero_s, 1e-9, "decay time")
    _close(two.peak_voltage_V, one.peak_voltage_V, 1e-9, "peak voltage")


# ------------------------------------------------------------------ agreement with detailed
def _no_thermal(case: Case) -> Case:
    """The case without thermal networks (junction temperatures are the detailed engine's only)."""
    strip = {"thermal_resistance": None, "thermal_tau": None, "max_junction_temperature": None}
    sw = dataclasses.replace(case.switch, **strip)
    clamps = tuple(dataclasses.replace(cl, elements=tuple(dataclasses.replace(e, **strip) for e in cl.elements))
                   for cl in case.clamps)
    return dataclasses.replace(case, switch=sw, clamps=clamps)


def _compare(case: Case, rtol=1e-6):
    """Every figure of the batch engine against the detailed engine; returns the worst ratio to
    its tolerance (≤ 1 passes) per figure name. Tolerances:

    - relative ``rtol`` on every figure, with absolute floors for what the detailed engine does
      not resolve: energies 1e-9·E0 (its 1e-12 leakage of an off switch), currents of a chain of
      dynamic resistance r 2e-8·V/r (its node-voltage accuracy at rtol 1e-9) and, for peak
      currents and powers, the change to the next sample at its sampled maximum, conduction times
      and held voltages its sample intervals around the conduction threshold (it interpolates
      linearly there; the batch engine locates the crossing on the exact solution), element
      voltages its t = 0 node voltage's distance from the on-state (any value balances the node
      while the falling channel current is capped);
    - a peak time at a smooth maximum (or on a plateau) is fixed by the detailed engine only to
      the square root of its voltage accuracy: where the peak voltages agree to 1e-8 the time is
      not compared, to d ≤ 1e-6 it is compared to 3·√d (the closed-form tests check it exactly);
      a peak on a plateau from t = 0+ is 0 for the batch engine and the first sample of the
      detailed one.
    """
    ref = reference(case)
    if "error" in ref:
        assume(False)  # the reference could not finish (reported by the detailed engine itself)
    fb = simulate(case, engine="batch").figures
    e0, vscale = ref["e0"], ref["vscale"]
    worst = {}

    def cmp(name, a, b, atol=0.0, tol=rtol):
        if a is None or b is None:
            assert a is None and b is None, f"{name}: detailed {a}, batch {b}"
            return
        allowed = max(tol * abs(a), atol)
        worst[name] = abs(a - b) / allowed if allowed > 0 else (0.0 if a == b else math.inf)

    for name in ("to_10_percent_s", "to_1_percent_s", "to_zero_s", "release_s", "end_time_s"):
        cmp(name, ref[name], getattr(fb, name))
    for name in ("resistance_energy_J", "crossover_energy_J", "avalanche_energy_J", "body_diode_energy_J",
                 "supply_energy_J", "left_in_capacitors_J"):
        cmp(name, ref[name], getattr(fb, name), atol=1e-9 * e0)
    cmp("peak_voltage_V", ref["peak_voltage_V"], fb.peak_voltage_V)
    # at a smooth maximum v ≈ v_max − ½|v''|δt²: a relative voltage difference d fixes the time
    # only to ~√d (the factor 3 for the unknown curvature is common practice, no source)
    dv = abs(ref["peak_voltage_V"] - fb.peak_voltage_V) / max(abs(fb.peak_voltage_V), 1e-300)
    plateau = fb.peak_time_s == 0.0 and ref["peak_time_s"] <= 1e-3 * max(case.switch.fall_time, 1e-300)
    # (a difference below 1e-8 is a maximum held flat — a clamp — whose time is not compared)
    if not plateau and 1e-8 < dv <= rtol:
        cmp("peak_time_s", ref["peak_time_s"], fb.peak_time_s, tol=max(rtol, 3.0 * math.sqrt(dv)))
    elif not plateau and dv > rtol:
        cmp("peak_time_s", ref["peak_time_s"], fb.peak_time_s)
    v0 = ref["v0"]  # its t = 0 sample: any node voltage in a flat balance (the channel current capped)
    for k, (cd, cb) in enumerate(zip(ref["clamps"], fb.clamps, strict=True)):
        r = _chain_r(case.clamps[k])
        i_floor = (2e-8 * vscale / r if r > 0 else 0.0) + cd["current_step"]
        dt_x, dv_x = cd["crossing_s"], cd["crossing_V"]
        cmp(f"clamps[{k}].energy_J", cd["energy_J"], cb.energy_J, atol=1e-9 * e0)
        cmp(f"clamps[{k}].peak_current_A", cd["peak_current_A"], cb.peak_current_A, atol=i_floor)
        cmp(f"clamps[{k}].conduction_s", cd["conduction_s"], cb.conduction_s, atol=1e-9 * ref["end_time_s"] + dt_x)
        for j, (ed, eb) in enumerate(zip(cd["elements"], cb.elements, strict=True)):
            pre = f"clamps[{k}].elements[{j}]."
            cmp(pre + "energy_J", ed["energy_J"], eb.energy_J, atol=1e-9 * e0)
            cmp(pre + "peak_voltage_V", ed["peak_voltage_V"], eb.peak_voltage_V, atol=v0 + 1e-6 * vscale)
            cmp(pre + "peak_current_A", ed["peak_current_A"], eb.peak_current_A, atol=i_floor)
            cmp(pre + "peak_power_W", ed["peak_power_W"], eb.peak_power_W,
                atol=i_floor * vscale + ed["power_step"])
            if ed["type"] != "capacitor":  # a capacitor's held voltage is sampled at current reversals only
                cmp(pre + "standoff_voltage_V", ed["standoff_voltage_V"], eb.standoff_voltage_V,
                    atol=1e-6 * vscale + dv_x)
    assert abs(fb.energy_balance_error) <= 1e-9, f"batch energy balance {fb.energy_balance_error:.2e}"
    bad = {k: v for k, v in worst.items() if v > 1.0}
    assert not bad, "batch vs detailed beyond tolerance (ratio to tolerance): " + ", ".join(
        f"{k}={v:.3g}" for k, v in sorted(bad.items(), key=lambda kv: -kv[1]))


def _chain_r(clamp: Clamp) -> float:
    r = 0.0
    for el in clamp.elements:
        r += {"diode": el.series_resistance, "zener": el.dynamic_resistance, "tvs": el.dynamic_resistance,
              "resistor": el.resistance or 0.0}.get(el.type, 0.0) or 0.0
    return r


def _log_uniform(lo, hi):
    return st.floats(math.log10(lo), math.log10(hi)).map(lambda e: min(max(10.0**e, lo), hi))


@st.composite
def _cases(draw, family: str, capacitive: bool):
    vs = draw(st.floats(5.0, 60.0))
    L, R = draw(_log_uniform(1e-3, 1.0)), draw(_log_uniform(1.0, 200.0))
    kind = draw(st.sampled_from(["ideal", "mosfet", "bjt"]))
    sw = {"type": kind, "fall_time": draw(st.one_of(st.just(0.0), _log_uniform(10e-9, 2e-6)))}
    if kind == "mosfet":
        sw["on_resistance"] = draw(_log_uniform(0.01, 0.5))
    if kind == "bjt":
        sw["saturation_voltage"] = draw(st.floats(0.05, 0.4))
    if capacitive:
        sw["capacitance"] = draw(_log_uniform(10e-12, 2e-9))
    rd = st.one_of(st.just(0.0), _log_uniform(0.01, 5.0))
    i0 = vs / R
    rel = draw(st.one_of(st.none(), st.floats(0.05, 0.5).map(lambda x: x * i0)))
    if family == "diode":
        clamps = (Clamp("D", "coil", (Element("diode", model="constant-drop",
                                              forward_voltage=draw(st.floats(0.5, 1.0)),
                                              series_resistance=draw(rd)),)),)
    elif family == "diode-zener":
        diode = Element("diode", model="constant-drop", forward_voltage=draw(st.floats(0.5, 1.0)))
        clamps = (Clamp("D+Z", "coil", (diode, Element("zener", voltage=draw(st.floats(0.2, 3.0)) * vs,
                                                       dynamic_resistance=draw(rd)))),)
    elif family == "tvs":
        clamps = (Clamp("TVS", "switch", (Element("tvs", voltage=draw(st.floats(1.1, 3.0)) * vs,
                                                  dynamic_resistance=draw(rd), bidirectional=draw(st.booleans())),)),)
    elif family == "avalanche":
        sw["breakdown_voltage"] = draw(st.floats(1.2, 4.0)) * vs
        sw["avalanche_resistance"] = draw(rd)
        clamps = ()
    elif family == "rc-snubber":  # sized the usual way (common practice, no source), a breakdown behind it
        z = draw(st.floats(1.0, 5.0)) * vs / i0
        sw["breakdown_voltage"] = draw(st.floats(1.5, 4.0)) * vs
        clamps = (Clamp("RC", "coil", (Element("resistor", resistance=draw(st.floats(0.3, 1.0)) * z),
                                       Element("capacitor", capacitance=L / z**2))),)
    elif family == "avalanche-clamp":  # issue 14: the switch's avalanche and a clamp share the current
        vd, vz = draw(st.floats(0.5, 1.0)), draw(st.floats(0.2, 2.0)) * vs
        rz = draw(_log_uniform(0.1, 5.0))
        # V_BR between the clamp's voltage at no current and above its voltage at i0: the two share
        sw["breakdown_voltage"] = vs + vd + vz + draw(st.floats(0.05, 1.5)) * rz * i0
        # (zero avalanche resistance, the regime of the defect; with r_av > 0 the detailed engine,
        # the reference here, was 1.6e-4 off in E_av against a Radau solve at rtol 1e-12 — see
        # /work/scratch/for-detfix.md; the batch engine agreed to 4e-13)
        sw["avalanche_resistance"] = 0.0
        clamps = (Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=vd),
                                        Element("zener", voltage=vz, dynamic_resistance=rz))),)
    elif family == "diode-rc":  # issue 14: a D + R + C chain keeps its charge; the diode blocks it after
        z = draw(st.floats(0.5, 5.0)) * vs / i0
        clamps = (Clamp("D+RC", "coil", (Element("diode", model="constant-drop",
                                                 forward_voltage=draw(st.floats(0.5, 1.0))),
                                         Element("resistor", resistance=draw(st.floats(0.1, 1.0)) * z),
                                         Element("capacitor", capacitance=L / z**2))),)
    elif family == "lc-ring":  # issue 14: no clamp, the coil rings with the node while the current falls
        cap = sw.get("capacitance") or draw(_log_uniform(10e-12, 2e-9))
        sw["capacitance"] = cap
        sw["fall_time"] = draw(st.floats(0.3, 5.0)) * 2 * math.pi * math.sqrt(L * cap)
        if draw(st.booleans()):
            sw["breakdown_voltage"] = draw(st.floats(1.5, 4.0)) * vs
        clamps = ()
    else:  # several clamps in parallel, maybe with avalanche behind them
        diode = Element("diode", model="constant-drop", forward_voltage=draw(st.floats(0.5, 1.0)))
        clamps = (Clamp("D+Z", "coil", (diode, Element("zener", voltage=draw(st.floats(0.5, 2.0)) * vs,
                                                       dynamic_resistance=draw(_log_uniform(0.1, 5.0))))),
                  Clamp("TVS", "switch", (Element("tvs", voltage=draw(st.floats(1.3, 3.0)) * vs,
                                                  dynamic_resistance=draw(_log_uniform(0.1, 5.0))),)))
        if draw(st.booleans()):
            sw["breakdown_voltage"] = draw(st.floats(1.5, 4.0)) * vs
            sw["avalanche_resistance"] = draw(_log_uniform(0.01, 2.0))
    return Case(f"random {family} (demo)", Supply(vs), Coil(L, R, release_current=rel), Switch(**sw), clamps)


FAMILIES = ["diode", "diode-zener", "tvs", "avalanche", "rc-snubber", "parallel", "avalanche-clamp", "diode-rc",
            "lc-ring"]


#: families whose 150-example run finds a disagreement still open (issue 14), found when the
#: widened generators met the reworked detailed engine; each names the draw and what differs
#: (none open: the last four passed at 150 (lc-ring) and 60 (tvs, avalanche-clamp) examples)
KNOWN_DISAGREEMENTS: dict[tuple[str, bool], str] = {
    ("avalanche-clamp", True): "open (found by the reference refresh of session 8, after 60 examples had passed): "
                               "ideal switch, 57.4 pF, 8.56 V breakdown, 5.38 V, 3.56 mH, 192 Ω, constant-drop "
                               "diode + 2.23 V Zener across the coil: supply energy 2.92681e-9 J (detailed, rtol "
                               "1e-10) against 2.92676e-9 J (batch), 16.7x the tolerance apart (4.9e-14 J, 3.5e-8 "
                               "of the stored energy); the detailed engine at rtol 1e-5 gives the batch figure. "
                               "Which one is off is not established: the figure follows the phase at which the "
                               "node's lightly damped ring (Q ~ 41) is cut at the rest level",
}


@pytest.mark.parametrize(("family", "capacitive"), [
    pytest.param(f, c, id=f"{f}-{'node-capacitance' if c else 'algebraic-node'}",
                 marks=[pytest.mark.xfail(reason=KNOWN_DISAGREEMENTS[f, c], strict=False)]
                 if (f, c) in KNOWN_DISAGREEMENTS else [])
    for f in FAMILIES if f != "rc-snubber" for c in (False, True)])
@_settings()
@given(data=st.data())
def test_agrees_with_detailed_engine(family, capacitive, data):
    _compare(data.draw(_cases(family, capacitive), label="case"))


@pytest.mark.parametrize("capacitive", [False, True], ids=["algebraic-node", "node-capacitance"])
@_settings()  # the ringing snubber is the slowest reference (its stiff node with capacitance)
@given(data=st.data())
def test_rc_snubber_agrees_with_detailed_engine(capacitive, data):
    _compare(data.draw(_cases("rc-snubber", capacitive), label="case"))


def test_late_power_peak_after_a_fast_mode_dies():
    """A slowly ringing RC snubber behind a fast node (10 pF): the capacitor's power peaks at
    ~3.8 s, 1e-3 W against a segment start whose terms are ~1e11 (the node mode). Found by a
    60-per-family run of the property below: the root refiner took that start's rounding level
    as zero there and settled on the bracket's end (1.2e-4 W)."""
    sw = Switch("mosfet", on_resistance=0.0184, fall_time=10e-9, capacitance=10e-12, breakdown_voltage=11.09)
    rc = Clamp("RC", "coil", (Element("resistor", resistance=0.838), Element("capacitor", capacitance=1.0)))
    _compare(Case("late peak (demo)", Supply(5.0), Coil(1.0, 1.0), sw, (rc,)))


def test_held_voltage_includes_the_conduction_threshold():
    """A Zener of 4.8 Ω dynamic resistance holds Vz + r·i up to the conduction threshold
    (1e-6·i0): its standoff figure is read at the threshold's crossing, as the detailed
    engine's samples just below it read it (found by a 300-per-family run: the batch engine
    read Vz at the chain's segment ends only, 1.7e-4 V low)."""
    sw = Switch("ideal", fall_time=8.906e-07, capacitance=1e-10)
    dz = Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=0.684),
                               Element("zener", voltage=66.32, dynamic_resistance=4.83)))
    tvs = Clamp("TVS", "switch", (Element("tvs", voltage=74.67, dynamic_resistance=1.0),))
    _compare(Case("held (demo)", Supply(36.07), Coil(5.449e-3, 1.0), sw, (dz, tvs)))


def test_ringing_below_ground_after_the_fall():
    """An RC snubber rings the node below ground long after a 43 ns fall: the off channel
    takes nothing there, the body diode does (found by a 300-per-family run: the detailed
    engine's sampled channel current had followed v/R_on below 0 V, booking 0.33 J of
    crossover energy and a 1.5 % balance error)."""
    vs = 34.96
    sw = Switch("mosfet", on_resistance=0.01, fall_time=4.266e-08, breakdown_voltage=132.1)
    rc = Clamp("RC", "coil", (Element("resistor", resistance=1.26), Element("capacitor", capacitance=2.001e-3)))
    case = Case("below ground (demo)", Supply(vs), Coil(0.0353, 1.0, release_current=0.05 * vs), sw, (rc,))
    fd = simulate(case).figures
    assert abs(fd.energy_balance_error) <= 1e-6, f"detailed balance {fd.energy_balance_error:.2e}"
    assert fd.body_diode_energy_J > 0, "the node went below ground through the body diode"
    _compare(case)


def test_fast_node_under_a_slow_fall_keeps_the_ledger():
    """A 10 pF node behind a 0.63 Ω snubber (a 1.6e11 /s mode) during a 1 µs fall: the
    energy quadrature's panels must cover the whole fall (∫1 dτ = T) and the ledger close to
    1e-9 (found by a 300-per-family run: the fast mode was also taken as the segment's slow
    rate, capping panels at 9.5 ps, and the panel loop stopped silently at 10⁵ panels, 90 %
    of the way: a balance error of 1.6e-7)."""
    vs = 47.24
    sw = Switch("ideal", fall_time=1.054e-06, capacitance=1e-11, breakdown_voltage=94.48)
    rc = Clamp("RC", "coil", (Element("resistor", resistance=0.6336), Element("capacitor", capacitance=1.0)))
    _compare(Case("fast node (demo)", Supply(vs), Coil(1.0, 1.0, release_current=0.05 * vs), sw, (rc,)))


@pytest.mark.parametrize("name", ["conveyor_brake", "motor_snubber", "unclamped_mosfet"])
def test_piecewise_linear_demo_cases_agree(name, cases_dir):
    """The demo cases whose laws are piecewise linear: every figure to the tolerances above."""
    _compare(_no_thermal(load_case(cases_dir / f"{name}.toml")))


#: figures the stated fit of a nonlinear law moves by more than 2 % (measured and reported
#: here): the energy left in the node capacitance at the end (set by the law at 1e-9·i0, below
#: the fit's range; ~1e-5 of the stored energy) and the time of a smooth maximum
FIT_EXEMPT = ("left_in_capacitors_J", "peak_time_s", "energy_balance_error")


@pytest.mark.parametrize("name", ["irrigation_valve", "relay_board", "contactor_varistor"])
def test_fitted_nonlinear_demo_cases_within_two_percent(name, cases_dir):
    """Shockley diode and varistor demo cases: the fit's effect on every contract figure, against
    the detailed engine's exact laws, stays within 2 % (FIT_EXEMPT apart)."""
    from kickback.studies.many import fit_effect

    case = _no_thermal(load_case(cases_dir / f"{name}.toml"))
    effect = fit_effect(case)
    assert effect, "no figures compared"
    bad = {k: v for k, v in effect.items() if not any(k.endswith(x) for x in FIT_EXEMPT)
           and "checks" not in k and math.isfinite(v) and abs(v) > 0.02}
    assert not bad, f"fit effect above 2 %: {bad}"
    assert any("fit" in m for m in simulate(case, engine="batch").figures.models), "the fit is stated"
