"""Exact averages over the orientation laws of :mod:`retina.eye.ordering`: order parameters,
quadrature rules in the polar angle, twist factors and the average Wigner matrix of a swing.

Everything here is deterministic and cached where it is reused per degree; the models that use it
are in :mod:`retina.eye.order_laws`, their random draws in :mod:`retina.eye.order_samplers`.
"""

from __future__ import annotations

import functools
import math
import numbers

import numpy as np
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError

__all__ = ["order_parameter_from_kappa", "kappa_from_order_parameter", "vmf_cos_rule", "cone_rule",
           "twist_factors", "swing_diagonal", "girdle_order_parameter", "girdle_cos_rule", "plane_rows",
           "is_real", "check_concentration", "resolve_twist", "abs_m"]


def is_real(v) -> bool:
    """Whether ``v`` is a real number (Python or numpy), not a bool.

    Parameters
    ----------
    v : object
        Any value.

    Returns
    -------
    bool
    """
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def order_parameter_from_kappa(kappa: float) -> float:
    """The order parameter of the vMF polar distribution.

    ``<P2> = I_{5/2}(kappa) / I_{1/2}(kappa) = 1 - 3 (coth kappa - 1/kappa) / kappa``.

    Parameters
    ----------
    kappa : float
        Concentration, ``>= 0`` (``inf`` allowed).

    Returns
    -------
    float
        0 at kappa = 0, 1 at kappa = inf (``retina.sphere.vmf_moments``, stable for any kappa).
    """
    return float(sphere.vmf_moments(float(kappa), 2)[2])


def kappa_from_order_parameter(p2: float) -> float:
    """The vMF concentration with a given order parameter ``<P2>``.

    Parameters
    ----------
    p2 : float
        Order parameter in ``[0, 1]`` (a vMF cone cannot be oblate).

    Returns
    -------
    float
        ``kappa``: 0 for ``p2 = 0``, inf for ``p2 = 1``; the asymptotic inverse of
        ``1 - 3/kappa + 3/kappa^2`` above ``1 - 3e-6``, else a bracketed root.

    Raises
    ------
    InputError
        Key ``ordering.order_parameter``.
    """
    from scipy.optimize import brentq

    if not is_real(p2) or not math.isfinite(p2) or not 0 <= p2 <= 1:
        raise InputError(f"expected an order parameter <P2> in [0, 1] (a vMF cone cannot be "
                         f"oblate), got {p2!r}", key="ordering.order_parameter")
    if p2 == 0:
        return 0.0
    if p2 == 1:
        return math.inf
    if p2 > 1 - 3e-6:  # asymptotic <P2> = 1 - 3/kappa + 3/kappa^2 (kappa > 1e6)
        return 1.5 * (1.0 + math.sqrt(1.0 - 4.0 * (1.0 - p2) / 3.0)) / (1.0 - p2)
    f = lambda lk: order_parameter_from_kappa(math.exp(lk)) - p2  # noqa: E731
    return math.exp(brentq(f, math.log(1e-9), math.log(2e6), xtol=1e-13, rtol=1e-13))


