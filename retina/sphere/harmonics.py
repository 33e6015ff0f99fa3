"""Real spherical harmonics of even degree: the coefficient layout, values and surface gradients.

The conventions (normalisation, phase, coefficient order) are in :mod:`retina.sphere`.  The
harmonics are evaluated from Cartesian components by the normalised three-term recurrence in a
numba kernel, so there is no singularity at the poles.
"""

from __future__ import annotations

import functools
import math

import numba
import numpy as np

__all__ = ["n_coeffs", "degree_from_n", "lm_index", "normalize", "real_sh", "real_sh_grad", "evaluate",
           "evaluate_grad"]


def _check_degree(L: int) -> int:
    if int(L) != L or L < 0 or L % 2:
        raise ValueError(f"degree L must be an even integer >= 0, got {L!r}")
    return int(L)


def n_coeffs(L: int) -> int:
    """Number of even-degree coefficients up to degree ``L``: ``(L + 1)(L + 2) / 2``.

    Parameters
    ----------
    L : int
        Even maximum degree, ``>= 0``.

    Returns
    -------
    int
        ``K``, the length of a coefficient vector (153 for L = 16).

    Raises
    ------
    ValueError
        When ``L`` is odd or negative.
    """
    L = _check_degree(L)
    return (L + 1) * (L + 2) // 2


def degree_from_n(K: int) -> int:
    """Inverse of :func:`n_coeffs`.

    Parameters
    ----------
    K : int
        Length of an even-degree coefficient vector.

    Returns
    -------
    int
        The even degree ``L`` with ``n_coeffs(L) == K``.

    Raises
    ------
    ValueError
        When ``K`` is not such a length.
    """
    L = int(round((math.sqrt(8 * K + 1) - 3) / 2))
    if L < 0 or L % 2 or n_coeffs(L) != K:
        raise ValueError(f"{K} is not the length of an even-degree coefficient vector")
    return L


@functools.lru_cache(maxsize=64)
def lm_index(L: int) -> tuple[np.ndarray, np.ndarray]:
    """Arrays ``(l, m)`` of shape (K,) giving the degree and order of each coefficient."""
    L = _check_degree(L)
    ls, ms = [], []
    for l in range(0, L + 1, 2):
        for m in range(-l, l + 1):
            ls.append(l)
            ms.append(m)
    l_arr = np.array(ls, dtype=np.int64)
    m_arr = np.array(ms, dtype=np.int64)
    l_arr.setflags(write=False)
    m_arr.setflags(write=False)
    return l_arr, m_arr


def normalize(dirs) -> np.ndarray:
    """Unit vectors along the given directions.

    Parameters
    ----------
    dirs : array_like, shape (..., 3)
        Finite, non-zero vectors.

    Returns
    -------
    ndarray, shape (..., 3)
        Each vector divided by its length.

    Raises
    ------
    ValueError
        On a wrong last axis, a zero or a non-finite vector.
    """
    d = np.asarray(dirs, dtype=float)
    if d.shape[-1] != 3:
        raise ValueError(f"directions must have shape (..., 3), got {d.shape}")
    n = np.linalg.norm(d, axis=-1, keepdims=True)
    if np.any(n == 0) or not np.all(np.isfinite(n)):
        raise ValueError("directions must be finite and non-zero")
    return d / n


@numba.njit(cache=True)
def _recurrence_tables(L):
    # a_lm, b_lm of the normalised three-term recurrence in l at fixed m.
    a = np.zeros((L + 1, L + 1))
    b = np.zeros((L + 1, L + 1))
    for m in range(L + 1):
        for l in range(m + 2, L + 1):
            a[l, m] = math.sqrt((4.0 * l * l - 1.0) / (l * l - m * m))
            b[l, m] = math.sqrt(((l - 1.0) ** 2 - m * m) / (4.0 * (l - 1.0) ** 2 - 1.0))
    return a, b


