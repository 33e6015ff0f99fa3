"""Fisher information and Cramer-Rao bounds (retina.readout.fisher) on a synthetic retina and the
real RetinaModel."""

import dataclasses
from types import SimpleNamespace

import numpy as np
import pytest

from retina.errors import InputError
from retina.readout import fisher
from retina.signal.noise import SignalModel


class SyntheticRetina:
    """Test fixture: receptor i responds Phi_i(b) = a + c (axis_i . b)^2 (written here, not the
    project's pattern code).  Tangential gradient: 2 c (a.b) (a - (a.b) b)."""

    def __init__(self, axes, a=0.5, c=0.1, solid_angle=None):
        self.axes = np.asarray(axes, float)
        self.a, self.c = a, c
        n = len(self.axes)
        self.receptors = SimpleNamespace(visual_dirs=-self.axes,
                                         solid_angle=np.ones(n) if solid_angle is None else solid_angle)

    def yields(self, b):
        t = np.asarray(b) @ self.axes.T
        return self.a + self.c * t ** 2

    def yields_and_grad(self, b):
        b = np.asarray(b)
        t = b @ self.axes.T
        g = 2 * self.c * t[..., None] * (self.axes[None, :, :] - t[..., None] * b[:, None, :])
        return self.a + self.c * t ** 2, g


def random_axes(n, seed=0):
    d = np.random.default_rng(seed).normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def synthetic_signal(n=40, photons=1000.0, inclination=60.0, seed=0, **kw):
    return SignalModel(SyntheticRetina(random_axes(n, seed)), inclination_deg=inclination,
                       photons=photons, **kw)


def test_single_receptor_closed_form():
    # Derived: level head, D = 0: b_head = (cos I cos psi, -cos I sin psi, sin I).  With the axis
    # along x, Phi = a + c cos^2 I cos^2 psi, dPhi/dpsi = -c cos^2 I sin 2 psi, and with catch =
    # photons (one receptor, solid angle = mean), I = photons (dPhi/dpsi)^2 / Phi.
    a, c, inc, ph = 0.4, 0.2, 50.0, 500.0
    sig = SignalModel(SyntheticRetina([[1.0, 0, 0]], a, c), inclination_deg=inc, photons=ph)
    psi = np.array([10.0, 33.0, 100.0, 250.0])
    p, ci = np.deg2rad(psi), np.cos(np.deg2rad(inc))
    phi = a + c * ci ** 2 * np.cos(p) ** 2
    dphi = -c * ci ** 2 * np.sin(2 * p)
    info = fisher.heading_information(sig, psi)
    np.testing.assert_allclose(info.information, ph * dphi ** 2 / phi, rtol=1e-12)
    np.testing.assert_allclose(info.bound_deg, np.rad2deg(1 / np.sqrt(ph * dphi ** 2 / phi)), rtol=1e-12)


def test_analytic_derivative_matches_finite_difference():
    sig = synthetic_signal(pitch_deg=15.0, roll_deg=-8.0)
    psi = np.array([5.0, 47.0, 123.0, 301.0])
    lam, dlam = sig.expected_and_derivative(psi)
    h = 1e-4
    fd = (sig.expected(psi + h) - sig.expected(psi - h)) / np.deg2rad(2 * h)
    # Derived (common practice, no source): central differences err by O(h^2) ~ 1e-9 relative here.
    np.testing.assert_allclose(dlam, fd, rtol=1e-6, atol=1e-6 * np.abs(lam).max())
    # Inclination derivative the same way, through a model with a changed inclination.
    _, dinc = sig.expected_and_derivative(psi, wrt="inclination")
    up = dataclasses.replace(sig, inclination_deg=60.0 + h).expected(psi)
    dn = dataclasses.replace(sig, inclination_deg=60.0 - h).expected(psi)
    np.testing.assert_allclose(dinc, (up - dn) / np.deg2rad(2 * h), rtol=1e-6, atol=1e-6 * lam.max())


def test_information_equals_variance_of_score():
    # Derived: the score s = sum_i (n_i / lam_i - 1) dlam_i has mean 0 and variance I (Poisson).
    sig = synthetic_signal(n=25, photons=50.0)
    lam, dlam = sig.expected_and_derivative([70.0])
    counts = sig.sample([70.0], rng=3, size=40000)[:, 0, :]
    score = ((counts / lam - 1) * dlam).sum(axis=1)
    I = fisher.poisson_information(lam, dlam)[0]
    # Tolerance: sd of a sample variance ~ sqrt(2 / n) = 0.7 % for Gaussian scores; 4 % allows
    # for excess kurtosis.  The mean: 5 standard errors.
    assert score.var() == pytest.approx(I, rel=0.04)
    assert abs(score.mean()) < 5 * np.sqrt(I / 40000)


