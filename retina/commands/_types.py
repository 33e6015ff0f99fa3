"""Checked numeric types for command-line options (``argparse`` ``type=``).

Every numeric option of every subcommand goes through one of these, so NaN, infinities, negative
or zero values where they mean nothing, and values beyond a stated range are refused while the
arguments are parsed: exit 2 and one line naming the option (see :func:`retina.cli.main`).
"""

from __future__ import annotations

import argparse
import math

__all__ = ["real", "whole"]


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

    def parse(text: str) -> float:
        """Read the option's text as the number.

        Parameters
        ----------
        text : str
            The option's value.

        Returns
        -------
        float

        Raises
        ------
        argparse.ArgumentTypeError
            For text that is not a finite number in range.
        """
        try:
            x = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}") from None
        ok = math.isfinite(x) and (low is None or (x > low if low_open else x >= low)) and (high is None or x <= high)
        if not ok:
            lo = "" if low is None else (f"> {low:g}" if low_open else f">= {low:g}")
            hi = "" if high is None else f"<= {high:g}"
            rng = " and ".join(p for p in (lo, hi) if p)
            raise argparse.ArgumentTypeError(f"expected {what}: a finite number{' ' + rng if rng else ''}, got {text!r}")
        return x

    parse.__name__ = what  # argparse names the type in some messages
    return parse


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

    def parse(text: str) -> int:
        """Read the option's text as the whole number.

        Parameters
        ----------
        text : str
            The option's value.

        Returns
        -------
        int

        Raises
        ------
        argparse.ArgumentTypeError
            For text that is not a whole number in range.
        """
        try:
            x = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {what} (a whole number), got {text!r}") from None
        if (low is not None and x < low) or (high is not None and x > high):
            rng = f"between {low} and {high}" if low is not None and high is not None else (
                f">= {low}" if low is not None else f"<= {high}")
            raise argparse.ArgumentTypeError(f"expected {what} {rng}, got {text!r}")
        return x

    parse.__name__ = what
    return parse


MAX_MEMORY_GB = real("gigabytes", low=0.0, low_open=True, high=1e6)
"""The ``--max-memory-gb`` type shared by every command that has the option."""
