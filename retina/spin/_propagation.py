"""Chebyshev propagation of blocks of random states for the sampling method (private helpers of
:mod:`retina.spin.sampling`, whose docstring derives the estimator).

A radical's Hamiltonian is split into total-spin blocks of its equivalent nuclei
(:mod:`retina.spin.equivalence`); each block's Hamiltonian is a complex CSR matrix with a rigorous
spectral interval (Gershgorin discs intersected with grouped Weyl bounds).  A block of random
vectors is propagated on a uniform time grid by Chebyshev expansions of ``exp(-i H h m)`` with a
compiled sparse product (:func:`cheb_step`) on real and imaginary parts held apart, and the
electron-spin correlation functions are contracted from Gram matrices of the propagated halves
(:func:`gram`, :func:`correlations`).  :func:`end_correction` gives the exact tail of the
recombination kernel beyond the grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp
import scipy.special

from retina.spin._spectral import GROUP_DIMENSION, aliasing_kernel, grouped_interval, hyperfine_interval
# the random vectors live in their own module; re-exported here for the callers of this one
from retina.spin._random_states import (BASES, basis_rotations, dominant_axis, random_vectors,  # noqa: F401
                                        rotate_factors, spin_rotation)
from retina.spin.equivalence import pseudo_nuclei  # noqa: F401  (re-exported)

#: The six index pairs ``(a, b)`` of the symmetric part of a 3 x 3 correlation tensor; the last
#: three also index its antisymmetric part.
PAIRS = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))

@numba.njit(cache=True, nogil=True, fastmath=True)
def cheb_step(indptr, indices, dr, di, alpha, xr, xi, beta, yr, yi, outr, outi):
    """``out = alpha * (A @ x) + beta * y`` for a complex CSR matrix ``A`` (real and imaginary parts
    of its entries ``dr``, ``di``) and a block of dense complex vectors held as real and imaginary
    parts, each (d, n) with rows contiguous (the inner loop runs over the vectors; split parts let it
    use SIMD arithmetic: measured three times faster than a complex loop on 8 vectors of 4608).
    ``fastmath`` only permits reassociating the row sums, which changes rounding, not accuracy."""
    n_rows, n_cols = xr.shape
    accr = np.empty(n_cols)
    acci = np.empty(n_cols)
    for i in range(n_rows):
        for c in range(n_cols):
            accr[c] = 0.0
            acci[c] = 0.0
        for p in range(indptr[i], indptr[i + 1]):
            ar = dr[p]
            ai = di[p]
            j = indices[p]
            for c in range(n_cols):
                accr[c] += ar * xr[j, c] - ai * xi[j, c]
                acci[c] += ar * xi[j, c] + ai * xr[j, c]
        for c in range(n_cols):
            outr[i, c] = alpha * accr[c] + beta * yr[i, c]
            outi[i, c] = alpha * acci[c] + beta * yi[i, c]


def gershgorin(h):
    """Lower and upper bounds of the spectrum of a Hermitian sparse matrix (Gershgorin discs).

    Parameters
    ----------
    h : scipy.sparse matrix (d, d)
        Hermitian.

    Returns
    -------
    (float, float)
        Lower and upper bound, in the units of ``h``.
    """
    diag = h.diagonal().real
    off = np.asarray(abs(h).sum(axis=1)).ravel() - np.abs(diag)
    return float(np.min(diag - off)), float(np.max(diag + off))


def block_interval(hm, weyl, w):
    """Bounds of the spectrum of ``hm = H_hf + w . S``: Gershgorin discs intersected with the Weyl
    bounds ``weyl`` of ``H_hf`` (:func:`retina.spin._spectral.hyperfine_interval`) widened by
    ``|w| / 2``; both are rigorous, so their intersection is.

    Parameters
    ----------
    hm : scipy.sparse matrix (d, d)
        The block Hamiltonian, rad s^-1.
    weyl : (float, float)
        Weyl bounds of its hyperfine part, rad s^-1.
    w : ndarray (3,)
        Electron Larmor vector, rad s^-1.

    Returns
    -------
    (float, float)
        Lower and upper bound of the spectrum, rad s^-1.
    """
    lo, hi = gershgorin(hm)
    half = 0.5 * float(np.linalg.norm(w))
    return max(lo, weyl[0] - half), min(hi, weyl[1] + half)


@dataclass(frozen=True)
class PreparedBlock:
    """One total-spin block of a radical, ready for sampling: its sparse operators, the Weyl bounds
    of its hyperfine Hamiltonian (one term per pseudo-nucleus) and the dense group Hamiltonians of
    :func:`retina.spin._spectral.grouped_interval`."""

    block: object
    s_e: list
    h_hf: sp.csr_matrix
    weyl: tuple
    group_ops: list

    @property
    def nuclear_dimension(self) -> int:
        """Dimension of the block's nuclear part (half the block's dimension)."""
        return self.h_hf.shape[0] // 2


def sparse_ops(block, radical):
    """``(s_e, h_hf, weyl)`` of a sparse block: its electron spin (three CSR matrices), hyperfine
    Hamiltonian and the Weyl bounds of the latter's spectrum.

    Parameters
    ----------
    block : retina.spin.equivalence block
        A sparse total-spin block of ``radical``.
    radical : retina.spin.system.Radical
        Its radical.

    Returns
    -------
    (list, scipy.sparse matrix, (float, float))
        The three electron-spin matrices, the hyperfine Hamiltonian (rad s^-1) and its Weyl bounds.
    """
    return list(block.s_e), block.h_hf, block_weyl(radical, block)


def block_weyl(radical, block):
    """Weyl bounds of one block's hyperfine Hamiltonian (its groups' total spins and tensors).

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.
    block : retina.spin.equivalence block
        One of its total-spin blocks.

    Returns
    -------
    (float, float)
        Lower and upper bound, rad s^-1 (:func:`retina.spin._spectral.hyperfine_interval`).
    """
    return hyperfine_interval(pseudo_nuclei(radical, block))


def prepare(radical) -> list:
    """The radical's total-spin blocks (:mod:`retina.spin.equivalence`) as :class:`PreparedBlock`.

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.

    Returns
    -------
    list of PreparedBlock
        One per total-spin block (a radical without equivalent nuclei has one).
    """
    from retina.spin._spectral import _group_operators
    from retina.spin.equivalence import radical_blocks

    out = []
    for blk in radical_blocks(radical, sparse=True):
        nuclei = pseudo_nuclei(radical, blk)
        h_hf = blk.h_hf.tocsr()
        out.append(PreparedBlock(blk, [x.tocsr() for x in blk.s_e], h_hf, hyperfine_interval(nuclei),
                             _group_operators(nuclei, GROUP_DIMENSION)))
    return out


def block_hamiltonian(pb: PreparedBlock, bvec):
    """``(H, lo, hi)``: the block's Hamiltonian ``H_hf + w . S`` (CSR, rad s^-1) for the field
    ``bvec`` (tesla) and rigorous bounds of its spectrum: Gershgorin, the per-nucleus Weyl bound
    and the grouped Weyl bound (:func:`retina.spin._spectral.grouped_interval`) intersected.

    Parameters
    ----------
    pb : PreparedBlock
        The block.
    bvec : ndarray (3,)
        Field vector, tesla.

    Returns
    -------
    (scipy.sparse.csr_matrix (d, d), float, float)
        The Hamiltonian and the lower and upper bound of its spectrum, rad s^-1.
    """
    w = bvec @ pb.block.zeeman
    hm = (pb.h_hf + w[0] * pb.s_e[0] + w[1] * pb.s_e[1] + w[2] * pb.s_e[2]).tocsr()
    lo, hi = block_interval(hm, pb.weyl, w)
    g_lo, g_hi = grouped_interval(None, w, _ops=pb.group_ops)
    return hm, max(lo, g_lo), min(hi, g_hi)


#: Truncation of the Chebyshev (Bessel) series of one expansion, in norm: over the ~10^2 - 10^3
#: expansions of a direction the states' error stays below ~1e-9 of their norm, far below the
#: statistical error (each estimate is a normalised inner product of such states).
CHEB_TOL = 1e-12
#: The truncation for single-precision states (``precision="single"`` of the sampling method):
#: float32 resolves ``2^-24 = 6e-8`` of a state's norm, so terms below 1e-9 change nothing the type
#: can hold; over the ~10^2 expansions of a direction the truncation stays below ~1e-7 of the
#: norm, the size of the rounding itself.  At the expansions' typical argument (``a h m ~ 50``) the
#: series is about 6 terms shorter than at :data:`CHEB_TOL` (79 against 85).
CHEB_TOL_SINGLE = 1e-9


def cheb_coeffs(x: float, tol: float = CHEB_TOL) -> np.ndarray:
    """Coefficients ``(2 - delta_n0) (-i)^n J_n(x)`` of ``exp(-i x y)`` on ``y in [-1, 1]``.

    Parameters
    ----------
    x : float
        Half-width of the spectrum times the time span (dimensionless, >= 0).
    tol : float
        The series is cut after the last coefficient of modulus >= ``tol``.

    Returns
    -------
    ndarray (N + 1,) complex
        Chebyshev coefficients ``n = 0..N``.
    """
    n_max = int(x + 10)
    while True:
        n = np.arange(n_max + 1)
        j = scipy.special.jv(n, x)
        if abs(j[-1]) < tol and abs(j[-2]) < tol:
            break
        n_max += 8
    c = (2.0 - (n == 0)) * (-1j) ** n * j
    keep = np.nonzero(np.abs(c) >= tol)[0]
    return c[: keep[-1] + 1]


#: Cost of one sparse product per stored entry of a row, in units of one term of the combination
#: of Chebyshev vectors into states (real matrix products): measured about 3.6 for a complex
#: combination (23 entries a row, 8 vectors, dimension 4608; the combination runs at BLAS-3 speed,
#: the sparse product does not), so about 7 for the real-and-imaginary split used here.
MATVEC_WEIGHT = 7.0


def substeps(a: float, h: float, nnz_row: float) -> int:
    """Grid steps per Chebyshev expansion (derived): one expansion over ``m`` steps costs about
    ``a h m + 25`` sparse products (the Bessel coefficients' tail adds about 25 terms at
    ``CHEB_TOL``) and ``m (a h m + 25)`` terms of the combination into states, so per step
    ``w (a h + 25 / m) + a h m + 25`` units with ``w = MATVEC_WEIGHT nnz_row``, least at
    ``m = sqrt(25 w / (a h))``.

    Parameters
    ----------
    a : float
        Half-width of the spectral interval, rad s^-1.
    h : float
        Time step, s.
    nnz_row : float
        Mean stored entries per row of the Hamiltonian.

    Returns
    -------
    int
        Steps per expansion, 4 to 128.
    """
    w = MATVEC_WEIGHT * nnz_row
    return int(min(128, max(4, round(math.sqrt(25.0 * w / max(a * h, 1e-3))))))


def sub_coeffs(a: float, c: float, h: float, m: int, tol: float = CHEB_TOL) -> np.ndarray:
    """``(N + 1, m)`` coefficients of ``exp(-i H tau_i)``, ``tau_i = i h`` (i = 1..m), on the
    Chebyshev vectors ``T_n((H - c) / a) v``: ``(2 - delta_n0) (-i)^n J_n(a tau) exp(-i c tau)``.

    Parameters
    ----------
    a, c : float
        Half-width and centre of the spectral interval, rad s^-1.
    h : float
        Time step, s.
    m : int
        Steps covered by the expansion.
    tol : float
        Truncation of the longest (``tau = m h``) series (:func:`cheb_coeffs`).

    Returns
    -------
    ndarray (N + 1, m) complex
    """
    longest = cheb_coeffs(a * h * m, tol)
    n = np.arange(longest.shape[0])
    tau = h * np.arange(1, m + 1)
    j = scipy.special.jv(n[:, None], a * tau[None, :])
    return (2.0 - (n == 0))[:, None] * ((-1j) ** n)[:, None] * j * np.exp(-1j * c * tau)[None, :]


def electron_kernel() -> np.ndarray:
    """``K[a, b, J, I] = conj((S_a)_ji) (S_b)_st`` with ``J = 2 j + s``, ``I = 2 i + t``.

    Returns
    -------
    ndarray (3, 3, 4, 4) complex
        The electron-spin kernel that turns a draw's 4 x 4 Gram matrix into its nine correlations.
    """
    from retina.spin.operators import spin_matrices

    s = np.asarray(spin_matrices(0.5))
    return np.einsum("aji,bst->abjsit", s.conj(), s).reshape(3, 3, 4, 4)


ELECTRON_KERNEL = electron_kernel()


@numba.njit(cache=True, nogil=True, fastmath=True)
def gram(re, im, n, r, gr, gi):
    """Gram matrices of each draw's four nuclear half-vectors at every time: ``g[t, s, J, I] =
    <phi_J | phi_I>`` with ``phi = (psi_up top, psi_up bottom, psi_down top, psi_down bottom)``
    of draw ``s``; ``re``, ``im`` (m, 2 n, 2 R), ``gr``, ``gi`` (m, R, 4, 4) real and imaginary
    parts (overwritten)."""
    m = re.shape[0]
    for t in range(m):
        for s in range(r):
            # the ten distinct products (Hermitian), accumulated in scalars over the rows
            r00 = r11 = r22 = r33 = 0.0
            r01 = r02 = r03 = r12 = r13 = r23 = 0.0
            i01 = i02 = i03 = i12 = i13 = i23 = 0.0
            for q in range(n):
                a0 = re[t, q, s]
                b0 = im[t, q, s]
                a1 = re[t, n + q, s]
                b1 = im[t, n + q, s]
                a2 = re[t, q, r + s]
                b2 = im[t, q, r + s]
                a3 = re[t, n + q, r + s]
                b3 = im[t, n + q, r + s]
                r00 += a0 * a0 + b0 * b0
                r11 += a1 * a1 + b1 * b1
                r22 += a2 * a2 + b2 * b2
                r33 += a3 * a3 + b3 * b3
                # conj(phi_a) phi_b = (a_a a_b + b_a b_b) + i (a_a b_b - b_a a_b)
                r01 += a0 * a1 + b0 * b1
                i01 += a0 * b1 - b0 * a1
                r02 += a0 * a2 + b0 * b2
                i02 += a0 * b2 - b0 * a2
                r03 += a0 * a3 + b0 * b3
                i03 += a0 * b3 - b0 * a3
                r12 += a1 * a2 + b1 * b2
                i12 += a1 * b2 - b1 * a2
                r13 += a1 * a3 + b1 * b3
                i13 += a1 * b3 - b1 * a3
                r23 += a2 * a3 + b2 * b3
                i23 += a2 * b3 - b2 * a3
            gr[t, s, 0, 0] = r00
            gr[t, s, 1, 1] = r11
            gr[t, s, 2, 2] = r22
            gr[t, s, 3, 3] = r33
            gi[t, s, 0, 0] = gi[t, s, 1, 1] = gi[t, s, 2, 2] = gi[t, s, 3, 3] = 0.0
            gr[t, s, 0, 1] = gr[t, s, 1, 0] = r01
            gr[t, s, 0, 2] = gr[t, s, 2, 0] = r02
            gr[t, s, 0, 3] = gr[t, s, 3, 0] = r03
            gr[t, s, 1, 2] = gr[t, s, 2, 1] = r12
            gr[t, s, 1, 3] = gr[t, s, 3, 1] = r13
            gr[t, s, 2, 3] = gr[t, s, 3, 2] = r23
            gi[t, s, 0, 1] = i01
            gi[t, s, 1, 0] = -i01
            gi[t, s, 0, 2] = i02
            gi[t, s, 2, 0] = -i02
            gi[t, s, 0, 3] = i03
            gi[t, s, 3, 0] = -i03
            gi[t, s, 1, 2] = i12
            gi[t, s, 2, 1] = -i12
            gi[t, s, 1, 3] = i13
            gi[t, s, 3, 1] = -i13
            gi[t, s, 2, 3] = i23
            gi[t, s, 3, 2] = -i23


def correlations(re, im, n: int, r: int, mult: float, out):
    """Add the draw estimates (9 combinations) at ``m`` times to ``out (R, m, 9)``.

    ``re``, ``im`` (m, 2 n, 2 R): real and imaginary parts of the states; columns ``0..R-1`` are
    ``psi_up = U |up, xi>``, the next ``R`` ``psi_down = U |down, xi>`` (electron the first factor,
    so rows ``:n`` are the electron-up component).  ``<psi_j| S_b |psi_i> = sum_st (S_b)_st
    <psi_j,s | psi_i,t>`` comes from the 4 x 4 Gram matrix of the four nuclear half-vectors of each
    draw (module docstring).

    Parameters
    ----------
    re, im : ndarray (m, 2 n, 2 R)
        Real and imaginary parts of the propagated states at ``m`` times.
    n : int
        Nuclear dimension of the block.
    r : int
        Number of draws ``R``.
    mult : float
        The block's multiplicity (:mod:`retina.spin.equivalence`).
    out : ndarray (R, m, 9)
        Added to in place.
    """
    m = re.shape[0]
    gr = np.empty((m, r, 4, 4))
    gi = np.empty((m, r, 4, 4))
    gram(re, im, n, r, gr, gi)
    cab = (np.einsum("abJI,mrJI->rmab", ELECTRON_KERNEL.real, gr) - np.einsum("abJI,mrJI->rmab", ELECTRON_KERNEL.imag, gi)) * mult
    for ci, (ia, ib) in enumerate(PAIRS):
        out[:, :, ci] += 0.5 * (cab[..., ia, ib] + cab[..., ib, ia])
    for ci, (ia, ib) in enumerate(PAIRS[3:]):
        out[:, :, 6 + ci] += 0.5 * (cab[..., ia, ib] - cab[..., ib, ia])


#: Most vectors (columns) propagated as one block by :func:`radical_series` and the fused kernel: the
#: draws of a radical are propagated in chunks of at most this many vectors (both electron states,
#: every fused field), which bounds the memory of the Chebyshev vectors and keeps the block within
#: the caches (the sparse product's time per vector is least at 32-64 vectors: the fused kernel's
#: measurements in :data:`retina.spin.sampling_result.DEFAULT_BLOCK_WIDTH`).
MAX_BLOCK_VECTORS = 64


def alive_array(r: int, n_t: int, n_split=None, r_tail=None, alive=None) -> np.ndarray:
    """Draws propagated at each grid time, ``(n_t,)`` int, non-increasing: ``alive`` itself, or all
    ``r`` draws up to ``n_split`` and the first ``r_tail`` from there on (a split tail), or all ``r``
    throughout.

    Parameters
    ----------
    r : int
        The draws.
    n_t : int
        Grid times.
    n_split, r_tail : int, optional
        A split tail: from grid time ``n_split`` on only the first ``r_tail`` draws.
    alive : array_like (n_t,) int, optional
        The counts themselves (checked: non-increasing, at most ``r``, not negative).

    Returns
    -------
    ndarray (n_t,) int
    """
    if alive is not None:
        out = np.asarray(alive, dtype=np.int64).reshape(-1)
        if out.shape[0] != n_t or np.any(np.diff(out) > 0) or out[0] > r or np.any(out < 0):
            raise ValueError("alive: expected n_t non-increasing counts of at most the number of draws")
        return out
    out = np.full(int(n_t), int(r), dtype=np.int64)
    if n_split is not None and r_tail is not None and r_tail < r and n_split < n_t:
        out[int(n_split):] = int(r_tail)
    return out


def draw_chunks(alive: np.ndarray, max_draws: int):
    """The draws split into chunks of at most ``max_draws`` (>= 1): per chunk ``(c0, c1, counts,
    ends)`` with ``counts[j]`` its draws propagated at grid time ``j`` (the first ones, since
    ``alive`` counts the first draws) and ``ends[j]`` the first grid time after ``j`` at which that
    count changes (``n_t`` if never): expansions must not step across it.

    Parameters
    ----------
    alive : ndarray (n_t,) int
        Draws propagated at each grid time (:func:`alive_array`).
    max_draws : int
        Most draws a chunk.

    Returns
    -------
    list of (int, int, ndarray (n_t,) int, ndarray (n_t,) int)
    """
    r = int(alive[0]) if alive.shape[0] else 0
    n_t = alive.shape[0]
    out = []
    for c0 in range(0, r, max(1, int(max_draws))):
        c1 = min(r, c0 + max(1, int(max_draws)))
        counts = np.clip(alive - c0, 0, c1 - c0)
        changes = np.flatnonzero(np.diff(counts)) + 1
        ends = np.append(changes, n_t)[np.searchsorted(changes, np.arange(n_t), side="right")]
        out.append((c0, c1, counts, ends))
    return out


def radical_series(prepared, hams, xis, h, n_t, *, n_split=None, r_tail=None, alive=None):
    """Per-draw correlation estimates ``c_ab(t_j)``, shape (R, n_t, 9) (six symmetric, three
    antisymmetric combinations as in :mod:`retina.spin.fast_separable`).

    With a draw schedule (``alive``, or ``n_split`` and ``r_tail``) only the first ``alive[j]``
    draws are propagated at grid time ``j`` (the sampling module's halving schedule and split
    tail); the other draws' entries are zero.  The draws are propagated in chunks of at most
    :data:`MAX_BLOCK_VECTORS` vectors (the same numbers, less memory).

    ``prepared``: the radical's blocks; ``hams``: ``(H, lo, hi)`` per block
    (:func:`block_hamiltonian`); ``xis``: the nuclear random vectors per block, ``(n, R)``.

    Parameters
    ----------
    prepared : list of PreparedBlock
        The radical's blocks (:func:`prepare`).
    hams : list of (csr_matrix, float, float)
        Per block, its Hamiltonian and spectral bounds (:func:`block_hamiltonian`).
    xis : list of ndarray (n, R) complex
        Per block, the nuclear random vectors (:func:`random_vectors`).
    h : float
        Time step, s.
    n_t : int
        Number of grid times ``0, h, ..., (n_t - 1) h``.
    n_split : int, optional
        First grid time at which only ``r_tail`` draws go on (default: all draws to the end).
    r_tail : int, optional
        Draws propagated from ``n_split`` on (the first ``r_tail``).
    alive : array_like (n_t,) int, optional
        Draws propagated at each grid time (non-increasing; overrides ``n_split`` and ``r_tail``).

    Returns
    -------
    ndarray (R, n_t, 9)
    """
    r = xis[0].shape[1]
    out = np.zeros((r, n_t, 9))
    alive = alive_array(r, n_t, n_split, r_tail, alive)
    for pb, (hm, lo, hi), xi_all in zip(prepared, hams, xis):
        n = pb.nuclear_dimension
        c = 0.5 * (lo + hi)
        a = max(0.5 * (hi - lo), 1e-30)
        hs = ((hm - c * sp.identity(hm.shape[0], format="csr")) / a).tocsr()
        hs.sort_indices()
        dr = np.ascontiguousarray(hs.data.real)
        di = np.ascontiguousarray(hs.data.imag)
        m_sub = substeps(a, h, hs.nnz / hs.shape[0])
        # exp(-i H tau) = exp(-i c tau) sum_n b_n(tau) T_n((H - c)/a); the phase exp(-i c tau) is
        # common to every vector of the block, so it cancels in every Gram matrix and is left out
        # (each state below is the true one times that phase).  b_n = (2 - delta_n0) (-i)^n J_n(a
        # tau) is real for even n and imaginary for odd n (b_n = i g_n), so with T_n v = X_n + i Y_n
        # (derived): Re psi = sum_even b_n X_n - sum_odd g_n Y_n, Im psi = sum_even b_n Y_n +
        # sum_odd g_n X_n.  Stored as rows A_n = (X_n if n even else Y_n) and B_n = (Y_n if n even
        # else X_n), these are two real products, c_re @ A and c_im @ B: half the work of a
        # complex combination.
        coef = sub_coeffs(a, 0.0, h, m_sub)                             # (N + 1, m), no phase
        n_c = coef.shape[0]
        odd = (np.arange(n_c) % 2 == 1)
        # even n: b real, b X + i b Y; odd n: b = i g (g real), i g (X + i Y) = -g Y + i g X
        c_re = np.where(odd[:, None], -coef.imag, coef.real).T.copy()   # (m, n_c) on A
        c_im = np.where(odd[:, None], coef.imag, coef.real).T.copy()    # (m, n_c) on B
        mult = float(pb.block.multiplicity)
        for c0, c1, counts, ends in draw_chunks(alive, MAX_BLOCK_VECTORS // 2):
            xi = xi_all[:, c0:c1]
            rc = c1 - c0
            sub = out[c0:c1]
            v = np.zeros((2 * n, 2 * rc), dtype=complex)
            v[:n, :rc] = xi
            v[n:, rc:] = xi
            correlations(np.ascontiguousarray(v.real)[None], np.ascontiguousarray(v.imag)[None], n, rc, mult,
                         sub[:, 0:1])

            def workspace(v_re, v_im):
                rows_a = np.empty((n_c,) + v_re.shape)
                rows_b = np.empty((n_c,) + v_re.shape)
                xs = [rows_a[i] if i % 2 == 0 else rows_b[i] for i in range(n_c)]   # X_n = Re T_n v
                ys = [rows_b[i] if i % 2 == 0 else rows_a[i] for i in range(n_c)]   # Y_n = Im T_n v
                xs[0][...] = v_re
                ys[0][...] = v_im
                return v_re.shape, xs, ys, rows_a.reshape(n_c, -1), rows_b.reshape(n_c, -1)

            shape, xs, ys, flat_a, flat_b = workspace(v.real, v.imag)
            rr = rc
            j = 1
            while j < n_t and counts[j] > 0:
                if counts[j] < rr:
                    # draws stop: keep the first counts[j] (their psi_up and psi_down columns)
                    keep = np.r_[0:counts[j], rr:rr + counts[j]]
                    rr = int(counts[j])
                    shape, xs, ys, flat_a, flat_b = workspace(xs[0][:, keep], ys[0][:, keep])
                m = min(m_sub, int(ends[j]) - j)
                # the Chebyshev vectors T_n((H - c)/a) v, then all m states by two real matrix products
                if n_c > 1:
                    cheb_step(hs.indptr, hs.indices, dr, di, 1.0, xs[0], ys[0], 0.0, xs[0], ys[0], xs[1], ys[1])
                for k in range(2, n_c):
                    cheb_step(hs.indptr, hs.indices, dr, di, 2.0, xs[k - 1], ys[k - 1], -1.0, xs[k - 2], ys[k - 2],
                              xs[k], ys[k])
                re = (c_re[:m] @ flat_a).reshape((m,) + shape)
                im = (c_im[:m] @ flat_b).reshape((m,) + shape)
                correlations(re, im, n, rr, mult, sub[:rr, j:j + m])
                xs[0][...] = re[m - 1]
                ys[0][...] = im[m - 1]
                j += m
    return out


def end_correction(k: float, h: float, theta_max: float, tol: float):
    """``gamma (J+1,)`` and the fit's largest error for the trapezoid end correction (the
    sampling module's docstring derives it).

    Parameters
    ----------
    k : float
        Recombination rate, s^-1.
    h : float
        Time step, s.
    theta_max : float
        Largest phase step ``omega h`` to cover, rad.
    tol : float
        Wanted largest error of the fitted cosine series.

    Returns
    -------
    (ndarray (J+1,), float)
        Cosine coefficients and the largest error of the fit on a finer check grid.
    """
    theta = np.linspace(0.0, max(theta_max, 1e-9), 300)
    check = np.linspace(0.0, max(theta_max, 1e-9), 2401)
    target = aliasing_kernel(theta / h, k, h)
    want = aliasing_kernel(check / h, k, h)
    err = np.inf
    gamma = np.zeros(1)
    for n_terms in (2, 4, 6, 8, 12, 16, 24, 32, 48, 64):
        basis = np.cos(np.outer(theta, np.arange(n_terms)))
        gamma = np.linalg.lstsq(basis, target, rcond=None)[0]
        err = float(np.max(np.abs(np.cos(np.outer(check, np.arange(n_terms))) @ gamma - want)))
        if err <= tol:
            break
    return gamma, err
