"""The compiled algebraic node (kickback.engine.knode, kfloat) against a node solve written here and
the Python circuit it ports.

A switch node without capacitance has its voltage solved from the node's current balance at every
evaluation. Checked at random states of seeded wide-range draws (tests/wide_range.py, demo data)
in every mode — switch conducting, in its current fall, off; node free, held at each vertical law,
floating: the node voltage against scipy.optimize.brentq on the balance Σ branch currents(v) = i
(Kirchhoff's current law, Alexander & Sadiku, Fundamentals of Electric Circuits, ch. 3) bracketed
here; RHS, JAC, PIN_RELEASE and the floating events' functions against Circuit and PhaseRunner;
JAC's dynamic block against a central difference of RHS done here.
"""

from __future__ import annotations

import math
import os

import numpy as np
import pytest
from scipy.optimize import brentq
from wide_range import draw

from kickback.caseio import load_case
from kickback.circuit import FLOAT, Circuit
from kickback.engine import kcircuit as K
from kickback.engine import knode
from kickback.engine.detailed import PhaseRunner
from kickback.models import ShockleyDiode

#: the draws (KICKBACK_KNODE_SEEDS: more of them, for a one-off wider check)
SEEDS = range(0, int(os.environ.get("KICKBACK_KNODE_SEEDS", "400")))
N_TRIALS = 12


def _cases():
    out = []
    for s in SEEDS:
        c = Circuit(load_case(draw(s).text, source=f"wide-range case {s}"))
        if not c.capacitive and K.supported(c) is None:
            out.append((s, c))
    return out


@pytest.fixture(scope="module")
def drawn():
    return _cases()


