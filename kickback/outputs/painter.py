"""Drawing a run's pictures in a second process while this one simulates (issue 18, a cold run).

A cold ``kickback run --out`` spends about a fifth of its CPU time importing matplotlib and nearly
a third drawing and encoding the pictures; the engine needs neither. On a machine with a core to
spare, :func:`start` forks a child that imports matplotlib (and loads its font) while the parent
imports scipy and simulates; :meth:`Painter.send` then hands the child the result (pickled) and
:meth:`Painter.receive` gets the pictures' bytes back. The child runs the same function the
parent would, so the files are the same either way.

Whenever the child cannot be used the caller draws in its own process: not Linux (unless asked
for), a single core, a load average that leaves no core idle (a busy machine gains nothing from
a second process and pays for it), a result that cannot be pickled, or a child that fails, dies
or takes longer than :data:`WAIT_S`. An error in the drawing itself therefore surfaces in the parent, as
without the child. Warnings raised in the child are raised again in the parent. The child ignores
Ctrl-C (the parent's to handle, :mod:`kickback.cliguard`), which stops it with SIGTERM.

References
----------
Python documentation, ``os.fork``, ``os.getloadavg``, ``pickle``; POSIX ``pipe(2)``.
"""

from __future__ import annotations

import gc
import os
import pickle
import select
import signal
import sys
import time
import warnings
from collections.abc import Callable

__all__ = ["CHILDREN", "Painter", "free_core", "start"]

#: the children alive now (pid), for :mod:`kickback.cliguard` to stop on Ctrl-C
CHILDREN: set[int] = set()
#: the longest wait [s] for the child to take the result, and again for the pictures, before the
#: parent draws them itself (a drawing takes well under a second on an idle machine)
WAIT_S = 30.0
#: ``KICKBACK_PAINTER=0`` never forks, ``=1`` forks whatever the load (benchmarks, tests)
ENV = "KICKBACK_PAINTER"


def free_core() -> bool:
    """Whether a second process would run beside this one: on Linux (macOS system libraries do not
    all survive a fork, so ``multiprocessing`` spawns there), when the machine's one-minute load
    average leaves at least one of its cores idle (on a busy machine the child only adds its cost:
    measured at a load of 7 on 2 cores, a run took ~10 % more CPU and wall time)."""
    setting = os.environ.get(ENV, "")
    if setting == "0" or not hasattr(os, "fork"):
        return False
    if setting == "1":
        return True
    if not sys.platform.startswith("linux"):
        return False
    cores = os.cpu_count() or 1
    try:
        load = os.getloadavg()[0]
    except OSError:
        return False
    return cores >= 2 and cores - load >= 1


def _warm() -> None:
    """What the child can do before the result arrives: matplotlib's imports and its font."""
    from matplotlib.backends import backend_agg, backend_svg  # noqa: F401
    from matplotlib.font_manager import FontProperties, findfont, get_font

    import kickback.outputs.plots  # noqa: F401
    import kickback.outputs.pwmplots  # noqa: F401

    get_font(findfont(FontProperties()))


def _read_all(fd: int, deadline: float | None = None) -> bytes:
    chunks = []
    while True:
        if deadline is not None:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([fd], [], [], left)[0]:
                raise TimeoutError
        chunk = os.read(fd, 1 << 16)
        if not chunk:
            return b"".join(chunks)
        chunks.append(chunk)


def _write_all(fd: int, data: bytes, deadline: float | None = None) -> None:
    view = memoryview(data)
    while view:
        if deadline is not None:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([], [fd], [], left)[1]:
                raise TimeoutError
        try:
            view = view[os.write(fd, view):]
        except BlockingIOError:  # a non-blocking pipe, full: wait for room
            continue


