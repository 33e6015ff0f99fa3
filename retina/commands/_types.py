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
    """A finite float in ``[low, high]`` (``(low, high]`` when ``low_open``)."""

    def parse(text: str) -> float:
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
    """A whole number in ``[low, high]``."""

    def parse(text: str) -> int:
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
