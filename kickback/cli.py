"""Command line: the ``kickback`` group and its commands. No physics here.

Each command lives in a module of its own (``cli_run``: run, compare, new; ``cli_studies``: sweep,
choose, tolerance; ``cli_report``: report; ``cli_fit``: fit; ``cli_check``: check); what they share
is in ``cli_common``. numpy, scipy and matplotlib are imported inside the commands, so ``--help``
answers at once.
"""

from __future__ import annotations

import click

from kickback import __version__
from kickback.cli_check import check
from kickback.cli_fit import fit
from kickback.cli_report import report
from kickback.cli_run import compare, new, run
from kickback.cli_studies import choose, sweep, tolerance
from kickback.cliguard import Guarded


@click.group(cls=Guarded, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="kickback")
def main() -> None:
    """kickback: the turn-off transient of a transistor-switched coil and its clamp.

    Peak switch-node voltage, where the coil's energy goes, decay and release times, and
    rating checks. Exit status: 0 all checks pass, 1 a check fails, 2 bad input, a case that
    cannot be solved, or a result that fails its own audit (no verdict is given), 130 interrupted.
    """



for _command in (run, compare, sweep, choose, report, tolerance, fit, new, check):
    main.add_command(_command)


if __name__ == "__main__":  # pragma: no cover
    main()
