"""The command-line options that choose where the work runs: ``--workers`` and ``--scheduler``."""

from __future__ import annotations

import sys

import click

from kickback.cliguard import note

SCHEDULER_HELP = ("Send the work to the Dask distributed scheduler at ADDRESS (e.g. tcp://HOST:8786) instead of "
                  "local processes; needs pip install 'kickback[cluster]'. The numbers are the same as a local run.")


def scheduler_option(func):
    """``--scheduler ADDRESS`` on a command."""
    return click.option("--scheduler", metavar="ADDRESS", default=None, help=SCHEDULER_HELP)(func)


def open_executor(address: str | None):
    """The executor of ``--scheduler`` (None without it); exit 2 with one line when Dask is not
    installed or no scheduler answers."""
    if address is None:
        return None
    from kickback.errors import KickbackError
    from kickback.parallel import cluster_executor, worker_notes

    try:
        executor = cluster_executor(address)
    except KickbackError as err:
        note(f"kickback: {err}")
        sys.exit(2)
    for line in worker_notes(executor):
        note(line)
    return executor


def workers_or_default(workers: int | None) -> int:
    from kickback.parallel import default_workers

    return workers or default_workers()
