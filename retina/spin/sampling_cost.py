"""The sampling method's cost model (:mod:`retina.spin.sampling`; the engine's estimate and method
choice): seconds and bytes of :func:`retina.spin.sampling.sampled_yields` from the radicals' spectral
spreads, the Hamiltonians' stored entries per row and the sparse product's measured cost per entry
and vector (by block width, :data:`_WIDTH_COST`).

Split out of :mod:`retina.spin.sampling`, which re-exports these names.
"""

from __future__ import annotations

import functools
import itertools
import math
import time

import numpy as np

from retina.spin import _propagation as _prop
from retina.spin._spectral import grouped_interval
from retina.spin.operators import MU_B_OVER_HBAR
from retina.spin.sampling_result import (BASIS_NAMES, CONTROL_NAMES, DEFAULT_BASIS, DEFAULT_BIAS_TOL,
                                         DEFAULT_BLOCK_WIDTH, DEFAULT_CONTROL, DEFAULT_PRECISION, DEFAULT_STATES,
                                         DEFAULT_TAIL_SPLIT, _states_pair, _states_words, _tail_words,
                                         schedule_levels)

__all__ = ["cost_model", "matvec_seconds"]


def _model_spread(radical, field_uT: float) -> float:
    """A deterministic bound on a radical's spectral spread for cost models: the grouped Weyl bound
    (:func:`retina.spin._spectral.grouped_interval`) over all its nuclei for a field along z (every
    total-spin block's spectrum lies inside the radical's)."""
    w = (float(field_uT) * 1e-6) * (MU_B_OVER_HBAR * np.asarray(radical.g_matrix, dtype=float))[:, 2]
    lo, hi = grouped_interval([(n.spin, n.hyperfine_mT) for n in radical.nuclei], w)
    return hi - lo


def _nnz_row(spins) -> float:
    """Mean stored entries per row of a radical Hamiltonian with (pseudo-)nuclear spins ``spins``
    (derived: the diagonal, one electron flip, and per nucleus of ``M = 2 J + 1`` states its
    ``+-1`` steps, ``2 (M - 1) / M`` on average, with and without an electron flip)."""
    return 2.0 + sum(4.0 * (2 * j) / (2 * j + 1) for j in spins)


#: Seconds per stored entry and vector of one sparse product: the fixed value the method choice
#: uses (so that it, part of the cache key, never depends on the machine's load); estimates use
#: :func:`matvec_seconds`, measured once per process.
_T_MATVEC = 2.0e-9
#: Per term and vector element of the combination into states, per vector element of the
#: correlation step, in units of the sparse product's time per entry and vector (ratios measured
#: in one process at dimension 4608 with 8 vectors: 0.2 and 2.3); Python overhead per expansion, s.
_R_COMB, _R_CORR, _T_GROUP = 0.2, 2.3, 3e-4
#: Time of a single-precision run over a double-precision one: 1 / 1.39, the middle of the speed-ups
#: measured in ``benchmarks/bench_spin_fused.py --single 4`` (1.39x, 1.33x, 1.45x at 12, 16 and 20
#: nuclei; :data:`retina.spin.sampling_result.DEFAULT_PRECISION`).
_SINGLE_TIME = 1.0 / 1.39
#: The sparse product's time per stored entry and vector at a block of ``w`` vectors, relative to
#: its time at 8 vectors (where :func:`matvec_seconds` measures it): ``(log2 w, ratio)``, linear in
#: ``log2 w`` between the points and constant beyond them.  The product streams the matrix once
#: per block, so narrow blocks pay more per vector.  Measured with the compiled kernel in one
#: process on a quiet 2-core machine, one thread, CSR matrices of dimension 128 to 8192 with
#: 15-27 entries a row (the medians over those sizes; spread about +-15 % at 4 and 16 vectors,
#: wider at 32 and 64, where caches set it).
_WIDTH_COST = ((1.0, 2.7), (2.0, 2.0), (3.0, 1.0), (4.0, 0.72), (5.0, 0.62), (6.0, 0.55))


def _width_cost(n_vec: float) -> float:
    """The sparse product's cost per entry and vector at ``n_vec`` vectors, relative to 8
    (:data:`_WIDTH_COST`)."""
    xs, ys = zip(*_WIDTH_COST)
    return float(np.interp(math.log2(max(float(n_vec), 1.0)), xs, ys))


