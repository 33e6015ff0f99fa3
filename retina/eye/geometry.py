"""Eyes and receptors: where the receptors sit, which way they point, what they see.

Conventions (owned here)
------------------------
All vectors are in the head frame (``x`` forward, ``y`` right, ``z`` down; see
:mod:`retina.eye.pose`).

*Optical axis.*  An eye's optical axis is the visual direction at the centre of its visual field,
given by an azimuth (degrees from the beak, positive toward the bird's right, like yaw) and an
elevation (degrees above the horizontal plane of the head)::

    o = (cos el cos az, cos el sin az, -sin el)

*Pinhole optics.*  Each eye is a sphere of radius ``radius_mm`` around ``centre_mm``; light from
the visual direction ``d`` passes the centre and lands at the point ``-d`` of the eye's unit sphere.
The retina is the cap of points ``u`` with angle ``<= extent_deg`` from ``-o`` (a hemisphere by
default).  A receptor at unit position ``u`` has visual direction ``d = -u``, position
``centre_mm + radius_mm * u`` (millimetres) and axis ``a = u``: the retinal normal, pointing along
the light inside the eye (from the eye centre out through the receptor).  Yields are even in the
field direction, so the sign of the axis has no effect on any result.

*Local receptor frame.*  ``frames[i]`` is a rotation matrix whose columns are the receptor's local
``x``, ``y``, ``z`` axes expressed in the head frame, so ``v_head = frames[i] @ v_local`` (the
receptor-to-head rotation).  ``z`` is the receptor axis; ``x`` is the projection of the head's
dorsal direction ``(0, 0, -1)`` onto the plane normal to the axis; where the axis is within 1e-6 rad
of the dorsal-ventral line the projection of the forward direction ``(1, 0, 0)`` is used instead;
``y = z x x``.

*Placement.*  Receptors are placed on the cap by a Fibonacci spiral: the ``i``-th point lies at the
polar angle ``t_i`` (from the cap centre) where the cumulative receptor fraction reaches
``(i + 1/2) / n`` and at the azimuth ``i * golden_angle``.  With a uniform density the spiral is
equal-area; with a central area the cumulative fraction comes from the density profile
``w(t) = 1 + (ratio - 1) exp(-t^2 / (2 s^2))`` (relative areal density; ``ratio`` the peak to
peripheral density, ``s`` the width of the central area), so the spiral is warped to be denser at
the cap centre.  The central area is centred on the optical axis (a modelling simplification).

*Solid-angle weights.*  Receptor ``i`` owns the ring between the polar angles where the cumulative
fraction is ``i / n`` and ``(i + 1) / n``: ``solid_angle[i] = 2 pi (cos t_lo - cos t_hi)`` (sr).
They sum to the cap area ``2 pi (1 - cos rho)`` exactly and agree with Voronoi-cell areas of the
spiral (tested against ``scipy.spatial.SphericalVoronoi``).

*Eye index.*  ``eye_index`` is 0 for the left eye and 1 for the right eye.  The left eye of
:func:`default_eyes` is the mirror image of the right eye in the head's ``x``-``z`` plane, and
receptor placement respects the mirror exactly (receptor ``i`` of the left eye is the mirror of
receptor ``i`` of the right eye).

Defaults for a small songbird-like model eye (:func:`default_eyes`), with provenance:

- optical axes at azimuth +/-60 degrees from the beak and elevation 0: from memory (laterally
  placed eyes of small passerines point roughly 55-65 degrees from the beak); approximate.
- eye radius 3 mm: from memory (axial length of a small songbird's eye is roughly 5-7 mm).
- eye centres 5 mm either side of the midline: from memory, rough skull width; only used for
  receptor positions, which no yield depends on.
- retinal extent: a hemisphere (90 degrees), a modelling choice (common practice, no source).
- 2000 receptors per eye, uniform density: a modelling choice, not a biological count.
- for ``density="central"``: peak-to-peripheral ratio 4 and width 20 degrees, a modelling choice
  (no source; real avian retinas have one or two foveae, not necessarily on the optical axis).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field

import numpy as np

from retina.errors import InputError


def _is_real(v) -> bool:
    """A real number (Python or numpy), not a bool."""
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


__all__ = ["Eye", "Receptors", "build_receptors", "default_eyes", "optical_axis",
           "cap_points", "local_frames", "GOLDEN_ANGLE"]

#: Golden angle, radians: pi (3 - sqrt 5).
GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))
_DORSAL = np.array([0.0, 0.0, -1.0])
_FORWARD = np.array([1.0, 0.0, 0.0])
_MIRROR = np.diag([1.0, -1.0, 1.0])


def optical_axis(azimuth_deg: float, elevation_deg: float) -> np.ndarray:
    """Unit visual direction for an azimuth from the beak and an elevation.

    Parameters
    ----------
    azimuth_deg : float
        Degrees from the beak, positive to the right.
    elevation_deg : float
        Degrees, positive up.

    Returns
    -------
    ndarray, shape (3,)
        Unit vector in the head frame (x forward, y right, z down).
    """
    az, el = math.radians(azimuth_deg), math.radians(elevation_deg)
    return np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), -math.sin(el)])


@dataclass(frozen=True)
class Eye:
    """One eye.

    Attributes
    ----------
    side : {"left", "right"}
        Which eye (``eye_index`` 0 or 1).
    azimuth_deg, elevation_deg : float
        Optical axis (see the module docstring).
    extent_deg : float
        Angular radius of the retinal cap, degrees, in (0, 180].
    n_receptors : int
        Number of receptors (>= 1).
    density : {"uniform", "central"}
        Density profile.
    central_ratio : float
        Peak-to-peripheral areal density for ``density="central"`` (>= 1).
    central_width_deg : float
        Width ``s`` of the central area, degrees (> 0).
    radius_mm : float
        Eye radius, millimetres.
    centre_mm : tuple of 3 floats or None
        Eye centre in the head frame, millimetres; ``None`` puts it 5 mm to the eye's side of the
        midline, ``(0, -5, 0)`` left or ``(0, 5, 0)`` right.
    """

    side: str = "right"
    azimuth_deg: float = 60.0
    elevation_deg: float = 0.0
    extent_deg: float = 90.0
    n_receptors: int = 2000
    density: str = "uniform"
    central_ratio: float = 4.0
    central_width_deg: float = 20.0
    radius_mm: float = 3.0
    centre_mm: tuple | None = None

    def __post_init__(self):
        if self.side not in ("left", "right"):
            raise InputError(f"expected side 'left' or 'right', got {self.side!r}", key="eye.side")
        if self.centre_mm is None:
            object.__setattr__(self, "centre_mm", (0.0, -5.0 if self.side == "left" else 5.0, 0.0))
        else:
            try:
                c = tuple(np.asarray(self.centre_mm, dtype=float).ravel().tolist())
            except (TypeError, ValueError):
                raise InputError(f"expected an eye centre (x, y, z) in mm, got {self.centre_mm!r}",
                                 key="eye.centre_mm") from None
            object.__setattr__(self, "centre_mm", c)
        for k in ("azimuth_deg", "elevation_deg", "extent_deg", "central_ratio",
                  "central_width_deg", "radius_mm"):
            v = getattr(self, k)
            if not _is_real(v) or not math.isfinite(v):
                raise InputError(f"expected a finite number, got {v!r}", key=f"eye.{k}")
        if abs(self.elevation_deg) > 90:
            raise InputError(f"expected an elevation in [-90, 90] degrees, got "
                             f"{self.elevation_deg!r}", key="eye.elevation_deg")
        if not 0 < self.extent_deg <= 180:
            raise InputError(f"expected a retinal extent in (0, 180] degrees, got "
                             f"{self.extent_deg!r}", key="eye.extent_deg")
        n = self.n_receptors
        if not isinstance(n, (int, np.integer)) or isinstance(n, bool) or n < 1:
            raise InputError(f"expected a positive integer receptor count, got "
                             f"{self.n_receptors!r}", key="eye.n_receptors")
        if self.density not in ("uniform", "central"):
            raise InputError(f"expected density 'uniform' or 'central', got {self.density!r}",
                             key="eye.density")
        if self.central_ratio < 1:
            raise InputError(f"expected a central density ratio >= 1, got {self.central_ratio!r}",
                             key="eye.central_ratio")
        if self.central_width_deg <= 0:
            raise InputError(f"expected a central width > 0 degrees, got "
                             f"{self.central_width_deg!r}", key="eye.central_width_deg")
        if self.radius_mm <= 0:
            raise InputError(f"expected an eye radius > 0 mm, got {self.radius_mm!r}",
                             key="eye.radius_mm")
        c = np.asarray(self.centre_mm, dtype=float)
        if c.shape != (3,) or not np.all(np.isfinite(c)):
            raise InputError(f"expected a finite eye centre (x, y, z) in mm, got "
                             f"{self.centre_mm!r}", key="eye.centre_mm")

    @property
    def index(self) -> int:
        """0 for the left eye, 1 for the right eye."""
        return 0 if self.side == "left" else 1

    @property
    def axis(self) -> np.ndarray:
        """Optical axis (unit visual direction), shape (3,)."""
        return optical_axis(self.azimuth_deg, self.elevation_deg)

    @property
    def cap_area(self) -> float:
        """Retinal cap solid angle ``2 pi (1 - cos rho)``, steradians."""
        return 2.0 * math.pi * (1.0 - math.cos(math.radians(self.extent_deg)))

    def mirrored(self) -> "Eye":
        """The mirror image in the head's x-z plane (the other side).

        Returns
        -------
        Eye
            The other side, azimuth and the centre's ``y`` negated, every other field kept.
        """
        c = self.centre_mm
        return Eye(side="left" if self.side == "right" else "right",
                   azimuth_deg=-self.azimuth_deg, elevation_deg=self.elevation_deg,
                   extent_deg=self.extent_deg, n_receptors=self.n_receptors,
                   density=self.density, central_ratio=self.central_ratio,
                   central_width_deg=self.central_width_deg, radius_mm=self.radius_mm,
                   centre_mm=(c[0], -c[1], c[2]))


def default_eyes(n_receptors: int = 2000, **kwargs) -> tuple[Eye, Eye]:
    """Left and right eyes of the small songbird-like model eye.

    Defaults and provenance in the module docstring; the left eye is the mirror image of the right.

    Parameters
    ----------
    n_receptors : int
        Receptors per eye.
    **kwargs
        Override :class:`Eye` fields of the right eye.

    Returns
    -------
    (Eye, Eye)
        Left, right.
    """
    right = Eye(side="right", n_receptors=n_receptors, **kwargs)
    return right.mirrored(), right


def _cumulative(eye: Eye, n_grid: int = 4097) -> tuple[np.ndarray, np.ndarray]:
    """Polar angles t (n_grid,) on [0, rho] and the cumulative receptor fraction M(t)."""
    rho = math.radians(eye.extent_deg)
    t = np.linspace(0.0, rho, n_grid)
    if eye.density == "uniform":
        return t, (1.0 - np.cos(t)) / (1.0 - math.cos(rho))
    s = math.radians(eye.central_width_deg)
    w = 1.0 + (eye.central_ratio - 1.0) * np.exp(-t ** 2 / (2 * s * s))
    g = w * np.sin(t)
    # cumulative trapezoid (fine grid; the profile is smooth)
    M = np.concatenate([[0.0], np.cumsum(0.5 * (g[1:] + g[:-1]) * np.diff(t))])
    return t, M / M[-1]


def _inverse_cumulative(eye: Eye, q: np.ndarray) -> np.ndarray:
    rho = math.radians(eye.extent_deg)
    if eye.density == "uniform":
        return np.arccos(np.clip(1.0 - q * (1.0 - math.cos(rho)), -1.0, 1.0))
    t, M = _cumulative(eye)
    return np.interp(q, M, t)


def cap_points(eye: Eye) -> tuple[np.ndarray, np.ndarray]:
    """Fibonacci-spiral points on the cap in the cap's own frame (z = cap centre).

    Parameters
    ----------
    eye : Eye
        The eye (extent, density profile, number of receptors).

    Returns
    -------
    local : ndarray, shape (n, 3)
        Unit vectors; the cap centre is ``(0, 0, 1)``.
    solid_angle : ndarray, shape (n,)
        Ring areas, steradians (see the module docstring).
    """
    n = eye.n_receptors
    i = np.arange(n)
    theta = _inverse_cumulative(eye, (i + 0.5) / n)
    edges = _inverse_cumulative(eye, np.arange(n + 1) / n)
    edges[0], edges[-1] = 0.0, math.radians(eye.extent_deg)
    phi = (i * GOLDEN_ANGLE) % (2 * math.pi)
    st = np.sin(theta)
    local = np.stack([st * np.cos(phi), st * np.sin(phi), np.cos(theta)], axis=-1)
    solid = 2.0 * math.pi * (np.cos(edges[:-1]) - np.cos(edges[1:]))
    return local, solid


def _perp_basis(z: np.ndarray) -> np.ndarray:
    """x axes (N, 3): the dorsal direction projected normal to z (N, 3), forward as fallback."""
    x = _DORSAL[None, :] - (z @ _DORSAL)[:, None] * z
    n = np.linalg.norm(x, axis=1)
    bad = n < 1e-6
    if np.any(bad):
        zb = z[bad]
        xf = _FORWARD[None, :] - (zb @ _FORWARD)[:, None] * zb
        x[bad] = xf
        n[bad] = np.linalg.norm(xf, axis=1)
    return x / n[:, None]


def local_frames(axes: np.ndarray) -> np.ndarray:
    """Receptor-to-head rotation matrices for unit receptor axes.

    Columns x, y, z with z the axis, x the projected dorsal direction (forward at the singular
    point), y = z x x.

    Parameters
    ----------
    axes : ndarray, shape (N, 3)
        Unit receptor axes, head frame.

    Returns
    -------
    ndarray, shape (N, 3, 3)
        Rotation matrices (receptor frame to head frame).
    """
    z = np.asarray(axes, dtype=float)
    z = z / np.linalg.norm(z, axis=1, keepdims=True)
    x = _perp_basis(z)
    y = np.cross(z, x)
    return np.stack([x, y, z], axis=-1)


@dataclass(frozen=True, eq=False)
class Receptors:
    """All receptors of all eyes, in the head frame (see the module docstring).

    Attributes
    ----------
    positions : ndarray, shape (N, 3)
        Positions on the eye spheres, millimetres.
    axes : ndarray, shape (N, 3)
        Unit receptor axes (retinal normals, ``a = -d``).
    frames : ndarray, shape (N, 3, 3)
        Receptor-to-head rotation matrices (columns: local x, y, z).
    visual_dirs : ndarray, shape (N, 3)
        Unit visual directions ``d``.
    solid_angle : ndarray, shape (N,)
        Retinal solid angle of each receptor, steradians.
    eye_index : ndarray of int, shape (N,)
        0 left, 1 right.
    eyes : tuple of Eye
        The eyes, in the order their receptors appear.
    """

    positions: np.ndarray
    axes: np.ndarray
    frames: np.ndarray
    visual_dirs: np.ndarray
    solid_angle: np.ndarray
    eye_index: np.ndarray
    eyes: tuple = field(default_factory=tuple)

    def __len__(self) -> int:
        return self.axes.shape[0]

    @property
    def rotations(self):
        """Receptor-to-head rotations as a scipy ``Rotation`` of length N."""
        from scipy.spatial.transform import Rotation

        return Rotation.from_matrix(self.frames)

    def select(self, eye: int) -> np.ndarray:
        """Indices of the receptors of one eye.

        Parameters
        ----------
        eye : int
            0 for the left eye, 1 for the right.

        Returns
        -------
        ndarray of int (n,)
            Increasing indices into the receptor arrays; empty when that eye is absent.
        """
        return np.flatnonzero(self.eye_index == eye)


def _cap_basis(eye: Eye) -> np.ndarray:
    """(3, 3) matrix mapping cap-local vectors to head vectors; columns e1, e2, c."""
    c = -eye.axis  # cap centre on the eye's unit sphere
    e1 = _perp_basis(c[None, :])[0]
    e2 = np.cross(c, e1)
    if eye.side == "left":  # mirror-consistent placement (see module docstring)
        e2 = -e2
    return np.stack([e1, e2, c], axis=-1)


def build_receptors(eyes) -> Receptors:
    """Receptors of one or two eyes.

    Parameters
    ----------
    eyes : Eye or sequence of Eye
        At most one left and one right eye.

    Returns
    -------
    Receptors
        Receptors of the eyes in the order given.
    """
    if isinstance(eyes, Eye):
        eyes = (eyes,)
    eyes = tuple(eyes)
    if not eyes or len(eyes) > 2 or not all(isinstance(e, Eye) for e in eyes):
        raise InputError("expected one or two Eye objects", key="eyes")
    if len({e.side for e in eyes}) != len(eyes):
        raise InputError("expected at most one left and one right eye", key="eyes")
    pos, ax, vis, sa, idx = [], [], [], [], []
    for e in eyes:
        local, solid = cap_points(e)
        u = local @ _cap_basis(e).T
        u /= np.linalg.norm(u, axis=1, keepdims=True)
        pos.append(np.asarray(e.centre_mm, dtype=float)[None, :] + e.radius_mm * u)
        ax.append(u)
        vis.append(-u)
        sa.append(solid)
        idx.append(np.full(len(u), e.index, dtype=np.int8))
    axes = np.concatenate(ax)
    arrays = dict(positions=np.concatenate(pos), axes=axes, frames=local_frames(axes),
                  visual_dirs=np.concatenate(vis), solid_angle=np.concatenate(sa),
                  eye_index=np.concatenate(idx))
    for a in arrays.values():
        a.setflags(write=False)
    return Receptors(eyes=eyes, **arrays)
