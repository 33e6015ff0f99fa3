"""Head scans (retina.readout.scans)."""

import numpy as np
import pytest

from retina.errors import InputError
from retina.readout import fisher, scans
from retina.signal.noise import SignalModel
try:  # the tests folder is on sys.path (pytest rootdir-relative import)
    from test_fisher import SyntheticRetina, random_axes, real_signal, synthetic_signal
except ImportError:  # tests collected as a package
    from tests.test_fisher import SyntheticRetina, random_axes, real_signal, synthetic_signal


def _generic_schur(lam, dlam, nuisance):
    """Reference: build the full Fisher matrix over (psi, gains) and take the Schur complement with
    a general pseudo-inverse (retina.readout.fisher.schur_complement)."""
    P, N = lam.shape
    cols = [dlam.ravel()]
    if nuisance == "global_gain":
        cols.append(lam.ravel())
    elif nuisance == "pose_gain":
        for p in range(P):
            m = np.zeros_like(lam)
            m[p] = lam[p]
            cols.append(m.ravel())
    elif nuisance == "receptor_gain":
        for i in range(N):
            m = np.zeros_like(lam)
            m[:, i] = lam[:, i]
            cols.append(m.ravel())
    F = fisher.poisson_fisher_matrix(lam.ravel(), np.stack(cols, axis=-1))
    return float(fisher.schur_complement(F))


@pytest.mark.parametrize("nuisance", ["none", "global_gain", "pose_gain", "receptor_gain"])
def test_closed_form_schur_matches_generic(nuisance):
    sig = synthetic_signal(n=12, photons=300.0)
    scan = scans.uniform_sweep(40.0, 30.0, 5)
    lam, dlam = sig.expected_and_derivative_at(scan.rotations)
    got = scans.scan_information_arrays(lam, dlam, nuisance)
    assert got == pytest.approx(_generic_schur(lam, dlam, nuisance), rel=1e-9, abs=1e-9)


def test_static_look_with_unknown_texture_has_no_information_and_scans_recover_it():
    # Derived: one pose, one unknown gain per receptor: every count is explained by its own gain,
    # so the Schur complement is exactly zero; moving the field across the receptors breaks that.
    sig = real_signal(n_per_eye=60)
    static = scans.scan_information(sig, scans.uniform_sweep(30.0, 0.0, 1), 1e4, nuisance="receptor_gain")
    sweep = scans.scan_information(sig, scans.uniform_sweep(30.0, 40.0, 9), 1e4, nuisance="receptor_gain")
    known = scans.scan_information(sig, scans.uniform_sweep(30.0, 0.0, 1), 1e4)
    assert static == pytest.approx(0.0, abs=1e-9 * known)
    assert sweep > 0.01 * known


def test_unknown_global_gain_scan_beats_static_looks():
    # Derived: with a_p = sum_i dlam_pi and b_p = sum_i lam_pi, Cauchy-Schwarz gives
    # (sum_p a_p)^2 / sum_p b_p <= sum_p a_p^2 / b_p, so one gain shared by a scan loses less than
    # separate looks at the same poses with the budget split the same way (= the mean over poses of
    # static looks with the whole budget).
    sig = real_signal(n_per_eye=60)
    for h in (30.0, 150.0):
        scan = scans.uniform_sweep(h, 60.0, 7)
        shared = scans.scan_information(sig, scan, 1e4, nuisance="global_gain")
        looks = np.mean([scans.scan_information(sig, scans.uniform_sweep(y, 0.0, 1), 1e4,
                                                nuisance="global_gain") for y in scan.yaw_deg])
        assert shared > looks
        # ... and a per-pose gain is exactly the separate looks.
        assert scans.scan_information(sig, scan, 1e4, nuisance="pose_gain") == pytest.approx(looks, rel=1e-10)


def test_best_amplitude_with_unknown_texture():
    sig = real_signal(n_per_eye=60)
    opt = scans.best_scan_amplitude(sig, [30.0, 120.0], [0.0, 20.0, 60.0, 90.0], 1e4, steps=7,
                                    nuisance="receptor_gain")
    assert opt.best_amplitude_deg > 0.0 and np.isinf(opt.bound_deg[0])
    assert opt.information.shape == (4, 2)
    assert np.argmax(opt.information.mean(axis=1)) == list(opt.amplitudes_deg).index(opt.best_amplitude_deg)
    # Derived: with no nuisance and headings covering the circle symmetrically the average does not
    # depend on the amplitude, so the smallest amplitude is reported.
    # (Offsets are multiples of the 30 deg heading spacing, so the average is exactly invariant.)
    flat = scans.best_scan_amplitude(sig, np.arange(0, 360, 30), [0.0, 30.0, 90.0], 1e4, steps=3)
    assert flat.best_amplitude_deg == 0.0


