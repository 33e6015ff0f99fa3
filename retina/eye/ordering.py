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
- :class:`Cone`: a chosen molecular direction ``u`` in a von Mises-Fisher cone about the receptor
  axis, with the twist about ``u`` tied to the tilt (default), free, restrained by its own von
  Mises concentration, or fixed.  Its exact ensemble average is the average Wigner matrix, a
  diagonal matrix (in the real basis) times the rotation to the mean orientation.  With the
  default tied twist ``kappa = 0`` is isotropic and ``kappa = inf`` aligned.
- :class:`Planar`: a molecular direction restrained to the plane normal to the receptor axis
  (a membrane whose normal is the receptor axis), free in azimuth, softened by a Watson girdle
  law of concentration ``kappa``, with the twist about it free (default), restrained or fixed.
  Exactly in the plane with a free twist, the molecule is restrained in one dimension and free in
  two; the response is always axially symmetric about the receptor axis.
- :class:`ConeNoTwist`: the swing of the ``z`` axis of the frame it acts in, ``Q = Rz(alpha)
  Ry(beta) Rz(-alpha)`` with ``alpha`` uniform and ``cos beta`` von Mises-Fisher distributed
  (density ``kappa exp(kappa (t - 1)) / (1 - exp(-2 kappa))`` on ``t = cos beta``), with no
  twist about the swung axis.  Kept for comparison: for a yield function that is not axially
  symmetric about ``z``, ``kappa = 0`` is *not* isotropic.  Given either the concentration
  ``kappa`` or the order parameter ``<P2> = E[P_2(cos beta)]``, solved for ``kappa`` (``<P2> =
  I_{5/2}(kappa) / I_{1/2}(kappa)``).  Ensemble: the full rotation average by quadrature (``2 L +
  1`` equally spaced ``alpha``, exact for band-limited functions, times the ``cos beta`` rule
  :func:`vmf_cos_rule`, Gauss-Legendre or for large ``kappa`` Gauss-Laguerre with the vMF
  weight, converged to rounding at degree 16).  On the m = 0 part (functions axially symmetric
  about the cone axis) it equals the Funk-Hecke convolution with the vMF kernel, ``lambda_l =
  I_{l+1/2}(kappa) / I_{1/2}(kappa)`` (:meth:`ConeNoTwist.ensemble_axial`).  Until this module
  gained :class:`Cone` with a twist, this law was called ``Cone``.
- :class:`Isotropic`: uniformly random rotations (Haar); the response is the constant mean (no
  compass).  It is the limit of :class:`Cone` and :class:`Planar` when every concentration goes
  to 0, and they return exactly its result there.
- :class:`Composite`: independent steps applied in order (the first acts first on the molecule):
  ``Q = Q_last ... Q_first``.  ``Composite(ConeNoTwist(...), Aligned(...))`` spreads the
  molecular ``z`` axis around its mean direction and then places the molecule;
  ``Composite(Aligned(...), ConeNoTwist(...))`` jitters the whole placed molecule about the
  receptor axis.

How much order a compass needs: count the rotation angles left free.  ``Aligned`` leaves none;
``FreeRotation`` (or ``Cone(kappa=inf, twist="free")``, or ``Planar(twist="fixed")``) leaves one
and restrains two; ``Planar(kappa=inf, twist="free")`` leaves two and restrains one;
``Isotropic`` leaves all three.
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


