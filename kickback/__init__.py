"""kickback: turn-off transients of transistor-switched inductive loads."""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__", "load_case", "simulate", "simulate_many"]


def load_case(path_or_text, **options):
    """Load a case from a TOML file path or from TOML text; see :func:`kickback.caseio.load_case`."""
    from kickback.caseio import load_case as _load

    return _load(path_or_text, **options)


def simulate(case, **options):
    """Simulate one turn-off of ``case``; returns a :class:`kickback.result.Result`."""
    from kickback.simulation import simulate as _simulate

    return _simulate(case, **options)


def simulate_many(case, variations=None, **options):
    """Simulate many variants of ``case`` with the batch engine; see :func:`kickback.studies.many.simulate_many`.

    The value lists are paired element by element (variant k takes the k-th value of every key),
    not crossed; ``kickback.studies.many.grid`` gives every combination.
    """
    from kickback.studies.many import simulate_many as _many

    return _many(case, variations, **options)
