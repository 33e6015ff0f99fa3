"""Light, photon catch and Poisson counts (retina.signal.light, retina.signal.noise)."""

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from retina.errors import InputError
from retina.signal import light, poisson


def _dirs(n, seed=0):
    d = np.random.default_rng(seed).normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def test_uniform_catch_scales_with_solid_angle_and_mean_is_photons():
    d = _dirs(50)
    w = np.random.default_rng(1).uniform(0.5, 2.0, 50)
    c = light.photon_catch(d, w, photons=300.0)
    # Derived: catch_i = photons * omega_i / mean(omega) under radiance 1, so the mean is photons.
    assert c.shape == (1, 50)
    np.testing.assert_allclose(c[0], 300.0 * w / w.mean(), rtol=1e-12)
    assert c.mean() == pytest.approx(300.0)
    assert light.light_level("dim_twilight") < light.light_level("daylight")


def test_horizon_sky_values():
    sky = light.HorizonSky(horizon_deg=0.0, softness_deg=0.0, ground_ratio=0.1)
    up, down, north = [0, 0, -1.0], [0, 0, 1.0], [1.0, 0, 0]
    # Derived: NED z points down, so -z is the zenith (sky = 1) and +z the nadir (ground ratio).
    np.testing.assert_allclose(sky.radiance(np.array([up, down])), [1.0, 0.1])
    soft = light.HorizonSky(horizon_deg=10.0, softness_deg=5.0, ground_ratio=0.1)
    el10 = [np.cos(np.deg2rad(10)), 0.0, -np.sin(np.deg2rad(10))]
    # Derived: tanh(0) = 0, so radiance at the horizon elevation is the midpoint (1 + g) / 2.
    assert soft.radiance(np.array([el10]))[0] == pytest.approx(0.55)
    assert light.elevation_deg(np.array(north)) == pytest.approx(0.0)


def test_horizon_catch_pitch_and_yaw():
    sky = light.HorizonSky(horizon_deg=20.0, softness_deg=0.0, ground_ratio=0.0)
    forward = np.array([[1.0, 0.0, 0.0]])
    w = np.ones(1)
    # Derived: pitching the nose up 30 deg raises the forward visual direction to elevation 30 deg,
    # above a 20 deg skyline; level it stays at 0 deg, below.  (Pose convention: DEVELOPERS.md.)
    up30 = Rotation.from_euler("ZYX", [0, 30, 0], degrees=True)
    assert light.photon_catch(forward, w, up30, photons=1.0, sky=sky)[0, 0] == pytest.approx(1.0)
    assert light.photon_catch(forward, w, Rotation.identity(), photons=1.0, sky=sky)[0, 0] == 0.0
    # Derived: yaw turns about the vertical and leaves every elevation unchanged.
    d = _dirs(40, 2)
    rots = Rotation.from_euler("ZYX", [[0, 10, 5], [77, 10, 5], [200, 10, 5]], degrees=True)
    c = light.photon_catch(d, np.ones(40), rots, photons=5.0, sky=light.HorizonSky())
    np.testing.assert_allclose(c[1], c[0], rtol=1e-12)
    np.testing.assert_allclose(c[2], c[0], rtol=1e-12)


def test_texture_frames():
    d = _dirs(30, 3)
    w = np.ones(30)
    head_tex = light.SceneTexture(contrast=0.5, attached="head", seed=4)
    world_tex = light.SceneTexture(contrast=0.5, attached="world", seed=4)
    rots = Rotation.from_euler("ZYX", [[0, 0, 0], [90, 0, 0]], degrees=True)
    ch = light.photon_catch(d, w, rots, photons=1.0, texture=head_tex)
    # Derived: a head-fixed texture moves with the head.
    np.testing.assert_allclose(ch[0], ch[1])
    cw = light.photon_catch(d, w, rots, photons=1.0, texture=world_tex)
    assert not np.allclose(cw[0], cw[1])
    # Derived: with the world texture, receptor d at yaw 90 sees what direction Rz(90) d sees at yaw 0.
    d_turned = Rotation.from_euler("Z", 90, degrees=True).apply(d)
    c0 = light.photon_catch(d_turned, w, rots[0], photons=1.0, texture=world_tex)
    np.testing.assert_allclose(cw[1], c0[0], rtol=1e-12)


def test_texture_log_contrast_statistics():
    tex = light.SceneTexture(contrast=0.4, seed=11, n_blobs=60)
    logf = np.log(tex.factor(_dirs(20000, 5)))
    # Derived: log factor = contrast * z with z normalised to mean 0, sd 1 over the sphere
    # (normalised on a Fibonacci set; random points agree to sampling error, tolerance 0.02).
    assert abs(logf.mean()) < 0.02
    assert logf.std() == pytest.approx(0.4, abs=0.02)


def test_poisson_counts_distribution_and_seed():
    lam = np.array([0.7, 3.0, 40.0])
    a = poisson.sample_counts(lam, 42, size=40000)
    b = poisson.sample_counts(lam, 42, size=40000)
    np.testing.assert_array_equal(a, b)
    # Derived: Poisson mean = variance = lam; sd of the sample mean is sqrt(lam / n): 5 sd tolerance.
    assert np.all(np.abs(a.mean(0) - lam) < 5 * np.sqrt(lam / 40000))
    np.testing.assert_allclose(a.var(0), lam, rtol=0.05)
    # Reference: scipy.stats.poisson.pmf for the frequencies of the smallest mean (chi-square test).
    k, n = np.unique(a[:, 0], return_counts=True)
    expected = stats.poisson.pmf(k, 0.7) * a.shape[0]
    keep = expected > 5
    chi2 = np.sum((n[keep] - expected[keep]) ** 2 / expected[keep])
    assert stats.chi2.sf(chi2, keep.sum() - 1) > 1e-3


def test_thinned_poisson_equals_poisson_of_catch_times_yield():
    # Source (standard result): a Poisson(c) number of pairs, each giving the product with
    # probability Phi, is Poisson(c Phi) (Poisson thinning).  Compare the two-stage simulation.
    rng = np.random.default_rng(8)
    c, phi = 50.0, 0.3
    pairs = rng.poisson(c, 100000)
    products = rng.binomial(pairs, phi)
    lam = poisson.expected_counts(phi, c)
    assert lam == pytest.approx(15.0)
    assert products.mean() == pytest.approx(lam, rel=0.01)
    assert products.var() == pytest.approx(lam, rel=0.03)


def test_bad_input():
    with pytest.raises(InputError, match="light.level"):
        light.light_level("bright-ish")
    with pytest.raises(InputError, match="ground_ratio"):
        light.HorizonSky(ground_ratio=2.0)
    with pytest.raises(InputError, match="attached"):
        light.SceneTexture(attached="body")
    with pytest.raises(InputError, match="non-negative"):
        poisson.sample_counts([-1.0])
    with pytest.raises(InputError, match="solid_angle"):
        light.photon_catch(_dirs(3), np.ones(4))
