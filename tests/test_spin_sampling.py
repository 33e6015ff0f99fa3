"""Tests of the sampling method (retina.spin.sampling): honest error bars, correlated errors,
evenness, the time quadrature, and its place in the engine and the provenance.

References: the exact fast separable method (retina.spin.fast_separable, itself checked against the
pair sum), scipy.stats for the t distribution, closed-form Lorentzian sums.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from retina.errors import InputError
from retina.spin import _propagation as propagation
from retina.spin import engine, fast_separable, sampling
from test_spin_separable import _random_system, _unit


def _small(seed=0, k=1e7):
    return _random_system(np.random.default_rng(seed), [1.0, 0.5], [0.5, 0.5], hf_scale=0.3, k=k)


@pytest.mark.slow
@pytest.mark.parametrize("estimator", sampling.ESTIMATORS)
def test_z_scores_against_exact_yields_look_standard_normal(estimator):
    # Reference: fast_separable (exact to 1e-10).  40 independent seeds, one direction each, 16
    # draws: z = (estimate - exact) / standard error follows Student's t with 15 degrees of freedom
    # when the error bar is honest (derived: mean of 16 i.i.d. unbiased draws over its sample
    # standard error; for the product estimator the jackknife variance is a sum of two such sample
    # variances, so t(15) is the heavier-tailed end of its Welch-Satterthwaite range).  The checks fail for an error bar off by a factor 1.5 either way.
    system = _small(k=3e7)
    dirs = _unit(np.random.default_rng(1), 40)
    exact = fast_separable.singlet_start_singlet_yield(system, 50.0, dirs)
    z = np.empty(40)
    for i in range(40):
        res = sampling.sampled_yields(system, 50.0, dirs[i:i + 1], n_states=16, seed=100 + i,
                                      estimator=estimator)
        z[i] = (res.mean[0] - exact[i]) / res.standard_error[0]
    t_std = np.sqrt(15 / 13)
    assert abs(z.mean()) < 4 * t_std / np.sqrt(40)
    assert 0.7 * t_std < z.std(ddof=1) < 1.4 * t_std
    assert scipy.stats.kstest(z, scipy.stats.t(df=15).cdf).pvalue > 1e-3


def test_errors_are_shared_across_directions_and_the_estimate_is_even():
    # Derived: the same random vectors serve every direction, so the error of a difference between
    # near directions is far smaller than each error; the exact yield is even (yieldfn docstring)
    # and the estimate is made even by sampling the upper-hemisphere representative.
    system = _random_system(np.random.default_rng(2), [1.0, 0.5, 0.5], [1.0, 0.5], hf_scale=0.3, k=1e7)
    b1 = np.array([0.0, 0.0, 1.0])
    b2 = np.array([np.sin(0.1), 0.0, np.cos(0.1)])
    res = sampling.sampled_yields(system, 50.0, np.stack([b1, b2, -b1]), n_states=8, seed=3)
    assert res.mean[0] == res.mean[2]
    se_diff = res.standard_error_of([1.0, -1.0, 0.0])
    assert se_diff < 0.3 * res.standard_error[0]
    exact = fast_separable.singlet_start_singlet_yield(system, 50.0, np.stack([b1, b2]))
    assert abs((res.mean[0] - res.mean[1]) - (exact[0] - exact[1])) < 5 * se_diff + res.bias_bound


def test_end_corrected_trapezoid_integrates_band_limited_functions():
    # Derived (module docstring): for F(t) = sum c cos(Omega t), |Omega| h <= theta_max, the
    # end-corrected trapezoid gives sum c k^2/(k^2 + Omega^2) up to (fit error) sum |c| + tail.
    rng = np.random.default_rng(4)
    k = 1e6
    omega = rng.uniform(-3e8, 3e8, 50)
    c = rng.normal(size=50)
    h = 0.9 * np.pi / 3e8
    gamma, err = propagation.end_correction(k, h, 3e8 * h, 1e-10)
    n_t = int(40 / (k * h))
    t = np.arange(n_t) * h
    f = np.cos(np.outer(t, omega)) @ c
    q = k * h * (np.exp(-k * t) @ f - 0.5 * f[0]) - f[:gamma.size] @ gamma
    want = c @ (k * k / (k * k + omega**2))
    assert err <= 1e-10
    assert abs(q - want) <= err * np.abs(c).sum() + 1e-12


def test_engine_runs_the_sampled_method_and_reports_it():
    system = _small(k=2e7)
    info: dict = {}
    dirs = _unit(np.random.default_rng(5), 2)
    got = engine.compute_yields(system, 50.0, dirs, method="sampled", info=info)
    assert got.shape == (2,)
    assert info["approximation"].startswith("stochastic trace estimation")
    assert info["sampling_states"] == sampling.DEFAULT_STATES
    assert info["sampling_standard_error_max"] > 0
    assert info["sampling_control"] == "opposite" and "opposite-direction control" in info["approximation"]
    assert info["sampling_control_variance_reduction"] > 0
    # the default precision is named in the provenance (common practice, no source)
    assert info["sampling_precision"] == sampling.DEFAULT_PRECISION == "single"
    assert "single-precision propagation" in info["approximation"]
    assert engine.choose_method(system) in ("separable", "fast-separable")  # auto stays exact
    with pytest.raises(InputError, match="random states"):
        sampling.sampled_yields(system, 50.0, dirs, n_states=1)


def test_yield_function_provenance_names_the_approximation(tmp_path, monkeypatch):
    from retina.yieldfn import YieldFunction

    monkeypatch.setenv("RETINA_CACHE", str(tmp_path))
    yf = YieldFunction.from_system(_small(k=3e7), 50.0, 2, method="sampled", check_points=4)
    p = yf.provenance
    assert p["method"] == "sampled"
    assert "stochastic trace" in p["approximation"]
    assert p["sampling_standard_error_max"] > 0 and p["antipodal_difference_max"] == 0.0


def test_hours_long_exact_estimates_name_a_faster_method():
    # Common practice, no source: the estimate's note names the faster method in scope.
    from retina.spin.system import Nucleus, Radical, SpinSystem

    def radical(label):
        nuc = [Nucleus(f"N{i}", 1.0, 0.5 * np.eye(3)) for i in range(2)]
        nuc += [Nucleus(f"H{i}", 0.5, (0.1 + 0.03 * i) * np.eye(3)) for i in range(8)]
        return Radical(label, nuclei=tuple(nuc))

    big = SpinSystem("invented 20-nucleus pair", (radical("A"), radical("B")), k_singlet=1e6, k_triplet=1e6)
    c = engine.estimate_cost(big, 258, "separable")
    assert c.seconds > 3600
    assert "method='fast-separable'" in c.note or "method='sampled'" in c.note


def test_spectral_interval_contains_the_spectrum_and_beats_gershgorin():
    # Reference: numpy.linalg.eigvalsh of the dense block Hamiltonian.  Derived: Weyl's inequality
    # (retina.spin._spectral.hyperfine_interval) and Gershgorin's theorem are both rigorous, so
    # their intersection must contain every eigenvalue; on random anisotropic tensors the Weyl
    # bound is the tighter one (seen on the benchmark pairs: about 0.7 of the Gershgorin spread).
    from retina.spin.equivalence import radical_blocks
    from retina.spin.system import Nucleus, Radical

    rng = np.random.default_rng(11)

    def sym(scale):
        a = rng.normal(size=(3, 3)) * scale
        return (a + a.T) / 2

    methyl = sym(0.4)
    rad = Radical("A", nuclei=(Nucleus("N", 1.0, sym(0.6)), Nucleus("H1", 0.5, sym(0.3)),
                               Nucleus("M1", 0.5, methyl), Nucleus("M2", 0.5, methyl), Nucleus("M3", 0.5, methyl)))
    b = _unit(rng, 1)[0] * 50e-6
    tighter = 0
    for blk in radical_blocks(rad, sparse=True):
        s_e, h_hf, weyl = propagation.sparse_ops(blk, rad)
        w = b @ blk.zeeman
        hm = (h_hf + w[0] * s_e[0] + w[1] * s_e[1] + w[2] * s_e[2]).tocsr()
        ev = np.linalg.eigvalsh(hm.toarray())
        lo, hi = propagation.block_interval(hm, weyl, w)
        assert lo <= ev[0] + 1e-6 * abs(ev[0]) and ev[-1] <= hi + 1e-6 * abs(ev[-1])
        g_lo, g_hi = propagation.gershgorin(hm)
        tighter += (hi - lo) < 0.95 * (g_hi - g_lo)
    assert tighter >= 1


def _big(k):
    # invented 20-nucleus pair (two nitrogens and eight protons per radical, isotropic-looking
    # diagonal tensors), matching no real molecule
    from retina.spin.system import Nucleus, Radical, SpinSystem

    def radical(label):
        nuc = [Nucleus(f"N{i}", 1.0, np.diag([0.5, 0.45, 0.55]) * (1 + 0.1 * i)) for i in range(2)]
        nuc += [Nucleus(f"H{i}", 0.5, np.diag([0.1, 0.12, 0.14]) + 0.03 * i * np.eye(3)) for i in range(8)]
        return Radical(label, nuclei=tuple(nuc))

    return SpinSystem("invented 20-nucleus pair", (radical("A"), radical("B")), k_singlet=k, k_triplet=k)


def test_auto_chooses_sampling_only_with_an_accuracy_and_when_it_is_cheaper():
    # Common practice, no source: "auto" stays exact unless the caller accepts an error bar; with
    # one, the cheaper of the modelled times wins (fixed constants, so the choice is reproducible).
    fast_decay, slow_decay = _big(1e8), _big(1e5)
    assert engine.choose_method(fast_decay) == "fast-separable"
    assert sampling.cost_model(fast_decay, 1)[0] < engine._fixed_separable_seconds(fast_decay)
    assert engine.choose_method(fast_decay, accuracy=1e-3) == "sampled"
    # a long lifetime (10 us) makes the propagation longer than the eigendecompositions
    assert engine.choose_method(slow_decay, accuracy=1e-3) == "fast-separable"
    assert engine.choose_method(_small(), accuracy=1e-3) in ("separable", "fast-separable")
    with pytest.raises(InputError, match="accuracy"):
        engine.choose_method(fast_decay, accuracy=0.0)


def test_an_accuracy_sizes_the_random_states_by_a_pilot():
    # Derived: the variance of the estimate falls as s(R) (independent draws; s = 1/R without a
    # draw schedule, about 2/R under the default halving one: sampling.schedule_variance), so
    # asking for half the standard error of a 4-state pilot needs s(R) = s(4) / 4 / 1.2 (20-25
    # states for equal variances, more for the radical with the larger share); the final standard
    # error must then lie near the request (within 1.6x: the pilot's own standard error is
    # uncertain by about 1/sqrt(2 (R - 1)) of itself, and the directions differ).
    system = _small(k=3e7)
    dirs = _unit(np.random.default_rng(12), 6)
    pilot = sampling.sampled_yields(system, 50.0, dirs, n_states=sampling.PILOT_STATES, seed=1)
    want = 0.5 * float(np.max(pilot.standard_error))
    info: dict = {}
    got = engine.compute_yields(system, 50.0, dirs, method="sampled", accuracy=want, info=info)
    assert got.shape == (6,)
    assert 16 <= info["sampling_states"] <= 48
    assert info["sampling_standard_error_max"] < 1.6 * want
    assert info["sampling_accuracy_requested"] == want
    assert info["sampling_accuracy_met"] == (info["sampling_standard_error_max"] <= want)
    assert "product estimator" in info["approximation"]
    assert info["sampling_anisotropy_relative_error"] > 0


def test_product_estimator_jackknife_terms_average_to_the_estimate():
    # Derived (module docstring): the estimate is bilinear in the two radicals' mean series, so the
    # jackknife terms g_i = 1/4 + Q[c^A_i cbar^B]/M average over i to the estimate itself, and so do
    # the h_j; the standard error is sqrt(var(g)/R + var(h)/R).  The paired estimator on the same
    # states estimates the same yield (both unbiased): they differ by a few standard errors at most.
    # Without the split tail (its strata: tests/test_sampling_levers.py).
    system = _small(k=3e7)
    dirs = _unit(np.random.default_rng(13), 3)
    prod = sampling.sampled_yields(system, 50.0, dirs, n_states=6, seed=4, tail_split=None)
    pair = sampling.sampled_yields(system, 50.0, dirs, n_states=6, seed=4, estimator="paired", tail_split=None)
    assert prod.estimator == "product" and len(prod.parts) == 2 and len(pair.parts) == 1
    for part in prod.parts:
        np.testing.assert_allclose(part.mean(axis=0), prod.mean, rtol=0, atol=1e-14)
    want = np.sqrt(sum(np.var(p, axis=0, ddof=1) for p in prod.parts) / 6)
    np.testing.assert_allclose(prod.standard_error, want, rtol=1e-12)
    assert np.all(np.abs(prod.mean - pair.mean) < 5 * np.hypot(prod.standard_error, pair.standard_error))
    with pytest.raises(InputError, match="estimator"):
        sampling.sampled_yields(system, 50.0, dirs, estimator="median")


def test_worker_processes_draw_the_same_states_and_report_progress():
    # Reference: the same call in one process.  Every worker draws the random vectors from the seed,
    # so each direction's estimate and per-draw terms agree to rounding (1e-12: BLAS summation
    # order may differ between processes) and the errors stay shared across directions.
    system = _small(k=3e7)
    dirs = _unit(np.random.default_rng(14), 5)
    one = sampling.sampled_yields(system, 50.0, dirs, n_states=4, seed=2)
    seen = []
    two = sampling.sampled_yields(system, 50.0, dirs, n_states=4, seed=2, n_jobs=2,
                                  progress=lambda d, t: seen.append((d, t)))
    np.testing.assert_allclose(two.mean, one.mean, rtol=0, atol=1e-12)
    for a, b in zip(two.parts, one.parts):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-12)
    assert seen[-1] == (5, 5)
    with pytest.raises(InputError, match="worker processes"):
        sampling.sampled_yields(system, 50.0, dirs, n_jobs=0)


def _radical_with_methyl(rng):
    from retina.spin.system import Nucleus, Radical

    def sym(scale):
        a = rng.normal(size=(3, 3)) * scale
        return (a + a.T) / 2

    methyl = sym(0.4)
    return Radical("A", nuclei=(Nucleus("N", 1.0, sym(0.6)), Nucleus("H1", 0.5, sym(0.3)), Nucleus("H2", 0.5, sym(0.2)),
                               Nucleus("M1", 0.5, methyl), Nucleus("M2", 0.5, methyl), Nucleus("M3", 0.5, methyl)))


def test_grouped_weyl_interval_contains_the_spectrum_and_is_tighter():
    # Reference: numpy.linalg.eigvalsh of the dense block Hamiltonian.  Derived: Weyl's inequality
    # over groups of nuclei (retina.spin._spectral.grouped_interval) is rigorous for every grouping,
    # and one group per nucleus is the per-nucleus bound (up to how the Zeeman term is shared), so
    # larger groups may only tighten it; on random anisotropic tensors they do.
    from retina.spin._spectral import grouped_interval
    from retina.spin.equivalence import radical_blocks

    rng = np.random.default_rng(12)
    rad = _radical_with_methyl(rng)
    tighter = 0
    for trial in range(3):
        b = _unit(rng, 1)[0] * 50e-6 * (1 + 20 * trial)
        for pb in propagation.prepare(rad):
            hm, lo, hi = propagation.block_hamiltonian(pb, b)
            ev = np.linalg.eigvalsh(hm.toarray())
            assert lo <= ev[0] + 1e-9 * abs(ev[0]) and ev[-1] <= hi + 1e-9 * abs(ev[-1])
            w = b @ pb.block.zeeman
            pseudo = propagation.pseudo_nuclei(rad, pb.block)
            for max_dim in (2, 4, 12):
                g_lo, g_hi = grouped_interval(pseudo, w, max_dim=max_dim)
                assert g_lo <= ev[0] + 1e-9 * abs(ev[0]) and ev[-1] <= g_hi + 1e-9 * abs(ev[-1])
            w_lo, w_hi = propagation.block_interval(hm, pb.weyl, w)
            tighter += (hi - lo) < 0.9 * (w_hi - w_lo)
    assert len(radical_blocks(rad)) == 2 and tighter >= 3


def test_block_propagation_matches_dense_exponentials_for_the_same_random_vectors():
    # Reference: scipy.linalg.expm of the dense block Hamiltonian.  For fixed random vectors xi the
    # estimate c_ab(t; xi) = Re sum_i <U S_a |e_i, xi>| S_b |U |e_i, xi>> (module docstring) is a
    # deterministic function of t; the compiled Chebyshev propagation of the block of states and
    # the Gram-matrix contraction must reproduce it (Chebyshev truncation 1e-12 per expansion).
    import scipy.linalg

    from retina.spin.operators import spin_matrices

    rng = np.random.default_rng(13)
    rad = _radical_with_methyl(rng)
    b = _unit(rng, 1)[0] * 300e-6
    prepared = propagation.prepare(rad)
    hams = [propagation.block_hamiltonian(pb, b) for pb in prepared]
    xis = propagation.random_vectors(prepared, 3, rng)
    spread = max(hi - lo for _, lo, hi in hams)
    h = 0.9 * np.pi / (2 * spread)
    n_t = 90
    got = propagation.radical_series(prepared, hams, xis, h, n_t)             # (R, n_t, 9)
    se = np.asarray(spin_matrices(0.5))
    want = np.zeros_like(got)
    for pb, (hm, _, _), xi in zip(prepared, hams, xis):
        n = pb.nuclear_dimension
        s_full = [np.kron(se[a], np.eye(n)) for a in range(3)]
        for j in (0, 37, 89):
            u = scipy.linalg.expm(-1j * hm.toarray() * (j * h))
            for r in range(3):
                cab = np.zeros((3, 3))
                for i in range(2):
                    v = np.kron(np.eye(2)[i], xi[:, r])
                    for a in range(3):
                        for bb in range(3):
                            cab[a, bb] += np.real(np.vdot(u @ s_full[a] @ v, s_full[bb] @ (u @ v)))
                cab *= pb.block.multiplicity
                sym = [0.5 * (cab[a, bb] + cab[bb, a]) for a, bb in propagation.PAIRS]
                anti = [0.5 * (cab[a, bb] - cab[bb, a]) for a, bb in propagation.PAIRS[3:]]
                want[r, j] += np.array(sym + anti)
    for j in (0, 37, 89):
        assert np.max(np.abs(got[:, j] - want[:, j])) < 1e-8 * rad.dimension


def test_electron_trace_is_exact_at_time_zero():
    # Derived: at t = 0, c_ab(0; xi) = Re Tr_e[S_a S_b] |xi|^2 = delta_ab n / 2 = delta_ab d / 4 for
    # entries of unit modulus, with no sampling error at all (the electron is traced exactly); the
    # antisymmetric parts vanish.
    rng = np.random.default_rng(14)
    rad = _radical_with_methyl(rng)
    prepared = propagation.prepare(rad)
    b = _unit(rng, 1)[0] * 50e-6
    hams = [propagation.block_hamiltonian(pb, b) for pb in prepared]
    xis = propagation.random_vectors(prepared, 5, rng)
    got = propagation.radical_series(prepared, hams, xis, 1e-9, 1)[:, 0]
    want = np.array([1, 1, 1, 0, 0, 0, 0, 0, 0]) * rad.dimension / 4
    assert np.max(np.abs(got - want[None, :])) < 1e-10 * rad.dimension


def test_engine_estimate_of_the_sampled_method_counts_worker_processes(monkeypatch):
    # Common practice, no source: directions are independent, so n worker processes on at least n
    # cores divide the modelled time by n and multiply the working memory by n.
    system = _big(1e6)
    monkeypatch.setenv("RETINA_JOBS", "1")
    one = engine.estimate_cost(system, 10, "sampled")
    monkeypatch.setenv("RETINA_JOBS", "2")
    monkeypatch.setattr("os.cpu_count", lambda: 2)
    two = engine.estimate_cost(system, 10, "sampled")
    assert two.seconds == pytest.approx(one.seconds / 2) and two.bytes == 2 * one.bytes


def test_cost_model_follows_the_measured_structure_of_the_hamiltonian():
    # Reference: the stored entries per row of the sparse block Hamiltonian built by
    # retina.spin.equivalence (scipy.sparse nnz), against the count derived in _nnz_row.
    from retina.spin.equivalence import radical_blocks

    rng = np.random.default_rng(15)
    rad = _radical_with_methyl(rng)
    for pb in propagation.prepare(rad):
        hm, _, _ = propagation.block_hamiltonian(pb, _unit(rng, 1)[0] * 50e-6)
        want = hm.nnz / hm.shape[0]
        got = sampling._nnz_row([j for j in pb.block.spins if j > 0])
        assert abs(got - want) <= 0.05 * want
    assert len(radical_blocks(rad)) == 2


def test_opposite_control_averages_b_and_minus_b_from_the_same_states():
    # Derived (sampling module docstring, control variate): with control="opposite" each direction's
    # estimate and per-draw terms are (Y(b) + Y(-b)) / 2 from the same random vectors, i.e.
    # Y(b) - D / 2 with D = Y(b) - Y(-b) of expectation zero; plain_parts keep Y(b) alone, which is
    # what control="none" returns.
    system = _small(k=3e7)
    dirs = sampling._upper(_unit(np.random.default_rng(21), 3))
    # double precision, as _sample_directions by default: the identity holds to rounding
    with_c = sampling.sampled_yields(system, 50.0, dirs, n_states=4, seed=5, control="opposite", precision="double")
    plain = sampling.sampled_yields(system, 50.0, dirs, n_states=4, seed=5, control="none", precision="double")
    b = dirs * 50e-6
    mean, parts, _, extra = sampling._sample_directions(system, np.concatenate([b, -b]), 4, 5,
                                                       sampling.DEFAULT_BIAS_TOL, "product", None, "none",
                                                       sampling.DEFAULT_BASIS,
                                                       sampling.DEFAULT_TAIL_SPLIT)
    assert extra == []
    np.testing.assert_allclose(with_c.mean, 0.5 * (mean[:3] + mean[3:]), rtol=0, atol=1e-14)
    for got, whole in zip(with_c.parts, parts):
        np.testing.assert_allclose(got, 0.5 * (whole[:, :3] + whole[:, 3:]), rtol=0, atol=1e-14)
    for got, want in zip(with_c.plain_parts, plain.parts):
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-14)
    assert with_c.control == "opposite" and plain.control == "none" and plain.plain_parts == ()
    assert np.isnan(plain.variance_reduction([1.0, -1.0, 0.0]))
    with pytest.raises(InputError, match="control"):
        sampling.sampled_yields(system, 50.0, dirs, control="isotropic")


def test_opposite_control_cuts_the_variance_of_differences_between_directions():
    # Measured (sampling module docstring): a draw's error has a part odd in b, of the size of the
    # whole error, that the control removes; on this small random pair the variance of differences
    # between directions fell 14-40 fold (16 states, seed 3), so a cut below 4 would mean the
    # control no longer works.  Each value's own variance falls far less (odd and even parts of the
    # error are of similar size for a single direction: 1.3-fold median on the 10-nucleus pair); an
    # average of two estimates cannot have more variance than the larger of the two, so each
    # value's measured reduction must stay above about 1/2 (the scatter of sample variances of 16
    # draws included).
    system = _small(k=3e7)
    dirs = _unit(np.random.default_rng(1), 6)
    res = sampling.sampled_yields(system, 50.0, dirs, n_states=16, seed=3)
    for j in range(1, 6):
        w = np.zeros(6)
        w[0], w[j] = 1.0, -1.0
        assert res.variance_reduction(w) > 4.0
    for i in range(6):
        assert res.variance_reduction(np.eye(6)[i]) > 0.5


@pytest.mark.slow
@pytest.mark.parametrize("control", sampling.CONTROLS)
def test_z_scores_of_differences_between_directions_look_standard_normal(control):
    # Reference: fast_separable (exact to 1e-10), scipy.stats.kstest against Student's t with 15
    # degrees of freedom (as in the z-score test above: 16 draws per radical).  The anisotropy is a
    # difference of directions whose sampling errors are shared; its standard error comes from the
    # per-draw terms (standard_error_of), with and without the control.  40 independent seeds,
    # each with its own three random directions: the z-scores of one yield and of one difference
    # per seed (independent over seeds).  Mean within 4 standard errors of 0, standard deviation
    # within [0.7, 1.4] of t(15)'s, KS p > 1e-3.
    system = _small(k=3e7)
    rng = np.random.default_rng(31)
    z_value, z_diff = np.empty(40), np.empty(40)
    for i in range(40):
        dirs = _unit(rng, 3)
        exact = fast_separable.singlet_start_singlet_yield(system, 50.0, dirs)
        res = sampling.sampled_yields(system, 50.0, dirs, n_states=16, seed=500 + i, control=control)
        z_value[i] = (res.mean[0] - exact[0]) / res.standard_error[0]
        w = np.array([1.0, -1.0, 0.0]) if i % 2 else np.array([0.0, 1.0, -1.0])
        z_diff[i] = ((res.mean - exact) @ w) / res.standard_error_of(w)
    t_std = np.sqrt(15 / 13)
    for z in (z_value, z_diff):
        assert abs(z.mean()) < 4 * t_std / np.sqrt(40)
        assert 0.7 * t_std < z.std(ddof=1) < 1.4 * t_std
        assert scipy.stats.kstest(z, scipy.stats.t(df=15).cdf).pvalue > 1e-3


def test_the_control_is_counted_by_the_cost_model_the_pilot_and_the_engine(monkeypatch):
    # Derived: the opposite-direction control samples every direction twice, so the modelled time is
    # exactly twice that without it when fields are propagated one at a time (block_width=1; same
    # memory: the two fields are sampled one after the other); the pilot of states_for runs with
    # the final run's control, so its standard error already carries the control's reduction.
    system = _big(1e6)
    t_c, m_c, note = sampling.cost_model(system, 3, control="opposite", block_width=1)
    t_n, m_n, _ = sampling.cost_model(system, 3, control="none", block_width=1)
    assert t_c == pytest.approx(2 * t_n) and m_c == m_n
    assert "opposite-direction control" in note
    assert "opposite-direction control" in engine.estimate_cost(system, 3, "sampled").note
    seen = []
    real = sampling.sampled_yields

    def spy(*args, **kwargs):
        seen.append(kwargs.get("control"))
        return real(*args, **kwargs)

    monkeypatch.setattr(sampling, "sampled_yields", spy)
    small = _small(k=3e7)
    dirs = _unit(np.random.default_rng(22), 2)
    sampling.states_for(small, 50.0, dirs, 1e-3)
    sampling.states_for(small, 50.0, dirs, 1e-3, control="none")
    assert seen == ["opposite", "none"]
