"""The command line's boundary: one line and exit 2 on every failure, 130 on Ctrl-C, no traceback.

Everything a user can trigger ends here as one line on stderr naming the file, the key or the
option and what was expected. Library warnings (numpy, scipy, matplotlib) never reach the
terminal as they are: they are counted and said once in kickback's words. Worker processes
forked during a command ignore SIGINT and warnings; the parent stops them on Ctrl-C.

``KICKBACK_DEBUG=1`` lets tracebacks and library warnings through (for a bug report).
"""

from __future__ import annotations

import logging
import math
import os
import re
import signal
import sys
import warnings

import click

__all__ = ["Guarded", "FiniteFloatRange", "current_source", "located", "note", "set_source"]

#: exit statuses (README "Exit status"): 2 bad input or a case that cannot be solved
EXIT_BAD = 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, the shell's convention
EXIT_TERMINATED = 143  # 128 + SIGTERM

MAX_LINE = 1200  # characters of one message line

_STATE = {"source": None, "active": False, "hook": False}


def set_source(source) -> None:
    """Name the file a command works on, for messages of failures raised without one."""
    _STATE["source"] = None if source is None else str(source)


def current_source() -> str:
    return _STATE["source"] or "kickback"


def one_line(text: str) -> str:
    """``text`` on one line: control characters shown as escapes, newlines as spaces."""
    text = re.sub(r"\s*[\n\r\t]+\s*", " ", str(text))
    text = "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)
    if len(text) > MAX_LINE:  # a 1 MB value quoted in a message: keep where and what was expected
        text = f"{text[:MAX_LINE * 2 // 3]} … {text[-MAX_LINE // 3:]}"
    return text


#: library phrases that reach messages through an engine's error, in kickback's words
_LIBRARY_WORDS = {
    "Required step size is less than spacing between numbers.":
        "the step size fell below the resolution of the time axis (the case is too stiff or ill-posed there)",
    "`first_step` exceeds bounds.": "the first step is longer than the phase",
    "math range error": "a value overflowed the floating-point range",
    "float division by zero": "a division by zero",
}


def note(message: str) -> None:
    """A one-line note on stderr, library phrases put in kickback's words."""
    text = one_line(message)
    for phrase, words in _LIBRARY_WORDS.items():
        text = text.replace(phrase, words)
    click.echo(text, err=True)


def _stop_workers() -> None:
    import multiprocessing

    for proc in multiprocessing.active_children():
        proc.terminate()
    painter = sys.modules.get("kickback.outputs.painter")  # run's picture child, if one was started
    for pid in list(painter.CHILDREN) if painter is not None else ():
        try:
            os.kill(pid, signal.SIGTERM)
        except OSError:
            pass


def _on_signal(signum, frame):
    """SIGINT or SIGTERM during a command: stop the workers, remove what is being written, one line, exit.

    Exits at once (``os._exit``) rather than raising into whatever runs now: an exception raised
    inside a worker pool's bookkeeping can leave it waiting forever. The output sets are swapped
    in with these signals held back, so an exit here never leaves a mixed set.
    """
    from kickback.outputs.files import discard_pending

    _stop_workers()
    discard_pending()
    interrupted = signum == signal.SIGINT
    os.write(2, b"interrupted\n" if interrupted else b"terminated\n")
    os._exit(EXIT_INTERRUPTED if interrupted else EXIT_TERMINATED)


def _child_after_fork() -> None:
    """In a worker forked during a command: Ctrl-C is the parent's to handle; no warnings printed."""
    if _STATE["active"]:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.signal(signal.SIGTERM, signal.SIG_DFL)  # the parent stops its workers with SIGTERM
        warnings.simplefilter("ignore")


class _Tally:
    """Warnings and library log records of one command: counts by kind, the first few kept (bounded)."""

    KEEP = 20

    def __init__(self):
        self.counts: dict[str, int] = {}
        self.first: list[str] = []

    def add(self, kind: str, text: str, where: str) -> None:
        self.counts[kind] = self.counts.get(kind, 0) + 1
        if len(self.first) < self.KEEP:
            self.first.append(f"{kind}: {text} ({where})")

    def showwarning(self, message, category, filename, lineno, file=None, line=None):
        from kickback.errors import KickbackWarning

        if issubclass(category, KickbackWarning):
            note(f"warning: {message}")
        else:
            self.add(category.__name__, str(message), f"{filename}:{lineno}")

    def report(self) -> None:
        """Say once, in our words, that numpy/scipy/matplotlib warned (KICKBACK_DEBUG shows them)."""
        if not self.counts:
            return
        if os.environ.get("KICKBACK_DEBUG"):
            for line in self.first:
                note(f"debug: {line}")
        total = sum(self.counts.values())
        note(f"note: the libraries underneath (numpy, scipy, matplotlib) raised {total} warning(s) "
             f"({', '.join(sorted(self.counts))}); they are not shown (KICKBACK_DEBUG=1 shows them)")


