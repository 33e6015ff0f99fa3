"""Functions on the unit sphere: quadrature grids, real spherical harmonics, fitting, rotation.

Conventions (owned here)
------------------------
Real spherical harmonics, orthonormal on the unit sphere (``int Y_lm^2 dOmega = 1``), without the
Condon-Shortley phase. With ``z = cos(theta)`` and ``phi`` the azimuth of ``(x, y)``::

    Y_l0  = N_l0 P_l(z)
    Y_lm  = sqrt(2) N_lm P_l^m(z) cos(m phi)      (m > 0)
    Y_l-m = sqrt(2) N_lm P_l^m(z) sin(m phi)      (m > 0)
    N_lm  = sqrt((2l + 1) / (4 pi) (l - m)! / (l + m)!)

with ``P_l^m(z) = (1 - z^2)^(m/2) d^m P_l / dz^m`` (no ``(-1)^m``).  They are evaluated from
Cartesian components (``sin^m(theta) cos(m phi) = Re (x + i y)^m``), so there is no singularity at
the poles.

Yield functions are even, ``Phi(b) = Phi(-b)``, so coefficient vectors hold even degrees only:
``l = 0, 2, ..., L`` and inside each degree ``m = -l, ..., l``.  The index of ``(l, m)`` is
``l (l - 1) / 2 + m + l`` and a degree-``L`` vector has ``(L + 1)(L + 2) / 2`` entries
(:func:`n_coeffs`).  ``L`` must be even.

Rotations are active: rotating a function ``f`` by ``R`` gives ``(R f)(b) = f(R^-1 b)``, and
:func:`rotate` maps coefficients of ``f`` to those of ``R f`` exactly (block-diagonal real Wigner
matrices, built through the z-y-z Euler factorisation ``D(R) = Z(alpha) J Z(beta) J^T Z(gamma)``
where ``J`` is the Wigner block of the fixed rotation taking the z axis to the y axis, computed once
per degree by exact quadrature).

Quadrature: Lebedev rules from :func:`scipy.integrate.lebedev_rule` (weights sum to 4 pi), exact for
polynomials up to the rule's order.  Projecting a degree-``L`` function needs a rule exact to
``2 L`` (:func:`grid_for_degree`).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numba
import numpy as np
from scipy.integrate import lebedev_rule
from scipy.spatial.transform import Rotation

__all__ = [
    "SphereGrid",
    "n_coeffs",
    "degree_from_n",
    "lm_index",
    "real_sh",
    "real_sh_grad",
    "lebedev",
    "lebedev_orders",
    "grid_for_degree",
    "fibonacci",
    "fit_even",
    "evaluate",
    "evaluate_grad",
    "rotate",
    "funk_hecke",
    "vmf_moments",
    "axial_average",
    "zonal_to_legendre",
    "normalize",
]

LEBEDEV_ORDERS = (3, 5, 7, 9, 11, 13, 15, 17, 19, 21, 23, 25, 27, 29, 31, 35, 41, 47, 53, 59,
                  65, 71, 77, 83, 89, 95, 101, 107, 113, 119, 125, 131)


def lebedev_orders() -> tuple[int, ...]:
    """The Lebedev orders (polynomial degrees integrated exactly) that scipy provides.

    Returns
    -------
    tuple of int
        Increasing odd orders, 3 to 131.
    """
    return LEBEDEV_ORDERS


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


# ----------------------------------------------------------------------------------------------
# real spherical harmonics (numba kernels)
# ----------------------------------------------------------------------------------------------


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


# ----------------------------------------------------------------------------------------------
# grids
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SphereGrid:
    """Points on the unit sphere with quadrature weights.

    Attributes
    ----------
    points : ndarray (N, 3)
    weights : ndarray (N,)
        Sum to 4 pi.
    degree : int
        Polynomials up to this degree are integrated exactly (-1 when not a quadrature rule).
    name : str
    """

    points: np.ndarray
    weights: np.ndarray
    degree: int
    name: str = ""

    def __len__(self) -> int:
        return self.points.shape[0]

    def hemisphere(self) -> tuple[np.ndarray, np.ndarray]:
        """One point of each antipodal pair, and the map back to the full grid.

        Returns
        -------
        half : ndarray (H,)
            Indices into ``points`` of the kept points (z > 0, or on the equator with y > 0, or
            x > 0 on the y = z = 0 line).
        full_from_half : ndarray (N,)
            For every point of the grid, the index into ``half`` of itself or of its antipode, so
            an even function's values on the full grid are ``values_half[full_from_half]``.

        Raises
        ------
        ValueError
            When the grid is not inversion-symmetric.
        """
        p = self.points
        tol = 1e-12
        keep = (p[:, 2] > tol) | ((np.abs(p[:, 2]) <= tol) & (p[:, 1] > tol)) | (
            (np.abs(p[:, 2]) <= tol) & (np.abs(p[:, 1]) <= tol) & (p[:, 0] > 0))
        half = np.flatnonzero(keep)
        # match every point to a kept point equal to it or to its antipode
        from scipy.spatial import cKDTree

        tree = cKDTree(p[half])
        d1, i1 = tree.query(p)
        d2, i2 = tree.query(-p)
        full_from_half = np.where(d1 <= d2, i1, i2)
        if max(np.minimum(d1, d2).max(), 0.0) > 1e-9 or 2 * half.size != p.shape[0]:
            raise ValueError(f"grid {self.name!r} is not inversion-symmetric")
        return half, full_from_half


@functools.lru_cache(maxsize=32)
def _lebedev_cached(order: int) -> tuple[np.ndarray, np.ndarray]:
    x, w = lebedev_rule(order)
    pts = np.ascontiguousarray(x.T)
    pts /= np.linalg.norm(pts, axis=1, keepdims=True)
    return pts, np.asarray(w, dtype=float)


def lebedev(order: int) -> SphereGrid:
    """The Lebedev rule of the given order (exact to that polynomial degree).

    Parameters
    ----------
    order : int
        One of :func:`lebedev_orders`.

    Returns
    -------
    SphereGrid
        Fresh arrays: ``points (N, 3)`` unit vectors, ``weights (N,)`` summing to 4 pi.

    Raises
    ------
    ValueError
        For an order scipy does not provide.
    """
    if order not in LEBEDEV_ORDERS:
        raise ValueError(f"no Lebedev rule of order {order}; available: {LEBEDEV_ORDERS}")
    pts, w = _lebedev_cached(order)
    return SphereGrid(pts.copy(), w.copy(), order, name=f"lebedev-{order}")


def grid_for_degree(L: int, *, exactness: int | None = None) -> SphereGrid:
    """The smallest Lebedev rule exact to ``2 L`` (so projecting a degree-``L`` function is exact).

    Parameters
    ----------
    L : int
        Even degree of the functions to project.
    exactness : int, optional
        Polynomial degree the rule must integrate instead of ``2 L``.

    Returns
    -------
    SphereGrid

    Raises
    ------
    ValueError
        When no rule is exact enough (the largest order is 131).
    """
    need = 2 * _check_degree(L) if exactness is None else int(exactness)
    for order in LEBEDEV_ORDERS:
        if order >= need:
            return lebedev(order)
    raise ValueError(f"no Lebedev rule is exact to degree {need}; the largest is {LEBEDEV_ORDERS[-1]}")


def fibonacci(n: int, *, hemisphere: bool = False, offset: float = 0.5) -> SphereGrid:
    """A quasi-uniform Fibonacci lattice of ``n`` points (equal weights; not a quadrature rule).

    Parameters
    ----------
    n : int
        Number of points, ``>= 1``.
    hemisphere : bool
        Cover only ``z >= 0`` (weights then sum to 2 pi instead of 4 pi).
    offset : float
        Offset of the point index (0.5 spreads the points evenly in ``z``).

    Returns
    -------
    SphereGrid
        ``points (n, 3)``, equal ``weights (n,)``, ``degree = -1`` (no exactness).
    """
    n = int(n)
    if n < 1:
        raise ValueError("n must be >= 1")
    i = np.arange(n) + offset
    golden = (1 + 5 ** 0.5) / 2
    z = 1 - i / n if hemisphere else 1 - 2 * i / n
    r = np.sqrt(np.clip(1 - z * z, 0, None))
    phi = 2 * np.pi * i / golden
    pts = np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)
    area = 2 * np.pi if hemisphere else 4 * np.pi
    return SphereGrid(pts, np.full(n, area / n), -1, name=f"fibonacci-{n}{'-half' if hemisphere else ''}")


# ----------------------------------------------------------------------------------------------
# fitting and evaluation
# ----------------------------------------------------------------------------------------------


def fit_even(values, grid: SphereGrid, L: int) -> np.ndarray:
    """Coefficients of the even part of a function, by quadrature projection on ``grid``.

    Exact for functions of degree <= L when ``grid.degree >= 2 L``.

    Parameters
    ----------
    values : array_like, shape (..., N)
        Function values at ``grid.points``.
    grid : SphereGrid
    L : int

    Returns
    -------
    ndarray, shape (..., K)
    """
    L = _check_degree(L)
    v = np.asarray(values, dtype=float)
    if v.shape[-1] != len(grid):
        raise ValueError(f"values have {v.shape[-1]} points, grid {grid.name} has {len(grid)}")
    if grid.degree >= 0 and grid.degree < 2 * L:
        raise ValueError(f"grid {grid.name} is exact to degree {grid.degree}, projection to degree "
                         f"{L} needs {2 * L}")
    Y = real_sh(L, grid.points)
    return (v * grid.weights) @ Y


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


# ----------------------------------------------------------------------------------------------
# rotation
# ----------------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=16)
def _j_blocks(L: int) -> tuple[np.ndarray, ...]:
    """Wigner blocks D^l(X) for X the rotation taking the z axis to the y axis (X = Rx(-90 deg)),
    for even l <= L, by exact quadrature: D_mm' = int Y_lm(b) Y_lm'(X^-1 b) dOmega."""
    grid = grid_for_degree(L)
    X = Rotation.from_euler("x", -np.pi / 2)
    Y = real_sh(L, grid.points)
    Yr = real_sh(L, X.inv().apply(grid.points))
    D = (Y * grid.weights[:, None]).T @ Yr
    blocks = []
    for l in range(0, L + 1, 2):
        s = l * (l - 1) // 2
        blk = np.ascontiguousarray(D[s:s + 2 * l + 1, s:s + 2 * l + 1])
        blk.setflags(write=False)
        blocks.append(blk)
    return tuple(blocks)


@numba.njit(cache=True)
def _trig_table(angle, L, cm, sm):
    """cm[i, m] = cos(m angle[i]), sm[i, m] = sin(m angle[i]) for m = 0..L (Chebyshev recurrence:
    two transcendental calls per angle whatever the degree)."""
    for i in range(angle.shape[0]):
        ca = math.cos(angle[i])
        sa = math.sin(angle[i])
        cm[i, 0] = 1.0
        sm[i, 0] = 0.0
        for m in range(1, L + 1):
            cm[i, m] = cm[i, m - 1] * ca - sm[i, m - 1] * sa
            sm[i, m] = sm[i, m - 1] * ca + cm[i, m - 1] * sa


@numba.njit(cache=True)
def _apply_z_block(blk, l, cm, sm):
    """In place: rotate degree-l blocks blk (n, 2l+1) about z (active), angles as trig tables."""
    for i in range(blk.shape[0]):
        for m in range(1, l + 1):
            a = blk[i, l + m]
            b = blk[i, l - m]
            blk[i, l + m] = a * cm[i, m] - b * sm[i, m]
            blk[i, l - m] = a * sm[i, m] + b * cm[i, m]


_ROTATE_CHUNK = 16384


def rotate(coeffs, rotation: Rotation) -> np.ndarray:
    """Coefficients of the rotated function(s) ``(R f)(b) = f(R^-1 b)``; exact.

    Parameters
    ----------
    coeffs : array_like, shape (K,) or (n, K)
        One function, or one per rotation.
    rotation : scipy.spatial.transform.Rotation
        One rotation or ``n`` of them.

    Returns
    -------
    ndarray, shape (K,) for one function and one rotation, else (n, K).
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    single = rotation.single and c.ndim == 1
    rot = rotation if not rotation.single else Rotation.from_quat(rotation.as_quat()[None, :])
    n = len(rot)
    if c.ndim == 1:
        c = np.broadcast_to(c, (n, c.shape[0]))
    elif c.shape[0] != n:
        if n == 1:
            rot = Rotation.from_quat(np.repeat(rot.as_quat(), c.shape[0], axis=0))
            n = c.shape[0]
        else:
            raise ValueError(f"{c.shape[0]} coefficient vectors for {n} rotations")
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # gimbal lock is harmless here: any valid triple works
        eul = rot.as_euler("ZYZ")
    blocks = _j_blocks(L)
    K = c.shape[-1]
    out = np.empty((n, K))
    out[:, 0] = c[:, 0]
    tables = [(np.empty((min(n, _ROTATE_CHUNK), L + 1)), np.empty((min(n, _ROTATE_CHUNK), L + 1)))
              for _ in range(3)]
    for lo in range(0, n, _ROTATE_CHUNK):
        hi = min(n, lo + _ROTATE_CHUNK)
        trig = []
        for k, (cm, sm) in enumerate(tables):
            _trig_table(np.ascontiguousarray(eul[lo:hi, k]), L, cm, sm)
            trig.append((cm[:hi - lo], sm[:hi - lo]))
        (ca, sa), (cb, sb), (cg, sg) = trig
        for i, J in enumerate(blocks):
            l = 2 * i
            if l == 0:
                continue
            s0 = l * (l - 1) // 2
            blk = np.array(c[lo:hi, s0:s0 + 2 * l + 1], dtype=float, order="C")  # a writable copy
            _apply_z_block(blk, l, cg, sg)
            blk = blk @ J            # J^T applied to column vectors
            _apply_z_block(blk, l, cb, sb)
            blk = blk @ J.T          # J applied to column vectors
            _apply_z_block(blk, l, ca, sa)
            out[lo:hi, s0:s0 + 2 * l + 1] = blk
    return out[0] if single else out


