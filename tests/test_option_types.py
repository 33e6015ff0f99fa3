"""The checked numeric option types (retina/commands/_types.py): what they accept and the exact one-line
errors they give.

The expected messages are the project's own wording, recorded from the two parsers ``real`` and
``whole`` as they stood before their shared reading code was merged into one helper, so this table
shows the merge changed no answer and no message.  What Python itself accepts as a number is
Python's (the ``float`` and ``int`` built-ins of the Python library reference: surrounding white
space, digit-group underscores of PEP 515, ``int`` taking any Unicode decimal digits, ``float``
taking "nan" and "inf"); the parsers add the finiteness and range checks.
"""

import argparse

import pytest

from retina.commands._types import MAX_MEMORY_GB, real, whole

GB = dict(low=0.0, low_open=True, high=1e6)
GB_RANGE = "a finite number > 0 and <= 1e+06"

REAL_CASES = [
    # (what, bounds, text, expected value or error message)
    ("gigabytes", GB, "abc", "expected gigabytes, got 'abc'"),
    ("gigabytes", GB, "", "expected gigabytes, got ''"),
    ("gigabytes", GB, "0x10", "expected gigabytes, got '0x10'"),
    ("gigabytes", GB, "nan", f"expected gigabytes: {GB_RANGE}, got 'nan'"),
    ("gigabytes", GB, "inf", f"expected gigabytes: {GB_RANGE}, got 'inf'"),
    ("gigabytes", GB, "-inf", f"expected gigabytes: {GB_RANGE}, got '-inf'"),
    ("gigabytes", GB, "0", f"expected gigabytes: {GB_RANGE}, got '0'"),
    ("gigabytes", GB, "-1", f"expected gigabytes: {GB_RANGE}, got '-1'"),
    ("gigabytes", GB, "1e7", f"expected gigabytes: {GB_RANGE}, got '1e7'"),
    ("gigabytes", GB, "1e6", 1e6),
    ("gigabytes", GB, "0.5", 0.5),
    ("gigabytes", GB, " 2 ", 2.0),
    ("gigabytes", GB, "1_000", 1000.0),
    ("microtesla", dict(low=0.0), "-0.1", "expected microtesla: a finite number >= 0, got '-0.1'"),
    ("microtesla", dict(low=0.0), "0", 0.0),
    ("microtesla", dict(low=0.0), "nan", "expected microtesla: a finite number >= 0, got 'nan'"),
    ("degrees", dict(high=90.0), "90", 90.0),
    ("degrees", dict(high=90.0), "90.5", "expected degrees: a finite number <= 90, got '90.5'"),
    ("degrees", dict(high=90.0), "-1e300", -1e300),
    ("degrees", dict(high=90.0), "1e309", "expected degrees: a finite number <= 90, got '1e309'"),
    ("a number", {}, "nan", "expected a number: a finite number, got 'nan'"),
    ("a number", {}, "-inf", "expected a number: a finite number, got '-inf'"),
    ("a number", {}, "3", 3.0),
    ("a number", {}, "three", "expected a number, got 'three'"),
    ("seconds", dict(low=-1.5, high=2.25, low_open=True), "-1.5",
     "expected seconds: a finite number > -1.5 and <= 2.25, got '-1.5'"),
    ("seconds", dict(low=-1.5, high=2.25, low_open=True), "2.25", 2.25),
]

WHOLE_CASES = [
    ("steps", dict(low=1, high=10), "x", "expected steps (a whole number), got 'x'"),
    ("steps", dict(low=1, high=10), "1.5", "expected steps (a whole number), got '1.5'"),
    ("steps", dict(low=1, high=10), "", "expected steps (a whole number), got ''"),
    ("steps", dict(low=1, high=10), "1e3", "expected steps (a whole number), got '1e3'"),
    ("steps", dict(low=1, high=10), "0", "expected steps between 1 and 10, got '0'"),
    ("steps", dict(low=1, high=10), "11", "expected steps between 1 and 10, got '11'"),
    ("steps", dict(low=1, high=10), "5", 5),
    ("steps", dict(low=1, high=10), " 7 ", 7),
    ("steps", dict(low=1, high=10), "+3", 3),
    ("steps", dict(low=1, high=10), "\u0663", 3),          # ARABIC-INDIC DIGIT THREE: int() reads it
    ("workers", dict(low=1), "0", "expected workers >= 1, got '0'"),
    ("workers", dict(low=1), "-5", "expected workers >= 1, got '-5'"),
    ("workers", dict(low=1), "99999999999999999999", 99999999999999999999),
    ("points", dict(high=10), "11", "expected points <= 10, got '11'"),
    ("points", dict(high=10), "-3", -3),
    ("seed", {}, "abc", "expected seed (a whole number), got 'abc'"),
    ("seed", {}, "nan", "expected seed (a whole number), got 'nan'"),
    ("seed", {}, "-12", -12),
]


def _answer(parse, text):
    try:
        return parse(text)
    except argparse.ArgumentTypeError as exc:
        return str(exc)


@pytest.mark.parametrize("what, bounds, text, expected", REAL_CASES)
def test_real_values_and_messages(what, bounds, text, expected):
    got = _answer(real(what, **bounds), text)
    assert got == expected and type(got) is type(expected)


@pytest.mark.parametrize("what, bounds, text, expected", WHOLE_CASES)
def test_whole_values_and_messages(what, bounds, text, expected):
    got = _answer(whole(what, **bounds), text)
    assert got == expected and type(got) is type(expected)


def test_whole_refuses_text_longer_than_python_reads():
    # CPython 3.11 limits int() to 4300 digits by default (sys.set_int_max_str_digits): a ValueError,
    # so the same one-line message as any other text that is not a whole number
    text = "9" * 5000
    assert _answer(whole("seed"), text) == f"expected seed (a whole number), got {text!r}"


def test_types_are_named_for_argparse_and_errors_are_one_line_usage_errors(capsys):
    # argparse names a type by its __name__ in some messages (common practice, no source)
    assert real("gigabytes").__name__ == "gigabytes"
    assert whole("steps").__name__ == "steps"
    parser = argparse.ArgumentParser(prog="retina-test")
    parser.add_argument("--max-memory-gb", type=MAX_MEMORY_GB)
    parser.add_argument("--steps", type=whole("steps", low=1))
    assert parser.parse_args(["--max-memory-gb", "2", "--steps", "3"]).steps == 3
    for argv, message in ((["--max-memory-gb", "nan"], f"expected gigabytes: {GB_RANGE}, got 'nan'"),
                          (["--steps", "0"], "expected steps >= 1, got '0'")):
        with pytest.raises(SystemExit) as exc:
            parser.parse_args(argv)
        assert exc.value.code == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert err[-1] == f"retina-test: error: argument {argv[0]}: {message}"
