"""The samples of a tolerance study: drawn block by block from ``SeedSequence.spawn`` children (so
any rows can be drawn alone, where a chunk runs), and run as variations of the case."""

from __future__ import annotations

import numpy as np

from kickback import parallel
from kickback.case import Case
from kickback.models.passive import COPPER_ZERO_K, copper_resistance

#: draws per random block (one SeedSequence child each); fixed, so the samples never depend on
#: the workers, the executor or ``chunk``
DRAW_BLOCK = 10_000


def sample(case: Case, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` draws of every toleranced value, shape (n, k) [SI]; normal draws are kept inside the
    physical range by redrawing the few that cross zero (a coil temperature: copper's zero-resistance
    point, IEC 60028)."""
    cols = []
    for tol in case.tolerances:
        if tol.distribution == "uniform":
            x = rng.uniform(tol.low, tol.high, n)
        else:
            mid, sd = 0.5 * (tol.low + tol.high), 0.5 * (tol.high - tol.low) / tol.k_sigma
            x = rng.normal(mid, sd, n)
            # keep the draws physical: above 0, or above copper's zero-resistance point
            floor = COPPER_ZERO_K if tol.path == "coil_temperature" else 0.0
            bad = x <= floor
            while bad.any():
                x[bad] = rng.normal(mid, sd, int(bad.sum()))
                bad = x <= floor
        cols.append(x)
    return np.column_stack(cols) if cols else np.zeros((n, 0))


def draw(case: Case, n: int, seed: int) -> np.ndarray:
    """``n`` draws of every toleranced value (:func:`sample`), shape (n, k) [SI], block by block:
    block j of :data:`DRAW_BLOCK` draws uses child j of ``SeedSequence(seed).spawn`` (see
    :func:`kickback.parallel.chunk_seeds`), so the numbers depend on ``seed`` and ``n`` only."""
    seeds = parallel.chunk_seeds(seed, n, DRAW_BLOCK)
    parts = [sample(case, g.stop - g.start, np.random.default_rng(s))
             for g, s in zip(parallel.groups(n, DRAW_BLOCK), seeds, strict=False)]
    return np.vstack(parts) if parts else np.zeros((0, len(case.tolerances)))


def draw_rows(case: Case, n: int, seed: int, start: int, stop: int) -> np.ndarray:
    """Rows ``start:stop`` of :func:`draw` ``(case, n, seed)``, drawing only the blocks that hold them
    (block j: child j of ``SeedSequence(seed).spawn``)."""
    if stop <= start:
        return np.zeros((0, len(case.tolerances)))
    first, last = start // DRAW_BLOCK, (stop - 1) // DRAW_BLOCK
    seeds = np.random.SeedSequence(seed).spawn(last + 1)
    parts = [sample(case, min(DRAW_BLOCK, n - j * DRAW_BLOCK), np.random.default_rng(seeds[j]))
             for j in range(first, last + 1)]
    return np.vstack(parts)[start - first * DRAW_BLOCK: stop - first * DRAW_BLOCK]


def variations_of(case: Case, matrix) -> dict:
    """The rows of ``matrix`` (one column per toleranced value) as variations of ``case`` by key
    path; the coil temperature scales the (toleranced) coil resistance as :func:`apply` does."""
    matrix = np.atleast_2d(np.asarray(matrix, float))
    out: dict = {}
    temperature = None
    for j, tol in enumerate(case.tolerances):
        if tol.path == "coil_temperature":
            temperature = (matrix[:, j], tol.reference)
        else:
            out[".".join(p.strip() for p in tol.path.split("."))] = matrix[:, j]
    if temperature is not None:
        r = out.get("coil.resistance", np.full(matrix.shape[0], case.coil.resistance))
        out["coil.resistance"] = copper_resistance(r, temperature[0], temperature[1])
    return out


def evaluate(case: Case, matrix: np.ndarray, *, engine: str = "detailed", workers: int = 1, progress=None,
             chunk: int | None = None):
    """Figures, checks and verdicts of every row of ``matrix``
    (:class:`kickback.studies.points.Points`)."""
    from kickback.studies.points import evaluate as run

    return run(case, variations_of(case, matrix), engine=engine, workers=workers, progress=progress, chunk=chunk)
