"""The periodic steady state's fallback from the compiled cycles to scipy's (project rule, no
outside source: a failure of the compiled path is never reported where scipy's path converges).

Wide-range case 4711 (a [drive] with a diode + Zener across the coil) converged with its cycles on
scipy's Radau and not on the compiled stepping, whose cycle map agrees to ~2e-7 of the states'
scales: Newton's path through the two maps differed. Solving it again on scipy costs what it
costs; here the rule itself is checked with the iteration replaced.
"""

from __future__ import annotations

import pytest

from kickback.engine import periodic
from kickback.errors import SolverError


def _fake(calls, fail_on):
    def run(c, duty, frequency, *, rtol=None, x_guess=None):
        mode = periodic._CYCLE_MODE[0]
        calls.append(mode)
        if mode in fail_on:
            raise SolverError(f"did not converge ({mode})")
        return f"steady state ({mode})"
    return run


def test_a_failure_on_compiled_cycles_is_solved_again_on_scipy(monkeypatch):
    monkeypatch.delenv("KICKBACK_KERNEL", raising=False)
    calls = []
    monkeypatch.setattr(periodic, "_steady_state", _fake(calls, fail_on={None}))
    assert periodic.steady_state(None, 0.5, 1e3) == "steady state (off)"
    assert calls == [None, "off"]
    assert periodic._CYCLE_MODE[0] is None  # the override does not outlive the retry


def test_both_failing_reports_the_scipy_failure(monkeypatch):
    monkeypatch.delenv("KICKBACK_KERNEL", raising=False)
    calls = []
    monkeypatch.setattr(periodic, "_steady_state", _fake(calls, fail_on={None, "off"}))
    with pytest.raises(SolverError, match=r"\(off\)"):
        periodic.steady_state(None, 0.5, 1e3)
    assert periodic._CYCLE_MODE[0] is None


@pytest.mark.parametrize("env", ["0", "off", "scipy"])
def test_no_retry_when_the_cycles_are_on_scipy_already(monkeypatch, env):
    monkeypatch.setenv("KICKBACK_KERNEL", env)
    calls = []
    monkeypatch.setattr(periodic, "_steady_state", _fake(calls, fail_on={None}))
    with pytest.raises(SolverError):
        periodic.steady_state(None, 0.5, 1e3)
    assert calls == [None]


def test_one_cycle_follows_the_override(monkeypatch):
    # the runner one_cycle builds takes the override before the environment
    monkeypatch.delenv("KICKBACK_KERNEL", raising=False)
    seen = []
    real = periodic.PhaseRunner

    class Spy(real):
        def run(self, *a, **k):
            seen.append(self.kernel)
            raise SolverError("stop")

    monkeypatch.setattr(periodic, "PhaseRunner", Spy)
    from kickback.caseio import load_case
    from kickback.circuit import Circuit

    c = Circuit(load_case("cases/valve_pwm_hold.toml"))
    x0 = c.initial_state()[: c.ie]
    for override, want in ((None, "compiled"), ("off", "off")):
        periodic._CYCLE_MODE[0] = override
        try:
            with pytest.raises(SolverError):
                periodic.one_cycle(c, x0, 0.5, c.case.drive.frequency, 1e-8, fast=False)
        finally:
            periodic._CYCLE_MODE[0] = None
        assert seen[-1] == want
