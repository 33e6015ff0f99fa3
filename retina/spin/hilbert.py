"""Exact eigen method: equal recombination rates, no relaxation (the exponential model).

With ``k_S = k_T = k`` the reaction only multiplies ``rho(t)`` by ``exp(-k t)``, so with the
eigen-decomposition ``H = sum_m w_m |m><m|`` (rad s^-1) and a singlet start ``rho0 = P_S / M``::

    Phi_SS = k int_0^inf exp(-k t) Tr(P_S U(t) P_S U(t)^+) dt / M
           = (1 / M) sum_{m,n} |<m|P_S|n>|^2 k^2 / (k^2 + (w_m - w_n)^2).

A triplet start ``rho0 = (1 - P_S) / (3 M)`` gives ``Phi_S = (Tr P_S - M Phi_SS) / (3 M)
= (1 - Phi_SS) / 3``.  Both channels sum to one: ``Phi_T = 1 - Phi_S``.

Only the singlet components of the eigenvectors are needed: with ``P_S = |S><S| x 1_nuclear``,
``<m|P_S|n> = sum_nu conj(u_{nu m}) u_{nu n}`` where ``u_{nu m} = <S, nu|m>`` is an (M, d) block.
So the work per direction is one Hermitian eigenproblem of the (d, d) Hamiltonian, an
(d, M) x (M, d) product (BLAS zherk, half of it) and a Lorentzian-weighted sum over d^2 / 2 pairs
(a numba kernel).  For d >= 48 the eigenvectors are never formed: after the Householder
tridiagonalisation ``H = Q T Q^+`` only the M singlet rows of ``Q`` are accumulated and multiplied by
the real eigenvectors of ``T`` (see ``_singlet_rows_tridiagonal``), which skips LAPACK's (d, d)
back-transformation, the largest part of a full ``eigh`` after the reduction itself.
"""

from __future__ import annotations

import numpy as np

from retina.errors import InputError
from retina.spin.system import equal_rate_reported_yield
from retina.spin import operators as ops
import scipy.linalg.lapack as _lapack
from scipy.linalg.blas import zherk as _zherk

__all__ = ["yields", "check_scope", "chunk_size", "singlet_singlet", "validate_field"]

_DEFAULT_CHUNK_BYTES = 256 * 2**20

try:  # the kernel is optional: numpy does the same sum when numba is missing
    import numba

    @numba.njit(cache=True)
    def _lorentz_sum(q, w, k):  # pragma: no cover - compiled
        """``sum_{i,j} |q_ij|^2 k^2 / (k^2 + (w_i - w_j)^2)`` from the upper triangle of Hermitian q."""
        d = q.shape[0]
        k2 = k * k
        acc = 0.0
        for j in range(d):  # column outer: contiguous for the Fortran-ordered BLAS output
            wj = w[j]
            x = q[j, j]
            acc += x.real * x.real + x.imag * x.imag
            off = 0.0
            for i in range(j):
                x = q[i, j]
                dw = w[i] - wj
                off += (x.real * x.real + x.imag * x.imag) * (k2 / (k2 + dw * dw))
            acc += 2.0 * off
        return acc

    _HAVE_NUMBA = True
except ImportError:  # pragma: no cover
    _HAVE_NUMBA = False


def _lorentz_sum_numpy(q, w, k):
    """Same sum as the numba kernel (upper triangle of q used)."""
    up = np.triu(q)
    dw = w[:, None] - w[None, :]
    weight = np.where(np.eye(len(w), dtype=bool), 0.5, 1.0) * 2.0 * k * k / (k * k + dw * dw)
    return float(np.sum((up.real**2 + up.imag**2) * weight))


def check_scope(system) -> None:
    """Refuse a system outside the exponential model of the eigen method.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Raises
    ------
    InputError
        For unequal rates (key ``k_triplet``), relaxation (key ``relaxation``) or a rate that is
        not positive (key ``k_singlet``).
    """
    if not system.equal_rates:
        raise InputError(
            f"the eigen method needs equal recombination rates, got k_S = {system.k_singlet:g} s^-1 and "
            f"k_T = {system.k_triplet:g} s^-1; use method='liouville'",
            source=system.source, key="k_triplet")
    if system.relaxation.any:
        raise InputError("the eigen method does not handle relaxation; use method='liouville'",
                         source=system.source, key="relaxation")
    if not (np.isfinite(system.k_singlet) and system.k_singlet > 0):
        raise InputError(f"expected a positive recombination rate, got {system.k_singlet!r} s^-1",
                         source=system.source, key="k_singlet")


