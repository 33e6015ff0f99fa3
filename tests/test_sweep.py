"""Parameter sweeps: the sweep file, planning by yield function, seeds, workers, resuming,
failures, the dataset and the command."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from retina.cli import main
from retina.errors import InputError
from retina.sweep import load, load_sweep, run_sweep
from retina.sweep.run import plan_sweep
from retina.sweep.points import expand, point_seed

ASSETS = Path(__file__).resolve().parent.parent / "assets"

SCENARIO = f"""
[scenario]
name = "tiny sweep base"
seed = 7

[yield]
system = "{(ASSETS / 'demo_pair.toml').as_posix()}"
degree = 4

[ordering]
model = "cone"
kappa = 10.0
disorder_kappas = [1.0, 10.0]

[[eyes]]
side = "left"
azimuth_deg = -60.0
n_receptors = 30

[[eyes]]
side = "right"
azimuth_deg = 60.0
n_receptors = 30

[field]
intensity_uT = 49.0
inclination_deg = 60.0
declination_deg = 0.0

[pose]
headings_deg = [0.0, 90.0]

[scan]
steps = 5

[readout]
photons = [100.0, 10000.0]
decode_repeats = 6

[trials]
n_trials = 6
scan_steps = 3

[output]
animation = false
"""

SWEEP = """
[sweep]
name = "tiny"
scenario = "base.toml"
outputs = ["modulation_depth", "bound_single_deg", "decoder_error_scan_deg", "trial_r"]

[[axes]]
key = "system.kinetics.lifetime_us"
values = [1.0, 4.0]

