"""Benchmark of the detailed engine: speed and accuracy, beside a hand-written solve_ivp.

Run:  python benchmarks/bench.py [--quick]

For each demo case it prints the median engine time, the error of the figures against a tight
reference solve (rtol 1e-10), and the same circuit integrated as a user would by hand: one
``solve_ivp`` call over the whole transient at the defaults (RK45 with a wall-clock limit,
LSODA) on the dynamic states, energies afterwards by the trapezoidal rule on a fine output
grid, then tightened (rtol, then the grid) until it matches our accuracy: energy balance
≤ 1e-6 and figures within 1e-5 of the reference. Ratios are measured in the same run, so
a noisy machine shifts both sides alike. Targets are printed beside the measured values.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.simulation import simulate

CASES = Path(__file__).resolve().parent.parent / "cases"
DEMOS = ["irrigation_valve", "relay_board", "conveyor_brake", "unclamped_mosfet", "motor_snubber",
         "contactor_varistor"]
KEYS = ("peak_voltage_V", "to_zero_s", "resistance_energy_J", "supply_energy_J", "crossover_energy_J",
        "avalanche_energy_J")


class _Timeout(Exception):
    pass


def _figure_vector(f) -> dict[str, float]:
    out = {k: getattr(f, k) for k in KEYS}
    out["clamp_energy_J"] = sum(c.energy_J for c in f.clamps)
    return out


def rel_error(a: dict, ref: dict, floor: float) -> float:
    """Largest relative difference over the figures (absolute floor for energies near zero)."""
    err = 0.0
    for k, r in ref.items():
        x = a.get(k)
        if r is None or x is None:
            continue
        scale = max(abs(r), floor if k.endswith("_J") else 1e-30)
        err = max(err, abs(x - r) / scale)
    return err


def time_engine(case: Case, rtol: float, repeat: int) -> tuple[float, object]:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        res = simulate(case) if rtol is None else simulate(case, rtol=rtol)
        times.append(time.perf_counter() - t0)
    return statistics.median(times), res


def _baseline_figures(c: Circuit, y0, t, y, e):
    """Figures and energy balance of a hand-written solve (states y at times t, energies e)."""
    i0 = c.i0
    v = y[1] if c.capacitive else np.array([c.node_voltage(tk, y[:, k]) for k, tk in enumerate(t)])
    stored = 0.5 * c.L * i0 * i0 + float(c.capacitor_energy(c.on.node_voltage, y0))
    left = float(c.capacitor_energy(v[-1], y[:, -1])) + 0.5 * c.L * y[0, -1] ** 2
    balance = (stored + e[1] - e[0] - e[2:].sum() - left) / (stored + max(e[1], 0.0))
    below = np.nonzero(y[0] <= 1e-9 * i0)[0]
    t_zero = None
    if below.size:
        k = int(below[0])
        t_zero = float(t[k - 1] + (t[k] - t[k - 1]) * (y[0, k - 1] - 1e-9 * i0) / (y[0, k - 1] - y[0, k]))
    figs = {"peak_voltage_V": float(v.max()), "to_zero_s": t_zero, "resistance_energy_J": float(e[0]),
            "supply_energy_J": float(e[1]), "crossover_energy_J": float(e[2]), "avalanche_energy_J": float(e[3]),
            "clamp_energy_J": float(e[5:5 + len(c.energy_slots)].sum())}
    return figs, float(balance)


def hand_written(case: Case, t_end: float, method: str, rtol=1e-3, atol=1e-6, wall: float = 10.0,
                 n_eval: int = 20001):
    """The circuit as a user would solve it by hand: one solve_ivp over [0, t_end] on the
    dynamic states only (coil current, node and capacitor voltages), no phase split, events,
    Jacobian or per-state tolerances; energies afterwards by the trapezoidal rule on an
    ``n_eval``-point output grid.

    Returns (seconds, figures dict or None, energy balance, note).
    """
    c = Circuit(case)
    y0 = c.initial_state()
    nd = c.ie
    start = time.perf_counter()
    reached = [0.0]
    pad = np.zeros(c.n_states)

    def fun(t, y):
        reached[0] = t
        if time.perf_counter() - start > wall:
            raise _Timeout
        pad[:nd] = y
        return c.rhs(t, pad)[:nd]

    t_eval = np.linspace(0.0, t_end, n_eval)
    try:
        sol = solve_ivp(fun, (0.0, t_end), y0[:nd], method=method, rtol=rtol, atol=atol, t_eval=t_eval)
    except _Timeout:
        dt = time.perf_counter() - start
        return dt, None, None, f"stalled: covered {reached[0]:.3g} s of {t_end:.3g} s in {dt:.0f} s"
    if not sol.success:
        return time.perf_counter() - start, None, None, f"failed: {sol.message}"
    y = np.zeros((c.n_states, sol.t.size))
    y[:nd] = sol.y
    power = np.array([c.rhs(t, y[:, k])[nd:] for k, t in enumerate(sol.t)]).T
    e = np.trapezoid(power, sol.t, axis=1)
    dt = time.perf_counter() - start
    figs, balance = _baseline_figures(c, y0, sol.t, y, e)
    return dt, figs, float(balance), f"{sol.t.size} points"


def hand_written_states(case: Case, t_end: float, method: str, rtol=1e-3, atol=1e-6, wall: float = 10.0):
    """A careful hand-written solve: one solve_ivp over [0, t_end] with the energies carried as
    states (our model's equations), no phase split, events or Jacobian.

    Returns (seconds, figures dict or None, energy balance, note).
    """
    c = Circuit(case)
    y0 = c.initial_state()
    start = time.perf_counter()
    reached = [0.0]

    def fun(t, y):
        reached[0] = t
        if time.perf_counter() - start > wall:
            raise _Timeout
        return c.rhs(t, y)

    try:
        sol = solve_ivp(fun, (0.0, t_end), y0, method=method, rtol=rtol, atol=atol)
    except _Timeout:
        dt = time.perf_counter() - start
        return dt, None, None, f"stalled: covered {reached[0]:.3g} s of {t_end:.3g} s in {dt:.0f} s"
    dt = time.perf_counter() - start
    if not sol.success:
        return dt, None, None, f"failed: {sol.message}"
    figs, balance = _baseline_figures(c, y0, sol.t, sol.y, sol.y[c.ie:, -1])
    return dt, figs, float(balance), f"{sol.t.size} steps"


def tightened(case, t_end, ref, floor, method: str, target_err=1e-5, target_bal=1e-6, states=False):
    """Tighten a hand-written solve until it matches our accuracy; (seconds, rtol) or (None, note)."""
    for n_eval in ((0,) if states else (20001, 200001)):
        for k in range(5, 12):
            rtol = 10.0 ** -k
            if states:
                dt, figs, bal, note = hand_written_states(case, t_end, method, rtol=rtol, atol=rtol * 1e-6,
                                                          wall=60.0)
            else:
                dt, figs, bal, note = hand_written(case, t_end, method, rtol=rtol, atol=rtol * 1e-6, wall=60.0,
                                                   n_eval=n_eval)
            if figs is None:
                break
            if abs(bal) <= target_bal and rel_error(figs, ref, floor) <= target_err:
                return dt, f"rtol {rtol:g}" + ("" if states else f", {n_eval} pts")
    return None, "not reached (rtol 1e-11, 2e5 points)"


def ideal_case() -> Case:
    """Constant-drop diode + Zener, instant ideal switch: has a closed form (first-order RL)."""
    d = Element("diode", model="constant-drop", forward_voltage=0.7)
    z = Element("zener", voltage=30.0)
    return Case("ideal diode + Zener (demo data)", Supply(24.0), Coil(0.08, 30.0), Switch("ideal"),
                (Clamp("D+Z", "coil", (d, z)),))


def closed_form_error(res) -> float:
    """Error of the ideal case against i(t) = (i0 + Vc/R)e^(−tR/L) − Vc/R (first-order RL)."""
    L, R, vc, i0 = 0.08, 30.0, 30.7, 0.8
    tau = L / R
    t0 = tau * np.log(1 + R * i0 / vc)
    q = (i0 + vc / R) * tau * (1 - np.exp(-t0 / tau)) - vc / R * t0
    f = res.figures
    return max(abs(f.to_zero_s - t0) / t0, abs(f.clamps[0].energy_J - vc * q) / (vc * q),
               abs(f.peak_voltage_V - (24.0 + vc)) / (24.0 + vc))


def cold_start_seconds(case_path: Path, out_dir: Path) -> float:
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "kickback.cli", "run", str(case_path), "--out", str(out_dir)],
                   capture_output=True, check=False)
    return time.perf_counter() - t0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats, no stalled-RK45 demonstration")
    args = ap.parse_args(argv)
    repeat = 3 if args.quick else 7
    print(f"kickback detailed-engine benchmark (median of {repeat} runs; errors vs a tight rtol 1e-10 solve)")
    print(f"{'case':20s} {'ours':>9s} {'fig err':>8s} {'balance':>8s} | {'A: LSODA dflt':>13s} {'bal err':>8s}"
          f" {'A: tightened':>14s} | {'B: tightened (energy states)':>30s} {'B/ours':>7s}")
    medians = []
    ratios = []
    for name in DEMOS:
        case = load_case(CASES / f"{name}.toml")
        t_ours, res = time_engine(case, None, repeat)
        _, ref_res = time_engine(case, 1e-10, 1)
        ref = _figure_vector(ref_res.figures)
        floor = 1e-6 * ref_res.figures.stored_energy_J
        err = rel_error(_figure_vector(res.figures), ref, floor)
        t_end = ref_res.figures.end_time_s
        t_l, figs_l, bal_l, note_l = hand_written(case, t_end, "LSODA")
        lsoda = f"{t_l * 1e3:10.0f} ms" if figs_l else note_l[:13]
        bal_txt = f"{abs(bal_l):8.1e}" if bal_l is not None else "     n/a"
        t_a, note_a = tightened(case, t_end, ref, floor, "LSODA")
        a_txt = f"{t_a * 1e3:11.0f} ms" if t_a is not None else "not reached"
        best = None
        for method in ("LSODA", "Radau"):
            t_h, note_h = tightened(case, t_end, ref, floor, method, states=True)
            if t_h is not None and (best is None or t_h < best[0]):
                best = (t_h, f"{method} {note_h}")
        if best:
            ratio = best[0] / t_ours
            ratios.append(ratio)
            hand = f"{best[0] * 1e3:5.0f} ms {best[1]:>20s}"
            sp = f"{ratio:6.2f}x"
        else:
            hand, sp = "not reached", "   —"
        medians.append(t_ours)
        print(f"{name:20s} {t_ours * 1e3:6.1f} ms {err:8.1e} {abs(res.figures.energy_balance_error):8.1e} | "
              f"{lsoda:>13s} {bal_txt} {a_txt:>14s} | {hand:>30s} {sp:>7s}")
    ic = ideal_case()
    t_i, res_i = time_engine(ic, None, repeat)
    print(f"\nideal diode + Zener vs first-order RL closed form: error {closed_form_error(res_i):.1e}, "
          f"{t_i * 1e3:.1f} ms")
    if not args.quick:
        case = load_case(CASES / "irrigation_valve.toml")
        dt, _, _, note = hand_written(case, 0.0035, "RK45", wall=10.0)
        print(f"hand-written RK45 (A) at its defaults on irrigation_valve: {note}")
        dt, _, _, note = hand_written_states(case, 0.0035, "RK45", wall=10.0)
        print(f"hand-written RK45 (B) at its defaults on irrigation_valve: {note}")
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        cold = cold_start_seconds(CASES / "irrigation_valve.toml", Path(tmp))
    print(f"\nmedian engine time over demo cases: {statistics.median(medians) * 1e3:.1f} ms "
          f"(target <= 50 ms, goal 20 ms)")
    if ratios:
        med = statistics.median(ratios)
        print(f"B (careful hand-written, energies as states) time / ours at equal accuracy: median {med:.2f}x,"
              f" min {min(ratios):.2f}x (target >= 5x)")
    print(f"kickback run with plot, cold start: {cold:.2f} s (target <= 2 s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