def test_known_gain_scan_is_average_of_static_information():
    # Derived: with no nuisance the information adds over poses; with budget / P per pose the scan
    # information is the mean over the scan's headings of the static information at the budget.
    sig = synthetic_signal(n=20, photons=1.0)
    scan = scans.uniform_sweep(100.0, 45.0, 7)
    got = scans.scan_information(sig, scan, 500.0)
    per = fisher.heading_information(sig, scan.yaw_deg).per_photon * 500.0
    assert got == pytest.approx(per.mean(), rel=1e-12)


def test_timed_sweep_uses_pose_builder():
    sc = scans.timed_sweep(10.0, 30.0, count=2, speed_deg_s=60.0, rate_hz=20.0)
    # Source: retina.eye.pose.yaw_sweep convention: heading +/- amplitude, 4 A / speed per scan.
    assert sc.yaw_deg.max() == pytest.approx(40.0)
    assert sc.yaw_deg.min() == pytest.approx(-20.0)
    assert sc.times_s[-1] == pytest.approx(4.0)
    sig = synthetic_signal(n=10)
    assert scans.scan_information(sig, sc, 100.0, nuisance="pose_gain") > 0


def test_pattern_change_per_degree_closed_form():
    # Derived: one receptor along x, level head, D = 0: Phi = a + c cos^2 I cos^2 psi,
    # dPhi/dpsi / Phi = -c cos^2 I sin 2 psi / Phi, per degree times pi / 180.
    a, c, inc = 0.4, 0.2, 50.0
    sig = SignalModel(SyntheticRetina([[1.0, 0, 0]], a, c), inclination_deg=inc, photons=10.0)
    psi = np.array([20.0, 70.0])
    p, ci = np.deg2rad(psi), np.cos(np.deg2rad(inc)) ** 2
    want = np.abs(-c * ci * np.sin(2 * p) / (a + c * ci * np.cos(p) ** 2)) * np.pi / 180
    np.testing.assert_allclose(scans.pattern_change_per_degree(sig, psi), want, rtol=1e-12)


def test_bad_input():
    with pytest.raises(InputError, match="nuisance"):
        scans.scan_information_arrays(np.ones((2, 2)), np.ones((2, 2)), "texture")
    with pytest.raises(InputError, match="amplitude"):
        scans.uniform_sweep(0.0, -5.0, 3)
    with pytest.raises(InputError, match="budget"):
        scans.scan_information(synthetic_signal(n=3), scans.uniform_sweep(0, 10, 3), 0.0)


@pytest.mark.parametrize("nuisance", scans.SCAN_NUISANCES)
def test_information_over_the_heading_grid_equals_one_scan_at_a_time(nuisance):
    # scan_information_grid regroups the sums of scan_information_arrays (per-row terms summed
    # along the shifted rows).  Reference: scan_information_arrays called once per start heading
    # on the rows that scan visits, budget split over its poses (its definition).
    rng = np.random.default_rng(5)
    G, N = 36, 50
    lam = rng.uniform(0.5, 2.0, (G, N))
    lam[3, 7] = 0.0                              # a receptor with no light at one heading
    dlam = rng.normal(0.0, 0.3, (G, N))
    shifts = np.array([-4, -2, 0, 2, 4, 9])
    rows = (np.arange(G)[:, None] + shifts[None, :]) % G
    ref = np.array([scans.scan_information_arrays(lam[r] / shifts.size, dlam[r] / shifts.size, nuisance)
                    for r in rows])
    got = scans.scan_information_grid(lam, dlam, shifts, nuisance)
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-14)
    # one pose: the same as a static look, and exactly zero with an unknown texture
    one = scans.scan_information_grid(lam, dlam, [0], nuisance)
    if nuisance == "receptor_gain":
        assert np.all(one == 0.0)
    else:
        np.testing.assert_allclose(one, [scans.scan_information_arrays(lam[[g]], dlam[[g]], nuisance)
                                         for g in range(G)], rtol=1e-12)
