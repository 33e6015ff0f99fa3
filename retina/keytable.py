"""Typed key tables: the validation machinery behind the scenario (and its sweeps).

A :class:`Key` states one TOML key's kind, default, allowed choices and an optional range check;
:func:`section` checks one table of a file against a ``{name: Key}`` table and fills in the
defaults, raising :class:`~retina.errors.InputError` naming the file, the dotted key and what was
expected.  :mod:`retina.scenario` holds the scenario's own tables and cross-checks.
"""

from __future__ import annotations

import copy
import datetime as _dt
import difflib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from retina.errors import InputError

__all__ = ["Key", "MISSING", "section", "convert", "describe", "suggest", "printable", "in_range",
           "concentration", "even_degree", "level_names", "nonempty", "all_of", "MAX_PHOTONS", "MAX_LIST",
           "MAX_TEXT", "MAX_FILE_BYTES"]

MISSING = object()


@dataclass(frozen=True)
class Key:
    """One key of the schema: its type, default and an optional extra check.

    ``kind`` is one of "str", "int", "float", "bool", "path", "date", "floats", "strs", "choice".
    ``check(value) -> str | None`` returns a description of what was expected when the value is
    out of range.  ``allow_inf`` lets a "float" be ``inf`` (a concentration with no disorder).
    """

    kind: str
    default: Any = MISSING
    choices: tuple = ()
    check: Callable[[Any], str | None] | None = None
    length: int | None = None
    doc: str = ""
    allow_inf: bool = False
    table: dict | None = None        # for kind "tables": the schema of each table


def in_range(lo=None, hi=None, *, lo_open=False):
    """A range check for a number or for every entry of a list of numbers.

    Parameters
    ----------
    lo, hi : float, optional
        Lower and upper bounds; ``None`` leaves that side open.  ``hi`` is inclusive.
    lo_open : bool
        Exclude ``lo`` itself (a strictly positive quantity).

    Returns
    -------
    callable
        ``check(v) -> str | None`` for :attr:`Key.check`.
    """
    def check(v):
        vals = v if isinstance(v, list) else [v]
        for x in vals:
            if lo is not None and (x <= lo if lo_open else x < lo):
                return f"{'>' if lo_open else '>='} {lo}" + (f" and <= {hi}" if hi is not None else "")
            if hi is not None and x > hi:
                return f"<= {hi}" + (f" and {'>' if lo_open else '>='} {lo}" if lo is not None else "")
        return None
    return check


def concentration(v):
    """A concentration: 0 (uniform) to 1e6 (a tilt of about 0.06 deg), or ``inf`` (no disorder).

    Parameters
    ----------
    v : float
        The von Mises-Fisher concentration kappa read from the file.

    Returns
    -------
    str or None
        What was expected, when ``v`` fails the check; ``None`` when it passes.
    """
    if v == float("inf"):
        return None
    if v < 0 or v > 1e6:
        return ">= 0 and <= 1e6, or inf for no disorder"
    return None


def even_degree(v):
    """A spherical-harmonic degree: an even integer from 2 to 40.

    Parameters
    ----------
    v : int
        The degree read from the file.

    Returns
    -------
    str or None
        What was expected, when ``v`` fails the check; ``None`` when it passes.
    """
    if v < 2 or v > 40 or v % 2:
        return "an even integer between 2 and 40"
    return None


MAX_PHOTONS = 1e12
"""Largest photon count of a light or readout level: far above daylight catches, and safely inside
what Poisson samplers take (numpy refuses means near 1e19)."""
MAX_LIST = 10_000
"""Longest list accepted for any list key."""
MAX_TEXT = 10_000
"""Longest string accepted (a description); names are limited to 64 characters."""
MAX_FILE_BYTES = 1 << 20
"""Scenario files larger than 1 MiB are refused before parsing."""


