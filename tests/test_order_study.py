"""The order study (retina.stages.order): restraint classes, concentration curves, figure, report."""

from __future__ import annotations

import math

import numpy as np
import pytest

from retina import build as B
from retina import sphere
from retina.errors import InputError
from retina.results import load_results, save_results
from retina.scenario import scenario_from_dict
from retina.stages.order import compute_order, n_steps
from retina.yieldfn import YieldFunction

A0, B0 = 0.3, 0.04


@pytest.fixture(scope="module")
def quadrupole_x(tmp_path_factory):
    """A yield a + b P2(x_mol . b): axially symmetric about the molecular x axis."""
    d = tmp_path_factory.mktemp("order")
    g = sphere.grid_for_degree(6)
    x = g.points[:, 0]
    YieldFunction.from_values(A0 + B0 * (1.5 * x ** 2 - 0.5), g, 6, {"kind": "synthetic"}).save(d / "q.h5")
    doc = {"yield": {"file": str(d / "q.h5"), "degree": 6},
           "field": {"intensity_uT": 50.0, "inclination_deg": 60.0, "declination_deg": 0.0},
           "eyes": [{"side": "left", "azimuth_deg": -60.0, "n_receptors": 90},
                    {"side": "right", "azimuth_deg": 60.0, "n_receptors": 90}],
           "light": {"photons": [100.0, 1e4], "names": ["dim", "bright"]},
           "ordering": {"study_kappas": [0.0, 1.0, 10.0, 1e5]}}
    sc = scenario_from_dict(doc)
    yf = B.build_yield_function(sc)
    from retina.eye.geometry import build_receptors

    rec = build_receptors(B.build_eyes(sc))
    calls = []
    out = compute_order(sc, yf, rec, B.build_field(sc), progress=lambda i, n: calls.append((i, n)))
    return sc, rec, out, calls


def test_restraint_classes_against_the_addition_theorem(quadrupole_x):
    # Derived: for f = a + b P2(u . b) the ensemble response is a + b E[P2(Q u . b)], and when Q u
    # is uniform in the plane normal to the receptor axis a_r, E[P2(Q u . b)] = P2(0) P2(a_r . b)
    # = -P2(a_r . b) / 2 (addition theorem).  With u = molecular x that holds for "restrained in
    # two" (free rotation about a_r, x perpendicular to it) and for "restrained in one" (x in the
    # membrane plane, free twist), so both give yields a - (b/2) P2(a_r . b); aligned gives
    # a + b P2(x_r . b) with x_r each receptor's local x axis.  Depth = (max - min) / mean over all
    # receptors, averaged over the scenario's headings (module docstring).
    from retina.eye.pose import head_field, pose_rotation

    sc, rec, out, _ = quadrupole_x
    p = sc["pose"]
    b = head_field(pose_rotation(np.asarray(p["headings_deg"], float), p["pitch_deg"], p["roll_deg"]),
                   B.build_field(sc).vector)
    cos = b @ rec.axes.T
    y = A0 - 0.5 * B0 * (1.5 * cos ** 2 - 0.5)
    depth = np.mean((y.max(axis=1) - y.min(axis=1)) / y.mean(axis=1))
    cl = out["classes"]
    assert cl["restrained_two"]["depth"] == pytest.approx(depth, rel=1e-10)
    assert cl["restrained_one"]["depth"] == pytest.approx(depth, rel=1e-10)
    assert cl["aligned"]["depth"] > 1.5 * depth  # the full quadrupole, not halved by averaging
    # Derived (Haar average = sphere mean): isotropic molecules, a flat pattern, no information.
    assert cl["isotropic"]["depth"] == 0.0 and cl["isotropic"]["info_per_photon"] == 0.0
    assert np.all(np.isinf(cl["isotropic"]["bound_deg"]))


def test_curves_reach_the_classes_named_in_their_labels(quadrupole_x):
    # Derived (limits of the laws, retina.eye.ordering): at kappa = 0 the cone, free-twist cone and
    # plane are isotropic, the twist curves reach "restrained in two" and "restrained in one"; at
    # large kappa (1e5) the curves approach their kappa = inf ends (lambda_l ~ 1 - l(l+1)/(2 kappa),
    # so within ~1e-4 relative at degree 6).
    _, _, out, _ = quadrupole_x
    cl, cu = out["classes"], out["curves"]
    for key in ("cone_tied", "cone_free", "plane_free"):
        assert cu[key]["depth"][0] == 0.0 and cu[key]["info_per_photon"][0] == 0.0
        assert np.all(np.isinf(cu[key]["bound_deg"][:, 0]))
    ends = {"twist_axis": ("restrained_two", "aligned"), "twist_plane": ("restrained_one", "restrained_two"),
            "cone_tied": (None, "aligned"), "cone_free": (None, "restrained_two"),
            "plane_free": (None, "restrained_one")}
    for key, (lo, hi) in ends.items():
        if lo:
            assert cu[key]["depth"][0] == pytest.approx(cl[lo]["depth"], rel=1e-10)
        assert cu[key]["depth"][-1] == pytest.approx(cl[hi]["depth"], rel=1e-3)
    # The cone without twist keeps a pattern at kappa = 0 for this yield, which is not axially
    # symmetric about the restrained (z) direction.
    assert cu["cone_no_twist"]["depth"][0] > 1e-3


