"""Head pose, head scans, and the field direction seen in the head frame.

Conventions (owned here)
------------------------
Head frame: ``x`` forward (toward the beak tip), ``y`` to the bird's right, ``z`` down (aerospace
body axes).  A pose is yaw (heading, clockwise from geographic north seen from above), pitch (nose
up positive) and roll (right side down positive), applied as intrinsic z-y-x Euler angles through
``scipy.spatial.transform.Rotation.from_euler("ZYX", [yaw, pitch, roll])``.  The rotation maps
head-frame vectors to world-frame (north-east-down) vectors, so a world vector ``b_world`` is seen
in the head as ``b_head = R.inv().apply(b_world)``.  Angles are degrees at the user boundary.

Yaw derivative: yaw is the outermost rotation, about the world ``z`` (down) axis, so changing the
heading by ``d psi`` maps ``R -> Rz(d psi) R`` and

    d b_head / d psi = -R^T (e_z x b_world)          (per radian)

for any pitch and roll (:func:`head_field_dyaw`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.spatial.transform import Rotation

from retina.errors import InputError

__all__ = ["Pose", "pose_rotation", "head_field", "head_field_dyaw", "HeadScan", "yaw_sweep",
           "headings", "poses_from_arrays"]


def _finite(name, v):
    a = np.asarray(v, dtype=float)
    if not np.all(np.isfinite(a)):
        raise InputError(f"expected finite angles in degrees, got {v!r}", key=name)
    return a


def pose_rotation(yaw_deg, pitch_deg=0.0, roll_deg=0.0) -> Rotation:
    """Head-to-world rotation(s) for yaw, pitch, roll in degrees.

    Parameters
    ----------
    yaw_deg, pitch_deg, roll_deg : float or array_like
        Broadcast against each other; pitch must lie in [-90, 90].

    Returns
    -------
    Rotation
        A single rotation for scalar input, else ``P`` rotations (flattened broadcast shape).
    """
    y, p, r = (_finite(n, v) for n, v in (("yaw_deg", yaw_deg), ("pitch_deg", pitch_deg),
                                          ("roll_deg", roll_deg)))
    if np.any(np.abs(p) > 90):
        raise InputError(f"expected a pitch in [-90, 90] degrees, got {pitch_deg!r}",
                         key="pitch_deg")
    y, p, r = np.broadcast_arrays(y, p, r)
    if y.ndim == 0:
        return Rotation.from_euler("ZYX", [float(y), float(p), float(r)], degrees=True)
    ang = np.stack([y.ravel(), p.ravel(), r.ravel()], axis=-1)
    return Rotation.from_euler("ZYX", ang, degrees=True)


@dataclass(frozen=True)
class Pose:
    """One head orientation (degrees): heading ``yaw_deg``, ``pitch_deg``, ``roll_deg``."""

    yaw_deg: float = 0.0
    pitch_deg: float = 0.0
    roll_deg: float = 0.0

    def __post_init__(self):
        pose_rotation(self.yaw_deg, self.pitch_deg, self.roll_deg)  # validates

    @property
    def rotation(self) -> Rotation:
        """Head-to-world rotation."""
        return pose_rotation(self.yaw_deg, self.pitch_deg, self.roll_deg)


def _as_rotations(rotations) -> Rotation:
    if isinstance(rotations, Pose):
        rotations = rotations.rotation
    if not isinstance(rotations, Rotation):
        raise InputError(f"expected a scipy Rotation or a Pose, got {type(rotations).__name__}",
                         key="rotations")
    if rotations.single:
        rotations = Rotation.from_quat(rotations.as_quat()[None, :])
    return rotations


def _unit_world(b_world) -> np.ndarray:
    b = np.asarray(b_world, dtype=float)
    if b.shape != (3,) or not np.all(np.isfinite(b)):
        raise InputError(f"expected a finite (3,) world field vector, got {b_world!r}",
                         key="b_world")
    n = np.linalg.norm(b)
    if n == 0:
        raise InputError("a zero field has no direction", key="b_world")
    return b / n


def head_field(rotations, b_world) -> np.ndarray:
    """Unit field direction in the head frame for each pose.

    Parameters
    ----------
    rotations : Rotation (single or P) or Pose
        Head-to-world rotations.
    b_world : array_like, shape (3,)
        Field in the NED world frame (any units; only the direction is used).

    Returns
    -------
    ndarray, shape (P, 3)
        Unit vectors ``R^-1 b / |b|`` (P = 1 for a single rotation).
    """
    R = _as_rotations(rotations)
    return R.inv().apply(_unit_world(b_world)).reshape(-1, 3)


def head_field_dyaw(rotations, b_world) -> np.ndarray:
    """Derivative of :func:`head_field` with respect to yaw, per radian.

    ``d b_head / d psi = -R^T (e_z x b_hat)`` (see the module docstring); tangential to the sphere.

    Parameters
    ----------
    rotations : Rotation (single or P) or Pose
        Head-to-world rotations.
    b_world : array_like, shape (3,)
        Field vector in the world frame (any units; only its direction is used).

    Returns
    -------
    ndarray, shape (P, 3)
        Per radian of yaw, head frame.
    """
    R = _as_rotations(rotations)
    b = _unit_world(b_world)
    return -R.inv().apply(np.cross([0.0, 0.0, 1.0], b)).reshape(-1, 3)


@dataclass(frozen=True, eq=False)
class HeadScan:
    """A sequence of poses.

    Attributes
    ----------
    times_s : ndarray, shape (P,)
        Sample times, seconds.
    yaw_deg, pitch_deg, roll_deg : ndarray, shape (P,)
        Pose angles, degrees.
    """

    times_s: np.ndarray
    yaw_deg: np.ndarray
    pitch_deg: np.ndarray
    roll_deg: np.ndarray
    meta: dict = field(default_factory=dict)

    @property
    def rotations(self) -> Rotation:
        """``P`` head-to-world rotations."""
        return pose_rotation(self.yaw_deg, self.pitch_deg, self.roll_deg)

    def __len__(self) -> int:
        return len(self.times_s)

    @property
    def poses(self) -> list[Pose]:
        """The scan's ``P`` poses, in order."""
        return [Pose(float(a), float(b), float(c))
                for a, b, c in zip(self.yaw_deg, self.pitch_deg, self.roll_deg)]