__all__ = ["Ordering", "Aligned", "FreeRotation", "Cone", "ConeNoTwist", "Planar", "Isotropic",
           "Composite", "kappa_from_order_parameter", "order_parameter_from_kappa",
           "girdle_order_parameter", "vmf_cos_rule", "girdle_cos_rule", "swing_diagonal",
           "twist_factors", "as_generator", "from_settings", "MODELS", "TWISTS",
           "StudyCase", "restraint_classes", "concentration_curves"]


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
class ConeNoTwist(Ordering):
    """Cone (vMF) swing of the ``z`` axis of the frame this step acts in, with no twist about the
    swung axis (see the module docstring).  Give ``kappa`` (>= 0, ``inf`` = no disorder) or
    ``order_parameter`` (in [0, 1]).

    Kept for comparison: ``kappa = 0`` is *not* isotropic for a yield function that is not
    axially symmetric about ``z`` (the swing never turns the molecule about its own axis).  It
    equals ``Cone(kappa, twist="fixed")``, computed here by an independent quadrature over the
    swing.
    """

    kappa: float | None = None
    order_parameter: float | None = None

    def __post_init__(self):
        _resolve_cone_kappa(self)

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


# ----------------------------------------------------------------------------------------------
# orientation laws over the whole rotation group (cone with twist, plane restraint)
# ----------------------------------------------------------------------------------------------


def _check_concentration(v, key: str) -> float:
    if not _is_real(v) or math.isnan(v) or v < 0:
        raise InputError(f"expected a concentration >= 0 (inf: no disorder), got {v!r}", key=key)
    return float(v)


def _resolve_twist(twist, kappa: float, key: str = "ordering.twist") -> float:
    """The von Mises concentration of the twist: ``"tied"`` -> ``kappa``, ``"free"`` -> 0,
    ``"fixed"`` -> inf, a number >= 0 -> itself."""
    if isinstance(twist, str):
        table = {"tied": kappa, "free": 0.0, "fixed": math.inf}
        if twist not in table:
            raise InputError(f"expected 'tied', 'free', 'fixed' or a concentration >= 0, got "
                             f"{twist!r}", key=key)
        return float(table[twist])
    return _check_concentration(twist, key)


