"""One turn-off from case to result: circuit, engine, figures, checks."""

from __future__ import annotations

from dataclasses import replace

from kickback.case import Case
from kickback.circuit import Circuit
from kickback.engine.detailed import DEFAULT_RTOL, integrate
from kickback.figures import compute_figures
from kickback.ratings import rating_checks, with_switch_findings
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
    start = None
    if case.drive is not None:
        pwm, extra_checks, steady = _repetitive(case, rtol)
        if case.drive.final_turn_off:
            # the last turn-off starts from the full periodic state at the turn-off instant of the
            # duty with the highest current there: current, capacitor voltages, motor speed and
            # the junctions' Foster stages
            from kickback.final_turnoff import PeriodicStart, thermal_start, turnoff_duty

            ss = turnoff_duty(steady)
            circuit = PeriodicStart(case, ss)
            case = circuit.case
            start = (ss, thermal_start(ss))
    if start is None:
        circuit = Circuit(case)
    waveforms = integrate(circuit, rtol=rtol)
    figures = compute_figures(waveforms)
    if start is not None:
        from kickback.final_turnoff import junctions_from

        ss, thermal = start
        figures = junctions_from(figures, waveforms, thermal)
        figures = replace(figures, models=figures.models + (
            f"final turn-off from the periodic steady state at duty {ss.duty:g}, at its turn-off instant "
            "(coil current, capacitor voltages, motor speed and junction temperatures of that instant)",))
    figures = with_switch_findings(case, figures)
    checks = rating_checks(case, figures) + extra_checks
    return Result(case, figures, tuple(checks), waveforms, pwm)


def _repetitive(case: Case, rtol: float):
    """Steady state at every duty of the case's [drive]: figures, their checks and the steady states."""
    from kickback.engine.periodic import steady_state
    from kickback.pwmfigures import pwm_figures
    from kickback.ratings import pwm_checks

    circuit = Circuit(case)
    out, checks, steady = [], [], []
    for duty in case.drive.duties:
        ss = steady_state(circuit, duty, case.drive.frequency, rtol=rtol)
        pf = pwm_figures(ss)
        steady.append(ss)
        out.append(pf)
        checks += pwm_checks(case, pf)
    return tuple(out), checks, steady
