"""Exception types of kickback: one base, subclasses that also inherit a builtin."""

from __future__ import annotations


class KickbackError(Exception):
    """Base of every error kickback raises on purpose."""


class CaseError(KickbackError, ValueError):
    """A case file or value is wrong; the message names file, line and key path.

    ``str(err)`` reads ``FILE:LINE: key.path: message`` (LINE and key omitted when unknown).
    """

    def __init__(self, message: str, *, source: str | None = None, line: int | None = None,
                 key: str | None = None):
        self.message = message
        self.source = source
        self.line = line
        self.key = key
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = self.source or "<case>"
        if self.line is not None:
            where += f":{self.line}"
        parts = [where]
        if self.key:
            parts.append(self.key)
        parts.append(self.message)
        return ": ".join(parts)


class SolverError(KickbackError, RuntimeError):
    """The engine could not finish a case; the message says why."""


class OutputError(KickbackError, OSError):
    """An output file or folder cannot be written; the message names it and what was expected."""

    def __init__(self, message: str, *, source: str | None = None):
        self.message = message
        self.source = source
        super().__init__(f"{source}: {message}" if source else message)

    def __str__(self) -> str:
        return f"{self.source}: {self.message}" if self.source else self.message


class KickbackWarning(UserWarning):
    """Something the user should know that is not an error; the CLI prints it as one line."""
