"""The sampling method's draw schedules (retina.spin.sampling, module docstring: the halving
schedule): levels, switch times, grid counts, propagation with draws that stop, chunked blocks,
strata, and the variance model."""

import math

import numpy as np
import pytest

from retina.spin import _fused
from retina.spin import _propagation as propagation
from retina.spin import sampling
from test_spin_separable import _random_system, _unit


def _small(seed=0, k=3e7):
    return _random_system(np.random.default_rng(seed), [1.0, 0.5], [0.5, 0.5], hf_scale=0.3, k=k)


def test_halving_levels_halve_and_each_stops_at_least_two_draws():
    # Derived (sampling_result.schedule_levels): n_{l+1} = max(TAIL_STATES, n_l // 2), or
    # TAIL_STATES when that level could not split again, while each level stops at least 2 draws
    # (every stratum needs a sample variance).
    assert [n for n, _ in sampling.schedule_levels(96, "halving")] == [96, 48, 24, 12, 6, 2]
    assert [n for n, _ in sampling.schedule_levels(7, "halving")] == [7, 2]
    assert [n for n, _ in sampling.schedule_levels(16, "halving")] == [16, 8, 4, 2]
    assert [n for n, _ in sampling.schedule_levels(3, "halving")] == [3]
    for r in range(2, 300):
        counts = [n for n, _ in sampling.schedule_levels(r, "halving")]
        stops = -np.diff(counts + [0])
        assert counts[0] == r and np.all(stops >= 2)
        assert counts[-1] == (sampling.TAIL_STATES if r > 3 else r)
        times = [t for _, t in sampling.schedule_levels(r, "halving")]
        assert times[0] == 0.0 and np.all(np.diff(times) > 0)
    # exact halves switch at delay + stretch (l + 1/2) ln 2 lifetimes (derived from
    # delay + stretch ln(R / sqrt(n_l n_{l+1})))
    from retina.spin.sampling_result import HALVING_DELAY, HALVING_STRETCH

    times = [t for _, t in sampling.schedule_levels(64, "halving")]
    np.testing.assert_allclose(times[1:], HALVING_DELAY + HALVING_STRETCH * (np.arange(len(times) - 1) + 0.5)
                               * math.log(2), rtol=1e-13)
    # the split tail and no schedule
    assert sampling.schedule_levels(8, 3.0) == [(8, 0.0), (2, 3.0)]
    assert sampling.schedule_levels(3, 3.0) == [(3, 0.0)]
    assert sampling.schedule_levels(8, None) == [(8, 0.0)]


def _walk_variance_reference(levels):
    # Reference: the random-walk model's variance by direct 2-D quadrature of its covariance
    # 2 e^{-t-t'} min(t, t') over the levels (scipy.integrate.dblquad), not the u-integral the
    # module uses.
    import scipy.integrate

    counts = [n for n, _ in levels]
    edges = [t for _, t in levels] + [np.inf]
    total = 0.0
    for i in range(len(counts)):
        for j in range(len(counts)):
            val, _ = scipy.integrate.dblquad(lambda t2, t1: 2 * math.exp(-t1 - t2) * min(t1, t2),
                                             edges[i], min(edges[i + 1], 60.0),
                                             edges[j], min(edges[j + 1], 60.0), epsabs=1e-11)
            total += val / max(counts[i], counts[j])
    return total


def test_schedule_variance_follows_the_random_walk_model():
    # Derived (sampling_result.schedule_variance): no schedule gives 1/R; the model's tail share
    # from T on is (1 + 2T) e^{-2T}; and every schedule's factor matches a direct quadrature of
    # the model's covariance (scipy.integrate.dblquad).
    assert sampling.schedule_variance(10, None) == pytest.approx(0.1, rel=1e-5)
    from retina.spin.sampling_result import _walk_covariance

    for t in (0.5, 1.0, 2.0, 3.0):
        k = _walk_covariance([0.0, t, np.inf])
        assert k[1, 1] == pytest.approx((1 + 2 * t) * math.exp(-2 * t), rel=1e-5)
        assert k.sum() == pytest.approx(1.0, rel=1e-5)
    for r, tail in ((16, "halving"), (40, "halving"), (10, 1.5)):
        want = _walk_variance_reference(sampling.schedule_levels(r, tail))
        assert sampling.schedule_variance(r, tail) == pytest.approx(want, rel=1e-4)
    # the halving schedule: about 1.6 / R for many draws; from 4 draws on more draws never cost
    # variance
    assert 1.4 < sampling.schedule_variance(1024, "halving") * 1024 < 1.8
    vals = [sampling.schedule_variance(r, "halving") for r in range(4, 120)]
    assert np.all(np.diff(vals) < 0)