def _child(work: Callable, job_r: int, reply_w: int) -> None:
    """The child's life: warm up, read the job, run it, write the reply, exit (never returns)."""
    status = 0
    gc.disable()  # a short life: no collections walking the parent's objects (copy-on-write pages)
    try:
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            _warm()
            data = _read_all(job_r)
            if not data:  # the parent needs no pictures after all
                os._exit(0)
            out = work(pickle.loads(data))
        reply = ("ok", out, [(str(w.message), w.category) for w in caught])
    except BaseException as err:  # noqa: BLE001 — reported to the parent, which draws itself
        reply, status = ("error", f"{type(err).__name__}: {err}", []), 1
    try:
        _write_all(reply_w, pickle.dumps(reply, protocol=pickle.HIGHEST_PROTOCOL))
    except BaseException:  # noqa: BLE001 — the parent is gone or stopped listening
        status = 1
    os._exit(status)


class Painter:
    """A forked child that runs ``work(arg)`` for one ``arg`` sent later (see the module)."""

    def __init__(self, pid: int, job_w: int, reply_r: int):
        self.pid, self._job_w, self._reply_r = pid, job_w, reply_r
        self.error: str | None = None

    def send(self, arg) -> bool:
        """Hand ``arg`` to the child; False (and the child stopped) when it cannot be sent."""
        try:
            data = pickle.dumps(arg, protocol=pickle.HIGHEST_PROTOCOL)
            os.set_blocking(self._job_w, False)
            _write_all(self._job_w, data, time.monotonic() + WAIT_S)
        except Exception as err:  # noqa: BLE001 — unpicklable, or the child is gone: draw here
            self.error = f"{type(err).__name__}: {err}"
            self.close()
            return False
        os.close(self._job_w)
        self._job_w = -1
        return True

    def receive(self) -> dict | None:
        """``work(arg)`` as the child returned it, or None (the caller then runs it itself)."""
        if self._reply_r < 0:
            return None
        try:
            reply = pickle.loads(_read_all(self._reply_r, time.monotonic() + WAIT_S))
        except Exception as err:  # noqa: BLE001 — died, hung or garbled: draw here
            self.error = f"{type(err).__name__}: {err}"
            return None
        finally:
            self.close()
        if reply[0] != "ok":
            self.error = reply[1]
            return None
        for text, category in reply[2]:
            warnings.warn(text, category, stacklevel=2)
        return reply[1]

    def close(self) -> None:
        """Stop the child if it still runs, reap it, close the pipes (safe to call twice)."""
        for fd in (self._job_w, self._reply_r):
            if fd >= 0:
                os.close(fd)
        self._job_w = self._reply_r = -1
        if self.pid in CHILDREN:
            try:
                if os.waitpid(self.pid, os.WNOHANG)[0] == 0:
                    os.kill(self.pid, signal.SIGTERM)
                    os.waitpid(self.pid, 0)
            except ChildProcessError:
                pass
            CHILDREN.discard(self.pid)


def start(work: Callable) -> Painter | None:
    """Fork a child that will run ``work`` (a module-level function) on what :meth:`Painter.send`
    hands it; None when :func:`free_core` says no or the fork fails."""
    if not free_core():
        return None
    job_r, job_w = os.pipe()
    reply_r, reply_w = os.pipe()
    try:
        with warnings.catch_warnings():
            # Python 3.12+ warns when the process has other threads (numpy's BLAS pool, idle
            # here): the child touches no lock of theirs, and a child that hangs anyway is
            # given up after WAIT_S
            warnings.simplefilter("ignore", DeprecationWarning)
            gc.freeze()  # the parent's collections leave the shared pages alone too
            pid = os.fork()
    except OSError:
        gc.unfreeze()
        for fd in (job_r, job_w, reply_r, reply_w):
            os.close(fd)
        return None
    if pid == 0:
        os.close(job_w)
        os.close(reply_r)
        _child(work, job_r, reply_w)
    gc.unfreeze()
    os.close(job_r)
    os.close(reply_w)
    CHILDREN.add(pid)
    return Painter(pid, job_w, reply_r)
