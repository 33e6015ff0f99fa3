"""Tests for retina.eye.ordering: exact ensemble averages against independent methods.

Synthetic molecular yield functions are written analytically (polynomials in the field direction
of degree 4) and projected onto harmonics; every check compares against direct evaluation of the
analytic form, analytic sphere averages, scipy quadrature, or Monte Carlo.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.spatial.transform import Rotation
from scipy.special import eval_legendre
from scipy.stats import kstest

from retina import sphere
from retina.errors import InputError
from retina.eye.ordering import (Aligned, Composite, Cone, ConeNoTwist, FreeRotation, Isotropic,
                                 kappa_from_order_parameter, order_parameter_from_kappa,
                                 vmf_cos_rule)


def f_axial(b):
    b = np.asarray(b)
    z = b[..., 2]
    return 1.0 + 0.3 * z ** 2 - 0.15 * z ** 4


def f_general(b):
    b = np.asarray(b)
    x, y, z = b[..., 0], b[..., 1], b[..., 2]
    return 1.0 + 0.3 * z ** 2 + 0.4 * x ** 2 * y ** 2 - 0.2 * x * z + 0.1 * x ** 4 + 0.25 * y * z


def coeffs_of(f, L=4):
    g = sphere.grid_for_degree(L)
    return sphere.fit_even(f(g.points), g, L)


def _dirs(n, seed=0):
    return sphere.normalize(np.random.default_rng(seed).normal(size=(n, 3)))


def test_synthetic_functions_are_band_limited():
    # Derived: degree-4 polynomials are reproduced exactly by degree-4 harmonics.
    b = _dirs(50)
    for f in (f_axial, f_general):
        np.testing.assert_allclose(sphere.evaluate(coeffs_of(f), b), f(b), atol=1e-13)


@pytest.mark.parametrize("kappa", [0.5, 3.0, 20.0, 200.0])
def test_vmf_funk_hecke_factors_against_quad(kappa):
    # Source: Funk-Hecke theorem, lambda_l = 2 pi int k(t) P_l(t) dt for the normalised kernel
    # k(t) = kappa exp(kappa (t - 1)) / (2 pi (1 - exp(-2 kappa))).
    # Reference: scipy.integrate.quad.
    def k(t):
        return kappa * math.exp(kappa * (t - 1)) / (2 * math.pi * -math.expm1(-2 * kappa))
    lam = Cone(kappa=kappa).moments(16)
    for l in range(0, 17, 2):
        ref = 2 * math.pi * quad(lambda t: k(t) * eval_legendre(l, t), -1, 1, epsabs=1e-14,
                                 epsrel=1e-12, limit=200)[0]
        assert lam[l] == pytest.approx(ref, abs=1e-11)


@pytest.mark.parametrize("kappa", [0.0, 5.0, 29.0, 31.0, 100.0, 1e4])
def test_cos_rule_reproduces_vmf_moments(kappa):
    # Two independent methods: the quadrature rule used for cone averages against the Bessel
    # ratios I_{l+1/2}/I_{1/2} (sphere.vmf_moments), degree 16.
    t, w = vmf_cos_rule(kappa, 16)
    assert w.sum() == pytest.approx(1.0, abs=1e-13)
    lam = sphere.vmf_moments(kappa, 16)
    for l in range(0, 17, 2):
        assert w @ eval_legendre(l, t) == pytest.approx(lam[l], abs=1e-12)


def test_cone_on_an_axial_function_is_funk_hecke():
    # Source: Funk-Hecke theorem; for a function axially symmetric about the cone axis the swing
    # average is the vMF convolution, computed here two ways (rotation quadrature vs factors).
    # Both cones agree on it (the twist about an axis of symmetry does nothing).
    c = coeffs_of(f_axial)
    for kappa in (0.7, 6.0, 80.0):
        for C in (ConeNoTwist(kappa=kappa), Cone(kappa=kappa)):
            np.testing.assert_allclose(C.ensemble(c), C.ensemble_axial(c), atol=1e-13)


def test_cone_general_function_against_monte_carlo():
    # Reference: Monte Carlo average of the analytic f(Q^-1 b) over sampled cone rotations; the
    # tolerance is 5 standard errors measured from the same samples.
    C = Cone(kappa=4.0)
    c = coeffs_of(f_general)
    b = _dirs(6, seed=3)
    Q = C.sample(100_000, 11)
    vals = np.stack([f_general(Q.inv().apply(bb)) for bb in b])
    mc, se = vals.mean(axis=1), vals.std(axis=1) / math.sqrt(vals.shape[1])
    ens = sphere.evaluate(C.ensemble(c), b)
    assert np.all(np.abs(ens - mc) < 5 * se)


def test_cone_sampling_distribution():
    # Reference: scipy.stats.kstest of cos(beta) = (Q z)_z against the vMF polar CDF
    # F(t) = (exp(kappa t) - exp(-kappa)) / (exp(kappa) - exp(-kappa)) (derived by integrating the
    # density); a swing has no twist: its rotation axis is perpendicular to z.
    kappa = 2.5
    Q = ConeNoTwist(kappa=kappa).sample(20_000, 5)
    t = Q.apply([0.0, 0.0, 1.0])[:, 2]
    def cdf(x):
        return (np.exp(kappa * x) - math.exp(-kappa)) / (math.exp(kappa) - math.exp(-kappa))
    assert kstest(t, cdf).pvalue > 1e-3
    np.testing.assert_allclose(Q.as_rotvec()[:, 2], 0.0, atol=1e-12)
    # Derived: <P2> of the samples matches the order parameter within 5 standard errors.
    p2 = eval_legendre(2, t)
    assert abs(p2.mean() - Cone(kappa=kappa).p2) < 5 * p2.std() / math.sqrt(len(p2))


def test_order_parameter_and_kappa():
    # Derived: for the vMF polar density E[cos b] = coth k - 1/k and E[cos^2 b] = 1 - 2 E[cos b]/k,
    # so <P2> = 1 - 3 (coth k - 1/k) / k; small k: <P2> ~ k^2 / 15.
    for k in (0.3, 2.0, 10.0, 500.0):
        closed = 1 - 3 * (1 / math.tanh(k) - 1 / k) / k
        assert order_parameter_from_kappa(k) == pytest.approx(closed, rel=1e-10)
        assert kappa_from_order_parameter(closed) == pytest.approx(k, rel=1e-8)
    assert order_parameter_from_kappa(1e-2) == pytest.approx(1e-4 / 15, rel=1e-3)
    assert Cone(order_parameter=0.6).p2 == pytest.approx(0.6, abs=1e-12)
    assert math.isinf(Cone(order_parameter=1.0).kappa)


def test_kappa_to_infinity_gives_aligned():
    # Derived: lambda_l -> 1 - l (l + 1) / (2 kappa) as kappa -> inf, so at kappa = 1e8 the cone
    # changes degree-4 coefficients by ~1e-7.
    c = coeffs_of(f_general)
    R = Rotation.from_euler("ZYZ", [20, 35, -10], degrees=True)
    np.testing.assert_allclose(Cone(kappa=1e8).ensemble(c), c, atol=1e-6)
    np.testing.assert_allclose(Composite(Cone(kappa=1e8), Aligned(R)).ensemble(c),
                               Aligned(R).ensemble(c), atol=1e-6)
    np.testing.assert_allclose(Cone(kappa=math.inf).ensemble(c), c, atol=0)


def test_aligned_against_direct_evaluation():
    # Derived: a molecule with rotation Q contributes f(Q^-1 b).
    c = coeffs_of(f_general)
    A = Aligned.tilted(40.0, 25.0, 10.0)
    b = _dirs(40, seed=1)
    np.testing.assert_allclose(sphere.evaluate(A.ensemble(c), b),
                               f_general(A.rotation.inv().apply(b)), atol=1e-13)
    # tilted(): the molecular z axis ends at polar angle 40, azimuth 25 in the receptor frame.
    z = A.rotation.apply([0, 0, 1.0])
    assert math.degrees(math.acos(z[2])) == pytest.approx(40.0)
    assert math.degrees(math.atan2(z[1], z[0])) == pytest.approx(25.0)


def test_free_rotation_depends_only_on_angle_to_axis():
    # Derived: averaging over rotations about z leaves a function of b_z only; cross-check against
    # a direct average of the analytic f over 64 equally spaced alpha (exact for the degree-4
    # trigonometric polynomial in alpha).
    F = FreeRotation(tilt_deg=35.0, twist_deg=20.0)
    r = F.ensemble(coeffs_of(f_general))
    _, m = sphere.lm_index(4)
    np.testing.assert_allclose(r[m != 0], 0.0, atol=1e-14)
    theta = math.radians(50.0)
    az = np.linspace(0, 2 * math.pi, 7, endpoint=False)
    b = np.stack([np.sin(theta) * np.cos(az), np.sin(theta) * np.sin(az),
                  np.full(7, np.cos(theta))], axis=-1)
    v = sphere.evaluate(r, b)
    np.testing.assert_allclose(v, v[0], atol=1e-13)
    alpha = 2 * math.pi * np.arange(64) / 64
    direct = np.mean([f_general((Rotation.from_euler("z", a) * F.base).inv().apply(b[0]))
                      for a in alpha])
    assert v[0] == pytest.approx(direct, abs=1e-13)
    # Sampled molecules keep their axis at the tilt angle to the receptor axis.
    z = F.sample(100, 3).apply([0, 0, 1.0])
    np.testing.assert_allclose(np.degrees(np.arccos(z[:, 2])), 35.0, atol=1e-10)


def test_isotropic_leaves_the_sphere_average():
    # Derived: sphere averages <z^2> = 1/3, <z^4> = 1/5, <x^2 y^2> = 1/15, odd monomials 0, so
    # <f_general> = 1 + 0.1 + 0.4/15 + 0.1/5.
    r = Isotropic().ensemble(coeffs_of(f_general))
    assert r[0] / math.sqrt(4 * math.pi) == pytest.approx(1 + 0.1 + 0.4 / 15 + 0.02, abs=1e-14)
    np.testing.assert_allclose(r[1:], 0.0, atol=0)
    # Haar samples: the Monte Carlo mean of f(Q^-1 b) tends to the same value.
    Q = Isotropic().sample(50_000, 2)
    v = f_general(Q.inv().apply([0.3, -0.4, 0.866]))
    assert abs(v.mean() - r[0] / math.sqrt(4 * math.pi)) < 5 * v.std() / math.sqrt(len(v))


def test_composite_order_and_monte_carlo():
    # Derived: Q = Q_last ... Q_first, so the ensemble is the steps' ensembles in order.
    c = coeffs_of(f_general)
    A = Aligned.tilted(30.0, 0.0)
    comp = Composite(Cone(kappa=5.0), A, FreeRotation())
    np.testing.assert_allclose(comp.ensemble(c),
                               FreeRotation().ensemble(A.ensemble(Cone(kappa=5.0).ensemble(c))))
    Q = comp.sample(100_000, 8)
    b = np.array([0.6, 0.0, 0.8])
    v = f_general(Q.inv().apply(b))
    ens = sphere.evaluate(comp.ensemble(c), b[None])[0]
    assert abs(v.mean() - ens) < 5 * v.std() / math.sqrt(len(v))
    assert A.then(Cone(kappa=1.0)).steps[0] is A


def test_sampling_is_reproducible():
    comp = Composite(Cone(kappa=3.0), Aligned.tilted(20.0), FreeRotation())
    a = comp.sample(50, 42).as_quat()
    b = comp.sample(50, np.random.default_rng(42)).as_quat()
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, comp.sample(50, 43).as_quat())


def test_bad_orderings():
    with pytest.raises(InputError, match="order parameter"):
        Cone(order_parameter=1.5)
    with pytest.raises(InputError, match="exactly one"):
        Cone(kappa=1.0, order_parameter=0.5)
    with pytest.raises(InputError):
        Cone(kappa=-1.0)
    with pytest.raises(InputError):
        Composite()
    with pytest.raises(InputError):
        FreeRotation(tilt_deg=float("nan"))