def validate_field(field_uT, directions, source=None) -> tuple[float, np.ndarray]:
    """Check the field strength and the directions.

    Parameters
    ----------
    field_uT : float
        Field strength, microtesla (finite, ``>= 0``).
    directions : array_like, shape (N, 3)
        Finite, non-zero directions.
    source : str, optional
        File named in error messages.

    Returns
    -------
    b : float
        The strength in tesla.
    dirs : ndarray, shape (N, 3)
        The directions normalised to unit length.

    Raises
    ------
    InputError
        Keys ``field_uT`` or ``directions``.
    """
    try:
        f = float(field_uT)
    except (TypeError, ValueError):
        raise InputError(f"expected a field strength in microtesla, got {field_uT!r}", source=source, key="field_uT")
    if not np.isfinite(f) or f < 0:
        raise InputError(f"expected a finite field strength >= 0 uT, got {field_uT!r}", source=source, key="field_uT")
    d = np.asarray(directions, dtype=float)
    if d.ndim == 1 and d.shape == (3,):
        d = d[None, :]
    if d.ndim != 2 or d.shape[1] != 3:
        raise InputError(f"expected field directions of shape (N, 3), got shape {d.shape}", source=source,
                         key="directions")
    norms = np.linalg.norm(d, axis=1)
    if not np.all(np.isfinite(norms)) or np.any(norms == 0):
        raise InputError("expected finite, non-zero field direction vectors", source=source, key="directions")
    return f * 1e-6, d / norms[:, None]


