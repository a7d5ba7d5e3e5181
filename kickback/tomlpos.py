"""Where each key of a TOML text sits: key path → line number, for error messages.

``tomllib`` returns plain dicts without positions, so this module scans the raw text once more.
It follows table headers ``[coil]``, arrays of tables ``[[clamp]]`` / ``[[clamp.element]]``
(counting each header, so the second ``[[clamp.element]]`` under the first ``[[clamp]]`` is
``clamp[0].element[1]``), dotted and quoted keys, inline tables and arrays (also multi-line),
strings of all four kinds and comments. It is meant for text ``tomllib`` has accepted; on other
text it returns what it found so far and never raises.

A key path is a tuple of table keys (str) and array indices (int), e.g.
``("clamp", 0, "element", 1, "voltage")``; :func:`format_path` writes it as
``clamp[0].element[1].voltage``.
"""

from __future__ import annotations

import json
import re
import tomllib
from bisect import bisect_right

__all__ = ["KeyPath", "LineLocator", "format_path"]

KeyPath = tuple[str | int, ...]

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_SCALAR_END = ",]}#\r\n"


def format_path(path: KeyPath) -> str:
    """Write a key path as ``clamp[0].element[1].voltage`` (keys that are not bare are quoted)."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = part if _BARE_KEY.fullmatch(part) else json.dumps(part, ensure_ascii=False)
            out += ("." if out else "") + text
    return out


class _Scanner:
    """One pass over TOML text recording the line of every key, header and array item."""

    def __init__(self, text: str):
        self.s = text
        self.i = 0
        self._newlines = [k for k, c in enumerate(text) if c == "\n"]
        self.lines: dict[KeyPath, int] = {}  # explicit keys and headers
        self.implicit: dict[KeyPath, int] = {}  # tables created implicitly by dotted keys/headers
        self._arrays: dict[KeyPath, int] = {}  # array-of-tables path -> headers seen
        self._table: KeyPath = ()

    # -- low level -------------------------------------------------------------------------------
    def _line(self, pos: int | None = None) -> int:
        return bisect_right(self._newlines, (self.i if pos is None else pos) - 1) + 1

    def _peek(self, n: int = 1) -> str:
        return self.s[self.i:self.i + n]

    def _skip(self, newlines: bool) -> None:
        """Skip blanks; with ``newlines`` also line ends and comments."""
        while self.i < len(self.s):
            c = self.s[self.i]
            if c in " \t" or (newlines and c in "\r\n"):
                self.i += 1
            elif newlines and c == "#":
                self._skip_comment()
            else:
                return

    def _skip_comment(self) -> None:
        end = self.s.find("\n", self.i)
        self.i = len(self.s) if end < 0 else end

    def _string(self) -> str:
        """Consume a string of any kind at the cursor; return its raw text."""
        start = self.i
        for quote in ('"""', "'''"):
            if self._peek(3) == quote:
                self.i += 3
                while self.i < len(self.s):
                    if quote[0] == '"' and self.s[self.i] == "\\":
                        self.i += 2
                    elif self._peek(3) == quote:
                        self.i += 3
                        extra = 0  # up to two quotes may touch the closing delimiter
                        while extra < 2 and self._peek() == quote[0]:
                            self.i += 1
                            extra += 1
                        break
                    else:
                        self.i += 1
                return self.s[start:self.i]
        quote = self.s[self.i]
        self.i += 1
        while self.i < len(self.s) and self.s[self.i] not in (quote, "\n"):
            self.i += 2 if quote == '"' and self.s[self.i] == "\\" else 1
        self.i += 1
        return self.s[start:self.i]

    def _key(self) -> list[str]:
        """Consume a (dotted, possibly quoted) key; return its parts."""
        parts: list[str] = []
        while True:
            self._skip(False)
            if self._peek() in ('"', "'"):
                raw = self._string()
                try:
                    parts.append(tomllib.loads(f"k = {raw}")["k"])
                except tomllib.TOMLDecodeError:
                    parts.append(raw.strip("\"'"))
            else:
                m = _BARE_KEY.match(self.s, self.i)
                if m is None:
                    raise ValueError("no key")
                parts.append(m.group())
                self.i = m.end()
            self._skip(False)
            if self._peek() != ".":
                return parts
            self.i += 1

    # -- structure -------------------------------------------------------------------------------
    def _record(self, path: KeyPath, line: int, *, implicit: bool = False) -> None:
        (self.implicit if implicit else self.lines).setdefault(path, line)

    def _value(self, path: KeyPath) -> None:
        self._skip(False)
        c = self._peek()
        if c == "{":
            self.i += 1
            while True:
                self._skip(True)
                if self._peek() in ("}", ""):
                    self.i += 1
                    return
                self._keyvalue(path)
                self._skip(True)
                if self._peek() == ",":
                    self.i += 1
        elif c == "[":
            self.i += 1
            index = 0
            while True:
                self._skip(True)
                if self._peek() in ("]", ""):
                    self.i += 1
                    return
                self._record(path + (index,), self._line())
                self._value(path + (index,))
                self._skip(True)
                if self._peek() == ",":
                    self.i += 1
                index += 1
        elif c in ('"', "'"):
            self._string()
        else:
            start = self.i
            while self.i < len(self.s) and self.s[self.i] not in _SCALAR_END:
                self.i += 1
            if self.i == start:
                raise ValueError("no value")

    def _keyvalue(self, base: KeyPath) -> None:
        line = self._line()
        parts = self._key()
        for k in range(1, len(parts)):
            self._record(base + tuple(parts[:k]), line, implicit=True)
        path = base + tuple(parts)
        self._record(path, line)
        self._skip(False)
        if self._peek() != "=":
            raise ValueError("no '='")
        self.i += 1
        self._value(path)

    def _header(self) -> None:
        line = self._line()
        is_array = self._peek(2) == "[["
        self.i += 2 if is_array else 1
        parts = self._key()
        self.i += 2 if is_array else 1
        resolved: KeyPath = ()
        for k, part in enumerate(parts):
            resolved += (part,)
            if k == len(parts) - 1:
                if is_array:
                    count = self._arrays.get(resolved, 0)
                    self._arrays[resolved] = count + 1
                    self._record(resolved, line)
                    resolved += (count,)
                self._record(resolved, line)
            else:
                self._record(resolved, line, implicit=True)
                if resolved in self._arrays:  # a sub-table of the latest [[...]] item
                    resolved += (self._arrays[resolved] - 1,)
        self._table = resolved

    def scan(self) -> None:
        try:
            while True:
                self._skip(True)
                if self.i >= len(self.s):
                    return
                if self._peek() == "[":
                    self._header()
                else:
                    self._keyvalue(self._table)
                self._skip(False)
                if self._peek() == "#":
                    self._skip_comment()
                elif self._peek() not in ("\r", "\n", ""):  # not valid TOML: resume on the next line
                    self._skip_comment()
        except (ValueError, IndexError):
            return


class LineLocator:
    """Map key paths of a TOML text to line numbers (1-based).

    Parameters
    ----------
    text : str
        The TOML text, as given to ``tomllib.loads``.
    """

    def __init__(self, text: str):
        scanner = _Scanner(text)
        scanner.scan()
        self._lines = scanner.lines
        self._implicit = scanner.implicit

    def exact(self, path: KeyPath) -> int | None:
        """Line where ``path`` itself is written (key, header or array item), or None."""
        return self._lines.get(tuple(path), self._implicit.get(tuple(path)))

    def line_of(self, path: KeyPath) -> int | None:
        """Line of ``path`` or, if it is absent, of its nearest written ancestor; None if none is."""
        path = tuple(path)
        while path:
            line = self.exact(path)
            if line is not None:
                return line
            path = path[:-1]
        return None
