"""The switch's turn-off edge of a switching cycle in closed form (kickback.engine.linedge) against
independent references: the φ functions at 50 digits (mpmath), and a tight scipy solve of the
edge's linear node equations with the falling channel current written here."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
from scipy.integrate import solve_ivp

from kickback.case import Case, Coil, Motor, Supply, Switch
from kickback.circuit import Circuit
from kickback.engine import linedge
from kickback.engine.linedge import RampSolution, phi12
from kickback.engine.periodic import one_cycle, scales

# invented coil (demo data): a 10 µH coil with 20 pF winding capacitance switched by a MOSFET with
# 50 pF output capacitance and a 5 µs current fall: the coil rings with the node at ~7 MHz,
# ~35 periods inside the fall
VS, L, R, C_COIL, C_SW, R_ON, TF = 48.0, 10e-6, 5.0, 20e-12, 50e-12, 0.02, 5e-6
FREQ, DUTY = 20e3, 0.4


def _case(motor=None):
    sw = Switch("mosfet", on_resistance=R_ON, fall_time=TF, capacitance=C_SW, breakdown_voltage=500.0)
    return Case("long fall (demo data)", Supply(VS), Coil(L, R, capacitance=C_COIL), sw, (), motor=motor)


@pytest.mark.parametrize("z", [0.0, 1e-9 + 2e-9j, -0.3 + 0.4j, 0.49, -0.51, 3.0 - 40.0j, -80.0 + 5.0j, -2e4 + 3e6j])
def test_phi_functions_against_50_digit_reference(z):
    # φ₁(z) = (e^z − 1)/z, φ₂(z) = (e^z − 1 − z)/z² (Hochbruck & Ostermann, Acta Numerica 2010),
    # evaluated at 50 digits by mpmath from the definition (limits 1 and 1/2 at z = 0)
    mpmath.mp.dps = 50
    zm = mpmath.mpc(z.real, z.imag) if isinstance(z, complex) else mpmath.mpf(z)
    if zm == 0:
        r1, r2 = mpmath.mpf(1), mpmath.mpf(1) / 2
    else:
        r1 = (mpmath.exp(zm) - 1) / zm
        r2 = (mpmath.exp(zm) - 1 - zm) / zm ** 2
    p1, p2 = phi12(np.array([z]))
    for got, ref in ((p1[0], r1), (p2[0], r2)):
        ref = complex(ref)
        assert abs(got - ref) <= 1e-14 * abs(ref), (z, got, ref)


def _edge_phase(c, x0):
    """One fast cycle from x0 (kept): the closed-form edge solution and the turn-off instant."""
    t_on = DUTY / FREQ
    _, _, _, runner = one_cycle(c, x0, DUTY, FREQ, 1e-10, keep=True)
    edge = next(p for p in runner.phases if p.name == "edge")
    return edge, t_on, runner


@pytest.mark.parametrize("with_motor", [False, True], ids=["coil", "motor"])
def test_closed_form_edge_against_tight_solve_of_the_node_equations(with_motor):
    # the edge's node equations written here (Kirchhoff's laws of the coil, its winding and switch
    # capacitance, the channel carrying a current falling linearly from its value at turn-off):
    #   L·di/dt = V_s − v − R·i − k·ω,   (C_coil + C_sw)·dv/dt = i − i_on·(1 − s/t_f),
    #   J·dω/dt = k·i − b·ω,             dE_ch/dt = v·i_on·(1 − s/t_f)
    # solved by scipy's DOP853 at rtol 1e-12 (Hairer, Nørsett & Wanner, Solving ODEs I)
    motor = Motor(back_emf_constant=0.002, inertia=5e-4, viscous_friction=1e-5) if with_motor else None
    c = Circuit(_case(motor))
    x0 = np.zeros(c.ie)
    x0[0] = 0.5 * VS / R
    x0[1] = x0[0] * R_ON
    if c.mech:
        x0[c.iw] = 300.0
    edge, t_on, runner = _edge_phase(c, x0)
    sol = edge.sol.sol
    assert isinstance(sol, RampSolution), "the edge was solved in closed form"
    i0, v0 = runner.x_turnoff[0], runner.x_turnoff[1]
    w0 = runner.x_turnoff[c.iw] if c.mech else 0.0
    i_on = v0 / R_ON  # the channel current at turn-off (the on-state law at the node voltage)
    k = 0.002 if motor else 0.0
    J, b = (5e-4, 1e-5) if motor else (1.0, 0.0)
    C = C_COIL + C_SW

    def f(s, z):
        i, v, w, _ = z
        ich = i_on * (1.0 - s / TF)
        return [(VS - v - R * i - k * w) / L, (i - ich) / C, (k * i - b * w) / J if motor else 0.0, v * ich]

    ts = np.linspace(0.0, TF, 2001)
    ref = solve_ivp(f, (0.0, TF), [i0, v0, w0, 0.0], method="DOP853", rtol=1e-12, atol=[1e-12, 1e-9, 1e-9, 1e-15],
                    t_eval=ts)
    assert ref.success
    # the channel stays on its falling ceiling throughout (the on-state law would carry more)
    assert np.all(ref.y[1] / R_ON >= i_on * (1.0 - ts / TF) - 1e-9)
    got = sol(ts)
    sc = scales(c)
    assert np.max(np.abs(got[0] - ref.y[0])) <= 1e-9 * sc[0], "coil current"
    assert np.max(np.abs(got[1] - ref.y[1])) <= 1e-9 * sc[1], "node voltage"
    if c.mech:
        assert np.max(np.abs(got[c.iw] - ref.y[2])) <= 1e-9 * sc[c.iw], "motor speed"
    # the grid offered to the sampler resolves the ring: 16 samples a period at least, the period
    # 2π·√(L·C) (Thomson; the damping shifts it by < 1e-3 here)
    steps = np.asarray(edge.t_steps)
    assert steps[0] == pytest.approx(t_on) and steps[-1] == pytest.approx(t_on + TF)
    assert np.max(np.diff(steps)) <= 2 * np.pi * np.sqrt(L * C) / 16
    # the switch's energy over the edge (the channel's share of the turn-off loss)
    e_ch = got[c.ie + 2, -1] - got[c.ie + 2, 0]
    assert abs(e_ch - ref.y[3, -1]) <= 1e-8 * abs(ref.y[3, -1]), "channel energy over the edge"


def test_closed_form_cycle_equals_the_stepped_one():
    # the same cycle integrated by Radau IIA throughout (scipy, rtol 1e-9; Hairer & Wanner,
    # Solving ODEs II): the end state and the off-part energies agree (a duty of 0.85: a short
    # off-part, whose undamped ring Radau steps ~100 times a period)
    c = Circuit(_case())
    x0 = np.array([0.4 * VS / R, 0.4 * VS / R * R_ON])
    fast = one_cycle(c, x0, 0.85, FREQ, 1e-9, keep=True)
    slow = one_cycle(c, x0, 0.85, FREQ, 1e-9, fast=False)
    assert any(isinstance(getattr(p.sol, "sol", None), RampSolution) for p in fast[3].phases)
    assert np.max(np.abs(fast[0] - slow[0]) / scales(c)) < 1e-7
    e_scale = np.max(np.abs(slow[2]))
    assert np.allclose(fast[2], slow[2], rtol=1e-7, atol=1e-9 * e_scale), "off-part energies"


def test_edge_stepped_where_a_clamp_would_conduct(monkeypatch):
    # a breakdown below the edge's node voltage (the avalanche law is not on the model's piece):
    # the model's check refuses the closed form and the edge is stepped as before
    sw = Switch("mosfet", on_resistance=R_ON, fall_time=TF, capacitance=C_SW, breakdown_voltage=30.0)
    c = Circuit(Case("clamped fall (demo data)", Supply(VS), Coil(L, R, capacitance=C_COIL), sw, ()))
    x0 = np.array([0.4 * VS / R, 0.4 * VS / R * R_ON])
    used = []
    orig = linedge.solve_ramp

    def spy(*a, **k):
        out = orig(*a, **k)
        used.append(out is not None)
        return out

    monkeypatch.setattr(linedge, "solve_ramp", spy)
    _, _, _, runner = one_cycle(c, x0, DUTY, FREQ, 1e-8, keep=True)
    assert used == [False], "the closed form was tried and refused"
    edge = next(p for p in runner.phases if p.name == "edge")
    assert not isinstance(getattr(edge.sol, "sol", None), RampSolution)