def poses_from_arrays(yaw_deg, pitch_deg=0.0, roll_deg=0.0, times_s=None) -> HeadScan:
    """A :class:`HeadScan` from angle arrays, broadcast together.

    Parameters
    ----------
    yaw_deg, pitch_deg, roll_deg : array_like
        Angles in degrees (broadcast to a common length ``P``).
    times_s : array_like, shape (P,), optional
        Times of the poses, seconds; default 0 .. P-1.

    Returns
    -------
    HeadScan
    """
    y, p, r = np.broadcast_arrays(*(np.atleast_1d(_finite(n, v)) for n, v in
                                    (("yaw_deg", yaw_deg), ("pitch_deg", pitch_deg),
                                     ("roll_deg", roll_deg))))
    if np.any(np.abs(p) > 90):
        raise InputError("expected pitch angles in [-90, 90] degrees", key="pitch_deg")
    t = np.arange(y.size, dtype=float) if times_s is None else np.asarray(times_s, dtype=float)
    if t.shape != (y.size,):
        raise InputError(f"expected {y.size} times, got shape {t.shape}", key="times_s")
    return HeadScan(t, y.ravel().astype(float), p.ravel().astype(float), r.ravel().astype(float))


def headings(n: int, *, start_deg: float = 0.0, pitch_deg: float = 0.0,
             roll_deg: float = 0.0) -> HeadScan:
    """Headings evenly spaced over 360 degrees.

    Parameters
    ----------
    n : int
        Number of headings.
    start_deg : float
        First heading, degrees.
    pitch_deg, roll_deg : float
        Fixed pitch and roll, degrees.

    Returns
    -------
    HeadScan
        ``n`` poses, times 0 .. n-1 s.
    """
    if int(n) != n or n < 1:
        raise InputError(f"expected a positive integer count, got {n!r}", key="n")
    yaw = start_deg + 360.0 * np.arange(int(n)) / int(n)
    return poses_from_arrays(yaw, pitch_deg, roll_deg)


def yaw_sweep(heading_deg: float, amplitude_deg: float, *, count: int = 1,
              speed_deg_s: float = 90.0, rate_hz: float = 100.0, pitch_deg=0.0,
              roll_deg=0.0) -> HeadScan:
    """Head scans: triangular yaw sweeps about a heading at constant angular speed.

    One scan goes ``heading -> heading + A -> heading - A -> heading`` (a triangle wave of
    amplitude ``A`` and period ``4 A / speed``); ``count`` scans follow each other.  Samples are
    taken at ``rate_hz`` from ``t = 0`` to the end inclusive.

    Parameters
    ----------
    heading_deg : float
        Centre heading, degrees.
    amplitude_deg : float
        Sweep amplitude ``A`` (> 0, <= 180), degrees.
    count : int
        Number of scans (>= 1).
    speed_deg_s : float
        Angular speed of the head, degrees per second (> 0).
    rate_hz : float
        Sampling rate, Hz (> 0).
    pitch_deg, roll_deg : float or callable
        Constant angles, or functions of time (seconds, ndarray) returning degrees.

    Returns
    -------
    HeadScan
    """
    if not (np.isfinite(amplitude_deg) and 0 < amplitude_deg <= 180):
        raise InputError(f"expected an amplitude in (0, 180] degrees, got {amplitude_deg!r}",
                         key="amplitude_deg")
    if int(count) != count or count < 1:
        raise InputError(f"expected a scan count >= 1, got {count!r}", key="count")
    if not (np.isfinite(speed_deg_s) and speed_deg_s > 0):
        raise InputError(f"expected a speed > 0 degrees per second, got {speed_deg_s!r}",
                         key="speed_deg_s")
    if not (np.isfinite(rate_hz) and rate_hz > 0):
        raise InputError(f"expected a sampling rate > 0 Hz, got {rate_hz!r}", key="rate_hz")
    period = 4.0 * amplitude_deg / speed_deg_s
    total = period * int(count)
    n = int(np.floor(total * rate_hz + 1e-9)) + 1
    t = np.arange(n) / rate_hz
    # triangle wave: phase u in [0, 4) per period; 0 -> +A at u = 1, -A at u = 3, 0 at u = 4
    u = (t / period * 4.0) % 4.0
    tri = np.where(u < 1, u, np.where(u < 3, 2 - u, u - 4))
    yaw = heading_deg + amplitude_deg * tri
    p = pitch_deg(t) if callable(pitch_deg) else pitch_deg
    r = roll_deg(t) if callable(roll_deg) else roll_deg
    scan = poses_from_arrays(yaw, p, r, times_s=t)
    return HeadScan(scan.times_s, scan.yaw_deg, scan.pitch_deg, scan.roll_deg,
                    meta={"heading_deg": heading_deg, "amplitude_deg": amplitude_deg,
                          "count": int(count), "speed_deg_s": speed_deg_s, "rate_hz": rate_hz})
