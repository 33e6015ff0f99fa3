"""Modulation patterns: the yield at every receptor of both eyes for any head pose and field.

Conventions (owned here)
------------------------
A :class:`RetinaModel` holds, for every receptor ``i``, a band-limited response in the head frame:
even real-harmonic coefficients ``C[i] (K,)`` (layout of :mod:`retina.sphere`) with

    Phi_i(b_head) = sum_k C[i, k] Y_k(b_head)

for a unit field direction ``b_head`` in the head frame.  They are built once:

- ``mode="ensemble"`` (annealed): the receptor response ``r = ordering.ensemble(f)`` of the
  molecular yield function ``f`` in the receptor frame (:mod:`retina.eye.ordering`), rotated into
  the head frame by each receptor's frame, ``C[i] = rotate(r, F_i)``.  When ``r`` is axially
  symmetric about the receptor axis (all m != 0 terms below ``1e-12`` of the largest coefficient)
  the model instead keeps the Legendre series ``Phi_i = g(a_i . b_head)``, an even polynomial of
  degree ``L`` in the cosine, evaluated by Horner's rule in the squared cosine.
- ``mode="molecules"`` (quenched): receptor ``i`` holds ``n_molecules`` orientations ``Q_ij``
  drawn from ``ordering.sample`` with ``numpy.random.default_rng(seed)`` (receptor-major order, so
  the same seed gives the same molecules); its response is the mean of the molecules' rotated
  yield functions, ``C[i] = mean_j rotate(f, F_i Q_ij)``, still band-limited to degree ``L``, so the
  per-pose cost equals the ensemble path.  :meth:`RetinaModel.yields_bruteforce` evaluates every
  molecule directly (the cross-check).

Relative modulation: ``(Phi_i - mean_e) / mean_e`` with ``mean_e`` the solid-angle-weighted mean of
the yields over the receptors of receptor ``i``'s eye, ``mean_e = sum_{j in e} w_j Phi_j / sum_{j in
e} w_j`` (``w`` = :attr:`Receptors.solid_angle`); each eye is normalised on its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np
from scipy.spatial.transform import Rotation

from retina import sphere
from retina.errors import InputError
from retina.eye.field import Field
from retina.eye.geometry import Receptors
from retina.eye.ordering import Ordering, as_generator
from retina.eye.pose import Pose, head_field

__all__ = ["RetinaModel", "Pattern", "resample", "modulation"]

_AXIAL_TOL = 1e-12
#: Bytes of temporary coefficient arrays per chunk when building molecule responses.
_CHUNK_BYTES = 64 * 2 ** 20


@dataclass(frozen=True, eq=False)
class Pattern:
    """The yield pattern for one pose and field.

    Attributes
    ----------
    yields : ndarray, shape (N,)
        Yield at every receptor (dimensionless).
    modulation : ndarray, shape (N,)
        ``(Phi - mean_e) / mean_e`` (see the module docstring).
    eye_mean : ndarray, shape (2,)
        Solid-angle-weighted mean yield of the left (0) and right (1) eye (NaN for a missing eye).
    receptors : Receptors
    pose : Pose
    field : Field
    b_head : ndarray, shape (3,)
        Unit field direction in the head frame.
    """

    yields: np.ndarray
    modulation: np.ndarray
    eye_mean: np.ndarray
    receptors: Receptors
    pose: Pose
    field: Field
    b_head: np.ndarray


def _eye_means(yields: np.ndarray, receptors: Receptors) -> np.ndarray:
    """(..., 2) solid-angle-weighted mean yield per eye (NaN where an eye has no receptors)."""
    w = receptors.solid_angle
    out = np.full(yields.shape[:-1] + (2,), np.nan)
    for e in (0, 1):
        sel = receptors.eye_index == e
        if np.any(sel):
            out[..., e] = yields[..., sel] @ w[sel] / w[sel].sum()
    return out


def modulation(yields, receptors: Receptors) -> np.ndarray:
    """Relative modulation ``(Phi - mean_e) / mean_e`` of yields, per eye.

    Parameters
    ----------
    yields : array_like, shape (..., N)
        Reported yields of the receptors.
    receptors : Receptors
        Their eye membership and solid-angle weights (the mean of each eye is weighted).

    Returns
    -------
    ndarray, shape (..., N)
        Dimensionless.
    """
    y = np.asarray(yields, dtype=float)
    m = _eye_means(y, receptors)
    per = m[..., receptors.eye_index]
    return (y - per) / per


def _coeffs_of(obj) -> np.ndarray:
    c = np.asarray(getattr(obj, "coeffs", obj), dtype=float)
    if c.ndim != 1 or not np.all(np.isfinite(c)):
        raise InputError("expected a YieldFunction or a finite (K,) coefficient vector",
                         key="yield_function")
    try:
        sphere.degree_from_n(c.shape[0])
    except ValueError as e:
        raise InputError(str(e), key="yield_function") from None
    return c


@numba.njit(cache=True)
def _legendre_kernel(b, axes, q, want_grad, out, dout):
    """out[p, n] = g(t), dout[p, n] = g'(t) with t = b[p] . axes[n] and
    g(t) = sum_j q[j] t^(2 j) (Horner in t^2; one fused pass, no temporaries)."""
    P, N, J = b.shape[0], axes.shape[0], q.shape[0] - 1
    for p in range(P):
        bx, by, bz = b[p, 0], b[p, 1], b[p, 2]
        for n in range(N):
            t = bx * axes[n, 0] + by * axes[n, 1] + bz * axes[n, 2]
            u = t * t
            g = q[J]
            for j in range(J - 1, -1, -1):
                g = g * u + q[j]
            out[p, n] = g
            if want_grad:
                d = 0.0
                if J > 0:
                    d = J * q[J]
                    for j in range(J - 1, 0, -1):
                        d = d * u + j * q[j]
                dout[p, n] = 2.0 * t * d


class RetinaModel:
    """Receptor responses of all eyes, ready for any pose and field.

    Parameters
    ----------
    response_or_yieldfn : YieldFunction or ndarray, shape (K,)
        With an ``ordering``: the molecular yield function (molecular frame).  Without
        (``ordering=None``): the receptor response itself, in the receptor frame.
    receptors : Receptors
        From :func:`retina.eye.geometry.build_receptors`.
    ordering : Ordering or None
        Molecular ordering model (:mod:`retina.eye.ordering`).
    mode : {"ensemble", "molecules"}
        Annealed (exact average) or quenched (``n_molecules`` per receptor).
    n_molecules : int
        Molecules per receptor for ``mode="molecules"``.
    seed : int or numpy.random.Generator
        Source of the molecular orientations for ``mode="molecules"``.
    progress : callable(done, total), optional
        Called while building the molecule responses.
    """

    def __init__(self, response_or_yieldfn, receptors: Receptors, ordering: Ordering | None = None,
                 mode: str = "ensemble", n_molecules: int = 100, seed=0, *, progress=None):
        if mode not in ("ensemble", "molecules"):
            raise InputError(f"expected mode 'ensemble' or 'molecules', got {mode!r}", key="mode")
        if not isinstance(receptors, Receptors):
            raise InputError("expected a Receptors object", key="receptors")
        if ordering is not None and not isinstance(ordering, Ordering):
            raise InputError(f"expected an ordering model, got {type(ordering).__name__}",
                             key="ordering")
        self.receptors = receptors
        self.ordering = ordering
        self.mode = mode
        self.source_coeffs = _coeffs_of(response_or_yieldfn)
        self.degree = sphere.degree_from_n(self.source_coeffs.shape[0])
        self.n_molecules = None
        self._legendre = None  # (L/2 + 1,) monomial coefficients in u = t^2, or None
        self.coeffs = None  # (N, K) head-frame coefficients, or None on the Legendre path
        self._molecule_rotations = None
        if mode == "ensemble":
            r = self.source_coeffs if ordering is None else ordering.ensemble(self.source_coeffs)
            self.response = np.asarray(r, dtype=float)
            _, m = sphere.lm_index(self.degree)
            scale = max(np.abs(self.response).max(), 1e-300)
            if np.abs(self.response[m != 0]).max(initial=0.0) <= _AXIAL_TOL * scale:
                a = sphere.zonal_to_legendre(self.response)  # g(t) = sum a_l P_l(t)
                p = np.polynomial.legendre.leg2poly(a)  # monomials in t (odd terms ~ 0)
                self._legendre = np.ascontiguousarray(p[0::2])
            else:
                self.coeffs = np.ascontiguousarray(sphere.rotate(self.response,
                                                                 receptors.rotations))
        else:
            if ordering is None:
                raise InputError("mode 'molecules' needs an ordering model", key="ordering")
            if not isinstance(n_molecules, (int, np.integer)) or n_molecules < 1:
                raise InputError(f"expected n_molecules >= 1, got {n_molecules!r}",
                                 key="n_molecules")
            self.n_molecules = int(n_molecules)
            self.response = None
            self.coeffs = self._build_molecules(as_generator(seed), progress)

    # ------------------------------------------------------------------ construction
    def _build_molecules(self, rng: np.random.Generator, progress) -> np.ndarray:
        N, n, K = len(self.receptors), self.n_molecules, self.source_coeffs.shape[0]
        Q = self.ordering.sample(N * n, rng)  # receptor-major: receptor i owns rows i*n .. i*n+n-1
        self._molecule_rotations = Q
        F = self.receptors.rotations
        out = np.empty((N, K))
        per = max(1, _CHUNK_BYTES // (8 * K * n))
        for s in range(0, N, per):
            e = min(N, s + per)
            Fi = Rotation.from_quat(np.repeat(F[s:e].as_quat(), n, axis=0))
            rot = Fi * Q[s * n:e * n]
            c = sphere.rotate(self.source_coeffs, rot)
            out[s:e] = c.reshape(e - s, n, K).mean(axis=1)
            if progress is not None:
                progress(e, N)
        return out

    @property
    def axial(self) -> bool:
        """True when the Legendre (axially symmetric receptor) path is used."""
        return self._legendre is not None

    @property
    def molecule_rotations(self) -> Rotation | None:
        """Molecule-to-receptor rotations ``(N * n_molecules)`` in ``mode="molecules"``."""
        return self._molecule_rotations

    def head_coeffs(self) -> np.ndarray:
        """Head-frame coefficients of every receptor (built on demand on the Legendre path).

        Returns
        -------
        ndarray (N, K)
            The receptor response rotated into each receptor's frame in the head.
        """
        if self.coeffs is not None:
            return self.coeffs
        return sphere.rotate(self.response, self.receptors.rotations)

    # ------------------------------------------------------------------ evaluation
    @staticmethod
    def _dirs(b_head) -> np.ndarray:
        b = np.asarray(b_head, dtype=float)
        if b.ndim == 1:
            b = b[None, :]
        if b.ndim != 2 or b.shape[1] != 3 or not np.all(np.isfinite(b)):
            raise InputError(f"expected head-frame field directions of shape (P, 3), got "
                             f"{np.shape(b_head)}", key="b_head")
        n = np.linalg.norm(b, axis=1, keepdims=True)
        if np.any(n == 0):
            raise InputError("a zero field has no direction", key="b_head")
        return b / n

    def _horner(self, b: np.ndarray, want_grad: bool):
        """Values g(a_n . b_p) and derivatives g'(a_n . b_p), each (P, N)."""
        P, N = b.shape[0], len(self.receptors)
        out = np.empty((P, N))
        dout = np.empty((P, N)) if want_grad else np.empty((1, 1))
        _legendre_kernel(np.ascontiguousarray(b), np.ascontiguousarray(self.receptors.axes),
                         self._legendre, want_grad, out, dout)
        return out, (dout if want_grad else None)

    def yields(self, b_head) -> np.ndarray:
        """The receptors' yields for field directions in the head frame.

        Parameters
        ----------
        b_head : array_like (P, 3) or (3,)
            Field directions in the head frame, any non-zero length (normalised here).

        Returns
        -------
        ndarray (P, N)
            Yield of every receptor at every direction (dimensionless).

        Raises
        ------
        InputError
            Key ``b_head``, for other shapes, non-finite or zero vectors.
        """
        b = self._dirs(b_head)
        if self._legendre is not None:
            return self._horner(b, False)[0]
        return sphere.real_sh(self.degree, b) @ self.coeffs.T

    def yields_and_grad(self, b_head) -> tuple[np.ndarray, np.ndarray]:
        """Yields ``(P, N)`` and their tangential gradients ``(P, N, 3)`` with respect to the
        head-frame field direction (``dPhi/dt = grad . db/dt`` along a path on the sphere).

        Parameters
        ----------
        b_head : array_like (P, 3) or (3,)
            Field directions in the head frame, any non-zero length (normalised here).

        Returns
        -------
        yields : ndarray (P, N)
            As :meth:`yields`.
        grad : ndarray (P, N, 3)
            Surface gradients (tangent to the sphere at each direction), per radian.

        Raises
        ------
        InputError
            Key ``b_head``, for other shapes, non-finite or zero vectors.
        """
        b = self._dirs(b_head)
        if self._legendre is not None:
            A = self.receptors.axes
            t = b @ A.T
            g, dg = self._horner(b, True)
            grad = dg[:, :, None] * (A[None, :, :] - t[:, :, None] * b[:, None, :])
            return g, grad
        Y, G = sphere.real_sh_grad(self.degree, b)
        P, K = Y.shape
        # one BLAS product for values and the three gradient components: rows (P, 4)
        rows = np.concatenate([Y[:, None, :], G.transpose(0, 2, 1)], axis=1).reshape(P * 4, K)
        out = (rows @ self.coeffs.T).reshape(P, 4, -1)
        return out[:, 0, :], out[:, 1:, :].transpose(0, 2, 1)

    def yields_bruteforce(self, b_head) -> np.ndarray:
        """Yields ``(P, N)`` by direct per-molecule evaluation (``mode="molecules"`` only): the
        molecular yield function at ``(F_i Q_ij)^-1 b`` averaged over molecules.  Slow; a
        cross-check.

        Parameters
        ----------
        b_head : array_like (P, 3) or (3,)
            Field directions in the head frame, any non-zero length (normalised here).

        Returns
        -------
        ndarray (P, N)
            As :meth:`yields`.

        Raises
        ------
        InputError
            Key ``mode`` in ``mode="ensemble"``; key ``b_head`` for bad directions.
        """
        if self._molecule_rotations is None:
            raise InputError("yields_bruteforce needs mode 'molecules'", key="mode")
        b = self._dirs(b_head)
        N, n = len(self.receptors), self.n_molecules
        F = Rotation.from_quat(np.repeat(self.receptors.rotations.as_quat(), n, axis=0))
        inv = (F * self._molecule_rotations).inv()
        out = np.empty((b.shape[0], N))
        for p in range(b.shape[0]):
            d = inv.apply(b[p])
            out[p] = sphere.evaluate(self.source_coeffs, d).reshape(N, n).mean(axis=1)
        return out

    def modulation(self, yields) -> np.ndarray:
        """Relative modulation of yields per eye (:func:`modulation`, module docstring).

        Parameters
        ----------
        yields : array_like (..., N)
            Yields of this model's receptors.

        Returns
        -------
        ndarray (..., N)
            ``(Phi - mean_e) / mean_e``, dimensionless.
        """
        return modulation(yields, self.receptors)

    def pattern(self, pose: Pose, field: Field) -> Pattern:
        """The :class:`Pattern` for one pose and field.

        Parameters
        ----------
        pose : Pose
            Head pose in the world (heading, pitch, roll).
        field : Field
            The geomagnetic field in the world frame.

        Returns
        -------
        Pattern
            Yields, modulation and per-eye means of the ``N`` receptors.

        Raises
        ------
        InputError
            Keys ``pose`` or ``field``, for objects of other types.
        """
        if not isinstance(pose, Pose):
            raise InputError(f"expected a Pose, got {type(pose).__name__}", key="pose")
        if not isinstance(field, Field):
            raise InputError(f"expected a Field, got {type(field).__name__}", key="field")
        b = head_field(pose.rotation, field.vector)
        y = self.yields(b)[0]
        m = _eye_means(y, self.receptors)
        mod = (y - m[self.receptors.eye_index]) / m[self.receptors.eye_index]
        return Pattern(yields=y, modulation=mod, eye_mean=m, receptors=self.receptors, pose=pose,
                       field=field, b_head=b[0])


