"""Circular statistics against Zar's worked examples and scipy.stats."""

import numpy as np
import pytest
from scipy import stats

from retina.errors import InputError
from retina.readout import circstats as cs

# Source: Zar, Biostatistical Analysis, 5th ed. (2010), Example 27.1 (transcribed)
ZAR_27_1 = [45, 55, 81, 96, 110, 117, 132, 154]
# Source: Zar (2010), Example 27.2 (transcribed)
ZAR_27_2 = [66, 75, 86, 88, 88, 93, 97, 101, 118, 130]


def test_rayleigh_zar_example_27_1():
    res = cs.rayleigh_test(ZAR_27_1)
    # Source: Zar Example 27.1: mean 98.99 deg, r = 0.82522, R = 6.6017, z = 5.448.
    assert res.n == 8
    assert res.mean_deg == pytest.approx(98.99, abs=0.01)
    assert res.r == pytest.approx(0.82522, abs=5e-5)
    assert res.R == pytest.approx(6.6017, abs=5e-4)
    assert res.z == pytest.approx(5.448, abs=1e-3)
    # Source: Zar eq. 27.4 gives p = 0.00185 here; the table brackets it in 0.001 < p < 0.002.
    assert res.p == pytest.approx(0.00185, abs=1e-5)
    assert 0.001 < res.p < 0.002


def test_v_test_zar_example_27_2():
    res = cs.v_test(ZAR_27_2, 90.0)
    # Source: Zar Example 27.2: mean 94.05 deg, r = 0.9521, V = 9.498, u = 4.248, p < 0.0005.
    assert res.mean_deg == pytest.approx(94.05, abs=0.01)
    assert res.r == pytest.approx(0.9521, abs=1e-4)
    assert res.V == pytest.approx(9.498, abs=1e-3)
    assert res.u == pytest.approx(4.248, abs=1e-3)
    assert res.p < 0.0005


def test_against_scipy_circmean_circstd_directional_stats():
    rng = np.random.default_rng(1)
    a = rng.vonmises(0.7, 2.0, size=200)
    deg = np.rad2deg(a)
    mv = cs.mean_vector(deg)
    # Reference: scipy.stats.circmean / circstd (sqrt(-2 ln R), same definition as Zar eq. 26.21)
    assert mv.mean_deg == pytest.approx(np.rad2deg(stats.circmean(a)) % 360, abs=1e-9)
    assert cs.circular_std(deg) == pytest.approx(np.rad2deg(stats.circstd(a)), rel=1e-12)
    # Reference: scipy.stats.directional_stats on unit vectors gives the mean resultant length.
    ds = stats.directional_stats(np.c_[np.cos(a), np.sin(a)], normalize=False)
    assert mv.r == pytest.approx(ds.mean_resultant_length, rel=1e-12)
    assert np.rad2deg(np.arctan2(ds.mean_direction[1], ds.mean_direction[0])) % 360 == pytest.approx(
        mv.mean_deg, abs=1e-9)


def test_axial_doubling_recovers_axis():
    # Derived: a bimodal sample at 30 and 210 deg has r ~ 0 as directions but r = 1 as axes.
    data = [30, 210] * 10
    assert cs.mean_vector(data).r < 1e-12
    ax = cs.mean_vector(data, axial=True)
    assert ax.r == pytest.approx(1.0)
    assert ax.mean_deg == pytest.approx(30.0)
    assert cs.rayleigh_test(data).p > 0.5
    assert cs.rayleigh_test(data, axial=True).p < 1e-6
    # Derived: axial V-test toward 210 deg is the same axis as 30 deg, so V = n.
    assert cs.v_test(data, 210.0, axial=True).V == pytest.approx(20.0)


def test_angular_deviation_and_wrap():
    # Derived: r = cos(10 deg) for the pair {-10, +10}; s = sqrt(2 (1 - r)) rad.
    s = cs.angular_deviation([-10, 10])
    assert s == pytest.approx(np.rad2deg(np.sqrt(2 * (1 - np.cos(np.deg2rad(10))))))
    assert cs.wrap180(-180.0) == 180.0
    assert cs.circular_difference(350, 10) == pytest.approx(-20.0)
    assert cs.circular_difference(10, 190, axial=True) == pytest.approx(0.0)


def test_rayleigh_p_is_calibrated_under_uniformity():
    # Derived: under uniformity p is ~uniform, so about 5 % of samples have p < 0.05
    # (binomial sd for 2000 samples ~ 0.5 %; tolerance 1.5 %).  Seeded.
    rng = np.random.default_rng(7)
    ps = np.array([cs.rayleigh_test(rng.uniform(0, 360, 30)).p for _ in range(2000)])
    assert abs(np.mean(ps < 0.05) - 0.05) < 0.015


