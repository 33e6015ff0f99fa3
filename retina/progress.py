"""The progress bar of the command line: one tqdm bar on stderr per long step, driven by the
``progress(done, total)`` callbacks of the core.

- Off when stderr is not a terminal (logs, pipes, CI) or when disabled (``--quiet``).
- No forced refresh on every step: the bar advances with ``update(done - n)`` and tqdm redraws at
  most every ``mininterval`` seconds.
- Sane rates for counters that jump (a solver reporting 0, then 5000 of 9000 directions at once):
  the rate is the average since the start (``smoothing=0``), not an exponential average of
  per-call jumps; a counter that goes backwards restarts the bar's count without a negative update.

:class:`ProgressBar` is one bar (a callback and a context manager); :class:`ProgressBars` is a
progress factory (``factory(description, total) -> callback``, what :func:`retina.pipeline.run`
takes) that makes one bar per step and closes them all.
"""

from __future__ import annotations

import sys

__all__ = ["ProgressBar", "ProgressBars", "stderr_is_terminal"]


def stderr_is_terminal() -> bool:
    """Whether stderr is an interactive terminal.

    Returns
    -------
    bool
    """
    try:
        return bool(sys.stderr.isatty())
    except (AttributeError, ValueError):  # replaced or closed stream
        return False


class ProgressBar:
    """One progress bar driven by ``progress(done, total)`` callbacks; silent when disabled.

    Parameters
    ----------
    enabled : bool
        Show the bar (it is shown only when stderr is also a terminal).
    desc : str
        Description in front of the bar.
    total : int, optional
        Expected total; a callback's ``total`` replaces it.
    unit : str
        Unit of the counter ("step", "dir", ...).

    Use as a context manager or call :meth:`close`; the bar is created on the first callback, so a
    step that reports nothing draws nothing.
    """

    def __init__(self, enabled: bool = True, desc: str = "", total: int | None = None, *, unit: str = "step"):
        self.enabled = bool(enabled) and stderr_is_terminal()
        self.desc = desc
        self.total = total or None
        self.unit = unit
        self.bar = None

    def __call__(self, done: int, total: int | None = None) -> None:
        if not self.enabled:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(total=total or self.total, desc=self.desc, unit=self.unit, leave=False,
                            file=sys.stderr, dynamic_ncols=True, smoothing=0.0)
        bar = self.bar
        if total and bar.total != total:
            bar.total = total
        if done < bar.n:  # a restarted counter: start the count again instead of a negative update
            bar.reset(total=bar.total)
        if done > bar.n:
            bar.update(done - bar.n)
        if bar.total and done >= bar.total:
            self.close()

    def close(self) -> None:
        """Remove the bar from the terminal (idempotent)."""
        if self.bar is not None:
            self.bar.close()
            self.bar = None
            self.enabled = False

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


class ProgressBars:
    """A progress factory: ``bars(description, total)`` returns a :class:`ProgressBar` callback.

    Parameters
    ----------
    enabled : bool
        False (``--quiet``) returns None for every step, which the core treats as no progress.
    """

    def __init__(self, enabled: bool = True):
        self.enabled = bool(enabled) and stderr_is_terminal()
        self._bars: list[ProgressBar] = []

    def __call__(self, desc: str, total: int = 0):
        if not self.enabled:
            return None
        bar = ProgressBar(True, desc, total or None)
        self._bars.append(bar)
        return bar

    def close(self) -> None:
        """Close every bar made so far."""
        for b in self._bars:
            b.close()
        self._bars.clear()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