def _states(c, pr, rng):
    """Random states (y, t, conducting, pin) around the on-state: conducting, in the current fall,
    off after it; node free, held at a vertical law, floating (not while conducting)."""
    y0 = c.initial_state()
    tf = c.switch.fall_time
    knees = [c.Vs * c.chains[k].reference + x for k in c.active_chains if c.chains[k].pieces is not None
             for x in (c.chains[k].pieces.v_fwd, c.chains[k].pieces.v_rev) if math.isfinite(x)]
    for trial in range(N_TRIALS):
        y = y0 * (1 + rng.normal(0, 0.5, y0.size)) + rng.normal(0, 1, y0.size) * pr.scale * 1e3
        if trial % 3 == 2:  # a small coil current: the node near its blocking band
            y[0] = c.coil_state(c.i0 * 10.0 ** rng.uniform(-14, -1) * rng.choice([-1, 1]))
        mode = trial % 4
        conducting = mode == 0
        t = tf * rng.uniform(0.0, 1.0) if mode == 1 and tf > 0 else (2 * tf + 1e-6 if mode == 2 else 0.0)
        if trial % 3 == 1 and knees:
            # the coil current the branches take with the node at a law's knee: the node solved
            # there sits on the kink, one side of which may hold only the leakage
            c.conducting, c.t_turnoff = conducting, 0.0
            knee = knees[int(rng.integers(len(knees)))]
            i_knee = sum(x for x in c.currents_at(t, knee, y) if math.isfinite(x))
            if abs(i_knee) <= 1e3 * c.i0:  # not a diode's overflowing current past its knee
                y[0] = c.coil_state(i_knee)
        pin = None
        kind = (trial // 4) % 3  # free, held, floating: each with every switch mode
        if kind == 1 and c.pin_points:
            pin = c.pin_points[int(rng.integers(len(c.pin_points)))]
        elif kind == 2 and not conducting:
            pin = FLOAT
        yield y, t, conducting, pin


def _on_joint(c, t, v, y) -> bool:
    """The node voltage sits exactly on the joint v_fwd == v_rev of a piecewise-linear law that
    conducts either side (a resistor-like on-state or chain): its slope_at is 0 there."""
    laws = [(c.switch.on_state, v)] if c.conducting or c._in_fall(t) else []
    for k in c.active_chains:
        ch = c.chains[k]
        if ch.pieces is not None:
            laws.append((ch.pieces, v - c.Vs * ch.reference - (y[c.icap[k]] if k in c.icap else 0.0)))
    return any(pc.v_fwd == pc.v_rev == x for pc, x in laws)


def _set(c, p, conducting, pin):
    c.conducting, c.t_turnoff, c.pin = conducting, 0.0, pin
    K.set_mode(p, c)


def _terms(c, t, y, f, v):
    """Size of each rate's terms at state y (the magnitudes it adds up, so that a rate that is a
    small difference of large terms is compared at their rounding), written here from the state
    equations (DESIGN.md: node balance, coil voltage)."""
    i = float(c.coil_current(y[0]))
    vals = np.abs(c.split_currents(t, v, y)[0:2] + tuple(c.split_currents(t, v, y)[2]))
    i_s = [sum(law.i_s for law in c.chains[k].laws if isinstance(law, ShockleyDiode)) for k in c.active_chains]
    vals = vals + np.array([0.0, 0.0, *i_s])
    # a branch that takes what the others leave (held, floating: the channel; a vertical law)
    # adds up all the others' terms
    takers = [c.pin[1]] if c.pin is not None else c._vertical_at(t, v)
    total = abs(i) + vals.sum()
    for n in takers:
        vals[n] = total
    out = np.abs(f).astype(float)
    emf = c.k_emf * c.speed_of(y) if c.motor else 0.0
    gain = c.state_gain(i)[1] if c.flux else 1.0 / c.L
    out[0] = (abs(c.Vs) + abs(v) + abs(c.R * i) + abs(emf) + abs(f[0] / gain)) * gain
    return out + _branch_sizes(c, y, v, vals, 0.0)


def _branch_sizes(c, y, v, d, dv):
    """The rates' sizes from branch current sizes d [A] (and a node voltage change dv [V] times
    the currents themselves, at v): capacitor rates, supply, channel, off-state, element powers."""
    out = np.zeros(c.n_states)
    cur = np.abs(c.split_currents(0.0, v, y)[0:2] + tuple(c.split_currents(0.0, v, y)[2])) if dv else 0 * d
    for n, k in enumerate(c.active_chains):
        if k in c.icap:
            out[c.icap[k]] += d[2 + n] / c.chains[k].capacitance
    e = c.ie
    out[e + 1] = abs(c.Vs) * sum(d[2 + n] for n, k in enumerate(c.active_chains) if c.chains[k].reference)
    out[e + 2] += abs(v) * d[0] + dv * cur[0]
    out[e + 3:e + 5] += abs(v) * d[1] + dv * cur[1]
    m = e + 5
    for n, k in enumerate(c.active_chains):
        ch = c.chains[k]
        vcap = y[c.icap[k]] if k in c.icap else 0.0
        nl = sum(law is not None for law in ch.laws)
        band = sum(abs(x) for x in ch.band if math.isfinite(x))
        out[m:m + nl] += (abs(v - c.Vs * ch.reference) + abs(vcap) + band) * d[2 + n] + dv * cur[2 + n]
        m += nl
    return out


def _tolerance(c, t, y, f, v, dv):
    """The rates' tolerance: 1e-12 of their terms' size, and the change a node voltage off by dv
    makes (each branch by G_k·dv, G_k the largest conductance within dv of v: a knee may lie
    between the two voltages; the branch that takes what the others leave by their sum)."""
    tol = 1e-12 * _terms(c, t, y, f, v)
    if not dv:
        return tol
    gs = [c._conductances(t, v + d, y) for d in (-dv, 0.0, dv)]
    g = np.array([max(abs(x) if math.isfinite(x) else 0.0 for x in col) for col in zip(*gs, strict=True)])
    d = g * dv
    takers = [c.pin[1]] if c.pin is not None else c._vertical_at(t, v)
    for n in takers:
        d[n] = d.sum()
    shift = _branch_sizes(c, y, v, d, dv)
    shift[0] = dv * (c.state_gain(float(c.coil_current(y[0])))[1] if c.flux else 1.0 / c.L)
    return tol + 2 * shift


def test_node_solve_against_brentq(drawn):
    # the root of the balance b(v) = Σ branch currents(v) − i (nondecreasing in v; ±inf past an
    # ideal law's voltage): bracketed here by doubling, the sign change narrowed by bisection;
    # where b is continuous there, brentq's root to its xtol; where b jumps over zero, the jump
    verticals = brentq_checked = flat = 0
    for s, c in drawn:
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 20])
        for y, t, conducting, _ in _states(c, pr, rng):
            _set(c, p, conducting, None)
            i = float(c.coil_current(y[0]))

            def b(v, c=c, t=t, y=y, i=i):
                return sum(c.currents_at(t, v, y)) - i
            lo, hi = -c.v_scale, c.v_scale
            while not b(lo) < 0:
                lo *= 2
            while not b(hi) > 0:
                hi *= 2
            for _ in range(200):
                mid = 0.5 * (lo + hi)
                if mid in (lo, hi):
                    break
                lo, hi = (mid, hi) if b(mid) < 0 else (lo, mid)
            v_k = knode.node_voltage(p, t, y)
            # the sign change, to the solve's tolerance — its xtol, 1e-14 × its bracket's larger
            # end (within a few v_scale, its first span, and twice the root), or its offset
            # 1e-12·max(1, |x|) either side of a law's voltage x — and the balance's rounding
            # (ε: a few ulps of its terms; where the balance is flat, as on the leakage alone,
            # every voltage within ε of zero is a root)
            xtol = 1e-14 * (4 * max(1.0, c.v_scale) + 2 * abs(v_k))
            if v_k in c._thresholds[conducting or c._in_fall(t)]:
                xtol = max(xtol, 1e-12 * max(1.0, abs(v_k)))
            tol = max(xtol, 1e-12 * max(1.0, abs(v_k)))
            eps = 8 * np.finfo(float).eps * (abs(i) + sum(abs(x) for x in c.currents_at(t, v_k, y)
                                                          if math.isfinite(x)))
            assert b(v_k - tol) <= eps and b(v_k + tol) >= -eps, (s, t, lo, hi, v_k)
            # away from the bisection's sign change only where the balance is flat within ε
            # between them (b is nondecreasing: then |b| ≤ ε all along)
            flat += not lo - tol <= v_k <= hi + tol
            a, z = v_k - 4 * tol, v_k + 4 * tol
            ba, bz = b(a), b(z)
            if math.isfinite(ba) and math.isfinite(bz) and ba < 0 < bz and bz - ba < 1e-3 * abs(i) + 1e-9 * c.i0:
                # continuous, and steep enough on both sides (a branch's knee may sit at the root:
                # flat below it, steep above, wide-range case 608 with KICKBACK_KNODE_SEEDS) that the
                # balance's rounding moves the root by less than xtol: brentq's root there
                b0 = b(v_k)
                slope = min((bz - b0) / (z - v_k), (b0 - ba) / (v_k - a))
                if slope > 0 and eps / slope < 0.1 * xtol:
                    want = brentq(b, a, z, xtol=1e-15 * max(1.0, abs(v_k)), rtol=4 * np.finfo(float).eps)
                    assert v_k == pytest.approx(want, rel=0, abs=xtol), (s, t, v_k, want)
                    brentq_checked += 1
            else:
                verticals += 1
    assert verticals > 20  # the draws reach nodes held by an ideal law's jump
    assert brentq_checked > 200 and flat < 0.05 * brentq_checked


