"""Reading a case's text: a file or a string, UTF-8, and TOML syntax errors with their line."""

from __future__ import annotations

import os
import re
import stat
import tomllib
from pathlib import Path

from kickback.errors import CaseError

#: largest case file read [bytes]; a real case is a few kB
MAX_CASE_BYTES = 1 << 20
_KINDS = ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a FIFO (named pipe)"), (stat.S_ISCHR, "a character device"),
          (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket"))

_SYNTAX_RE = re.compile(r"(?P<msg>.*?) \(at (?:line (?P<line>\d+), column (?P<col>\d+)|end of document)\)")


def read_text(path_or_text: str | os.PathLike[str], source: str | None) -> tuple[str, str]:
    """Return (text, source name) for a file path or for TOML text."""
    if isinstance(path_or_text, str):
        text = path_or_text
        if "\n" in text or not (text.strip().endswith(".toml") or os.path.isfile(text)):
            return text, source or "<text>"
    elif not isinstance(path_or_text, os.PathLike):
        raise TypeError(f"expected a path or TOML text, got {type(path_or_text).__name__}")
    name = source or os.fspath(path_or_text)
    data = read_bounded(Path(path_or_text), name, MAX_CASE_BYTES, "a TOML case file")
    try:
        return data.decode("utf-8").removeprefix("\ufeff"), name
    except UnicodeDecodeError as err:
        raise CaseError("not UTF-8 text (expected a UTF-8 encoded TOML file)", source=name,
                        line=data[:err.start].count(b"\n") + 1) from None


def read_bounded(path: Path, name: str, limit: int, what: str) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes, or a CaseError saying why not.

    The file is opened without blocking (a FIFO would wait for a writer, /proc/kmsg for the
    kernel) and its type checked on the open descriptor; at most ``limit + 1`` bytes are read
    (/dev/zero never ends, a file may grow after the check).
    """
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise CaseError(f"file not found (expected {what})", source=name) from None
    except OSError as err:
        raise CaseError(f"cannot read the file: {err.strerror or err} (expected {what})", source=name) from None
    try:
        st = os.fstat(fd)
        for test, kind in _KINDS:
            if test(st.st_mode):
                raise CaseError(f"is {kind}, not a regular file (expected {what})", source=name)
        if st.st_size > limit:
            raise CaseError(f"{st.st_size:,} bytes, too large (expected {what} of at most {limit:,} bytes)",
                            source=name)
        chunks, size = [], 0
        while size <= limit:
            chunk = os.read(fd, min(1 << 20, limit + 1 - size))
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
    except BlockingIOError:
        raise CaseError(f"reading would wait for data (expected {what}, a regular file)", source=name) from None
    except OSError as err:
        raise CaseError(f"cannot read the file: {err.strerror or err} (expected {what})", source=name) from None
    finally:
        os.close(fd)
    if size > limit:
        raise CaseError(f"more than {limit:,} bytes, too large (expected {what} of at most {limit:,} bytes)",
                        source=name)
    return b"".join(chunks)


def syntax_error(err: tomllib.TOMLDecodeError, text: str, source: str) -> CaseError:
    m = _SYNTAX_RE.fullmatch(str(err).splitlines()[0] if str(err) else "")
    if m is None:
        return CaseError(str(err).replace("\n", " "), source=source, line=None, key="TOML syntax")
    if m["line"] is None:
        return CaseError(f"{m['msg']} (at end of file)", source=source, line=max(1, len(text.splitlines())),
                         key="TOML syntax")
    return CaseError(f"{m['msg']} (at column {m['col']})", source=source, line=int(m["line"]),
                     key="TOML syntax")
