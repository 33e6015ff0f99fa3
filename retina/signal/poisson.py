"""Poisson photon counts: draws with given means, one per count or by walking a Poisson process.

The readout's forward model (:mod:`retina.signal.noise`) gives the expected counts; this module
draws them.  :func:`sample_counts` draws each count directly (``Generator.poisson``);
:func:`sample_counts_split` draws dim rows by walking one unit-rate Poisson process along the row
(the same law, derived in its docstring; a compiled kernel; blocks of rows on threads with seeds
that do not depend on the number of threads).  Random numbers come from a
``numpy.random.Generator`` (:func:`make_rng`), so every draw is reproducible from one seed.
"""

from __future__ import annotations

import numba
import numpy as np

from retina.errors import InputError

__all__ = ["make_rng", "expected_counts", "sample_counts", "sample_counts_split", "SPLIT_MEAN"]


def make_rng(seed=None) -> np.random.Generator:
    """A ``numpy.random.Generator`` from a seed, or the generator itself if one is given.

    Parameters
    ----------
    seed : int, numpy.random.Generator or None
        ``None`` takes fresh entropy.

    Returns
    -------
    numpy.random.Generator
    """
    if isinstance(seed, np.random.Generator):
        return seed
    return np.random.default_rng(seed)


def expected_counts(yields, catch, gain: float = 1.0) -> np.ndarray:
    """Expected signal counts ``gain * catch * yields``.

    Parameters
    ----------
    yields : array_like, shape (P, N) or (N,)
        Reported yields of ``N`` receptors (at ``P`` poses).
    catch : array_like, shape (N,) or broadcastable
        Photons caught per receptor (pairs formed).
    gain : float
        Overall gain.

    Returns
    -------
    ndarray
        The broadcast shape; mean counts.
    """
    y = np.asarray(yields, dtype=float)
    c = np.asarray(catch, dtype=float)
    if np.any(y < 0) or np.any(y > 1 + 1e-9):
        raise InputError("expected yields in [0, 1]", key="yields")
    return gain * c * y


def sample_counts(lam, rng=None, size: int | None = None) -> np.ndarray:
    """Poisson counts with means ``lam``.

    Parameters
    ----------
    lam : array_like, shape (...)
        Expected counts (>= 0).
    rng : numpy.random.Generator or int, optional
        Source of the draws (:func:`make_rng`).
    size : int, optional
        Number of independent repetitions, added as a leading axis ``(size, ...)``.

    Returns
    -------
    ndarray of float, shape (...) or (size, ...)
        Whole-number counts, stored as floats.
    """
    lam = np.asarray(lam, dtype=float)
    if np.any(lam < 0) or not np.all(np.isfinite(lam)):
        raise InputError("expected finite non-negative expected counts", key="lam")
    rng = make_rng(rng)
    shape = lam.shape if size is None else (size,) + lam.shape
    return rng.poisson(lam, size=shape).astype(float)


SPLIT_MEAN = 2.0
"""Rows whose mean expected count per receptor is below this are drawn by walking a Poisson
process along the row (:func:`sample_counts_split`); measured faster than one draw per cell
below about 2 counts per cell."""


_BLOCK_CELLS = 2**20
"""Cells per block of rows in :func:`sample_counts_split` (each block has its own generator)."""


