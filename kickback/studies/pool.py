"""Run a picklable function over many inputs, in order, through the one executor
(:mod:`kickback.parallel`)."""

from __future__ import annotations

from kickback.parallel import map_ordered


def map_points(func, items: list, *, workers: int = 1, progress=None, chunksize: int | None = None) -> list:
    """``[func(x) for x in items]`` on the current executor, else in ``workers`` processes of the
    persistent pool when more than one; ``progress(n_done)`` is called as results arrive (in order)."""
    return map_ordered(func, items, workers=workers, progress=progress, group=chunksize)
