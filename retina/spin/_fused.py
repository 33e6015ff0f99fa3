"""Fused propagation across fields for the sampling method (private helpers of
:mod:`retina.spin.sampling`; the field-by-field propagation is :func:`retina.spin._propagation.radical_series`).

The sparse block product is bound by reading the matrix (the radical's hyperfine Hamiltonian),
so its time per vector falls with the block's width.  Every field direction ``b`` of a run shares
that hyperfine part and the same random vectors; only the electron Zeeman term ``w_b . S`` differs.
In the product basis with the electron as the first factor that term is a 2 x 2 matrix acting on
the rows ``i`` and ``n + i`` of every vector, so a block of ``W`` fields' ``W x 2R`` vectors is
propagated at once: the stored hyperfine entries are read once per row for all columns
(:func:`fused_step`) and each column adds its own field's 2 x 2 electron term.

The Chebyshev expansion needs one spectral interval for the whole block: the hull of the fields'
rigorous intervals (:func:`retina.spin._propagation.block_hamiltonian`), which contains every
field's spectrum, so the expansion stays exact to ``CHEB_TOL`` for each (derived: a wider
interval only changes which terms the truncation drops).  The random vectors and the time grid are
those of the field-by-field propagation, so the two give the same series up to the truncation
(the estimator is the same in law, and errors shared across directions stay shared).
"""

from __future__ import annotations

import numba
import numpy as np

from retina.spin import _propagation as _prop


@numba.njit(cache=True, nogil=True, fastmath=True)
def fused_step(indptr, indices, dr, di, d0, d1, er, ei, n, alpha, xr, xi, beta, yr, yi, outr, outi):
    """``out = alpha * (A x + E x) + beta * y`` for a complex CSR matrix ``A`` (rows ``2 n``; the
    hyperfine part shared by every column) and per column ``c`` a Hermitian electron term
    ``E_c = [[d0, e], [conj(e), d1]] (x) 1_n`` with ``e = er + i ei`` (the electron the first
    factor: row ``i < n`` is electron up, row ``n + i`` its electron-down partner).  Blocks of
    vectors held as real and imaginary parts (2 n, C), rows contiguous; ``d0, d1, er, ei`` (C,)."""
    n_rows, n_cols = xr.shape
    accr = np.empty(n_cols)
    acci = np.empty(n_cols)
    for i in range(n_rows):
        for c in range(n_cols):
            accr[c] = 0.0
            acci[c] = 0.0
        p = indptr[i]
        p_end = indptr[i + 1]
        # four stored entries per pass: the accumulators are read and written once per four
        # gathered rows (1.2-1.26 times faster alone at 32-64 columns; 5 % on a whole 4-direction
        # task of the 20-nucleus benchmark pair, 157 s to 149 s, where the step is about 70 % of the time)
        while p + 3 < p_end:
            ar, ai, j = dr[p], di[p], indices[p]
            br, bi, k = dr[p + 1], di[p + 1], indices[p + 1]
            cr, ci, l = dr[p + 2], di[p + 2], indices[p + 2]
            gr, gi, q4 = dr[p + 3], di[p + 3], indices[p + 3]
            for c in range(n_cols):
                accr[c] += ((ar * xr[j, c] - ai * xi[j, c]) + (br * xr[k, c] - bi * xi[k, c])) + (
                    (cr * xr[l, c] - ci * xi[l, c]) + (gr * xr[q4, c] - gi * xi[q4, c]))
                acci[c] += ((ar * xi[j, c] + ai * xr[j, c]) + (br * xi[k, c] + bi * xr[k, c])) + (
                    (cr * xi[l, c] + ci * xr[l, c]) + (gr * xi[q4, c] + gi * xr[q4, c]))
            p += 4
        while p < p_end:
            ar = dr[p]
            ai = di[p]
            j = indices[p]
            for c in range(n_cols):
                accr[c] += ar * xr[j, c] - ai * xi[j, c]
                acci[c] += ar * xi[j, c] + ai * xr[j, c]
            p += 1
        if i < n:
            q = i + n
            for c in range(n_cols):
                # d0 x_i + (er + i ei) x_q
                accr[c] += d0[c] * xr[i, c] + er[c] * xr[q, c] - ei[c] * xi[q, c]
                acci[c] += d0[c] * xi[i, c] + er[c] * xi[q, c] + ei[c] * xr[q, c]
        else:
            q = i - n
            for c in range(n_cols):
                # d1 x_i + (er - i ei) x_q
                accr[c] += d1[c] * xr[i, c] + er[c] * xr[q, c] + ei[c] * xi[q, c]
                acci[c] += d1[c] * xi[i, c] + er[c] * xi[q, c] - ei[c] * xr[q, c]
        for c in range(n_cols):
            outr[i, c] = alpha * accr[c] + beta * yr[i, c]
            outi[i, c] = alpha * acci[c] + beta * yi[i, c]


