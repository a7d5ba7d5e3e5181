"""Writing outputs so that a reader sees the old files or the whole new set, never a mix.

One file: a temporary name in the same folder, then a rename. A set of files (``--out DIR``):
every file is written into a private staging folder first; then, with SIGINT and SIGTERM held
back, the staging folder becomes DIR (when DIR did not exist) or its files are renamed into DIR
one by one (renames within one file system, a few microseconds each) and the files of the same
set that this run did not write are removed. On any failure or interrupt before that point the
staging folder is removed and DIR is untouched.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import tempfile
import threading
from pathlib import Path

from kickback.errors import OutputError

__all__ = ["PENDING", "check_writable", "discard_pending", "streamed", "write_atomic", "write_set"]

#: staging folders and temporary files being written now (removed by a signal handler on exit)
PENDING: set[str] = set()


def discard_pending() -> None:
    """Remove every staging folder and temporary file still pending (safe to call from a signal handler)."""
    for path in list(PENDING):
        if os.path.isdir(path):
            shutil.rmtree(path, ignore_errors=True)
        else:
            with contextlib.suppress(OSError):
                os.unlink(path)
        PENDING.discard(path)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _existing_ancestor(path: Path) -> Path:
    p = path.absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    return p


def check_writable(path: str | os.PathLike, option: str, *, folder: bool) -> Path:
    """Refuse, before any work, an output path that cannot be written.

    Parameters
    ----------
    path : str or os.PathLike
        The output folder (``folder=True``) or file.
    option : str
        The option that named it, for the message ("--out", "-o").
    folder : bool
        Whether ``path`` must be a folder.

    Returns
    -------
    Path
        ``path`` as a Path.

    Raises
    ------
    OutputError
        When ``path`` is of the wrong kind, lies under a file, or its nearest existing folder
        refuses a new entry (read-only, /proc, /sys, no permission). The probe is a folder
        created and removed at once.
    """
    p = Path(path)
    want = "a folder that can be created or written" if folder else "a file name in a writable folder"
    if str(path) == "" or "\0" in str(path):
        raise OutputError(f"{option}: empty or invalid path (expected {want})", source=str(path) or "''")
    if p.exists():
        if folder and not p.is_dir():
            raise OutputError(f"{option} must name a folder (expected a folder, found a file)", source=str(p))
        if not folder and p.is_dir():
            raise OutputError(f"{option} must name a file (expected FILE.html, found a folder)", source=str(p))
        if not folder and not p.is_file():
            raise OutputError(f"{option} is not a regular file (expected a file name)", source=str(p))
    anc = _existing_ancestor(p if folder else p.parent)
    if not anc.is_dir():
        raise OutputError(f"{option}: {anc} is a file, not a folder (expected {want})",
                          source=str(p))
    probe_in = p if folder and p.is_dir() else anc
    try:
        os.rmdir(tempfile.mkdtemp(prefix=".kickback-probe-", dir=probe_in))
    except OSError as err:
        raise OutputError(f"{option}: cannot write in {probe_in}: {err.strerror or err} (expected {want})",
                          source=str(p)) from None
    return p


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT and SIGTERM back (delivered on exit) so that a rename loop is never cut short."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


@contextlib.contextmanager
def streamed(out: str | os.PathLike, name: str):
    """A text file written piece by piece (e.g. as a study's chunks arrive) for the set of files going
    into the folder ``out``: yields ``(fh, path)``; ``path`` (a temporary file on ``out``'s file system)
    is then given to :func:`write_set` as the file's content, which moves it into place with the
    rest. Removed if the set is never written.

    Raises
    ------
    OutputError — the temporary file cannot be made.
    """
    out = Path(out)
    base = out if out.is_dir() else _existing_ancestor(out)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".tmp", dir=base)
    except OSError as err:
        raise OutputError(f"--out: cannot write in {base}: {err.strerror or err} (expected a writable folder)",
                          source=str(out)) from None
    PENDING.add(tmp)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            yield fh, Path(tmp)
    except OSError as err:
        raise OutputError(f"--out: cannot write {name}: {err.strerror or err} (expected a writable folder with "
                          "space)", source=str(out)) from None
    finally:
        if os.path.exists(tmp):  # not moved into place by write_set
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        PENDING.discard(tmp)


def _write(path: Path, data: str | bytes | Path) -> None:
    if isinstance(data, Path):  # a file written already (see streamed): moved, not copied
        os.replace(data, path)
        os.chmod(path, 0o666 & ~_umask())
        return
    mode = "wb" if isinstance(data, bytes) else "w"
    with open(path, mode, **({} if mode == "wb" else {"encoding": "utf-8", "newline": ""})) as fh:
        fh.write(data)
    os.chmod(path, 0o666 & ~_umask())


def write_atomic(path: str | os.PathLike, data: str | bytes) -> Path:
    """Write ``data`` to ``path`` so that readers see either the old file or the whole new one."""
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as err:
        raise OutputError(f"cannot write: {err.strerror or err} (expected a writable folder)",
                          source=str(path)) from None
    os.close(fd)
    PENDING.add(tmp)
    try:
        _write(Path(tmp), data)
        with _signals_held():
            os.replace(tmp, path)
            PENDING.discard(tmp)
    except BaseException as err:
        PENDING.discard(tmp)
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(err, OSError) and not isinstance(err, OutputError):
            raise OutputError(f"cannot write: {err.strerror or err} (expected a writable folder with space)",
                              source=str(path)) from None
        raise
    return path


def write_set(out: str | os.PathLike, files: dict[str, str | bytes], family: tuple[str, ...] = ()) -> list[Path]:
    """Write a set of files into the folder ``out`` as one change.

    Parameters
    ----------
    out : str or os.PathLike
        The output folder; created (with its parents) when missing.
    files : dict
        File name → text, bytes, or the Path of a file written already on the same file system
        (:func:`streamed`), moved into the set.
    family : tuple of str
        Every file name this kind of run can write; those present in ``out`` but not in ``files``
        (left by an earlier run, e.g. plots before a ``--no-plot`` run) are removed with the swap.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    OutputError
        When a file cannot be written (nothing in ``out`` has changed then).
    """
    out = Path(out)
    fresh = not out.exists()
    base = _existing_ancestor(out) if fresh else out
    try:
        stage = Path(tempfile.mkdtemp(prefix=".kickback-", dir=base))
    except OSError as err:
        raise OutputError(f"--out: cannot write in {base}: {err.strerror or err} (expected a writable folder)",
                          source=str(out)) from None
    PENDING.add(str(stage))
    try:
        for name, data in files.items():
            _write(stage / name, data)
        with _signals_held():
            if fresh:
                out.parent.mkdir(parents=True, exist_ok=True)
                os.rename(stage, out)
                os.chmod(out, 0o777 & ~_umask())
            else:
                for name in files:
                    os.replace(stage / name, out / name)
                for name in family:
                    if name not in files and (out / name).is_file():
                        os.unlink(out / name)
                os.rmdir(stage)
            PENDING.discard(str(stage))
    except BaseException as err:
        PENDING.discard(str(stage))
        shutil.rmtree(stage, ignore_errors=True)
        if isinstance(err, OSError) and not isinstance(err, OutputError):
            raise OutputError(f"--out: cannot write: {err.strerror or err} (expected a writable folder with "
                              "space; nothing was changed)", source=str(out)) from None
        raise
    return [out / name for name in files]