def test_rhs_and_jac_match_the_python_circuit(drawn):
    modes = set()
    straddled = checked = 0
    for s, c in drawn:
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 18])
        for y, t, conducting, pin in _states(c, pr, rng):
            _set(c, p, conducting, pin)
            v_py = c.node_voltage(t, y)
            v_k = knode.node_voltage(p, t, y)
            # the node voltage: the solve's tolerance apart at most (a law's few-ulp difference can
            # move its last steps; test_node_solve_against_brentq)
            dv = abs(v_k - v_py)
            assert dv <= 1e-14 * (4 * max(1.0, c.v_scale) + 2 * abs(v_py)), (s, t, pin, v_py, v_k)
            vert = bool(c._vertical_at(t, v_py)) and pin is None
            modes.add(("conducting" if conducting else "fall" if c._in_fall(t) else "off",
                       "float" if pin is FLOAT else "pinned" if pin else "vertical" if vert else "free"))
            f_py, f_k = c.rhs(t, y), K.RHS(t, y, p)
            j_py, j_k = pr.jac(t, y), K.JAC(t, y, p)
            f_tol = _tolerance(c, t, y, f_py, v_py, dv)
            np.testing.assert_array_less(np.abs(f_py - f_k), f_tol + 1e-300, err_msg=f"RHS, case {s}")
            if pin is not None and pin is not FLOAT:
                g = pr._release_events()[0]
                assert K.PIN_RELEASE(t, y, p) == pytest.approx(g(t, y), rel=1e-12, abs=1e-13 * c.i0)
            n = c.ie
            if dv and c._conductances(t, v_py, y) != c._conductances(t, v_k, y):
                # the two node voltages (the solve's tolerance apart) straddle a law's knee,
                # where the Jacobian jumps: no comparison
                straddled += 1
                continue
            j_row = np.max(np.where(np.isfinite(j_py[:n]), np.abs(j_py[:n]), 0.0), axis=1, keepdims=True)
            np.testing.assert_array_less(np.abs(j_py[:n] - j_k[:n]), 1e-12 * np.maximum(np.abs(j_py[:n]), j_row)
                                         + 1e-300, err_msg=f"JAC dynamic block, case {s}")
            # the energy rows: PhaseRunner.jac's forward differences (steps h), moved by the rates'
            # differences over h
            tol = 1e-12 * np.abs(j_py[n:, :n])
            for j in range(n):
                h = 1e-8 * max(abs(y[j]), pr.scale[j])
                yp = y.copy()
                yp[j] += h
                vp = c.node_voltage(t, yp)
                dvp = abs(knode.node_voltage(p, t, yp) - vp)
                tol_p = np.maximum(f_tol, _tolerance(c, t, yp, c.rhs(t, yp), vp, dvp))
                tol[:, j] += tol_p[n:] / h
            np.testing.assert_array_less(np.abs(j_py[n:, :n] - j_k[n:, :n]), tol + 1e-300,
                                         err_msg=f"JAC energy rows, case {s}")
            assert not j_k[:, n:].any()
            checked += 1
    assert straddled <= 0.01 * checked
    for m in ("conducting", "fall", "off"):
        assert {(m, "free"), (m, "pinned")} <= modes, modes
    assert {("fall", "float"), ("off", "float"), ("off", "vertical")} <= modes, modes


