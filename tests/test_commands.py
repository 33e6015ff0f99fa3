"""The scenario subcommands (patterns, scan, precision, trials, report, demo): help, outputs, exit statuses."""

from __future__ import annotations

import h5py
import numpy as np
import pytest

import retina.commands
from retina import sphere
from retina.cli import main
from retina.results import load_results
from retina.yieldfn import YieldFunction

MINE = ("demo", "patterns", "scan", "precision", "trials", "report")


def test_commands_are_registered():
    assert set(MINE) <= set(retina.commands.COMMANDS)


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    """A small scenario on a synthetic degree-6 yield function (no spin computation needed)."""
    d = tmp_path_factory.mktemp("scenario")
    g = sphere.grid_for_degree(6)
    p = g.points
    values = 0.3 + 0.02 * (1.5 * p[:, 2] ** 2 - 0.5) + 0.006 * p[:, 0] * p[:, 1] + 0.003 * p[:, 0] ** 4
    YieldFunction.from_values(values, g, 6, {"kind": "synthetic test function"}).save(d / "yf.h5")
    (d / "s.toml").write_text("""
[scenario]
name = "command test"
seed = 5
[yield]
file = "yf.h5"
degree = 6
[field]
intensity_uT = 50.0
inclination_deg = 60.0
declination_deg = 0.0
[[eyes]]
side = "left"
azimuth_deg = -60.0
n_receptors = 60
[[eyes]]
side = "right"
azimuth_deg = 60.0
n_receptors = 60
[ordering]
disorder_kappas = [1.0, 10.0]
[pose]
headings_deg = [0.0, 90.0]
[scan]
amplitude_deg = 40.0
steps = 5
[readout]
photons = [10.0, 1000.0]
decode_repeats = 10
[trials]
n_trials = 8
scan_steps = 3
[output]
formats = ["png"]
dpi = 60
animation = false
""")
    return d / "s.toml"


@pytest.mark.parametrize("name", MINE)
def test_help_has_examples_and_exit_statuses(name, capsys):
    assert main([name, "--help"]) == 0
    out = capsys.readouterr().out
    assert "examples:" in out and "exit status: 0 done, 1 failed, 2 bad input, 130 interrupted" in out


@pytest.mark.parametrize("name, groups, figures", [
    ("patterns", {"patterns"}, {"yield_sphere", "modulation_fields"}),
    ("scan", {"scan", "precision"}, {"scan_filmstrip", "precision_curves"}),
    ("precision", {"precision", "disorder"}, {"precision_curves", "disorder_tolerance"}),
    ("trials", {"trials"}, {"trial_histograms"}),
])
def test_each_command_writes_its_results_figures_and_report(name, groups, figures, scenario, tmp_path, capsys):
    out = tmp_path / name
    assert main([name, str(scenario), "-o", str(out), "-q"]) == 0
    assert "report:" in capsys.readouterr().out
    with h5py.File(out / "results.h5") as h:
        assert groups <= set(h) and "provenance" in h
        prov = h["provenance"].attrs
        assert "command test" in prov["scenario_toml"] and prov["seed"] == 5
        assert "numpy" in prov["versions"] and prov["date_utc"]
    made = {p.stem for p in (out / "figures").glob("*.png")}
    assert figures <= made
    html = (out / "index.html").read_text()
    for f in figures:
        assert f"figures/{f}.png" in html


