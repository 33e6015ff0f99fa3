"""Molecular ordering inside a receptor: the orientation distribution of the molecular frame.

Conventions (owned here)
------------------------
An ordering model describes random rotations ``Q`` (molecule-to-receptor: ``v_receptor = Q
v_molecule``).  A molecule with yield function ``f`` (molecular frame) contributes ``f(Q^-1 b)``
for a field direction ``b`` in the receptor frame, i.e. the active rotation ``Q f`` of
:func:`retina.sphere.rotate`.  Each model offers two views of the same distribution:

- ``ensemble(coeffs)``: the receptor response ``E_Q[Q f]`` (annealed average), computed exactly on
  the even real-harmonic coefficients (``(K,)`` or ``(..., K)`` in, same shape out);
- ``sample(n, rng)``: ``n`` draws of ``Q`` (a scipy ``Rotation`` of length ``n``) from a
  ``numpy.random.Generator`` (an integer seeds a new generator), for finite-molecule (quenched)
  receptors.

Models:

- :class:`Aligned`: one fixed rotation (every molecule identical).
- :class:`FreeRotation`: ``Q = Rz(alpha) R0`` with ``alpha`` uniform on ``[0, 2 pi)`` (free rotation
  about the receptor axis); ``R0 = Ry(tilt) Rz(twist)`` puts the molecular ``z`` axis at the angle
  ``tilt`` to the receptor axis.  Ensemble: the m = 0 projection of ``R0 f`` (exact).
- :class:`Cone`: cone disorder of the ``z`` axis of the frame it acts in, ``Q = Rz(alpha) Ry(beta)
  Rz(-alpha)`` with ``alpha`` uniform and ``cos beta`` von Mises-Fisher distributed (density
  ``kappa exp(kappa (t - 1)) / (1 - exp(-2 kappa))`` on ``t = cos beta``): the swing that carries
  the ``z`` axis to a vMF-distributed direction ``u`` about it, with no twist about ``u``.  Given
  either the concentration ``kappa`` or the order parameter ``<P2> = E[P_2(cos beta)]``, solved
  for ``kappa`` (``<P2> = I_{5/2}(kappa) / I_{1/2}(kappa)``).  Ensemble: the full rotation average
  by quadrature (``2 L + 1`` equally spaced ``alpha``, exact for band-limited functions, times the
  ``cos beta`` rule :func:`vmf_cos_rule`, Gauss-Legendre or for large ``kappa`` Gauss-Laguerre
  with the vMF weight, converged to rounding at degree 16).  On the m = 0 part (functions
  axially symmetric about the cone axis) it equals the Funk-Hecke convolution with the vMF kernel,
  ``lambda_l = I_{l+1/2}(kappa) / I_{1/2}(kappa)`` (:meth:`Cone.ensemble_axial`); on m != 0 terms
  the swing average differs from a convolution.
- :class:`Isotropic`: uniformly random rotations (Haar); the response is the constant mean (no
  compass).
- :class:`Composite`: independent steps applied in order (the first acts first on the molecule):
  ``Q = Q_last ... Q_first``.  ``Composite(Cone(...), Aligned(...))`` spreads the molecular ``z``
  axis around its mean direction and then places the molecule; ``Composite(Aligned(...),
  Cone(...))`` jitters the whole placed molecule about the receptor axis.
"""

from __future__ import annotations

import functools
import math
import numbers
from dataclasses import dataclass, field

import numpy as np
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError


def _is_real(v) -> bool:
    """A real number (Python or numpy), not a bool."""
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


__all__ = ["Ordering", "Aligned", "FreeRotation", "Cone", "Isotropic", "Composite",
           "kappa_from_order_parameter", "order_parameter_from_kappa", "vmf_cos_rule",
           "as_generator"]


def as_generator(rng) -> np.random.Generator:
    """A ``numpy.random.Generator`` from a Generator, an integer seed or ``None`` (fresh
    entropy)."""
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or isinstance(rng, (int, np.integer)):
        return np.random.default_rng(rng)
    raise InputError(f"expected a numpy Generator or an integer seed, got {type(rng).__name__}",
                     key="seed")


