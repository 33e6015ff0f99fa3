"""Tests of the separable-radicals method (retina.spin.separable).

Independent references: the dense full-space eigen sum and the dense Liouville linear solve of
tests/_dynamics.py (numpy/scipy only, own operator construction), retina.spin.hilbert when it
exists, and closed forms derived below.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.spatial.transform import Rotation

import _dynamics as dyn
from retina.errors import InputError
from retina.spin import separable
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem

G_FREE = 2.0023193043625635
TOL = 1e-10  # both sides are exact to rounding; sums of ~1e4-1e6 O(1) terms leave ~1e-13


def _sym(rng, scale):
    a = rng.normal(size=(3, 3)) * scale
    return (a + a.T) / 2


def _pair(nuc_a=(), nuc_b=(), *, k=1e6, g_a=None, g_b=None, **kw):
    ra = Radical("A", g_tensor=g_a, nuclei=tuple(nuc_a))
    rb = Radical("B", g_tensor=g_b, nuclei=tuple(nuc_b))
    return SpinSystem("test pair", (ra, rb), k_singlet=k, k_triplet=k, **kw)


def _random_system(rng, spins_a, spins_b, *, hf_scale=1.0, g_aniso=0.0, k=1e6, **kw):
    nuc_a = [Nucleus(f"a{i}", s, _sym(rng, hf_scale)) for i, s in enumerate(spins_a)]
    nuc_b = [Nucleus(f"b{i}", s, _sym(rng, hf_scale)) for i, s in enumerate(spins_b)]
    g_a = G_FREE * np.eye(3) + _sym(rng, g_aniso) if g_aniso else None
    g_b = G_FREE * np.eye(3) + _sym(rng, g_aniso) if g_aniso else None
    return _pair(nuc_a, nuc_b, k=k, g_a=g_a, g_b=g_b, **kw)


def _unit(rng, n):
    v = rng.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1)[:, None]


# --------------------------------------------------------------------------------------------
# Random systems against the dense full-space reference
# --------------------------------------------------------------------------------------------

spins = st.lists(st.sampled_from([0.5, 1.0]), min_size=0, max_size=2)


@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(spins_a=spins, spins_b=spins, seed=st.integers(0, 2**31 - 1),
       log_k=st.floats(5.0, 8.0), field=st.floats(1.0, 2000.0),
       g_aniso=st.sampled_from([0.0, 2e-3, 5e-2]),
       start=st.sampled_from(["singlet", "triplet"]), report=st.sampled_from(["singlet", "triplet"]))
def test_random_systems_match_dense_eigen_and_hilbert(spins_a, spins_b, seed, log_k, field, g_aniso, start, report):
    # Reference: dense full-space eigen sum built from numpy.kron (tests/_dynamics.py).
    assume(4 * np.prod([2 * s + 1 for s in spins_a + spins_b]) <= 144)  # keeps the run short
    rng = np.random.default_rng(seed)
    system = _random_system(rng, spins_a, spins_b, g_aniso=g_aniso, k=10**log_k,
                            initial_state=start, reported_yield=report)
    dirs = _unit(rng, 3)
    got = separable.yields(system, field, dirs)
    want = dyn.dense_eigen_yields(system, field, dirs)
    np.testing.assert_allclose(got, want, rtol=0, atol=TOL)
    hilbert = importlib.import_module("retina.spin.hilbert")
    # Reference: the package's exact eigen method (independent implementation), when present.
    if hasattr(hilbert, "yields"):
        np.testing.assert_allclose(got, hilbert.yields(system, field, dirs), rtol=0, atol=TOL)


def test_fixed_system_matches_liouville_solve_all_starts_and_yields():
    # Reference: dense Liouville linear solve k Tr(P (-L)^-1 rho0) with rho0 = P_T/(3M) built
    # explicitly (tests/_dynamics.py), so the triplet-start formula is checked independently.
    rng = np.random.default_rng(7)
    dirs = _unit(rng, 4)
    for start in ("singlet", "triplet"):
        for report in ("singlet", "triplet"):
            system = _random_system(np.random.default_rng(3), [1.0], [0.5], g_aniso=1e-3,
                                    k=3e6, initial_state=start, reported_yield=report)
            got = separable.yields(system, 50.0, dirs)
            want = dyn.liouville_solve_yields(system, 50.0, dirs)
            np.testing.assert_allclose(got, want, rtol=0, atol=1e-10)  # dense solve, 576 unknowns


def test_larger_pair_with_nuclei_on_both_radicals():
    # Reference: dense eigen sum; Hilbert dimension 2*3*2 x 2*3*3 = 216.
    rng = np.random.default_rng(11)
    system = _random_system(rng, [1.0, 0.5], [1.0, 1.0], hf_scale=0.7)
    dirs = _unit(rng, 2)
    np.testing.assert_allclose(separable.yields(system, 50.0, dirs),
                               dyn.dense_eigen_yields(system, 50.0, dirs), rtol=0, atol=TOL)


def test_matches_retina_hilbert_when_present():
    # Reference: the exact eigen method of the package (independent implementation).
    hilbert = importlib.import_module("retina.spin.hilbert")
    if not hasattr(hilbert, "yields"):
        pytest.skip("retina.spin.hilbert.yields not written yet")
    rng = np.random.default_rng(5)
    for spins_a, spins_b in (([0.5], [0.5]), ([1.0, 0.5], [0.5, 0.5]), ([], [1.0, 1.0])):
        system = _random_system(rng, spins_a, spins_b, g_aniso=2e-3, k=2e6)
        dirs = _unit(rng, 5)
        np.testing.assert_allclose(separable.yields(system, 47.0, dirs),
                                   hilbert.yields(system, 47.0, dirs), rtol=0, atol=TOL)


# --------------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------------

def _lor(k, w):
    return k * k / (k * k + w * w)


def test_no_hyperfine_equal_g_gives_unit_singlet_yield():
    # Derived: with no hyperfine and equal g, H = w (S_A + S_B).n commutes with P_S, so a singlet
    # start stays singlet: Phi_S = 1 for every field and direction.
    dirs = _unit(np.random.default_rng(0), 6)
    for field in (0.0, 50.0, 5000.0):
        np.testing.assert_allclose(separable.yields(_pair(), field, dirs), 1.0, rtol=0, atol=1e-14)


def test_delta_g_closed_form():
    # Derived: no hyperfine, isotropic g_A != g_B.  Each free electron precesses about the field at
    # w_r = g_r mu_B B / hbar, C_ab(t) = R_ba(t)/2, and sum_ab C^A C^B = 1/4 + cos(dw t)/2, so
    # Phi_S = 1/2 + (1/2) k^2 / (k^2 + dw^2), dw = (g_A - g_B) mu_B B / hbar.
    k = 5e6
    g_a, g_b = 2.0031, 2.0012
    system = _pair(k=k, g_a=g_a * np.eye(3), g_b=g_b * np.eye(3))
    field = 1000.0
    dw = (g_a - g_b) * dyn.MU_B_OVER_HBAR * field * 1e-6
    dirs = _unit(np.random.default_rng(1), 4)
    np.testing.assert_allclose(separable.yields(system, field, dirs), 0.5 + 0.5 * _lor(k, dw),
                               rtol=0, atol=1e-13)


def test_one_nucleus_zero_field_closed_form():
    # Derived: H_A = a S.I splits into F = 1 and F = 0 (gap a); C^A_zz(t) = 1/2 + cos(a t)/2,
    # C^B = delta/2, M = 2, so Phi_S = 1/4 + (3/8)(1 + K(a)) = 5/8 + (3/8) k^2/(k^2 + a^2).
    k = 2e6
    a_mT = 0.8
    a = a_mT * 1e-3 * dyn.GAMMA_E
    system = _pair([Nucleus("H", 0.5, a_mT * np.eye(3))], k=k)
    got = separable.yields(system, 0.0, np.array([[0.0, 0.0, 1.0]]))
    np.testing.assert_allclose(got, 5 / 8 + 3 / 8 * _lor(k, a), rtol=0, atol=1e-14)


def breit_rabi_singlet_yield(a, w, k):
    """Phi_S for one I = 1/2 nucleus (isotropic a, rad s^-1) on A, bare B, field w = gamma_e B.

    Derived (Breit-Rabi): H_A = w S_z + a S.I has |uu>, |dd> at +-w/2 + a/4 and, in the m_F = 0
    block, -a/4 +- W/2 with W = sqrt(w^2 + a^2), |+> = c|ud> + s|du>, |-> = -s|ud> + c|du>,
    c^2 = (1 + w/W)/2, s^2 = (1 - w/W)/2.  With H_B = w S_Bz the B correlations are C_zz = 1/2,
    C_xx = C_yy = cos(wt)/2, C_xy = -C_yx = sin(wt)/2, so
    sum_ab C^A C^B = C^A_zz/2 + (1/2) Re[G(t) e^{-iwt}], G = Tr[S_- S_+(t)] over A, where
    G = s^2 e^{i(E_uu - E_+)t} + c^2 e^{i(E_uu - E_-)t} + c^2 e^{i(E_+ - E_dd)t} + s^2 e^{i(E_- - E_dd)t}
    and C^A_zz = (1 + (w/W)^2)/2 + (a/W)^2 cos(W t)/2.  Laplace transform, M = 2:
    Phi_S = 1/4 + (1/2)[(1 + (w/W)^2)/4 + (a/W)^2 K(W)/4
                        + (s^2 K(f1) + c^2 K(f2) + c^2 K(f3) + s^2 K(f4))/2]
    with f1,4 = (a - w -+ W)/2 ... as below and K(f) = k^2/(k^2 + f^2).  At w = 0 it reduces to
    5/8 + 3/8 K(a) (checked separately).
    """
    big_w = np.hypot(w, a)
    c2 = (1 + w / big_w) / 2
    s2 = (1 - w / big_w) / 2
    f1 = (a - w - big_w) / 2
    f2 = (a - w + big_w) / 2
    f3 = (-a - w + big_w) / 2
    f4 = (-a - w - big_w) / 2
    K = lambda f: _lor(k, f)  # noqa: E731
    return 0.25 + 0.5 * ((1 + (w / big_w) ** 2) / 4 + (a / big_w) ** 2 * K(big_w) / 4
                         + (s2 * K(f1) + c2 * K(f2) + c2 * K(f3) + s2 * K(f4)) / 2)


@pytest.mark.parametrize("a_mT, field_uT", [(0.5, 50.0), (-1.2, 300.0), (0.3, 3000.0)])
def test_one_nucleus_breit_rabi_closed_form(a_mT, field_uT):
    k = 1e6
    a = a_mT * 1e-3 * dyn.GAMMA_E
    w = dyn.GAMMA_E * field_uT * 1e-6  # free-electron g on both radicals
    system = _pair([Nucleus("H", 0.5, a_mT * np.eye(3))], k=k,
                   g_a=dyn.GAMMA_E / dyn.MU_B_OVER_HBAR * np.eye(3),
                   g_b=dyn.GAMMA_E / dyn.MU_B_OVER_HBAR * np.eye(3))
    dirs = _unit(np.random.default_rng(2), 3)
    want = breit_rabi_singlet_yield(a, w, k)
    np.testing.assert_allclose(separable.yields(system, field_uT, dirs), want, rtol=0, atol=1e-13)
    assert abs(breit_rabi_singlet_yield(a, 0.0, k) - (5 / 8 + 3 / 8 * _lor(k, a))) < 1e-14


# --------------------------------------------------------------------------------------------
# Symmetries and sum rules
# --------------------------------------------------------------------------------------------

def test_singlet_plus_triplet_is_one():
    # Derived: equal rates, k int e^{-kt} Tr rho dt = 1 (module docstring).
    rng = np.random.default_rng(4)
    dirs = _unit(rng, 8)
    for start in ("singlet", "triplet"):
        s = _random_system(np.random.default_rng(9), [1.0], [0.5, 0.5], g_aniso=1e-3,
                           initial_state=start, reported_yield="singlet")
        t = _random_system(np.random.default_rng(9), [1.0], [0.5, 0.5], g_aniso=1e-3,
                           initial_state=start, reported_yield="triplet")
        np.testing.assert_allclose(separable.yields(s, 50.0, dirs) + separable.yields(t, 50.0, dirs),
                                   1.0, rtol=0, atol=1e-14)


def test_inversion_symmetry():
    # Derived: time reversal maps H(B) to H(-B) and leaves P_S invariant, so Phi(b) = Phi(-b).
    rng = np.random.default_rng(6)
    system = _random_system(rng, [1.0, 0.5], [0.5], g_aniso=5e-3)
    dirs = _unit(rng, 10)
    np.testing.assert_allclose(separable.yields(system, 50.0, dirs),
                               separable.yields(system, 50.0, -dirs), rtol=0, atol=1e-13)


def test_rotational_covariance():
    # Derived: rotating every tensor (A -> R A R^T, g -> R g R^T) and the field (b -> R b) is a
    # change of frame, so the yield is unchanged.
    rng = np.random.default_rng(8)
    base = _random_system(rng, [0.5, 0.5], [1.0], g_aniso=3e-3)
    rot = Rotation.from_euler("zyz", [0.4, 1.1, -2.0]).as_matrix()

    def turn(rad):
        nuclei = tuple(Nucleus(n.label, n.spin, rot @ n.hyperfine_mT @ rot.T) for n in rad.nuclei)
        return Radical(rad.label, g_tensor=rot @ rad.g_matrix @ rot.T, nuclei=nuclei)

    turned = SpinSystem("turned", tuple(turn(r) for r in base.radicals),
                        k_singlet=base.k_singlet, k_triplet=base.k_triplet)
    dirs = _unit(rng, 5)
    np.testing.assert_allclose(separable.yields(turned, 50.0, dirs @ rot.T),
                               separable.yields(base, 50.0, dirs), rtol=0, atol=1e-13)


def test_isotropic_system_has_no_direction_dependence():
    # Derived: with isotropic hyperfine and g the Hamiltonian is rotation invariant up to a frame
    # change, so the yield is the same for every direction (common practice, no source).
    rng = np.random.default_rng(10)
    system = _pair([Nucleus("N", 1.0, 0.6 * np.eye(3))], [Nucleus("H", 0.5, -0.4 * np.eye(3))])
    y = separable.yields(system, 50.0, _unit(rng, 6))
    assert np.ptp(y) < 1e-13


# --------------------------------------------------------------------------------------------
# Scope, input checks, progress
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("kw, match", [
    (dict(exchange_mT=0.1), "exchange"),
    (dict(dipolar_mT=np.diag([1.0, 1.0, -2.0]) * 0.1), "dipolar"),
    (dict(k_singlet=1e6, k_triplet=2e6), "equal recombination rates"),
    (dict(relaxation=Relaxation(random_field=(1e5, 0.0))), "relaxation"),
    (dict(k_singlet=0.0, k_triplet=0.0), "positive finite recombination rate"),
])
def test_out_of_scope_systems_are_refused(kw, match):
    base = dict(k_singlet=1e6, k_triplet=1e6)
    base.update(kw)
    system = SpinSystem("bad", (Radical("A"), Radical("B")), source="pair.toml", **base)
    with pytest.raises(InputError, match=match) as err:
        separable.yields(system, 50.0, np.array([[0.0, 0.0, 1.0]]))
    assert "pair.toml" in str(err.value)


@pytest.mark.parametrize("field, dirs, match", [
    (-1.0, [[0, 0, 1]], "non-negative"),
    (50.0, [[0, 0]], r"shape \(N, 3\)"),
    (50.0, [[0, 0, 0]], "non-zero"),
    (50.0, [[np.nan, 0, 1]], "non-finite"),
    ("fifty", [[0, 0, 1]], "microtesla"),
])
def test_bad_inputs_raise_input_error(field, dirs, match):
    with pytest.raises(InputError, match=match):
        separable.yields(_pair(), field, np.array(dirs, dtype=float))


def test_progress_reports_completion_and_directions_are_normalised():
    calls = []
    system = _random_system(np.random.default_rng(12), [0.5], [0.5])
    dirs = _unit(np.random.default_rng(13), 7)
    y = separable.yields(system, 50.0, 3.0 * dirs, progress=lambda d, t: calls.append((d, t)))
    assert calls and calls[-1] == (7, 7)
    np.testing.assert_allclose(y, separable.yields(system, 50.0, dirs), rtol=0, atol=1e-15)


def test_small_batches_give_the_same_yields_and_report_each_batch():
    # Derived: batching only splits the direction loop (common practice, no source).
    system = _random_system(np.random.default_rng(14), [1.0], [0.5, 0.5])
    dirs = _unit(np.random.default_rng(15), 9)
    calls = []
    per = separable.batch_bytes(system)
    y = separable.yields(system, 50.0, dirs, max_bytes=2 * per, progress=lambda d, t: calls.append(d))
    assert calls == [2, 4, 6, 8, 9]
    np.testing.assert_allclose(y, separable.yields(system, 50.0, dirs), rtol=0, atol=1e-15)
    assert separable.working_bytes(system, 9, max_bytes=2 * per) < separable.working_bytes(system, 9)


def test_exchanging_the_radicals_leaves_the_yield_unchanged():
    # Derived: P_S = 1/4 - S_A.S_B is symmetric in the two electrons, so relabelling A <-> B
    # (which also swaps which radical the kernel loops over innermost) changes nothing.
    rng = np.random.default_rng(16)
    system = _random_system(rng, [1.0, 1.0], [0.5], g_aniso=2e-3)
    swapped = SpinSystem("swapped", system.radicals[::-1], k_singlet=system.k_singlet,
                         k_triplet=system.k_triplet)
    dirs = _unit(rng, 4)
    np.testing.assert_allclose(separable.yields(swapped, 50.0, dirs),
                               separable.yields(system, 50.0, dirs), rtol=0, atol=1e-13)
