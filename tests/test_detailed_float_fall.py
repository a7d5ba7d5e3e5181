"""Detailed engine (issue 14): the peak of a node with no capacitance whose only other path is a
varistor far below its knee while the coil follows a falling MOSFET channel, against a tight
independent solve of the node equations.

Before the fix the 24 V, 10 µH, 5 kΩ coil with a 20 V varistor across it and a 1 µs fall reported
a peak of 42.24 V, status ok, after ~20 s (the coil follows the ramp: the node ends the fall at
V_s + L·I_sw/t_f ≈ 26.35 V with the varistor at −2.4 V carrying ~1e-31 A); with a 10 µs fall the
solver gave up at 400 000 evaluations. Cause: solved from the node balance, the node voltage is
known only to δi/G (δi the solver's tolerance on the coil current, G the varistor's conductance,
down to 1e-9 S), and the floating mode (coil current following the channel) was entered only
below a fixed conductance 1e4 × too small and drifted off the balance by R·G·s per second.

Reference, written here: Kirchhoff's current law at the switch node, i = i_ch(t) + b(v) + g_l·v
(channel a current ramp i_ch = I_sw·(1 − t/t_f) during its fall; b the varistor's current
I_1·sign(x)·|x/V_1|^α at its voltage x — L. M. Levinson and H. R. Philipp, American Ceramic
Society Bulletin 65(4), 1986; g_l = 1e-13 S a leakage across the switch that keeps the equation
finite where the varistor's conductance vanishes; 100× more or less moves the peaks by < 1e-7 V),
and the coil
L·di/dt = V_s − v − R·i (C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits,
ch. 6). Differentiating the balance gives an ODE in the node voltage itself, which stays well
conditioned however small G is (a singularly perturbed equation: P. Kokotović, H. K. Khalil and
J. O'Reilly, Singular Perturbation Methods in Control, SIAM 1999, ch. 1; from memory):

    (b'(v) + g_l) · dv/dt = (V_s − v − R·i)/L − s,   i = i_ch(t) + b(v) + g_l·v,   s = −I_sw/t_f,

solved with scipy.integrate.solve_ivp (Radau, rtol 1e-10, analytic Jacobian, steps ≤ t_f/2000)
over the fall. The
peak is at the end of the fall (after it dv/dt < 0: the coil's L·di/dt < 0 then drives the node
down; see each test). All component values are invented demo values.
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from scipy import integrate, optimize

from kickback import load_case, simulate

CASE = """
title = "demo: varistor far below its knee, fast coil, MOSFET current fall"
[supply]
voltage = "{vs!r} V"
[coil]
inductance = "{L!r} H"
resistance = "{R!r} Ω"
[switch]
type = "mosfet"
on_resistance = "{ron!r} Ω"
fall_time = "{tf!r} s"
[[clamp]]
name = "V"
across = "{across}"
[[clamp.element]]
type = "varistor"
voltage = "{v1!r} V"
exponent = {alpha!r}
"""

I1 = 1e-3  # [A] the varistor's reference current (the case leaves it at its 1 mA default)
G_LEAK = 1e-13  # [S]


def _reference(vs, L, R, ron, tf, v1, alpha, across):
    """(I_sw [A], dense solution of v [V] over the fall) of the node equations (module docstring)."""
    ref = vs if across == "coil" else 0.0

    def b(v):
        x = (v - ref) / v1
        return I1 * np.sign(x) * abs(x) ** alpha

    def db(v):
        return alpha * I1 * abs((v - ref) / v1) ** (alpha - 1) / v1

    def d2b(v):
        x = (v - ref) / v1
        return alpha * (alpha - 1) * I1 * np.sign(x) * abs(x) ** (alpha - 2) / v1 ** 2

    # on-state: node at R_on·i_sw, the switch taking the coil's and the varistor's current
    v_on = optimize.brentq(lambda v: v - ron * ((vs - v) / R - b(v)), 0.0, vs, xtol=1e-16, rtol=1e-15)
    i_sw = v_on / ron
    s = -i_sw / tf

    def num(t, v):
        i = i_sw * (1.0 - t / tf) + b(v) + G_LEAK * v
        return (vs - v - R * i) / L - s

    def rhs(t, y):
        return [num(t, y[0]) / (db(y[0]) + G_LEAK)]

    def jac(t, y):
        v = y[0]
        g = db(v) + G_LEAK
        dnum = (-1.0 - R * g) / L
        return [[dnum / g - num(t, v) * d2b(v) / g ** 2]]

    v0 = v_on
    g_on = db(v_on) + G_LEAK
    if L * g_on / (1.0 + R * g_on) < 1e-12 * tf:
        # the initial layer (the node's jump by ~L·I_sw/t_f at t = 0) lasts L·G/(1 + R·G) <
        # 1e-12·t_f (G down to the leakage: a time constant of attoseconds that no step can
        # resolve): start past it, on the quasi-steady branch num(0, v) = 0 (num falls with v)
        v0 = optimize.brentq(lambda v: num(0.0, v), v_on, v_on + 2.0 * L * abs(s) + 1e-9 * vs,
                             xtol=1e-15 * vs, rtol=1e-15)
    # max_step: where the equation is stiff (L·G of picoseconds) Radau's steps grow to the whole
    # fall and its dense output between them is no longer the solution
    sol = integrate.solve_ivp(rhs, (0.0, tf), [v0], method="Radau", rtol=1e-10, atol=1e-12 * vs, jac=jac,
                              dense_output=True, max_step=tf / 2000)
    assert sol.status == 0, sol.message
    return i_sw, sol


def _check(vs, L, R, ron, tf, v1, alpha, across, n_rhs_max=20_000):
    text = CASE.format(vs=vs, L=L, R=R, ron=ron, tf=tf, v1=v1, alpha=alpha, across=across)
    res = simulate(load_case(text))
    w = res.waveforms
    i_sw, sol = _reference(vs, L, R, ron, tf, v1, alpha, across)
    v_ref = sol.y[0]
    peak_ref = float(np.max(v_ref))
    # the peak is at the end of the fall (dv/dt ≥ 0 there; after it the coil's L·di/dt < 0)
    assert peak_ref == pytest.approx(float(v_ref[-1]), abs=1e-9 * vs)
    assert w.n_rhs < n_rhs_max
    # within the engine's tolerance (rtol 1e-5); measured ≤ 1.3e-6 relative over 60 draws
    assert res.figures.peak_voltage_V == pytest.approx(peak_ref, rel=1e-5)
    # every sample of the fall, where the node voltage is solved from the balance or floats
    # (at t = 0 the node jumps by ~L·I_sw/t_f within L·G/(1 + R·G), picoseconds here: the
    # engine's first sample is past that layer, the reference's is not)
    # Where the node swings through the varistor's knee within L·G/(1 + R·G) (a layer shorter
    # than 1e-5 of the fall, tens of volts in picoseconds) the engine may step past it: each
    # sample is compared with the reference's range within ±1e-4·t_f of its time
    sel = (w.t > 0) & (w.t < tf * (1 - 1e-9))
    ts = w.t[sel]
    grid = np.clip(ts[:, None] + tf * 1e-4 * np.linspace(-1.0, 1.0, 41)[None, :], 0.0, tf)
    ref = sol.sol(grid.ravel())[0].reshape(grid.shape)
    ref[:, 20] = sol.sol(ts)[0]
    err = np.maximum(0.0, np.maximum(ref.min(axis=1) - w.v[sel], w.v[sel] - ref.max(axis=1)))
    assert np.max(err) < 1e-4 * max(vs, peak_ref)
    # and at the samples away from such a swing (the reference moves < 1e-2·V_s in ±1e-4·t_f)
    calm = np.ptp(ref, axis=1) < 1e-2 * vs
    assert np.count_nonzero(calm) >= 10
    assert np.max(np.abs(w.v[sel][calm] - ref[calm, 20])) < 1e-4 * max(vs, peak_ref)
    assert abs(res.figures.energy_balance_error) <= 1e-4
    return i_sw, peak_ref


@pytest.mark.parametrize("tf", [1e-6, 10e-6])
def test_varistor_below_supply_across_a_fast_coil(tf):
    # the two reproducers (24 V, 10 µH, 5 kΩ, V_1 = 20 V, α = 30): 42.24 V reported for 1 µs,
    # 400 000 evaluations for 10 µs
    i_sw, peak = _check(24.0, 10e-6, 5000.0, 0.1, tf, 20.0, 30.0, "coil")
    # the reference itself: at the end of the fall the varistor at −L·I_sw/t_f carries nothing
    # (< 1e-20 A) and the node sits at V_s + L·I_sw/t_f (the coil follows the ramp, v = L di/dt)
    assert peak == pytest.approx(24.0 + 10e-6 * i_sw / tf, rel=1e-9)


N_DRAWS = int(os.environ.get("KICKBACK_FLOAT_CASES", 6))


def _draw(seed):
    """A nearly floating node: a coil with L/R from 1e-3 to 0.3 of the fall time, a varistor
    across the coil with its knee 0.75–1.3 × the supply, or across the switch with its knee
    1.1–3 × the node's end-of-fall voltage V_s + L·I/t_f (both far below their knee during the
    fall's end)."""
    rng = np.random.default_rng(seed)
    vs = float(np.exp(rng.uniform(np.log(5.0), np.log(100.0))))
    tf = float(np.exp(rng.uniform(np.log(0.1e-6), np.log(10e-6))))
    R = float(np.exp(rng.uniform(np.log(10.0), np.log(5000.0))))
    L = R * tf * float(np.exp(rng.uniform(np.log(1e-3), np.log(0.3))))
    alpha = float(rng.uniform(15.0, 40.0))
    across = "coil" if rng.uniform() < 0.6 else "switch"
    if across == "coil":
        v1 = vs * float(rng.uniform(0.75, 1.3))
    else:
        v1 = (vs + L * (vs / R) / tf) * float(rng.uniform(1.1, 3.0))
    return vs, L, R, 0.05, tf, v1, alpha, across


@pytest.mark.parametrize("seed", range(N_DRAWS))
def test_nearly_floating_node_drawn(seed):
    # KICKBACK_FLOAT_CASES=200 draws more (the long run)
    _check(*_draw(seed))