@functools.lru_cache(maxsize=None)
def matvec_seconds() -> float:
    """Seconds per stored entry and vector of the compiled sparse product, measured once per
    process (a CSR matrix of dimension 4096 with 25 entries a row in the pattern of a spin
    Hamiltonian, like a 20-nucleus radical's, 8 vectors; the median of 5 calls), so that the
    estimates follow the machine and its load.

    Returns
    -------
    float
    """
    rng = np.random.default_rng(0)
    d, n_vec = 4096, 8
    # the pattern of a spin Hamiltonian in a product basis: each row couples to rows a power of
    # two away (flips of one spin), both ways, plus the diagonal
    offsets = np.unique(np.concatenate([[0], 2 ** np.arange(12), -(2 ** np.arange(12))]))
    cols = np.sort((np.arange(d)[:, None] + offsets[None, :]) % d, axis=1)
    per_row = cols.shape[1]
    indptr = np.arange(0, d * per_row + 1, per_row, dtype=np.int32)
    indices = cols.ravel().astype(np.int32)
    dr, di = rng.normal(size=d * per_row), rng.normal(size=d * per_row)
    x = [np.ascontiguousarray(rng.normal(size=(d, n_vec))) for _ in range(6)]
    for _ in range(2):                                               # compiled, caches warm
        _prop.cheb_step(indptr, indices, dr, di, 2.0, x[0], x[1], -1.0, x[2], x[3], x[4], x[5])
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        _prop.cheb_step(indptr, indices, dr, di, 2.0, x[0], x[1], -1.0, x[2], x[3], x[4], x[5])
        times.append(time.perf_counter() - t0)
    return float(np.median(times)) / (d * per_row * n_vec)