@numba.njit(cache=True, nogil=True, fastmath=True)
def gram_fields(re, im, n, r, n_f, gr, gi):
    """:func:`retina.spin._propagation.gram` for a fused block: ``re``, ``im`` (m, 2 n, n_f 2 R)
    with field ``f``'s ``psi_up`` columns at ``2 R f + s`` and its ``psi_down`` at ``2 R f + R + s``;
    ``gr``, ``gi`` (m, n_f R, 4, 4) (overwritten).  Rows are read once for all fields' draws."""
    m = re.shape[0]
    nd = n_f * r
    acc = np.empty((16, nd))
    for t in range(m):
        for k in range(16):
            for d in range(nd):
                acc[k, d] = 0.0
        for q in range(n):
            for f in range(n_f):
                o = 2 * r * f
                for s in range(r):
                    d = f * r + s
                    a0 = re[t, q, o + s]
                    b0 = im[t, q, o + s]
                    a1 = re[t, n + q, o + s]
                    b1 = im[t, n + q, o + s]
                    a2 = re[t, q, o + r + s]
                    b2 = im[t, q, o + r + s]
                    a3 = re[t, n + q, o + r + s]
                    b3 = im[t, n + q, o + r + s]
                    acc[0, d] += a0 * a0 + b0 * b0
                    acc[1, d] += a1 * a1 + b1 * b1
                    acc[2, d] += a2 * a2 + b2 * b2
                    acc[3, d] += a3 * a3 + b3 * b3
                    acc[4, d] += a0 * a1 + b0 * b1
                    acc[5, d] += a0 * b1 - b0 * a1
                    acc[6, d] += a0 * a2 + b0 * b2
                    acc[7, d] += a0 * b2 - b0 * a2
                    acc[8, d] += a0 * a3 + b0 * b3
                    acc[9, d] += a0 * b3 - b0 * a3
                    acc[10, d] += a1 * a2 + b1 * b2
                    acc[11, d] += a1 * b2 - b1 * a2
                    acc[12, d] += a1 * a3 + b1 * b3
                    acc[13, d] += a1 * b3 - b1 * a3
                    acc[14, d] += a2 * a3 + b2 * b3
                    acc[15, d] += a2 * b3 - b2 * a3
        for d in range(nd):
            for i in range(4):
                gr[t, d, i, i] = acc[i, d]
                gi[t, d, i, i] = 0.0
            k = 4
            for i in range(4):
                for jj in range(i + 1, 4):
                    gr[t, d, i, jj] = acc[k, d]
                    gr[t, d, jj, i] = acc[k, d]
                    gi[t, d, i, jj] = acc[k + 1, d]
                    gi[t, d, jj, i] = -acc[k + 1, d]
                    k += 2


def correlations_fields(re, im, n: int, r: int, n_f: int, mult: float, out):
    """:func:`retina.spin._propagation.correlations` for a fused block (:func:`gram_fields`).

    Parameters
    ----------
    re, im : ndarray (m, 2 n, n_f 2 R)
        Real and imaginary parts of the fused block's states at ``m`` times.
    n : int
        Nuclear dimension of the block.
    r : int
        Draws ``R`` per field.
    n_f : int
        Fields in the block.
    mult : float
        The block's multiplicity.
    out : ndarray (n_f, R, m, 9)
        Added to in place.
    """
    m = re.shape[0]
    gr = np.empty((m, n_f * r, 4, 4))
    gi = np.empty((m, n_f * r, 4, 4))
    gram_fields(re, im, n, r, n_f, gr, gi)
    ker = _prop.ELECTRON_KERNEL
    cab = (np.einsum("abJI,mrJI->rmab", ker.real, gr) - np.einsum("abJI,mrJI->rmab", ker.imag, gi)) * mult
    cab = cab.reshape(n_f, r, m, 3, 3)
    for ci, (ia, ib) in enumerate(_prop.PAIRS):
        out[..., ci] += 0.5 * (cab[..., ia, ib] + cab[..., ib, ia])
    for ci, (ia, ib) in enumerate(_prop.PAIRS[3:]):
        out[..., 6 + ci] += 0.5 * (cab[..., ia, ib] - cab[..., ib, ia])


