"""`retina demo` end to end (reduced), reproducibility, and physics checks of the pipeline."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
from PIL import Image

from retina import build as B
from retina.stages import _common as C
from retina.stages.disorder import compute_disorder
from retina.stages.patterns import compute_patterns
from retina.stages.precision import compute_precision
from retina.stages.scan import compute_scan
from retina.stages.trials import compute_trials
from retina import sphere
from retina.cli import main
from retina.scenario import load_scenario, scenario_from_dict
from retina.yieldfn import YieldFunction

ASSETS = Path(__file__).resolve().parent.parent / "assets"
FIGURES = ("yield_sphere", "modulation_fields", "scan_filmstrip", "precision_curves", "disorder_tolerance", "order_study",
           "trial_histograms", "rf_conditions", "rf_sweep")


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "retina-demo"
    assert main(["demo", "--quick", "-o", str(out), "-q"]) == 0
    return out


def datasets(path):
    out = {}
    with h5py.File(path) as h:
        h.visititems(lambda name, obj: out.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    return out


# --- the demo --------------------------------------------------------------------------------------

def test_demo_writes_report_folder(demo_dir):
    assert {"index.html", "report.md", "results.h5", "figures"} <= {p.name for p in demo_dir.iterdir()}
    for stem in FIGURES:
        png = demo_dir / "figures" / f"{stem}.png"
        a = np.asarray(Image.open(png).convert("RGB"))
        # not blank: many colours and real contrast (pixel statistics)
        assert np.unique(a.reshape(-1, 3), axis=0).shape[0] > 64 and a.std() > 20, stem
        assert (demo_dir / "figures" / f"{stem}.svg").is_file()
    gif = Image.open(demo_dir / "figures" / "scan_animation.gif")
    assert gif.n_frames >= 2
    html = (demo_dir / "index.html").read_text()
    md = (demo_dir / "report.md").read_text()
    for text in (html, md):
        for key in ("relative anisotropy", "modulation depth", "bound single pose", "rms decoding error",
                    "mean vector length r", "Rayleigh p"):
            assert key in text, key
    assert "<script" not in html and "http" not in html.split("<h2>Scenario</h2>")[0]  # self-contained
    with h5py.File(demo_dir / "results.h5") as h:
        prov = h["provenance"].attrs
        assert "demo warbler" in prov["scenario_toml"] and bool(prov["quick"])
        assert h["yield_function"].attrs["relative"] > 0.01  # the invented pair is anisotropic


def test_demo_reports_the_monte_carlo_error_of_its_decoding_errors(demo_dir):
    # The rms decoding errors are Monte Carlo estimates; their standard errors (delta method,
    # retina.readout.decode.rms_standard_error) are stored beside them and shown in the report.
    with h5py.File(demo_dir / "results.h5") as h:
        q = h["precision"]
        for kind in ("single", "scan"):
            rms, se = q[f"decoded_{kind}_rms_deg"][()], q[f"decoded_{kind}_rms_se_deg"][()]
            assert se.shape == rms.shape and np.all(se > 0) and np.all(se < rms)
    assert "Monte Carlo standard error" in (demo_dir / "report.md").read_text()


def test_figures_drawn_on_two_processes_are_the_same_files(demo_dir, tmp_path):
    # Common practice, no source: parallel drawing must not change the output; PNG and GIF files
    # are compared byte for byte (SVG files carry matplotlib's random ids and a date).
    from retina.outputs.figures import make_figures
    from retina.results import load_results

    res = load_results(demo_dir / "results.h5")
    for g in ("patterns", "disorder", "order", "rf", "rf_sweep"):
        res.groups.pop(g, None)
    e1 = make_figures(res, tmp_path / "one", formats=("png",), dpi=60, jobs=1)
    e2 = make_figures(res, tmp_path / "two", formats=("png",), dpi=60, jobs=2)
    assert [(e.stem, e.title, e.caption) for e in e1] == [(e.stem.replace("two", "one"), e.title, e.caption)
                                                          for e in e2]
    files = sorted(p.name for p in (tmp_path / "one").iterdir())
    assert "scan_animation.gif" in files and "precision_curves.png" in files
    assert files == sorted(p.name for p in (tmp_path / "two").iterdir())
    for f in files:
        assert (tmp_path / "one" / f).read_bytes() == (tmp_path / "two" / f).read_bytes(), f


def test_figures_drawn_during_the_run_are_those_of_the_final_results(demo_dir, tmp_path):
    # Common practice, no source: drawing a figure early (while later stages run) must give the
    # file drawing it from the final results gives.  A figure handed out from data that later
    # changed (here the precision group) is redrawn; one the final results lack is not reported.
    import copy

    from retina.outputs.figures import FigurePool, make_figures
    from retina.results import Results, load_results

    res = load_results(demo_dir / "results.h5")
    for g in ("patterns", "scan", "disorder", "order", "rf", "rf_sweep"):
        res.groups.pop(g, None)
    early = Results(copy.deepcopy(res.groups), dict(res.provenance))
    early.groups["precision"]["bound_single_deg"] = 2.0 * early.groups["precision"]["bound_single_deg"]
    pool = FigurePool(tmp_path / "early", formats=("png",), dpi=60, jobs=2)
    assert pool.submit(Results({k: early.groups[k] for k in ("yield_function", "receptors", "field")},
                               early.provenance)) == 1
    assert pool.submit(early) == 2                      # precision (stale data) and trials
    assert pool.submit(early) == 0                      # nothing handed out twice
    e1 = pool.collect(res)
    pool.close()
    e2 = make_figures(res, tmp_path / "late", formats=("png",), dpi=60, jobs=1)
    assert [(e.stem, e.title, e.caption) for e in e1] == [(e.stem.replace("late", "early"), e.title, e.caption)
                                                          for e in e2]
    files = sorted(p.name for p in (tmp_path / "late").iterdir())
    assert files == ["precision_curves.png", "trial_histograms.png", "yield_sphere.png"]
    assert files == sorted(p.name for p in (tmp_path / "early").iterdir())
    for f in files:
        assert (tmp_path / "early" / f).read_bytes() == (tmp_path / "late" / f).read_bytes(), f


def test_demo_refuses_to_overwrite(demo_dir, capsys):
    assert main(["demo", "--quick", "-o", str(demo_dir), "-q"]) == 2
    assert "--force" in capsys.readouterr().err


def test_same_seed_same_results_other_seed_other_trials(demo_dir, tmp_path):
    assert main(["demo", "--quick", "-o", str(tmp_path / "again"), "-q", "--no-animation", "--formats", "png"]) == 0
    a, b = datasets(demo_dir / "results.h5"), datasets(tmp_path / "again" / "results.h5")
    assert a.keys() == b.keys() and len(a) > 20
    for k in a:  # NaN marks "none" in some results (e.g. rf_sweep/onset_MHz), equal to itself here
        assert np.array_equal(a[k], b[k], equal_nan=np.asarray(a[k]).dtype.kind == "f"), k
    assert main(["demo", "--quick", "-o", str(tmp_path / "seed"), "-q", "--no-animation", "--formats", "png",
                 "--seed", "99"]) == 0
    c = datasets(tmp_path / "seed" / "results.h5")
    assert not np.array_equal(a["trials/levels/dim/chosen_deg"], c["trials/levels/dim/chosen_deg"])
    assert np.array_equal(a["yield_function/coeffs"], c["yield_function/coeffs"])  # seed-free stage


# --- physics of the pipeline on a synthetic yield function ----------------------------------------

@pytest.fixture(scope="module")
def synthetic(tmp_path_factory):
    d = tmp_path_factory.mktemp("syn")
    g = sphere.grid_for_degree(6)
    p = g.points
    v = 0.3 + 0.03 * (1.5 * p[:, 2] ** 2 - 0.5) + 0.01 * p[:, 0] * p[:, 1] + 0.004 * p[:, 0] ** 4
    YieldFunction.from_values(v, g, 6, {"kind": "synthetic"}).save(d / "yf.h5")

    def make(**sections):
        doc = {"yield": {"file": str(d / "yf.h5"), "degree": 6},
               "field": {"intensity_uT": 50.0, "inclination_deg": 60.0, "declination_deg": 0.0},
               "eyes": [{"side": "left", "azimuth_deg": -60.0, "n_receptors": 80},
                        {"side": "right", "azimuth_deg": 60.0, "n_receptors": 80}],
               "scan": {"amplitude_deg": 30.0, "steps": 7}}
        for k, v in sections.items():
            replace = k == "eyes" or (k == "field" and "latitude_deg" in v)
            doc[k] = v if replace else {**doc.get(k, {}), **v}
        return scenario_from_dict(doc)

    return make


def _patterns(sc):
    yf = B.build_yield_function(sc)
    return compute_patterns(sc, B.build_retina(sc, yf), B.build_field(sc))


def test_reversed_field_gives_the_same_pattern(synthetic):
    # Common practice, no source (a fact of the trade): a radical-pair yield is unchanged when the
    # field is reversed (Phi(b) = Phi(-b), the evenness retina.yieldfn relies on), so the compass
    # reads the axis only.
    a = _patterns(synthetic(field={"inclination_deg": 60.0, "declination_deg": 10.0}))
    b = _patterns(synthetic(field={"inclination_deg": -60.0, "declination_deg": -170.0}))
    assert np.allclose(a["b_head"], -b["b_head"], atol=1e-12)
    assert np.allclose(a["yields"], b["yields"], rtol=0, atol=1e-12)


def test_north_in_the_north_equals_south_in_the_south(synthetic):
    # Derived: with I -> -I the world field (F cos I, 0, F sin I) becomes (F cos I, 0, -F sin I); a
    # 180 deg yaw maps head (x, y, z) to world (-x, -y, z), so the southern field seen at heading 180
    # is -(northern field at heading 0) in the head frame, and the yield is even in the field.
    a = _patterns(synthetic(field={"inclination_deg": 55.0}, pose={"headings_deg": [0.0]}))
    b = _patterns(synthetic(field={"inclination_deg": -55.0}, pose={"headings_deg": [180.0]}))
    assert np.allclose(a["yields"], b["yields"], rtol=0, atol=1e-12)
    # and it is not trivially so: facing east differs
    c = _patterns(synthetic(field={"inclination_deg": 55.0}, pose={"headings_deg": [90.0]}))
    assert np.abs(a["yields"] - c["yields"]).max() > 1e-4


def test_isotropic_molecules_carry_no_heading(synthetic):
    # Derived: the Haar average of any function over rotations is its sphere mean, so every receptor
    # gives the mean yield for every field: zero modulation and zero Fisher information.
    sc = synthetic(ordering={"model": "isotropic"}, readout={"photons": [100.0, 1e4], "decode_repeats": 20})
    yf = B.build_yield_function(sc)
    m = B.build_retina(sc, yf)
    pat = compute_patterns(sc, m, B.build_field(sc))
    assert np.allclose(pat["yields"], yf.mean, rtol=0, atol=1e-12) and np.abs(pat["modulation"]).max() < 1e-12
    q = compute_precision(sc, m, B.build_field(sc))
    assert np.all(q["info_per_photon_single"] < 1e-20) and np.all(np.isinf(q["bound_single_deg"]))


def test_decoder_reaches_the_cramer_rao_bound_in_bright_light(synthetic):
    # Cross-check of two independent paths: the bound comes from analytic harmonic gradients (Fisher
    # information), the error from Poisson sampling and maximum-likelihood decoding.  At high counts the
    # ML estimator is efficient, its rms error tends to the bound (Kay, Fundamentals of Statistical
    # Signal Processing: Estimation Theory, 1993, ch. 7; from memory).  With n = 1500 decodes the rms has
    # a relative standard error of about 1/sqrt(2n) = 1.8 %; we allow 8 %.
    sc = synthetic(readout={"photons": [1e5], "decode_repeats": 1500}, scenario={"seed": 4})
    yf = B.build_yield_function(sc)
    q = compute_precision(sc, B.build_retina(sc, yf), B.build_field(sc))
    assert q["decoded_single_rms_deg"][0] == pytest.approx(q["bound_single_deg"][0], rel=0.08)
    assert q["decoded_scan_rms_deg"][0] == pytest.approx(q["bound_scan_deg"][0], rel=0.08)
    # Derived: bounds scale as photons^-1/2 (information is linear in the light level).
    q2 = compute_precision(sc.replace(readout={"photons": [1e3, 1e5], "decode_repeats": 1}),
                             B.build_retina(sc, yf), B.build_field(sc))
    assert q2["bound_single_deg"][0] / q2["bound_single_deg"][1] == pytest.approx(10.0, rel=1e-9)


def test_trials_point_to_the_goal_in_bright_light(synthetic):
    # Derived: as the decoding error vanishes the chosen direction goal - error tends to the goal.
    sc = synthetic(light={"photons": [1e6], "names": ["very bright"]}, trials={"n_trials": 30, "goal_deg": 250.0})
    yf = B.build_yield_function(sc)
    t = compute_trials(sc, B.build_retina(sc, yf), B.build_field(sc))["levels"]["very bright"]
    assert t["r"] > 0.99 and abs((t["mean_deg"] - 250.0 + 180) % 360 - 180) < 2.0
    assert t["rayleigh_p"] < 1e-6


def test_quick_scenario_is_smaller_and_valid():
    sc = load_scenario(ASSETS / "demo_scenario.toml")
    q = B.quick_scenario(sc)
    assert q["yield"]["degree"] <= 8 and all(e["n_receptors"] <= 120 for e in q["eyes"])
    assert len(q["readout"]["photons"]) <= 4 and q["trials"]["n_trials"] <= 20
    assert q["light"] == sc["light"] and q.seed == sc.seed


def test_field_from_a_location_and_date(synthetic):
    # Source: The US/UK World Magnetic Model for 2025-2030, technical report (NOAA NCEI and BGS),
    # official test values (transcribed): 80 N 0 E,
    # 2025.0, height 0 km: X 6521.6, Y 145.9, Z 54791.5 nT, I 83.21 deg, D 1.28 deg.  The scenario's
    # location goes through the IGRF; the two models agree within about 100 nT and 0.2 deg.
    sc = synthetic(field={"latitude_deg": 80.0, "longitude_deg": 0.0, "altitude_km": 0.0, "date": "2025-01-01"})
    f = B.build_field(sc)
    F_wmm = np.sqrt(6521.6 ** 2 + 145.9 ** 2 + 54791.5 ** 2) * 1e-3  # uT
    assert f.F_uT == pytest.approx(F_wmm, abs=0.1)
    assert f.I_deg == pytest.approx(83.21, abs=0.2) and f.D_deg == pytest.approx(1.28, abs=0.2)
    # and the yield computation would use that intensity when yield.field_uT is not given
    assert B.field_uT(sc) == pytest.approx(f.F_uT)


def test_disorder_scales_a_quadrupolar_pattern_by_the_order_parameter(tmp_path):
    # Derived: for a yield a + b P2(u . b) (u the molecular axis) and molecular axes in a von Mises-Fisher
    # cone of concentration kappa about the receptor axis, the ensemble response is a + b <P2> P2(a_r . b)
    # (addition theorem), with <P2> = 1 - 3 coth(kappa) / kappa + 3 / kappa^2 (integrate P2(cos t) against
    # exp(kappa cos t) sin t).  So over the same receptors the yields are a + <P2> (y_aligned - a): the
    # spread max - min scales by <P2> and the mean moves to a + <P2> (mean_aligned - a).
    g = sphere.grid_for_degree(6)
    z = g.points[:, 2]
    YieldFunction.from_values(0.3 + 0.04 * (1.5 * z ** 2 - 0.5), g, 6, {}).save(tmp_path / "q.h5")
    kap = [0.5, 2.0, 10.0, 100.0]
    doc = {"yield": {"file": str(tmp_path / "q.h5"), "degree": 6},
           "field": {"intensity_uT": 50.0, "inclination_deg": 60.0, "declination_deg": 0.0},
           "eyes": [{"side": "right", "azimuth_deg": 60.0, "n_receptors": 150}],
           "ordering": {"disorder_kappas": kap}}
    sc = scenario_from_dict(doc)
    ya = _patterns(sc.replace(ordering={"model": "aligned"}))["yields"]  # (headings, receptors)
    yf = B.build_yield_function(sc)
    from retina.eye.geometry import build_receptors

    d = compute_disorder(sc, yf, build_receptors(B.build_eyes(sc)), B.build_field(sc))
    k = np.asarray(kap)
    p2 = 1 - 3 / (k * np.tanh(k)) + 3 / k ** 2
    a = 0.3  # the sphere mean: P2 averages to zero
    spread = ya.max(axis=1) - ya.min(axis=1)
    predicted = [np.mean(q * spread / (a + q * (ya.mean(axis=1) - a))) for q in p2]
    assert np.allclose(d["depth"], predicted, rtol=1e-9, atol=0)


def test_finite_molecules_are_seeded_and_approach_the_ensemble(synthetic):
    # Derived: the mean of n independent molecules converges to the ensemble average as 1/sqrt(n);
    # with n = 400 the standard error of a receptor's response is at most (yield anisotropy) / 20,
    # and the largest error over all receptors stays within a few (here 4) standard errors.
    sc = synthetic(ordering={"mode": "molecules", "n_molecules": 400})
    a, b = _patterns(sc), _patterns(sc)
    assert np.array_equal(a["yields"], b["yields"])
    c = _patterns(sc.replace(scenario={"seed": 1}))
    assert not np.array_equal(a["yields"], c["yields"])
    ens = _patterns(sc.replace(ordering={"mode": "ensemble"}))
    spread = np.abs(a["yields"] - ens["yields"]).max()
    assert 0 < spread < 4 * 0.03 / 20  # anisotropy of the synthetic function is about 0.03


def test_sky_model_reaches_the_readout(synthetic):
    # Derived: a horizon sky with ground_ratio = 1 has radiance 1 everywhere, i.e. the uniform sky; a
    # dark ground removes photons from the lower visual field; with a known gain every receptor's term
    # c_i (dPhi_i)^2 / Phi_i of the Fisher information shrinks with its catch c_i, so the sum drops.
    base = {"readout": {"photons": [100.0], "decode_repeats": 1, "nuisance": "none"}}
    infos = {}
    for name, light in {"uniform": {"sky": "uniform"}, "flat": {"sky": "horizon", "ground_ratio": 1.0},
                        "dark ground": {"sky": "horizon", "ground_ratio": 0.05}}.items():
        sc = synthetic(light=light, **base)
        yf = B.build_yield_function(sc)
        infos[name] = compute_precision(sc, B.build_retina(sc, yf), B.build_field(sc))["info_per_photon_single"]
    assert np.allclose(infos["flat"], infos["uniform"], rtol=1e-12)
    assert np.all(infos["dark ground"] < infos["uniform"])


def test_interpolated_expected_counts_match_direct_evaluation(synthetic):
    # Reference: SignalModel.expected evaluates every receptor's harmonics directly; the pipeline's
    # truth model interpolates 2L + 1 headings exactly (a degree-L response is a degree-L trigonometric
    # polynomial in the heading), so both agree to rounding.
    sc = synthetic()
    yf = B.build_yield_function(sc)
    m = C.GridModel(C.signal_model(sc, B.build_retina(sc, yf), B.build_field(sc)), yf.degree, "free")
    h = np.random.default_rng(2).uniform(0, 360, 40)
    direct = m.truth(7.0).expected(h)
    assert np.allclose(m.expected(h, 7.0), direct, rtol=1e-12, atol=1e-12 * direct.max())


def test_pattern_change_per_degree_matches_finite_differences(synthetic):
    # Reference: a central finite difference of the receptor yields over +/- 0.01 deg of yaw (error
    # O(h^2), far below the 1e-6 relative tolerance); the scan stage uses the analytic gradients.
    from retina.eye.pose import head_field, pose_rotation

    sc = synthetic()
    yf = B.build_yield_function(sc)
    m = B.build_retina(sc, yf)
    fld = B.build_field(sc)
    s = compute_scan(sc, m, fld)
    h = 0.01
    yp = m.yields(head_field(pose_rotation(s["yaw_deg"] + h), fld.vector))
    ym = m.yields(head_field(pose_rotation(s["yaw_deg"] - h), fld.vector))
    rel = (yp - ym) / (2 * h) / s["yields"]
    assert np.allclose(s["change_per_degree"], np.sqrt(np.mean(rel ** 2, axis=1)), rtol=1e-6)


def test_report_words_uninformative_bounds_and_explains_the_scan(demo_dir):
    md = (demo_dir / "report.md").read_text()
    with h5py.File(demo_dir / "results.h5") as h:
        q = {k: h["precision"][k][()] for k in h["precision"]}
        cmp_n = h["precision"].attrs["compare_nuisance"]
    # Derived: a Cramer-Rao bound above 60 deg (retina.readout.fisher.INFORMATIVE_BOUND_DEG) is no
    # statement about a circular estimate; the report says so in words and keeps the number in HDF5.
    assert q["photons"][0] == 1.0 and q["bound_single_deg"][0] > 60.0
    row = next(line for line in md.splitlines() if line.startswith("| 1 photons/receptor: bound"))
    assert "not informative" in row and f"{q['bound_single_deg'][0]:.3g}" not in row.split("\\|")[0]
    assert "103.9 deg" in md and "splits the same photon budget" in md
    # Derived (retina.readout.scans): with an unknown gain per receptor, one pose gives
    # sum dlam^2/lam - sum_i dlam_i^2/lam_i = 0 exactly; a scan moves the field across the receptors.
    assert cmp_n == "receptor_gain"
    assert np.all(np.isinf(q["bound_single_compare_deg"]))
    assert np.isfinite(q["bound_scan_compare_deg"][-1]) and q["bound_scan_compare_deg"][-1] < 60.0
    assert q["bound_scan_compare_deg"][-1] > q["bound_scan_deg"][-1]  # a further unknown costs information
    assert "no information" in md and "this is where scanning helps" in md
    assert "()" not in md  # every figure has its file links, the animation none


def test_report_states_order_parameter_depth_and_north(demo_dir):
    from scipy import stats

    md = (demo_dir / "report.md").read_text()
    with h5py.File(demo_dir / "results.h5") as h:
        kap = h["disorder/kappas"][()]
        dim = h["trials/levels/dim/chosen_deg"][()]
        decl = h["field"].attrs["D_deg"]
    # Derived: vMF polar density ~ exp(kappa cos t); <P2> = 1 - 3 (coth k - 1/k) / k.
    for k in kap:
        p2 = 1 - 3 * (1 / np.tanh(k) - 1 / k) / k
        assert f"kappa = {k:g} (<P2> = {p2:.3f}" in md
    assert "(largest - smallest) / mean of the receptor yields" in md
    # The demo's disorder sweep says which model it varies and that it is isotropic at kappa = 0.
    assert "Model swept: cone (Cone), twist tied; isotropic at kappa = 0" in md
    assert "How much order the compass needs" in md
    assert "clockwise from geographic north" in md and f"lies {decl:g} deg east" in md
    # Source: Zar (2010) eq. 27.1-27.2, Rayleigh z = R^2 / n = n r^2; r from scipy.stats.directional_stats.
    a = np.radians(dim)
    r = stats.directional_stats(np.stack([np.cos(a), np.sin(a)], axis=1)).mean_resultant_length
    assert f"| dim: Rayleigh z = n r^2 | {a.size * r ** 2:.3g} |" in md


@pytest.mark.slow
def test_stage_order_with_early_figures_does_not_change_the_results():
    # Derived: every stage reads only the built objects and draws from its own generator
    # (retina.build.stage_rng), so computing the RF stages first (as the pipeline does when figures
    # are drawn during the run) gives the same numbers, bit for bit; one BLAS thread for both runs.
    from threadpoolctl import threadpool_limits

    from retina.pipeline import run

    sc = B.quick_scenario(load_scenario(ASSETS / "demo_scenario.toml"))
    sc = sc.replace(rf={"conditions": [dict(sc["rf"]["conditions"][0])]},
                    readout={"photons": [10.0, 1000.0], "decode_repeats": 6})
    stages = ("scan", "precision", "trials", "rf")
    seen = []
    with threadpool_limits(1, user_api="blas"):
        a = run(sc, stages=stages)
        b = run(sc, stages=stages, on_group=lambda r: seen.append(sorted(r.groups)))
    base = ["field", "receptors", "yield_function"]
    assert seen[0] == base and seen[1] == sorted(base + ["scan"]) and seen[2] == sorted(base + ["scan", "rf"])
    assert list(a.groups) == list(b.groups)

    def walk(d, path, into):
        for k, v in d.items():
            if isinstance(v, dict):
                walk(v, f"{path}/{k}", into)
            else:
                into[f"{path}/{k}"] = v

    fa, fb = {}, {}
    walk(a.groups, "", fa)
    walk(b.groups, "", fb)
    assert fa.keys() == fb.keys()
    for k in fa:
        x, y = np.asarray(fa[k]), np.asarray(fb[k])
        assert x.shape == y.shape and (np.array_equal(x, y, equal_nan=x.dtype.kind == "f") if x.dtype.kind != "O"
                                       else fa[k] == fb[k]), k