def test_gain_schur_matches_generic_schur_complement():
    sig = synthetic_signal(n=30)
    lam, dlam = sig.expected_and_derivative([10.0, 80.0, 200.0])
    # Reference: the Schur complement through a general (pseudo-)inverse of the 2x2 Fisher matrix
    # with d lam / d g = lam (g = 1), versus the closed form sum dlam^2/lam - (sum dlam)^2/sum lam.
    F = fisher.poisson_fisher_matrix(lam, np.stack([dlam, lam], axis=-1))
    eff = F[:, 0, 0] - F[:, 0, 1] ** 2 / F[:, 1, 1]
    np.testing.assert_allclose(fisher.gain_schur(lam, dlam), eff, rtol=1e-10)
    np.testing.assert_allclose(fisher.schur_complement(F), eff, rtol=1e-10)
    assert np.all(eff < F[:, 0, 0])


def test_gain_nuisance_kills_uniform_relative_change():
    # Derived: if dlam_i = k lam_i for all i, a gain change explains the data: I_eff = 0.
    lam = np.array([[3.0, 5.0, 9.0]])
    assert fisher.gain_schur(lam, 0.3 * lam)[0] == pytest.approx(0.0, abs=1e-12)
    assert fisher.poisson_information(lam, 0.3 * lam)[0] == pytest.approx(0.09 * 17.0)


def test_no_modulation_no_information():
    # Derived: c = 0 makes every yield constant, so dlam = 0 and the bound is infinite.
    sig = SignalModel(SyntheticRetina(random_axes(20), a=0.5, c=0.0), inclination_deg=60, photons=1e4)
    info = fisher.heading_information(sig, [0.0, 90.0])
    assert np.all(info.information == 0.0)
    assert np.all(np.isinf(info.bound_deg))


def test_bound_scales_as_inverse_sqrt_photons():
    sig = synthetic_signal(photons=100.0)
    psi = [20.0, 140.0]
    b100 = fisher.heading_information(sig, psi).bound_deg
    # Derived: lam and dlam are both proportional to the light level, so I ~ photons.  Checked by
    # recomputing the model at 100x the photons (not through the linear shortcut).
    b1e4 = fisher.heading_information(dataclasses.replace(sig, photons=1e4), psi).bound_deg
    np.testing.assert_allclose(b1e4, b100 / 10.0, rtol=1e-12)
    curve = fisher.bound_vs_photons(sig, [100.0, 1e4, 1e6], psi)
    np.testing.assert_allclose(curve[1], b1e4, rtol=1e-12)
    np.testing.assert_allclose(curve[2], b100 / 100.0, rtol=1e-12)


def test_fourier_interpolation_matches_direct_evaluation():
    # Derived: Phi(b_head(psi)) of degree 2 is a trigonometric polynomial of degree 2 in psi.
    sig = synthetic_signal(pitch_deg=20.0, roll_deg=5.0)
    psi = np.linspace(0, 359, 97)
    lam, dlam = sig.expected_and_derivative(psi)
    lf, df = sig.expected_and_derivative_fourier(psi, degree=2)
    np.testing.assert_allclose(lf, lam, rtol=1e-10)
    np.testing.assert_allclose(df, dlam, atol=1e-9 * np.abs(dlam).max())
    a = fisher.heading_information(sig, psi, degree=4).information
    np.testing.assert_allclose(a, fisher.heading_information(sig, psi).information, rtol=1e-8)


def test_joint_and_inclination_information():
    sig = synthetic_signal(n=40)
    psi = [30.0, 150.0]
    J = fisher.joint_information(sig, psi)
    inc = fisher.inclination_information(sig, psi).information
    head = fisher.heading_information(sig, psi).information
    np.testing.assert_allclose(J[:, 0, 0], head, rtol=1e-12)
    np.testing.assert_allclose(J[:, 1, 1], inc, rtol=1e-12)
    # Derived: an extra unknown (the inclination) cannot add heading information.
    eff = fisher.schur_complement(J)
    assert np.all(eff <= head + 1e-12) and np.all(eff > 0)
    Q = fisher.bound_vs_inclination(sig, [30.0, 60.0], psi)
    np.testing.assert_allclose(Q[1], fisher.heading_information(sig, psi).bound_deg)


def test_bad_input():
    with pytest.raises(InputError, match="nuisance"):
        fisher.heading_information(synthetic_signal(), [0.0], nuisance="sky")
    with pytest.raises(InputError, match="shape"):
        fisher.poisson_information(np.ones(3), np.ones(4))


# ---- through the real RetinaModel (retina.eye.pattern) -----------------------------------------

def invented_yield_coeffs(L=4):
    """Invented anisotropic yield Phi(b) = 0.30 + 0.05 b_z^2 + 0.03 b_x^4 (molecular frame)."""
    from retina import sphere

    g = sphere.grid_for_degree(L)
    p = g.points
    return sphere.fit_even(0.30 + 0.05 * p[:, 2] ** 2 + 0.03 * p[:, 0] ** 4, g, L)


