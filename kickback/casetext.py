"""Reading a case's text: a file or a string, UTF-8, and TOML syntax errors with their line."""

from __future__ import annotations

import os
import re
import tomllib
from pathlib import Path

from kickback.errors import CaseError

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
    try:
        data = Path(path_or_text).read_bytes()
    except FileNotFoundError:
        raise CaseError("file not found (expected a TOML case file)", source=name) from None
    except IsADirectoryError:
        raise CaseError("is a directory (expected a TOML case file)", source=name) from None
    except OSError as err:
        raise CaseError(f"cannot read the file: {err.strerror} (expected a readable TOML file)",
                        source=name) from None
    try:
        return data.decode("utf-8").removeprefix("\ufeff"), name
    except UnicodeDecodeError as err:
        raise CaseError("not UTF-8 text (expected a UTF-8 encoded TOML file)", source=name,
                        line=data[:err.start].count(b"\n") + 1) from None


def syntax_error(err: tomllib.TOMLDecodeError, text: str, source: str) -> CaseError:
    m = _SYNTAX_RE.fullmatch(str(err).splitlines()[0] if str(err) else "")
    if m is None:
        return CaseError(str(err).replace("\n", " "), source=source, line=None, key="TOML syntax")
    if m["line"] is None:
        return CaseError(f"{m['msg']} (at end of file)", source=source, line=max(1, len(text.splitlines())),
                         key="TOML syntax")
    return CaseError(f"{m['msg']} (at column {m['col']})", source=source, line=int(m["line"]),
                     key="TOML syntax")
