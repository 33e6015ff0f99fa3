"""Exact rotation of even-degree coefficient vectors (real Wigner matrices, many rotations at once).

Rotations are active: rotating a function ``f`` by ``R`` gives ``(R f)(b) = f(R^-1 b)``, and
:func:`rotate` maps coefficients of ``f`` to those of ``R f`` exactly (block-diagonal real Wigner
matrices, built through the z-y-z Euler factorisation ``D(R) = Z(alpha) J Z(beta) J^T Z(gamma)``
where ``J`` is the Wigner block of the fixed rotation taking the z axis to the y axis, computed once
per degree by exact quadrature).
"""

from __future__ import annotations

import functools
import math

import numba
import numpy as np
from scipy.spatial.transform import Rotation

from retina.sphere.grids import grid_for_degree
from retina.sphere.harmonics import degree_from_n, real_sh

__all__ = ["rotate"]


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