def test_halving_constants_minimise_variance_times_cost_under_the_model():
    # Reference: scipy.optimize.minimize (Nelder-Mead) over the schedule's two constants, of the
    # random-walk model's variance times the propagated lifetimes (to the 14.2 lifetimes of the
    # default bias tolerance); the chosen constants must come within 2 % of its minimum.
    import scipy.optimize

    def product(params, r=200, t_end=14.2):
        delay, stretch = params
        if delay < 0 or stretch <= 0.2:
            return 1e9
        lv = sampling.schedule_levels(r, "halving", delay, stretch)
        e = [min(kt, t_end) for _, kt in lv] + [t_end]
        cost = sum(n * (b - a) for (n, _), a, b in zip(lv, e, e[1:]))
        return sampling.schedule_variance(r, "halving", delay, stretch) * cost

    from retina.spin.sampling_result import HALVING_DELAY, HALVING_STRETCH

    best = scipy.optimize.minimize(product, [0.5, 1.0], method="Nelder-Mead", options=dict(xatol=1e-3, fatol=1e-6))
    assert product((HALVING_DELAY, HALVING_STRETCH)) <= 1.02 * best.fun
    # the stationary-noise schedule (no delay, no stretch) is clearly worse under this model
    assert product((0.0, 1.0)) > 1.2 * best.fun


def test_alive_counts_lie_on_the_grid_after_the_end_correction():
    # Derived (alive_counts): a switch at kT falls on the first grid time j with j kh >= kT, never
    # before n_min; counts are non-increasing.
    kh, n_t = 0.01, 900
    alive = sampling.alive_counts(16, n_t, kh, 5, "halving")
    assert alive[0] == 16 and np.all(np.diff(alive) <= 0)
    for n, kt in sampling.schedule_levels(16, "halving")[1:]:   # 2.0, 2.9, 4.0 lifetimes
        j = int(np.argmax(alive <= n))
        assert (j - 1) * kh < kt <= j * kh + 1e-12
    early = sampling.alive_counts(16, n_t, 1.0, 7, "halving")       # every switch before n_min
    assert np.all(early[:7] == 16) and np.all(early[7:] == 2)


def _series_setup(r=7, seed=0):
    system = _small()
    rad = system.radicals[0]
    prepared = propagation.prepare(rad)
    xis = propagation.random_vectors(prepared, r, np.random.default_rng(seed))
    bs = _unit(np.random.default_rng(3), 3) * 50e-6
    return prepared, xis, bs


def test_draws_that_stop_keep_their_series_up_to_the_stop():
    # Derived (radical_series, fused_series): a draw propagated until grid time depth_i has the
    # full propagation's entries before it (up to the Chebyshev truncation, CHEB_TOL per
    # expansion) and zeros after; the fused kernel agrees field by field.
    prepared, xis, bs = _series_setup()
    n_t = 300
    alive = sampling.alive_counts(7, n_t, 0.01, 4, "halving")
    assert sorted(set(alive.tolist())) == [2, 7]           # 7 draws: 7, then 2 (stops 5 draws)
    alive = np.array([7] * 40 + [5] * 60 + [3] * 100 + [2] * 100)
    hams = [propagation.block_hamiltonian(pb, bs[0]) for pb in prepared]
    full = propagation.radical_series(prepared, hams, xis, 2e-9, n_t)
    got = propagation.radical_series(prepared, hams, xis, 2e-9, n_t, alive=alive)
    depth = (alive[None, :] > np.arange(7)[:, None]).sum(axis=1)
    for i in range(7):
        np.testing.assert_allclose(got[i, :depth[i]], full[i, :depth[i]], atol=1e-10)
        assert np.all(got[i, depth[i]:] == 0.0)
    hams_f = [[propagation.block_hamiltonian(pb, b) for pb in prepared] for b in bs]
    ws = [[b @ pb.block.zeeman for pb in prepared] for b in bs]
    fused = _fused.fused_series(prepared, hams_f, ws, xis, 2e-9, n_t, alive=alive)
    for f, b in enumerate(bs):
        one = propagation.radical_series(prepared, hams_f[f], xis, 2e-9, n_t, alive=alive)
        np.testing.assert_allclose(fused[f], one, atol=1e-10)
    with pytest.raises(ValueError, match="non-increasing"):
        propagation.radical_series(prepared, hams, xis, 2e-9, n_t, alive=np.arange(n_t) % 7)


