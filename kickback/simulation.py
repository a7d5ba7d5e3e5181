"""One turn-off from case to result: circuit, engine, figures, checks."""

from __future__ import annotations

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
    engine : str — "detailed" (the reference engine)

    Returns
    -------
    Result

    Raises
    ------
    CaseError — the case cannot be simulated as given (e.g. no path for the coil current)
    SolverError — the engine could not finish; the message says why
    """
    if engine != "detailed":
        raise ValueError(f"unknown engine {engine!r} (expected 'detailed')")
    circuit = Circuit(case)
    waveforms = integrate(circuit, rtol=rtol)
    figures = compute_figures(waveforms)
    checks = rating_checks(case, figures)
    return Result(case, figures, tuple(checks), waveforms)