@functools.lru_cache(maxsize=64)
def vmf_cos_rule(kappa: float, L: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes ``t = cos beta`` and weights (summing to 1) integrating ``p(t) q(t)`` over [-1, 1]
    for the vMF polar density ``p`` and polynomials ``q`` of degree ``<= L``.

    Large ``kappa`` (``> 30`` and ``2 kappa`` beyond 1.5 times the largest Laguerre node): with
    ``s = kappa (1 - t)``, ``p dt = e^-s ds / (1 - e^-2 kappa)`` on ``[0, 2 kappa]``;
    Gauss-Laguerre with ``L/2 + 2`` nodes is exact for the integral to infinity, and the tail
    beyond ``2 kappa`` is below ``e^-60 2^L``.  Otherwise Gauss-Legendre with
    ``L + 48 + 1.5 kappa`` nodes on ``p q`` (``p`` is entire; converged to rounding).
    """
    if kappa == 0:
        x, w = np.polynomial.legendre.leggauss(L // 2 + 2)
        return x, w / 2.0
    s, w = np.polynomial.laguerre.laggauss(L // 2 + 2)
    if kappa > 30 and 2.0 * kappa > 1.5 * s[-1]:
        return 1.0 - s / kappa, w / -np.expm1(-2.0 * kappa)
    n = L + 48 + int(1.5 * kappa)
    x, w = np.polynomial.legendre.leggauss(n)
    w = w * np.exp(kappa * (x - 1.0))
    return x, w / w.sum()  # the density integrates to 1; renormalising removes ~1e-13 rounding


@functools.lru_cache(maxsize=64)
def cone_rule(kappa: float, L: int) -> tuple[Rotation, np.ndarray]:
    """Rotations and weights of the cone average on degree-``L`` functions: ``2 L + 1`` equally
    spaced alpha (exact: the integrand is a trigonometric polynomial of degree <= 2 L in alpha)
    times the cos-beta rule :func:`vmf_cos_rule` (the alpha average is a polynomial of degree
    <= L in cos beta)."""
    t, wt = vmf_cos_rule(kappa, L)
    na = 2 * L + 1
    alpha = 2 * math.pi * np.arange(na) / na
    A, T = np.meshgrid(alpha, t, indexing="ij")
    B = np.arccos(T)
    rot = Rotation.from_euler("ZYZ", np.stack([A.ravel(), B.ravel(), -A.ravel()], axis=-1))
    w = (np.broadcast_to(wt[None, :], A.shape) / na).ravel()
    return rot, w


def check_concentration(v, key: str) -> float:
    """Validate a concentration.

    Parameters
    ----------
    v : float
        The value (``>= 0``; ``inf`` means no disorder).
    key : str
        Dotted key named in the error.

    Returns
    -------
    float

    Raises
    ------
    InputError
        For a non-number, NaN or a negative value.
    """
    if not is_real(v) or math.isnan(v) or v < 0:
        raise InputError(f"expected a concentration >= 0 (inf: no disorder), got {v!r}", key=key)
    return float(v)


def resolve_twist(twist, kappa: float, key: str = "ordering.twist") -> float:
    """The von Mises concentration of a twist setting.

    Parameters
    ----------
    twist : {"tied", "free", "fixed"} or float
        ``"tied"`` -> ``kappa``, ``"free"`` -> 0, ``"fixed"`` -> inf, a number ``>= 0`` -> itself.
    kappa : float
        The tilt concentration (for ``"tied"``).
    key : str
        Dotted key named in the error.

    Returns
    -------
    float

    Raises
    ------
    InputError
        For an unknown word or a bad number.
    """
    if isinstance(twist, str):
        table = {"tied": kappa, "free": 0.0, "fixed": math.inf}
        if twist not in table:
            raise InputError(f"expected 'tied', 'free', 'fixed' or a concentration >= 0, got "
                             f"{twist!r}", key=key)
        return float(table[twist])
    return check_concentration(twist, key)


def twist_factors(kappa: float, L: int) -> np.ndarray:
    """``A_m = E[cos(m delta)] = I_m(kappa) / I_0(kappa)``, m = 0..L, for a twist ``delta`` with the
    von Mises density ``exp(kappa cos delta) / (2 pi I_0(kappa))`` (``E[sin(m delta)] = 0``).

    ``kappa = 0`` is a free twist (``A_m = 0`` for m > 0, exactly); ``kappa = inf`` a fixed one
    (all ones).  Above :data:`TWIST_ASYMPTOTIC_FROM` the ratio comes from the large-argument
    expansion of both Bessel functions (``A_1 = 1 - 1/(2 kappa) - 1/(8 kappa^2) + ...``), so every
    ``kappa`` up to inf is finite.  A twist by ``delta`` about ``z`` turns the degree-l pair ``(m, -m)`` by ``m
    delta``, so its average scales the pair by ``A_|m|``.

    Parameters
    ----------
    kappa : float
        Von Mises concentration, ``>= 0`` (``inf`` allowed).
    L : int
        Largest order ``m``.

    Returns
    -------
    ndarray, shape (L + 1,)
    """
    from scipy.special import ive

    m = np.arange(L + 1)
    if math.isinf(kappa):
        return np.ones(L + 1)
    if kappa == 0:
        return (m == 0).astype(float)
    if kappa > TWIST_ASYMPTOTIC_FROM:
        return np.array([_hankel_sum(mm, kappa) for mm in m]) / _hankel_sum(0, kappa)
    return ive(m, kappa) / ive(0, kappa)


#: Above this concentration :func:`twist_factors` uses the large-argument expansion (scipy's scaled
#: Bessel functions return NaN beyond about 1e10).
TWIST_ASYMPTOTIC_FROM = 1e8


def _hankel_sum(nu: int, z: float) -> float:
    """``I_nu(z) sqrt(2 pi z) e^-z`` by the large-argument expansion (Abramowitz and Stegun 9.7.1,
    from memory): ``sum_j (-1)^j prod_{i <= j} (4 nu^2 - (2i - 1)^2) / (j! (8 z)^j)``.  The
    neglected ``e^-2z`` part is nil for ``z > 1e8``; the sum stops when a term falls below 1e-18
    (a handful of terms while ``nu^2 << z``)."""
    mu = 4.0 * nu * nu
    term, total = 1.0, 1.0
    for j in range(1, 64):
        term *= -(mu - (2 * j - 1) ** 2) / (8.0 * j * z)
        total += term
        if abs(term) < 1e-18:
            break
    return total


def abs_m(L: int) -> tuple[np.ndarray, np.ndarray]:
    """Degree and absolute order of each even-degree coefficient.

    Parameters
    ----------
    L : int
        Even maximum degree.

    Returns
    -------
    l, abs_m : ndarray of int, shape (K,)
    """
    l, m = sphere.lm_index(L)
    return l, np.abs(m)


@functools.lru_cache(maxsize=64)
def swing_diagonal(kappa: float, L: int) -> np.ndarray:
    """The average of the Wigner matrix of a no-twist vMF swing, per coefficient ``(K,)``.

    For ``Q = Rz(phi) Ry(beta) Rz(-phi)`` with ``phi`` uniform, the average of ``D^l(Q)`` is
    diagonal in the real basis with entries ``E[d^l_mm(beta)]`` (the ``phi`` average of
    ``Rz(phi) X Rz(-phi)`` keeps the part of ``X`` that commutes with rotations about ``z``; the
    ``(m, -m)`` pair of ``d^l(beta)`` is not mixed by it, and ``d^l_{-m,-m} = d^l_mm``), where
    ``d^l_mm(beta) = ((1 + t) / 2)^m P^(0, 2m)_{l-m}(t)``, ``t = cos beta``, m >= 0 (Jacobi
    polynomial; Edmonds, Angular Momentum in Quantum Mechanics, 1957, eq. 4.1.23, from memory).
    A polynomial of degree ``l`` in ``t``, so :func:`vmf_cos_rule` averages it exactly; the
    ``m = 0`` entries are the Legendre moments ``I_{l+1/2}(kappa) / I_{1/2}(kappa)`` in closed form.
    """
    from scipy.special import eval_jacobi

    l, am = abs_m(L)
    out = np.empty(len(l))
    if math.isinf(kappa):
        out[:] = 1.0
        return out
    lam = sphere.vmf_moments(kappa, L)
    t, w = vmf_cos_rule(kappa, L)
    for i, (ll, mm) in enumerate(zip(l, am)):
        if mm == 0:
            out[i] = lam[ll]
        else:
            out[i] = w @ (((1.0 + t) / 2.0) ** mm * eval_jacobi(ll - mm, 0, 2 * mm, t))
    out.setflags(write=False)
    return out


def girdle_order_parameter(kappa: float) -> float:
    """``<P2(cos theta)>`` of a direction with the Watson girdle density ``exp(-kappa cos^2 theta)``.

    Parameters
    ----------
    kappa : float
        Girdle concentration, ``>= 0`` (``inf`` allowed).

    Returns
    -------
    float
        0 at kappa = 0, -1/2 at kappa = inf (the direction lies in the plane).
    """
    if math.isinf(kappa):
        return -0.5
    t, w = girdle_cos_rule(float(kappa), 2)
    return float(w @ (1.5 * t * t - 0.5))


@functools.lru_cache(maxsize=64)
def girdle_cos_rule(kappa: float, L: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes ``t = cos theta`` and weights (summing to 1) integrating ``p(t) q(t)`` over [-1, 1]
    for the Watson girdle density ``p(t) = exp(-kappa t^2) / Z`` and polynomials ``q`` of degree
    ``<= L``; the rule is symmetric (``t -> -t``).

    ``kappa = inf``: the single node ``t = 0``.  Large ``kappa`` (``> 50`` with every node inside
    [-1, 1]): Gauss-Hermite with ``L/2 + 2`` nodes, ``t = s / sqrt(kappa)``, exact for the integral
    over the whole line, whose part beyond ``|t| = 1`` is below ``e^-50``.  Otherwise
    Gauss-Legendre with ``L + 64 + 2 kappa`` nodes on ``p q`` (``p`` is entire; converged to
    rounding).
    """
    if math.isinf(kappa):
        return np.zeros(1), np.ones(1)
    if kappa == 0:
        x, w = np.polynomial.legendre.leggauss(L // 2 + 2)
        return x, w / 2.0
    if kappa > 50:
        s, w = np.polynomial.hermite.hermgauss(L // 2 + 2)
        t = s / math.sqrt(kappa)
        if np.all(np.abs(t) < 0.9):
            return t, w / w.sum()
    n = L + 64 + int(2 * kappa)
    x, w = np.polynomial.legendre.leggauss(n)
    w = w * np.exp(-kappa * x * x)
    return x, w / w.sum()



@functools.lru_cache(maxsize=64)
def plane_rows(kappa: float, L: int) -> np.ndarray:
    """``(K,)``: for each degree the row ``sqrt(4 pi / (2l + 1)) E[Y_lm(-sin theta, 0, cos
    theta)]`` over the girdle law of ``t = cos theta`` (addition theorem: the ``m = 0`` output
    coefficient of a rotation ``R`` is ``sqrt(4 pi / (2l + 1)) sum_m Y_lm(R^-1 z) c_lm``)."""
    t, w = girdle_cos_rule(kappa, L)
    dirs = np.stack([-np.sqrt(np.clip(1.0 - t * t, 0.0, 1.0)), np.zeros_like(t), t], axis=-1)
    row = w @ sphere.real_sh(L, dirs)
    l, _ = sphere.lm_index(L)
    row = row * np.sqrt(4 * math.pi / (2 * l + 1))
    row.setflags(write=False)
    return row

