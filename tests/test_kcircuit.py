"""The compiled circuit (kickback.engine.kcircuit, klaws, kchain) against closed forms, a series
solve written here, and the Python circuit it ports.

Element laws against their closed forms; a chain of several nonlinear laws, and a varistor in
series with a Zener, against scipy.optimize.brentq on Σ v_k(i) = V written here; RHS and JAC
against Circuit.rhs and PhaseRunner.jac at random states of seeded wide-range draws in every
switch and pin mode; JAC against a central difference of RHS done here.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy.optimize import brentq
from wide_range import draw

from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.engine import kchain, klaws
from kickback.engine import kcircuit as K
from kickback.engine.detailed import PhaseRunner
from kickback.models import ShockleyDiode

# exact SI constants (BIPM, The International System of Units, 9th ed., 2019)
K_B, Q_E = 1.380649e-23, 1.602176634e-19
V_T25 = K_B * 298.15 / Q_E


# ----------------------------------------------------------------------------------- laws
@pytest.mark.parametrize("v", [-30.0, -0.7, -0.69, 0.0, 5.0, 11.99, 12.0, 12.01, 15.0, 1e4])
def test_piecewise_linear_law(v):
    # a Zener of V_Z = 12 V, r_Z = 0.5 Ω, forward 0.7 V: i = (v − V_Z)/r_Z above V_Z, (v + 0.7)/r_Z
    # below −0.7 V, none between (the piecewise-linear breakdown law; elementary, Ohm's law per piece)
    vf, rf, vr, rr = 12.0, 0.5, -0.7, 0.5
    want = (v - vf) / rf if v > vf else (v - vr) / rr if v < vr else 0.0
    assert klaws.pwl_current(vf, rf, vr, rr, v) == pytest.approx(want, rel=1e-15, abs=0.0)
    assert klaws.pwl_slope(vf, rf, vr, rr, v) == (2.0 if v > vf or v < vr else 0.0)
    if want:
        assert klaws.pwl_voltage(vf, rf, vr, rr, want) == pytest.approx(v, rel=1e-14)
    # an ideal diode (vertical at 0.7 V, blocks reverse): inf current past the knee
    assert klaws.pwl_current(0.7, 0.0, -math.inf, 0.0, v) == (math.inf if v > 0.7 else 0.0)


@pytest.mark.parametrize("z", [-800.0, -60.0, -20.0, -3.0, -1.0, 0.0, 0.5, 1.0, 2.0, 10.0, 40.0, 1e3, 1e8, 1e30])
def test_wright_omega_against_mpmath(z):
    # ω(z) = W₀(e^z) for real z (Corless & Jeffrey, "The Wright ω function", AISC 2002), mpmath
    # at 40 digits; for large z, W₀(e^z) without forming e^z: the root of w + ln w = z
    with mpmath.workdps(40):
        if z > 600:
            want = mpmath.findroot(lambda w: w + mpmath.log(w) - z, z - math.log(z))
        else:
            want = mpmath.lambertw(mpmath.exp(z))
        want = float(mpmath.re(want))
    assert klaws.wright_omega(z) == pytest.approx(want, rel=5e-16, abs=1e-320)


def test_wright_omega_sweep_against_mpmath():
    # ω(z) = W₀(e^z) (Corless & Jeffrey 2002), mpmath at 30 digits, 400 points over −50…60
    with mpmath.workdps(30):
        for z in np.linspace(-50.0, 60.0, 400):
            want = float(mpmath.re(mpmath.lambertw(mpmath.exp(mpmath.mpf(float(z))))))
            assert klaws.wright_omega(z) == pytest.approx(want, rel=5e-16), z


def _diode_current_brentq(v, n_vt, i_s, r_s):
    # v = n·V_T·ln(1 + i/I_s) + R_s·i (Shockley's equation with series resistance: Sedra & Smith,
    # Microelectronic Circuits, ch. 4), solved by brentq in w = ln(1 + i/I_s), where
    # v = n·V_T·w + R_s·I_s·(e^w − 1) is well conditioned also deep in reverse; i = I_s·(e^w − 1)
    def f(w):
        return n_vt * w + r_s * i_s * math.expm1(w) - v
    if v == 0:
        return 0.0
    if v > 0:  # forward, in i: between 0 and the resistance alone
        return brentq(lambda i: n_vt * math.log1p(i / i_s) + r_s * i - v, 0.0, v / r_s, xtol=1e-300, rtol=8.9e-16)
    w = brentq(f, v / n_vt - 1.0, 0.0, xtol=1e-300, rtol=8.9e-16)
    return i_s * math.expm1(w)


@pytest.mark.parametrize("r_s", [0.0, 1e-3, 0.5, 20.0])
def test_shockley_law(r_s):
    n, i_s = 1.8, 2e-9
    a = n * V_T25
    log_k = math.log(r_s * i_s / a) if r_s > 0 else 0.0
    for v in (-50.0, -1.0, -0.05, -1e-4, 0.0, 1e-4, 0.3, 0.7, 0.9, 1.2, 3.0, 40.0):
        got = klaws.shockley_current(a, i_s, r_s, log_k, v)
        if r_s == 0.0:
            if v / a >= 700:  # past the float range: the law is vertical there
                assert got == math.inf
                continue
            want = i_s * math.expm1(v / a)  # i = I_s(e^{v/(nV_T)} − 1), Sedra & Smith ch. 4
        else:
            want = _diode_current_brentq(v, a, i_s, r_s)
        # the closed form's own rounding near −I_s is ~ulp(I_s): an absolute I_s·1e-12 allowance
        assert got == pytest.approx(want, rel=1e-12, abs=1e-12 * i_s), v
        if got > -i_s * (1 - 1e-6):
            assert klaws.shockley_voltage(a, i_s, r_s, got) == pytest.approx(v, rel=1e-9, abs=1e-12)


def test_varistor_law():
    # i = I_1·sign(v)·|v/V_1|^α (Levinson & Philipp, Am. Ceram. Soc. Bull. 65(4), 1986)
    v1, alpha, i1 = 39.0, 30.0, 1e-3
    cap = klaws.VARISTOR_CAP
    x_cap = cap ** (1 / alpha)
    for x in (1e-3, 0.1, 0.5, 0.9, 1.0, 1.2, 2.0, 0.999 * x_cap):
        for sgn in (1.0, -1.0):
            v = sgn * x * v1
            want = sgn * i1 * x ** alpha
            assert klaws.varistor_current(v1, alpha, i1, x_cap, v) == pytest.approx(want, rel=1e-13)
            assert klaws.varistor_voltage(v1, alpha, i1, x_cap, want) == pytest.approx(v, rel=1e-14)
            # dv/di = (V_1/(α·I_1))·|i/I_1|^(1/α − 1), the derivative of the inverse power law
            r_want = v1 / (alpha * i1) * abs(want / i1) ** (1 / alpha - 1)
            assert klaws.varistor_resistance(v1, alpha, i1, x_cap, want) == pytest.approx(r_want, rel=1e-12)
    # past the cap the law is its tangent at x_cap (slope of the power law there: α·I_1·x_cap^(α−1)/V_1)
    slope = alpha * i1 * x_cap ** (alpha - 1) / v1
    for dx in (0.01, 1.0, 10.0):
        v = (x_cap + dx) * v1
        assert klaws.varistor_current(v1, alpha, i1, x_cap, v) == pytest.approx(cap * i1 + slope * dx * v1, rel=1e-13)
    assert klaws.varistor_current(v1, alpha, i1, x_cap, 0.0) == 0.0


# ----------------------------------------------------------------------------------- chains
_CHAIN_CASE = """
title = "compiled chain test (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "10 mH"
resistance = "24 Ω"
capacitance = "100 pF"
[switch]
type = "ideal"
[[clamp]]
name = "K"
across = "switch"
[[clamp.element]]
name = "D"
type = "diode"
model = "shockley"
ideality = 1.7
saturation_current = "3 nA"
series_resistance = "0.2 Ω"
[[clamp.element]]
name = "V"
type = "varistor"
voltage = "39 V"
exponent = 25
[[clamp.element]]
name = "Z"
type = "zener"
voltage = "6.8 V"
dynamic_resistance = "1.5 Ω"
"""


def _series_voltage(i, w=None):
    # Σ v_k(i): Shockley diode (Sedra & Smith ch. 4) + varistor (Levinson & Philipp 1986) + Zener
    # piecewise-linear (6.8 V + 1.5 Ω·i forward, −0.7 V + 1.5 Ω·i reverse: the Zener's forward drop,
    # kickback's default 0.7 V, common practice, no source); w: the diode's ln(1 + i/I_s) when known
    a, i_s = 1.7 * V_T25, 3e-9
    vd = a * (math.log1p(i / i_s) if w is None else w) + 0.2 * i
    vv = math.copysign(39.0 * abs(i / 1e-3) ** (1 / 25), i) if i else 0.0
    vz = 6.8 + 1.5 * i if i > 0 else (-0.7 + 1.5 * i if i < 0 else 0.0)
    return vd + vv + vz


def test_series_chain_against_brentq():
    c = Circuit(load_case(_CHAIN_CASE, source="chain test"))
    p = K.pack(c, np.ones(c.n_states))  # no JAC here: any scales
    o = int(p[K.HEAD])
    assert int(p[o]) == kchain.CH_NUMERIC
    i_s = 3e-9
    for vx in (-200.0, -60.0, -20.0, -8.0, -1.0, -0.3, 30.0, 40.0, 45.0, 50.0, 60.0, 80.0, 150.0, 400.0):
        got = kchain.chain_current(p, o, vx, 0.0)
        if -0.7 <= vx <= 6.8:
            want = 0.0  # the Zener blocks: no current between its forward and breakdown voltages
        elif vx > 0:
            want = brentq(lambda i, vx=vx: _series_voltage(i) - vx, 1e-300, vx / 1.5, xtol=1e-300, rtol=8.9e-16)
        else:
            # reverse: in w = ln(1 + i/I_s) (the current lies in (−I_s, 0)), i = I_s·(e^w − 1)
            w = brentq(lambda w, vx=vx: _series_voltage(i_s * math.expm1(w), w) - vx, -1e6, -1e-300,
                       xtol=1e-300, rtol=8.9e-16, maxiter=2000)
            want = i_s * math.expm1(w)
        assert got == pytest.approx(want, rel=1e-11, abs=1e-13 * i_s), vx
        if got != 0:
            # the conductance is 1/Σ dv_k/di at the solved current (series connection)
            # dv/di of each law: n·V_T/(I_s + i) + R_s, (V_1/(α·I_1))·|i/I_1|^(1/α − 1), r_Z
            if i_s + got > 1e-6 * i_s:
                r_sum = (1.7 * V_T25 / (i_s + got) + 0.2 + 39.0 / (25 * 1e-3) * abs(got / 1e-3) ** (1 / 25 - 1)
                         + 1.5)
                assert kchain.chain_conductance(p, o, vx, 0.0) == pytest.approx(1 / r_sum, rel=1e-9), vx
            # the element powers add up to the chain's power V·i (Tellegen's theorem)
            out = np.zeros(3)
            kchain.chain_powers(p, o, got, vx, 0.0, False, out, 0)
            assert out.sum() == pytest.approx(vx * got, rel=1e-12), vx
            # the diode (the law with the highest reverse floor, −I_s) takes the residual voltage;
            # the varistor and the Zener their own laws' voltages
            vv = math.copysign(39.0 * abs(got / 1e-3) ** (1 / 25), got)
            vz = 6.8 + 1.5 * got if got > 0 else -0.7 + 1.5 * got
            assert out[1] == pytest.approx(vv * got, rel=1e-13) and out[2] == pytest.approx(vz * got, rel=1e-13)


_REST_CASE = _CHAIN_CASE.split("[[clamp.element]]")[0] + """[[clamp.element]]
name = "V"
type = "varistor"
voltage = "39 V"
exponent = 25
[[clamp.element]]
name = "Z"
type = "zener"
voltage = "6.8 V"
dynamic_resistance = "1.5 Ω"
"""


@pytest.mark.parametrize("vx", [-400.0, -60.0, -30.0, -0.7000001, 6.800000000001, 6.8000001, 6.9, 20.0, 45.0,
                                60.0, 400.0, 1e4])
def test_varistor_rest_chain_against_brentq(vx):
    # a varistor (V_1 = 39 V at I_1 = 1 mA, α = 25; Levinson & Philipp, Am. Ceram. Soc. Bull.
    # 65(4), 1986) in series with a Zener (6.8 V + 1.5 Ω·i forward, −0.7 V + 1.5 Ω·i reverse: the
    # Zener's forward drop, kickback's default 0.7 V, common practice, no source): one current,
    # the voltages add (KVL). Past the Zener's knee the varistor's voltage x and 1.5 Ω share
    # u = vx − 6.8 V (or vx + 0.7 V): x + 1.5 Ω·I_1·(x/V_1)^α = u, solved here by brentq in x
    # (scipy), i = I_1·(x/V_1)^α — currents from below 1e-300 A just past the knee to amperes
    c = Circuit(load_case(_REST_CASE, source="varistor + rest test"))
    p = K.pack(c, np.ones(c.n_states))
    o = int(p[K.HEAD])
    assert int(p[o]) == kchain.CH_SMOOTH_REST
    v1, i1, alpha, r = 39.0, 1e-3, 25.0, 1.5
    got = kchain.chain_current(p, o, vx, 0.0)
    u = vx - 6.8 if vx > 0 else vx + 0.7
    x = brentq(lambda x: x + r * i1 * (x / v1) ** alpha - abs(u), 0.0, abs(u), xtol=1e-300, rtol=1e-15)
    want = math.copysign(i1 * (x / v1) ** alpha, u)
    assert got == pytest.approx(want, rel=1e-12, abs=1e-300), vx
    # and the Python chain's own solve (chainsolve.SeriesSolve._solve_varistor_rest), step for step
    assert got == pytest.approx(c.chains[c.active_chains[0]].current_at(vx), rel=1e-14, abs=1e-300), vx
    if abs(u) > 1.0:
        # the conductance (a central difference, h = 1e-6·|vx|) against 1/(dv/di of the varistor
        # + 1.5 Ω), dv/di = (V_1/(α·I_1))·|i/I_1|^(1/α − 1): truncation ~ (α·h/u)² below 1e-7
        g_want = 1.0 / (v1 / (alpha * i1) * abs(want / i1) ** (1 / alpha - 1) + r)
        assert kchain.chain_conductance(p, o, vx, 0.0) == pytest.approx(g_want, rel=1e-6), vx


@pytest.mark.parametrize("r", [0.0, 10.0], ids=["diode", "diode+resistor"])
def test_shockley_chain_conductance_at_zero_bias(r):
    # i = I_s·(e^{v_d/(n·V_T)} − 1) (Sedra & Smith, Microelectronic Circuits, ch. 4): at zero bias
    # di/dv_d = I_s/(n·V_T); in series with R_s and a resistor r the chain's conductance at 0 V is
    # 1/(n·V_T/I_s + R_s + r), either way (no band where the linear laws block: the diode conducts
    # at once both ways; a node solved onto exactly its zero, wide-range case 4886)
    text = _CHAIN_CASE.split("[[clamp.element]]\nname = \"V\"")[0]
    if r:
        text += f'[[clamp.element]]\nname = "R"\ntype = "resistor"\nresistance = "{r} Ω"\n'
    c = Circuit(load_case(text, source="zero-bias test"))
    p = K.pack(c, np.ones(c.n_states))
    o = int(p[K.HEAD])
    assert int(p[o]) == kchain.CH_SHOCKLEY
    want = 1.0 / (1.7 * V_T25 / 3e-9 + 0.2 + r)
    assert kchain.chain_conductance(p, o, 0.0, 0.0) == pytest.approx(want, rel=1e-12)
    assert c.chains[c.active_chains[0]].conductance_at(0.0) == pytest.approx(want, rel=1e-12)
    for vx in (-1e-9, 1e-9):  # and continuous through it (the slope 1e-9 V either side)
        assert kchain.chain_conductance(p, o, vx, 0.0) == pytest.approx(want, rel=1e-6)


# ----------------------------------------------------------------------------------- circuit
SEEDS = range(0, 160)
N_TRIALS = 10


def _states(c, pr, rng):
    """Random states (y, t, conducting, pin) around the on-state, in every mode: conducting, in
    the current fall, off after it, and held at each vertical law."""
    y0 = c.initial_state()
    knees = [c.Vs, 0.0, c.on.node_voltage] + [p[0] for p in c.pin_points]
    for k in c.active_chains:
        ch = c.chains[k]
        ref = c.Vs * ch.reference
        knees += [ref + x for x in (*ch.band,) if math.isfinite(x)]
    tf = c.switch.fall_time
    for trial in range(N_TRIALS):
        y = y0 * (1 + rng.normal(0, 0.5, y0.size)) + rng.normal(0, 1, y0.size) * pr.scale * 1e3
        base = knees[int(rng.integers(len(knees)))]
        if trial % 2:  # near a knee, a pin or the supply
            y[1] = base * (1 + rng.normal(0, 1e-3)) + rng.normal(0, 1e-2)
        else:
            y[1] = c.v_scale * rng.uniform(-1.5, 1.5)
        mode = trial % 4
        conducting = mode == 0
        t = (0.5 * tf if tf > 0 else 0.0) if mode == 1 else (2 * tf + 1e-6 if mode == 2 else 0.0)
        pin = None
        if mode == 3 and c.pin_points:
            pin = c.pin_points[int(rng.integers(len(c.pin_points)))]
        yield y, t, conducting, pin


def _cases():
    out = []
    for s in SEEDS:
        c = Circuit(load_case(draw(s).text, source=f"wide-range case {s}"))
        if c.capacitive and K.supported(c) is None:  # the algebraic node: tests/test_knode.py
            out.append((s, c))
    return out


@pytest.fixture(scope="module")
def drawn():
    return _cases()


def _rate_scale(c, t, y, f):
    """Scale of each rate at state y: the sum of the magnitudes of the terms it adds up (so that a
    rate that is a small difference of large terms is compared at the terms' size, their
    rounding), written here from the state equations (DESIGN.md: node balance, coil voltage)."""
    i = float(c.coil_current(y[0]))
    v = float(y[1])
    ich, ioff, ichains = c.split_currents(t, v, y)
    # a Shockley diode's current is the difference a/R_s·ω − I_s (Banwell & Jayakumar 2000), the
    # size of its terms |i| + I_s (a diode of large I_s near zero current loses digits there)
    i_s = [sum(law.i_s for law in c.chains[k].laws if isinstance(law, ShockleyDiode)) for k in c.active_chains]
    vals = np.abs([ich, ioff, *ichains]) + np.array([0.0, 0.0, *i_s])
    out = np.abs(f).astype(float)
    emf = c.k_emf * c.speed_of(y) if c.motor else 0.0
    gain = c.state_gain(i)[1] if c.flux else 1.0 / c.L
    out[0] = (abs(c.Vs) + abs(v) + abs(c.R * i) + abs(emf)) * gain
    if c.pin is None:
        out[1] = (abs(i) + vals.sum()) / c.C_node
    e = c.ie
    out[e + 1] = abs(c.Vs) * (abs(i) + c.C_plus * abs(f[1]) + sum(
        vals[2 + n] for n, k in enumerate(c.active_chains) if c.chains[k].reference))
    m = e + 5
    for n, k in enumerate(c.active_chains):
        ch = c.chains[k]
        vcap = y[c.icap[k]] if k in c.icap else 0.0
        nl = sum(law is not None for law in ch.laws)
        # an element power: its share of the chain's voltage times the current
        band = sum(abs(x) for x in ch.band if math.isfinite(x))
        out[m:m + nl] += (abs(v - c.Vs * ch.reference) + abs(vcap) + band) * vals[2 + n]
        m += nl
    return out


def test_rhs_and_jac_match_the_python_circuit(drawn):
    kinds, modes = set(), set()
    for s, c in drawn:
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 18])
        for y, t, conducting, pin in _states(c, pr, rng):
            c.conducting, c.t_turnoff, c.pin = conducting, 0.0, pin
            K.set_mode(p, c)
            modes.add(("conducting" if conducting else "fall" if c._in_fall(t) else "off", pin is not None))
            f_py, f_k = c.rhs(t, y), K.RHS(t, y, p)
            j_py, j_k = pr.jac(t, y), K.JAC(t, y, p)
            assert K.NODE_BALANCE(t, y, p) == pytest.approx(pr.ev_peak(t, y), rel=1e-12, abs=1e-13 * c.i0)
            if pin is not None:
                g = pr._release_events()[0]
                assert K.PIN_RELEASE(t, y, p) == pytest.approx(g(t, y), rel=1e-12, abs=1e-13 * c.i0)
            # state-wise: each rate to 1e-12 of its terms' size; each Jacobian row of the dynamic
            # block to 1e-12 of its largest entry
            f_scale = _rate_scale(c, t, y, f_py)
            np.testing.assert_array_less(np.abs(f_py - f_k), 1e-12 * f_scale + 1e-300, err_msg=f"RHS, case {s}")
            n = c.ie
            j_row = np.max(np.where(np.isfinite(j_py[:n]), np.abs(j_py[:n]), 0.0), axis=1, keepdims=True)
            np.testing.assert_array_less(np.abs(j_py[:n] - j_k[:n]), 1e-12 * np.maximum(np.abs(j_py[:n]), j_row)
                                         + 1e-300, err_msg=f"JAC dynamic block, case {s}")
            # the energy rows are forward differences (PhaseRunner.jac's steps h): a rate that
            # differs by 1e-13 of its scale (the Shockley law's Wright ω, a few ulps off
            # scipy's) moves them by that over h
            tol = 1e-12 * np.abs(j_py[n:, :n])
            for j in range(n):
                h = 1e-8 * max(abs(y[j]), pr.scale[j])
                yp = y.copy()
                yp[j] += h
                scale_p = np.maximum(f_scale, _rate_scale(c, t, yp, c.rhs(t, yp)))
                tol[:, j] += 1e-13 * scale_p[n:] / h
            np.testing.assert_array_less(np.abs(j_py[n:, :n] - j_k[n:, :n]), tol + 1e-300,
                                         err_msg=f"JAC energy rows, case {s}")
            assert not j_k[:, n:].any() and not j_py[:, n:].any()
        for k in c.active_chains:
            kinds.add(kchain.chain_kind(c.chains[k]))
    # the draws reach every chain kind and every mode
    assert kinds >= {kchain.CH_PIECES, kchain.CH_SHOCKLEY, kchain.CH_VARISTOR, kchain.CH_NUMERIC,
                     kchain.CH_SMOOTH_REST}, kinds
    assert {m[0] for m in modes} == {"conducting", "fall", "off"} and any(m[1] for m in modes), modes


def test_jac_against_central_difference(drawn):
    checked = 0
    for s, c in drawn[::3]:
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 19])
        for y, t, conducting, pin in _states(c, pr, rng):
            c.conducting, c.t_turnoff, c.pin = conducting, 0.0, pin
            K.set_mode(p, c)
            jm = K.JAC(t, y, p)
            f0 = K.RHS(t, y, p)
            for j in range(c.ie):
                h = 1e-6 * max(abs(y[j]), pr.scale[j])
                yp, ym = y.copy(), y.copy()
                yp[j] += h
                ym[j] -= h
                fp, fm = K.RHS(t, yp, p), K.RHS(t, ym, p)
                central = (fp - fm) / (2 * h)
                fwd, bwd = (fp - f0) / h, (f0 - fm) / h
                # the analytic dynamic block, where the rates are smooth across ±h (no law's knee
                # inside: the one-sided differences agree there), to 1e-4 of the derivative or
                # of the differences' rounding (1e-9 of the rates over h)
                n = c.ie
                scale = np.abs(central[:n]) + 1e-9 * np.maximum(np.abs(f0[:n]), np.abs(fp[:n])) / h + 1e-300
                smooth = np.abs(fwd[:n] - bwd[:n]) <= 1e-4 * scale
                if j == 0 and c.flux and abs(y[0]) > 0.999 * c.L * c.i_sat:
                    # past the flux law's end (continued linearly: trial states only) the Python
                    # Jacobian's di/dλ is the law's at the continued current (kernel_found.md)
                    smooth[:] = False
                bad = smooth & (np.abs(jm[:n, j] - central[:n]) > 1e-4 * scale)
                assert not bad.any(), (s, j, np.flatnonzero(bad), jm[:n][bad, j], central[:n][bad])
                checked += int(smooth.sum())
                # the energy rows are PhaseRunner.jac's forward differences (step h_fd): the same
                # differences of RHS done here (a steep varistor makes them noisy at such a
                # step, ~1e-13 of the rates: a central difference is no reference there)
                h_fd = 1e-8 * max(abs(y[j]), pr.scale[j])
                yq = y.copy()
                yq[j] += h_fd
                want = (K.RHS(t, yq, p)[n:] - f0[n:]) / h_fd
                np.testing.assert_allclose(jm[n:, j], want, rtol=1e-12, atol=0.0)
    assert checked > 500


def test_supported_names_what_is_not_covered():
    from kickback.circuit import FLOAT

    # an algebraic node (no node capacitance) is covered (tests/test_knode.py), free, held or
    # floating; a capacitive node has no floating mode
    text = _CHAIN_CASE.replace('capacitance = "100 pF"\n', "")
    c = Circuit(load_case(text, source="no node capacitance"))
    assert not c.capacitive and K.supported(c) is None
    c = Circuit(load_case(_CHAIN_CASE, source="capacitive"))
    c.pin = FLOAT
    assert K.supported(c) == "floating mode of a capacitive node"
    with pytest.raises(ValueError, match="floating mode"):
        K.pack(c, np.ones(c.n_states))


def test_cache_follows_the_called_modules():
    # numba keys a cached function by its own file only; the compiled circuit's cache must also
    # follow the files it calls into (an edit of kchain.py, kseries.py, klaws.py, kbase.py, knode.py or
    # kfloat.py recompiles RHS)
    from kickback.engine import kcache

    assert set(kcache.DEPENDS["kcircuit.py"]) == {"kbase.py", "knode.py", "kfloat.py", "kchain.py", "kseries.py",
                                                  "klaws.py"}
    for fn in (K.RHS, K.JAC, kchain.chain_current):
        locator = fn._cache._impl._locator
        assert type(locator).__name__ in ("TreeLocator", "UserDirLocator")
    import hashlib
    import os

    h = hashlib.sha256()
    for name in ("kcircuit.py", *kcache.DEPENDS["kcircuit.py"]):
        with open(os.path.join(os.path.dirname(K.__file__), name), "rb") as f:
            h.update(f.read())
    assert K.RHS._cache._impl._locator.get_source_stamp() == h.digest()
    assert kcache.REGISTERED


def test_radau5_integrates_the_compiled_circuit():
    # the compiled functions plug into kickback's radau5 (fixed signatures, an event calling
    # NODE_BALANCE) and give the trajectory scipy's Radau gives on Circuit.rhs at a tighter
    # tolerance (scipy as the reference solver of the same equations)
    from scipy.integrate import solve_ivp

    from kickback.engine import radau5
    from kickback.engine.detailed import tolerances

    @radau5.njit_events
    def ev(t, y, p):
        out = np.empty(1)
        out[0] = K.NODE_BALANCE(t, y, p)
        return out

    for s in (46, 117, 322):
        c = Circuit(load_case(draw(s).text, source=f"wide-range case {s}"))
        rtol = 1e-8
        atol = tolerances(c, rtol)
        pr = PhaseRunner(c, rtol, c.initial_state())
        p = K.pack(c, pr.scale)
        y0 = c.initial_state()
        t_end = 0.05 * c.L / c.R + 5 * c.switch.fall_time
        r = radau5.solve(K.RHS, K.JAC, (0.0, t_end), y0, p, rtol=rtol, atol=atol, events=ev,
                         directions=np.array([-1]), terminal=np.array([0]))
        assert r.status == 0, r.message
        ref = solve_ivp(c.rhs, (0.0, t_end), y0, method="Radau", rtol=1e-11, atol=atol * 1e-3, jac=pr.jac)
        assert ref.status == 0
        np.testing.assert_array_less(np.abs(r.y[:, -1] - ref.y[:, -1]), 100 * (rtol * np.abs(ref.y[:, -1]) + atol))
        # the node balance's falling zero is the node voltage's peak (dv/dt = balance/C)
        for t_peak in r.t_events[0]:
            assert abs(K.NODE_BALANCE(t_peak, r.sol(t_peak), p)) <= 1e-6 * c.i0
