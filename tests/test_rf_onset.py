"""The RF sweep's onset of disorientation, threshold amplitudes and their lifetime scaling
(stage ``rf_sweep``, :mod:`retina.stages.rf`), on small invented pairs.

Each check names its reference beside it: a derivation written here, the exact RF method
(separable Floquet, :mod:`retina.spin.rf_separable`, through ``rf_yield_function_for``), or the
ordinary pattern-to-bound path of the precision stage.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from retina.pipeline import run

from retina.stages import rf as rfs
from retina.stages import rf_sweep as rsw

from _rf_scenario import small_rf_scenario

# Radical A: one proton with a rhombic hyperfine tensor (all principal values non-zero, so the
# level spacings stay in the MHz range for every field direction); radical B: one isotropic proton.
PAIR = """
[pair]
name = "invented onset test pair"
[radical_a]
label = "A"
[[radical_a.nuclei]]
label = "H1"
spin = 0.5
principal_mT = [0.3, 0.5, 1.2]
[radical_b]
label = "B"
[[radical_b.nuclei]]
label = "h"
spin = 0.5
hyperfine_mT = 0.7
[kinetics]
lifetime_us = 10.0
"""


def scenario(tmp_path: Path, rf: dict, pair: str = PAIR):
    return small_rf_scenario(tmp_path, dict({"degree": 2, "check_points": 2, "cache": False}, **rf), pair,
                             name="rf onset test", seed=7)


def test_first_crossing_interpolates_in_log_frequency():
    # Derived: for v = log10(f) the crossing of level 0.5 between f = 1 (v 0) and 10 (v 1) is at
    # 10^0.5; a level reached at the first point returns it; a level never reached gives NaN.
    f = np.array([1.0, 10.0, 100.0])
    assert rsw.first_crossing(f, np.log10(f), 0.5) == pytest.approx(10**0.5, rel=1e-12)
    assert rsw.first_crossing(f, np.log10(f), -1.0) == 1.0
    assert np.isnan(rsw.first_crossing(f, np.log10(f), 5.0))


def test_threshold_amplitude_inverts_the_quadratic_law():
    # Derived: (B / B0)^2 = 1 + b^2 s, so B / B0 = 1 + q at b^2 = ((1 + q)^2 - 1) / s; s <= 0: never.
    s = np.array([2e-6, 0.0, -1e-6])
    b = rsw.threshold_amplitude(s, 0.1)
    assert b[0] == pytest.approx(np.sqrt(0.21 / 2e-6), rel=1e-12)
    assert np.isnan(b[1]) and np.isnan(b[2])
    assert np.sqrt(1 + b[0] ** 2 * s[0]) - 1 == pytest.approx(0.1, rel=1e-12)


def test_vectorised_tones_match_the_line_sum():
    # Reference: the response sum of the retina.spin.broadband docstring evaluated line by line,
    # dPhi = sum_ij Re[w_ij (1 / (G_ij + i x) + 1 / (G_ij - i x))], G = -1 - i delta (units of k).
    from retina.spin import broadband as bb
    from retina.spin.io import loads_system

    system = loads_system(PAIR)
    r = bb.response(system, 50.0, np.array([0.3, 0.4, 0.866]))
    pols = [bb.polarisation_tensor(r.direction, k) for k in ("perpendicular", "parallel")]
    f = np.array([1e-4, 0.02, 0.7, 1.4, 9.0])
    got = r.tones(f, pols)
    g = -1.0 - 1j * r.delta
    for p, pol in enumerate(pols):
        w = r.lines(pol)
        for i, fi in enumerate(f):
            x = 2 * np.pi * fi * 1e6 / r.k
            ref = np.real(np.sum(w * (1 / (g + 1j * x) + 1 / (g - 1j * x)))) * 1e-18
            assert got[p, i] == pytest.approx(ref, rel=1e-9, abs=1e-30)


def test_bound_model_matches_the_direct_path_and_its_gradient(tmp_path):
    # Reference: the ordinary path (a retina model built from the yield function itself, its grid
    # model and rms bound, as in the precision stage), for a yield function unlike the basis
    # functions; the gradient against central differences (step 1e-6 of the coefficients, error
    # ~ step^2 relative).
    from retina.build import build_all
    from retina.readout.fisher import gain_schur
    from retina.stages._common import GridModel, rms_bound, signal_model
    from retina.yieldfn import YieldFunction

    sc = scenario(tmp_path, {"sweep_MHz": [1.0]})
    built = build_all(sc)
    bm = rsw.BoundModel(sc, built, 2)
    c = YieldFunction.from_system(rfs.pair_system(sc), 50.0, 2, check_points=2).coeffs
    from retina.build import build_retina

    model = build_retina(sc, YieldFunction(c, 2), built.receptors)
    m = GridModel(signal_model(sc, model, built.field), 2, "free")
    direct = rms_bound(np.array([300.0, 3000.0]), gain_schur(m.lam1, m.dlam1))
    np.testing.assert_allclose(bm.bound(c, [300.0, 3000.0]), direct, rtol=1e-9)
    g = bm.power_gradient(c)
    b0 = np.mean(1 / bm.info(c))
    h = 1e-6
    for k in range(c.size):
        e = np.zeros_like(c)
        e[k] = h
        fd = (np.mean(1 / bm.info(c + e)) - np.mean(1 / bm.info(c - e))) / (2 * h) / b0
        assert g[k] == pytest.approx(fd, rel=1e-5, abs=1e-9 * np.max(np.abs(g)))


def test_threshold_amplitude_against_the_exact_method_at_two_amplitudes(tmp_path):
    # Reference: exact RF yield functions (separable Floquet, rf_yield_function_for) at two weak
    # amplitudes.  Derived: at second order the bound's square rises as b^2 s(f), so the exact
    # rises at b1 and b2 = 2 b1 follow 1 + b^2 s within the neglected fourth order (~ eta^2
    # relative, eta = gamma_e b / k <= 0.053 here) plus the linearisation in b^2 (1e-3 allowed); and at the stage's threshold amplitude for a rise q the exact bound rises by q.
    sc = scenario(tmp_path, {"sweep_MHz": [0.3, 30.0], "sweep_nT": 1.0, "sweep_points": 41,
                             "sweep_lifetimes_us": [10.0]})
    w = run(sc, stages=("rf_sweep",)).groups["rf_sweep"]
    i = int(np.argmax(w["perp_sensitivity"][0]))          # the strongest line on the curve
    f, s = float(w["curve_MHz"][i]), float(w["perp_sensitivity"][0, i])
    assert s > 0
    b_q = 30.0                                           # eta = 0.053 at 10 us
    q = float(np.sqrt(1 + b_q**2 * s) - 1)               # the rise whose threshold is b_q
    assert rsw.threshold_amplitude(s, q) == pytest.approx(b_q, rel=1e-9)
    from retina.build import build_all
    from retina.yieldfn import YieldFunction

    built = build_all(sc)
    bm = rsw.BoundModel(sc, built, 2)
    system = rfs.pair_system(sc)
    control = YieldFunction.from_system(system, 50.0, 2, check_points=2).coeffs
    b0 = bm.bound(control, [3000.0])[0]

    def exact_rise(b):
        yf = rfs.rf_yield_function_for(system, 50.0, {"kind": "tone", "direction": "perpendicular",
                                                      "frequency_MHz": f, "amplitude_nT": float(b)},
                                       degree=2, check_points=2, tol=1e-12, cache=False)
        return bm.bound(yf.coeffs, [3000.0])[0] / b0

    from retina.spin.broadband import weak_parameter

    for b in (0.5 * b_q, b_q):
        eta = weak_parameter(b, system.k_singlet)
        assert exact_rise(b) ** 2 - 1 == pytest.approx(b**2 * s, rel=3 * eta**2 + 1e-3)
    assert exact_rise(b_q) - 1 == pytest.approx(q, rel=3 * weak_parameter(b_q, system.k_singlet) ** 2 + 1e-3)


def test_departure_from_quasi_static_moves_as_one_over_lifetime(tmp_path):
    # Derived (retina.stages.rf docstring, "Two frequency scales"): below the pair's line spacings
    # (>= 0.6 MHz here) the response is R(f) = C + A / (1 + x^2), x = 2 pi f / k, with A and C set by
    # the level structure, not by k.  So (R(f) - R(f0)) / (R(f1) - R(f0)) = L(x) / L(x1) with
    # L(x) = x^2 / (1 + x^2), and the departure frequency (|R - R(f0)| = 0.5 |R(f0)|) is a fixed
    # multiple of k / (2 pi): lifetimes 10 us and 100 us give departures in the ratio 10.
    # Tolerances: 3 % on the Lorentzian law (C varies as (f / spacing)^2 <= 3 %), 5 % on the ratio
    # (log-linear interpolation between 81 frequencies over 4 decades, steps of 12 %).
    taus = np.array([10.0, 100.0])
    sc = scenario(tmp_path, {"sweep_MHz": [1e-5, 0.1], "sweep_nT": 1.0, "sweep_points": 81,
                             "sweep_lifetimes_us": list(taus)})
    w = run(sc, stages=("rf_sweep",)).groups["rf_sweep"]
    f = w["curve_MHz"]
    for t, tau in enumerate(taus):
        r = w["par_sensitivity"][t]
        x = 2 * np.pi * f * tau
        lor = x**2 / (1 + x**2)
        sel = (x > 0.3) & (x < 3)
        np.testing.assert_allclose((r[sel] - r[0]) / (r[-1] - r[0]), lor[sel] / lor[-1], rtol=0.03)
    # A and C do not depend on the lifetime (3 %): from R(f0) = A + C and R(f1) = C + A / (1 + x1^2)
    ac = []
    for t, tau in enumerate(taus):
        r = w["par_sensitivity"][t]
        x1 = 2 * np.pi * f[-1] * tau
        a = (r[0] - r[-1]) / (1 - 1 / (1 + x1**2))
        ac.append((a, r[0] - a))
    np.testing.assert_allclose(ac[0], ac[1], rtol=0.03)
    dep = w["departure_MHz"]
    assert np.all(np.isfinite(dep))
    assert dep[0] / dep[1] == pytest.approx(10.0, rel=0.05)


def test_sweep_group_round_trip_and_report(tmp_path):
    # The results file keeps every new dataset (schema) and the report prints the onset and thresholds.
    from retina.outputs.text import key_numbers
    from retina.results import load_results, save_results

    sc = scenario(tmp_path, {"sweep_MHz": [0.1, 1.4], "sweep_nT": 20.0, "sweep_points": 5,
                             "sweep_lifetimes_us": [10.0, 1.0]})
    res = run(sc, stages=("rf_sweep",))
    back = load_results(save_results(res, tmp_path / "r.h5")).groups["rf_sweep"]
    for key in ("curve_MHz", "perp_threshold_nT", "par_threshold_nT", "threshold_eta", "onset_MHz",
                "departure_MHz", "perp_rise", "linearisation_error", "trial_perp_r"):
        np.testing.assert_array_equal(back[key], res.groups["rf_sweep"][key])
    assert back["curve_MHz"].size == 5 and back["perp_rise"].shape == (2, 5)   # the ends are the swept ones
    # the curve's linearised rise agrees with the bound of the yield functions at the swept frequencies
    assert np.all(back["linearisation_error"] < 1e-3)
    text = str(key_numbers(res))
    assert "lowest amplitude for a 10 % rise" in text and "onset of disorientation" in text