@numba.njit(cache=True)
def _sh_kernel(L, dirs, want_grad, out, grad):
    """Fill out (N, K) and optionally grad (N, K, 3) with even-degree real SH and their
    tangential gradients at unit vectors dirs (N, 3)."""
    n = dirs.shape[0]
    a, b = _recurrence_tables(L)
    sqrt2 = math.sqrt(2.0)
    q = np.zeros(L + 1)      # normalised Q_l^m(z) for the current m, all l
    dq = np.zeros(L + 1)     # d/dz of it
    A = np.zeros(L + 1)      # Re (x + i y)^m
    B = np.zeros(L + 1)      # Im (x + i y)^m
    for p in range(n):
        x = dirs[p, 0]
        y = dirs[p, 1]
        z = dirs[p, 2]
        A[0] = 1.0
        B[0] = 0.0
        for m in range(1, L + 1):
            A[m] = x * A[m - 1] - y * B[m - 1]
            B[m] = x * B[m - 1] + y * A[m - 1]
        qmm = 1.0 / math.sqrt(4.0 * math.pi)
        for m in range(L + 1):
            if m > 0:
                qmm = qmm * math.sqrt((2.0 * m + 1.0) / (2.0 * m))
            q[m] = qmm
            dq[m] = 0.0
            if m + 1 <= L:
                q[m + 1] = math.sqrt(2.0 * m + 3.0) * z * qmm
                dq[m + 1] = math.sqrt(2.0 * m + 3.0) * qmm
            for l in range(m + 2, L + 1):
                q[l] = a[l, m] * (z * q[l - 1] - b[l, m] * q[l - 2])
                dq[l] = a[l, m] * (q[l - 1] + z * dq[l - 1] - b[l, m] * dq[l - 2])
            # write even degrees l >= m
            l0 = m if m % 2 == 0 else m + 1
            for l in range(l0, L + 1, 2):
                base = (l * (l - 1)) // 2 + l
                if m == 0:
                    out[p, base] = q[l]
                    if want_grad:
                        gx = 0.0
                        gy = 0.0
                        gz = dq[l]
                        dot = gx * x + gy * y + gz * z
                        grad[p, base, 0] = gx - dot * x
                        grad[p, base, 1] = gy - dot * y
                        grad[p, base, 2] = gz - dot * z
                else:
                    c = sqrt2 * q[l]
                    out[p, base + m] = c * A[m]
                    out[p, base - m] = c * B[m]
                    if want_grad:
                        dc = sqrt2 * dq[l]
                        # cosine member: F = c(z) A_m(x, y)
                        gx = c * m * A[m - 1]
                        gy = -c * m * B[m - 1]
                        gz = dc * A[m]
                        dot = gx * x + gy * y + gz * z
                        grad[p, base + m, 0] = gx - dot * x
                        grad[p, base + m, 1] = gy - dot * y
                        grad[p, base + m, 2] = gz - dot * z
                        # sine member: F = c(z) B_m(x, y)
                        gx = c * m * B[m - 1]
                        gy = c * m * A[m - 1]
                        gz = dc * B[m]
                        dot = gx * x + gy * y + gz * z
                        grad[p, base - m, 0] = gx - dot * x
                        grad[p, base - m, 1] = gy - dot * y
                        grad[p, base - m, 2] = gz - dot * z


def _prep_dirs(dirs) -> tuple[np.ndarray, tuple]:
    d = normalize(dirs)
    shape = d.shape[:-1]
    return np.ascontiguousarray(d.reshape(-1, 3)), shape


def real_sh(L: int, dirs) -> np.ndarray:
    """Even-degree real spherical harmonics at directions.

    Parameters
    ----------
    L : int
        Even maximum degree.
    dirs : array_like, shape (..., 3)
        Directions (normalised here).

    Returns
    -------
    ndarray, shape (..., K)
        ``Y[..., k]`` for the coefficient layout of this module, ``K = n_coeffs(L)``.
    """
    L = _check_degree(L)
    d, shape = _prep_dirs(dirs)
    out = np.zeros((d.shape[0], n_coeffs(L)))
    _sh_kernel(L, d, False, out, np.zeros((1, 1, 3)))
    return out.reshape(shape + (out.shape[1],))


def real_sh_grad(L: int, dirs) -> tuple[np.ndarray, np.ndarray]:
    """Values and tangential (surface) gradients of the even-degree real harmonics.

    Parameters
    ----------
    L : int
        Even maximum degree.
    dirs : array_like, shape (..., 3)
        Unit vectors.

    Returns
    -------
    Y : ndarray, shape (..., K)
        The harmonics (convention in DEVELOPERS.md, "Sphere conventions").
    G : ndarray, shape (..., K, 3)
        ``(I - b b^T) grad F`` where ``F`` is any smooth extension of ``Y`` off the sphere: the
        derivative of ``Y(b(t))`` along a curve on the sphere is ``G . db/dt``.
    """
    L = _check_degree(L)
    d, shape = _prep_dirs(dirs)
    K = n_coeffs(L)
    out = np.zeros((d.shape[0], K))
    grad = np.zeros((d.shape[0], K, 3))
    _sh_kernel(L, d, True, out, grad)
    return out.reshape(shape + (K,)), grad.reshape(shape + (K, 3))


def evaluate(coeffs, dirs) -> np.ndarray:
    """Values of the function(s) with even-degree coefficients ``coeffs`` at ``dirs``.

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients (one or more functions).
    dirs : array_like, shape (N, 3)
        Unit vectors.

    Returns
    -------
    ndarray, shape (..., N)
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    Y = real_sh(L, np.asarray(dirs, dtype=float).reshape(-1, 3))
    return c @ Y.T


def evaluate_grad(coeffs, dirs) -> tuple[np.ndarray, np.ndarray]:
    """Values and tangential gradients of one function.

    Parameters
    ----------
    coeffs : array_like, shape (K,)
        Even-degree coefficients.
    dirs : array_like, shape (N, 3)
        Unit vectors.

    Returns
    -------
    values : ndarray, shape (N,)
    grad : ndarray, shape (N, 3)
        Tangential gradients (see :func:`real_sh_grad`).
    """
    c = np.asarray(coeffs, dtype=float)
    if c.ndim != 1:
        raise ValueError("evaluate_grad takes one coefficient vector (K,)")
    L = degree_from_n(c.shape[-1])
    Y, G = real_sh_grad(L, np.asarray(dirs, dtype=float).reshape(-1, 3))
    return Y @ c, np.einsum("nkd,k->nd", G, c)
