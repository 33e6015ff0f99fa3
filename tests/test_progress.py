"""The command line's progress bar (retina/progress.py): off without a terminal, monotone counts,
rates from the whole elapsed time.  Common practice, no source (tqdm's documented ``update`` and
``smoothing`` semantics)."""

import io
import sys

from retina.progress import ProgressBar, ProgressBars


class _Tty(io.StringIO):
    def isatty(self):
        return True


def test_off_when_stderr_is_not_a_terminal(monkeypatch):
    monkeypatch.setattr(sys, "stderr", io.StringIO())
    bar = ProgressBar(True, "x", 10)
    bar(5, 10)
    assert bar.bar is None and sys.stderr.getvalue() == ""
    assert ProgressBars(True)("x", 10) is None


def test_off_when_disabled_even_on_a_terminal(monkeypatch):
    monkeypatch.setattr(sys, "stderr", _Tty())
    assert ProgressBars(False)("x", 10) is None
    bar = ProgressBar(False, "x", 10)
    bar(3, 10)
    assert bar.bar is None and sys.stderr.getvalue() == ""


def test_jumping_counter_counts_by_differences_and_closes_at_the_end(monkeypatch):
    monkeypatch.setattr(sys, "stderr", _Tty())
    bars = ProgressBars(True)
    cb = bars("dirs", 0)
    cb(0, 9000)
    assert cb.bar.total == 9000 and cb.bar.n == 0
    cb(5000, 9000)          # a jump of 5000 at once
    assert cb.bar.n == 5000
    assert cb.bar.smoothing == 0.0  # rate = count / elapsed time, not an average of per-call jumps
    cb(4000, 9000)          # a counter that restarts (a second pass) never updates by a negative step
    assert cb.bar.n == 4000
    cb(9000, 9000)
    assert cb.bar is None   # closed when done
    cb(9000, 9000)          # a repeated final call is harmless
    bars.close()
