"""The sampling method's fused propagation across fields (retina/spin/_fused.py, ``block_width``).

Sources: the electron Zeeman term against scipy.sparse operators built here from the Pauli
matrices (independent of the project's operator code); the fused series against the
field-by-field propagation (retina/spin/_propagation.py), which the other sampling tests check
against exact yields; derived: the two propagate the same vectors on the same grid, so they agree
up to the Chebyshev truncation (CHEB_TOL = 1e-12 per expansion).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sps

from retina.errors import InputError
from retina.spin import _fused
from retina.spin import _propagation as propagation
from retina.spin import sampling
from test_spin_separable import _pair, _random_system, _sym, _unit
from retina.spin.system import Nucleus


def _small(seed=0, k=1e7):
    return _random_system(np.random.default_rng(seed), [1.0, 0.5], [0.5, 0.5], hf_scale=0.3, k=k)


def _equivalent(seed=4, k=1e7):
    # two magnetically equivalent protons on A (one tensor): two total-spin blocks (J = 1, 0)
    rng = np.random.default_rng(seed)
    t = _sym(rng, 0.4)
    nuc_a = [Nucleus("h1", 0.5, t), Nucleus("h2", 0.5, t), Nucleus("n1", 1.0, _sym(rng, 0.3))]
    nuc_b = [Nucleus("h3", 0.5, _sym(rng, 0.3))]
    return _pair(nuc_a, nuc_b, k=k)


def test_fused_step_matches_scipy_sparse_hamiltonians_per_field():
    # Independent reference: H_b = H_hf + sum_a w_a (s_a (x) 1_n) with s_a = sigma_a / 2 (Pauli
    # matrices written out here), scaled (H_b - c) / a, applied with scipy.sparse, one field per
    # group of columns; fused_step must give alpha (H x) + beta y to 1e-12.
    rng = np.random.default_rng(7)
    system = _small()
    pb = propagation.prepare(system.radicals[0])[0]
    n = pb.nuclear_dimension
    sig = [np.array([[0, 1], [1, 0]]), np.array([[0, -1j], [1j, 0]]), np.array([[1, 0], [0, -1]])]
    fields = 60e-6 * _unit(rng, 3)
    ws = [b @ pb.block.zeeman for b in fields]
    c, a = 3.0e7, 2.0e8
    per = 3                                                    # columns per field
    x = rng.normal(size=(2 * n, per * 3)) + 1j * rng.normal(size=(2 * n, per * 3))
    y = rng.normal(size=x.shape) + 1j * rng.normal(size=x.shape)
    want = np.empty_like(x)
    for f, w in enumerate(ws):
        zee = sum(w[i] * sps.kron(sps.csr_matrix(sig[i] / 2), sps.identity(n)) for i in range(3))
        hb = ((pb.h_hf + zee - c * sps.identity(2 * n)) / a).tocsr()
        sl = slice(f * per, (f + 1) * per)
        want[:, sl] = 2.0 * (hb @ x[:, sl]) - 1.0 * y[:, sl]
    hs = (pb.h_hf / a).tocsr()
    hs.sort_indices()
    terms = [np.ascontiguousarray(np.repeat(t, per)) for t in _fused.electron_terms(ws, c, a)]
    out_r, out_i = np.empty(x.shape), np.empty(x.shape)
    _fused.fused_step(hs.indptr, hs.indices, np.ascontiguousarray(hs.data.real), np.ascontiguousarray(hs.data.imag),
                      *terms, n, 2.0, np.ascontiguousarray(x.real), np.ascontiguousarray(x.imag), -1.0,
                      np.ascontiguousarray(y.real), np.ascontiguousarray(y.imag), out_r, out_i)
    np.testing.assert_allclose(out_r + 1j * out_i, want, rtol=0, atol=1e-12 * np.abs(want).max())


@pytest.mark.parametrize("make", [_small, _equivalent])
def test_fused_series_match_field_by_field_series(make):
    # Derived (module docstring of retina/spin/_fused.py): same vectors, same grid, a common
    # Chebyshev interval containing every field's spectrum; agreement to 1e-10 of the series' scale,
    # with the split tail (3 of 5 draws stop at step 30).
    system = make()
    rng = np.random.default_rng(11)
    rad = system.radicals[0]
    prepared = propagation.prepare(rad)
    xis = propagation.random_vectors(prepared, 5, rng, radical=rad, basis="nucleus-axis")
    fields = 50e-6 * _unit(rng, 3)
    fields = np.concatenate([fields, -fields[:1]])
    hams = [[propagation.block_hamiltonian(pb, b) for pb in prepared] for b in fields]
    ws = [[b @ pb.block.zeeman for pb in prepared] for b in fields]
    spread = max(hi - lo for hs in hams for _, lo, hi in hs)
    h, n_t = 0.9 * np.pi / (2 * spread), 70
    got = _fused.fused_series(prepared, hams, ws, xis, h, n_t, n_split=30, r_tail=2)
    for f in range(len(fields)):
        want = propagation.radical_series(prepared, hams[f], xis, h, n_t, n_split=30, r_tail=2)
        np.testing.assert_allclose(got[f], want, rtol=0, atol=1e-10 * np.abs(want).max())
        assert np.all(got[f][2:, 30:] == 0.0)            # stopped draws stay empty beyond the split


def test_fused_and_field_by_field_yields_agree_and_workers_do_not_matter():
    # Derived: every field of a run shares one time grid (sampled_yields), so block_width changes
    # only the Chebyshev truncation (1e-10 here); tasks hold whole blocks, so 1 or 2 worker
    # processes give the same numbers (1e-13: only BLAS rounding may differ between processes).
    system = _equivalent()
    dirs = _unit(np.random.default_rng(3), 5)
    kw = dict(n_states=(4, 6), seed=2, control="opposite", tail_split=2.0, precision="double")
    one = sampling.sampled_yields(system, 50.0, dirs, block_width=1, **kw)
    fused = sampling.sampled_yields(system, 50.0, dirs, block_width=4, **kw)
    np.testing.assert_allclose(fused.mean, one.mean, rtol=0, atol=1e-10)
    np.testing.assert_allclose(fused.standard_error, one.standard_error, rtol=1e-8, atol=1e-14)
    for p, q in zip(fused.parts, one.parts):
        np.testing.assert_allclose(p, q, rtol=0, atol=1e-10)
    two = sampling.sampled_yields(system, 50.0, dirs, block_width=3, n_jobs=2, **kw)
    ref = sampling.sampled_yields(system, 50.0, dirs, block_width=3, n_jobs=1, **kw)
    np.testing.assert_allclose(two.mean, ref.mean, rtol=0, atol=1e-13)
    for p, q in zip(two.parts, ref.parts):
        np.testing.assert_allclose(p, q, rtol=0, atol=1e-13)


@pytest.mark.parametrize("bad", [0, -2, 2.5, True, "4"])
def test_block_width_must_be_a_positive_whole_number(bad):
    # Common practice, no source: bad input is a clear error naming the field.
    with pytest.raises(InputError, match="fields per block"):
        sampling.sampled_yields(_small(), 50.0, _unit(np.random.default_rng(0), 2), n_states=2, block_width=bad)


def test_cost_model_counts_the_fused_blocks():
    # Derived (sampling_cost._radical_seconds): fusing W fields runs the sparse product at W times
    # the width, where its cost per vector is lower (_WIDTH_COST, a measured table that falls with
    # width), and shares the per-expansion overhead; so the modelled time falls with block_width
    # and the memory grows; a block wider than the run's fields costs the same as all of them.
    system = _small()
    t1, m1, note1 = sampling.cost_model(system, 3, n_states=(4, 8), block_width=1)
    t4, m4, note4 = sampling.cost_model(system, 3, n_states=(4, 8), block_width=4)
    t6, _, _ = sampling.cost_model(system, 3, n_states=(4, 8), block_width=6)
    t9, _, _ = sampling.cost_model(system, 3, n_states=(4, 8), block_width=99)
    assert t6 < t4 < t1 and m4 > m1
    assert t9 == t6                                   # 3 directions x 2 fields = 6 fields at most
    assert "4 fields propagated together" in note4 and "propagated together" not in note1


def test_cost_model_counts_single_precision():
    # Derived (sampling_cost.cost_model): single precision scales the modelled time by the measured
    # _SINGLE_TIME and halves the bytes of each propagated state, so the time ratio is exactly that
    # constant and the memory falls; the note names it.
    from retina.spin import sampling_cost

    system = _small()
    td, md, noted = sampling.cost_model(system, 3, n_states=(4, 8), precision="double")
    ts, ms, notes = sampling.cost_model(system, 3, n_states=(4, 8), precision="single")
    assert ts / td == pytest.approx(sampling_cost._SINGLE_TIME, rel=1e-12) and ms < md
    assert "single precision" in notes and "single precision" not in noted


def test_single_precision_stays_close_to_double_and_is_really_single():
    # IEEE 754: float32 unit roundoff 6e-8.  The states are normalised and the sums accumulate in
    # double, so the yields move by about the roundoff times the number of Chebyshev steps' growth
    # (derived: a random walk of rounding errors); 1e-6 is far below the sampling error and far
    # above double's rounding, and a difference above 1e-13 shows the states really were single.
    system = _equivalent()
    dirs = _unit(np.random.default_rng(3), 3)
    kw = dict(n_states=(4, 6), seed=2, block_width=2)
    double = sampling.sampled_yields(system, 50.0, dirs, precision="double", **kw)
    single = sampling.sampled_yields(system, 50.0, dirs, precision="single", **kw)
    diff = np.abs(single.mean - double.mean)
    assert 1e-13 < diff.max() < 1e-6
    with pytest.raises(InputError, match="precision"):
        sampling.sampled_yields(system, 50.0, dirs, precision="half", **kw)