def _count(n) -> int:
    if not isinstance(n, (int, np.integer)) or n < 0:
        raise InputError(f"expected a non-negative integer number of molecules, got {n!r}",
                         key="n_molecules")
    return int(n)


class Ordering:
    """Base class: subclasses implement :meth:`ensemble` and :meth:`sample`."""

    def ensemble(self, coeffs) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError

    def sample(self, n: int, rng=None) -> Rotation:  # pragma: no cover - interface
        raise NotImplementedError

    def then(self, other: "Ordering") -> "Composite":
        """This ordering followed by ``other`` (``Q = Q_other Q_self``)."""
        return Composite(self, other)


def _identity(n: int) -> Rotation:
    return Rotation.from_quat(np.tile([0.0, 0.0, 0.0, 1.0], (n, 1)))


@dataclass(frozen=True)
class Aligned(Ordering):
    """Every molecule in the same orientation ``rotation`` (molecule-to-receptor; identity by
    default)."""

    rotation: Rotation = field(default_factory=Rotation.identity)

    def __post_init__(self):
        if not isinstance(self.rotation, Rotation) or not self.rotation.single:
            raise InputError("expected one scipy Rotation", key="ordering.rotation")

    @classmethod
    def tilted(cls, tilt_deg: float, azimuth_deg: float = 0.0, twist_deg: float = 0.0) -> "Aligned":
        """Molecular ``z`` axis at polar angle ``tilt_deg`` and azimuth ``azimuth_deg`` in the
        receptor frame, after a twist ``twist_deg`` about its own axis:
        ``R = Rz(azimuth) Ry(tilt) Rz(twist)``."""
        return cls(Rotation.from_euler("ZYZ", [azimuth_deg, tilt_deg, twist_deg], degrees=True))

    def ensemble(self, coeffs) -> np.ndarray:
        return _rotate_any(coeffs, self.rotation)

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        return Rotation.from_quat(np.tile(self.rotation.as_quat(), (n, 1)))


def _rotate_any(coeffs, rotation: Rotation) -> np.ndarray:
    """``sphere.rotate`` of coefficients (K,) or (..., K) by one rotation."""
    c = np.asarray(coeffs, dtype=float)
    if c.ndim == 1:
        return sphere.rotate(c, rotation)
    flat = c.reshape(-1, c.shape[-1])
    out = sphere.rotate(flat, Rotation.from_quat(np.tile(rotation.as_quat(), (len(flat), 1))))
    return out.reshape(c.shape)


@dataclass(frozen=True)
class FreeRotation(Ordering):
    """Free rotation about the receptor axis with the molecular ``z`` axis at ``tilt_deg`` to it.

    ``Q = Rz(alpha) Rz(phi0) Ry(tilt) Rz(twist)``, ``alpha`` uniform.  ``twist_deg`` turns the
    molecule about its own ``z`` axis before tilting (matters for a non-axial molecule); the
    azimuth ``phi0`` is absorbed by ``alpha``.
    """

    tilt_deg: float = 0.0
    twist_deg: float = 0.0

    def __post_init__(self):
        for k in ("tilt_deg", "twist_deg"):
            v = getattr(self, k)
            if not _is_real(v) or not math.isfinite(v):
                raise InputError(f"expected a finite angle in degrees, got {v!r}",
                                 key=f"ordering.{k}")

    @property
    def base(self) -> Rotation:
        return Rotation.from_euler("ZYZ", [0.0, self.tilt_deg, self.twist_deg], degrees=True)

    def ensemble(self, coeffs) -> np.ndarray:
        return sphere.axial_average(_rotate_any(coeffs, self.base))

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        g = as_generator(rng)
        alpha = g.uniform(0.0, 2 * math.pi, n)
        return Rotation.from_euler("z", alpha[:, None]) * self.base


def order_parameter_from_kappa(kappa: float) -> float:
    """``<P2> = I_{5/2}(kappa) / I_{1/2}(kappa) = 1 - 3 (coth kappa - 1/kappa) / kappa`` for the
    vMF polar distribution (0 at kappa = 0, 1 at kappa = inf)."""
    return float(sphere.vmf_moments(float(kappa), 2)[2])