[[axes]]
key = "ordering.kappa"
values = [2.0, 50.0]
"""


def write(folder: Path, sweep: str = SWEEP, scenario: str = SCENARIO) -> Path:
    (folder / "base.toml").write_text(scenario)
    f = folder / "sweep.toml"
    f.write_text(sweep)
    return f


@pytest.fixture(scope="module")
def done(tmp_path_factory):
    """The tiny sweep run once in this process: (sweep file, outcome)."""
    d = tmp_path_factory.mktemp("sweep")
    f = write(d)
    out = run_sweep(load_sweep(f), d / "out", jobs=1)
    return f, out


# ----------------------------------------------------------------------------------------------
# the sweep file


def test_grid_points_in_c_order_with_their_values(tmp_path):
    spec = load_sweep(write(tmp_path))
    assert spec.shape == (2, 2) and spec.dims == ("lifetime_us", "kappa")
    pts = expand(spec, tmp_path)
    # common practice, no source: C order, the last axis fastest (numpy.unravel_index)
    assert [p.position for p in pts] == [(0, 0), (0, 1), (1, 0), (1, 1)]
    assert [p.params for p in pts][1] == {"lifetime_us": 1.0, "kappa": 50.0}
    from retina.spin.io import load_system

    for p in pts:
        assert p.scenario["ordering"]["kappa"] == p.params["kappa"]
        system = load_system(p.scenario.yield_source[1])
        # derived: lifetime_us = tau sets k_S = k_T = 1 / tau (retina.spin.io docstring)
        assert system.k_singlet == pytest.approx(1e6 / p.params["lifetime_us"])
    units = {a.name: a.units for a in spec.axes}
    assert units == {"lifetime_us": "us", "kappa": "1"}


def test_zip_and_log_range(tmp_path):
    text = SWEEP.replace('name = "tiny"', 'name = "tiny"\ncombine = "zip"').replace(
        'values = [2.0, 50.0]', 'start = 1.0\nstop = 100.0\nnum = 2\nspacing = "log"')
    spec = load_sweep(write(tmp_path, text))
    assert spec.shape == (2,) and spec.dims == ("lifetime_us",)
    # Reference: numpy.geomspace
    np.testing.assert_allclose(spec.axes[1].values, np.geomspace(1.0, 100.0, 2))
    assert [p.params for p in expand(spec, tmp_path)] == [{"lifetime_us": 1.0, "kappa": 1.0},
                                                          {"lifetime_us": 4.0, "kappa": 100.0}]


@pytest.mark.parametrize("change, key, words", [
    (('"trial_r"]', '"trial_rr"]'), "sweep.outputs", "did you mean 'trial_r'"),
    (('key = "ordering.kappa"', 'key = "ordering.kapa"'), "axes[1].key", "did you mean 'kappa'"),
    (('name = "tiny"', 'name = "tiny"\ncombine = "zip"\n'), "axes", "equal lengths"),
    (('values = [2.0, 50.0]', 'values = [2.0, 50.0]\nnum = 3'), "axes[1]", "either values"),
    (('values = [2.0, 50.0]', 'values = [2.0, 50.0]\nname = "readout_photons"'), "axes[1].name", "reserved"),
    (('values = [2.0, 50.0]', 'values = [2.0, 2.0]'), "axes[1].values", "distinct"),
    (('scenario = "base.toml"', 'scenario = "missing.toml"'), None, "not found"),
])
def test_bad_sweep_files_name_the_file_and_key(tmp_path, change, key, words, capsys):
    f = write(tmp_path, SWEEP.replace(*change) if change[0] != 'name = "tiny"' else
              SWEEP.replace(*change).replace("values = [2.0, 50.0]", "values = [2.0, 50.0, 3.0]"))
    with pytest.raises(InputError, match=words) as err:
        spec = load_sweep(f)
        expand(spec, tmp_path)
    if key:
        assert err.value.key == key
    assert main(["sweep", str(f), "-o", str(tmp_path / "o"), "-q"]) == 2
    line = capsys.readouterr().err.strip()
    assert line.count("\n") == 0 and words in line


def test_invalid_point_names_its_values(tmp_path):
    f = write(tmp_path, SWEEP.replace("values = [2.0, 50.0]", "values = [2.0, -1.0]"))
    with pytest.raises(InputError, match=r"kappa = -1.*ordering.kappa|point lifetime_us = 1, kappa = -1"):
        expand(load_sweep(f), tmp_path)


def test_point_seeds_are_the_spawned_children(tmp_path):
    spec = load_sweep(write(tmp_path))
    seeds = [p.scenario.seed for p in expand(spec, tmp_path)]
    assert len(set(seeds)) == 4
    # Reference: numpy.random.SeedSequence.spawn - the i-th child's state, 63 bits
    for i, s in enumerate(seeds):
        child = np.random.SeedSequence(spec.seed).spawn(4)[i]
        w = child.generate_state(2, dtype=np.uint32)
        assert s == ((int(w[0]) << 32 | int(w[1])) & (2**63 - 1)) == point_seed(spec.seed, i, 4)
    assert spec.seed == 7     # the base scenario's seed when [sweep] gives none


# ----------------------------------------------------------------------------------------------
# planning, numbers, resuming, failures


def test_points_share_one_yield_function_per_spin_system(done, tmp_path):
    f, out = done
    plan = plan_sweep(load_sweep(f), f.parent / "out")
    assert sorted(len(v) for v in plan.groups.values()) == [2, 2]
    assert out.yield_functions == 2 and out.yield_computed == 2
    again = run_sweep(load_sweep(f), tmp_path / "again", jobs=1, write=False)
    assert again.yield_computed == 0          # both from the content-hash cache
    # the cached yield function equals one computed directly (Reference: YieldFunction.from_system)
    from retina.cache import YieldCache
    from retina.yieldfn import YieldFunction

    key = next(iter(plan.groups))
    job = plan.jobs[key]
    direct = YieldFunction.from_system(job["system"], job["field_uT"], degree=4, method=job["method"])
    np.testing.assert_array_equal(YieldCache().get(key).coeffs, direct.coeffs)


def test_a_point_equals_a_single_run_of_its_scenario(done):
    from retina.pipeline import run

    f, out = done
    p = expand(load_sweep(f), f.parent / "out")[3]
    res = run(p.scenario)          # computes everything itself: yield function, all stages
    ds = out.dataset
    at = ds.isel(lifetime_us=1, kappa=1)
    assert at["modulation_depth"].item() == np.mean(res.groups["patterns"]["depth"])
    np.testing.assert_array_equal(at["bound_single_deg"].values, res.groups["precision"]["bound_single_deg"])
    np.testing.assert_array_equal(at["decoder_error_scan_deg"].values, res.groups["precision"]["decoded_scan_rms_deg"])
    assert at["seed"].item() == p.scenario.seed


def test_order_deepens_the_modulation(done):
    # Source (common practice, no source): complete three-dimensional disorder removes the
    # pattern; a tighter cone (larger kappa) keeps more of it.
    depth = done[1].dataset["modulation_depth"]
    assert np.all(depth.sel(kappa=50.0).values > depth.sel(kappa=2.0).values)


@pytest.mark.slow
def test_identical_numbers_for_one_worker_two_workers_and_dask(done, tmp_path):
    from distributed import LocalCluster

    f, out = done
    two = run_sweep(load_sweep(f), tmp_path / "two", jobs=2, write=False)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) as cl:
        dk = run_sweep(load_sweep(f), tmp_path / "dask", scheduler=cl.scheduler_address, write=False)
    for other in (two, dk):
        assert other.computed == 4
        for v in out.dataset.data_vars:
            np.testing.assert_array_equal(out.dataset[v].values, other.dataset[v].values, err_msg=v)


def test_resume_computes_only_missing_points(done, tmp_path):
    import shutil

    f, out = done
    shutil.copytree(f.parent / "out", tmp_path / "out")
    files = sorted((tmp_path / "out" / "points").glob("p*.npz"))
    assert len(files) == 4
    files[2].unlink()
    again = run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert (again.computed, again.reused) == (1, 3)
    for v in out.dataset.data_vars:
        np.testing.assert_array_equal(out.dataset[v].values, again.dataset[v].values)


def test_a_failing_point_is_reported_and_the_others_finish(tmp_path, monkeypatch):
    import dataclasses

    from retina import stages

    f = write(tmp_path)
    orig = stages.STAGES["patterns"]

    def broken(built, progress):
        if built.scenario["ordering"]["kappa"] == 50.0:
            raise ValueError("invented failure")
        return orig.compute(built, progress)

    monkeypatch.setitem(stages.STAGES, "patterns", dataclasses.replace(orig, compute=broken))
    out = run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert [p.params["kappa"] for p, _ in out.failures] == [50.0, 50.0]
    assert "invented failure" in out.failures[0][1]
    ds = out.dataset
    assert ds["failed"].values.tolist() == [[0, 1], [0, 1]]
    assert np.isnan(ds["modulation_depth"].values[:, 1]).all() and np.isfinite(ds["modulation_depth"].values[:, 0]).all()
    assert json.loads(ds.attrs["failures"])[0]["params"] == {"lifetime_us": 1.0, "kappa": 50.0}
    monkeypatch.setitem(stages.STAGES, "patterns", orig)
    again = run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert (again.computed, again.reused, again.failures) == (2, 2, [])


def test_ctrl_c_keeps_the_finished_points(tmp_path, monkeypatch):
    import dataclasses

    from retina import stages

    f = write(tmp_path)
    orig = stages.STAGES["patterns"]
    calls = []

    def interrupted(built, progress):
        calls.append(1)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return orig.compute(built, progress)

    monkeypatch.setitem(stages.STAGES, "patterns", dataclasses.replace(orig, compute=interrupted))
    with pytest.raises(KeyboardInterrupt):
        run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert len(list((tmp_path / "out" / "points").glob("p*.npz"))) == 2
    assert not list((tmp_path / "out").rglob("*.part"))
    monkeypatch.setitem(stages.STAGES, "patterns", orig)
    again = run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert (again.computed, again.reused) == (2, 2)


# ----------------------------------------------------------------------------------------------
# the dataset, figures and the command


def test_dataset_describes_itself(done):
    import xarray as xr

    f, out = done
    with xr.open_dataset(out.path) as ds:         # plain xarray, no retina code
        assert dict(ds.sizes) == {"lifetime_us": 2, "kappa": 2, "readout_photons": 2, "light_level": 2}
        assert ds["lifetime_us"].attrs["units"] == "us"
        assert ds["lifetime_us"].attrs["key"] == "system.kinetics.lifetime_us"
        assert ds["readout_photons"].attrs["units"] == "photons per receptor"
        assert ds["bound_single_deg"].dims == ("lifetime_us", "kappa", "readout_photons")
        assert ds["bound_single_deg"].attrs["units"] == "deg"
        assert list(ds["light_level"].values) == ["dim", "bright"]
        np.testing.assert_array_equal(ds["trial_r"].values, out.dataset["trial_r"].values)
    loaded = load(out.path.parent)
    assert loaded.attrs["format"] == "retina-compass sweep" and "tiny" in loaded.attrs["sweep_toml"]


def test_load_refuses_other_files(tmp_path):
    import xarray as xr

    xr.Dataset({"a": ("x", [1.0, 2.0])}).to_netcdf(tmp_path / "other.nc", engine="h5netcdf")
    with pytest.raises(InputError, match="not a retina-compass sweep file"):
        load(tmp_path / "other.nc")
    (tmp_path / "junk.nc").write_text("not netcdf")
    with pytest.raises(InputError, match="cannot read"):
        load(tmp_path / "junk.nc")


def test_figures_lines_and_heat_maps(done):
    from retina.sweep.figures import plot_output

    ds = done[1].dataset
    fig = plot_output(ds, "bound_single_deg")          # 2 axes: heat map, a panel per photon level
    assert len(fig.axes) == 3                          # two panels and the colour bar
    assert fig.axes[0].collections[0].get_cmap().name == "cividis"
    fig = plot_output(ds, "trial_r", y="", fixed={"kappa": 2.0})   # lines, one per light level
    ax = fig.axes[0]
    assert len(ax.lines) == 2
    assert "kappa = 2" in fig.retina_caption


def test_command_runs_resumes_and_refuses_another_sweeps_folder(done, tmp_path, capsys):
    f, _ = done
    assert main(["sweep", str(f), "-o", str(tmp_path / "o"), "--jobs", "1", "-q", "--formats", "png"]) == 0
    text = capsys.readouterr().out
    assert "4 computed, 0 reused" in text
    assert (tmp_path / "o" / "sweep.nc").is_file() and (tmp_path / "o" / "figures" / "trial_r.png").is_file()
    assert main(["sweep", str(f), "-o", str(tmp_path / "o"), "-q", "--no-figures"]) == 0
    assert "0 computed, 4 reused" in capsys.readouterr().out
    other = write(tmp_path, SWEEP.replace("values = [2.0, 50.0]", "values = [3.0, 50.0]"))
    assert main(["sweep", str(other), "-o", str(tmp_path / "o"), "-q"]) == 2
    assert "--force" in capsys.readouterr().err


def test_a_changed_pair_file_is_not_taken_for_finished_points(tmp_path):
    pair = tmp_path / "pair.toml"
    pair.write_text((ASSETS / "demo_pair.toml").read_text())
    text = SWEEP.replace('''[[axes]]
key = "system.kinetics.lifetime_us"
values = [1.0, 4.0]
''', "")
    f = write(tmp_path, text, SCENARIO.replace((ASSETS / "demo_pair.toml").as_posix(), pair.as_posix()))
    first = run_sweep(load_sweep(f), tmp_path / "out", jobs=1, write=False)
    assert first.computed == 2
    same = run_sweep(load_sweep(f), tmp_path / "out", jobs=1, write=False)
    assert (same.computed, same.reused) == (0, 2)
    pair.write_text(pair.read_text().replace("lifetime_us = 2.0", "lifetime_us = 3.0"))
    changed = run_sweep(load_sweep(f), tmp_path / "out", jobs=1, write=False)
    assert (changed.computed, changed.reused) == (2, 0)


@pytest.mark.parametrize("name", ["sweep", "export"])
def test_help_has_examples_and_exit_statuses(name, capsys):
    assert main([name, "--help"]) == 0
    out = capsys.readouterr().out
    assert "examples:" in out and "exit status: 0 done" in out and "2 bad input" in out


def test_a_failing_yield_function_fails_only_its_points(tmp_path, monkeypatch):
    import retina.sweep.run as R

    f = write(tmp_path)
    orig = R.compute_yield

    def broken(job):
        if job["system"].k_singlet == pytest.approx(1e6 / 4.0):
            raise MemoryError("invented shortage")
        return orig(job)

    monkeypatch.setattr(R, "compute_yield", broken)
    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "cache"))      # nothing cached: both computed
    out = run_sweep(load_sweep(f), tmp_path / "out", jobs=1)
    assert [p.params["lifetime_us"] for p, _ in out.failures] == [4.0, 4.0]
    assert out.failures[0][1].startswith("yield function: MemoryError: invented shortage")
    assert out.dataset["failed"].values.tolist() == [[0, 0], [1, 1]]
    assert np.isfinite(out.dataset["modulation_depth"].values[0]).all()