def resample(pattern: Pattern, grid_az_el, *, values: str = "modulation") -> np.ndarray:
    """A pattern on a regular grid of visual directions, for display.

    Parameters
    ----------
    pattern : Pattern
    grid_az_el : tuple (az_deg (A,), el_deg (E,))
        Azimuths from the beak (positive right) and elevations (positive up), degrees, in the head
        frame (the optical-axis convention of :mod:`retina.eye.geometry`).
    values : {"modulation", "yields"}

    Returns
    -------
    ndarray, shape (2, E, A)
        Per eye (0 left, 1 right), the value of the receptor whose visual direction is nearest to
        each grid direction; NaN where the direction lies outside that eye's visual field (angle
        to the optical axis above the retinal extent) or the eye is absent.
    """
    from scipy.spatial import cKDTree

    from retina.eye.geometry import optical_axis

    if values not in ("modulation", "yields"):
        raise InputError(f"expected values 'modulation' or 'yields', got {values!r}", key="values")
    try:
        az, el = (np.asarray(g, dtype=float).ravel() for g in grid_az_el)
    except (TypeError, ValueError):
        raise InputError("expected grid_az_el = (azimuths_deg, elevations_deg)",
                         key="grid_az_el") from None
    v = getattr(pattern, values)
    A, E = np.meshgrid(np.radians(az), np.radians(el))
    d = np.stack([np.cos(E) * np.cos(A), np.cos(E) * np.sin(A), -np.sin(E)], axis=-1)
    rec = pattern.receptors
    out = np.full((2, len(el), len(az)), np.nan)
    for eye in rec.eyes:
        sel = rec.select(eye.index)
        tree = cKDTree(rec.visual_dirs[sel])
        _, j = tree.query(d.reshape(-1, 3))
        inside = d.reshape(-1, 3) @ optical_axis(eye.azimuth_deg, eye.elevation_deg) >= \
            math.cos(math.radians(eye.extent_deg)) - 1e-12
        vals = np.where(inside, v[sel][j], np.nan)
        out[eye.index] = vals.reshape(len(el), len(az))
    return out
