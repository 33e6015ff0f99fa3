"""Typed reading of one value of the spin-system file, each failure an :class:`~retina.errors.InputError`.

Numbers (finite, in their physical range from :data:`retina.spin.io.keys.LIMITS`), strings,
vectors, 3x3 matrices and tables, with the unknown-key check and its "did you mean" hint.  Every
reader takes the document's context (the file name) and the dotted key it reads, and raises an
error naming both.  Private to :mod:`retina.spin.io`.
"""

from __future__ import annotations

import difflib
import math
from typing import Any

import numpy as np

from retina.errors import InputError
from retina.spin.io.keys import LIMITS, MAX_NAME_CHARS

__all__: list[str] = []


class _Ctx:
    """Where we are in the document: the file and the dotted key prefix."""

    def __init__(self, source: str | None):
        self.source = source

    def fail(self, key: str, message: str) -> InputError:
        return InputError(message, source=self.source, key=key)


def _type_name(value: Any) -> str:
    if isinstance(value, bool):
        return f"a boolean ({str(value).lower()})"
    if isinstance(value, (int, float)):
        return f"the number {value!r}"
    if isinstance(value, str):
        return f"the string {value!r}"
    if isinstance(value, list):
        return f"an array of length {len(value)}"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__


def _check_keys(ctx: _Ctx, table: dict, allowed: tuple[str, ...], prefix: str) -> None:
    for key in table:
        if key not in allowed:
            close = difflib.get_close_matches(key, allowed, n=1, cutoff=0.6)
            close = close or [a for a in allowed if a.startswith(key) or key.startswith(a)][:1]
            hint = f"; did you mean {close[0]!r}?" if close else f"; known keys: {', '.join(allowed)}"
            where = f"{prefix}.{key}" if prefix else key
            raise ctx.fail(where, f"unknown key{hint}")


def _table(ctx: _Ctx, parent: dict, key: str, prefix: str, *, required: bool) -> dict | None:
    where = f"{prefix}.{key}" if prefix else key
    if key not in parent:
        if required:
            raise ctx.fail(where, "missing; expected a table [" + where + "]")
        return None
    value = parent[key]
    if not isinstance(value, dict):
        raise ctx.fail(where, f"expected a table, got {_type_name(value)}")
    return value


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _number(ctx: _Ctx, value: Any, where: str, *, minimum: float | None = None,
            strict: bool = False, what: str = "a number", limit: str | None = None) -> float:
    """A finite number; ``limit`` names a row of :data:`LIMITS` (the physical range of the key)."""
    if not _is_number(value):
        raise ctx.fail(where, f"expected {what}, got {_type_name(value)}")
    try:
        x = float(value)
    except OverflowError:  # an integer beyond the float range
        raise ctx.fail(where, f"expected {what} within the physical range, got an integer of "
                              f"{len(str(abs(value)))} digits") from None
    if not math.isfinite(x):
        raise ctx.fail(where, f"expected a finite number, got {value!r}")
    if minimum is not None:
        if strict and not x > minimum:
            raise ctx.fail(where, f"expected {what} > {minimum:g}, got {value!r}")
        if not strict and x < minimum:
            raise ctx.fail(where, f"expected {what} >= {minimum:g}, got {value!r}")
    if limit is not None:
        lo, hi, unit = LIMITS[limit]
        if not lo <= x <= hi:
            raise ctx.fail(where, f"expected {what} in [{lo:g}, {hi:g}]{unit} (the physical range), got {value!r}")
    return x


def _string(ctx: _Ctx, value: Any, where: str, choices: tuple[str, ...] | None = None) -> str:
    if not isinstance(value, str):
        raise ctx.fail(where, f"expected a string, got {_type_name(value)}")
    if len(value) > MAX_NAME_CHARS:
        raise ctx.fail(where, f"expected at most {MAX_NAME_CHARS} characters, got {len(value)}")
    bad = next((c for c in value if ord(c) < 32 or ord(c) == 127), None)
    if bad is not None:
        raise ctx.fail(where, f"expected printable text, got the control character {bad!r}")
    if choices is not None and value not in choices:
        close = difflib.get_close_matches(value, choices, n=1, cutoff=0.5)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise ctx.fail(where, f"expected one of {', '.join(repr(c) for c in choices)}, got {value!r}{hint}")
    return value


def _vector(ctx: _Ctx, value: Any, where: str, n: int = 3, *, limit: str | None = None,
            what: str = "a number") -> np.ndarray:
    if not isinstance(value, list) or len(value) != n:
        raise ctx.fail(where, f"expected an array of {n} numbers, got {_type_name(value)}")
    return np.array([_number(ctx, v, f"{where}[{i}]", limit=limit, what=what) for i, v in enumerate(value)],
                    dtype=float)


def _matrix(ctx: _Ctx, value: Any, where: str, *, limit: str | None = None, what: str = "a number") -> np.ndarray:
    shape_msg = "expected a 3x3 array of numbers [[a, b, c], [d, e, f], [g, h, i]]"
    if not isinstance(value, list) or len(value) != 3:
        rows = len(value) if isinstance(value, list) else None
        got = f"{rows} rows" if rows is not None else _type_name(value)
        raise ctx.fail(where, f"{shape_msg}, got {got}")
    out = np.empty((3, 3))
    for i, row in enumerate(value):
        if not isinstance(row, list) or len(row) != 3:
            got = f"a row of length {len(row)}" if isinstance(row, list) else _type_name(row)
            raise ctx.fail(f"{where}[{i}]", f"{shape_msg}, got {got}")
        for j, v in enumerate(row):
            out[i, j] = _number(ctx, v, f"{where}[{i}][{j}]", limit=limit, what=what)
    return out


def _readonly(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=float)
    a.flags.writeable = False
    return a
