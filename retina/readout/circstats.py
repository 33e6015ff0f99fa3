"""Circular statistics for headings and orientation trials.

Conventions (owned here)
------------------------
- Angles at the public boundary are in degrees; compass directions are measured clockwise from
  north (the yaw convention of ``retina.eye.pose``), but every statistic here is rotation
  invariant, so any zero and sense work as long as they are used consistently.
- Returned mean directions lie in ``[0, 360)`` degrees; signed differences lie in ``(-180, 180]``.
- *Axial* data (a direction and its opposite are the same observation, as when a decoder cannot
  tell ``psi`` from ``psi + 180``) are analysed by angle doubling: the statistics are computed on
  ``2 theta`` and the mean direction is halved back (so it lies in ``[0, 180)``); ``r`` is the mean
  vector length of the doubled angles (Batschelet 1981, ch. 1.3; Zar 2010, section 26.7).
- Mean vector: ``C = sum w cos(theta)``, ``S = sum w sin(theta)``, ``R = sqrt(C^2 + S^2)``,
  ``r = R / n`` (Zar 2010, eqs. 26.4-26.9).
- Circular standard deviation ``s0 = sqrt(-2 ln r)`` (Zar 2010, eq. 26.21; the same definition as
  ``scipy.stats.circstd``), angular deviation ``s = sqrt(2 (1 - r))`` (Zar 2010, eq. 26.20), both
  returned in degrees.
- Rayleigh test of uniformity against a unimodal alternative: ``z = R^2 / n`` with Zar's
  approximation ``p = exp(sqrt(1 + 4 n + 4 (n^2 - R^2)) - (1 + 2 n))`` (Zar 2010, eq. 27.4).
- V-test (modified Rayleigh test) against an expected direction ``mu0``: ``V = R cos(mean - mu0)``,
  ``u = V sqrt(2 / n)`` (Zar 2010, section 27.1(c)).  ``p = P(V' >= V)`` under the null of
  uniform directions, computed from the exact small-sample distribution (:func:`v_test_p`), the
  distribution whose quantiles Zar (2010) Appendix Table B.35 lists as critical values of ``u``
  (n = 8 and up; this module also covers n < 8).  The standard normal tail ``P(U > u)`` is its
  large-sample limit and is mildly anti-conservative below about n = 10 (n = 6, u = 2.33: normal
  0.0099, exact 0.0081).

Derivation of the exact V-test null (used by :func:`v_test_p`)
---------------------------------------------------------------
Under uniformity ``V = sum_i cos(theta_i - mu0)`` is a sum of ``n`` independent copies of
``cos(Theta)``, ``Theta`` uniform, whose characteristic function is ``E exp(i t cos Theta) =
J0(t)`` (the integral representation of the Bessel function ``J0``); so ``V`` has characteristic
function ``J0(t)^n`` and support ``[-n, n]``.  A density supported inside one period of length
``L > 2 n`` equals its Fourier series there: ``f(x) = (1 / L) sum_k J0(t_k)^n exp(-i t_k x)`` with
``t_k = 2 pi k / L``, for ``|x| <= n``.  Integrating from ``v`` to ``n``:

    P(V >= v) = (n - v) / L + (2 / L) sum_{k >= 1} J0(t_k)^n (sin(t_k n) - sin(t_k v)) / t_k.

The terms fall as ``k^(-1 - n/2)``; the series is summed to ``K`` terms (``L = 2 n + 2``).  For
n = 1 the tail is ``arccos(v) / pi`` and for n = 2 one quadrature over the first angle of
``arccos(v - cos a) / pi``, both exact.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from retina.errors import InputError

__all__ = [
    "MeanVector",
    "RayleighResult",
    "VTestResult",
    "wrap180",
    "wrap360",
    "circular_difference",
    "mean_vector",
    "circular_std",
    "angular_deviation",
    "rayleigh_test",
    "rayleigh_p",
    "v_test",
    "v_test_p",
    "von_mises_deg",
]


def _angles(angles_deg, name: str = "angles_deg") -> np.ndarray:
    a = np.asarray(angles_deg, dtype=float).ravel()
    if a.size == 0:
        raise InputError("expected at least one angle (degrees), got none", key=name)
    if not np.all(np.isfinite(a)):
        raise InputError("expected finite angles in degrees, got NaN or infinity", key=name)
    return a


def wrap360(angles_deg):
    """Wrap angles (degrees) into ``[0, 360)``.

    Parameters
    ----------
    angles_deg : array_like, any shape
        Angles in degrees.

    Returns
    -------
    ndarray or float
        Same shape, in ``[0, 360)``.
    """
    return np.mod(angles_deg, 360.0)


def wrap180(angles_deg):
    """Wrap angles (degrees) into ``(-180, 180]``.

    Parameters
    ----------
    angles_deg : array_like, any shape
        Angles in degrees.

    Returns
    -------
    ndarray
        Same shape, in ``(-180, 180]`` (-180 maps to 180).
    """
    a = np.mod(np.asarray(angles_deg, dtype=float) + 180.0, 360.0) - 180.0
    return np.where(a == -180.0, 180.0, a)


def circular_difference(a_deg, b_deg, *, axial: bool = False):
    """Signed smallest difference ``a - b`` in degrees, in ``(-180, 180]``.

    Parameters
    ----------
    a_deg, b_deg : array_like
        Angles in degrees (broadcast against each other).
    axial : bool
        Directions 180 deg apart are the same; the result then lies in ``(-90, 90]``.

    Returns
    -------
    ndarray
        The broadcast shape, degrees.
    """
    if axial:
        return wrap180(2.0 * (np.asarray(a_deg, float) - np.asarray(b_deg, float))) / 2.0
    return wrap180(np.asarray(a_deg, float) - np.asarray(b_deg, float))


@dataclass(frozen=True)
class MeanVector:
    """The mean vector of a sample of directions.

    Attributes
    ----------
    mean_deg : float
        Mean direction in degrees, in ``[0, 360)`` (``[0, 180)`` for axial data); NaN when ``R = 0``.
    r : float
        Mean vector length, 0..1 (of the doubled angles for axial data).
    R : float
        Resultant length ``r * n`` (weighted sum for weighted data).
    n : float
        Sample size (sum of weights).
    axial : bool
        Whether the angles were doubled.
    """

    mean_deg: float
    r: float
    R: float
    n: float
    axial: bool = False


def mean_vector(angles_deg, *, weights=None, axial: bool = False) -> MeanVector:
    """Mean direction and mean vector length of angles (degrees).

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Directions in degrees.
    weights : array_like, shape (n,), optional
        Non-negative weights (frequencies); default all ones.
    axial : bool
        Treat the data as axial (angle doubling, see the module docstring).

    Returns
    -------
    MeanVector
        ``mean_deg`` (NaN when the resultant vanishes; in ``[0, 180)`` for axial data), ``r`` in
        ``[0, 1]``, resultant length ``R``, total weight ``n`` and ``axial``.

    Raises
    ------
    InputError
        Key ``weights``, for weights of the wrong shape, negative or not finite.
    """
    a = np.deg2rad(_angles(angles_deg))
    if axial:
        a = 2.0 * a
    if weights is None:
        w = np.ones_like(a)
    else:
        w = np.asarray(weights, dtype=float).ravel()
        if w.shape != a.shape or np.any(w < 0) or not np.all(np.isfinite(w)):
            raise InputError(f"expected {a.size} finite non-negative weights, got shape {w.shape}",
                             key="weights")
    n = float(w.sum())
    c = float(np.sum(w * np.cos(a)))
    s = float(np.sum(w * np.sin(a)))
    R = float(np.hypot(c, s))
    r = R / n if n > 0 else 0.0
    if R <= 1e-12 * max(n, 1.0):
        mean = float("nan")
    else:
        mean = float(np.rad2deg(np.arctan2(s, c)) % 360.0)
        if axial:
            mean = (mean / 2.0) % 180.0
    return MeanVector(mean_deg=mean, r=min(r, 1.0), R=R, n=n, axial=axial)


def circular_std(angles_deg, *, axial: bool = False) -> float:
    """Circular standard deviation ``s0 = sqrt(-2 ln r)`` in degrees (Zar 2010, eq. 26.21).

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Directions in degrees.
    axial : bool
        ``r`` is then of the doubled angles and the result is halved back to the axis scale.

    Returns
    -------
    float
        Degrees; infinite when ``r = 0``.
    """
    r = mean_vector(angles_deg, axial=axial).r
    if r <= 0.0:
        return float("inf")
    s0 = float(np.rad2deg(np.sqrt(max(-2.0 * np.log(r), 0.0))))
    return s0 / 2.0 if axial else s0


def angular_deviation(angles_deg, *, axial: bool = False) -> float:
    """Angular deviation ``s = sqrt(2 (1 - r))`` in degrees (Zar 2010, eq. 26.20).

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Directions in degrees.
    axial : bool
        ``r`` is then of the doubled angles and the result is halved back to the axis scale.

    Returns
    -------
    float
        Degrees, between 0 and ``sqrt(2)`` rad expressed in degrees (81.03, halved for axial data).
    """
    r = mean_vector(angles_deg, axial=axial).r
    s = float(np.rad2deg(np.sqrt(2.0 * (1.0 - r))))
    return s / 2.0 if axial else s


def rayleigh_p(n: float, R: float) -> float:
    """Zar's approximation to the Rayleigh test probability (Zar 2010, eq. 27.4), clipped to [0, 1].

    ``p = exp(sqrt(1 + 4 n + 4 (n^2 - R^2)) - (1 + 2 n))``.

    Parameters
    ----------
    n : float
        Sample size (total weight).
    R : float
        Resultant length, ``n r``.

    Returns
    -------
    float
        Probability of a resultant this long from uniformly distributed directions.
    """
    p = np.exp(np.sqrt(1.0 + 4.0 * n + 4.0 * (n * n - R * R)) - (1.0 + 2.0 * n))
    return float(min(max(p, 0.0), 1.0))


@dataclass(frozen=True)
class RayleighResult:
    """Rayleigh test of circular uniformity.

    Attributes
    ----------
    n : int
    mean_deg : float
        Sample mean direction (degrees).
    r, R : float
        Mean vector length and resultant length.
    z : float
        Rayleigh's ``z = R^2 / n``.
    p : float
        Probability under uniformity (Zar's approximation).
    axial : bool
    """

    n: int
    mean_deg: float
    r: float
    R: float
    z: float
    p: float
    axial: bool = False


def rayleigh_test(angles_deg, *, axial: bool = False) -> RayleighResult:
    """Rayleigh test (Zar 2010, section 27.1): is there a preferred direction (or axis)?

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Directions in degrees.
    axial : bool
        Test for a preferred axis (doubled angles).

    Returns
    -------
    RayleighResult
        ``n``, ``mean_deg``, ``r``, ``R``, ``z = R^2 / n`` and ``p`` (:func:`rayleigh_p`).
    """
    mv = mean_vector(angles_deg, axial=axial)
    n = int(round(mv.n))
    z = mv.R ** 2 / mv.n
    return RayleighResult(n=n, mean_deg=mv.mean_deg, r=mv.r, R=mv.R, z=z, p=rayleigh_p(mv.n, mv.R),
                          axial=axial)


@dataclass(frozen=True)
class VTestResult:
    """V-test against an expected direction.

    Attributes
    ----------
    n : int
    expected_deg : float
    mean_deg, r : float
        Sample mean direction and mean vector length.
    V : float
        ``R cos(mean - expected)``.
    u : float
        ``V sqrt(2 / n)``.
    p : float
        One-sided normal tail ``P(U > u)``.
    axial : bool
    """

    n: int
    expected_deg: float
    mean_deg: float
    r: float
    V: float
    u: float
    p: float
    axial: bool = False


def v_test_p(V: float, n: int) -> float:
    """Exact upper-tail probability ``P(V' >= V)`` of the V statistic for ``n`` uniform directions.

    Parameters
    ----------
    V : float
        ``R cos(mean - mu0)``, in ``[-n, n]``.
    n : int
        Sample size (>= 1).

    Returns
    -------
    float
        The p value (module docstring, "Derivation of the exact V-test null").
    """
    from scipy import integrate, special

    n = int(n)
    if n < 1:
        raise InputError(f"expected a sample size >= 1, got {n}", key="n")
    v = float(V)
    if v >= n:
        return 0.0
    if v <= -n:
        return 1.0
    if n == 1:
        return float(np.arccos(np.clip(v, -1.0, 1.0)) / np.pi)
    if n == 2:
        val, _ = integrate.quad(lambda a: np.arccos(np.clip(v - np.cos(a), -1.0, 1.0)), 0.0, np.pi,
                                limit=200, epsabs=1e-13)
        return float(np.clip(val / np.pi**2, 0.0, 1.0))
    L = 2.0 * n + 2.0
    K = 200_000 if n < 6 else 20_000
    t = 2.0 * np.pi * np.arange(1, K + 1) / L
    p = (n - v) / L + (2.0 / L) * float(np.sum(special.j0(t) ** n * (np.sin(t * n) - np.sin(t * v)) / t))
    return float(np.clip(p, 0.0, 1.0))


def v_test(angles_deg, expected_deg: float, *, axial: bool = False) -> VTestResult:
    """V-test (Zar 2010, section 27.1(c)): clustered around ``expected_deg``?

    For axial data both the sample and the expected direction are doubled.  ``p`` is exact for
    any ``n`` (:func:`v_test_p`); with weights (grouped data) the rounded total weight is ``n``.

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Directions in degrees.
    expected_deg : float
        The expected direction, degrees (finite).
    axial : bool
        Treat the data as axial.

    Returns
    -------
    VTestResult
        ``V = R cos(mean - expected)``, ``u = V sqrt(2 / n)``, the exact one-sided ``p`` and the
        sample's ``n``, ``mean_deg``, ``r``.

    Raises
    ------
    InputError
        Key ``expected_deg``, for a non-finite expected direction.
    """
    mv = mean_vector(angles_deg, axial=axial)
    if not np.isfinite(expected_deg):
        raise InputError("expected a finite expected direction in degrees", key="expected_deg")
    k = 2.0 if axial else 1.0
    if np.isnan(mv.mean_deg):
        V = 0.0
    else:
        V = mv.R * float(np.cos(np.deg2rad(k * (mv.mean_deg - expected_deg))))
    u = V * np.sqrt(2.0 / mv.n)
    p = v_test_p(V, max(int(round(mv.n)), 1))
    return VTestResult(n=int(round(mv.n)), expected_deg=float(expected_deg) % 360.0,
                       mean_deg=mv.mean_deg, r=mv.r, V=V, u=float(u), p=p, axial=axial)


def von_mises_deg(mu_deg, kappa: float, size, rng: np.random.Generator) -> np.ndarray:
    """Von Mises draws in degrees around ``mu_deg`` with concentration ``kappa``.

    Parameters
    ----------
    mu_deg : array_like
        Mean direction(s), degrees (broadcast to ``size``).
    kappa : float
        Concentration, ``>= 0``: 0 gives uniform directions, ``inf`` returns ``mu_deg`` (no noise).
    size : int or tuple of int
        Output shape.
    rng : numpy.random.Generator
        Source of the draws.

    Returns
    -------
    ndarray, shape size
        Directions in ``[0, 360)``.

    Raises
    ------
    InputError
        Key ``kappa``, for a negative or NaN concentration.
    """
    if kappa < 0 or np.isnan(kappa):
        raise InputError(f"expected a concentration kappa >= 0, got {kappa}", key="kappa")
    mu = np.broadcast_to(np.asarray(mu_deg, dtype=float), size)
    if np.isinf(kappa):
        return wrap360(np.array(mu, dtype=float))
    draw = rng.vonmises(0.0, kappa, size=size)
    return wrap360(mu + np.rad2deg(draw))
