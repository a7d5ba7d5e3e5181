"""Events that scipy's ``solve_ivp`` brackets on the same values it detected them with.

``solve_ivp`` detects an event's sign change from its values at the steps' end states, and then
locates the root with ``brentq`` on the dense output ``sol(t)``. At a step's end, ``sol(t)``
differs from the end state by rounding (the collocation polynomial summed at x = 1). An event
function that is flat against the states but sensitive to that rounding — the affine model's
defect (:func:`kickback.engine.linphase.linear_event`) subtracts rates of ~10⁹ V/s that cancel,
so one ulp of the node voltage moves it by a few % — can change sign on the detection and not
on the bracket: ``brentq`` then stops with "f(a) and f(b) must have different signs" (wide-range
cases 3977, 5317 and 8129: a [drive] on phase with a varistor across the coil). Here each event
answers a repeated time with the value it gave there first, so the bracket's ends carry the very
values the sign change was seen in, and ``brentq`` always has its bracket.

References
----------
scipy.integrate.solve_ivp, its event handling (``find_active_events``, ``solve_event_equation``);
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4 (the
root finder needs a bracket with a sign change).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

#: step-end values each event remembers (the bracket's two ends and brentq's own iterates)
MEMORY = 4


class BracketedEvent:
    """``g(t, y)`` for ``solve_ivp`` that returns, at a time it was called at before, the value it
    gave then (scipy calls it at each step's end state, then at ``sol(t)`` for the same times).

    Parameters
    ----------
    g : callable
        The event function, ``g(t, y) -> float``; its ``terminal`` and ``direction`` are copied.
    """

    def __init__(self, g: Callable[[float, np.ndarray], float]):
        self.g = g
        self.terminal = getattr(g, "terminal", False)
        self.direction = getattr(g, "direction", 0.0)
        self._seen: dict[float, float] = {}

    def __call__(self, t: float, y: np.ndarray) -> float:
        t = float(t)
        if t in self._seen:
            return self._seen[t]
        value = self.g(t, y)
        if len(self._seen) >= MEMORY:
            del self._seen[next(iter(self._seen))]  # the oldest (dicts keep insertion order)
        self._seen[t] = value
        return value


def bracketed(events: list) -> list[BracketedEvent]:
    """Each of ``events`` wrapped in a :class:`BracketedEvent` (a fresh memory per solve)."""
    return [BracketedEvent(g) for g in events]