class _LogCollector(logging.Handler):
    """Counts what libraries log (matplotlib's cache-folder message) instead of printing it."""

    def __init__(self, tally: _Tally):
        super().__init__(logging.WARNING)
        self.tally = tally

    def emit(self, record):
        self.tally.add(f"{record.name} log", record.getMessage(), f"{record.pathname}:{record.lineno}")


def located(err, source: str) -> str:
    """The one-line text of a kickback error, with ``source`` as its file when it names none."""
    if getattr(err, "source", None):
        return str(err)
    key, message = getattr(err, "key", None), getattr(err, "message", None)
    if message is not None:  # a CaseError or UnitError raised without the file: name it here
        return f"{source}: {key}: {message}" if key else f"{source}: {message}"
    return f"{source}: {err}"


def _message(err: BaseException) -> tuple[str, int]:
    """The line and exit status for an exception that reached the boundary."""
    from kickback.errors import KickbackError

    src = current_source()
    if isinstance(err, KeyboardInterrupt):
        return "interrupted", EXIT_INTERRUPTED
    if isinstance(err, KickbackError):
        return located(err, src), EXIT_BAD
    if isinstance(err, MemoryError):
        return (f"{src}: out of memory (expected a case of ordinary size; see the bounds in the README)",
                EXIT_BAD)
    if isinstance(err, RecursionError):
        return f"{src}: nested too deeply (expected a case of ordinary structure)", EXIT_BAD
    if isinstance(err, BrokenPipeError):
        return "", EXIT_BAD
    if isinstance(err, OSError):
        where = err.filename or src
        return f"{where}: {err.strerror or err} (expected a readable input and a writable output)", EXIT_BAD
    return (f"{src}: the case could not be solved: internal error ({type(err).__name__}: {err}); please report "
            "it with the case file (KICKBACK_DEBUG=1 shows the traceback)", EXIT_BAD)


class Guarded(click.Group):
    """A click group whose commands fail with one line and a stated exit status."""

    def main(self, args=None, prog_name=None, complete_var=None, standalone_mode=True, **extra):
        if not standalone_mode:
            return super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        try:
            rv = super().main(args, prog_name, complete_var, standalone_mode=False, **extra)
        except click.exceptions.NoArgsIsHelpError as err:
            click.echo(err.ctx.get_help(), err=True)
            sys.exit(EXIT_BAD)
        except click.UsageError as err:
            command = err.ctx.command_path if err.ctx is not None else "kickback"
            note(f"{command}: {err.format_message()} (see '{command} --help')")
            sys.exit(EXIT_BAD)
        except click.ClickException as err:
            note(f"kickback: {err.format_message()}")
            sys.exit(err.exit_code)
        except click.Abort:
            note("interrupted")
            sys.exit(EXIT_INTERRUPTED)
        sys.exit(rv if isinstance(rv, int) else 0)

    def invoke(self, ctx):
        if not _STATE["hook"] and hasattr(os, "register_at_fork"):
            os.register_at_fork(after_in_child=_child_after_fork)
            _STATE["hook"] = True
        main_thread = signal.getsignal(signal.SIGINT) is not None and _is_main_thread()
        old = (signal.signal(signal.SIGINT, _on_signal), signal.signal(signal.SIGTERM, _on_signal)) \
            if main_thread else None
        _STATE["active"], _STATE["source"] = True, None
        tally = _Tally()
        logs = _LogCollector(tally)
        root = logging.getLogger()
        root.addHandler(logs)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("always")
                warnings.showwarning = tally.showwarning
                try:
                    return super().invoke(ctx)
                except (SystemExit, click.exceptions.Exit, click.ClickException):
                    raise
                except BaseException as err:  # the boundary: every failure becomes one line
                    if os.environ.get("KICKBACK_DEBUG") and not isinstance(err, KeyboardInterrupt):
                        raise
                    line, status = _message(err)
                    if line:
                        note(line)
                    sys.exit(status)
        finally:
            _STATE["active"] = False
            root.removeHandler(logs)
            if old is not None:
                signal.signal(signal.SIGINT, old[0])
                signal.signal(signal.SIGTERM, old[1])
            tally.report()


def _is_main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


class FiniteFloatRange(click.FloatRange):
    """A float option in a closed range that refuses NaN and infinities (click's range lets NaN in)."""

    name = "finite float range"

    def convert(self, value, param, ctx):
        rv = super().convert(value, param, ctx)
        if not math.isfinite(rv):
            self.fail(f"{value!r} is not a finite number (expected {self._describe_range()})", param, ctx)
        return rv
