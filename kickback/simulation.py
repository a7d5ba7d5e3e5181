"""One turn-off from case to result: circuit, engine, figures, checks."""

from __future__ import annotations

from dataclasses import replace

from kickback.case import Case
from kickback.circuit import Circuit
from kickback.engine.detailed import DEFAULT_RTOL, integrate
from kickback.figures import compute_figures
from kickback.ratings import rating_checks
from kickback.result import Result


def simulate(case: Case, *, rtol: float = DEFAULT_RTOL, engine: str = "detailed") -> Result:
    """Simulate the turn-off of ``case``.

    Parameters
    ----------
    case : Case
    rtol : float — relative tolerance of the detailed engine
    engine : str — "detailed" (the reference engine) or "batch" (exact piecewise-linear
        solution, :mod:`kickback.engine.batch`; nonlinear laws as a stated fit). The batch
        engine is work in progress: not yet verified in full nor fast enough; use "detailed".

    Returns
    -------
    Result

    Raises
    ------
    CaseError — the case cannot be simulated as given (e.g. no path for the coil current)
    SolverError — the engine could not finish; the message says why
    """
    if engine == "batch":
        from kickback.batch_result import simulate_batch

        return simulate_batch(case)
    if engine != "detailed":
        raise ValueError(f"unknown engine {engine!r} (expected 'detailed' or 'batch')")
    pwm = ()
    extra_checks = []
    if case.drive is not None:
        pwm, extra_checks = _repetitive(case, rtol)
        if case.drive.final_turn_off:
            # the last turn-off starts from the highest steady-state current
            peak = max(p.max_current_A for p in pwm)
            case = replace(case, coil=replace(case.coil, initial_current=peak))
    circuit = Circuit(case)
    waveforms = integrate(circuit, rtol=rtol)
    figures = compute_figures(waveforms)
    checks = rating_checks(case, figures) + extra_checks
    return Result(case, figures, tuple(checks), waveforms, pwm)


def _repetitive(case: Case, rtol: float):
    """Steady state at every duty of the case's [drive]: figures and their checks."""
    from kickback.engine.periodic import steady_state
    from kickback.pwmfigures import pwm_figures
    from kickback.ratings import pwm_checks

    circuit = Circuit(case)
    out, checks = [], []
    for duty in case.drive.duties:
        pf = pwm_figures(steady_state(circuit, duty, case.drive.frequency, rtol=rtol))
        out.append(pf)
        checks += pwm_checks(case, pf)
    return tuple(out), checks
