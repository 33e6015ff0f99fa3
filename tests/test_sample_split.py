"""The split Poisson sampler (a Poisson total placed among the row) has the law of independent
Poisson counts."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from retina.errors import InputError
from retina.signal.poisson import SPLIT_MEAN, sample_counts_split


def test_marginals_follow_the_poisson_law():
    # Reference: scipy.stats.poisson (pmf) and scipy.stats.chisquare.  Rows of 200 cells with
    # small means (all split), 4000 rows: every cell's counts pooled over rows.
    rng = np.random.default_rng(11)
    lam_row = np.concatenate([np.full(100, 0.02), np.full(60, 0.3), np.full(40, 1.2)])
    assert lam_row.mean() < SPLIT_MEAN
    lam = np.broadcast_to(lam_row, (4000, lam_row.size))
    n = sample_counts_split(lam, rng)
    for lo, hi, mu in ((0, 100, 0.02), (100, 160, 0.3), (160, 200, 1.2)):
        x = n[:, lo:hi].ravel().astype(int)
        kmax = 4 if mu < 1 else 6
        obs = np.array([np.sum(x == k) for k in range(kmax)] + [np.sum(x >= kmax)])
        p = np.append(stats.poisson.pmf(np.arange(kmax), mu), stats.poisson.sf(kmax - 1, mu))
        keep = p * x.size >= 5
        exp = p * x.size
        obs2 = np.append(obs[keep], obs[~keep].sum())
        exp2 = np.append(exp[keep], exp[~keep].sum())
        chi = stats.chisquare(obs2[exp2 > 0], exp2[exp2 > 0])
        assert chi.pvalue > 1e-3, (mu, obs, exp)


def test_cells_are_uncorrelated_and_totals_are_poisson():
    # Derived: for independent Poisson counts the covariance of two cells is 0 and the row total
    # is Poisson(sum lam), so its variance equals its mean.
    rng = np.random.default_rng(5)
    lam = np.broadcast_to(np.array([0.4, 0.1, 0.05, 0.45]), (200000, 4))
    n = sample_counts_split(lam, rng)
    c = np.cov(n.T)
    se = np.sqrt(0.4 * 0.45 / 200000)          # standard error of a covariance of two such cells
    assert abs(c[0, 3]) < 5 * se
    assert np.all(np.abs(n.mean(axis=0) - lam[0]) < 5 * np.sqrt(lam[0] / 200000))
    tot = n.sum(axis=1)
    assert tot.var() == pytest.approx(tot.mean(), rel=0.02)


def test_mixed_rows_zero_cells_and_shape():
    rng = np.random.default_rng(2)
    lam = np.zeros((3, 2, 50))
    lam[0, 0, 7] = 0.3                 # split row with one possible cell
    lam[1, 1] = 40.0                   # dense row
    n = sample_counts_split(lam, rng)
    assert n.shape == lam.shape and n.dtype == float
    assert np.all(n[lam == 0] == 0)    # a cell with no expected count never gets one
    assert n[1, 1].mean() == pytest.approx(40.0, rel=0.1)
    with pytest.raises(InputError, match="non-negative"):
        sample_counts_split(-lam - 1.0, rng)


def test_decoding_error_statistics_match_direct_poisson_draws():
    # The decoding error of a head scan in dim light is the same random variable with either
    # sampler (Reference: scipy.stats.ks_2samp between the two sets of errors).
    from retina.readout.decode import HeadingDecoder
    from retina.signal.poisson import sample_counts

    G, N, P = 72, 300, 5
    h = np.arange(G) * 360.0 / G
    rng = np.random.default_rng(4)
    ph = rng.uniform(0, 2 * np.pi, N)
    lam1 = 1.0 + 0.3 * np.cos(np.radians(h)[:, None] + ph[None, :])          # (G, N), one look
    dec = HeadingDecoder(h, lam1, gain="known", refine="none")
    off = np.array([-10.0, -5.0, 0.0, 5.0, 10.0])
    true = rng.integers(0, G, 1500)
    idx = (true[:, None] + np.round(off / 5.0).astype(int)[None, :]) % G
    lam = lam1[idx] / P                        # (S, P, N): the budget split over the poses, 0.2 per cell
    errs = []
    for draw in (sample_counts, sample_counts_split):
        e = dec.decode_scan(draw(lam, rng), off).heading_deg - h[true]
        errs.append(np.abs((e + 180.0) % 360.0 - 180.0))
    assert stats.ks_2samp(errs[0], errs[1]).pvalue > 1e-3
    assert 0 < np.mean(errs[1]) < 90


def test_counts_do_not_depend_on_the_thread_count():
    # common practice, no source: fixed blocks with spawned generators make parallel draws reproducible
    lam = np.random.default_rng(0).uniform(0.0, 3.0, (700, 3000))
    lam[::3] *= 0.05                     # a mix of split and direct rows
    a = sample_counts_split(lam, np.random.default_rng(9), threads=1)
    b = sample_counts_split(lam, np.random.default_rng(9), threads=2)
    np.testing.assert_array_equal(a, b)


def test_walked_rows_near_the_threshold_follow_the_poisson_law():
    # Rows with a mean just below SPLIT_MEAN (cells from 0.01 to 3.5 expected counts) are walked.
    # Reference: scipy.stats.poisson (pmf, sf) and scipy.stats.chisquare, per cell group.
    rng = np.random.default_rng(21)
    lam_row = np.concatenate([np.full(50, 0.01), np.full(50, 0.9), np.full(50, 2.0), np.full(50, 3.5)])
    assert lam_row.mean() < SPLIT_MEAN
    n = sample_counts_split(np.broadcast_to(lam_row, (3000, lam_row.size)), rng)
    for lo, mu in ((0, 0.01), (50, 0.9), (100, 2.0), (150, 3.5)):
        x = n[:, lo:lo + 50].ravel().astype(int)
        kmax = 10
        obs = np.array([np.sum(x == k) for k in range(kmax)] + [np.sum(x >= kmax)])
        p = np.append(stats.poisson.pmf(np.arange(kmax), mu), stats.poisson.sf(kmax - 1, mu))
        exp = p * x.size
        keep = exp >= 5
        obs2, exp2 = np.append(obs[keep], obs[~keep].sum()), np.append(exp[keep], exp[~keep].sum())
        chi = stats.chisquare(obs2[exp2 > 0], exp2[exp2 > 0])
        assert chi.pvalue > 1e-3, (mu, obs, exp)


def test_walk_resumes_exactly_when_its_gaps_run_out():
    # Derived: the walk's state (cell, length of it still ahead, its arrivals so far) is all it
    # carries between gaps, so feeding the same gap sequence in pieces gives the same counts.
    from retina.signal.poisson import _poisson_walk

    rng = np.random.default_rng(3)
    cells = rng.uniform(0.0, 1.0, 500)
    cells[::7] = 0.0
    gaps = rng.standard_exponential(2000)
    whole = np.empty_like(cells)
    k, _, _ = _poisson_walk(cells, gaps, whole, 0, float(cells[0]), 0)
    assert k == cells.size
    pieces = np.empty_like(cells)
    state, start = (0, float(cells[0]), 0), 0
    for size in (1, 5, 17, 60, 2000):
        state = _poisson_walk(cells, gaps[start:start + size], pieces, *state)
        start += size
        if state[0] == cells.size:
            break
    np.testing.assert_array_equal(pieces, whole)
    assert np.all(whole[::7] == 0)
