"""Points on the sphere: Lebedev quadrature rules, Fibonacci lattices, projection onto the harmonics.

Lebedev rules come from :func:`scipy.integrate.lebedev_rule` (weights sum to 4 pi), exact for
polynomials up to the rule's order.  Projecting a degree-``L`` function needs a rule exact to
``2 L`` (:func:`grid_for_degree`).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from scipy.integrate import lebedev_rule

from retina.sphere.harmonics import _check_degree, real_sh

__all__ = ["SphereGrid", "LEBEDEV_ORDERS", "lebedev_orders", "lebedev", "grid_for_degree", "fibonacci",
           "fit_even"]

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