def level_names(v):
    """Names safe as HDF5 group and file names (light levels).

    Parameters
    ----------
    v : list of str
        The names read from the file.

    Returns
    -------
    str or None
        What was expected, when ``v`` fails the check; ``None`` when it passes.
    """
    import re

    for x in v:
        if not re.fullmatch(r"[A-Za-z0-9_]([A-Za-z0-9_ .+-]{0,62}[A-Za-z0-9_.+-])?", x):
            return ("names of 1 to 64 letters, digits, spaces, '_', '-', '+' or '.', starting with a letter, "
                    "digit or '_' and not ending in a space "
                    f"(they name HDF5 groups and files; {x!r} is not)")
    return None


def nonempty(v):
    """A list with at least one entry.

    Parameters
    ----------
    v : list
        The list read from the file.

    Returns
    -------
    str or None
        What was expected, when ``v`` fails the check; ``None`` when it passes.
    """
    return "a non-empty list" if len(v) == 0 else None


def all_of(*checks):
    """Combine checks; the first failing one names what was expected.

    Parameters
    ----------
    *checks : callable
        ``check(v) -> str | None`` functions.

    Returns
    -------
    callable
        One ``check(v) -> str | None``.
    """
    def check(v):
        for c in checks:
            msg = c(v)
            if msg:
                return msg
        return None
    return check



def suggest(name: str, options) -> str:
    """The "did you mean" tail of an error about an unknown name.

    Parameters
    ----------
    name : str
        The unknown name found in the file.
    options : iterable of str
        The names allowed there.

    Returns
    -------
    str
        `` (did you mean 'x'?)`` for a close match, else the list of allowed names.
    """
    close = difflib.get_close_matches(name, list(options), n=1, cutoff=0.5)
    return f" (did you mean '{close[0]}'?)" if close else f" (expected one of: {', '.join(sorted(options))})"


def section(raw: dict, keys: dict[str, Key], src, prefix: str, base: Path) -> dict:
    """Check one TOML table against a key table and fill in the defaults.

    Parameters
    ----------
    raw : dict
        The table as parsed from the file.
    keys : dict of str to Key
        The allowed keys.
    src : Path or None
        The file, named in errors.
    prefix : str
        The dotted name of the table (``"light"``, ``"eyes[0]"``), named in errors.
    base : Path
        The folder relative paths resolve from.

    Returns
    -------
    dict
        Every key of ``keys``, converted, with defaults for the missing ones.

    Raises
    ------
    InputError
        For an unknown key, a missing required key or a bad value.
    """
    for k in raw:
        if k not in keys:
            raise InputError(f"unknown key{suggest(k, keys)}", source=src, key=f"{prefix}.{k}")
    out = {}
    for k, spec in keys.items():
        dotted = f"{prefix}.{k}"
        if k in raw:
            out[k] = convert(raw[k], spec, src, dotted, base)
        elif spec.default is MISSING:
            raise InputError(f"missing required key ({describe(spec)})", source=src, key=dotted)
        else:
            d = copy.deepcopy(spec.default)
            if spec.kind == "path" and d is not None:
                d = (base / d).resolve()
            out[k] = d
    return out


def describe(spec: Key) -> str:
    """What a key expects, in words (for error messages).

    Parameters
    ----------
    spec : Key
        The key.

    Returns
    -------
    str
        For example ``"a list of numbers of length 3"``.
    """
    names = {"str": "a string", "int": "an integer", "float": "a number", "bool": "true or false",
             "path": "a file path (string)", "date": "a date (1990-05-17 or \"1990-05-17\")",
             "floats": "a list of numbers", "strs": "a list of strings",
             "choice": "one of " + ", ".join(f'"{c}"' for c in spec.choices),
             "tables": "an array of tables ([[...]])"}
    s = names[spec.kind]
    if spec.length:
        s += f" of length {spec.length}"
    return s


