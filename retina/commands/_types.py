"""Checked numeric types for command-line options (``argparse`` ``type=``).

Every numeric option of every subcommand goes through one of these, so NaN, infinities, negative
or zero values where they mean nothing, and values beyond a stated range are refused while the
arguments are parsed: exit 2 and one line naming the option (see :func:`retina.cli.main`).
"""

from __future__ import annotations

import argparse
import math

__all__ = ["real", "whole"]


def _option_type(what: str, read, unreadable: str, out_of_range):
    """The ``argparse`` type that reads text with ``read`` and checks the number it gives.

    Parameters
    ----------
    what : str
        What the number is; the type's ``__name__`` (argparse names the type by it in some messages).
    read : callable(str) -> number
        ``float`` or ``int``: raises ``ValueError`` for text that is not a number.
    unreadable : str
        What was expected, for text ``read`` refuses ("gigabytes", "steps (a whole number)").
    out_of_range : callable(number) -> str or None
        What was expected, for a number that is not allowed; None for an allowed one.

    Returns
    -------
    callable(str) -> number
        Raises ``argparse.ArgumentTypeError`` with ``expected <what was expected>, got '<text>'``.
    """

    def parse(text: str):
        """Read the option's text as the number.

        Parameters
        ----------
        text : str
            The option's value.

        Returns
        -------
        float or int

        Raises
        ------
        argparse.ArgumentTypeError
            For text that is not a number of the type, or a number out of range.
        """
        try:
            x = read(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {unreadable}, got {text!r}") from None
        expected = out_of_range(x)
        if expected is not None:
            raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}")
        return x

    parse.__name__ = what
    return parse


def real(what: str, *, low: float | None = None, high: float | None = None, low_open: bool = False):
    """An ``argparse`` type for a finite float in ``[low, high]`` (``(low, high]`` when ``low_open``).

    Parameters
    ----------
    what : str
        What the number is, for the message ("gigabytes", "microtesla").
    low, high : float, optional
        Bounds.
    low_open : bool
        Exclude ``low``.

    Returns
    -------
    callable(str) -> float
        Raises ``argparse.ArgumentTypeError`` (exit 2, one line) for NaN, inf or out-of-range text.
    """
    lo = "" if low is None else (f"> {low:g}" if low_open else f">= {low:g}")
    hi = "" if high is None else f"<= {high:g}"
    rng = " and ".join(p for p in (lo, hi) if p)
    expected = f"{what}: a finite number{' ' + rng if rng else ''}"

    def out_of_range(x: float) -> str | None:
        ok = math.isfinite(x) and (low is None or (x > low if low_open else x >= low)) and (high is None or x <= high)
        return None if ok else expected

    return _option_type(what, float, what, out_of_range)


def whole(what: str, *, low: int | None = None, high: int | None = None):
    """An ``argparse`` type for a whole number in ``[low, high]``.

    Parameters
    ----------
    what : str
        What the number is, for the message.
    low, high : int, optional
        Bounds.

    Returns
    -------
    callable(str) -> int
        Raises ``argparse.ArgumentTypeError`` (exit 2, one line) for other text or out-of-range values.
    """
    rng = f"between {low} and {high}" if low is not None and high is not None else (
        f">= {low}" if low is not None else f"<= {high}")

    def out_of_range(x: int) -> str | None:
        ok = (low is None or x >= low) and (high is None or x <= high)
        return None if ok else f"{what} {rng}"

    return _option_type(what, int, f"{what} (a whole number)", out_of_range)


MAX_MEMORY_GB = real("gigabytes", low=0.0, low_open=True, high=1e6)
"""The ``--max-memory-gb`` type shared by every command that has the option."""