def test_von_mises_concentration():
    rng = np.random.default_rng(3)
    d = cs.von_mises_deg(100.0, 4.0, 20000, rng)
    # Reference: scipy.special: E[cos] of a von Mises = I1(k)/I0(k).
    from scipy.special import i0, i1
    assert cs.mean_vector(d).r == pytest.approx(i1(4.0) / i0(4.0), abs=0.01)
    assert cs.mean_vector(d).mean_deg == pytest.approx(100.0, abs=1.0)


def test_bad_input():
    with pytest.raises(InputError, match="at least one angle"):
        cs.mean_vector([])
    with pytest.raises(InputError, match="finite"):
        cs.rayleigh_test([1.0, np.nan])
    with pytest.raises(InputError, match="kappa"):
        cs.von_mises_deg(0.0, -1.0, 3, np.random.default_rng(0))


# Source: Zar (2010), Appendix Table B.35, critical values of u for the V test (transcribed), rows
# n = 8 and n = 9 at alpha = 0.25, 0.10, 0.05, 0.025, 0.01, 0.005, 0.0025, 0.001.
ZAR_B35_ALPHA = [0.25, 0.10, 0.05, 0.025, 0.01, 0.005, 0.0025, 0.001]
ZAR_B35_U = {8: [0.688, 1.296, 1.649, 1.947, 2.280, 2.498, 2.691, 2.916],
             9: [0.687, 1.294, 1.649, 1.948, 2.286, 2.507, 2.705, 2.937]}


@pytest.mark.parametrize("n", [8, 9])
def test_v_test_p_matches_zar_table_b35_critical_values(n):
    # At the tabled critical value u_alpha the exact p must be alpha; the table is rounded to three
    # decimals, so compare the critical value found from p to within 0.002 in u.
    from scipy.optimize import brentq

    for alpha, u_tab in zip(ZAR_B35_ALPHA, ZAR_B35_U[n]):
        u_exact = brentq(lambda u: cs.v_test_p(u * np.sqrt(n / 2.0), n) - alpha, 0.0, np.sqrt(2.0 * n) - 1e-9)
        assert u_exact == pytest.approx(u_tab, abs=0.002), (n, alpha)


@pytest.mark.parametrize("n, u", [(3, 1.5), (6, 2.33), (6, 1.0), (12, 2.0)])
def test_v_test_p_matches_a_seeded_monte_carlo_of_the_null(n, u):
    # Reference: Monte Carlo of the null (uniform directions), 400,000 samples of n angles, seed 11;
    # tolerance 4 binomial standard errors.  The case n = 6, u = 2.33: about 0.0080, where
    # the normal tail says 0.0099.
    rng = np.random.default_rng(11)
    m = 400_000
    V = np.cos(rng.uniform(0.0, 2.0 * np.pi, (m, n))).sum(axis=1)
    p_mc = np.mean(V * np.sqrt(2.0 / n) >= u)
    p = cs.v_test_p(u * np.sqrt(n / 2.0), n)
    assert abs(p - p_mc) < 4 * np.sqrt(p_mc * (1 - p_mc) / m) + 1e-6
    if (n, u) == (6, 2.33):
        assert p == pytest.approx(0.00806, abs=5e-5) and abs(stats.norm.sf(u) - 0.0099) < 1e-4


def test_v_test_p_small_n_closed_forms_and_large_n_limit():
    # Derived: n = 1, V = cos(theta) with theta uniform: P(V >= v) = arccos(v) / pi.
    for v in (-0.9, 0.0, 0.5, 0.99):
        assert cs.v_test_p(v, 1) == pytest.approx(np.arccos(v) / np.pi, abs=1e-14)
    # Derived: n = 2, P(V >= 0) = 1/2 by symmetry; V = 2 only when both angles are 0 (probability 0).
    assert cs.v_test_p(0.0, 2) == pytest.approx(0.5, abs=1e-10)
    assert cs.v_test_p(0.0, 7) == pytest.approx(0.5, abs=1e-10)
    assert cs.v_test_p(2.0, 2) == 0.0 and cs.v_test_p(-3.0, 3) == 1.0
    # Derived: central limit, u -> standard normal for large n (third-order terms vanish by
    # symmetry, so the error is O(1/n)).
    n = 400
    assert cs.v_test_p(1.645 * np.sqrt(n / 2.0), n) == pytest.approx(stats.norm.sf(1.645), abs=2e-3)
