"""Errors the user can act on.

Every stage that reads user input raises :class:`InputError` with the file, the key and what was
expected.  The CLI turns it into one line on stderr and exit status 2, never a traceback.
"""

from __future__ import annotations

from pathlib import Path


class InputError(ValueError):
    """Bad user input: names the source file, the key (a dotted path) and what was expected.

    Parameters
    ----------
    message : str
        What is wrong and what was expected, e.g. ``"expected a half-integer spin, got 0.7"``.
    source : str or Path, optional
        The file the value came from (omitted for values given in Python).
    key : str, optional
        Dotted path of the offending value, e.g. ``"radical_a.nuclei[2].spin"``.
    """

    def __init__(self, message: str, *, source: str | Path | None = None, key: str | None = None):
        self.source = str(source) if source is not None else None
        self.key = key
        self.detail = message
        super().__init__(self._format())

    def _format(self) -> str:
        where = []
        if self.source:
            where.append(self.source)
        if self.key:
            where.append(self.key)
        prefix = ": ".join(where)
        return f"{prefix}: {self.detail}" if prefix else self.detail


class ResourceError(RuntimeError):
    """A computation refused before it starts because it would not fit (memory) or would take too long.

    The message carries the estimate and what to change.
    """


class Cancelled(RuntimeError):
    """Raised when the user interrupts a long computation (Ctrl-C); no partial output is left."""
