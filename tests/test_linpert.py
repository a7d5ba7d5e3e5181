"""A nearly affine off phase (an LC ring with a varistor far below its knee) solved in closed form
with its first-order correction, against a tight scipy solve of the node equations written here."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.circuit import N_ENERGY_FIXED, Circuit
from kickback.engine import linpert
from kickback.engine.linphase import AffineModel, rest_probe, solve_affine
from kickback.engine.periodic import scales

VS, L, R, C_COIL, C_SW = 60.0, 1e-3, 10.0, 0.6e-9, 0.4e-9
V1, ALPHA, I1 = 100.0, 20.0, 1e-3  # varistor: 1 mA at 100 V, α = 20 (invented, demo data)
I0, DV0 = 2e-3, 0.5  # [A], [V] start of the ring
SPAN = 5e-4  # [s] 2.5 times the ring's envelope time constant 2L/R (still ringing at the end)


def _circuit() -> Circuit:
    var = Element("varistor", voltage=V1, exponent=ALPHA, at_current=I1)
    case = Case("varistor ring (demo data)", Supply(VS), Coil(L, R, capacitance=C_COIL),
                Switch("ideal", capacitance=C_SW), (Clamp("V", "switch", (var,)),))
    c = Circuit(case)
    c.conducting, c.t_turnoff = False, 0.0
    return c


def _reference(i0: float, v0: float) -> np.ndarray:
    """End state and energies by scipy's DOP853 at rtol 1e-12 (Dormand–Prince 8(5,3); Hairer,
    Nørsett & Wanner, Solving ODEs I; the ring is not stiff) of

    L·di/dt = Vs − v − R·i,  (C_coil + C_sw)·dv/dt = i − I_1·sign(v)·|v/V_1|^α
    (the power law of Levinson & Philipp, Am. Ceram. Soc. Bull. 65(4), 1986), with the energies
    E_R = ∫R·i², E_varistor = ∫v·i_var, E_supply = ∫Vs·(i − C_coil·dv/dt)."""
    cn = C_COIL + C_SW

    def f(t, y):
        i, v = y[0], y[1]
        iv = I1 * np.sign(v) * abs(v / V1) ** ALPHA
        dv = (i - iv) / cn
        return [(VS - v - R * i) / L, dv, R * i * i, v * iv, VS * (i - C_COIL * dv)]

    sol = solve_ivp(f, (0.0, SPAN), [i0, v0, 0.0, 0.0, 0.0], method="DOP853", rtol=1e-12,
                    atol=[1e-16, 1e-13, 1e-22, 1e-24, 1e-22])
    assert sol.success
    return sol.y[:, -1]


def test_varistor_ring_corrected_closed_form_against_tight_solve():
    c = _circuit()
    y0 = np.zeros(c.n_states)
    y0[0], y0[1] = I0, VS + DV0  # a ring of ~±0.6 V around the supply, the varistor at 3.7e-8 A
    scale = scales(c)
    model = AffineModel(c, 0.0, rest_probe(c, 0.0, y0), scale, SPAN)
    # the affine model alone is refused (its departure is far beyond LIN_TOL) ...
    assert solve_affine(model, 0.0, y0, SPAN, True) is None
    sol = solve_affine(model, 0.0, y0, SPAN, True, perturb=True)
    assert sol is not None and sol.correction is not None, "accepted with the correction"
    ref = _reference(I0, VS + DV0)
    got = sol(SPAN)
    err = np.abs(got[:2] - ref[:2]) / scale
    # the correction matters: it moves the end state by far more than what is left
    assert np.max(np.abs(sol.correction.end) / scale) > 1e3 * np.max(err)
    assert np.all(err <= 1e-10 * 5), err
    e = c.ie
    slot = e + N_ENERGY_FIXED + c.energy_slots.index((0, 0))
    assert got[e] == pytest.approx(ref[2], rel=1e-9)  # coil resistance
    assert got[slot] == pytest.approx(ref[3], rel=1e-9)  # varistor
    assert got[e + 1] == pytest.approx(ref[4], rel=1e-9, abs=1e-9 * abs(ref[2]))  # supply
    # the dense path agrees along the way too (the first trough of the coil current)
    t = np.linspace(0.0, 2e-5, 7)
    mid = solve_ivp(lambda tt, y: [(VS - y[1] - R * y[0]) / L,
                                   (y[0] - I1 * np.sign(y[1]) * abs(y[1] / V1) ** ALPHA) / (C_COIL + C_SW)],
                    (0.0, 2e-5), [I0, VS + DV0], method="Radau", rtol=1e-11, atol=[1e-15, 1e-12], t_eval=t)
    assert np.max(np.abs(sol(t)[:2] - mid.y) / scale[:, None]) <= 1e-9


def test_correction_refused_when_its_bound_fails(monkeypatch):
    # with (next to) no error allowed the corrected path is refused and the caller told so
    c = _circuit()
    y0 = np.zeros(c.n_states)
    y0[0], y0[1] = I0, VS + DV0
    model = AffineModel(c, 0.0, rest_probe(c, 0.0, y0), scales(c), SPAN)
    monkeypatch.setattr(linpert, "PERT_TOL", 1e-30)
    assert solve_affine(model, 0.0, y0, SPAN, True, perturb=True) is None
    assert model.pert_failed and 1.0 < model.pert_excess < np.inf


def test_sampling_grid_holds_the_ring_trough():
    # the lowest coil current of the ring, from the closed form's own sampling grid, against the
    # first trough of the tight solve (located as the event di/dt = 0 going up: Vs − v − R·i = 0)
    c = _circuit()
    y0 = np.zeros(c.n_states)
    y0[0], y0[1] = I0, VS + DV0
    model = AffineModel(c, 0.0, rest_probe(c, 0.0, y0), scales(c), SPAN)
    sol = solve_affine(model, 0.0, y0, SPAN, True, perturb=True)
    cn = C_COIL + C_SW

    def f(t, y):
        return [(VS - y[1] - R * y[0]) / L, (y[0] - I1 * np.sign(y[1]) * abs(y[1] / V1) ** ALPHA) / cn]

    def trough(t, y):
        return VS - y[1] - R * y[0]
    trough.direction = 1.0
    ref = solve_ivp(f, (0.0, 2e-5), [I0, VS + DV0], method="Radau", rtol=1e-12, atol=[1e-16, 1e-13],
                    events=trough)
    i_min = float(np.min(ref.y_events[0][:, 0]))
    got = float(np.min(sol(np.asarray(sol.steps))[0]))
    assert got == pytest.approx(i_min, rel=1e-9, abs=1e-12 * I0)


def test_pwm_cycle_with_a_corrected_off_phase_matches_radau():
    # one switching cycle (invented coil, demo data: the off phase rings at 160 kHz with the
    # varistor across the switch far below its knee once the first swing has passed) with the
    # corrected closed form against the same cycle stepped throughout by scipy's Radau IIA at
    # rtol 1e-10 (Hairer & Wanner, Solving ODEs II)
    from kickback.engine.periodic import one_cycle

    var = Element("varistor", voltage=V1, exponent=ALPHA, at_current=I1)
    case = Case("varistor ring pwm (demo data)", Supply(VS), Coil(L, 100.0, capacitance=C_COIL),
                Switch("mosfet", on_resistance=0.1, fall_time=1e-7, capacitance=C_SW), (Clamp("V", "switch", (var,)),))
    c = Circuit(case)
    x = np.array([0.05, 0.05])
    fast = one_cycle(c, x, 0.3, 2e3, 1e-8, keep=True)
    sols = [getattr(p.sol, "sol", p.sol) for p in fast[3].phases]
    assert any(getattr(s, "correction", None) is not None for s in sols), "the corrected closed form was used"
    slow = one_cycle(c, x, 0.3, 2e3, 1e-10, fast=False)
    assert np.all(np.abs(fast[0] - slow[0]) <= 1e-9 * scales(c))
    e_fast, e_slow = fast[1] + fast[2], slow[1] + slow[2]
    assert e_fast == pytest.approx(e_slow, rel=1e-9, abs=1e-12 * np.max(np.abs(e_slow)))
