"""The ``retina`` command line and its ``yields`` command: exit codes, messages, outputs."""

from __future__ import annotations

import os
import subprocess
import sys
import types
from collections import namedtuple
from pathlib import Path

import numpy as np
import pytest

import retina.spin
from retina.cli import main
from retina.errors import ResourceError
from retina.yieldfn import YieldFunction

ROOT = Path(__file__).resolve().parents[1]

TINY = """
[pair]
name = "tiny pair"
[radical_a]
[[radical_a.nuclei]]
label = "N"
spin = 1
principal_mT = [-0.1, -0.1, 1.6]
[radical_b]
[kinetics]
lifetime_us = 1.0
"""

Cost = namedtuple("Cost", "seconds bytes method note")


class FakeEngine:
    """Stands in for retina.spin.engine: a known function, call counting, injectable failures."""

    def __init__(self, fun=lambda n: 0.4 + 0.02 * n[:, 2] ** 2, fail=None):
        self.fun, self.fail, self.calls = fun, fail, 0

    def install(self, monkeypatch):
        mod = types.ModuleType("retina.spin.engine")
        mod.choose_method = lambda system: "hilbert"
        mod.estimate_cost = lambda system, n, method: Cost(0.5, 3 * 2**20, method, "fake estimate")
        mod.compute_yields = self.compute_yields
        monkeypatch.setitem(sys.modules, "retina.spin.engine", mod)
        monkeypatch.setattr(retina.spin, "engine", mod, raising=False)
        return self

    def compute_yields(self, system, field_uT, directions, *, method="auto", progress=None, max_bytes=None):
        self.calls += 1
        n = len(directions)
        if progress:
            progress(n // 2, n)
        if self.fail is not None:
            raise self.fail
        if progress:
            progress(n, n)
        return self.fun(np.asarray(directions))


@pytest.fixture
def tiny(tmp_path, monkeypatch):
    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "cache"))
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return path


def test_yields_writes_the_file_and_summarises_in_words(tiny, tmp_path, monkeypatch, capsys):
    eng = FakeEngine().install(monkeypatch)
    out = tmp_path / "out.h5"
    assert main(["yields", str(tiny), "-o", str(out), "--degree", "6", "--field-uT", "47"]) == 0
    cap = capsys.readouterr()
    assert eng.calls == 1
    assert "about 500 ms and 3.0 MB of memory; fake estimate" in cap.err
    # Derived: 0.4 + 0.02 z^2 has max 0.42 (z axis), min 0.40 (equator), mean 0.4 + 0.02/3, so the
    # relative anisotropy is 0.02 / 0.406667 = 4.918 %.
    assert "max - min = 0.02, 4.92 % of the mean yield 0.4067" in cap.out
    assert "(+0.000, +0.000, +1.000)" in cap.out
    assert "degree 6; truncation error max" in cap.out and "method hilbert" in cap.out
    assert "Traceback" not in cap.err
    yf = YieldFunction.load(out)
    assert yf.degree == 6 and yf.provenance["field_uT"] == 47.0
    # the second run takes the cached result without calling the engine
    assert main(["yields", str(tiny), "-o", str(tmp_path / "again.h5"), "--degree", "6", "--field-uT", "47"]) == 0
    assert eng.calls == 1 and "taken from the cache" in capsys.readouterr().out
    assert main(["yields", str(tiny), "-o", str(tmp_path / "nocache.h5"), "--degree", "6", "--field-uT", "47",
                 "--no-cache", "-q"]) == 0
    assert eng.calls == 2


def test_existing_output_needs_force(tiny, tmp_path, monkeypatch, capsys):
    FakeEngine().install(monkeypatch)
    out = tmp_path / "out.h5"
    out.write_bytes(b"precious")
    assert main(["yields", str(tiny), "-o", str(out), "--degree", "4", "-q"]) == 2
    err = capsys.readouterr().err
    assert "exists already" in err and len(err.strip().splitlines()) == 1
    assert out.read_bytes() == b"precious"
    assert main(["yields", str(tiny), "-o", str(out), "--degree", "4", "-q", "--force"]) == 0
    assert YieldFunction.load(out).degree == 4