def electron_terms(ws, centre: float, half: float):
    """Per field the scaled electron term of :func:`fused_step`: ``(d0, d1, er, ei)`` of
    ``(w . S - centre) / half`` with ``S`` the electron spin (``w . S = [[w_z, w_x - i w_y],
    [w_x + i w_y, -w_z]] / 2``).

    Parameters
    ----------
    ws : array_like (W, 3)
        Electron Larmor vectors, rad s^-1.
    centre, half : float
        Centre and half-width of the Chebyshev interval, rad s^-1.

    Returns
    -------
    tuple of four ndarray (W,)
    """
    w = np.asarray(ws, dtype=float).reshape(-1, 3)
    return ((0.5 * w[:, 2] - centre) / half, (-0.5 * w[:, 2] - centre) / half, 0.5 * w[:, 0] / half,
            -0.5 * w[:, 1] / half)


def fused_series(prepared, hams, ws, xis, h, n_t, *, n_split=None, r_tail=None, alive=None, dtype=np.float64):
    """Per field and draw the correlation estimates ``c_ab(t_j)``, shape (W, R, n_t, 9), for ``W``
    fields propagated together (module docstring); each field's entry equals
    :func:`retina.spin._propagation.radical_series` for that field up to the Chebyshev truncation.

    Parameters
    ----------
    prepared : list of PreparedBlock
        The radical's blocks (:func:`retina.spin._propagation.prepare`).
    hams : list (W) of list of (csr_matrix, float, float)
        Per field and block the Hamiltonian and its spectral bounds
        (:func:`retina.spin._propagation.block_hamiltonian`; only the bounds are used here).
    ws : list (W) of list of ndarray (3,)
        Per field and block the electron Larmor vector ``bvec @ block.zeeman``, rad s^-1.
    xis : list of ndarray (n, R) complex
        Per block, the nuclear random vectors (the same for every field).
    h : float
        Time step, s.
    n_t : int
        Number of grid times.
    n_split, r_tail, alive : optional
        The draw schedule, as in :func:`retina.spin._propagation.radical_series` (per field).  The
        draws are propagated in chunks of at most
        :data:`retina.spin._propagation.MAX_BLOCK_VECTORS` vectors over all the fields.
    dtype : numpy dtype
        Real type of the propagated states and the matrix (``float64``, or ``float32`` for the
        single-precision option: the sparse product's and the combination's memory traffic halves;
        row sums and Gram matrices still accumulate in double precision; the Chebyshev series is
        cut at :data:`retina.spin._propagation.CHEB_TOL_SINGLE`, below what float32 resolves).

    Returns
    -------
    ndarray (W, R, n_t, 9)
    """
    n_f = len(hams)
    r = xis[0].shape[1]
    out = np.zeros((n_f, r, n_t, 9))
    alive = _prop.alive_array(r, n_t, n_split, r_tail, alive)
    for bi, (pb, xi_all) in enumerate(zip(prepared, xis)):
        n = pb.nuclear_dimension
        lo = min(hs[bi][1] for hs in hams)
        hi = max(hs[bi][2] for hs in hams)
        c = 0.5 * (lo + hi)
        a = max(0.5 * (hi - lo), 1e-30)
        hs = (pb.h_hf / a).tocsr()
        hs.sort_indices()
        dr = np.ascontiguousarray(hs.data.real, dtype=dtype)
        di = np.ascontiguousarray(hs.data.imag, dtype=dtype)
        full = hams[0][bi][0]
        m_sub = _prop.substeps(a, h, full.nnz / full.shape[0])
        terms = electron_terms([w[bi] for w in ws], c, a)
        coef = _prop.sub_coeffs(a, 0.0, h, m_sub,
                                _prop.CHEB_TOL if np.dtype(dtype) == np.float64 else _prop.CHEB_TOL_SINGLE)
        n_c = coef.shape[0]
        odd = (np.arange(n_c) % 2 == 1)
        c_re = np.where(odd[:, None], -coef.imag, coef.real).T.astype(dtype)
        c_im = np.where(odd[:, None], coef.imag, coef.real).T.astype(dtype)
        mult = float(pb.block.multiplicity)
        for c0, c1, counts, ends in _prop.draw_chunks(alive, _prop.MAX_BLOCK_VECTORS // (2 * n_f)):
            xi = xi_all[:, c0:c1]
            rc = c1 - c0
            sub = out[:, c0:c1]

            def columns(rr, width):
                # per field, its psi_up columns (the first rr of its width draws) then its psi_down columns
                return [np.r_[f * 2 * width:f * 2 * width + rr, f * 2 * width + width:f * 2 * width + width + rr]
                        for f in range(n_f)]

            v = np.zeros((2 * n, 2 * rc * n_f), dtype=complex)
            for f in range(n_f):
                v[:n, f * 2 * rc:f * 2 * rc + rc] = xi
                v[n:, f * 2 * rc + rc:(f + 1) * 2 * rc] = xi
            v_re, v_im = np.ascontiguousarray(v.real, dtype=dtype), np.ascontiguousarray(v.imag, dtype=dtype)
            for f in range(n_f):
                sl = slice(f * 2 * rc, (f + 1) * 2 * rc)
                _prop.correlations(np.ascontiguousarray(v_re[:, sl])[None], np.ascontiguousarray(v_im[:, sl])[None],
                                   n, rc, mult, sub[f, :, 0:1])

            def workspace(x_re, x_im, rr):
                rows_a = np.empty((n_c,) + x_re.shape, dtype=dtype)
                rows_b = np.empty((n_c,) + x_re.shape, dtype=dtype)
                xs = [rows_a[i] if i % 2 == 0 else rows_b[i] for i in range(n_c)]
                ys = [rows_b[i] if i % 2 == 0 else rows_a[i] for i in range(n_c)]
                xs[0][...] = x_re
                ys[0][...] = x_im
                per_col = [np.ascontiguousarray(np.repeat(t, 2 * rr), dtype=dtype) for t in terms]
                # the states at the m times, written in place each expansion (no fresh pages per expansion)
                bufs = (np.empty((m_sub, rows_a[0].size), dtype=dtype),
                        np.empty((m_sub, rows_a[0].size), dtype=dtype))
                return x_re.shape, xs, ys, rows_a.reshape(n_c, -1), rows_b.reshape(n_c, -1), per_col, bufs

            rr = rc
            shape, xs, ys, flat_a, flat_b, pc, bufs = workspace(v_re, v_im, rr)
            j = 1
            while j < n_t and counts[j] > 0:
                if counts[j] < rr:
                    # draws stop: keep each field's first counts[j] draws
                    keep = np.concatenate(columns(int(counts[j]), rr))
                    rr = int(counts[j])
                    shape, xs, ys, flat_a, flat_b, pc, bufs = workspace(xs[0][:, keep], ys[0][:, keep], rr)
                m = min(m_sub, int(ends[j]) - j)
                if n_c > 1:
                    fused_step(hs.indptr, hs.indices, dr, di, *pc, n, 1.0, xs[0], ys[0], 0.0, xs[0], ys[0], xs[1],
                               ys[1])
                for k in range(2, n_c):
                    fused_step(hs.indptr, hs.indices, dr, di, *pc, n, 2.0, xs[k - 1], ys[k - 1], -1.0, xs[k - 2],
                               ys[k - 2], xs[k], ys[k])
                re = np.matmul(c_re[:m], flat_a, out=bufs[0][:m]).reshape((m,) + shape)
                im = np.matmul(c_im[:m], flat_b, out=bufs[1][:m]).reshape((m,) + shape)
                correlations_fields(re, im, n, rr, n_f, mult, sub[:, :rr, j:j + m])
                xs[0][...] = re[m - 1]
                ys[0][...] = im[m - 1]
                j += m
    return out
