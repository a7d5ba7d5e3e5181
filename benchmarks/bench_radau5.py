"""Time kickback's compiled Radau IIA (kickback.engine.radau5) against scipy's Radau, same run.

Run from the repository top:  PYTHONPATH=$PWD python benchmarks/bench_radau5.py [--repeat N]

Problems: Robertson's kinetics to t = 1e5, Van der Pol (eps = 1e-6) to t = 2, and a coil turning
off into a Shockley diode clamp (demo data: 24 V, 80 mH, 30 Ω, clamp 0.85 V at 1 A, n = 1.9,
50 mΩ): L di/dt = -R i - v_clamp(i), with the resistor and clamp energies as extra states and
events at 10 %, 1 % and a terminal 1e-9 of the initial current. scipy gets the same compiled
right-hand side and Jacobian (called through numba's dispatcher), so the ratio measures the
integrator. Times are the best of N runs after one warm-up (compile excluded; cached on disk).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from kickback.engine.radau5 import njit_events, njit_jac, njit_rhs, solve

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from radau5_problems import rober, rober_jac, vdp, vdp_jac  # noqa: E402  (the test problems, written once)

VT = 0.025693  # [V] thermal voltage at 25 °C


@njit_rhs
def coil(t, y, p):
    L, R, nvt, i_s, rs = p[0], p[1], p[2], p[3], p[4]
    i = y[0]
    v = (nvt * np.log1p(i / i_s) if i >= 0.0 else nvt * i / i_s) + rs * i
    out = np.empty(3)
    out[0] = (-R * i - v) / L
    out[1] = R * i * i  # energy in the coil resistance
    out[2] = v * i  # energy in the clamp
    return out


@njit_jac
def coil_jac(t, y, p):
    L, R, nvt, i_s, rs = p[0], p[1], p[2], p[3], p[4]
    i = y[0]
    v = (nvt * np.log1p(i / i_s) if i >= 0.0 else nvt * i / i_s) + rs * i
    dv = (nvt / (i_s + i) if i >= 0.0 else nvt / i_s) + rs
    J = np.zeros((3, 3))
    J[0, 0] = (-R - dv) / L
    J[1, 0] = 2.0 * R * i
    J[2, 0] = v + i * dv
    return J


@njit_events
def coil_events(t, y, p):
    out = np.empty(3)
    out[0] = y[0] - 0.1 * p[5]
    out[1] = y[0] - 0.01 * p[5]
    out[2] = y[0] - 1e-9 * p[5]
    return out


def _coil_params():
    L, R, Vs = 0.08, 30.0, 24.0
    n, vf, i_at, rs = 1.9, 0.85, 1.0, 0.05
    i_s = i_at / np.expm1((vf - rs * i_at) / (n * VT))  # saturation current from the terminal point
    return np.array([L, R, n * VT, i_s, rs, Vs / R])


def problems():
    pc = _coil_params()
    i0 = pc[5]
    e0 = 0.5 * pc[0] * i0 ** 2
    return [
        ("Robertson, t to 1e5", rober, rober_jac, None, (0.0, 1e5), np.array([1.0, 0.0, 0.0]), np.zeros(0),
         1e-6, np.full(3, 1e-10)),
        ("Van der Pol, eps 1e-6", vdp, vdp_jac, None, (0.0, 2.0), np.array([2.0, 0.0]), np.array([1e-6]),
         1e-6, np.full(2, 1e-6)),
        ("coil + diode clamp", coil, coil_jac, coil_events, (0.0, 60 * pc[0] / pc[1]), np.array([i0, 0.0, 0.0]),
         pc, 1e-6, np.array([1e-12 * i0, 1e-12 * e0, 1e-12 * e0])),
    ]


def _best(fn, repeat):
    best = np.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def _scipy_events(ev, p):
    evs = []
    for k, term in enumerate((False, False, True)):
        def g(t, y, k=k):
            return ev(t, y, p)[k]
        g.direction, g.terminal = -1, term
        evs.append(g)
    return evs


def run_one(name, f, jac, ev, span, y0, p, rtol, atol, repeat):
    """Time both solvers on one problem and print a table row."""
    kw = {} if ev is None else dict(events=ev, directions=[-1, -1, -1], terminal=[0, 0, 1])
    scipy_ev = None if ev is None else _scipy_events(ev, p)

    def ours():
        return solve(f, jac, span, y0, p, rtol=rtol, atol=atol, **kw)

    def theirs():
        return solve_ivp(lambda t, y: f(t, y, p), span, y0, method="Radau", rtol=rtol, atol=atol,
                         jac=lambda t, y: jac(t, y, p), events=scipy_ev)

    ours()
    theirs()
    t_ours, r = _best(ours, repeat)
    t_scipy, s = _best(theirs, repeat)
    assert r.status >= 0 and s.status >= 0, (r.message, s.message)
    dy = np.max(np.abs(r.y[:, -1] - s.y[:, -1]) / (atol + rtol * np.abs(s.y[:, -1])))
    print(f"{name:24s} {1e3 * t_ours:9.3f} {1e3 * t_scipy:9.2f} {t_scipy / t_ours:6.0f}× "
          f"{r.counts['n_accepted']:5d}/{len(s.t) - 1:<5d} {dy:17.2g}")
    if ev is not None:
        dt = max(abs(a[0] - b[0]) for a, b in zip(r.t_events, s.t_events, strict=True))
        L, i0 = p[0], p[5]
        e0, e_end = 0.5 * L * i0 ** 2, 0.5 * L * r.y[0, -1] ** 2
        ledger = (e0 - e_end - r.y[1, -1] - r.y[2, -1]) / e0
        print(f"{'':24s} events: largest time difference to scipy {dt:.1e} s; "
              f"energy ledger residual (ours) {ledger:.1e}")
    return t_ours


def check_costs(name, f, jac, ev, span, y0, p, rtol, atol, repeat):
    """Time our solver with each residual-check mode (0 none, 1 kept Jacobian, 2 end Jacobian)."""
    kw = {} if ev is None else dict(events=ev, directions=[-1, -1, -1], terminal=[0, 0, 1])
    cells = []
    for mode in (0, 1, 2):
        def run(mode=mode):
            return solve(f, jac, span, y0, p, rtol=rtol, atol=atol, residual_check=mode, **kw)
        run()
        t, r = _best(run, repeat)
        cells.append(f"{1e3 * t:8.3f} ms {r.counts['n_accepted']:4d} steps {r.counts['njev']:4d} jac")
    print(f"{name:24s} " + " | ".join(cells))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    print(f"{'problem':24s} {'ours ms':>9s} {'scipy ms':>9s} {'ratio':>7s} {'steps':>11s} {'max |Δy_end|/tol':>17s}")
    for prob in problems():
        run_one(*prob, args.repeat)
    print("\nresidual check: mode 0 (none) | mode 1 (kept Jacobian) | mode 2 (end Jacobian, default)")
    for prob in problems():
        check_costs(*prob, args.repeat)


if __name__ == "__main__":
    main()