@pytest.mark.parametrize(
    "extra, pattern",
    [
        (["--degree", "7"], "--degree: expected an even degree"),
        (["--field-uT", "-3"], "--field-uT: expected a field in microtesla: a finite number > 0"),
        (["--check-points", "0"], "--check-points: expected a number of directions between 1 and"),
        (["--max-memory-gb", "0"], "--max-memory-gb: expected gigabytes: a finite number > 0"),
        (["--max-memory-gb", "inf"], "--max-memory-gb: expected gigabytes: a finite number > 0"),
        (["--field-uT", "nan"], "--field-uT: expected a field in microtesla: a finite number > 0"),
        (["--accuracy", "0"], "--accuracy: expected a standard error per yield: a finite number > 0"),
        (["--accuracy", "2"], "--accuracy: expected a standard error per yield: a finite number > 0"),
    ],
)
def test_bad_options_are_one_line_exit_2(tiny, tmp_path, monkeypatch, capsys, extra, pattern):
    FakeEngine().install(monkeypatch)
    assert main(["yields", str(tiny), "-o", str(tmp_path / "o.h5"), *extra]) == 2
    err = capsys.readouterr().err
    assert pattern in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "o.h5").exists()


def test_bad_system_file_is_one_line_exit_2(tmp_path, monkeypatch, capsys):
    FakeEngine().install(monkeypatch)
    bad = tmp_path / "bad.toml"
    bad.write_text(TINY.replace("spin = 1", "spin = 0.3"))
    assert main(["yields", str(bad), "-o", str(tmp_path / "o.h5")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("retina: error: ") and f"{bad}: radical_a.nuclei[0].spin" in err
    assert len(err.strip().splitlines()) == 1
    assert main(["yields", str(tmp_path / "absent.toml"), "-o", str(tmp_path / "o.h5")]) == 2
    assert "not found" in capsys.readouterr().err


def test_resource_refusal_exit_2(tiny, tmp_path, monkeypatch, capsys):
    FakeEngine(fail=ResourceError("needs 40 GB, limit 2 GB; lower the degree or use --method separable")
               ).install(monkeypatch)
    assert main(["yields", str(tiny), "-o", str(tmp_path / "o.h5"), "--max-memory-gb", "2"]) == 2
    assert "refused: needs 40 GB" in capsys.readouterr().err
    assert not (tmp_path / "o.h5").exists()


def test_interrupt_exits_130_and_leaves_no_file(tiny, tmp_path, monkeypatch, capsys):
    FakeEngine(fail=KeyboardInterrupt()).install(monkeypatch)
    assert main(["yields", str(tiny), "-o", str(tmp_path / "o.h5")]) == 130
    assert "interrupted" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["tiny.toml"]


def test_unexpected_failure_exit_1_with_hint(tiny, tmp_path, monkeypatch, capsys):
    FakeEngine(fail=RuntimeError("kernel exploded")).install(monkeypatch)
    assert main(["yields", str(tiny), "-o", str(tmp_path / "o.h5")]) == 1
    err = capsys.readouterr().err
    assert "failed: RuntimeError: kernel exploded" in err and "--traceback" in err and "Traceback" not in err
    assert main(["--traceback", "yields", str(tiny), "-o", str(tmp_path / "o.h5")]) == 1
    assert "Traceback" in capsys.readouterr().err


def test_help_and_usage(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    assert "examples:" in out and "retina yields" in out and "yields" in out
    assert main(["yields", "--help"]) == 0
    out = capsys.readouterr().out
    for opt in ("--field-uT", "--degree", "--method", "--force", "--no-cache", "examples:"):
        assert opt in out
    assert main([]) == 2
    assert main(["yields", "x.toml"]) == 2  # -o is required: argparse usage error
    assert "required" in capsys.readouterr().err
    assert main(["yields", "x.toml", "-o", "o.h5", "--method", "magic"]) == 2


def test_subprocess_real_engine_and_bad_input(tmp_path):
    pytest.importorskip("retina.spin.engine")
    env = dict(os.environ, RETINA_CACHE=str(tmp_path / "cache"))
    system = tmp_path / "tiny.toml"
    system.write_text(TINY)
    out = tmp_path / "tiny.h5"
    run = subprocess.run([sys.executable, "-m", "retina", "yields", str(system), "-o", str(out), "--degree", "6",
                          "--no-cache"], capture_output=True, text=True, env=env, cwd=tmp_path, timeout=300)
    assert run.returncode == 0, run.stderr
    assert "anisotropy: max - min" in run.stdout and "Traceback" not in run.stderr
    yf = YieldFunction.load(out)
    assert yf.provenance["system_name"] == "tiny pair" and yf.degree == 6
    bad = tmp_path / "bad.toml"
    bad.write_text(TINY.replace("lifetime_us = 1.0", "lifetime_us = -1.0"))
    run = subprocess.run([sys.executable, "-m", "retina", "yields", str(bad), "-o", str(tmp_path / "b.h5")],
                         capture_output=True, text=True, env=env, cwd=tmp_path, timeout=120)
    assert run.returncode == 2 and "Traceback" not in run.stderr
    assert run.stderr.strip().splitlines() == [run.stderr.strip()]
    assert "kinetics.lifetime_us" in run.stderr


def test_real_engine_scope_and_memory_refusals_are_exit_2(tmp_path, monkeypatch, capsys):
    pytest.importorskip("retina.spin.engine")
    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "cache"))
    coupled = tmp_path / "coupled.toml"
    coupled.write_text(TINY + "\n[coupling]\nexchange_mT = 0.05\n")
    assert main(["yields", str(coupled), "-o", str(tmp_path / "o.h5"), "--method", "separable", "-q"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("retina: error: ") and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert main(["yields", str(coupled), "-o", str(tmp_path / "o.h5"), "--max-memory-gb", "1e-9", "-q"]) == 2
    err = capsys.readouterr().err
    assert "refused:" in err and "limit" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "o.h5").exists()


SLOW_RUN = r"""
import sys, time, types
import numpy as np
import retina.spin
from collections import namedtuple

Cost = namedtuple("Cost", "seconds bytes method note")
mod = types.ModuleType("retina.spin.engine")
mod.choose_method = lambda system: "hilbert"
mod.estimate_cost = lambda system, n, method: Cost(60.0, 2**20, method, "slow fake")

def compute_yields(system, field_uT, directions, *, method="auto", progress=None, max_bytes=None):
    print("COMPUTING", file=sys.stderr, flush=True)
    time.sleep(60)
    return np.ones(len(directions))

mod.compute_yields = compute_yields
sys.modules["retina.spin.engine"] = mod
retina.spin.engine = mod
from retina.cli import main
sys.exit(main(sys.argv[1:]))
"""


def test_ctrl_c_in_a_subprocess_exits_130_without_a_file(tmp_path):
    import signal

    system = tmp_path / "tiny.toml"
    system.write_text(TINY)
    out = tmp_path / "never.h5"
    env = dict(os.environ, RETINA_CACHE=str(tmp_path / "cache"))
    proc = subprocess.Popen([sys.executable, "-c", SLOW_RUN, "yields", str(system), "-o", str(out)],
                            stderr=subprocess.PIPE, stdout=subprocess.PIPE, text=True, env=env, cwd=tmp_path)
    try:
        for line in proc.stderr:  # wait until the computation has started
            if "COMPUTING" in line:
                break
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130
    assert "interrupted" in err and "Traceback" not in err
    assert not out.exists() and not list(tmp_path.glob(".never.h5*"))


def test_output_that_is_a_folder_is_bad_input(tiny, tmp_path, monkeypatch, capsys):
    FakeEngine().install(monkeypatch)
    assert main(["yields", str(tiny), "-o", str(tmp_path), "--force"]) == 2
    assert "is a folder" in capsys.readouterr().err


def test_verbose_shows_the_steps_and_quiet_hides_warnings(tiny, tmp_path, monkeypatch, capsys):
    # Common practice, no source: diagnostics go to stderr through logging, at the level the
    # top-level -v / --quiet choose; the summary on stdout is unchanged.
    FakeEngine().install(monkeypatch)
    assert main(["-v", "yields", str(tiny), "-o", str(tmp_path / "v.h5"), "--degree", "6", "--field-uT", "47",
                 "--no-cache"]) == 0
    cap = capsys.readouterr()
    assert "retina: INFO: yield function of 'tiny pair' at 47 uT, degree 6: method hilbert" in cap.err
    assert "computed in" in cap.err and "truncation error" in cap.err
    assert main(["yields", str(tiny), "-o", str(tmp_path / "d.h5"), "--degree", "6", "--field-uT", "47",
                 "--no-cache"]) == 0
    assert "INFO" not in capsys.readouterr().err   # default: warnings only
    # a Python warning (the cache folder cannot be written) is shown by default, hidden by --quiet
    blocked = tmp_path / "blocked"
    blocked.write_text("a file where the cache folder should be")
    args = ["yields", str(tiny), "--degree", "6", "--field-uT", "47", "--cache-dir", str(blocked)]
    assert main(args + ["-o", str(tmp_path / "w1.h5")]) == 0
    assert "retina: WARNING:" in capsys.readouterr().err
    assert main(["--quiet"] + args + ["-o", str(tmp_path / "w2.h5")]) == 0
    err = capsys.readouterr().err
    assert "WARNING" not in err and err == ""
    import logging

    assert logging.getLogger("retina").handlers[-1].__class__ is logging.NullHandler  # nothing left behind