def test_bad_input_exits_2_with_one_line(scenario, tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text(scenario.read_text().replace("decode_repeats", "decode_repaets").replace('"yf.h5"',
                                                                                            f'"{scenario.parent / "yf.h5"}"'))
    assert main(["patterns", str(bad), "-o", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and "Traceback" not in err
    assert str(bad) in err and "readout.decode_repaets" in err and "did you mean 'decode_repeats'" in err
    assert not (tmp_path / "o").exists()

    assert main(["trials", str(tmp_path / "absent.toml"), "-o", str(tmp_path / "o")]) == 2
    assert "scenario file not found" in capsys.readouterr().err

    missing = tmp_path / "missing.toml"
    missing.write_text(scenario.read_text().replace('"yf.h5"', '"nothing.h5"'))
    assert main(["trials", str(missing), "-o", str(tmp_path / "o")]) == 2
    assert "yield.file: file not found" in capsys.readouterr().err

    assert main(["patterns", str(scenario), "-o", str(tmp_path / "o"), "--headings", "0,north"]) == 2
    assert "--headings" in capsys.readouterr().err
    assert main(["patterns", str(scenario), "-o", str(tmp_path / "o"), "--formats", "png,gif"]) == 2
    assert "output.formats" in capsys.readouterr().err
    assert main(["patterns", str(scenario), "-o", str(tmp_path / "o"), "--degree", "4"]) == 2  # argparse usage


def test_outputs_are_not_overwritten_without_force(scenario, tmp_path, capsys):
    out = tmp_path / "o"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert main(["trials", str(scenario), "-o", str(out), "-q"]) == 2
    assert "--force" in capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]
    assert main(["trials", str(scenario), "-o", str(out), "-q", "--force"]) == 0
    assert (out / "results.h5").is_file() and (out / "keep.txt").read_text() == "mine"


def test_report_rebuilds_from_results(scenario, tmp_path, capsys):
    out = tmp_path / "run"
    assert main(["precision", str(scenario), "-o", str(out), "-q"]) == 0
    again = tmp_path / "again"
    assert main(["report", str(out / "results.h5"), "-o", str(again), "--formats", "png,pdf", "--dpi", "60",
                 "-q"]) == 0
    assert (again / "figures" / "precision_curves.pdf").is_file()
    md = (again / "report.md").read_text()
    assert "## Key numbers" in md and "photons/receptor" in md
    # the data are carried over unchanged
    with h5py.File(out / "results.h5") as a, h5py.File(again / "results.h5") as b:
        assert np.array_equal(a["precision/bound_single_deg"][()], b["precision/bound_single_deg"][()])
    # redraw in place
    assert main(["report", str(out / "results.h5"), "-o", str(out), "--force", "-q"]) == 0
    capsys.readouterr()
    not_results = tmp_path / "x.h5"
    with h5py.File(not_results, "w") as h:
        h["a"] = 1
    assert main(["report", str(not_results), "-o", str(tmp_path / "r")]) == 2
    assert "not a retina-compass results file" in capsys.readouterr().err


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_interrupt_exits_130_and_leaves_no_output(scenario, tmp_path, monkeypatch, capsys, jobs):
    from retina.outputs import figures

    real, real_collect = figures.make_figures, figures.FigurePool.collect

    def interrupted(res, folder, **kw):
        real(res, folder, **{**kw, "animation": False})  # some files exist in the staging folder now
        raise KeyboardInterrupt

    def interrupted_collect(self, res, **kw):
        real_collect(self, res, **kw)                      # every figure is in the staging folder now
        raise KeyboardInterrupt

    monkeypatch.setattr(figures, "make_figures", interrupted)
    monkeypatch.setattr(figures.FigurePool, "collect", interrupted_collect)
    out = tmp_path / "o"
    assert main(["patterns", str(scenario), "-o", str(out), "-q", "--jobs", jobs]) == 130
    assert "interrupted" in capsys.readouterr().err
    assert not out.exists() and list(tmp_path.iterdir()) == []  # no partial folder, no staging left


def test_interrupt_during_a_stage_while_figures_are_drawn(scenario, tmp_path, monkeypatch, capsys):
    # Figures of finished stages are drawn on worker processes while later stages compute
    # (retina.outputs.OutputWriter); Ctrl-C in a later stage stops the workers and leaves nothing.
    from retina.stages import STAGES, Stage

    started = []

    def stage(built, progress):
        import time

        time.sleep(0.5)                      # the yield-sphere figure is being drawn meanwhile
        started.append(1)
        raise KeyboardInterrupt

    monkeypatch.setitem(STAGES, "patterns", Stage("patterns", stage))
    out = tmp_path / "o"
    assert main(["patterns", str(scenario), "-o", str(out), "-q", "--jobs", "2"]) == 130
    assert started and "interrupted" in capsys.readouterr().err
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_quick_keeps_the_headings_and_dpi_given_on_the_command_line(scenario, tmp_path, capsys):
    # --quick reduces the scenario to two headings and 100 dpi; options typed by the user win
    # (issue 8, part 3; common practice, no source: explicit options override presets).
    out = tmp_path / "q"
    assert main(["patterns", str(scenario), "-o", str(out), "-q", "--quick", "--headings", "0,30,60,90",
                 "--dpi", "70"]) == 0
    res = load_results(out / "results.h5")
    assert list(res.groups["patterns"]["headings_deg"]) == [0.0, 30.0, 60.0, 90.0]
    assert res.provenance["quick"]
    from PIL import Image

    dpi = Image.open(out / "figures" / "modulation_fields.png").info["dpi"][0]
    assert round(dpi) == 70
    # without the options, --quick's preset applies (100 dpi instead of the scenario's 60)
    out2 = tmp_path / "q2"
    assert main(["patterns", str(scenario), "-o", str(out2), "-q", "--quick"]) == 0
    assert round(Image.open(out2 / "figures" / "modulation_fields.png").info["dpi"][0]) == 100
