"""Detailed engine (issue 14): a node with no capacitance that is *nearly* floating — a varistor
across a fast coil, far below its knee, while a MOSFET's channel current falls — against an
independent reference.

Before the fix the engine's conductance event (the node starts to float) fired at the limit
itself, the check at the forced voltage refused it by a hair, and the node stayed algebraic for
the rest of the fall: its voltage solved from a balance whose conductance was ~2e-11 S, so that one
step tolerance of the coil current moved it by volts ("solver did not finish within 400000
evaluations", ~48 s of computing).

Reference: the node equations (Kirchhoff's current law at the switch node, the channel a current
ramp i_ch = I_sw·(1 − t/t_f) during its fall, the varistor i = I_1·(u/V_1)^α across the coil —
L. M. Levinson and H. R. Philipp, American Ceramic Society Bulletin 65(4), 1986; u = R·i + L di/dt
across the coil — C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 6).
With i = i_ch − i_var(u), u = R·(i_ch − i_var(u)) + L·i_ch' − L·i_var'(u)·u'. The coil's L/R is
2 ns; where L·i_var'(u)·|u'| is below 1e-6·V_s (checked in the test) the last term is dropped:
u solves the scalar equation u + R·i_var(u) = R·i_ch(t) + L·i_ch', solved here with
scipy.optimize.brentq (the quasi-steady state of a singularly perturbed system: P. Kokotović,
H. K. Khalil and J. O'Reilly, Singular Perturbation Methods in Control, SIAM 1999, ch. 1; from
memory). All values are invented demo values.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from kickback import load_case, simulate

CASE = """
title = "demo: varistor across a fast coil, far below its knee, MOSFET current fall"
[supply]
voltage = "24 V"
[coil]
inductance = "10 uH"
resistance = "5000 Ω"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
fall_time = "10 us"
[[clamp]]
name = "V"
across = "coil"
[[clamp.element]]
type = "varistor"
voltage = "{v1} V"
exponent = 30
"""

VS, L, R, RON, TF, I1, ALPHA = 24.0, 10e-6, 5000.0, 0.1, 10e-6, 1e-3, 30.0


def _i_var(u, v1):
    return I1 * np.sign(u) * abs(u / v1) ** ALPHA


def _on_state(v1):
    """Switch current at turn-off [A]: the node at R_on·i_sw, the coil and varistor from V_s."""
    def f(v):
        return v - RON * ((VS - v) / R + _i_var(VS - v, v1))
    v_on = optimize.brentq(f, 0.0, 1.0, xtol=1e-16, rtol=1e-15)
    return v_on / RON


def _node_reference(t, v1, i_sw):
    """[V] quasi-steady switch-node voltage during the fall (see the module docstring)."""
    ich = i_sw * (1.0 - t / TF)
    rhs = R * ich + L * (-i_sw / TF)
    u = optimize.brentq(lambda u: u + R * _i_var(u, v1) - rhs, -VS, 2 * VS, xtol=1e-13, rtol=1e-15)
    return VS - u


@pytest.mark.parametrize("v1", [25.0, 22.0])
def test_nearly_floating_node_follows_the_channel_ramp(v1):
    res = simulate(load_case(CASE.format(v1=v1)))
    w = res.waveforms
    # the stall needed 400 000 evaluations; the fixed run takes a few thousand
    assert w.n_rhs < 40_000
    i_sw = _on_state(v1)
    sel = (w.t > 0.5e-6) & (w.t < 0.99 * TF)
    ref = np.array([_node_reference(t, v1, i_sw) for t in w.t[sel]])
    # keep the samples where the dropped term L·i_var'(u)·|u'| (u' ≈ −R·i_sw/t_f) is below
    # 1e-6·V_s: there the quasi-steady voltage is the node equations' solution to that level
    u = VS - ref
    dropped = L * ALPHA * np.abs(_i_var(u, v1) / u) * R * i_sw / TF
    keep = dropped < 1e-6 * VS
    sel[sel] = keep
    ref = ref[keep]
    assert np.count_nonzero(sel) >= 10
    err = np.abs(w.v[sel] - ref)
    # where the node voltage is solved from the balance, its conductance is small (< 1e-6 S) and
    # the samples between solver steps (interpolated coil current) move it by δi/G: within 1e-3
    # of V_s here (measured 4e-4 for V_1 = 22 V; most samples within 2e-5)
    assert np.max(err) < 1e-3 * VS
    assert np.median(err) < 2e-5 * VS
    # where the node floats (the varistor's conductance below ~1e-11 S: past ~4.7 µs for
    # V_1 = 25 V, ~8.7 µs for 22 V) the coil current follows the ramp exactly and the node
    # voltage is V_s − R·i − L·di/dt to 1e-6 of V_s
    late = w.t[sel] > 9e-6
    assert np.count_nonzero(late) >= 5
    assert np.max(err[late]) < 1e-6 * VS
    # the peak: the coil's L·i_sw/t_f above the supply at the end of the fall (the varistor then
    # carries < 1e-30 A), within the engine's tolerance
    assert res.figures.peak_voltage_V == pytest.approx(VS + L * i_sw / TF, abs=1e-5 * VS)
    assert abs(res.figures.energy_balance_error) <= 1e-4
