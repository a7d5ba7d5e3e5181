"""Progress of long runs on stderr: a bar on a terminal, a few plain lines elsewhere (CI logs)."""

from __future__ import annotations

import sys

import click

__all__ = ["with_progress"]

#: below this many items no progress is shown
MIN_ITEMS = 10


def _plain(label: str, n: int, stream):
    """``progress(k)`` printing ``label: k of n`` at each quarter, no terminal codes."""
    marks = sorted({max(1, n * q // 4) for q in (1, 2, 3, 4)})
    state = {"next": 0}

    def progress(k):
        while state["next"] < len(marks) and k >= marks[state["next"]]:
            click.echo(f"{label}: {marks[state['next']]} of {n}", file=stream)
            state["next"] += 1

    return progress


def with_progress(label: str, n: int, run, stream=None):
    """``run(progress)`` with progress reports on ``stream`` (default stderr) for runs of ``n`` items.

    On a terminal a click progress bar; otherwise plain lines at 25 %, 50 %, 75 % and 100 %,
    so that a CI log holds no cursor or erase codes.
    """
    stream = sys.stderr if stream is None else stream
    if n < MIN_ITEMS:
        return run(None)
    isatty = getattr(stream, "isatty", None)
    if not (isatty and isatty()):
        return run(_plain(label, n, stream))
    with click.progressbar(length=n, label=label, file=stream) as bar:
        done = [0]

        def progress(k):
            bar.update(k - done[0])
            done[0] = k

        return run(progress)
