"""Expected and sampled signal counts per receptor: the forward model of the readout.

Conventions (owned here)
------------------------
- The signalling channel is the yield function's reported product (``system.reported_yield``,
  singlet or triplet, see ``retina.spin.system``): each radical pair formed in receptor ``i`` ends
  in that product with probability ``Phi_i``, so with Poisson-distributed pair formation of mean
  ``catch_i`` (``retina.signal.light``) the signal count is Poisson with mean

      lam_i = g * catch_i * Phi_i(b_head)

  (a Poisson process thinned with probability ``Phi_i`` is Poisson).  ``g`` is an overall light
  gain (1 = the nominal light level), a nuisance parameter when the readout does not know it.
- Derivatives are per radian.  The heading derivative uses the chain rule
  ``d lam_i / d psi = g catch_i grad Phi_i(b_head) . d b_head / d psi`` with the tangential
  harmonic gradient from ``RetinaModel.yields_and_grad`` and ``d b_head / d yaw`` from
  ``retina.eye.pose.head_field_dyaw``; the catch does not depend on yaw because yaw turns the head
  about the vertical and the sky models depend on elevation only.  The inclination derivative uses
  ``d b_world / d I = (-sin I cos D, -sin I sin D, cos I)`` (``retina.eye.field`` convention).
- A world-fixed scene texture slides across the retina as the head turns; it enters the counts
  but has no heading derivative here (its heading information would be a visual, not a magnetic,
  cue), so asking for derivatives with one raises ``InputError``.  A head-fixed texture is a fixed
  per-receptor factor.
- Random numbers come from a ``numpy.random.Generator`` (``make_rng(seed)``), so every draw is
  reproducible from one seed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.spatial.transform import Rotation

from retina.errors import InputError
from retina.eye.pose import head_field, head_field_dyaw
from retina.signal.light import HorizonSky, SceneTexture, UniformSky, light_level
# the count sampling lives in retina.signal.poisson; its names stay importable from here
from retina.signal.poisson import SPLIT_MEAN, expected_counts, make_rng, sample_counts, sample_counts_split

__all__ = ["make_rng", "expected_counts", "sample_counts", "sample_counts_split", "SPLIT_MEAN", "SignalModel", "field_direction",
           "field_direction_dincl", "trig_interp_matrix", "trig_derivative_matrix", "responses_at"]

# Bytes of scratch memory per chunk of poses for (P, N, 3) gradient arrays.
_CHUNK_BYTES = 64 * 2**20


def field_direction(inclination_deg: float, declination_deg: float = 0.0) -> np.ndarray:
    """Unit field direction in the world frame (north-east-down).

    Parameters
    ----------
    inclination_deg : float
        Inclination ``I``, degrees, positive downward.
    declination_deg : float
        Declination ``D``, degrees east of north.

    Returns
    -------
    ndarray, shape (3,)
        ``(cos I cos D, cos I sin D, sin I)``.
    """
    I, D = np.deg2rad(inclination_deg), np.deg2rad(declination_deg)
    return np.array([np.cos(I) * np.cos(D), np.cos(I) * np.sin(D), np.sin(I)])


def field_direction_dincl(inclination_deg: float, declination_deg: float = 0.0) -> np.ndarray:
    """Derivative of :func:`field_direction` with respect to the inclination.

    Parameters
    ----------
    inclination_deg : float
        Inclination, degrees.
    declination_deg : float
        Declination, degrees.

    Returns
    -------
    ndarray, shape (3,)
        ``(-sin I cos D, -sin I sin D, cos I)``, per radian.
    """
    I, D = np.deg2rad(inclination_deg), np.deg2rad(declination_deg)
    return np.array([-np.sin(I) * np.cos(D), -np.sin(I) * np.sin(D), np.cos(I)])


def _pose_rotations(headings_deg, pitch_deg, roll_deg) -> Rotation:
    from retina.eye.pose import pose_rotation

    h = np.atleast_1d(np.asarray(headings_deg, dtype=float))
    return pose_rotation(h, pitch_deg, roll_deg)


def _as_multi(rot: Rotation) -> Rotation:
    return Rotation.concatenate([rot]) if rot.single else rot


@dataclass(frozen=True)
class SignalModel:
    """Expected counts of every receptor as a function of heading: the readout's forward model.

    Parameters
    ----------
    retina : RetinaModel-like
        Has ``yields(b_head (P, 3)) -> (P, N)`` and ``yields_and_grad(b_head) -> ((P, N), (P, N, 3))``
        and a ``receptors`` attribute (``visual_dirs (N, 3)``, ``solid_angle (N,)``), unless
        ``receptors`` is given.
    inclination_deg, declination_deg : float
        Field direction (the yield function already fixes the field strength).
    photons : float or str
        Light level (``retina.signal.light``): mean pairs formed per receptor per integration time.
    sky : UniformSky or HorizonSky, optional
    texture : SceneTexture, optional
    pitch_deg, roll_deg : float
        Head pitch and roll held fixed while the heading varies.
    gain : float
        True overall light gain (1 nominal).
    receptors : optional
        Overrides ``retina.receptors``.

    Immutable: use :meth:`replace` (or ``dataclasses.replace``) for a variant.
    """

    retina: Any
    inclination_deg: float = 60.0
    declination_deg: float = 0.0
    photons: float | str = 1.0
    sky: Any = None
    texture: SceneTexture | None = None
    pitch_deg: float = 0.0
    roll_deg: float = 0.0
    gain: float = 1.0
    receptors: Any = None

    def __post_init__(self):
        if self.receptors is None:
            object.__setattr__(self, "receptors", getattr(self.retina, "receptors", None))
        if self.receptors is None:
            raise InputError("the retina model has no receptors; pass receptors=", key="receptors")
        if not (-90.0 <= float(self.inclination_deg) <= 90.0):
            raise InputError(f"expected an inclination in [-90, 90] deg, got {self.inclination_deg}",
                             key="field.inclination_deg")
        if not (self.gain > 0):
            raise InputError(f"expected a positive gain, got {self.gain}", key="gain")
        object.__setattr__(self, "photons", light_level(self.photons))
        if self.sky is None:
            object.__setattr__(self, "sky", UniformSky())
        if not isinstance(self.sky, (UniformSky, HorizonSky)):
            raise InputError("expected a UniformSky or HorizonSky", key="light.sky")
        if self.texture is not None and not isinstance(self.texture, SceneTexture):
            raise InputError("expected a SceneTexture or None", key="light.texture")
        object.__setattr__(self, "_unit_catch_head", None)

    #: Fields the photon catch at one photon per receptor depends on (:meth:`replace` keeps it
    #: when none of them changes).
    _CATCH_FIELDS = ("sky", "texture", "pitch_deg", "roll_deg", "receptors")

    def replace(self, **changes) -> "SignalModel":
        """A copy with some fields changed (as ``dataclasses.replace``), sharing the photon catch.

        The catch at one photon per receptor depends on the receptors, sky, texture, pitch and
        roll only (:meth:`catch`), so a variant with another retina model (of the same
        receptors), light level, gain or field reuses it instead of computing it again.

        Parameters
        ----------
        **changes
            Field values, as for ``dataclasses.replace``; ``retina`` without ``receptors`` keeps
            this model's receptors when the new retina has the same ones.

        Returns
        -------
        SignalModel
        """
        import dataclasses

        if "retina" in changes and "receptors" not in changes and \
                getattr(changes["retina"], "receptors", None) is self.receptors:
            changes["receptors"] = self.receptors
        new = dataclasses.replace(self, **changes)
        if all(getattr(new, f) is getattr(self, f) for f in self._CATCH_FIELDS):
            object.__setattr__(new, "_unit_catch_head", self._unit_catch_head)
        return new

    # -- geometry ---------------------------------------------------------------------------------
    @property
    def n_receptors(self) -> int:
        """The number ``N`` of receptors."""
        return int(np.asarray(self.receptors.solid_angle).shape[0])

    @property
    def b_world(self) -> np.ndarray:
        """Unit field direction (3,) in the world frame."""
        return field_direction(self.inclination_deg, self.declination_deg)

    def rotations(self, headings_deg) -> Rotation:
        """Head-to-world rotations for headings at the fixed pitch and roll.

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.

        Returns
        -------
        scipy.spatial.transform.Rotation
            ``P`` rotations.
        """
        return _pose_rotations(headings_deg, self.pitch_deg, self.roll_deg)

    def b_head(self, headings_deg) -> np.ndarray:
        """Unit field direction in the head frame at headings.

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.

        Returns
        -------
        ndarray (P, 3)
            Unit vectors, head frame.
        """
        return head_field(self.rotations(headings_deg), self.b_world)

    def catch(self, headings_deg, *, photons: float | None = None) -> np.ndarray:
        """Mean pairs formed per receptor (times ``gain``), see :func:`retina.signal.light.photon_catch`.

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.
        photons : float, optional
            Light level instead of the model's own.

        Returns
        -------
        ndarray (P, N)
            Mean pairs per receptor per integration time; a read-only broadcast view when the
            catch does not depend on the heading (no world-fixed texture).
        """
        from retina.signal.light import photon_catch

        ph = self.photons if photons is None else photons
        h = np.atleast_1d(np.asarray(headings_deg, dtype=float))
        world_tex = self.texture is not None and self.texture.attached == "world"
        if not world_tex:
            # Yaw-independent: compute once for the fixed pitch and roll.
            if self._unit_catch_head is None:
                object.__setattr__(self, "_unit_catch_head", photon_catch(
                    self.receptors.visual_dirs, self.receptors.solid_angle, self.rotations([0.0]),
                    photons=1.0, sky=self.sky, texture=self.texture)[0])
            return np.broadcast_to(self.gain * ph * self._unit_catch_head, (h.size, self.n_receptors))
        return self.gain * photon_catch(self.receptors.visual_dirs, self.receptors.solid_angle,
                                        self.rotations(h), photons=ph, sky=self.sky,
                                        texture=self.texture)

    # -- expected counts --------------------------------------------------------------------------
    def expected(self, headings_deg) -> np.ndarray:
        """Expected counts at headings.

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.

        Returns
        -------
        ndarray (P, N)
            ``lam``: catch times yield, per receptor.
        """
        h = np.atleast_1d(np.asarray(headings_deg, dtype=float))
        y = np.asarray(self.retina.yields(self.b_head(h)), dtype=float).reshape(h.size, -1)
        return self.catch(h) * y

    def expected_and_derivative(self, headings_deg, *, wrt: str = "heading"):
        """Expected counts and their derivative (per radian) at headings (degrees).

        Parameters
        ----------
        headings_deg : array_like, shape (P,)
        wrt : {"heading", "inclination"}

        Returns
        -------
        lam : ndarray, shape (P, N)
        dlam : ndarray, shape (P, N)
        """
        h = np.atleast_1d(np.asarray(headings_deg, dtype=float))
        return self._expected_and_derivative(self.rotations(h), wrt, heading_path=True)

    def expected_at(self, rotations: Rotation) -> np.ndarray:
        """Expected counts for arbitrary head-to-world rotations (e.g. a head scan).

        Parameters
        ----------
        rotations : scipy.spatial.transform.Rotation
            ``P`` head-to-world rotations (a single one counts as ``P = 1``).

        Returns
        -------
        ndarray (P, N)
            ``lam`` per pose and receptor.
        """
        rot = _as_multi(rotations)
        y = np.asarray(self.retina.yields(head_field(rot, self.b_world)), dtype=float)
        return self._catch_rot(rot) * y.reshape(len(rot), -1)

    def _catch_rot(self, rot: Rotation) -> np.ndarray:
        from retina.signal.light import photon_catch

        return self.gain * photon_catch(self.receptors.visual_dirs, self.receptors.solid_angle, rot,
                                        photons=self.photons, sky=self.sky, texture=self.texture)

    def expected_and_derivative_at(self, rotations: Rotation, *, wrt: str = "heading"):
        """Expected counts and derivatives ``((P, N), (P, N))`` for arbitrary head rotations.

        ``wrt="heading"`` differentiates with respect to a common yaw offset of all poses.

        Parameters
        ----------
        rotations : scipy.spatial.transform.Rotation
            ``P`` head-to-world rotations (a single one counts as ``P = 1``).
        wrt : {"heading", "inclination"}
            The parameter of the derivative.

        Returns
        -------
        lam : ndarray (P, N)
            Expected counts.
        dlam : ndarray (P, N)
            Their derivative, per radian.

        Raises
        ------
        InputError
            Key ``light.texture`` with a world-fixed texture; key ``wrt`` for another parameter.
        """
        return self._expected_and_derivative(rotations, wrt, heading_path=False)

    def _expected_and_derivative(self, rotations: Rotation, wrt: str, *, heading_path: bool):
        """:meth:`expected_and_derivative_at`; ``heading_path``: the rotations differ in yaw only
        (the model's pitch and roll), so every pose has the catch of :meth:`catch`, computed once."""
        if self.texture is not None and self.texture.attached == "world":
            raise InputError("derivatives with a world-fixed texture are not defined (it would add a "
                             "visual heading cue); use a head-fixed texture or none", key="light.texture")
        if wrt not in ("heading", "inclination"):
            raise InputError(f"expected wrt 'heading' or 'inclination', got {wrt!r}", key="wrt")
        rot_all = _as_multi(rotations)
        P, N = len(rot_all), self.n_receptors
        lam = np.empty((P, N))
        dlam = np.empty((P, N))
        chunk = max(1, int(_CHUNK_BYTES // (N * 3 * 8)))
        for s in range(0, P, chunk):
            rot = rot_all[s:s + chunk]
            bh = head_field(rot, self.b_world)
            if wrt == "heading":
                db = head_field_dyaw(rot, self.b_world)
            else:
                db = rot.inv().apply(field_direction_dincl(self.inclination_deg, self.declination_deg))
            y, g = self.retina.yields_and_grad(bh)
            y = np.asarray(y, dtype=float).reshape(len(rot), N)
            g = np.asarray(g, dtype=float).reshape(len(rot), N, 3)
            # Catch: yaw- and inclination-independent (sky depends on elevation only, texture is
            # head-fixed or absent), but pitch and roll may vary between poses.
            c = self.catch(np.zeros(len(rot))) if heading_path else self._catch_rot(rot)
            lam[s:s + chunk] = c * y
            dlam[s:s + chunk] = c * np.einsum("pnk,pk->pn", g, db)
        return lam, dlam

    def expected_and_derivative_fourier(self, headings_deg, degree: int):
        """As :meth:`expected_and_derivative` (heading), through exact trigonometric interpolation.

        With pitch and roll fixed, ``b_head(psi)`` turns about a fixed head axis as ``psi``
        changes, so a yield function of harmonic degree ``L`` is a trigonometric polynomial of
        degree ``L`` in ``psi`` for every receptor (rotating a degree-l harmonic mixes orders
        ``|m| <= l`` only).  Evaluating the model (values and harmonic gradients) at ``2 L + 1``
        equally spaced headings and interpolating both is therefore exact up to rounding, and far
        cheaper when many headings are wanted.  Not valid with a world-fixed texture.

        Parameters
        ----------
        headings_deg : array_like, shape (P,)
        degree : int
            Harmonic degree ``L`` of the receptor responses (an upper bound is fine).

        Returns
        -------
        lam : ndarray (P, N)
            Expected counts.
        dlam : ndarray (P, N)
            Their heading derivative, per radian.
        """
        nodes, lam_n, dlam_n = self.fourier_nodes(degree)
        h = np.deg2rad(np.atleast_1d(np.asarray(headings_deg, dtype=float)))
        W = trig_interp_matrix(np.deg2rad(nodes), h, int(degree))
        return W @ lam_n, W @ dlam_n

    def fourier_nodes(self, degree: int):
        """The ``2 L + 1`` equally spaced node headings (degrees) and ``lam``, ``dlam`` there.

        Interpolate with :func:`trig_interp_matrix` (see :meth:`expected_and_derivative_fourier`).

        Parameters
        ----------
        degree : int
            Harmonic degree ``L`` >= 0 (``M = 2 L + 1`` nodes).

        Returns
        -------
        nodes : ndarray (M,)
            Headings, degrees, from 0 in steps of ``360 / M``.
        lam : ndarray (M, N)
            Expected counts there.
        dlam : ndarray (M, N)
            Their heading derivative, per radian.

        Raises
        ------
        InputError
            Key ``degree``, for a negative or fractional degree.
        """
        L = int(degree)
        if L < 0 or L != degree:
            raise InputError(f"expected a harmonic degree >= 0, got {degree}", key="degree")
        M = 2 * L + 1
        nodes = np.arange(M) * 360.0 / M
        lam_n, dlam_n = self.expected_and_derivative(nodes, wrt="heading")
        return nodes, lam_n, dlam_n

    # -- noise ------------------------------------------------------------------------------------
    def sample(self, headings_deg, rng=None, size: int | None = None) -> np.ndarray:
        """Poisson counts at headings (:func:`sample_counts`).

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.
        rng : numpy.random.Generator or int, optional
            Source of the draws (:func:`make_rng`).
        size : int, optional
            Number of independent repetitions, a leading axis.

        Returns
        -------
        ndarray (P, N) or (size, P, N)
            Whole-number counts, stored as floats.
        """
        return sample_counts(self.expected(headings_deg), rng, size)


def trig_interp_matrix(nodes: np.ndarray, x: np.ndarray, L: int) -> np.ndarray:
    """Weights of exact interpolation of a degree-``L`` trigonometric polynomial.

    From ``M = 2L + 1`` equally spaced nodes, by the Dirichlet kernel ``sin(M t/2) / (M sin(t/2))``.

    Parameters
    ----------
    nodes : ndarray, shape (M,)
        Equally spaced nodes, radians.
    x : ndarray, shape (X,)
        Where to interpolate, radians.
    L : int
        Degree of the polynomial (``M = 2L + 1``).

    Returns
    -------
    ndarray, shape (X, M)
        ``f(x) = W @ f(nodes)``.
    """
    M = nodes.size
    t = x[:, None] - nodes[None, :]
    half = 0.5 * t
    s = np.sin(half)
    with np.errstate(invalid="ignore", divide="ignore"):
        W = np.sin(M * half) / (M * s)
    near = np.abs(s) < 1e-12
    W[near] = np.cos(M * half[near]) / np.cos(half[near])  # limit (sign of the alias at t = 2 pi k)
    return W


def trig_derivative_matrix(M: int) -> np.ndarray:
    """Exact derivative, at the nodes, of the trigonometric polynomial through ``M`` node values.

    Derived: the interpolant of :func:`trig_interp_matrix` is ``f(x) = sum_k f_k D(x - x_k)`` with the
    Dirichlet kernel ``D(t) = sin(M t / 2) / (M sin(t / 2))`` (``M = 2 L + 1`` nodes ``x_k = 2 pi k / M``).
    At ``t = x_j - x_k = 2 pi d / M`` (``d != 0``), ``sin(M t / 2) = 0`` and ``cos(M t / 2) = (-1)^d``, so
    ``D'(t) = (-1)^d / (2 sin(pi d / M))``; ``D'(0) = 0`` (``D`` is even).  The entries for ``d`` and
    ``-d`` are computed once and negated (rows sum to zero up to rounding).

    Parameters
    ----------
    M : int
        Number of equally spaced nodes over one period, odd (``2 L + 1``).

    Returns
    -------
    ndarray, shape (M, M)
        ``f'(x_j) = sum_k T[j, k] f(x_k)``, per radian, exact for degree <= ``(M - 1) / 2``.
    """
    M = int(M)
    if M < 1 or M % 2 == 0:
        raise InputError(f"expected an odd number of nodes, got {M}", key="nodes")
    d = np.arange(1, (M - 1) // 2 + 1)
    v = (-1.0) ** d / (2.0 * np.sin(np.pi * d / M))
    T = np.zeros((M, M))
    j = np.arange(M)
    for dd, vv in zip(d, v):
        T[j, (j - dd) % M] = vv          # node k = j - d: t = x_j - x_k = +d steps
        T[j, (j + dd) % M] = -vv         # node k = j + d: t = -d steps, D' odd
    return T


def responses_at(frames, responses, b_head) -> np.ndarray:
    """Yields of many receptor responses at fixed head-frame field directions, in one pass.

    Receptor ``i`` with receptor-frame response ``r`` (even harmonic coefficients, the layout of
    :mod:`retina.sphere`) yields ``Phi_i(b) = r(F_i^T b)`` (``F_i`` its receptor-to-head frame; the
    rotation convention of ``retina.eye.pattern.RetinaModel``, whose head-frame coefficients are
    ``rotate(r, F_i)``).  The harmonics at the receptor-frame directions ``F_i^T b_p`` do not depend
    on the response, so they are computed once and every response costs one product: for the
    disorder and order studies, which compare many orderings of the same receptors at the same
    directions, this replaces one coefficient rotation per receptor and model.

    Parameters
    ----------
    frames : array_like, shape (N, 3, 3)
        Receptor-to-head frames (``Receptors.frames``, or a block of them).
    responses : array_like, shape (R, K)
        Receptor-frame responses of ``R`` models, ``K = (L + 1)(L + 2) / 2``.
    b_head : array_like, shape (P, 3)
        Field directions in the head frame (normalised here).

    Returns
    -------
    ndarray, shape (R, P, N)
        ``Phi`` of every model at every direction and receptor (``R * P * N`` values: pass a
        block of receptors to bound the memory).
    """
    from retina import sphere

    r = np.atleast_2d(np.asarray(responses, dtype=float))
    L = sphere.degree_from_n(r.shape[1])
    b = np.atleast_2d(np.asarray(b_head, dtype=float))
    b = b / np.linalg.norm(b, axis=1, keepdims=True)
    F = np.asarray(frames, dtype=float)
    d = np.einsum("nji,pj->pni", F, b)                      # receptor-frame directions (P, N, 3)
    Y = sphere.real_sh(L, d.reshape(-1, 3))                 # (P N, K)
    return np.moveaxis((Y @ r.T).reshape(b.shape[0], F.shape[0], r.shape[0]), 2, 0)
