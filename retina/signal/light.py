"""Light: sky radiance over visual directions, light levels, scene texture and photon catch.

Conventions (owned here)
------------------------
- Radiance is *relative*: the open sky has radiance 1.  A sky model maps world-frame unit visual
  directions (north-east-down, see ``retina.eye.field``) to a non-negative radiance.
- Elevation of a world direction ``d`` is ``asin(-d_z)`` (z points down), in degrees.
- ``HorizonSky``: bright sky above a darker ground.  Radiance
  ``ground_ratio + (1 - ground_ratio) * s(elevation)`` with the step
  ``s = (1 + tanh((elevation - horizon_deg) / softness_deg)) / 2`` (a hard step when
  ``softness_deg = 0``).  Yaw turns the head about the vertical, so for a level head the horizon
  catch does not depend on heading.
- Light level ``photons``: the mean number of radical pairs *formed* per receptor per integration
  time under a uniform sky of radiance 1 (photons absorbed times the pair-formation quantum yield;
  the two are not separated here).  A receptor's catch is

      catch_i = photons * radiance(R d_i) * texture(d_i) * omega_i / mean(omega)

  with ``d_i`` its head-frame visual direction, ``R`` the head-to-world rotation, ``omega_i`` its
  solid-angle weight (steradians) and ``mean(omega)`` the mean over all receptors of the retina, so
  under a uniform sky an average receptor forms ``photons`` pairs.
- Named light levels (``LIGHT_LEVELS``, pairs per receptor per integration time) are invented round
  numbers spanning daylight to dim twilight in decades; they are scenario presets, not measurements.
- Scene texture: an optional non-magnetic multiplicative contrast ``exp(contrast * z(d))`` with
  ``z`` a smooth random field (a sum of ``n_blobs`` von Mises-Fisher bumps of random sign,
  normalised to zero mean and unit variance over the sphere), fixed either to the world (it slides
  over the retina when the head turns) or to the head (it does not).  Seeded and reproducible.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from scipy.spatial.transform import Rotation

from retina.errors import InputError

__all__ = [
    "LIGHT_LEVELS",
    "light_level",
    "UniformSky",
    "HorizonSky",
    "SceneTexture",
    "elevation_deg",
    "photon_catch",
]

#: Named light levels: mean radical pairs formed per receptor per integration time (invented presets).
LIGHT_LEVELS: dict[str, float] = {
    "daylight": 1.0e5,
    "overcast": 1.0e4,
    "sunset": 1.0e3,
    "civil_twilight": 1.0e2,
    "dim_twilight": 1.0e1,
}


def light_level(level: str | float) -> float:
    """Pairs formed per receptor per integration time for a named level or a positive number.

    Parameters
    ----------
    level : str or float
        A name of :data:`LIGHT_LEVELS` ("daylight", "overcast", ...) or a positive number.

    Returns
    -------
    float
        Pairs per receptor.

    Raises
    ------
    InputError
        Key ``light.level``.
    """
    if isinstance(level, str):
        try:
            return LIGHT_LEVELS[level]
        except KeyError:
            raise InputError(f"unknown light level {level!r}; expected one of "
                             f"{sorted(LIGHT_LEVELS)} or a positive number", key="light.level") from None
    value = float(level)
    if not np.isfinite(value) or value <= 0:
        raise InputError(f"expected a positive number of pairs per receptor, got {level!r}",
                         key="light.level")
    return value


def elevation_deg(world_dirs) -> np.ndarray:
    """Elevation above the horizon of world-frame (north-east-down) unit vectors.

    Parameters
    ----------
    world_dirs : array_like, shape (..., 3)
        Unit vectors, world frame (z down).

    Returns
    -------
    ndarray, shape (...)
        Degrees, positive above the horizon (``-asin(z)``).
    """
    d = np.asarray(world_dirs, dtype=float)
    return np.rad2deg(np.arcsin(np.clip(-d[..., 2], -1.0, 1.0)))


@dataclass(frozen=True)
class UniformSky:
    """The same radiance (1) from every direction."""

    def radiance(self, world_dirs) -> np.ndarray:
        """Radiance of the sky in world directions: all ones.

        Parameters
        ----------
        world_dirs : array_like (..., 3)
            Unit directions in the world frame (north-east-down).

        Returns
        -------
        ndarray (...)
            Relative radiance, 1 everywhere.
        """
        return np.ones(np.asarray(world_dirs).shape[:-1])


@dataclass(frozen=True)
class HorizonSky:
    """Bright sky over darker ground (see the module docstring).

    Parameters
    ----------
    horizon_deg : float
        Elevation of the horizon, degrees (0 = geometric horizon; positive for a raised skyline).
    softness_deg : float
        Width of the sky-ground transition, degrees (>= 0; 0 gives a sharp step).
    ground_ratio : float
        Ground radiance relative to the sky, in [0, 1].
    """

    horizon_deg: float = 0.0
    softness_deg: float = 5.0
    ground_ratio: float = 0.2

    def __post_init__(self):
        if not (0.0 <= self.ground_ratio <= 1.0):
            raise InputError(f"expected ground_ratio in [0, 1], got {self.ground_ratio}",
                             key="light.ground_ratio")
        if not (self.softness_deg >= 0.0):
            raise InputError(f"expected softness_deg >= 0, got {self.softness_deg}",
                             key="light.softness_deg")
        if not (-90.0 <= self.horizon_deg <= 90.0):
            raise InputError(f"expected horizon_deg in [-90, 90], got {self.horizon_deg}",
                             key="light.horizon_deg")

    def radiance(self, world_dirs) -> np.ndarray:
        """Radiance in world directions: ``ground_ratio`` below the horizon, 1 above, joined by a
        tanh step of width ``softness_deg`` (a sharp step when it is 0).

        Parameters
        ----------
        world_dirs : array_like (..., 3)
            Unit directions in the world frame (north-east-down).

        Returns
        -------
        ndarray (...)
            Relative radiance in ``[ground_ratio, 1]``.
        """
        el = elevation_deg(world_dirs)
        if self.softness_deg == 0.0:
            s = (el >= self.horizon_deg).astype(float)
        else:
            s = 0.5 * (1.0 + np.tanh((el - self.horizon_deg) / self.softness_deg))
        return self.ground_ratio + (1.0 - self.ground_ratio) * s


@dataclass(frozen=True)
class SceneTexture:
    """A random, smooth, positive visual texture (multiplicative contrast).

    Parameters
    ----------
    contrast : float
        Standard deviation of the log radiance (0 = no texture).
    attached : {"world", "head"}
        The frame the texture is fixed to.
    n_blobs : int
        Number of random bumps.
    kappa : float
        Concentration of each bump (larger = finer texture; angular size ~ 1/sqrt(kappa) rad).
    seed : int
        Seed of the texture (numpy.random.default_rng).
    """

    contrast: float = 0.3
    attached: Literal["world", "head"] = "world"
    n_blobs: int = 40
    kappa: float = 20.0
    seed: int = 0
    _centres: np.ndarray = field(init=False, repr=False, compare=False)
    _signs: np.ndarray = field(init=False, repr=False, compare=False)
    _mu: float = field(init=False, repr=False, compare=False)
    _sd: float = field(init=False, repr=False, compare=False)

    def __post_init__(self):
        if self.attached not in ("world", "head"):
            raise InputError(f"expected attached 'world' or 'head', got {self.attached!r}",
                             key="light.texture.attached")
        if not (self.contrast >= 0.0) or self.n_blobs < 1 or not (self.kappa > 0):
            raise InputError("expected contrast >= 0, n_blobs >= 1 and kappa > 0, got "
                             f"{self.contrast}, {self.n_blobs}, {self.kappa}", key="light.texture")
        rng = np.random.default_rng(self.seed)
        c = rng.normal(size=(self.n_blobs, 3))
        c /= np.linalg.norm(c, axis=1, keepdims=True)
        signs = rng.choice([-1.0, 1.0], size=self.n_blobs)
        object.__setattr__(self, "_centres", c)
        object.__setattr__(self, "_signs", signs)
        # Normalise over the sphere with a fixed Fibonacci set (deterministic, near-uniform).
        from retina.sphere import fibonacci

        probe = fibonacci(4000).points
        raw = self._raw(probe)
        object.__setattr__(self, "_mu", float(raw.mean()))
        object.__setattr__(self, "_sd", float(raw.std()) or 1.0)

    def _raw(self, dirs: np.ndarray) -> np.ndarray:
        dots = dirs @ self._centres.T
        return np.exp(self.kappa * (dots - 1.0)) @ self._signs

    def factor(self, dirs) -> np.ndarray:
        """The texture's multiplicative factor on the radiance.

        Parameters
        ----------
        dirs : array_like (..., 3)
            Unit directions in the frame the texture is attached to.

        Returns
        -------
        ndarray (...)
            ``exp(contrast z)`` with ``z`` the standardised random field; 1 everywhere at zero
            contrast.
        """
        d = np.asarray(dirs, dtype=float)
        z = (self._raw(d.reshape(-1, 3)) - self._mu) / self._sd
        return np.exp(self.contrast * z).reshape(d.shape[:-1])


def photon_catch(visual_dirs, solid_angle, rotations: Rotation | None = None, *,
                 photons: float | str = 1.0, sky=None, texture: SceneTexture | None = None) -> np.ndarray:
    """Mean radical pairs formed per receptor per integration time, for each pose.

    Parameters
    ----------
    visual_dirs : array_like, shape (N, 3)
        Head-frame unit visual directions of the receptors.
    solid_angle : array_like, shape (N,)
        Solid-angle weights, steradians.
    rotations : scipy.spatial.transform.Rotation, optional
        ``P`` head-to-world rotations (a single rotation counts as ``P = 1``); default identity.
    photons : float or str
        Light level (see ``LIGHT_LEVELS``).
    sky : UniformSky or HorizonSky, optional
        Default ``UniformSky()``.
    texture : SceneTexture, optional

    Returns
    -------
    ndarray, shape (P, N)
        The catch (see the module docstring for the formula).
    """
    d = np.asarray(visual_dirs, dtype=float)
    w = np.asarray(solid_angle, dtype=float)
    if d.ndim != 2 or d.shape[1] != 3 or w.shape != (d.shape[0],):
        raise InputError(f"expected visual_dirs (N, 3) and solid_angle (N,), got {d.shape} and {w.shape}",
                         key="receptors")
    if np.any(w <= 0):
        raise InputError("expected positive solid angles", key="receptors.solid_angle")
    scale = light_level(photons) / w.mean()
    sky = UniformSky() if sky is None else sky
    if rotations is None:
        rotations = Rotation.identity(1)
    if rotations.single:
        rotations = Rotation.concatenate([rotations])
    P = len(rotations)
    head_tex = texture.factor(d) if (texture is not None and texture.attached == "head") else 1.0
    if texture is not None and texture.attached == "world":
        out = np.empty((P, d.shape[0]))
        for p in range(P):
            world = rotations[p].apply(d)
            out[p] = sky.radiance(world) * texture.factor(world)
    elif isinstance(sky, UniformSky):
        out = np.ones((P, d.shape[0]))
    else:
        # Only the world z component (elevation) matters: third row of each rotation matrix.
        z = rotations.as_matrix()[:, 2, :] @ d.T
        out = sky.radiance(np.stack([np.zeros_like(z), np.zeros_like(z), z], axis=-1))
    return out * (head_tex * w * scale)[None, :]
