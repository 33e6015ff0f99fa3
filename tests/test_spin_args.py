"""How the spin commands (yields, rf) write a duration (retina/commands/_spin_args.py)."""

import math

import pytest

from retina.commands import rf, yields
from retina.commands._spin_args import format_seconds


@pytest.mark.parametrize("seconds, text", [
    # derived: 1 s = 1000 ms, 1 min = 60 s, 1 h = 3600 s; the unit changes at 1 s, 120 s and 7200 s
    (0.0, "0 ms"), (0.25, "250 ms"), (0.9994, "999 ms"),
    (1.0, "1.0 s"), (12.5, "12.5 s"), (119.9, "119.9 s"),
    (120.0, "2.0 min"), (180.0, "3.0 min"), (7199.0, "120.0 min"),
    (7200.0, "2.0 h"), (9000.0, "2.5 h"), (36000.0, "10.0 h"),
    (math.inf, "forever"), (math.nan, "forever"),
])
def test_format_seconds(seconds, text):
    assert format_seconds(seconds) == text


def test_both_spin_commands_write_durations_alike():
    assert rf.format_seconds is yields.format_seconds is format_seconds
