"""Sphere grids, real harmonics, fitting, rotation and zonal operations (retina/sphere.py)."""

import numpy as np
import pytest
from numpy.polynomial import legendre
from scipy.integrate import quad
from scipy.spatial.transform import Rotation
from scipy.special import sph_harm_y

from retina import sphere as S

RNG = np.random.default_rng(20261201)


def random_dirs(n, seed=0):
    return S.normalize(np.random.default_rng(seed).normal(size=(n, 3)))


@pytest.mark.parametrize("L", [0, 2, 8, 16, 24])
def test_orthonormal_on_lebedev(L):
    # Reference: a Lebedev rule of order >= 2L integrates products of degree-L harmonics exactly
    # (Lebedev & Laikov 1999; scipy.integrate.lebedev_rule).
    g = S.grid_for_degree(L)
    Y = S.real_sh(L, g.points)
    gram = (Y * g.weights[:, None]).T @ Y
    assert np.abs(gram - np.eye(S.n_coeffs(L))).max() < 1e-12


def test_matches_scipy_complex_harmonics():
    # Reference: scipy.special.sph_harm_y (complex, with Condon-Shortley phase). Our real harmonics
    # without that phase are sqrt(2) (-1)^m Re/Im Y_l^m (standard conversion, common practice).
    L = 12
    d = random_dirs(40, 1)
    theta, phi = np.arccos(d[:, 2]), np.arctan2(d[:, 1], d[:, 0])
    Y = S.real_sh(L, d)
    ls, ms = S.lm_index(L)
    for k, (l, m) in enumerate(zip(ls, ms)):
        c = sph_harm_y(int(l), abs(int(m)), theta, phi)
        if m == 0:
            ref = c.real
        elif m > 0:
            ref = np.sqrt(2) * (-1.0) ** m * c.real
        else:
            ref = np.sqrt(2) * (-1.0) ** m * c.imag
        np.testing.assert_allclose(Y[:, k], ref, atol=1e-13)


def test_layout_and_lengths():
    assert S.n_coeffs(16) == 153  # Derived: sum over even l <= 16 of (2l + 1)
    l, m = S.lm_index(4)
    assert list(l[:6]) == [0, 2, 2, 2, 2, 2] and list(m[1:6]) == [-2, -1, 0, 1, 2]
    assert S.degree_from_n(153) == 16
    with pytest.raises(ValueError):
        S.degree_from_n(10)
    with pytest.raises(ValueError):
        S.n_coeffs(3)


def test_fit_recovers_polynomial_exactly():
    # Derived: f = 0.3 + 0.5 z^2 - 0.2 x^4 + 0.1 x y z^2 is even and of degree 4; projection on a
    # rule exact to degree 8 recovers it to rounding error.
    def f(p):
        x, y, z = p.T
        return 0.3 + 0.5 * z ** 2 - 0.2 * x ** 4 + 0.1 * x * y * z ** 2

    g = S.grid_for_degree(4)
    c = S.fit_even(f(g.points), g, 4)
    d = random_dirs(100, 2)
    np.testing.assert_allclose(S.evaluate(c, d), f(d), atol=1e-14)
    # the mean over the sphere is c_00 / sqrt(4 pi)  (Derived: Y_00 = 1/sqrt(4 pi))
    mean = np.sum(g.weights * f(g.points)) / (4 * np.pi)
    assert abs(c[0] / np.sqrt(4 * np.pi) - mean) < 1e-14


def test_fit_refuses_too_coarse_grid():
    with pytest.raises(ValueError, match="needs"):
        S.fit_even(np.zeros(len(S.lebedev(7))), S.lebedev(7), 8)


def test_hemisphere_map_restores_full_grid():
    g = S.lebedev(35)
    half, full_from_half = g.hemisphere()
    assert 2 * len(half) == len(g)
    restored = g.points[half][full_from_half]
    # every point is restored up to sign (inversion symmetry of Lebedev rules, common practice)
    same = np.minimum(np.abs(restored - g.points).max(1), np.abs(restored + g.points).max(1))
    assert same.max() < 1e-12


@pytest.mark.parametrize("L", [2, 8, 16])
def test_rotation_matches_rotated_evaluation(L):
    # Derived: (R f)(b) = f(R^-1 b) (the active convention); checked pointwise.
    c = RNG.normal(size=S.n_coeffs(L))
    rots = Rotation.random(12, rng=np.random.default_rng(L))
    cr = S.rotate(c, rots)
    d = random_dirs(60, 3)
    for i in range(len(rots)):
        np.testing.assert_allclose(S.evaluate(cr[i], d), S.evaluate(c, rots[i].inv().apply(d)),
                                   atol=1e-12 * np.abs(c).sum())