# ----------------------------------------------------------------------------------------------
# zonal operations
# ----------------------------------------------------------------------------------------------


def funk_hecke(coeffs, moments) -> np.ndarray:
    """Convolve with an axially symmetric kernel: multiply each degree-l block by ``moments[l]``.

    For a kernel density ``k(t)`` normalised to one over the sphere,
    ``moments[l] = 2 pi int_{-1}^{1} k(t) P_l(t) dt`` (Funk-Hecke).

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients of degree ``L``.
    moments : array_like, shape (..., >= L + 1)
        Kernel moments indexed by degree (broadcast against the leading axes of ``coeffs``).

    Returns
    -------
    ndarray, shape (..., K)
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    lam = np.asarray(moments, dtype=float)
    if lam.shape[-1] < L + 1:
        raise ValueError(f"need kernel moments up to degree {L}, got {lam.shape[-1] - 1}")
    l, _ = lm_index(L)
    return c * lam[..., l]


#: Above this concentration the vMF moments use their closed form in ``1 / kappa`` (scipy's scaled
#: Bessel functions return NaN beyond about 1e10); below it, the Bessel ratio.
VMF_CLOSED_FORM_FROM = 1e8


def vmf_moments(kappa: float, L: int) -> np.ndarray:
    """Legendre moments of the von Mises-Fisher density on the sphere.

    ``lambda_l = I_{l+1/2}(kappa) / I_{1/2}(kappa)`` is the mean of ``P_l(t)`` under the density
    ``C(kappa) exp(kappa t)`` (``t`` the cosine to the mean axis); ``lambda_1 = coth(kappa) -
    1 / kappa`` is the mean cosine.  Stable for every ``kappa`` from 0 to inf:

    - ``kappa = 0``: uniform (only ``lambda_0 = 1``); ``kappa < 1e-3``: the series
      ``kappa^l / (2l + 1)!!`` (from ``I_nu(x) ~ (x/2)^nu / Gamma(nu + 1)``);
    - up to :data:`VMF_CLOSED_FORM_FROM`: the ratio of scaled Bessel functions (``scipy.special.ive``);
    - above it: the half-integer Bessel functions in closed form (the spherical Bessel functions),
      ``I_{l+1/2}(k) sqrt(pi k / 2) = [e^k sum_j (-1)^j a_j - (-1)^l e^-k sum_j a_j] / 2`` with
      ``a_j = (l + j)! / (j! (l - j)! (2k)^j)``, ``j = 0..l``, and ``I_{1/2}(k) sqrt(pi k / 2) =
      sinh k``, so ``lambda_l = sum_j (-1)^j a_j`` up to terms of order ``e^-2k`` (nil there:
      below ``10^-86,000,000``): ``1 - 1/k`` for l = 1, ``1 - 3/k + 3/k^2`` for l = 2;
    - ``kappa = inf``: a delta (all ones).

    Parameters
    ----------
    kappa : float
        Concentration, ``>= 0`` (``inf`` allowed).
    L : int
        Largest degree.

    Returns
    -------
    ndarray, shape (L + 1,)
        ``lambda_0 .. lambda_L`` (``lambda_0 = 1``), each in ``[0, 1]``.

    Raises
    ------
    ValueError
        For a negative or NaN ``kappa``.
    """
    from scipy.special import ive

    if kappa < 0 or np.isnan(kappa):
        raise ValueError(f"kappa must be >= 0, got {kappa}")
    l = np.arange(L + 1)
    if np.isinf(kappa):
        return np.ones(L + 1)
    if kappa == 0:
        out = np.zeros(L + 1)
        out[0] = 1.0
        return out
    if kappa < 1e-3:
        # series: lambda_l ~ kappa^l / (2l+1)!!  (from I_nu(x) ~ (x/2)^nu / Gamma(nu+1))
        from scipy.special import factorial2

        return kappa ** l / factorial2(2 * l + 1)
    if kappa > VMF_CLOSED_FORM_FROM:
        out = np.empty(L + 1)
        for ll in range(L + 1):
            term, total = 1.0, 1.0
            for j in range(ll):  # a_{j+1} / a_j = -(l + j + 1)(l - j) / ((j + 1) 2k), signs included
                term *= -(ll + j + 1) * (ll - j) / ((j + 1) * 2.0 * kappa)
                total += term
            out[ll] = total
        return out
    return ive(l + 0.5, kappa) / ive(0.5, kappa)


def axial_average(coeffs) -> np.ndarray:
    """Average over rotations about the z axis: keep the m = 0 terms.

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients.

    Returns
    -------
    ndarray, shape (..., K)
        A copy with every ``m != 0`` coefficient set to 0.
    """
    c = np.array(coeffs, dtype=float, copy=True)
    L = degree_from_n(c.shape[-1])
    _, m = lm_index(L)
    c[..., m != 0] = 0.0
    return c


def zonal_to_legendre(coeffs) -> np.ndarray:
    """For an axially symmetric function ``f(b) = g(b_z)``, the Legendre series of ``g``.

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients; the ``m != 0`` terms are ignored.

    Returns
    -------
    ndarray, shape (..., L + 1)
        ``a`` with ``g(t) = sum_l a_l P_l(t)`` (odd entries zero).
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    a = np.zeros(c.shape[:-1] + (L + 1,))
    for l in range(0, L + 1, 2):
        a[..., l] = c[..., l * (l - 1) // 2 + l] * math.sqrt((2 * l + 1) / (4 * math.pi))
    return a
