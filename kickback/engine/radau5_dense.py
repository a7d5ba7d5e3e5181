"""Dense output of a Radau IIA run, callable like scipy's ``OdeSolution``.

Each accepted step of :func:`kickback.engine.radau5.solve` keeps the coefficients of its
collocation polynomial :math:`u(t_{k-1} + \\theta h_k) = y_{k-1} + \\sum_{j=1}^{3} D_{kj}\\,\\theta^j`
(Hairer & Wanner, Solving ODEs II, 2nd ed. 1996, §IV.5, the continuous output of a collocation
method). :class:`DenseSolution` evaluates them at one time or at an array of times, and two runs
can be joined at a step boundary (a stretch integrated again).
"""

from __future__ import annotations

import numpy as np


class DenseSolution:
    """The collocation polynomials of consecutive steps.

    Parameters
    ----------
    ts : ndarray
        Step ends, ``ts[0]`` the start (N,). After a terminal event the last entry is the
        event's time, inside its step.
    ys : ndarray
        State at the step starts, shape (n, N) (``ys[:, k-1]`` starts step k).
    hs : ndarray
        Length of each step's polynomial (``hs[0]`` unused), (N,).
    dense : ndarray
        Polynomial coefficients, shape (N, 3, n) (``dense[0]`` unused).

    Calling it with a scalar time returns the state (n,); with an array of m times, (n, m) —
    as scipy's ``OdeSolution`` does. Times outside [ts[0], ts[-1]] are extrapolated from the
    first or last step (as scipy does).
    """

    def __init__(self, ts, ys, hs, dense):
        self.ts = np.asarray(ts, dtype=float)
        self.ys = np.asarray(ys, dtype=float)
        self.hs = np.asarray(hs, dtype=float)
        self.dense = np.asarray(dense, dtype=float)
        self.t_min, self.t_max = float(self.ts[0]), float(self.ts[-1])

    @property
    def n_steps(self) -> int:
        return self.ts.size - 1

    def __call__(self, t):
        t_arr = np.asarray(t, dtype=float)
        tt = np.atleast_1d(t_arr).ravel()
        if self.ts.size < 2:
            out = np.repeat(self.ys[:, :1], tt.size, axis=1)
        else:
            k = np.clip(np.searchsorted(self.ts, tt, side="left"), 1, self.ts.size - 1)
            theta = (tt - self.ts[k - 1]) / self.hs[k]
            d = self.dense[k]  # (m, 3, n)
            out = (self.ys[:, k - 1] + (d[:, 0, :] * theta[:, None] + d[:, 1, :] * (theta ** 2)[:, None]
                                        + d[:, 2, :] * (theta ** 3)[:, None]).T)
        return out[:, 0] if t_arr.ndim == 0 else out

    def replace_tail(self, k: int, other: DenseSolution) -> DenseSolution:
        """A solution made of the first ``k`` steps of this one and then every step of
        ``other``, which must start at ``ts[k]``."""
        if not (0 <= k <= self.n_steps) or other.ts[0] != self.ts[k]:
            raise ValueError(f"cannot join: the other run starts at {other.ts[0]!r}, step {k} ends at "
                             f"{self.ts[min(max(k, 0), self.n_steps)]!r}")
        return DenseSolution(np.concatenate([self.ts[:k + 1], other.ts[1:]]),
                             np.concatenate([self.ys[:, :k + 1], other.ys[:, 1:]], axis=1),
                             np.concatenate([self.hs[:k + 1], other.hs[1:]]),
                             np.concatenate([self.dense[:k + 1], other.dense[1:]]))
