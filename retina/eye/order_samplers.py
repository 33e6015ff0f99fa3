"""Seeded random draws for the orientation laws of :mod:`retina.eye.ordering` (finite-molecule,
quenched receptors): the generator, counts, identity rotations and the inverse-CDF draws of the
polar angle and the twist.

Every function takes a ``numpy.random.Generator`` and draws in a fixed order, so a seed gives the
same molecules on every run and platform (numpy's generators are stable across versions).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial.transform import Rotation

from retina.errors import InputError

__all__ = ["as_generator", "check_count", "identity_rotations", "vmf_cos_sample", "twist_sample",
           "girdle_cos_sample"]


def as_generator(rng) -> np.random.Generator:
    """A ``numpy.random.Generator`` from a Generator, an integer seed or ``None``.

    Parameters
    ----------
    rng : numpy.random.Generator, int or None
        A generator is returned as it is; an integer seeds a new one; ``None`` takes fresh entropy.

    Returns
    -------
    numpy.random.Generator

    Raises
    ------
    InputError
        Key ``seed``, for anything else.
    """
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or isinstance(rng, (int, np.integer)):
        return np.random.default_rng(rng)
    raise InputError(f"expected a numpy Generator or an integer seed, got {type(rng).__name__}",
                     key="seed")


def check_count(n) -> int:
    """Validate a number of molecules to draw.

    Parameters
    ----------
    n : int
        Whole number ``>= 0`` (Python or numpy integer).

    Returns
    -------
    int

    Raises
    ------
    InputError
        Key ``n_molecules``.
    """
    if not isinstance(n, (int, np.integer)) or n < 0:
        raise InputError(f"expected a non-negative integer number of molecules, got {n!r}",
                         key="n_molecules")
    return int(n)


def identity_rotations(n: int) -> Rotation:
    """``n`` identity rotations.

    Parameters
    ----------
    n : int
        Number of rotations (0 allowed).

    Returns
    -------
    scipy.spatial.transform.Rotation
        Of length ``n``.
    """
    return Rotation.from_quat(np.tile([0.0, 0.0, 0.0, 1.0], (n, 1)))


def vmf_cos_sample(k: float, g: np.random.Generator, n: int) -> np.ndarray:
    """Draws of ``t = cos beta`` from the von Mises-Fisher polar density, by the inverse CDF.

    The density is ``k exp(k (t - 1)) / (1 - exp(-2 k))`` on ``[-1, 1]``; with ``xi`` uniform,
    ``t = 1 + ln(xi + (1 - xi) exp(-2 k)) / k`` (written so that it stays exact for large ``k``).

    Parameters
    ----------
    k : float
        Concentration, ``>= 0``; ``inf`` gives ``t = 1`` without drawing, 0 a uniform ``t``.
    g : numpy.random.Generator
        Source of the ``n`` uniform numbers.
    n : int
        Number of draws.

    Returns
    -------
    ndarray, shape (n,)
        Values in ``[-1, 1]``.
    """
    if math.isinf(k):
        return np.ones(n)
    xi = g.random(n)
    if k == 0:
        return 2.0 * xi - 1.0
    return 1.0 + np.log(xi + (1.0 - xi) * math.exp(-2.0 * k)) / k  # stable for large kappa


def twist_sample(kt: float, g: np.random.Generator, n: int) -> np.ndarray:
    """Draws of a twist angle from the von Mises law ``exp(kt cos delta) / (2 pi I_0(kt))``.

    Parameters
    ----------
    kt : float
        Concentration, ``>= 0``; ``inf`` gives 0 without drawing, 0 a uniform angle.
    g : numpy.random.Generator
        Source of the draws (``Generator.vonmises`` for finite ``kt > 0``).
    n : int
        Number of draws.

    Returns
    -------
    ndarray, shape (n,)
        Angles in radians.
    """
    if math.isinf(kt):
        return np.zeros(n)
    if kt == 0:
        return g.uniform(0.0, 2 * math.pi, n)
    return g.vonmises(0.0, kt, n)


def girdle_cos_sample(k: float, g: np.random.Generator, n: int) -> np.ndarray:
    """Draws of ``t = cos theta`` from the Watson girdle density ``exp(-k t^2) / Z`` on ``[-1, 1]``.

    Inverse CDF: ``erf(sqrt(k) t)`` is uniform on ``[-erf(sqrt k), erf(sqrt k)]``.

    Parameters
    ----------
    k : float
        Girdle concentration, ``>= 0``; ``inf`` gives ``t = 0`` without drawing, below ``1e-12``
        a uniform ``t``.
    g : numpy.random.Generator
        Source of the ``n`` uniform numbers.
    n : int
        Number of draws.

    Returns
    -------
    ndarray, shape (n,)
        Values in ``[-1, 1]``.
    """
    from scipy.special import erf, erfinv

    if math.isinf(k):
        return np.zeros(n)
    u = g.uniform(-1.0, 1.0, n)
    if k < 1e-12:
        return u
    r = math.sqrt(k)
    return erfinv(u * erf(r)) / r
