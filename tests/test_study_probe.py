"""The disorder and order studies' shared evaluation (retina.stages._common.study_probe_many,
retina.signal.noise.responses_at, trig_derivative_matrix) against the per-model path, and the
signal model's shared photon catch (SignalModel.replace)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from retina import build as B
from retina.eye.ordering import Isotropic, concentration_curves, restraint_classes
from retina.scenario import scenario_from_dict
from retina.yieldfn import YieldFunction


def _scenario(tmp_path, nuisance: str, pitch: float = 0.0):
    path = tmp_path / "invented.h5"
    if not path.exists():
        _yield().save(path)
    return scenario_from_dict({
        "yield": {"file": str(path), "degree": 6}, "field": {"intensity_uT": 50.0, "inclination_deg": 64.0, "declination_deg": 7.0},
        "eyes": [{"side": "left", "azimuth_deg": -60.0, "n_receptors": 70},
                 {"side": "right", "azimuth_deg": 60.0, "n_receptors": 70}],
        "light": {"photons": [100.0, 1e4], "names": ["dim", "bright"], "sky": "horizon", "ground_ratio": 0.2},
        "pose": {"headings_deg": [0.0, 45.0, 100.0], "pitch_deg": pitch, "roll_deg": 3.0},
        "readout": {"nuisance": nuisance}})


def _yield(degree: int = 6) -> YieldFunction:
    # an invented, positive yield function with every order m present (no symmetry to lean on)
    rng = np.random.default_rng(11)
    K = (degree + 1) * (degree + 2) // 2
    c = 0.004 * rng.standard_normal(K)
    c[0] = 0.3 * np.sqrt(4 * np.pi)
    return YieldFunction(c, degree)


def test_trig_derivative_matrix_is_the_exact_derivative():
    # Derived: the derivative of a trigonometric polynomial of degree <= L is exact from its
    # 2 L + 1 node values (Dirichlet-kernel interpolation differentiated at the nodes).
    from retina.signal.noise import trig_derivative_matrix

    L = 7
    M = 2 * L + 1
    x = np.arange(M) * 2 * np.pi / M
    f = 0.2 + np.cos(7 * x + 0.3) - 0.5 * np.sin(2 * x)
    df = -7 * np.sin(7 * x + 0.3) - np.cos(2 * x)
    T = trig_derivative_matrix(M)
    np.testing.assert_allclose(T @ f, df, atol=1e-12)
    np.testing.assert_allclose(T @ np.full(M, 0.37), 0.0, atol=1e-14)            # constants: 0
    with pytest.raises(Exception, match="odd"):
        trig_derivative_matrix(4)


@pytest.mark.parametrize("nuisance,pitch", [("gain", 0.0), ("none", 20.0)])
def test_many_models_at_once_equal_the_per_model_path(nuisance, pitch, monkeypatch, tmp_path):
    # Reference: study_probe (per model: RetinaModel rotating the coefficients into every receptor
    # frame, or its Legendre path for axial responses, with analytic harmonic gradients and the
    # compiled interpolated information).  The batch path evaluates the harmonics at the rotated
    # directions and differentiates the node values spectrally: agreement to rounding.
    from retina.stages import _common as C

    sc = _scenario(tmp_path, nuisance, pitch)
    yf = _yield()
    fld = B.build_field(sc)
    from retina.eye.geometry import build_receptors

    rec = build_receptors(B.build_eyes(sc))
    mean = Rotation.from_euler("ZYZ", [20.0, 35.0, -10.0], degrees=True)
    models = [c.build for c in restraint_classes(mean)]
    models += [c.build(k) for c in concentration_curves(mean) for k in (0.0, 2.0, 50.0)]
    models.append(Isotropic())
    probe = C.study_probe(sc, fld)
    ref = np.array([probe(B.build_retina(sc, yf, rec, ordering=m)) for m in models])
    monkeypatch.setattr(C, "_PROBE_BYTES", 200_000)        # several blocks of receptors
    calls = []
    dep, info = C.study_probe_many(sc, fld, rec, np.array([m.ensemble(yf.coeffs) for m in models]),
                                   progress=lambda i, n: calls.append((i, n)))
    assert len(calls) > 2 and calls[-1] == (len(models), len(models))
    np.testing.assert_allclose(dep, ref[:, 0], rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(info, ref[:, 1], rtol=1e-8, atol=1e-14 * ref[:, 1].max())
    assert dep[-1] == 0.0 and info[-1] == 0.0              # isotropic: exactly none (bound inf)
    np.testing.assert_array_equal(info == 0.0, ref[:, 1] == 0.0)   # the same isotropic models, exactly
    assert (info > 0).sum() >= len(models) - 6


def test_signal_model_replace_shares_the_catch_and_the_heading_path_matches_any_rotations(tmp_path):
    # Reference: a fresh SignalModel (its own photon catch) and expected_and_derivative_at (the catch
    # of every rotation computed from the sky): the heading path and the shared catch agree to rounding.
    from retina.stages._common import signal_model

    sc = _scenario(tmp_path, "gain", 10.0)
    yf = _yield()
    fld = B.build_field(sc)
    m1 = B.build_retina(sc, yf)
    m2 = B.build_retina(sc, YieldFunction(np.r_[yf.coeffs[0], -yf.coeffs[1:]], 6), m1.receptors)
    s1 = signal_model(sc, m1, fld)
    h = np.array([0.0, 33.0, 271.5])
    s1.catch(h)
    s2 = s1.replace(retina=m2, photons=40.0)
    assert s2._unit_catch_head is s1._unit_catch_head and s2.photons == 40.0
    fresh = signal_model(sc, m2, fld, photons=40.0)
    np.testing.assert_allclose(s2.catch(h), fresh.catch(h), rtol=1e-15)
    a = s2.expected_and_derivative(h)
    b = fresh.expected_and_derivative_at(fresh.rotations(h))
    for x, y in zip(a, b):
        np.testing.assert_allclose(x, y, rtol=1e-12, atol=1e-12 * np.abs(y).max())
    other = s1.replace(pitch_deg=25.0)                      # another pitch: its own catch
    assert other._unit_catch_head is None
