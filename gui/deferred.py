"""Work that is not part of a frame, run after it: coalesced, at a low rate while results stream in.

A heading drag delivers a result every few tens of milliseconds.  The views must draw each one
(that is the frame); the readout's text, the bound-against-heading plot and the status bar need
not: they are read, not watched, while the head turns.  :class:`AfterFrames` runs such work once
the results stop arriving for a short quiet time (so at the end of a drag, after its last frame
has been drawn), and while they keep arriving at most once per ``max_wait_ms`` (so the numbers
still follow a long drag, at a low rate).  Each poke asks for one run; many pokes before it run
the work once.

Plain Qt (a single-shot ``QTimer``); no vispy.  ``immediate=True`` runs the work inside
:meth:`AfterFrames.poke` (the synchronous window of the tests, the screenshot script).
"""

from __future__ import annotations

import logging
import time

__all__ = ["AfterFrames"]


class AfterFrames:
    """Run ``fn`` after the frames of a burst of results (module docstring).

    Parameters
    ----------
    fn : callable
        The work, without arguments.  An exception it raises is logged, never raised into Qt.
    quiet_ms : int
        Run once no poke came for this long (a frame is drawn well within it).
    max_wait_ms : int
        While pokes keep coming, run at the latest this long after the first one not yet served.
    immediate : bool
        Run inside :meth:`poke` (no timer).
    parent : PyQt6.QtCore.QObject, optional
        Parent of the timer.
    """

    def __init__(self, fn, *, quiet_ms: int = 40, max_wait_ms: int = 250, immediate: bool = False,
                 parent=None):
        from PyQt6.QtCore import QTimer

        self.fn = fn
        self.quiet_ms = int(quiet_ms)
        self.max_wait_ms = int(max_wait_ms)
        self.immediate = bool(immediate)
        self._first = None          # time of the first poke not yet served
        self._timer = QTimer(parent)
        self._timer.setSingleShot(True)
        self._timer.timeout.connect(self.flush)
        #: How many times the work ran (a counter for tests and the benchmark).
        self.runs = 0

    @property
    def pending(self) -> bool:
        """Whether a poke waits for its run."""
        return self._first is not None

    def poke(self) -> None:
        """Ask for one run of the work (coalesced with the other pokes before it)."""
        if self.immediate:
            self._first = time.monotonic()
            self.flush()
            return
        now = time.monotonic()
        if self._first is None:
            self._first = now
        left_ms = self.max_wait_ms - 1000.0 * (now - self._first)
        if left_ms > self.quiet_ms or not self._timer.isActive():
            self._timer.start(max(0, min(self.quiet_ms, int(left_ms))))

    def flush(self) -> None:
        """Run the work now if a poke waits for it (the timer's slot)."""
        self._timer.stop()
        if self._first is None:
            return
        self._first = None
        self.runs += 1
        try:
            self.fn()
        except Exception:  # noqa: BLE001 - nothing may escape a Qt slot
            logging.getLogger("retina").exception("updating the readout failed")

    def cancel(self) -> None:
        """Forget a waiting poke (the window closes)."""
        self._timer.stop()
        self._first = None
