"""The results file describes itself: dimension scales and units, Results.to_xarray, retina export,
and the build step's use of the yield-function cache."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import numpy as np
import pytest

from retina.cli import main

ASSETS = Path(__file__).resolve().parent.parent / "assets"

SCENARIO = f"""
[scenario]
name = "tiny results"
seed = 3

[yield]
system = "{(ASSETS / 'demo_pair.toml').as_posix()}"
degree = 4

[ordering]
disorder_kappas = [1.0, 10.0, 100.0]

[[eyes]]
side = "left"
azimuth_deg = -60.0
n_receptors = 25

[[eyes]]
side = "right"
azimuth_deg = 60.0
n_receptors = 25

[field]
intensity_uT = 49.0
inclination_deg = 60.0
declination_deg = 0.0

[pose]
headings_deg = [0.0, 90.0, 180.0]

[scan]
steps = 5

[readout]
photons = [100.0, 1000.0, 10000.0]
decode_repeats = 5

[trials]
n_trials = 7
scan_steps = 3
"""


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    from retina.pipeline import run
    from retina.results import save_results
    from retina.scenario import load_scenario

    d = tmp_path_factory.mktemp("results")
    (d / "s.toml").write_text(SCENARIO)
    res = run(load_scenario(d / "s.toml"))
    path = save_results(res, d / "results.h5")
    return res, path


def test_plain_xarray_reads_named_dimensions_and_units(saved):
    import xarray as xr

    res, path = saved
    # Reference: xarray + h5netcdf, an independent reader of HDF5 dimension scales
    with xr.open_dataset(path, group="precision", engine="h5netcdf") as ds:
        assert ds["bound_single_deg"].dims == ("photons",)
        assert ds["bound_single_deg"].attrs["units"] == "deg"
        assert ds["photons"].attrs["units"] == "photons per receptor"
        np.testing.assert_array_equal(ds["photons"].values, [100.0, 1000.0, 10000.0])
        assert ds["info_per_photon_single"].dims == ("info_headings_deg",) and ds.sizes["info_headings_deg"] == 360
        np.testing.assert_array_equal(ds["bound_scan_deg"].values, res.groups["precision"]["bound_scan_deg"])
    with xr.open_dataset(path, group="patterns", engine="h5netcdf") as ds:
        assert ds["yields"].dims == ("headings_deg", "receptor") and ds.sizes["receptor"] == 50
        assert ds["b_head"].dims == ("headings_deg", "xyz")
    with xr.open_dataset(path, group="disorder", engine="h5netcdf") as ds:
        assert ds["bound_deg"].dims == ("light_photons", "kappas")
    with xr.open_dataset(path, group="trials/levels/dim", engine="h5netcdf") as ds:
        assert ds["start_deg"].dims == ("trial",) and ds["start_deg"].attrs["units"] == "deg"


def test_h5py_sees_scales_and_the_round_trip_is_unchanged(saved):
    import h5py

    from retina.results import RESULTS_VERSION, load_results

    res, path = saved
    with h5py.File(path, "r") as h:
        assert h.attrs["format_version"] == RESULTS_VERSION == 2
        d = h["scan/yields"]
        assert [dim.label or list(dim.keys())[0] for dim in d.dims] == ["yaw_deg", "receptor"]
        assert h["scan/change_per_degree"].attrs["units"] == "deg^-1"
    back = load_results(path)
    assert set(back.groups["patterns"]) == set(res.groups["patterns"])       # index scales are not results

    def same(a, b):
        assert set(a) == set(b)
        for k in a:
            if isinstance(a[k], dict):
                same(a[k], b[k])
            else:
                np.testing.assert_array_equal(np.asarray(a[k]), np.asarray(b[k]), err_msg=k)
    same(res.groups, back.groups)


def test_to_xarray_matches_the_file(saved):
    import xarray as xr

    res, path = saved
    tree = res.to_xarray()
    p = tree["precision"].dataset
    with xr.open_dataset(path, group="precision", engine="h5netcdf") as ds:
        for v in ("bound_single_deg", "decoded_scan_rms_deg", "info_per_photon_scan"):
            assert p[v].dims == ds[v].dims and p[v].attrs["units"] == ds[v].attrs["units"]
            np.testing.assert_array_equal(p[v].values, ds[v].values)
    lv = tree["trials/levels/bright"].dataset
    assert lv.attrs["r"] == res.groups["trials"]["levels"]["bright"]["r"]
    assert tree["field"].dataset.attrs["F_uT_units"] == "uT"


def test_export_csv_and_json(saved, tmp_path, capsys):
    res, path = saved
    assert main(["export", str(path), "--csv", str(tmp_path / "k.csv"), "--json", str(tmp_path / "k.json")]) == 0
    # Reference: the csv module and pandas read the file back
    rows = list(csv.DictReader(io.StringIO((tmp_path / "k.csv").read_text())))
    bound = [r for r in rows if r["name"] == "bound_single_deg"]
    assert [float(r["coord_value"]) for r in bound] == [100.0, 1000.0, 10000.0]
    assert [float(r["value"]) for r in bound] == list(res.groups["precision"]["bound_single_deg"])
    assert all(r["units"] == "deg" for r in bound)
    import pandas as pd

    df = pd.read_csv(tmp_path / "k.csv")
    assert len(df) == len(rows)
    doc = json.loads((tmp_path / "k.json").read_text())
    assert doc["format"] == "retina-compass key numbers" and len(doc["rows"]) == len(rows)
    r = [x for x in doc["rows"] if x["group"] == "trials" and x["name"] == "r" and x["coord_value"] == "dim"][0]
    assert r["value"] == res.groups["trials"]["levels"]["dim"]["r"]
    # never overwrite without --force; bad input is one line and exit 2
    assert main(["export", str(path), "--csv", str(tmp_path / "k.csv")]) == 2
    assert main(["export", str(path)]) == 2
    assert main(["export", str(tmp_path / "none.h5"), "--csv", "-"]) == 2
    err = capsys.readouterr().err
    assert "--force" in err and "results file not found" in err


def test_build_uses_the_yield_cache(tmp_path, monkeypatch):
    from retina import build
    from retina.scenario import load_scenario
    from retina.yieldfn import YieldFunction

    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "cache"))
    (tmp_path / "s.toml").write_text(SCENARIO)
    sc = load_scenario(tmp_path / "s.toml")
    first = build.build_yield_function(sc)
    assert not first.from_cache
    second = build.build_yield_function(sc.replace(ordering={"kappa": 3.0}, readout={"decode_repeats": 9}))
    assert second.from_cache
    np.testing.assert_array_equal(first.coeffs, second.coeffs)
    third = build.build_yield_function(sc.replace(field={"intensity_uT": 50.0}))   # another field: computed
    assert not third.from_cache
    # Reference: a direct engine computation without the cache
    from retina.spin.io import load_system

    direct = YieldFunction.from_system(load_system(sc.yield_source[1]), 49.0, degree=4)
    np.testing.assert_array_equal(direct.coeffs, first.coeffs)
