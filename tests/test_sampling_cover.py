"""A waveform sample that no solved phase holds is refused, never filled with uninitialised memory
(issue 14: a ring grid ending one rounding step past its phase once gave a ledger residual of 0.999)."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from kickback.engine.sampling import sample_run
from kickback.errors import SolverError


def _phase(t0, t1):
    # a made-up phase: exp(-t) on its own steps; only the fields sample_run reads before the derived signals
    return SimpleNamespace(t0=t0, t1=t1, t_steps=np.linspace(t0, t1, 5), pin=None,
                           sol=lambda t: np.exp(-np.atleast_1d(t))[None, :])


def test_a_sample_outside_every_phase_is_refused():
    c = SimpleNamespace(n_states=1, active_chains=(), capacitive=True)
    # the event time 2.5 lies in the gap between the two phases [0, 1] and [3, 4]
    with pytest.raises(SolverError, match="outside every solved phase"):
        sample_run(c, [_phase(0.0, 1.0), _phase(3.0, 4.0)], {"x": 2.5}, [], False, 1e-6, 0, 0)