def real_signal(ordering=None, n_per_eye=150, photons=1e4, inclination=60.0, **kw):
    from retina.eye import geometry, ordering as orders, pattern

    if ordering is None:
        ordering = orders.Composite(orders.Aligned.tilted(35.0, 20.0), orders.Cone(kappa=8.0))
    rec = geometry.build_receptors(geometry.default_eyes(n_per_eye))
    model = pattern.RetinaModel(invented_yield_coeffs(), rec, ordering)
    return SignalModel(model, inclination_deg=inclination, photons=photons, **kw)


def test_real_retina_derivative_matches_finite_difference():
    from retina.signal.light import HorizonSky

    sig = real_signal(pitch_deg=10.0, sky=HorizonSky(softness_deg=10.0))
    psi = np.array([0.0, 77.0, 181.0])
    lam, dlam = sig.expected_and_derivative(psi)
    h = 1e-4
    fd = (sig.expected(psi + h) - sig.expected(psi - h)) / np.deg2rad(2 * h)
    # Derived: central difference, O(h^2) error; tolerance well above rounding (~1e-8 relative).
    np.testing.assert_allclose(dlam, fd, rtol=1e-5, atol=1e-6 * np.abs(dlam).max())
    assert np.abs(dlam).max() > 1e-3 * lam.max()   # the pattern does change with heading
    # ... and so does the information built from either derivative.
    np.testing.assert_allclose(fisher.heading_information(sig, psi).information,
                               fisher.poisson_information(lam, fd), rtol=1e-5)


def test_real_retina_fourier_path_is_exact():
    # Derived: band-limited degree-4 responses give degree-4 trigonometric polynomials in heading.
    sig = real_signal(roll_deg=7.0)
    psi = np.linspace(0.5, 359.5, 41)
    direct = fisher.heading_information(sig, psi)
    fast = fisher.heading_information(sig, psi, degree=sig.retina.degree)
    np.testing.assert_allclose(fast.information, direct.information, rtol=1e-8)


def test_real_retina_isotropic_ordering_and_flat_light_give_no_information():
    from retina.eye import ordering as orders

    # Derived: an isotropic ensemble keeps only the l = 0 mean, so every yield is constant.
    iso = real_signal(orders.Isotropic())
    info = fisher.heading_information(iso, [0.0, 45.0, 200.0], nuisance="none")
    assert np.all(info.information < 1e-20 * iso.photons)
    # Derived: a response with no l > 0 terms (flat yield) under uniform light gives none either.
    from retina.eye import geometry, pattern

    flat = np.zeros_like(invented_yield_coeffs())
    flat[0] = 0.3 * np.sqrt(4 * np.pi)
    rec = geometry.build_receptors(geometry.default_eyes(50))
    sig = SignalModel(pattern.RetinaModel(flat, rec, None), inclination_deg=60, photons=1e6)
    assert np.all(fisher.heading_information(sig, [10.0, 100.0]).information < 1e-20)


def test_real_retina_score_variance():
    # Derived: Var(score) = I for Poisson counts (as above), through the real RetinaModel.
    sig = real_signal(n_per_eye=40, photons=200.0)
    lam, dlam = sig.expected_and_derivative([33.0])
    counts = sig.sample([33.0], rng=9, size=20000)[:, 0, :]
    score = ((counts / lam - 1) * dlam).sum(axis=1)
    assert score.var() == pytest.approx(fisher.poisson_information(lam, dlam)[0], rel=0.05)


def test_cone_disorder_funk_hecke_shortcut_matches_ordering_module():
    # Reference: the ordering module's cone average (quadrature over the vMF swing rotations,
    # retina.eye.ordering.Cone) evaluated directly at each heading, against the Funk-Hecke
    # block-sum shortcut with Fourier interpolation.
    from retina.eye import geometry, ordering as orders, pattern

    rec = geometry.build_receptors(geometry.default_eyes(60))
    f = invented_yield_coeffs()
    free = orders.FreeRotation(tilt_deg=40.0)
    r0 = free.ensemble(f)
    psi = np.array([0.0, 50.0, 130.0, 275.0])
    kappas = [0.0, 2.0, 20.0, np.inf]

    def make(coeffs):
        return SignalModel(pattern.RetinaModel(coeffs, rec, None), inclination_deg=55.0, photons=1.0)

    got = fisher.information_vs_cone_disorder(make, r0, kappas, psi, nuisance="gain")
    for k, kappa in enumerate(kappas):
        model = pattern.RetinaModel(f, rec, orders.Composite(free, orders.Cone(kappa=kappa)))
        sig = SignalModel(model, inclination_deg=55.0, photons=1.0)
        want = fisher.heading_information(sig, psi, nuisance="gain").per_photon
        np.testing.assert_allclose(got[k], want, rtol=1e-7, atol=1e-12 * np.abs(got).max())
    # Derived: kappa = 0 leaves only the mean: no information.
    assert np.all(got[0] <= 1e-12 * got[-1].max())