def test_floating_events_match_the_python_circuit(drawn):
    # the functions PhaseRunner._float_events reads, in a current fall (where they matter)
    checked = 0
    for s, c in drawn:
        if not c.switch.fall_time > 0:
            continue
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 21])
        for y, t, _, pin in _states(c, pr, rng):
            t = c.switch.fall_time * rng.uniform(0.0, 1.0)
            _set(c, p, False, pin)
            di = pr.float_tolerance(t, y)
            vf = c.forced_voltage(t, y)
            assert K.FORCED_VOLTAGE(p, t, y) == pytest.approx(vf, rel=1e-12, abs=1e-13 * c.v_scale)
            assert K.NODE_VOLTAGE(p, t, y) == pytest.approx(c.node_voltage(t, y), rel=1e-12, abs=1e-13 * c.v_scale)
            assert K.FORCED_SLOPE(p, t) == c.forced_slope(t)
            g_py = c.node_conductance(t, vf, y)
            assert K.NODE_CONDUCTANCE(p, t, vf, y) == pytest.approx(g_py, rel=1e-12)
            assert K.FLOAT_RESIDUAL(p, t, y) == pytest.approx(c.float_residual(t, y), rel=1e-12, abs=1e-13 * c.i0)
            assert K.FLOAT_LIMIT(p, t, vf, y, di) == pytest.approx(c.float_limit(t, vf, y, di), rel=1e-12)
            assert K.EDGE_MARGIN(p, t, y, di) == pytest.approx(c.edge_margin(t, y, di), rel=1e-12, abs=1e-12)
            checked += 1
    assert checked > 100