def _radical_seconds(system, field_uT, bias_tol, states, tail_split, t_mv, fields: int = 1,
                     item_bytes: int = 8):
    """``([seconds of radical A, of B], peak bytes, n_t)`` for one field direction (no control):
    the model of :func:`cost_model`, one radical at a time; ``fields`` propagated together (the
    sparse product runs ``fields`` times as many vectors, the per-expansion overhead is shared)."""
    from retina.spin.equivalence import groups, multiplicities

    k = float(system.k_singlet)
    spreads = [_model_spread(r, field_uT) for r in system.radicals]
    h = min(0.9 * np.pi / max(sum(spreads), 1e-30), 0.5 / k)
    n_t = math.log(1.5 / bias_tol) / (k * h) + 1
    nf = max(1, int(fields))
    chunk = max(1, _prop.MAX_BLOCK_VECTORS // (2 * nf))     # draws per block (radical_series, fused_series)
    out = []
    mem = 0
    for rad, spread, r in zip(system.radicals, spreads, states):
        # the draw schedule: (grid steps, draws propagated) per level
        levels = schedule_levels(r, tail_split)
        starts = [min(n_t, kt / (k * h)) for _, kt in levels] + [n_t]
        blocks = [(j1 - j0, n) for (n, _), j0, j1 in zip(levels, starts, starts[1:]) if j1 > j0]
        a = 0.5 * spread
        grp = groups(rad)
        options = [sorted(multiplicities(rad.nuclei[g[0]].spin, len(g))) for g in grp]
        secs = 0.0
        for choice in itertools.product(*options) if options else [()]:
            dim = 2 * int(np.prod([int(round(2 * j)) + 1 for j in choice])) if choice else 2
            nnz = _nnz_row([j for j in choice if j > 0])
            m = _prop.substeps(a, h, nnz)
            n_c = a * h * m + 25
            for steps, n in blocks:
                # per field: the draws in chunks; a chunk's 2 x draws vectors per field run at the fused
                # block's width (narrow blocks cost more per vector: _width_cost)
                sizes = [chunk] * (n // chunk) + ([n % chunk] if n % chunk else [])
                per_step = sum(t_mv * dim * 2 * c * (n_c / m * nnz * _width_cost(nf * 2 * c) + _R_COMB * n_c
                                                     + _R_CORR) + _T_GROUP / (m * nf) for c in sizes)
                secs += steps * per_step
            mem = max(mem, item_bytes * dim * nf * 2 * min(r, chunk) * (2 * n_c + 2 * m + 4) + 20 * nnz * dim)
        out.append(secs)
    return out, mem, n_t


def cost_model(system, n_directions: int, *, n_states=DEFAULT_STATES,
               field_uT: float = 50.0, bias_tol: float = DEFAULT_BIAS_TOL,
               measured: bool = False, control: str = DEFAULT_CONTROL,
               tail_split: str | float | None = DEFAULT_TAIL_SPLIT, basis: str = DEFAULT_BASIS,
               block_width: int = DEFAULT_BLOCK_WIDTH,
               precision: str = DEFAULT_PRECISION) -> tuple[float, int, str]:
    """Estimated seconds, bytes and a note for :func:`sampled_yields` (engine cost model).

    Per direction and block: ``n_t = ln(1.5 / bias_tol) / (k h)`` time steps, each costing
    ``n_c / m`` sparse products and ``n_c`` combination terms for ``2 R`` vectors (``n_c ~ a h m +
    25`` Chebyshev vectors per expansion of ``m`` steps, :func:`retina.spin._propagation.substeps`) and one correlation
    step; the time step and Chebyshev half-width from :func:`_model_spread`.  Under a draw
    schedule (:func:`retina.spin.sampling_result.schedule_levels`) each level's steps run its
    ``2 n_l`` vectors, in chunks of at most :data:`retina.spin._propagation.MAX_BLOCK_VECTORS`
    over the fused fields; the sparse product's cost per vector depends on the block's width
    (:data:`_WIDTH_COST`: narrow blocks pay more per vector); with ``block_width`` fields propagated together the product runs at the fused
    block's width and the per-expansion overhead is shared; single precision takes
    :data:`_SINGLE_TIME` of the time and half the states' memory.  Times in units of
    the sparse product's time per entry and vector: fixed (``_T_MATVEC``) for the method choice,
    measured on this machine (:func:`matvec_seconds`) with ``measured``; one process.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        The pair.
    n_directions : int
        Number of field directions.
    n_states : int or (int, int)
        Random vectors per radical (one count, or one per radical).
    field_uT : float
        Field strength in microtesla (for the spectral spread).
    bias_tol : float
        Bound on the deterministic error (sets the time span).
    measured : bool
        Use the sparse product's time measured on this machine instead of the fixed constant.
    control : {"opposite", "none"}
        The control variate: ``"opposite"`` samples every direction twice (``b`` and ``-b``), so
        it doubles the time.
    tail_split : str, float or None
        The draw schedule of :func:`sampled_yields`: ``"halving"``, a split tail (lifetimes) or
        ``None``.
    basis : str
        The basis of the random phases (named in the note; it does not change the cost).
    block_width : int
        Fields propagated together (:func:`retina.spin.sampling.sampled_yields`), at most all the
        run's fields.
    precision : {"double", "single"}
        Real type of the propagated states (:func:`retina.spin.sampling.sampled_yields`).

    Returns
    -------
    (float, int, str)
        Seconds, bytes and a note in words.
    """
    t_mv = matvec_seconds() if measured else _T_MATVEC
    states = _states_pair(n_states)
    fields = 2 if control == "opposite" else 1
    nf = max(1, min(int(block_width), fields * int(n_directions)))
    single = precision == "single"
    per_radical, mem, n_t = _radical_seconds(system, field_uT, bias_tol, states, tail_split, t_mv, nf,
                                             4 if single else 8)
    secs = sum(per_radical) * (_SINGLE_TIME if single else 1.0)
    # per-draw series of both radicals (R, n_t, 9) and their products
    mem += 8 * max(states) * n_t * (2 * 9 + 4) * nf      # per field of a fused block
    note = (f"{n_directions} x {fields} stochastic trace estimates with {_states_words(states)}, "
            f"{int(n_t)} time steps{_tail_words(tail_split)}, {CONTROL_NAMES[control]}, {BASIS_NAMES[basis]}"
            f"{f', {nf} fields propagated together' if nf > 1 else ''}{', single precision' if single else ''}"
            " (an approximation with error bars)")
    return fields * n_directions * secs, int(1.3 * mem + 2**20), note

