"""The ordering models: orientation laws over the rotation group, each with its exact ensemble
average and its seeded sampler.

The conventions and the list of models are in :mod:`retina.eye.ordering` (the public front, which
re-exports everything here); the exact averages they use are in :mod:`retina.eye.order_rules`,
the random draws in :mod:`retina.eye.order_samplers`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError
from retina.eye.order_rules import (abs_m, check_concentration, cone_rule, girdle_order_parameter,
                                    is_real, kappa_from_order_parameter, order_parameter_from_kappa,
                                    plane_rows, resolve_twist, swing_diagonal, twist_factors)
from retina.eye.order_samplers import (as_generator, check_count, girdle_cos_sample, identity_rotations,
                                       twist_sample, vmf_cos_sample)

__all__ = ["Ordering", "Aligned", "FreeRotation", "Cone", "ConeNoTwist", "Planar", "Isotropic",
           "Composite", "from_settings", "MODELS", "TWISTS"]


class Ordering:
    """Base class: subclasses implement :meth:`ensemble` and :meth:`sample`."""

    def ensemble(self, coeffs) -> np.ndarray:  # pragma: no cover - interface
        """The receptor response ``E_Q[Q f]``, averaged exactly over the law (annealed average).

        Parameters
        ----------
        coeffs : array_like (K,) or (..., K)
            Even real-harmonic coefficients of the molecule's yield function ``f`` (molecular frame).

        Returns
        -------
        ndarray, the shape of ``coeffs``
            Coefficients of the averaged response in the receptor frame.
        """
        raise NotImplementedError

    def sample(self, n: int, rng=None) -> Rotation:  # pragma: no cover - interface
        """Draws of the molecule-to-receptor rotation ``Q`` (finite-molecule, quenched receptors).

        Parameters
        ----------
        n : int
            Number of draws, >= 0.
        rng : numpy.random.Generator or int, optional
            The random generator; an integer seeds a new one, None a fresh unseeded one.

        Returns
        -------
        scipy.spatial.transform.Rotation
            ``n`` rotations.
        """
        raise NotImplementedError

    def then(self, other: "Ordering") -> "Composite":
        """This ordering followed by ``other`` (``Q = Q_other Q_self``).

        Parameters
        ----------
        other : Ordering
            The step that acts after this one.

        Returns
        -------
        Composite
            The two steps, independent, in order.
        """
        return Composite(self, other)


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
        ``R = Rz(azimuth) Ry(tilt) Rz(twist)``.

        Parameters
        ----------
        tilt_deg : float
            Polar angle of the molecular ``z`` axis from the receptor axis, degrees.
        azimuth_deg : float
            Its azimuth in the receptor frame, degrees.
        twist_deg : float
            Turn of the molecule about its own ``z`` axis before tilting, degrees.

        Returns
        -------
        Aligned
            Every molecule in the rotation ``R``.
        """
        return cls(Rotation.from_euler("ZYZ", [azimuth_deg, tilt_deg, twist_deg], degrees=True))

    def ensemble(self, coeffs) -> np.ndarray:
        return _rotate_any(coeffs, self.rotation)

    def sample(self, n: int, rng=None) -> Rotation:
        n = check_count(n)
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
            if not is_real(v) or not math.isfinite(v):
                raise InputError(f"expected a finite angle in degrees, got {v!r}",
                                 key=f"ordering.{k}")

    @property
    def base(self) -> Rotation:
        """``R0 = Ry(tilt) Rz(twist)``: the molecule's orientation before the free turn about the axis."""
        return Rotation.from_euler("ZYZ", [0.0, self.tilt_deg, self.twist_deg], degrees=True)

    def ensemble(self, coeffs) -> np.ndarray:
        return sphere.axial_average(_rotate_any(coeffs, self.base))

    def sample(self, n: int, rng=None) -> Rotation:
        n = check_count(n)
        g = as_generator(rng)
        alpha = g.uniform(0.0, 2 * math.pi, n)
        return Rotation.from_euler("z", alpha[:, None]) * self.base



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
        """Funk-Hecke factors ``lambda_l``, l = 0..L, of the vMF kernel.

        Parameters
        ----------
        L : int
            Highest degree, >= 0.

        Returns
        -------
        ndarray (L + 1,)
            ``lambda_l = I_{l+1/2}(kappa) / I_{1/2}(kappa)`` (:func:`retina.sphere.vmf_moments`).
        """
        return sphere.vmf_moments(float(self.kappa), L)

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if math.isinf(self.kappa):
            return c.copy()
        L = sphere.degree_from_n(c.shape[-1])
        rot, w = cone_rule(float(self.kappa), L)
        flat = c.reshape(-1, c.shape[-1])
        out = np.stack([w @ sphere.rotate(v, rot) for v in flat])
        return out.reshape(c.shape)

    def ensemble_axial(self, coeffs) -> np.ndarray:
        """Funk-Hecke form, exact for functions axially symmetric about ``z`` (m = 0 only); the
        m != 0 terms are dropped.

        Parameters
        ----------
        coeffs : array_like (K,) or (..., K)
            Even real-harmonic coefficients (molecular frame).

        Returns
        -------
        ndarray, the shape of ``coeffs``
            The vMF convolution of their m = 0 part (m != 0 entries zero).
        """
        c = sphere.axial_average(coeffs)
        L = sphere.degree_from_n(c.shape[-1])
        return sphere.funk_hecke(c, self.moments(L))

    def sample(self, n: int, rng=None) -> Rotation:
        n = check_count(n)
        g = as_generator(rng)
        k = float(self.kappa)
        if math.isinf(k):
            return identity_rotations(n)
        t = vmf_cos_sample(k, g, n)
        alpha = g.uniform(0.0, 2 * math.pi, n)
        beta = np.arccos(np.clip(t, -1.0, 1.0))
        return Rotation.from_euler("ZYZ", np.stack([alpha, beta, -alpha], axis=-1))



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
        resolve_twist(self.twist, self.kappa)
        if not isinstance(self.mean, Rotation) or not self.mean.single:
            raise InputError("expected one scipy Rotation", key="ordering.mean")

    @classmethod
    def restraining(cls, axis=(0.0, 0.0, 1.0), *, twist_deg: float = 0.0, **kw) -> "Cone":
        """The cone restraining the molecular direction ``axis`` (molecular frame): the mean
        orientation takes ``axis`` to the receptor axis by the smallest rotation, then turns the
        molecule by ``twist_deg`` about it.

        Parameters
        ----------
        axis : array_like (3,)
            The restrained molecular direction (molecular frame), non-zero, any length.
        twist_deg : float
            Turn about it after the smallest rotation, degrees.
        **kw
            The other fields: ``kappa`` or ``order_parameter``, ``twist``.

        Returns
        -------
        Cone
        """
        return cls(mean=_to_axis(axis, twist_deg, "ordering.axis"), **kw)

    @property
    def axis(self) -> np.ndarray:
        """The restrained molecular direction ``u = M^-1 z`` (molecular frame), shape (3,)."""
        return self.mean.inv().apply([0.0, 0.0, 1.0])

    @property
    def twist_kappa(self) -> float:
        """The von Mises concentration of the twist (0 free, inf fixed)."""
        return resolve_twist(self.twist, self.kappa)

    @property
    def p2(self) -> float:
        """The order parameter ``<P2(cos beta)>`` of the restrained direction."""
        return order_parameter_from_kappa(self.kappa)

    @property
    def is_haar(self) -> bool:
        """Both concentrations zero: the isotropic law."""
        return self.kappa == 0 and self.twist_kappa == 0

    def moments(self, L: int) -> np.ndarray:
        """Funk-Hecke factors ``lambda_l``, l = 0..L, of the vMF kernel of the tilt.

        Parameters
        ----------
        L : int
            Highest degree, >= 0.

        Returns
        -------
        ndarray (L + 1,)
            ``lambda_l = I_{l+1/2}(kappa) / I_{1/2}(kappa)`` (:func:`retina.sphere.vmf_moments`).
        """
        return sphere.vmf_moments(float(self.kappa), L)

    def ensemble_axial(self, coeffs) -> np.ndarray:
        """Funk-Hecke form (the vMF convolution of the placed molecule), exact for functions
        axially symmetric about the restrained direction ``u`` (whatever the twist); the m != 0
        terms of the placed molecule are dropped.

        Parameters
        ----------
        coeffs : array_like (K,) or (..., K)
            Even real-harmonic coefficients (molecular frame).

        Returns
        -------
        ndarray, the shape of ``coeffs``
            The response in the receptor frame (m != 0 entries zero).
        """
        c = sphere.axial_average(_place(coeffs, self.mean))
        return sphere.funk_hecke(c, self.moments(sphere.degree_from_n(c.shape[-1])))

    def diagonal(self, L: int) -> np.ndarray:
        """``E[D(swing)] E[D(twist)]`` as the diagonal of the real-basis average.

        Parameters
        ----------
        L : int
            Even degree.

        Returns
        -------
        ndarray (K,)
            The factor of each coefficient, ``K = (L + 1)(L + 2) / 2``.
        """
        _, am = abs_m(L)
        return swing_diagonal(float(self.kappa), L) * twist_factors(self.twist_kappa, L)[am]

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if self.is_haar:
            return Isotropic().ensemble(c)
        L = sphere.degree_from_n(c.shape[-1])
        return _place(c, self.mean) * self.diagonal(L)

    def sample(self, n: int, rng=None) -> Rotation:
        n = check_count(n)
        g = as_generator(rng)
        k, kt = float(self.kappa), self.twist_kappa
        phi = g.uniform(0.0, 2 * math.pi, n)
        t = vmf_cos_sample(k, g, n)
        delta = twist_sample(kt, g, n)
        beta = np.arccos(np.clip(t, -1.0, 1.0))
        return Rotation.from_euler("ZYZ", np.stack([phi, beta, delta - phi], axis=-1)) * self.mean