def convert(v, spec: Key, src, key: str, base: Path):
    """Check and convert one value read from a file.

    Parameters
    ----------
    v : object
        The value as parsed from TOML.
    spec : Key
        What the key expects.
    src : Path or None
        The file, named in errors.
    key : str
        The dotted key, named in errors.
    base : Path
        The folder relative paths resolve from.

    Returns
    -------
    object
        The value in its Python form: ``float``, ``int``, ``Path`` (absolute), ``datetime.date``,
        a list, or a list of checked tables.

    Raises
    ------
    InputError
        When the value has the wrong type, is out of range or too long.
    """
    def bad(what=None):
        got = f"{v!r}" if not isinstance(v, (dict, list)) or len(repr(v)) < 60 else type(v).__name__
        raise InputError(f"expected {what or describe(spec)}, got {got}", source=src, key=key)

    kind = spec.kind
    if kind == "str":
        if not isinstance(v, str):
            bad()
        val = v
        printable(val, src, key)
    elif kind == "choice":
        if not isinstance(v, str):
            bad()
        if v not in spec.choices:
            raise InputError(f"expected {describe(spec)}, got {v!r}{suggest(v, spec.choices)}",
                             source=src, key=key)
        val = v
    elif kind == "int":
        if isinstance(v, bool) or not isinstance(v, int):
            bad()
        val = int(v)
    elif kind == "float":
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            bad()
        val = float(v)
        if val != val or val == float("-inf") or (val == float("inf") and not spec.allow_inf):
            bad("a finite number" if not spec.allow_inf else "a number or inf")
    elif kind == "bool":
        if not isinstance(v, bool):
            bad()
        val = v
    elif kind == "path":
        if not isinstance(v, str) or not v.strip():
            bad()
        printable(v, src, key)
        val = (base / Path(v).expanduser()).resolve()
    elif kind == "date":
        if isinstance(v, _dt.datetime):
            val = v.date()
        elif isinstance(v, _dt.date):
            val = v
        elif isinstance(v, str):
            try:
                val = _dt.date.fromisoformat(v)
            except ValueError:
                bad()
        else:
            bad()
    elif kind == "floats":
        if not isinstance(v, list) or any(isinstance(x, bool) or not isinstance(x, (int, float)) for x in v):
            bad()
        val = [float(x) for x in v]
        if any(x != x or abs(x) == float("inf") for x in val):
            bad("a list of finite numbers")
    elif kind == "strs":
        if not isinstance(v, list) or any(not isinstance(x, str) for x in v):
            bad()
        val = list(v)
        for x in val:
            printable(x, src, key)
        if spec.choices:
            for x in val:
                if x not in spec.choices:
                    raise InputError(f"expected entries among {', '.join(spec.choices)}, got {x!r}"
                                     f"{suggest(x, spec.choices)}", source=src, key=key)
    elif kind == "tables":
        if not isinstance(v, list) or not all(isinstance(x, dict) for x in v):
            bad()
        val = [section(x, spec.table, src, f"{key}[{i}]", base) for i, x in enumerate(v)]
    else:  # pragma: no cover - schema error
        raise AssertionError(kind)
    if isinstance(val, list) and len(val) > MAX_LIST:
        raise InputError(f"expected at most {MAX_LIST:,} entries, got {len(val):,}", source=src, key=key)
    if spec.length is not None and len(val) != spec.length:
        bad()
    if spec.check is not None:
        msg = spec.check(val)
        if msg:
            raise InputError(f"expected {msg}, got {v!r}", source=src, key=key)
    return val


def printable(x: str, src, key: str) -> None:
    """Refuse over-long text and control characters.

    Parameters
    ----------
    x : str
        The text read from the file.
    src : Path or None
        The file, named in errors.
    key : str
        The dotted key, named in errors.

    Raises
    ------
    InputError
        When ``x`` is longer than :data:`MAX_TEXT` or holds a control character.
    """
    if len(x) > MAX_TEXT:
        raise InputError(f"expected at most {MAX_TEXT:,} characters, got {len(x):,}", source=src, key=key)
    bad = next((c for c in x if (ord(c) < 32 and c not in "\t\n") or ord(c) == 127), None)
    if bad is not None:
        raise InputError(f"expected printable text, got the control character {bad!r}", source=src, key=key)
