"""Tests of the sampling method's variance levers (retina.spin.sampling): the basis of the random
phases (nucleus-axis), the split tail and unequal states per radical.

References: the exact fast separable method (retina.spin.fast_separable, itself checked against the
pair sum), numpy.kron and scipy.linalg.expm for the spin rotations, scipy.stats for the t
distribution and the Kolmogorov-Smirnov test; derivations beside each check.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from retina.errors import InputError
from retina.spin import _propagation as propagation
from retina.spin import fast_separable, sampling
from retina.spin.operators import spin_matrices
from retina.spin.system import Nucleus, Radical, SpinSystem
from test_spin_separable import _random_system, _unit


def _small(seed=0, k=3e7):
    return _random_system(np.random.default_rng(seed), [1.0, 0.5], [0.5, 0.5], hf_scale=0.3, k=k)


def _axial(par, perp, axis):
    n = np.asarray(axis, dtype=float)
    n = n / np.linalg.norm(n)
    return perp * np.eye(3) + (par - perp) * np.outer(n, n)


def test_spin_rotation_turns_jz_into_the_axis_component():
    # Derived (_propagation.spin_rotation): D J_z D^+ = n . J for the rotation taking z to n;
    # reference operators: retina.spin.operators.spin_matrices, checked element-wise.
    rng = np.random.default_rng(0)
    for j in (0.5, 1.0, 1.5):
        jm = np.asarray(spin_matrices(j))
        for n in list(_unit(rng, 3)) + [np.array([0.0, 0.0, 1.0]), np.array([0.0, 0.0, -1.0])]:
            d = propagation.spin_rotation(j, n)
            np.testing.assert_allclose(d @ d.conj().T, np.eye(d.shape[0]), atol=1e-13)
            np.testing.assert_allclose(d @ jm[2] @ d.conj().T, np.einsum("a,aij->ij", n, jm), atol=1e-13)


def test_rotate_factors_matches_the_kronecker_product():
    # Reference: numpy.kron of the factors applied to the vectors.
    rng = np.random.default_rng(1)
    mats = [rng.normal(size=(m, m)) + 1j * rng.normal(size=(m, m)) for m in (3, 2, 3)]
    v = rng.normal(size=(18, 4)) + 1j * rng.normal(size=(18, 4))
    want = np.kron(np.kron(mats[0], mats[1]), mats[2]) @ v
    np.testing.assert_allclose(propagation.rotate_factors(v, mats), want, atol=1e-12)


def test_nucleus_axis_basis_makes_a_conserved_axial_spin_exact():
    # Derived (sampling module docstring, the basis): one nucleus with an axial tensor at zero
    # field (H = a_par S_z' I_z' + a_perp (S_x' I_x' + S_y' I_y')) conserves the total projection
    # S_z' + I_z', not I_z'; with a_perp = 0 it conserves I_z' itself, so X = Tr_e[S_a S_b(t)]
    # commutes with I_z' and is diagonal in its eigenbasis (a spin-1 nucleus: three one-dimensional
    # blocks).  The random-phase variance sum_{i != j} |X_ij|^2 is then zero in the nucleus-axis
    # basis: every draw gives the exact correlation; in the laboratory basis it does not.
    axis = np.array([0.4, -0.3, 0.8])
    rad = Radical("A", nuclei=(Nucleus("N", 1.0, _axial(1.2, 0.0, axis)),))
    prepared = propagation.prepare(rad)
    b = np.zeros(3)
    hams = [propagation.block_hamiltonian(pb, b) for pb in prepared]
    h, n_t = 2e-10, 40
    out = {}
    for basis in ("lab", "nucleus-axis"):
        xis = propagation.random_vectors(prepared, 6, np.random.default_rng(2), radical=rad, basis=basis)
        out[basis] = propagation.radical_series(prepared, hams, xis, h, n_t)   # (R, n_t, 9)
    axis_spread = np.max(np.std(out["nucleus-axis"], axis=0))
    lab_spread = np.max(np.std(out["lab"], axis=0))
    assert axis_spread < 1e-9
    assert lab_spread > 1e-3
    # both are unbiased: the lab draws scatter around the exact (nucleus-axis) values
    np.testing.assert_allclose(out["lab"].mean(axis=0), out["nucleus-axis"][0], atol=6 * lab_spread / np.sqrt(6))


def test_split_tail_series_keep_the_early_part_and_the_tail_draws():
    # Derived (radical_series): stopping draws r_tail.. at the split changes nothing before it and
    # nothing for the draws that go on (up to the Chebyshev truncation, CHEB_TOL per expansion).
    system = _small()
    rad = system.radicals[0]
    prepared = propagation.prepare(rad)
    xis = propagation.random_vectors(prepared, 5, np.random.default_rng(0))
    b = _unit(np.random.default_rng(3), 1)[0] * 50e-6
    hams = [propagation.block_hamiltonian(pb, b) for pb in prepared]
    full = propagation.radical_series(prepared, hams, xis, 2e-9, 300)
    split = propagation.radical_series(prepared, hams, xis, 2e-9, 300, n_split=77, r_tail=2)
    np.testing.assert_allclose(split[:, :77], full[:, :77], atol=1e-10)
    np.testing.assert_allclose(split[:2], full[:2], atol=1e-10)
    assert np.all(split[2:, 77:] == 0.0)


def test_split_tail_strata_add_up_to_the_estimate_and_unequal_states_are_kept():
    # Derived (module docstring, split tail): the strata of each radical are scaled by their share
    # of the draws, so their means add up to the estimate; each radical keeps its own count.
    system = _small()
    dirs = _unit(np.random.default_rng(4), 3)
    res = sampling.sampled_yields(system, 50.0, dirs, n_states=(6, 8), seed=1, tail_split=1.0, control="none")
    assert res.states == (6, 8) and res.n_states == 8 and res.tail_split == 1.0
    assert [p.shape[0] for p in res.parts] == [2, 4, 2, 6]
    np.testing.assert_allclose(res.parts[0].mean(0) + res.parts[1].mean(0), res.mean, atol=1e-14)
    np.testing.assert_allclose(res.parts[2].mean(0) + res.parts[3].mean(0), res.mean, atol=1e-14)
    # without a split, unequal counts give one part per radical with its own number of rows
    res2 = sampling.sampled_yields(system, 50.0, dirs, n_states=(3, 5), seed=1, tail_split=None, control="none")
    assert [p.shape[0] for p in res2.parts] == [3, 5]
    # a radical with too few draws for two strata (3 - 2 < 2) does not split; the variance terms
    # still go to the right radical: A's is the sample variance of its 3 draws over 3
    res3 = sampling.sampled_yields(system, 50.0, dirs, n_states=(6, 3), seed=1, tail_split=1.0, control="none")
    assert [p.shape[0] for p in res3.parts] == [2, 4, 3] and res3.parts_a == 2
    var_a, var_b = res3.radical_variances()
    np.testing.assert_allclose(var_b, np.var(res3.parts[2], axis=0, ddof=1) / 3, rtol=1e-12)
    np.testing.assert_allclose(var_a + var_b, res3.standard_error**2, rtol=1e-12)
    with pytest.raises(InputError, match="paired"):
        sampling.sampled_yields(system, 50.0, dirs, n_states=(3, 5), estimator="paired")
    with pytest.raises(InputError, match="basis"):
        sampling.sampled_yields(system, 50.0, dirs, basis="molecular")
    with pytest.raises(InputError, match="draw schedule"):
        sampling.sampled_yields(system, 50.0, dirs, tail_split=-1.0)


@pytest.mark.slow
@pytest.mark.parametrize("basis,tail_split,states,k", [("nucleus-axis", None, (16, 16), 3e7),
                                                       ("nucleus-axis", 1.0, (12, 20), 3e7),
                                                       ("lab", 0.5, (16, 16), 3e7),
                                                       ("nucleus-axis", "halving", (16, 24), 1e6)])
def test_z_scores_stay_standard_with_the_levers(basis, tail_split, states, k):
    # Reference: fast_separable (exact to 1e-10), scipy.stats.kstest against Student's t with 11
    # to 15 degrees of freedom (the smallest count's draws less one; with a split the stratified
    # variance has a few fewer effective degrees (Welch-Satterthwaite), covered by taking the
    # smallest stratum-free count).  An early split (0.5 and 1 lifetimes) makes the tail stratum
    # matter, so a wrong weight or variance there would show.  40 independent seeds, one value and
    # one difference of directions per seed (independent over seeds): mean within 4 standard
    # errors of 0, standard deviation within [0.7, 1.4] of t's, KS p > 1e-3.  The halving
    # schedule (lifetime 1 us, so that the grid resolves its switches) stops 8, 4, 2 and 2 of A's
    # draws and 12, 6, 4 and 2 of B's at different times: a wrong weight or stratum would show.
    system = _small(k=k)
    rng = np.random.default_rng(41)
    df = min(states) - 1
    z_value, z_diff = np.empty(40), np.empty(40)
    for i in range(40):
        dirs = _unit(rng, 3)
        exact = fast_separable.singlet_start_singlet_yield(system, 50.0, dirs)
        res = sampling.sampled_yields(system, 50.0, dirs, n_states=states, seed=900 + i, basis=basis,
                                      tail_split=tail_split)
        z_value[i] = (res.mean[0] - exact[0]) / res.standard_error[0]
        w = np.array([1.0, -1.0, 0.0]) if i % 2 else np.array([0.0, 1.0, -1.0])
        z_diff[i] = ((res.mean - exact) @ w) / res.standard_error_of(w)
    t_std = np.sqrt(df / (df - 2))
    for z in (z_value, z_diff):
        assert abs(z.mean()) < 4 * t_std / np.sqrt(40)
        assert 0.7 * t_std < z.std(ddof=1) < 1.4 * t_std
        assert scipy.stats.kstest(z, scipy.stats.t(df=df).cdf).pvalue > 1e-3


def test_cache_key_of_the_sampled_method_names_its_basis_and_split_tail(monkeypatch):
    # Common practice, no source: a cache key covers everything that changes the stored numbers;
    # another basis of the phases, another split tail or another precision gives other numbers.
    from retina import cache

    system = _small()
    key = cache.cache_key(system, 47.0, 8, "sampled", check_points=27)
    for name, value in (("DEFAULT_BASIS", "lab"), ("DEFAULT_TAIL_SPLIT", None), ("DEFAULT_TAIL_SPLIT", 4.0),
                        ("TAIL_STATES", 3), ("DEFAULT_PRECISION", "double")):
        with monkeypatch.context() as m:
            m.setattr(sampling, name, value)
            assert cache.cache_key(system, 47.0, 8, "sampled", check_points=27) != key
    assert cache.cache_key(system, 47.0, 8, "sampled", check_points=27) == key


def test_the_pilot_gives_more_states_to_the_radical_with_more_variance_per_cost(monkeypatch):
    # Derived (states_for): R_r ~ sqrt(v_r / c_r).  With the pilot's variance terms replaced by
    # v_B = 9 v_A and equal modelled costs, R_B / R_A = 3 (up to the rounding up of each count);
    # and the counts meet the accuracy: v_A / R_A + v_B / R_B <= accuracy^2 / 1.2.
    system = _small()
    dirs = _unit(np.random.default_rng(6), 2)
    def fake(self, weights=None):
        return np.array([1e-6, 1e-6]), np.array([9e-6, 9e-6])

    monkeypatch.setattr(sampling.SampledYields, "radical_variances", fake)
    # the modelled cost: one unit per state of each radical
    from retina.spin import sampling_states

    monkeypatch.setattr(sampling_states, "_radical_seconds", lambda sys, f, tol, states, *a, **k: (
        [float(states[0]), float(states[1])], 0, 1))
    (r_a, r_b), _ = sampling.states_for(system, 50.0, dirs, 1e-3, tail_split=None)
    v_a, v_b = 1e-6 * sampling.PILOT_STATES, 9e-6 * sampling.PILOT_STATES
    assert r_b / r_a == pytest.approx(3.0, rel=0.1)
    assert v_a / r_a + v_b / r_b <= 1e-6 / 1.2 * (1 + 1e-12)
    # under the halving schedule the pilot's variance is divided by its own factor and the counts'
    # predicted variance, v_r s(R_r), meets the request (sampling.schedule_variance)
    (h_a, h_b), _ = sampling.states_for(system, 50.0, dirs, 1e-3, tail_split="halving")
    s4 = sampling.schedule_variance(sampling.PILOT_STATES, "halving")
    pred = (1e-6 * sampling.schedule_variance(h_a, "halving") + 9e-6 * sampling.schedule_variance(h_b, "halving")) / s4
    assert pred <= 1e-6 / 1.2 * (1 + 1e-12) and h_b > h_a