def test_restrained_in_one_keeps_a_compass_isotropic_does_not(quadrupole_x):
    # Common practice, no source (references.md, facts of the trade): a compass survives disorder
    # in two dimensions as long as the molecules are restrained in one; complete three-dimensional
    # disorder removes it.  Here: an informative bound in bright light when restrained in one,
    # none at all when isotropic.
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG

    _, _, out, _ = quadrupole_x
    assert out["classes"]["restrained_one"]["bound_deg"][-1] < INFORMATIVE_BOUND_DEG
    assert math.isinf(out["classes"]["isotropic"]["bound_deg"][-1])


def test_progress_and_counts(quadrupole_x):
    sc, _, out, calls = quadrupole_x
    # every model is evaluated at once, block by block of receptors: progress in models' worth, rising
    assert calls[-1] == (n_steps(sc), n_steps(sc)) and n_steps(sc) == 4 + 6 * 4
    assert all(a[0] <= b[0] and a[1] == n_steps(sc) for a, b in zip(calls, calls[1:]))
    assert out["class_order"].split(",") == ["aligned", "restrained_two", "restrained_one", "isotropic"]
    assert out["curves"]["plane_free"]["bound_deg"].shape == (2, 4)


def test_run_save_load_figure_and_report(quadrupole_x, tmp_path):
    from retina.outputs import write_outputs
    from retina.pipeline import run

    sc = quadrupole_x[0]
    res = run(sc, stages=("order",))
    path = save_results(res, tmp_path / "r.h5")
    back = load_results(path)
    o, ob = res.groups["order"], back.groups["order"]
    assert ob["class_order"] == o["class_order"] and ob["curve_order"] == o["curve_order"]
    for k in o["classes"]:
        assert ob["classes"][k]["label"] == o["classes"][k]["label"]
        np.testing.assert_array_equal(ob["classes"][k]["bound_deg"], o["classes"][k]["bound_deg"])
    for k in o["curves"]:
        np.testing.assert_array_equal(ob["curves"][k]["depth"], o["curves"][k]["depth"])
    write_outputs(res, tmp_path / "out", formats=("png",), dpi=60, animation=False)
    md = (tmp_path / "out" / "report.md").read_text()
    assert "How much order the compass needs" in md and "restrained in one, free in two" in md
    assert "no information" in md
    assert (tmp_path / "out" / "figures" / "order_study.png").is_file()


def test_order_figure_and_its_errors(tmp_path):
    from PIL import Image

    from retina import figures as F

    k = np.array([0.0, 0.5, 3.0, 30.0])
    classes = {"a": ("aligned", 0.06, 3.0), "b": ("restrained in two, free in one", 0.04, 5.0),
               "c": ("restrained in one, free in two", 0.02, 12.0), "d": ("isotropic", 0.0, np.inf)}
    curves = {"x": ("cone", k, np.array([0.0, 0.01, 0.03, 0.05]), np.array([np.inf, 40.0, 8.0, 4.0])),
              "cone_no_twist": ("no twist", k, np.array([0.01, 0.012, 0.03, 0.05]),
                                np.array([30.0, 25.0, 8.0, 4.0]))}
    F.order_study(classes, curves, light_label="bright", path=tmp_path / "o", dpi=80)
    im = Image.open(tmp_path / "o.png")
    a = np.asarray(im.convert("RGB"))
    assert np.unique(a.reshape(-1, 3), axis=0).shape[0] > 64 and a.std() > 20
    assert "order" in im.info.get("Title", "") and "restrained in one" in im.info.get("Description", "")
    with pytest.raises(InputError, match="at least two concentrations"):
        F.order_study(classes, {"x": ("cone", [1.0], [0.1], [3.0])})
    with pytest.raises(InputError, match="at least two concentrations"):
        F.order_study(classes, {"x": ("cone", [-1.0, 2.0], [0.1, 0.2], [3.0, 2.0])})