def test_jac_against_central_difference(drawn):
    checked = 0
    for s, c in drawn:
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 19])
        for y, t, conducting, pin in _states(c, pr, rng):
            if pin is FLOAT:
                continue  # the floating Jacobian drops the rate's own slope (floatnode.py)
            _set(c, p, conducting, pin)
            v = knode.node_voltage(p, t, y)
            if pin is None and c.node_conductance(t, v, y) < 1e-6 * c.i0 / c.v_scale:
                continue  # leakage only: dv/di bounded by the conductance either side, by design
            if pin is None and _on_joint(c, t, v, y):
                continue  # LinearPieces.slope_at is 0 on the joint of two pieces (s10/kernel_E.md)
            jm = K.JAC(t, y, p)
            f0 = K.RHS(t, y, p)
            n = c.ie
            # the node voltage is solved to xtol (the solve's tolerance): the rates then move by
            # ∂f/∂v · xtol, k0 in the coil's row and g_k/C_k in a snubber capacitor's
            xtol = 1e-14 * (4 * max(1.0, c.v_scale) + 2 * abs(v)) if pin is None else 0.0
            sens = np.zeros(n)
            sens[0] = c.state_gain(float(c.coil_current(y[0])))[1]
            g = c._conductances(t, v, y)
            for k in c.cap_chains:
                sens[c.icap[k]] = abs(g[2 + c._pos[k]]) / c.chains[k].capacitance
            for j in range(n):
                h = 1e-4 * max(abs(y[j]), pr.scale[j])
                yp, ym = y.copy(), y.copy()
                yp[j] += h
                ym[j] -= h
                fp, fm = K.RHS(t, yp, p), K.RHS(t, ym, p)
                central = (fp - fm) / (2 * h)
                fwd, bwd = (fp - f0) / h, (f0 - fm) / h
                # where the rates are smooth across ±h (one-sided differences agree), to 1e-4 of
                # the derivative or of the differences' rounding (1e-9 of the rates over h), plus
                # the node solve's tolerance over h (each rate off by up to sens·xtol)
                scale = np.abs(central[:n]) + 1e-9 * np.maximum(np.abs(f0[:n]), np.abs(fp[:n])) / h + 1e-300
                noise = 2 * sens * xtol / h
                smooth = np.abs(fwd[:n] - bwd[:n]) <= 1e-4 * scale + 2 * noise
                if j == 0 and c.flux and abs(y[0]) > 0.999 * c.L * c.i_sat:
                    smooth[:] = False  # past the flux law's end (s10/kernel_found.md)
                bad = smooth & (np.abs(jm[:n, j] - central[:n]) > 1e-4 * scale + noise)
                assert not bad.any(), (s, j, pin, np.flatnonzero(bad), jm[:n][bad, j], central[:n][bad])
                checked += int(smooth.sum())
    assert checked > 300


_TWIN_ZENERS = """
title = "two ideal Zener clamps at one voltage (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "10 mH"
resistance = "24 Ω"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
""" + "".join(f"""
[[clamp]]
name = "Z{k}"
across = "switch"
[[clamp.element]]
name = "Z{k}"
type = "zener"
voltage = "40 V"
""" for k in (1, 2))


def test_two_vertical_laws_share_what_the_others_leave():
    # two ideal Zeners (vertical at 40 V) across the off switch: the node sits at 40 V and, by
    # Kirchhoff's current law and symmetry, each takes half of the coil current less the
    # leakage's g·40 V (Alexander & Sadiku ch. 3)
    c = Circuit(load_case(_TWIN_ZENERS, source="twin Zeners"))
    assert not c.capacitive
    p = K.pack(c, np.ones(c.n_states))
    y = c.initial_state()
    for i in (1.0, 0.3, 1e-3):
        y[0] = i
        v = knode.node_voltage(p, 0.0, y)
        assert v == 40.0
        vals = knode.split_currents(p, 0.0, v, y, i)
        half = 0.5 * (i - c.g_leak * 40.0)
        np.testing.assert_allclose(vals[2:], [half, half], rtol=1e-15)
        assert vals[0] == c.g_leak * 40.0 and vals[1] == 0.0
        np.testing.assert_allclose(K.RHS(0.0, y, p), c.rhs(0.0, y), rtol=1e-15, atol=0.0)