def twist_factors(kappa: float, L: int) -> np.ndarray:
    """``A_m = E[cos(m delta)] = I_m(kappa) / I_0(kappa)``, m = 0..L, for a twist ``delta`` with the
    von Mises density ``exp(kappa cos delta) / (2 pi I_0(kappa))`` (``E[sin(m delta)] = 0``).

    ``kappa = 0`` is a free twist (``A_m = 0`` for m > 0, exactly); ``kappa = inf`` a fixed one
    (all ones).  A twist by ``delta`` about ``z`` turns the degree-l pair ``(m, -m)`` by ``m
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
    return ive(m, kappa) / ive(0, kappa)


def _abs_m(L: int) -> tuple[np.ndarray, np.ndarray]:
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

    l, am = _abs_m(L)
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


def _is_identity(rot: Rotation) -> bool:
    return bool(np.allclose(rot.as_matrix(), np.eye(3), atol=1e-15, rtol=0))


def _place(coeffs, rotation: Rotation) -> np.ndarray:
    c = np.asarray(coeffs, dtype=float)
    return c.copy() if _is_identity(rotation) else _rotate_any(c, rotation)


def _to_axis(axis, twist_deg: float, key: str) -> Rotation:
    """``Rz(twist) A`` with ``A`` the smallest rotation taking the unit vector ``axis`` (molecular
    frame) to ``z`` (a half turn about ``x`` for ``-z``)."""
    u = np.asarray(axis, dtype=float)
    if u.shape != (3,) or not np.all(np.isfinite(u)) or np.linalg.norm(u) == 0:
        raise InputError(f"expected a non-zero direction of 3 finite numbers, got {axis!r}",
                         key=key)
    u = u / np.linalg.norm(u)
    z = np.array([0.0, 0.0, 1.0])
    c = float(u @ z)
    if c < -1 + 1e-12:
        A = Rotation.from_euler("x", math.pi)
    else:
        v = np.cross(u, z)
        s = np.linalg.norm(v)
        A = Rotation.identity() if s < 1e-15 else Rotation.from_rotvec(v / s * math.atan2(s, c))
    return Rotation.from_euler("z", twist_deg, degrees=True) * A


@dataclass(frozen=True)
class Cone(Ordering):
    """A molecular direction in a von Mises-Fisher cone about the receptor axis, twisted about it.

    ``Q = Rz(phi) Ry(beta) Rz(-phi) Rz(delta) M``: the mean orientation ``M`` (molecule to
    receptor) puts the restrained molecular direction ``u = M^-1 z`` on the receptor axis; the
    molecule is turned about that axis by the twist ``delta``, then swung (no further twist) so that
    ``u`` lands at polar angle ``beta``, azimuth ``phi``.  ``phi`` is uniform, ``cos beta`` has the
    vMF density of concentration ``kappa`` (see :class:`ConeNoTwist`), and ``delta`` has a von Mises
    law of concentration ``twist``:

    - ``"tied"`` (default): the same concentration as the tilt.  For large ``kappa`` the three
      small rotation angles (two of tilt, one of twist) then each have variance ``1 / kappa``: an
      isotropic wobble about ``M``.  ``kappa = 0`` is the Haar (isotropic) law, ``kappa = inf`` is
      ``Aligned(M)``;
    - ``"free"``: uniform twist (the molecule spins freely about ``u``); ``kappa = inf`` is free
      rotation about the receptor axis, ``kappa = 0`` isotropic;
    - ``"fixed"``: no twist, the :class:`ConeNoTwist` law (``kappa = 0`` is *not* isotropic);
    - a number ``>= 0``: its own concentration (0 free, inf fixed).

    The twist reference is the mean orientation carried along the swing (parallel transport along
    the great circle from the receptor axis).  Every concentration going to 0 gives the Haar law:
    with ``phi`` and ``delta`` uniform, ``(phi, delta - phi)`` are independent and uniform, which
    with a uniform ``cos beta`` are Haar-distributed z-y-z Euler angles.

    Ensemble (exact): the average Wigner matrix factorises,
    ``E[D^l(Q)] = E[D^l(swing)] E[D^l(Rz(delta))] D^l(M)``; the first two are diagonal in the real
    basis (:func:`swing_diagonal`, :func:`twist_factors`).

    Parameters
    ----------
    kappa, order_parameter : float
        Give exactly one: the tilt concentration (>= 0, ``inf`` = no tilt) or the order parameter
        ``<P2>`` of ``u`` about the receptor axis (in [0, 1]).
    twist : {"tied", "free", "fixed"} or float
    mean : scipy Rotation
        ``M``; identity by default (the molecular ``z`` is restrained).  :meth:`restraining` builds
        it from a molecular direction.
    """

    kappa: float | None = None
    order_parameter: float | None = None
    twist: object = "tied"
    mean: Rotation = field(default_factory=Rotation.identity)

    def __post_init__(self):
        _resolve_cone_kappa(self)
        _resolve_twist(self.twist, self.kappa)
        if not isinstance(self.mean, Rotation) or not self.mean.single:
            raise InputError("expected one scipy Rotation", key="ordering.mean")

    @classmethod
    def restraining(cls, axis=(0.0, 0.0, 1.0), *, twist_deg: float = 0.0, **kw) -> "Cone":
        """The cone restraining the molecular direction ``axis`` (molecular frame): the mean
        orientation takes ``axis`` to the receptor axis by the smallest rotation, then turns the
        molecule by ``twist_deg`` about it."""
        return cls(mean=_to_axis(axis, twist_deg, "ordering.axis"), **kw)

    @property
    def axis(self) -> np.ndarray:
        """The restrained molecular direction ``u = M^-1 z`` (molecular frame), shape (3,)."""
        return self.mean.inv().apply([0.0, 0.0, 1.0])

    @property
    def twist_kappa(self) -> float:
        """The von Mises concentration of the twist (0 free, inf fixed)."""
        return _resolve_twist(self.twist, self.kappa)

    @property
    def p2(self) -> float:
        """The order parameter ``<P2(cos beta)>`` of the restrained direction."""
        return order_parameter_from_kappa(self.kappa)

    @property
    def is_haar(self) -> bool:
        """Both concentrations zero: the isotropic law."""
        return self.kappa == 0 and self.twist_kappa == 0

    def moments(self, L: int) -> np.ndarray:
        """Funk-Hecke factors ``lambda_l``, l = 0..L, of the vMF kernel of the tilt."""
        return sphere.vmf_moments(float(self.kappa), L)

    def ensemble_axial(self, coeffs) -> np.ndarray:
        """Funk-Hecke form (the vMF convolution of the placed molecule), exact for functions
        axially symmetric about the restrained direction ``u`` (whatever the twist); the m != 0
        terms of the placed molecule are dropped."""
        c = sphere.axial_average(_place(coeffs, self.mean))
        return sphere.funk_hecke(c, self.moments(sphere.degree_from_n(c.shape[-1])))

    def diagonal(self, L: int) -> np.ndarray:
        """``E[D(swing)] E[D(twist)]`` as the diagonal ``(K,)`` of the real-basis average."""
        _, am = _abs_m(L)
        return swing_diagonal(float(self.kappa), L) * twist_factors(self.twist_kappa, L)[am]

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if self.is_haar:
            return Isotropic().ensemble(c)
        L = sphere.degree_from_n(c.shape[-1])
        return _place(c, self.mean) * self.diagonal(L)

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        g = as_generator(rng)
        k, kt = float(self.kappa), self.twist_kappa
        phi = g.uniform(0.0, 2 * math.pi, n)
        t = _vmf_cos_sample(k, g, n)
        delta = _twist_sample(kt, g, n)
        beta = np.arccos(np.clip(t, -1.0, 1.0))
        return Rotation.from_euler("ZYZ", np.stack([phi, beta, delta - phi], axis=-1)) * self.mean


def _resolve_cone_kappa(obj) -> None:
    if (obj.kappa is None) == (obj.order_parameter is None):
        raise InputError("give exactly one of kappa or order_parameter", key="ordering.kappa")
    if obj.kappa is not None:
        k = obj.kappa
        if not _is_real(k) or math.isnan(k) or k < 0:
            raise InputError(f"expected a concentration kappa >= 0, got {k!r}",
                             key="ordering.kappa")
    else:
        object.__setattr__(obj, "kappa", kappa_from_order_parameter(obj.order_parameter))


def _vmf_cos_sample(k: float, g: np.random.Generator, n: int) -> np.ndarray:
    """``n`` draws of ``t = cos beta`` from the vMF polar density (inverse CDF)."""
    if math.isinf(k):
        return np.ones(n)
    xi = g.random(n)
    if k == 0:
        return 2.0 * xi - 1.0
    return 1.0 + np.log(xi + (1.0 - xi) * math.exp(-2.0 * k)) / k  # stable for large kappa


def _twist_sample(kt: float, g: np.random.Generator, n: int) -> np.ndarray:
    if math.isinf(kt):
        return np.zeros(n)
    if kt == 0:
        return g.uniform(0.0, 2 * math.pi, n)
    return g.vonmises(0.0, kt, n)


# -- plane restraint ---------------------------------------------------------------------------


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


def _girdle_sample(k: float, g: np.random.Generator, n: int) -> np.ndarray:
    """``n`` draws of ``t`` from the girdle density (inverse CDF: ``erf(sqrt(k) t)`` is uniform on
    ``[-erf(sqrt k), erf(sqrt k)]``)."""
    from scipy.special import erf, erfinv

    if math.isinf(k):
        return np.zeros(n)
    u = g.uniform(-1.0, 1.0, n)
    if k < 1e-12:
        return u
    r = math.sqrt(k)
    return erfinv(u * erf(r)) / r


@functools.lru_cache(maxsize=64)
def _plane_rows(kappa: float, L: int) -> np.ndarray:
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


@dataclass(frozen=True)
class Planar(Ordering):
    """A molecular direction restrained to the plane normal to the receptor axis (a membrane
    whose normal is the receptor axis), free in azimuth, with a twist about it.

    ``Q = Rz(phi) Ry(theta) Rz(psi) Ry(-90 deg) M``.  The reference orientation ``M`` (molecule to
    receptor) puts the restrained molecular direction ``u = M^-1 x`` along the receptor ``x`` axis
    (in the plane) and the molecular direction ``n = M^-1 z`` along the normal.  ``Ry(-90 deg) M``
    takes ``u`` to ``z``; ``psi`` turns the molecule about ``u``; ``theta`` and ``phi`` are the
    polar angle and azimuth of ``u`` in the receptor frame.  ``phi`` is uniform (the membrane is
    isotropic in its plane); ``cos theta`` has the Watson girdle density
    ``exp(-kappa cos^2 theta)`` (``kappa = inf``: ``u`` exactly in the plane; 0: uniform); ``psi``
    has a von Mises law of concentration ``twist`` about 0, measured from the plane through ``u``
    and the receptor axis (at ``psi = 0`` and ``theta = 90 deg`` the direction ``n`` lies along the
    membrane normal):

    - ``"free"`` (default): the molecule spins freely about ``u``; with ``kappa = inf`` the
      molecule is restrained in one dimension and free in two;
    - ``"fixed"``: ``n`` stays in the plane through ``u`` and the normal; with ``kappa = inf``,
      free rotation about the receptor axis (restrained in two, free in one);
    - ``"tied"``: the same concentration as the girdle;
    - a number ``>= 0``: its own concentration.

    Every concentration going to 0 gives the Haar law (uniform Euler angles).  Because ``phi`` is
    uniform, the response is axially symmetric about the receptor axis (only ``m = 0`` terms).

    Ensemble (exact): the ``m = 0`` output coefficient is
    ``sqrt(4 pi / (2l + 1)) E[g_l(Ry(-theta) z)]`` for ``g = Rz(psi) Ry(-90 deg) M f``; the twist
    average scales the ``(m, -m)`` pairs of ``g`` by :func:`twist_factors` and the tilt average is
    a weighted sum of harmonics at the nodes of :func:`girdle_cos_rule` (the ``theta`` dependence
    is a polynomial in ``t`` for even ``m`` and odd in ``t`` for odd ``m``, so the symmetric rule
    is exact).

    Parameters
    ----------
    kappa : float
        Girdle concentration (>= 0, ``inf`` = exactly in the plane; default).
    twist : {"free", "fixed", "tied"} or float
    mean : scipy Rotation
        ``M``; identity by default (molecular ``x`` restrained to the plane, molecular ``z`` along
        the normal when the twist is fixed).  :meth:`restraining` builds it from directions.
    """

    kappa: float = math.inf
    twist: object = "free"
    mean: Rotation = field(default_factory=Rotation.identity)

    def __post_init__(self):
        _check_concentration(self.kappa, "ordering.kappa")
        _resolve_twist(self.twist, self.kappa)
        if not isinstance(self.mean, Rotation) or not self.mean.single:
            raise InputError("expected one scipy Rotation", key="ordering.mean")

    @classmethod
    def restraining(cls, axis=(1.0, 0.0, 0.0), *, twist_deg: float = 0.0, **kw) -> "Planar":
        """The plane restraint of the molecular direction ``axis`` (molecular frame): the smallest
        rotation takes ``axis`` to the receptor ``x`` axis, then ``twist_deg`` turns the molecule
        about it."""
        to_z = _to_axis(axis, twist_deg, "ordering.axis")
        return cls(mean=Rotation.from_euler("y", 90.0, degrees=True) * to_z, **kw)

    @property
    def axis(self) -> np.ndarray:
        """The restrained molecular direction ``u = M^-1 x`` (molecular frame), shape (3,)."""
        return self.mean.inv().apply([1.0, 0.0, 0.0])

    @property
    def twist_kappa(self) -> float:
        return _resolve_twist(self.twist, self.kappa)

    @property
    def p2(self) -> float:
        """``<P2(cos theta)>`` of ``u`` about the receptor axis (-1/2 in the plane)."""
        return girdle_order_parameter(float(self.kappa))

    @property
    def is_haar(self) -> bool:
        return self.kappa == 0 and self.twist_kappa == 0

    @property
    def _to_z(self) -> Rotation:
        return Rotation.from_euler("y", -90.0, degrees=True) * self.mean

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if self.is_haar:
            return Isotropic().ensemble(c)
        L = sphere.degree_from_n(c.shape[-1])
        l, am = _abs_m(L)
        g = _rotate_any(c, self._to_z) * twist_factors(self.twist_kappa, L)[am]
        weighted = g * _plane_rows(float(self.kappa), L)
        out = np.zeros_like(g)
        for ll in range(0, L + 1, 2):
            s0 = ll * (ll - 1) // 2
            out[..., s0 + ll] = weighted[..., s0:s0 + 2 * ll + 1].sum(axis=-1)
        return out

    def sample(self, n: int, rng=None) -> Rotation:
        n = _count(n)
        g = as_generator(rng)
        phi = g.uniform(0.0, 2 * math.pi, n)
        t = _girdle_sample(float(self.kappa), g, n)
        psi = _twist_sample(self.twist_kappa, g, n)
        theta = np.arccos(np.clip(t, -1.0, 1.0))
        return Rotation.from_euler("ZYZ", np.stack([phi, theta, psi], axis=-1)) * self._to_z


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


#: The ordering models a scenario or the viewer can name (:func:`from_settings`).
MODELS = ("aligned", "axial", "cone", "cone_no_twist", "plane", "isotropic")
#: The twist choices of the cone and plane models.
TWISTS = ("tied", "free", "fixed", "restrained")


def from_settings(model: str, *, kappa: float = 20.0, twist: str = "tied", twist_kappa: float = 1.0,
                  orientation_deg=(0.0, 0.0, 0.0), axis=None) -> Ordering:
    """The ordering model named by the settings of a scenario's ``[ordering]`` section.

    Parameters
    ----------
    model : {"aligned", "axial", "cone", "cone_no_twist", "plane", "isotropic"}
        ``"aligned"``: :class:`Aligned` at the orientation; ``"axial"``: :class:`FreeRotation` with
        the tilt and twist of the orientation; ``"cone"``: :class:`Cone` about the orientation
        (reaches isotropy as ``kappa`` and the twist concentration go to 0); ``"cone_no_twist"``:
        ``Cone(twist="fixed")``, the swing without twist (what ``"cone"`` meant before the twist
        was modelled; not isotropic at ``kappa = 0``); ``"plane"``: :class:`Planar` with the
        orientation as its reference; ``"isotropic"``.
    kappa : float
        Tilt (cone) or girdle (plane) concentration, ``>= 0``, ``inf`` allowed.
    twist : {"tied", "free", "fixed", "restrained"}
        Twist of the cone and plane models; ``"restrained"`` uses ``twist_kappa``.
    twist_kappa : float
        Von Mises concentration of a restrained twist (``>= 0``).
    orientation_deg : sequence of 3 floats
        z-y-z Euler angles (degrees) of the mean (cone) or reference (plane) orientation, molecule to
        receptor.
    axis : sequence of 3 floats, optional
        For "cone", "cone_no_twist" and "plane": the restrained molecular direction; replaces
        ``orientation_deg`` by :meth:`Cone.restraining` / :meth:`Planar.restraining`.

    Returns
    -------
    Ordering
    """
    if model not in MODELS:
        raise InputError(f"expected one of {', '.join(MODELS)}, got {model!r}", key="ordering.model")
    if twist not in TWISTS:
        raise InputError(f"expected one of {', '.join(TWISTS)}, got {twist!r}", key="ordering.twist")
    a, b, c = (float(x) for x in orientation_deg)
    base = Rotation.from_euler("ZYZ", [a, b, c], degrees=True)
    tw = float(twist_kappa) if twist == "restrained" else twist
    if model == "aligned":
        return Aligned(base)
    if model == "axial":
        return FreeRotation(tilt_deg=b, twist_deg=c)
    if model == "isotropic":
        return Isotropic()
    if axis is not None:
        maker = Planar.restraining if model == "plane" else Cone.restraining
        base = maker(axis, kappa=float(kappa)).mean
    if model == "cone":
        return Cone(kappa=float(kappa), twist=tw, mean=base)
    if model == "cone_no_twist":
        return Cone(kappa=float(kappa), twist="fixed", mean=base)
    return Planar(kappa=float(kappa), twist=tw, mean=base)


@dataclass(frozen=True)
class StudyCase:
    """One ordering model of the order study: a key, a label for figures and tables, and the model
    (or, for a curve, a function of the concentration that builds it)."""

    key: str
    label: str
    build: object


def restraint_classes(mean: Rotation | None = None) -> tuple[StudyCase, ...]:
    """The four restraint classes of the order study, in the order of decreasing order.

    With ``M = mean`` (identity by default): aligned, ``Aligned(M)``; restrained in two (free in
    one), ``Cone(kappa=inf, twist="free", mean=M)``, free rotation about the receptor axis of the
    molecular direction ``M^-1 z``; restrained in one (free in two), ``Planar(kappa=inf,
    twist="free", mean=M)``, the molecular direction ``M^-1 x`` in the membrane plane with a free
    twist; isotropic.

    Parameters
    ----------
    mean : scipy Rotation, optional
        The mean orientation ``M`` (molecule to receptor).

    Returns
    -------
    tuple of StudyCase
        Keys "aligned", "restrained_two", "restrained_one", "isotropic"; ``build`` is the model.
    """
    M = Rotation.identity() if mean is None else mean
    return (
        StudyCase("aligned", "aligned (restrained in three)", Aligned(M)),
        StudyCase("restrained_two", "restrained in two, free in one",
                  Cone(kappa=math.inf, twist="free", mean=M)),
        StudyCase("restrained_one", "restrained in one, free in two",
                  Planar(kappa=math.inf, twist="free", mean=M)),
        StudyCase("isotropic", "isotropic (free in three)", Isotropic()),
    )


def concentration_curves(mean: Rotation | None = None) -> tuple[StudyCase, ...]:
    """The curves of the order study: each varies one concentration of one model (``build(kappa)
    -> Ordering``); the labels give the limits at ``kappa = inf`` and 0.

    The first three reach isotropy at 0 (tilt with tied twist, tilt with free twist, the plane's
    girdle with free twist); the two twist curves join restraint classes; the last is the cone
    without twist, for comparison (not isotropic at 0).

    Parameters
    ----------
    mean : scipy Rotation, optional
        The mean orientation ``M`` (molecule to receptor), as in :func:`restraint_classes`.

    Returns
    -------
    tuple of StudyCase
        Keys "cone_tied", "cone_free", "plane_free", "twist_axis", "twist_plane",
        "cone_no_twist"; ``build(kappa)`` makes the model.
    """
    M = Rotation.identity() if mean is None else mean
    inf = math.inf
    return (
        StudyCase("cone_tied", "cone, twist tied: aligned to isotropic",
                  lambda k: Cone(kappa=k, twist="tied", mean=M)),
        StudyCase("cone_free", "cone, free twist: restrained in two to isotropic",
                  lambda k: Cone(kappa=k, twist="free", mean=M)),
        StudyCase("plane_free", "plane girdle, free twist: restrained in one to isotropic",
                  lambda k: Planar(kappa=k, twist="free", mean=M)),
        StudyCase("twist_axis", "twist about the axis: aligned to restrained in two",
                  lambda k: Cone(kappa=inf, twist=k, mean=M)),
        StudyCase("twist_plane", "twist in the plane: restrained in two to restrained in one",
                  lambda k: Planar(kappa=inf, twist=k, mean=M)),
        StudyCase("cone_no_twist", "cone without twist (not isotropic at 0)",
                  lambda k: Cone(kappa=k, twist="fixed", mean=M)),
    )
