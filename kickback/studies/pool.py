"""Run a picklable function over many inputs, in worker processes when asked, in order."""

from __future__ import annotations


def map_points(func, items: list, *, workers: int = 1, progress=None, chunksize: int | None = None) -> list:
    """``[func(x) for x in items]``, in ``workers`` processes when more than one; ``progress(n_done)``
    is called as results arrive (in order)."""
    out = []
    if workers > 1 and len(items) > 1:
        from concurrent.futures import ProcessPoolExecutor

        size = chunksize or max(1, len(items) // (16 * workers))
        with ProcessPoolExecutor(max_workers=workers) as pool:
            for k, res in enumerate(pool.map(func, items, chunksize=size)):
                out.append(res)
                if progress:
                    progress(k + 1)
        return out
    for k, x in enumerate(items):
        out.append(func(x))
        if progress:
            progress(k + 1)
    return out