def test_rotation_is_a_homomorphism_and_orthogonal():
    # Derived: D(R1 R2) = D(R1) D(R2) and D is orthogonal, so norms are kept.
    L = 10
    c = RNG.normal(size=S.n_coeffs(L))
    r1, r2 = Rotation.random(2, rng=np.random.default_rng(5))
    lhs = S.rotate(c, r1 * r2)
    rhs = S.rotate(S.rotate(c, r2), r1)
    np.testing.assert_allclose(lhs, rhs, atol=1e-12)
    assert abs(np.linalg.norm(lhs) - np.linalg.norm(c)) < 1e-12
    # gimbal-lock rotations (beta = 0 and pi) are handled
    for rot in (Rotation.from_euler("z", 0.7), Rotation.from_euler("ZYZ", [0.3, np.pi, 0.2])):
        d = random_dirs(20, 9)
        np.testing.assert_allclose(S.evaluate(S.rotate(c, rot), d), S.evaluate(c, rot.inv().apply(d)),
                                   atol=1e-12)


def test_gradient_matches_finite_difference():
    # Reference: central finite difference along a great circle, step 1e-6 (error ~ 1e-12 * f''').
    L = 12
    c = RNG.normal(size=S.n_coeffs(L))
    d = random_dirs(30, 4)
    t = np.cross(d, np.random.default_rng(7).normal(size=d.shape))
    t /= np.linalg.norm(t, axis=1, keepdims=True)
    _, grad = S.evaluate_grad(c, d)
    assert np.abs(np.sum(grad * d, axis=1)).max() < 1e-10  # tangential
    h = 1e-6

    def f(a):
        return S.evaluate(c, np.cos(a) * d + np.sin(a) * t)

    fd = (f(h) - f(-h)) / (2 * h)
    np.testing.assert_allclose(np.sum(grad * t, axis=1), fd, atol=1e-6 * np.abs(fd).max())


def test_vmf_moments_against_quadrature():
    # Reference: lambda_l = 2 pi int k(t) P_l(t) dt for the normalised vMF density
    # k(t) = kappa exp(kappa t) / (4 pi sinh kappa), by scipy.integrate.quad.
    for kappa in (0.5, 3.0, 25.0):
        lam = S.vmf_moments(kappa, 8)
        for l in range(9):
            pl = legendre.Legendre.basis(l)
            val, _ = quad(lambda t: 2 * np.pi * kappa * np.exp(kappa * (t - 1)) * pl(t)
                          / (2 * np.pi * (1 - np.exp(-2 * kappa))), -1, 1, epsabs=1e-13)
            assert abs(lam[l] - val) < 1e-10
    # Source (from memory): lambda_1 is the Langevin function coth(kappa) - 1/kappa.
    k = 4.0
    assert abs(S.vmf_moments(k, 2)[1] - (1 / np.tanh(k) - 1 / k)) < 1e-13
    assert np.allclose(S.vmf_moments(np.inf, 4), 1) and np.allclose(S.vmf_moments(0, 4), [1, 0, 0, 0, 0])
    assert abs(S.vmf_moments(1e-4, 4)[2] - S.vmf_moments(2e-3, 4)[2] / 400) < 1e-12  # ~ kappa^2/15


def test_funk_hecke_equals_direct_convolution():
    # Derived (Funk-Hecke theorem): int k(b.b') f(b') dOmega' has coefficients lambda_l c_lm.
    # Checked by direct quadrature on a fine Lebedev rule (order 131; the kernel with kappa = 2 is
    # smooth, so the rule is accurate far below the tolerance).
    L, kappa = 8, 2.0
    c = RNG.normal(size=S.n_coeffs(L))
    conv = S.funk_hecke(c, S.vmf_moments(kappa, L))
    g = S.lebedev(131)
    fvals = S.evaluate(c, g.points)
    d = random_dirs(10, 11)
    kern = kappa / (4 * np.pi * np.sinh(kappa)) * np.exp(kappa * d @ g.points.T)
    direct = kern @ (g.weights * fvals)
    np.testing.assert_allclose(S.evaluate(conv, d), direct, atol=1e-10)


def test_axial_average_and_legendre_series():
    # Derived: averaging f over rotations about z (trapezoid rule over 2L+1 equally spaced angles
    # is exact for trigonometric polynomials of order <= L) keeps only m = 0 terms.
    L = 8
    c = RNG.normal(size=S.n_coeffs(L))
    angles = np.linspace(0, 2 * np.pi, 2 * L + 1, endpoint=False)
    avg = S.rotate(c, Rotation.from_euler("z", angles[:, None])).mean(axis=0)
    np.testing.assert_allclose(S.axial_average(c), avg, atol=1e-13)
    # zonal_to_legendre: g(t) = sum a_l P_l(t) with t = b_z  (Reference: numpy legval)
    a = S.zonal_to_legendre(c)
    d = random_dirs(25, 12)
    np.testing.assert_allclose(S.evaluate(S.axial_average(c), d), legendre.legval(d[:, 2], a), atol=1e-13)


def test_fibonacci_grid():
    g = S.fibonacci(200, hemisphere=True)
    assert len(g) == 200 and np.all(g.points[:, 2] >= 0)
    np.testing.assert_allclose(np.linalg.norm(g.points, axis=1), 1)