def test_chunks_of_draws_give_the_numbers_of_one_block(monkeypatch):
    # Derived: the draws are independent columns of the propagated block, so propagating them in
    # chunks (MAX_BLOCK_VECTORS) changes nothing but rounding.
    prepared, xis, bs = _series_setup(r=9)
    n_t = 120
    alive = np.array([9] * 30 + [4] * 50 + [2] * 40)
    hams = [propagation.block_hamiltonian(pb, bs[0]) for pb in prepared]
    hams_f = [[propagation.block_hamiltonian(pb, b) for pb in prepared] for b in bs]
    ws = [[b @ pb.block.zeeman for pb in prepared] for b in bs]
    monkeypatch.setattr(propagation, "MAX_BLOCK_VECTORS", 10_000)
    one = propagation.radical_series(prepared, hams, xis, 2e-9, n_t, alive=alive)
    one_f = _fused.fused_series(prepared, hams_f, ws, xis, 2e-9, n_t, alive=alive)
    monkeypatch.setattr(propagation, "MAX_BLOCK_VECTORS", 6)        # 3 draws a chunk; 1 with 3 fields
    np.testing.assert_allclose(propagation.radical_series(prepared, hams, xis, 2e-9, n_t, alive=alive), one,
                               atol=1e-12)
    np.testing.assert_allclose(_fused.fused_series(prepared, hams_f, ws, xis, 2e-9, n_t, alive=alive), one_f,
                               atol=1e-12)


def test_halving_strata_add_up_to_the_estimate():
    # Derived (module docstring, draw schedules): the draws that stop together form a stratum
    # scaled by its share, so each radical's strata means add up to the estimate; 16 draws stop
    # as 8, 4, 2 and 2 to the end, 12 as 6, 4 and 2 (a lifetime of 1 us: the grid resolves the
    # switch times; with a grid step of half a lifetime, the switches before the end correction's
    # samples merge there).
    system = _small(k=1e6)
    dirs = _unit(np.random.default_rng(4), 3)
    res = sampling.sampled_yields(system, 50.0, dirs, n_states=(16, 12), seed=1, control="none")
    assert res.tail_split == "halving"
    assert [p.shape[0] for p in res.parts] == [2, 2, 4, 8, 2, 4, 6] and res.parts_a == 4
    np.testing.assert_allclose(sum(p.mean(0) for p in res.parts[:4]), res.mean, atol=1e-14)
    np.testing.assert_allclose(sum(p.mean(0) for p in res.parts[4:]), res.mean, atol=1e-14)
    var_a, var_b = res.radical_variances()
    np.testing.assert_allclose(var_a + var_b, res.standard_error**2, rtol=1e-12)
    # the paired estimator: one set of strata
    pair = sampling.sampled_yields(system, 50.0, dirs, n_states=16, seed=1, control="none", estimator="paired")
    assert [p.shape[0] for p in pair.parts] == [2, 2, 4, 8]
    np.testing.assert_allclose(sum(p.mean(0) for p in pair.parts), pair.mean, atol=1e-14)


def test_cost_model_counts_the_halving_schedule():
    # Derived (sampling_cost._radical_seconds): under the halving schedule 64 draws run about
    # 2.5 lifetimes on average (64 to 1.43, then half of those left every 0.87, the last 2 to the
    # end) instead of the whole grid (14.2 lifetimes at the default bias tolerance), so they cost
    # far less than without a schedule, and the time grows less than in proportion to the draws
    # (the 2 draws that run to the end cost the same).
    system = _small()
    full = sampling.cost_model(system, 1, n_states=64, tail_split=None)[0]
    halving = sampling.cost_model(system, 1, n_states=64, tail_split="halving")[0]
    assert halving < full / 4
    small = sampling.cost_model(system, 1, n_states=8, tail_split="halving")[0]
    assert small > halving / 8
