"""The batch engine's fit, judged along the path it computes (issue 14, kickback/engine/batch_fitcheck.py).

The stated fit of a Shockley diode or a varistor keeps its current within max(1 %·i, 1e-4·i0) of
the exact law's from 1e-6·i0 up, blocks below that, and blocks a Shockley diode in reverse (the
exact law carries −I_s). Where the path spends a long time there, the energy that current error
moves is no share of the figure: the batch engine must then agree with the exact laws within the
fit's stated error (wide_range_check.FIT_TOL = 5e-2) or decline the case with its reason (the
detailed engine solves it). Two mechanisms, each against a tight scipy solve of the node
equations written here (solve_ivp Radau, rtol 1e-12), with the exact laws:

* a Shockley diode + R + C across the coil (wide-range case 458): after the transient the chain
  capacitor holds ~75 V with the diode reverse-biased; the exact law's saturation current I_s
  drains it through the coil, the coil current sits at −I_s and never reaches the run's zero
  level (1e-9·i0), so the run goes on to its time bound t_f + 60·L/R (DESIGN.md §3), the diode
  taking I_s·75 V all along: half the clamp energy;
* a varistor across the switch below its knee (wide-range case 2419, here with a constant-drop
  diode across the coil and an ideal switch so that the node is algebraic): it carries its
  sub-knee current i₁·(V_s/v₁)^α from the supply for the whole run, which the fit's lowest
  chord gets wrong by up to 1e-4·i0: the clamp's energy was 2.6× the exact one.

Laws: Shockley with series resistance v = n·V_T·ln(1 + i/I_s) + r_s·i (Sedra & Smith,
Microelectronic Circuits, ch. 4; V_T = k·T/q, CODATA via scipy.constants, T = 298.15 K); varistor
i = i₁·(v/v₁)^α (Levinson & Philipp, Am. Ceram. Soc. Bull. 65(4), 1986). The diode is integrated
in its junction voltage (no inversion needed).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate, optimize

from kickback.batch_result import simulate_batch
from kickback.caseio import load_case
from kickback.engine.pwl import DECLINED
from kickback.errors import SolverError
from kickback.simulation import simulate

FIT_TOL = 5e-2  # tests/wide_range_check.py: the fit's stated figure error
VT25 = constants.k * 298.15 / constants.e

LEAK_CASE = '''title = "Shockley diode + RC snubber across the coil (wide-range case 458, demo data)"
[supply]
voltage = "23.311869626677925 V"
[coil]
inductance = "0.049634007394927245 H"
resistance = "5.118392573760866 Ω"
[switch]
type = "mosfet"
on_resistance = "0.025792027259015728 Ω"
[[clamp]]
name = "C0"
across = "coil"
[[clamp.element]]
type = "diode"
model = "shockley"
forward_voltage = "0.6861582266452999 V"
at_current = "4.2357137799437306 A"
ideality = 1.5309792547308958
series_resistance = "0.06760076530232023 Ω"
[[clamp.element]]
type = "resistor"
resistance = "2.2070086423585016 Ω"
[[clamp.element]]
type = "capacitor"
capacitance = "0.0001 F"
'''


def _shockley(vf, at, n, rs):
    """(a, I_s) of the law through (at, vf) with ideality n and series resistance rs."""
    a = n * VT25
    return a, at / math.expm1((vf - rs * at) / a)


def test_reverse_saturated_diode_draining_a_snubber_is_declined_or_right():
    Vs, L, R, Ron = 23.311869626677925, 0.049634007394927245, 5.118392573760866, 0.025792027259015728
    a, i_s = _shockley(0.6861582266452999, 4.2357137799437306, 1.5309792547308958, 0.06760076530232023)
    rs, Rc, C = 0.06760076530232023, 2.2070086423585016, 1e-4
    i0 = Vs / (R + Ron)
    vc0 = Ron * i0 - Vs  # the snubber charged to the on-state's coil voltage (no DC current)
    T = 60.0 * L / R  # the run's time bound (no fall time): the coil current never reaches 1e-9·i0

    # state: the junction's normalized voltage σ (i = I_s·(e^σ − 1), v_d = a·σ + r_s·i), not the
    # current: deep in reverse 1 + i/I_s = e^σ is far below the rounding of 1 (σ ≈ −1900 at 75 V).
    # The coil sets di/dt, and dσ/dt = (di/dt)/(I_s·e^σ)
    def f(t, y):
        sg, vc = y[0], y[1]
        i = i_s * math.expm1(sg)
        vd = a * sg + rs * i
        u = vd + Rc * i + vc  # chain voltage = coil voltage (node − supply); no node capacitance
        return [(-u - R * i) / (L * i_s * math.exp(sg)), i / C, vd * i, Rc * i * i]

    def deep(t, y):  # the junction past σ = −14: i = −I_s·(1 − 8e-7); beyond, Radau's Newton
        return y[0] + 14.0  # steps fail on the exponential (σ ≈ −19, a rate of 1e12 /s)
    deep.terminal, deep.direction = True, -1

    sol = integrate.solve_ivp(f, (0.0, T), [math.log1p(i0 / i_s), vc0, 0.0, 0.0], method="Radau", rtol=1e-12,
                              atol=[1e-12, 1e-12, 1e-16, 1e-16], events=deep, dense_output=True)
    assert sol.success and sol.status == 1
    # then, to the bound, in closed form (to 8e-7 of the current): i = −I_s, di/dt = 0, so
    # C·dv_c/dt = −I_s and the diode holds v_d = −v_c − (R_c + R)·i (Kirchhoff's voltage law
    # round the coil and the chain)
    t1, (_sg, vc1, ed1, er1) = sol.t[-1], sol.y[:, -1]
    dt = T - t1
    vc_int = vc1 * dt - i_s * dt * dt / (2.0 * C)  # ∫ v_c dt
    e_ref = ed1 + er1 + (i_s * vc_int - (Rc + R) * i_s * i_s * dt) + Rc * i_s * i_s * dt
    # the share of the clamp energy booked after the coil current first crossed zero: the leak
    # the fit leaves out (a batch figure without it is outside the stated error)
    t_cross = optimize.brentq(lambda t: sol.sol(t)[0], 0.0, t1, xtol=1e-15)  # σ = 0: i = 0
    late = e_ref - sum(sol.sol(t_cross)[2:])
    assert late > FIT_TOL * e_ref

    case = load_case(LEAK_CASE, source="leak case")
    det = simulate(case)
    assert det.figures.end_time_s == pytest.approx(T, rel=1e-9)
    assert det.figures.clamps[0].energy_J == pytest.approx(e_ref, rel=1e-3)  # the detailed engine is right
    try:
        b = simulate_batch(case)
    except SolverError as err:
        assert DECLINED in str(err) and "C0" in str(err) and "leak" in str(err)
    else:
        assert b.figures.clamps[0].energy_J == pytest.approx(e_ref, rel=FIT_TOL)


def _varistor_case(vs, v1, alpha, title="varistor across the switch below its knee"):
    return f'''title = "{title} (wide-range case 2419, simplified; demo data)"
[supply]
voltage = "{vs!r} V"
[coil]
inductance = "0.1960994145444913 H"
resistance = "169.18621707108377 Ω"
[switch]
type = "ideal"
[[clamp]]
name = "C0"
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
series_resistance = "0.16 Ω"
[[clamp]]
name = "C1"
across = "switch"
[[clamp.element]]
type = "varistor"
voltage = "{v1!r} V"
exponent = {alpha!r}
at_current = "1 mA"
'''


def _varistor_reference(vs, v1, alpha):
    """(diode energy, varistor energy, coil-resistance energy, energy put in) [J] over the run:
    until the coil current first reaches 1e-9·i0, else to the time bound 60·L/R (DESIGN.md §3;
    near its knee the varistor's sub-knee current keeps the coil current above that level).
    Ideal switch, no node capacitance: the node voltage v solves i = i_d(v) + i_var(v)."""
    L, R, vf, rd, i1 = 0.1960994145444913, 169.18621707108377, 0.7, 0.16, 1e-3
    i0 = vs / R

    def i_var(v):
        return math.copysign(i1 * (abs(v) / v1) ** alpha, v)

    def node(i):
        if i <= i_var(vs + vf):  # the diode blocks: the varistor alone
            return math.copysign(v1 * (abs(i) / i1) ** (1.0 / alpha), i)
        return optimize.brentq(lambda v: (v - vs - vf) / rd + i_var(v) - i, vs + vf, vs + vf + rd * i,
                               xtol=1e-14, rtol=1e-15)

    def f(t, y):
        i = y[0]
        v = node(i)
        iv = i_var(v)
        return [(vs - v - R * i) / L, (v - vs) * (i - iv), v * iv, R * i * i]

    def zero(t, y):
        return y[0] - 1e-9 * i0
    zero.terminal, zero.direction = True, -1

    T = 60.0 * L / R
    sol = integrate.solve_ivp(f, (0.0, T), [i0, 0.0, 0.0, 0.0], method="Radau", rtol=1e-12,
                              atol=[1e-15, 1e-15, 1e-15, 1e-15], events=zero)
    assert sol.success
    return sol.y[1, -1], sol.y[2, -1], sol.y[3, -1], 0.5 * L * i0 * i0


def _judge(case, e_ref, e_in):
    """'declined' or 'agrees' (else the assertion fails): the batch engine on ``case`` against the
    reference clamp energies ``e_ref`` (relative, floored at 1e-2 of the energy put in, as
    tests/wide_range_check.compare)."""
    try:
        b = simulate_batch(case)
    except SolverError as err:
        assert DECLINED in str(err) and "C1" in str(err)
        return "declined"
    for k, e in enumerate(e_ref):
        got = b.figures.clamps[k].energy_J
        assert abs(got - e) <= FIT_TOL * max(abs(e), 1e-2 * e_in), (k, got, e)
    return "agrees"


def test_varistor_across_the_switch_below_its_knee_is_declined_or_right():
    vs, v1, alpha = 343.1413013867195, 419.92867803490344, 14.621840384705644
    e_d, e_v, e_r, e_in = _varistor_reference(vs, v1, alpha)
    case = load_case(_varistor_case(vs, v1, alpha), source="varistor case")
    det = simulate(case)
    assert det.figures.clamps[1].energy_J == pytest.approx(e_v, rel=1e-3)  # the detailed engine is right
    assert det.figures.clamps[0].energy_J == pytest.approx(e_d, rel=1e-4)
    assert _judge(case, (e_d, e_v), e_in) == "declined"  # 2.6× the exact varistor energy before


def test_varistor_knee_property_over_seeded_draws():
    """Seeded draws of the supply against the varistor's knee (V_s/v₁ from 0.3 to 0.95, α 5–25),
    the family of 2 of the 6 fitted-law disagreements of the wide-range generator's 10⁴ cases:
    every batch answer agrees with the reference within the stated error or is declined, and the
    rule is no blanket one (far below the knee, and near it where the knee's own current is the
    figure, the batch engine answers; at 0.6 and 0.8 it declines: there its figure was 7 % and
    45 % off)."""
    rng = np.random.default_rng(20261205)
    seen = set()
    for ratio in (0.3, 0.6, 0.8, 0.95):
        alpha = float(rng.uniform(5.0, 25.0))
        vs = float(rng.uniform(20.0, 300.0))
        v1 = vs / ratio
        e_d, e_v, _e_r, e_in = _varistor_reference(vs, v1, alpha)
        seen.add(_judge(load_case(_varistor_case(vs, v1, alpha), source="draw"), (e_d, e_v), e_in))
    assert seen == {"agrees", "declined"}


def test_snubber_behind_a_small_leak_is_held_and_kept():
    """The same snubber with an ideal junction (n = 1: I_s ≈ 7e-7 A, 200× less): the leak drains
    the held capacitor too slowly for the detailed engine's rule (DESIGN.md §3: a capacitor behind
    a reverse-biased diode is held), so the run ends where the coil current first reaches
    1e-9·i0, on both engines; the batch engine keeps the case (no blanket decline of the family)
    and its figures agree with the reference within the fit's stated error."""
    Vs, L, R, Ron = 23.311869626677925, 0.049634007394927245, 5.118392573760866, 0.025792027259015728
    rs, Rc, C = 0.06760076530232023, 2.2070086423585016, 1e-4
    a, i_s = _shockley(0.6861582266452999, 4.2357137799437306, 1.0, rs)
    i0 = Vs / (R + Ron)
    vc0 = Ron * i0 - Vs

    def f(t, y):
        sg, vc = y[0], y[1]
        i = i_s * math.expm1(sg)
        vd = a * sg + rs * i
        return [(-(vd + Rc * i + vc) - R * i) / (L * i_s * math.exp(sg)), i / C, vd * i, Rc * i * i]

    def zero(t, y):  # the coil current at 1e-9·i0 (σ at i = 1e-9·i0)
        return y[0] - math.log1p(1e-9 * i0 / i_s)
    zero.terminal, zero.direction = True, -1

    sol = integrate.solve_ivp(f, (0.0, 1.0), [math.log1p(i0 / i_s), vc0, 0.0, 0.0], method="Radau", rtol=1e-12,
                              atol=[1e-12, 1e-12, 1e-16, 1e-16], events=zero)
    assert sol.success and sol.status == 1
    t_end, e_ref = sol.t[-1], sol.y[2, -1] + sol.y[3, -1]
    case = load_case(LEAK_CASE.replace("ideality = 1.5309792547308958", "ideality = 1.0"), source="held case")
    det = simulate(case)
    assert det.figures.end_time_s == pytest.approx(t_end, rel=1e-3)  # held: the run ends at the zero level
    assert det.figures.clamps[0].energy_J == pytest.approx(e_ref, rel=1e-4)
    b = simulate_batch(case)  # not declined (a SolverError fails the test)
    assert b.figures.clamps[0].energy_J == pytest.approx(e_ref, rel=FIT_TOL)
    assert b.figures.end_time_s == pytest.approx(t_end, rel=1e-2)