def _resolve_cone_kappa(obj) -> None:
    if (obj.kappa is None) == (obj.order_parameter is None):
        raise InputError("give exactly one of kappa or order_parameter", key="ordering.kappa")
    if obj.kappa is not None:
        k = obj.kappa
        if not is_real(k) or math.isnan(k) or k < 0:
            raise InputError(f"expected a concentration kappa >= 0, got {k!r}",
                             key="ordering.kappa")
    else:
        object.__setattr__(obj, "kappa", kappa_from_order_parameter(obj.order_parameter))



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
        check_concentration(self.kappa, "ordering.kappa")
        resolve_twist(self.twist, self.kappa)
        if not isinstance(self.mean, Rotation) or not self.mean.single:
            raise InputError("expected one scipy Rotation", key="ordering.mean")

    @classmethod
    def restraining(cls, axis=(1.0, 0.0, 0.0), *, twist_deg: float = 0.0, **kw) -> "Planar":
        """The plane restraint of the molecular direction ``axis`` (molecular frame): the smallest
        rotation takes ``axis`` to the receptor ``x`` axis, then ``twist_deg`` turns the molecule
        about it.

        Parameters
        ----------
        axis : array_like (3,)
            The molecular direction restrained to the plane (molecular frame), non-zero, any length.
        twist_deg : float
            Turn about it after the smallest rotation, degrees.
        **kw
            The other fields: ``kappa``, ``twist``.

        Returns
        -------
        Planar
        """
        to_z = _to_axis(axis, twist_deg, "ordering.axis")
        return cls(mean=Rotation.from_euler("y", 90.0, degrees=True) * to_z, **kw)

    @property
    def axis(self) -> np.ndarray:
        """The restrained molecular direction ``u = M^-1 x`` (molecular frame), shape (3,)."""
        return self.mean.inv().apply([1.0, 0.0, 0.0])

    @property
    def twist_kappa(self) -> float:
        """The von Mises concentration of the twist (0 free, inf fixed)."""
        return resolve_twist(self.twist, self.kappa)

    @property
    def p2(self) -> float:
        """``<P2(cos theta)>`` of ``u`` about the receptor axis (-1/2 in the plane)."""
        return girdle_order_parameter(float(self.kappa))

    @property
    def is_haar(self) -> bool:
        """Both concentrations zero: the isotropic law."""
        return self.kappa == 0 and self.twist_kappa == 0

    @property
    def _to_z(self) -> Rotation:
        return Rotation.from_euler("y", -90.0, degrees=True) * self.mean

    def ensemble(self, coeffs) -> np.ndarray:
        c = np.asarray(coeffs, dtype=float)
        if self.is_haar:
            return Isotropic().ensemble(c)
        L = sphere.degree_from_n(c.shape[-1])
        l, am = abs_m(L)
        g = _rotate_any(c, self._to_z) * twist_factors(self.twist_kappa, L)[am]
        weighted = g * plane_rows(float(self.kappa), L)
        out = np.zeros_like(g)
        for ll in range(0, L + 1, 2):
            s0 = ll * (ll - 1) // 2
            out[..., s0 + ll] = weighted[..., s0:s0 + 2 * ll + 1].sum(axis=-1)
        return out

    def sample(self, n: int, rng=None) -> Rotation:
        n = check_count(n)
        g = as_generator(rng)
        phi = g.uniform(0.0, 2 * math.pi, n)
        t = girdle_cos_sample(float(self.kappa), g, n)
        psi = twist_sample(self.twist_kappa, g, n)
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
        n = check_count(n)
        return Rotation.random(n, rng=as_generator(rng)) if n else identity_rotations(0)


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
        n = check_count(n)
        g = as_generator(rng)
        Q = identity_rotations(n)
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
