"""Load a case file (TOML) and validate it into a :class:`kickback.case.Case`.

Every problem is a :class:`kickback.errors.CaseError` whose text reads
``FILE:LINE: key.path: what is wrong (expected …)``. Lines come from
:class:`kickback.tomlpos.LineLocator`; a missing key points at its table header (line 1 if the
table itself is missing). Quantities are read by :func:`kickback.units.parse_quantity`.
"""


from __future__ import annotations

import os
import tomllib
from dataclasses import replace
from typing import Any

from kickback.case import Case
from kickback.casebounds import count_error
from kickback.casebuild import Context, build_case
from kickback.caseio_tol import tolerances
from kickback.casekeys import CONDITIONS, did_you_mean, key_specs
from kickback.casetext import read_text as _read
from kickback.casetext import syntax_error as _syntax_error
from kickback.errors import CaseError
from kickback.units import format_quantity

#: ``key_specs`` and ``did_you_mean`` are the key tables' (:mod:`kickback.casekeys`), kept here for callers
__all__ = ["did_you_mean", "key_specs", "load_case"]


def load_case(path_or_text: str | os.PathLike[str], *, source: str | None = None) -> Case:
    """Load and validate a case from a TOML file or TOML text.

    Parameters
    ----------
    path_or_text : str or os.PathLike
        A path (a :class:`pathlib.Path`, or a one-line string naming an existing file or ending in
        ".toml"), or the TOML text itself.
    source : str, optional
        Name used in messages and stored in ``Case.source``; default the path as given, or
        ``"<text>"`` for text.

    Returns
    -------
    Case
        The validated case, all quantities in SI units ([V], [H], [Ω], [F], [s], [A], [J], [W], [K]).

    Raises
    ------
    CaseError
        On a missing file, a TOML syntax error or any invalid key or value; ``str(err)`` reads
        ``FILE:LINE: key.path: what is wrong (expected …)``.

    References
    ----------
    TOML v1.0.0 specification, https://toml.io/en/v1.0.0 (syntax of the case file).
    """
    text, name = _read(path_or_text, source)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise _syntax_error(err, text, name) from None
    except RecursionError:
        raise CaseError("arrays or inline tables nested too deeply (expected at most 16 levels)", source=name,
                        key="TOML syntax") from None
    except ValueError as err:  # an integer of more than 4300 digits
        raise CaseError(f"a value cannot be read: {str(err).split(';')[0]} (expected ordinary numbers)",
                        source=name, key="TOML syntax") from None
    return _build(Context(name, text), doc, name, text)


def _build(ctx: Context, doc: dict[str, Any], name: str, text: str) -> Case:
    """Validate a parsed case document into a :class:`Case`, its ``[tolerance]`` section included."""
    case = build_case(ctx, doc, name, text)
    if "tolerance" in doc:
        too_many = count_error("[tolerance] entries", len(doc["tolerance"]), "tolerances") \
            if isinstance(doc["tolerance"], dict) else None
        if too_many:
            raise ctx.error(("tolerance",), too_many)

        case = replace(case, tolerances=tolerances(ctx, doc["tolerance"], case))
        for tol in case.tolerances:  # the other keys' band ends pass the loader itself (casevary)
            if tol.path != "coil_temperature":
                continue
            for end, value in (("min", tol.low), ("max", tol.high)):
                if not CONDITIONS["T"][0](value):
                    raise ctx.error(("tolerance", tol.path), f"the band's {end} end must be {CONDITIONS['T'][1]}, "
                                    f"got {format_quantity(value, 'K')}")
    return replace(case, notes=tuple(ctx.notes)) if ctx.notes else case