@pytest.mark.parametrize("seed", [1, 72, 135])
def test_radau5_integrates_the_algebraic_node(seed):
    # the compiled equations of an algebraic node plug into kickback's radau5 and give the
    # trajectory scipy's Radau gives on Circuit.rhs at a tighter tolerance (scipy as the
    # reference solver of the same equations); switch off, clamps taking the coil current
    from scipy.integrate import solve_ivp

    from kickback.engine import radau5
    from kickback.engine.detailed import tolerances

    c = Circuit(load_case(draw(seed).text, source=f"wide-range case {seed}"))
    assert not c.capacitive
    rtol = 1e-8
    atol = tolerances(c, rtol)
    pr = PhaseRunner(c, rtol, c.initial_state())
    c.conducting, c.t_turnoff, c.pin = False, -1.0, None
    p = K.pack(c, pr.scale)
    y0 = c.initial_state()
    t_end = 0.05 * c.L / c.R
    r = radau5.solve(K.RHS, K.JAC, (0.0, t_end), y0, p, rtol=rtol, atol=atol)
    assert r.status == 0, r.message
    ref = solve_ivp(c.rhs, (0.0, t_end), y0, method="Radau", rtol=1e-11, atol=atol * 1e-3, jac=pr.jac)
    assert ref.status == 0
    np.testing.assert_array_less(np.abs(r.y[:, -1] - ref.y[:, -1]), 100 * (rtol * np.abs(ref.y[:, -1]) + atol))


def test_floating_events_match_the_phase_runner(drawn):
    # the compiled entry and landing events against PhaseRunner._float_events' closures
    checked = 0
    for s, c in drawn:
        if not c.switch.fall_time > 0:
            continue
        rtol = 1e-8
        pr = PhaseRunner(c, rtol, c.initial_state())
        p = K.pack(c, pr.scale)
        rng = np.random.default_rng([s, 22])
        tf = c.switch.fall_time
        for y, _, _, _ in _states(c, pr, rng):
            t = tf * rng.uniform(0.0, 1.0)
            pr.t, pr.y, pr.no_float = t, y, False  # as PhaseRunner.run sets it
            pr.float_hold = t - tf * rng.uniform(-0.1, 1.0)
            pr.float_gate = t + tf * rng.uniform(-1.0, 1.0)
            _set(c, p, False, None)
            (g,) = pr._float_events()
            v = K.NODE_VOLTAGE(p, t, y)
            band = 10.0 * rtol * c.v_scale
            got = K.FLOAT_ENTRY(p, t, y, v, pr.float_hold, pr.float_gate, band, pr.float_entry, rtol, pr.atol[0])
            assert got == pytest.approx(g(t, y), rel=1e-12, abs=1e-12), s
            assert K.FLOAT_TOLERANCE(p, t, y, rtol, pr.atol[0]) == pytest.approx(pr.float_tolerance(t, y), rel=1e-15)
            _set(c, p, False, FLOAT)
            evs = pr._float_events()
            assert len(evs) == 4  # two drifts, the rise, the edge (a current fall)
            di = K.FLOAT_TOLERANCE(p, t, y, rtol, pr.atol[0])
            for sign, ev in zip((1, -1), evs[:2], strict=True):
                want = ev(t, y)
                assert sign * K.FLOAT_RESIDUAL(p, t, y) - pr.land_residual == pytest.approx(
                    want, rel=1e-12, abs=1e-13 * c.i0), s
            assert K.FLOAT_RISE(p, t, y, rtol, pr.atol[0]) == pytest.approx(evs[2](t, y), rel=1e-12, abs=1e-12), s
            assert K.EDGE_MARGIN(p, t, y, di) == pytest.approx(evs[3](t, y), rel=1e-12, abs=1e-12), s
            checked += 1
    assert checked > 100