def chunk_size(dimension: int, max_bytes: int | None = None) -> int:
    """Directions per batch so that the working arrays (about 4 (d, d) complex each) fit.

    Parameters
    ----------
    dimension : int
        Hilbert dimension ``d``.
    max_bytes : int, optional
        Memory for the batch (default a fixed working budget, ``_DEFAULT_CHUNK_BYTES``).

    Returns
    -------
    int
        Between 1 and 4096.
    """
    per = 4 * 16 * dimension * dimension
    budget = _DEFAULT_CHUNK_BYTES if max_bytes is None else int(max_bytes)
    return int(max(1, min(4096, budget // per)))


#: From this Hilbert dimension on, the tridiagonal path (below) is used; smaller pairs go through
#: batched ``numpy.linalg.eigh``, whose per-call overhead is lower.
TRIDIAGONAL_FROM = 48


def _selector(space) -> np.ndarray:
    """(M, d) rows ``<S, nu|`` of the singlet basis vectors (entries +-1/sqrt 2)."""
    i_ud, i_du = space.singlet_indices()
    m = space.nuclear_dimension
    sel = np.zeros((m, space.dimension), dtype=complex)
    sel[np.arange(m), i_ud] = np.sqrt(0.5)
    sel[np.arange(m), i_du] = -np.sqrt(0.5)
    return sel


def _singlet_rows_tridiagonal(h, sel, lwork_trd, lwork_mqr):
    """Eigenvalues and singlet rows of the eigenvectors of one Hermitian matrix, without the
    full eigenvector back-transformation.

    ``H = Q T Q^+`` (LAPACK zhetrd, T real symmetric tridiagonal) and ``T = Z diag(w) Z^T``
    (LAPACK dstevd, real), so the eigenvectors are ``Q Z`` and their singlet rows are
    ``(sel Q) Z``: the Householder reflectors are applied to the M rows of ``sel`` only (zunmqr on
    an (M, d - 1) block) instead of to the whole (d, d) matrix.

    ``h`` is passed through its Fortran view ``h.T`` (= conj(H) for Hermitian H), which has the same
    eigenvalues and conjugated eigenvectors; only ``|<m|P_S|n>|^2`` is used, so this is harmless.
    ``h`` is overwritten.
    """
    d = h.shape[0]
    c, diag, off, tau, info = _lapack.zhetrd(h.T, lower=1, lwork=lwork_trd, overwrite_a=1)
    if info != 0:  # pragma: no cover - LAPACK failure
        raise RuntimeError(f"zhetrd failed (info={info})")
    w, z, info = _lapack.dstevd(diag, off, compute_v=1)
    if info != 0:  # pragma: no cover
        raise RuntimeError(f"dstevd failed (info={info})")
    rq = np.empty_like(sel)
    rq[:, 0] = sel[:, 0]
    tail, _, info = _lapack.zunmqr("R", "N", c[1:, : d - 1], tau, np.asfortranarray(sel[:, 1:]), lwork_mqr)
    if info != 0:  # pragma: no cover
        raise RuntimeError(f"zunmqr failed (info={info})")
    rq[:, 1:] = tail
    u = (rq.real @ z) + 1j * (rq.imag @ z)
    return w, u


def singlet_singlet(parts, b_tesla, k, *, progress=None, max_bytes=None, path="auto") -> np.ndarray:
    """``Phi_SS``: singlet yield from a singlet start for equal rates ``k`` (s^-1).

    Parameters
    ----------
    parts : HamiltonianParts
        The pair's Hamiltonian parts (:func:`retina.spin.operators.hamiltonian_parts`).
    b_tesla : ndarray, shape (N, 3)
        Field vectors, tesla, molecular frame.
    k : float
        Common recombination rate, s^-1.
    progress : callable(done, total), optional
        Counts field vectors.
    max_bytes : int, optional
        Memory limit for the batched eigen-decompositions (:func:`chunk_size`).
    path : {"auto", "eigh", "tridiagonal"}
        ``"eigh"``: batched ``numpy.linalg.eigh`` and the singlet rows of its eigenvectors;
        ``"tridiagonal"``: see :func:`_singlet_rows_tridiagonal`; ``"auto"`` picks by dimension
        (:data:`TRIDIAGONAL_FROM`).  Both give the same numbers to rounding (tested).

    Returns
    -------
    ndarray, shape (N,)
    """
    space = parts.space
    d = space.dimension
    ma, mb = space.nuclear_a, space.nuclear_b
    m = ma * mb
    n = b_tesla.shape[0]
    out = np.empty(n)
    step = chunk_size(d, max_bytes)
    hb = parts.hb.reshape(3, d * d)
    if path == "auto":
        path = "tridiagonal" if d >= TRIDIAGONAL_FROM else "eigh"
    if path not in ("eigh", "tridiagonal"):
        raise InputError(f"expected path 'auto', 'eigh' or 'tridiagonal', got {path!r}", key="path")
    if path == "tridiagonal":
        sel = _selector(space)
        lwork_trd = max(1, int(_lapack.zhetrd_lwork(d, lower=1)[0].real))
        lwork_mqr = max(1, 64 * m)
    kernel = _lorentz_sum if _HAVE_NUMBA else _lorentz_sum_numpy
    for start in range(0, n, step):
        stop = min(n, start + step)
        h = (b_tesla[start:stop].astype(complex) @ hb).reshape(-1, d, d)
        h += parts.h0
        if path == "eigh":
            w, v = np.linalg.eigh(h)
            del h
        for p in range(stop - start):
            if path == "eigh":
                vr = v[p].reshape(2, ma, 2, mb, d)
                u = (vr[0, :, 1] - vr[1, :, 0]).reshape(m, d) * np.sqrt(0.5)  # <S, nu | m>
                wp = w[p]
            else:
                wp, u = _singlet_rows_tridiagonal(h[p], sel, lwork_trd, lwork_mqr)
            # zherk on the Fortran view u.T gives conj(u^H u) = conj(<m|P_S|n>) (upper triangle);
            # only |.|^2 is used, so the conjugate does not matter.
            q = _zherk(1.0, u.T, trans=0)
            # frequencies in units of k: the kernel then works with numbers of order one
            out[start + p] = kernel(q, wp / k, 1.0) / m
        if progress is not None:
            progress(stop, n)
    return out


def yields(system, field_uT, directions, *, progress=None, max_bytes=None) -> np.ndarray:
    """The reported yield of ``system`` for each field direction (exact, equal rates).

    Parameters
    ----------
    system : SpinSystem
        Equal rates, no relaxation (else :class:`InputError`).
    field_uT : float
        Field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
        Called after each batch with the number of directions done.
    max_bytes : int, optional
        Working-memory bound for one batch (default 256 MiB).

    Returns
    -------
    ndarray, shape (N,)
        ``system.reported_yield`` from ``system.initial_state``, dimensionless in [0, 1].
    """
    check_scope(system)
    b, dirs = validate_field(field_uT, directions, system.source)
    parts = ops.hamiltonian_parts(system)
    phi_ss = singlet_singlet(parts, b * dirs, float(system.k_singlet), progress=progress, max_bytes=max_bytes)
    return equal_rate_reported_yield(system, phi_ss)