def test_bound_vs_parameter_small_anisotropy_limit():
    # Derived: Phi = a + s c t^2 with s -> 0 gives dPhi ~ s and Phi ~ a, so I ~ s^2 and the bound
    # ~ 1/s: doubling s halves the bound (to O(s) corrections, here < 0.1 %).
    axes = random_axes(30, 2)

    def make(s):
        return SignalModel(SyntheticRetina(axes, a=0.5, c=0.1 * s), inclination_deg=60, photons=1e4)

    b = fisher.bound_vs_parameter(make, [1e-3, 2e-3], [15.0, 95.0])
    np.testing.assert_allclose(b[0] / b[1], 2.0, rtol=1e-3)


def test_anisotropy_and_disorder_curves_through_real_retina():
    from retina.eye import geometry, ordering as orders, pattern

    rec = geometry.build_receptors(geometry.default_eyes(40))
    r0 = orders.FreeRotation(tilt_deg=40.0).ensemble(invented_yield_coeffs())

    def make(coeffs):
        return SignalModel(pattern.RetinaModel(coeffs, rec, None), inclination_deg=55.0, photons=1e4)

    psi = [20.0, 200.0]
    # Derived: scaling the l > 0 part by s -> 0 makes dPhi ~ s with Phi ~ mean, so bound ~ 1/s.
    b = fisher.bound_vs_anisotropy(make, r0, [1e-4, 2e-4, 1.0], psi)
    np.testing.assert_allclose(b[0] / b[1], 2.0, rtol=1e-3)
    np.testing.assert_allclose(b[2], fisher.heading_information(make(r0), psi).bound_deg, rtol=1e-12)
    # Derived: kappa = inf is no disorder; the bound is linear-in-photons scaled.
    d = fisher.bound_vs_cone_disorder(make, r0, [np.inf], [1e4, 4e4], psi)
    assert d.shape == (1, 2, 2)
    np.testing.assert_allclose(d[0, 0], b[2], rtol=1e-7)
    np.testing.assert_allclose(d[0, 1], b[2] / 2, rtol=1e-7)


def test_unknown_gain_schur_against_a_finite_difference_fisher_matrix():
    # Reference: an independent 2x2 Fisher matrix in (psi, g) for lam_i = g mu_i(psi), every
    # derivative by central finite differences of the expected counts (no analytic gradients), then
    # the Schur complement 1 / (I^-1)_psi,psi through numpy.linalg.inv.  Derived: it is independent
    # of g, so the project's per-photon value times nothing but the light level must match.
    sig = real_signal(photons=1.0)
    psi = np.array([0.0, 37.0, 200.0])
    g, h, hg = 2.5, 1e-3, 1e-4
    lam = g * sig.expected(psi)
    dpsi = g * (sig.expected(psi + h) - sig.expected(psi - h)) / np.deg2rad(2 * h)
    dg = ((g + hg) - (g - hg)) * sig.expected(psi) / (2 * hg)
    eff = []
    for k in range(psi.size):
        M = np.array([[np.sum(dpsi[k] ** 2 / lam[k]), np.sum(dpsi[k] * dg[k] / lam[k])],
                      [np.sum(dpsi[k] * dg[k] / lam[k]), np.sum(dg[k] ** 2 / lam[k])]])
        eff.append(1.0 / np.linalg.inv(M)[0, 0])
    got = g * fisher.heading_information(sig, psi, nuisance="gain").information
    # Tolerance: O(h^2) central differences of a smooth pattern, ~1e-8 relative; 1e-5 is ample.
    np.testing.assert_allclose(got, eff, rtol=1e-5)
    assert np.all(np.array(eff) < fisher.heading_information(sig, psi).information * g)


def test_uninformative_bound_threshold_and_uniform_guess_level():
    from scipy import integrate

    # Derived: rms of a heading error uniform on (-180, 180] deg is sqrt(int x^2 dx / 360) = 180/sqrt(3);
    # Reference: scipy.integrate.quad.
    ms = integrate.quad(lambda x: x * x / 360.0, -180.0, 180.0)[0]
    assert fisher.UNIFORM_RMS_DEG == pytest.approx(np.sqrt(ms), rel=1e-12)
    # Common practice, no source: a bound is reported only where the local approximation can hold.
    assert fisher.INFORMATIVE_BOUND_DEG < fisher.UNIFORM_RMS_DEG
    got = fisher.bound_is_informative([1.0, 60.0, 61.0, 450.0, np.inf, np.nan])
    assert got.tolist() == [True, True, False, False, False, False]