def kappa_from_order_parameter(p2: float) -> float:
    """The vMF concentration with ``<P2> = p2``, for ``0 <= p2 <= 1`` (0 -> 0, 1 -> inf)."""
    from scipy.optimize import brentq

    if not _is_real(p2) or not math.isfinite(p2) or not 0 <= p2 <= 1:
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


@dataclass(frozen=True)
class Cone(Ordering):
    """Cone (vMF) disorder of the ``z`` axis of the frame this step acts in (see the module
    docstring).  Give ``kappa`` (>= 0, ``inf`` = no disorder) or ``order_parameter`` (in [0, 1])."""

    kappa: float | None = None
    order_parameter: float | None = None

    def __post_init__(self):
        if (self.kappa is None) == (self.order_parameter is None):
            raise InputError("give exactly one of kappa or order_parameter", key="ordering.kappa")
        if self.kappa is not None:
            k = self.kappa
            if not _is_real(k) or math.isnan(k) or k < 0:
                raise InputError(f"expected a concentration kappa >= 0, got {k!r}",
                                 key="ordering.kappa")
        else:
            object.__setattr__(self, "kappa", kappa_from_order_parameter(self.order_parameter))

    @property
    def p2(self) -> float:
        """The order parameter ``<P2>``."""
        return order_parameter_from_kappa(self.kappa)

    def moments(self, L: int) -> np.ndarray:
        """Funk-Hecke factors ``lambda_l``, l = 0..L, of the vMF kernel."""
        return sphere.vmf_moments(float(self.kappa), L)

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if math.isinf(self.kappa):
            return c.copy()
        L = sphere.degree_from_n(c.shape[-1])
        rot, w = _cone_rule(float(self.kappa), L)
        flat = c.reshape(-1, c.shape[-1])
        out = np.stack([w @ sphere.rotate(v, rot) for v in flat])
        return out.reshape(c.shape)

    def ensemble_axial(self, coeffs) -> np.ndarray:
        """Funk-Hecke form, exact for functions axially symmetric about ``z`` (m = 0 only); the
        m != 0 terms are dropped."""
        c = sphere.axial_average(coeffs)
        L = sphere.degree_from_n(c.shape[-1])
        return sphere.funk_hecke(c, self.moments(L))

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        g = as_generator(rng)
        k = float(self.kappa)
        if math.isinf(k):
            return _identity(n)
        xi = g.random(n)
        alpha = g.uniform(0.0, 2 * math.pi, n)
        if k == 0:
            t = 2.0 * xi - 1.0
        else:  # inverse CDF of the vMF polar density, stable for large kappa
            t = 1.0 + np.log(xi + (1.0 - xi) * math.exp(-2.0 * k)) / k
        beta = np.arccos(np.clip(t, -1.0, 1.0))
        return Rotation.from_euler("ZYZ", np.stack([alpha, beta, -alpha], axis=-1))


@functools.lru_cache(maxsize=64)
def _cone_rule(kappa: float, L: int) -> tuple[Rotation, np.ndarray]:
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


@dataclass(frozen=True)
class Isotropic(Ordering):
    """Uniformly random orientations: only the mean survives (no compass)."""

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.array(coeffs, dtype=float, copy=True)
        c[..., 1:] = 0.0
        return c

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        return Rotation.random(n, rng=as_generator(rng)) if n else _identity(0)


@dataclass(frozen=True, init=False)
class Composite(Ordering):
    """Independent steps applied in order; ``Q = Q_last ... Q_first``."""

    steps: tuple

    def __init__(self, *steps: Ordering):
        if len(steps) == 1 and isinstance(steps[0], (list, tuple)):
            steps = tuple(steps[0])
        if not steps or not all(isinstance(s, Ordering) for s in steps):
            raise InputError("expected one or more ordering models", key="ordering.steps")
        object.__setattr__(self, "steps", tuple(steps))

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        for s in self.steps:
            c = s.ensemble(c)
        return c

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        g = as_generator(rng)
        Q = _identity(n)
        for s in self.steps:
            Q = s.sample(n, g) * Q
        return Q