def sample_counts_split(lam, rng=None, *, threads: int = 1) -> np.ndarray:
    """Poisson counts with means ``lam``; dim rows drawn by walking one Poisson process along them.

    The same distribution as :func:`sample_counts` (independent Poisson counts), drawn in less
    time when most expected counts are small (dim light, or a head scan that shares its photon
    budget over many poses), and on several threads when asked.

    Derived: lay the cells of a row end to end as intervals of lengths ``lam_i`` on a line and
    run a Poisson process of unit rate along it (arrival gaps independent standard exponential
    draws).  The numbers of arrivals in disjoint intervals are independent and Poisson with
    means equal to the interval lengths, so the count of cell ``i`` is ``Poisson(lam_i)``,
    independent of the others: the law of independent draws.  Rows whose mean expected count is
    below :data:`SPLIT_MEAN` are drawn so, one arrival gap per count plus one comparison per cell
    (no transcendental function per cell); the walk carries only the remaining length of the
    current cell and the remaining gap (memorylessness of the exponential law), so no cumulative
    sum and no rounding drift build up along the row.  A cell of zero length never receives a
    count.  The other rows are drawn directly (``Generator.poisson``).

    Randomness: the rows are cut into fixed blocks of about ``2**20`` cells, and block ``b`` draws
    from the ``b``-th child of ``rng`` (``Generator.spawn``), so the counts depend on ``rng``
    only, never on ``threads``.

    Parameters
    ----------
    lam : array_like, shape (..., N)
        Expected counts (>= 0); the last axis is a row.
    rng : numpy.random.Generator or int, optional
    threads : int
        Threads drawing blocks at once (joblib's threading backend; numpy's generators and the
        walk's compiled kernel release the GIL).

    Returns
    -------
    ndarray, shape like ``lam``, float
    """
    lam = np.asarray(lam, dtype=float)
    if np.any(lam < 0) or not np.all(np.isfinite(lam)):
        raise InputError("expected finite non-negative expected counts", key="lam")
    rng = make_rng(rng)
    shape = lam.shape
    if lam.ndim == 0 or lam.size == 0:
        return rng.poisson(lam).astype(float)
    rows = lam.reshape(-1, shape[-1])
    R, N = rows.shape
    out = np.empty((R, N))
    per = max(1, _BLOCK_CELLS // max(N, 1))
    starts = list(range(0, R, per))
    gens = rng.spawn(len(starts))

    def block(k):
        sl = slice(starts[k], starts[k] + per)
        _split_block(rows[sl], gens[k], out[sl])

    if threads > 1 and len(starts) > 1:
        from joblib import Parallel, delayed

        Parallel(n_jobs=int(threads), prefer="threads")(delayed(block)(k) for k in range(len(starts)))
    else:
        for k in range(len(starts)):
            block(k)
    return out.reshape(shape)


def _split_block(rows: np.ndarray, g: np.random.Generator, out: np.ndarray) -> None:
    """Draw one block of rows into ``out`` (same shape): dim rows walked, the others directly."""
    N = rows.shape[1]
    totals = rows.sum(axis=1)
    walk = totals < SPLIT_MEAN * N
    if walk.all():
        _walk_cells(np.ascontiguousarray(rows).reshape(-1), g, out.reshape(-1))
        return
    dense = np.flatnonzero(~walk)
    out[dense] = g.poisson(rows[dense])
    idx = np.flatnonzero(walk)
    if idx.size:
        counts = np.empty((idx.size, N))
        _walk_cells(np.ascontiguousarray(rows[idx]).reshape(-1), g, counts.reshape(-1))
        out[idx] = counts


def _walk_cells(cells: np.ndarray, g: np.random.Generator, counts: np.ndarray) -> None:
    """Poisson counts of consecutive cells (1-D) by one walk (:func:`sample_counts_split`)."""
    k, left, n = 0, float(cells[0]), 0
    total = float(cells.sum())
    while k < cells.size:
        # enough gaps for the whole walk with overwhelming probability; more when not
        gaps = g.standard_exponential(int(total + 6.0 * np.sqrt(total) + 16))
        k, left, n = _poisson_walk(cells, gaps, counts, k, left, n)
        total = float(cells[k:].sum()) if k < cells.size else 0.0


@numba.njit(cache=True, nogil=True)
def _poisson_walk(cells, gaps, counts, k, left, n):
    """Arrivals of a unit-rate Poisson process over consecutive cells of lengths ``cells``.

    State: cell ``k``, the length ``left`` of it still ahead, its ``n`` arrivals so far; the next
    gaps are ``gaps``.  Returns the state when the gaps run out, or ``(K, 0, 0)`` when every cell
    is done (``counts`` filled).
    """
    K = cells.size
    for j in range(gaps.size):
        r = gaps[j]
        while r >= left:             # the next arrival lies beyond this cell: close it
            r -= left
            counts[k] = n
            k += 1
            if k == K:
                return K, 0.0, 0
            left = cells[k]
            n = 0
        left -= r
        n += 1
    return k, left, n
