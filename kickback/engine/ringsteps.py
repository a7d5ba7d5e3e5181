"""The detailed engine's ring after the first current zero: closed form where it fits, else stepped.

A ring is tried in closed form first (:func:`kickback.engine.linring.try_linear_ring`); where that
is refused it is stepped by the runner for a stretch (the length the attempt asks for), and the
closed form is tried again from the stretch's end.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

#: a stretch of a ring stepped between two closed-form attempts in fewer steps than this doubles
#: the next stretch
FEW_STEPS = 16


def stepped_ring(runner, attempt: Callable[[], tuple], events: Sequence, record, t_bound: float,
                 ended: Callable[[], bool] | None = None) -> tuple[bool, bool]:
    """Alternate closed-form attempts and stepped stretches until the ring ends.

    Parameters
    ----------
    runner : kickback.engine.detailed.PhaseRunner
    attempt : callable — one closed-form attempt from the runner's state, returning
        ``(done, bound_hit, retry)`` as :func:`kickback.engine.linring.try_linear_ring` does
    events : event functions of the stepped stretches (a terminal one ends the ring)
    record : callable ``record(event, times)`` of the events that fired
    t_bound : float — the run's time bound [s]
    ended : callable — whether the ring is over after a stepped stretch (None: only a terminal
        event or the bound ends it)

    Returns
    -------
    (done, bound_hit) : the closed form finished the ring (``bound_hit`` is then its own), else
        ``bound_hit`` is whether ``ended`` was still false when the stepping stopped.

    A stretch that took few steps (no ring left to resolve: a snubber capacitor draining
    slowly) costs less than the closed-form attempt after it: the next is twice as long as it
    (wide-range case 2352: 2 145 attempts 17 µs apart over 35 ms), or as the attempt asks if that
    is longer. Twice the stretch, not twice the attempt's length: attempts asking for a few
    picoseconds while the node leaves a knee, then for 20 periods of the ring, made the ring's
    first stretch 64 × 20 periods (wide-range case 5834: 0.06 s of a 12 kHz ring in one go, past
    the evaluation limit).
    """
    last = None  # the length [s] of the last stretch, when it took few steps
    while True:
        done, bound_hit, retry = attempt()
        if done:
            return True, bound_hit
        span = None if retry is None else retry if last is None else max(retry, 2.0 * last)
        t_start = runner.t
        t_stop = t_bound if span is None else min(t_bound, t_start + span)
        n_steps = len(runner.phases)
        sol = runner.run("ring", t_stop, events, record)
        steps = sum(len(p.t_steps) - 1 for p in runner.phases[n_steps:])
        last = runner.t - t_start if steps < FEW_STEPS else None
        over = ended is not None and ended()
        if sol.status == 1 or runner.t >= t_bound or over:
            return False, not over
