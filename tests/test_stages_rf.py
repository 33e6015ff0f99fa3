"""The [rf] scenario section and the rf / rf_sweep stages, end to end on a small invented pair.

Checks against derived identities (zero amplitude is the control; a coil along the field is the
parallel condition, one across it the perpendicular one), against the exact RF method for the
sweep's second-order yield functions, and the results file round trip.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from retina.errors import InputError
from retina.pipeline import run
from retina.results import load_results, save_results
from retina.stages import rf as rfs
from retina.stages import rf_sweep as rsw

from _rf_scenario import small_rf_scenario

PAIR = """
[pair]
name = "invented small RF pair"
[radical_a]
label = "A"
[[radical_a.nuclei]]
label = "H1"
spin = 0.5
principal_mT = [0.2, 0.3, 0.9]
[[radical_a.nuclei]]
label = "H2"
spin = 0.5
hyperfine_mT = 0.4
[radical_b]
label = "B"
[[radical_b.nuclei]]
label = "h"
spin = 0.5
hyperfine_mT = 0.6
[kinetics]
lifetime_us = 2.0
"""


def scenario(tmp_path: Path, rf: dict):
    return small_rf_scenario(tmp_path, rf, PAIR, name="rf test", seed=5)


def test_schema_refuses_incomplete_conditions(tmp_path):
    with pytest.raises(InputError, match=r"rf\.conditions\[0\]\.frequency_MHz"):
        scenario(tmp_path, {"conditions": [{"name": "a", "kind": "tone", "amplitude_nT": 5.0}]})
    with pytest.raises(InputError, match=r"rf\.conditions\[0\]\.asd_nT_per_rtHz"):
        scenario(tmp_path, {"conditions": [{"name": "b", "kind": "band", "band_MHz": [0.1, 10.0], "rms_nT": 1.0,
                                            "asd_nT_per_rtHz": 0.1}]})
    with pytest.raises(InputError, match=r"rf\.conditions\[0\]\.direction"):
        scenario(tmp_path, {"conditions": [{"name": "c", "kind": "tone", "frequency_MHz": 1.0, "amplitude_nT": 5.0,
                                            "direction": "sideways"}]})
    with pytest.raises(InputError, match=r"rf\.sweep_light"):
        scenario(tmp_path, {"sweep_MHz": [1.0], "sweep_light": "noon"})
    with pytest.raises(InputError, match=r"rf\.conditions\[0\]\.frequncy_MHz"):
        scenario(tmp_path, {"conditions": [{"name": "d", "kind": "tone", "frequncy_MHz": 1.0}]})


def test_conditions_end_to_end(tmp_path):
    # Derived: a tone of zero amplitude is the control (same grid, same fit); a coil along the static
    # field is the parallel condition and a coil at right angles to it the perpendicular one (the
    # world field of [field] lies in the north-down plane, 60 deg below north, so [0, 1, 0] (east)
    # is perpendicular and (cos 60, 0, sin 60) parallel).
    c60, s60 = np.cos(np.radians(60.0)), np.sin(np.radians(60.0))
    conds = [{"name": "zero", "kind": "tone", "frequency_MHz": 1.4, "amplitude_nT": 0.0},
             {"name": "perp", "kind": "tone", "frequency_MHz": 1.4, "amplitude_nT": 3000.0},
             {"name": "par", "kind": "tone", "frequency_MHz": 1.4, "amplitude_nT": 3000.0, "direction": "parallel"},
             {"name": "coil east", "kind": "tone", "frequency_MHz": 1.4, "amplitude_nT": 3000.0,
              "direction": "coil", "coil": [0.0, 1.0, 0.0]},
             {"name": "coil along", "kind": "tone", "frequency_MHz": 1.4, "amplitude_nT": 3000.0,
              "direction": "coil", "coil": [c60, 0.0, s60]},
             {"name": "band", "kind": "band", "band_MHz": [0.1, 10.0], "rms_nT": 100.0}]
    sc = scenario(tmp_path, {"degree": 2, "check_points": 2, "conditions": conds})
    res = run(sc, stages=("rf",))
    g = res.groups["rf"]
    names = json.loads(g["names"])
    assert names[0] == "off" and names[1:] == [c["name"] for c in conds]
    by = {g["conditions"][f"c{i}"]["name"]: g["conditions"][f"c{i}"] for i in range(len(names))}
    np.testing.assert_allclose(by["zero"]["coeffs"], by["off"]["coeffs"], atol=1e-12, rtol=0)
    np.testing.assert_allclose(by["coil east"]["coeffs"], by["perp"]["coeffs"], atol=1e-9, rtol=0)
    np.testing.assert_allclose(by["coil along"]["coeffs"], by["par"]["coeffs"], atol=1e-9, rtol=0)
    assert np.max(np.abs(by["perp"]["coeffs"] - by["off"]["coeffs"])) > 1e-6       # a real RF effect
    assert 0 < by["band"]["eta"] < 0.1 and by["band"]["weak_valid"] == 1
    for c in by.values():
        assert c["bound_single_deg"].shape == (2,) and c["trial_r"].shape == (2,)
    # common random numbers: the control and the zero tone give identical trials
    np.testing.assert_allclose(by["zero"]["trial_r"], by["off"]["trial_r"], atol=1e-9, rtol=0)
    back = load_results(save_results(res, tmp_path / "r.h5"))
    assert back.groups["rf"]["conditions"]["c3"]["name"] == "par"
    np.testing.assert_array_equal(back.groups["rf"]["conditions"]["c2"]["coeffs"], by["perp"]["coeffs"])


def test_sweep_matches_the_exact_method_and_finds_no_onset_for_weak_fields(tmp_path):
    # Reference: the exact RF method (rf_yield_function_for, separable Floquet) at one swept
    # frequency, same degree and grid; the sweep's second-order result differs by the fourth
    # order, ~ eta^2 relative to the RF change (eta = gamma_e B1 / k = 0.18 at 500 nT, 2 us).
    sc = scenario(tmp_path, {"degree": 2, "check_points": 2, "sweep_MHz": [0.3, 1.4], "sweep_nT": 500.0,
                             "sweep_lifetimes_us": [2.0, 1.0]})
    res = run(sc, stages=("rf_sweep",))
    w = res.groups["rf_sweep"]
    assert w["perp_bound_deg"].shape == (2, 2, 2) and w["trial_perp_r"].shape == (2,)
    assert json.loads(w["method"])[1] == "second-order response"
    from retina.spin.io import load_system
    from retina.yieldfn import YieldFunction

    system = rsw._with_lifetime(load_system(tmp_path / "pair.toml"), 1.0)
    exact = rfs.rf_yield_function_for(system, 50.0, {"kind": "tone", "direction": "perpendicular",
                                                     "frequency_MHz": 1.4, "amplitude_nT": 500.0},
                                      degree=2, check_points=2, tol=1e-12, cache=False)
    static = YieldFunction.from_system(system, 50.0, 2, check_points=2)
    d_exact = exact.anisotropy().relative - static.anisotropy().relative
    d_sweep = w["perp_anisotropy"][1, 1] - w["control_anisotropy"][1]
    assert abs(d_exact) > 1e-6
    assert d_sweep == pytest.approx(d_exact, rel=3 * w["eta"][1] ** 2)
    assert np.all(np.isnan(w["onset_MHz"]))          # weak fields do not raise the bound by 10 % here
    assert np.all(w["eta"] < 0.1 * 2.0)


def test_rf_yield_functions_are_cached_by_content(tmp_path):
    from retina.spin.io import load_system

    (tmp_path / "pair.toml").write_text(PAIR)
    system = load_system(tmp_path / "pair.toml")
    rec = {"kind": "tone", "direction": "parallel", "frequency_MHz": 2.0, "amplitude_nT": 800.0}
    a = rfs.rf_yield_function_for(system, 50.0, rec, degree=2, check_points=2)
    b = rfs.rf_yield_function_for(system, 50.0, rec, degree=2, check_points=2)
    assert not a.from_cache and b.from_cache
    np.testing.assert_array_equal(a.coeffs, b.coeffs)
    c = rfs.rf_yield_function_for(system, 50.0, dict(rec, amplitude_nT=900.0), degree=2, check_points=2)
    assert not c.from_cache


def test_rf_needs_the_spin_system(tmp_path):
    from retina.build import build_all
    from retina.yieldfn import YieldFunction

    sc = scenario(tmp_path, {"degree": 2, "sweep_MHz": [1.0]})
    built = build_all(sc, yield_function=None)
    path = built.yield_function.save(tmp_path / "yf.h5")
    sc2 = sc.replace(**{"yield": {"system": None, "file": str(path)}})
    assert isinstance(YieldFunction.load(path), YieldFunction)
    with pytest.raises(InputError, match="yield.system"):
        rsw.compute_rf_sweep(build_all(sc2))
