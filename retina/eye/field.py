"""The geomagnetic field in the world frame.

Conventions (owned here)
------------------------
World frame: local geographic north-east-down (NED), ``x`` north, ``y`` east, ``z`` down, so the
geomagnetic components X (north), Y (east), Z (down) of the standard field models map straight
onto it.  A field is given by its total intensity ``F`` (microtesla at the user boundary), its
inclination ``I`` (degrees, positive when the field points below the horizontal, i.e. in the
northern magnetic hemisphere) and its declination ``D`` (degrees, east of geographic north)::

    B = F (cos I cos D, cos I sin D, sin I)

Internally the vector is in tesla.

Field models: :func:`field_at` evaluates the International Geomagnetic Reference Field, 14th
generation (IGRF-14, IAGA 2024, valid 1900.0-2030.0) through the ``ppigrf`` package, which reads
the coefficient file ``IGRF14.shc`` it ships.  ``ppigrf.igrf`` takes geodetic latitude and height
above the WGS84 ellipsoid and returns east, north and up components relative to the ellipsoid
(nanotesla); here ``X = B_north``, ``Y = B_east``, ``Z = -B_up``.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import io
import math
from dataclasses import dataclass

import numpy as np

from retina.errors import InputError

__all__ = ["Field", "field_vector", "field_at", "IGRF_VALID", "decimal_year"]

#: Validity interval of IGRF-14 (decimal years, inclusive).  Source: IAGA, IGRF-14 (2024).
IGRF_VALID = (1900.0, 2030.0)
#: Altitudes accepted by :func:`field_at`, km above the ellipsoid.  The model is an internal-field
#: potential valid near and above the surface; the limits are a modelling choice (common practice,
#: no source: IGRF is used from the surface to low-Earth orbit).
ALTITUDE_RANGE_KM = (-10.0, 2000.0)


def field_vector(F_uT, I_deg, D_deg) -> np.ndarray:
    """Field vector in the NED world frame.

    Parameters
    ----------
    F_uT : float or array_like
        Total intensity, microtesla (>= 0).
    I_deg : float or array_like
        Inclination, degrees, positive down, in [-90, 90].
    D_deg : float or array_like
        Declination, degrees east of north.

    Returns
    -------
    ndarray, shape (..., 3)
        ``B`` in tesla, NED; ``(3,)`` for scalar input.

    Raises
    ------
    InputError
        If ``F`` is negative or not finite, or ``|I| > 90``.
    """
    F = np.asarray(F_uT, dtype=float)
    inc = np.asarray(I_deg, dtype=float)
    dec = np.asarray(D_deg, dtype=float)
    if not np.all(np.isfinite(F)) or np.any(F < 0):
        raise InputError(f"expected a finite total intensity >= 0 uT, got {F_uT!r}", key="F_uT")
    if not np.all(np.isfinite(inc)) or np.any(np.abs(inc) > 90):
        raise InputError(f"expected an inclination in [-90, 90] degrees, got {I_deg!r}",
                         key="I_deg")
    if not np.all(np.isfinite(dec)):
        raise InputError(f"expected a finite declination in degrees, got {D_deg!r}", key="D_deg")
    i, d = np.radians(inc), np.radians(dec)
    F_T = F * 1e-6
    return np.stack(np.broadcast_arrays(F_T * np.cos(i) * np.cos(d), F_T * np.cos(i) * np.sin(d),
                                        F_T * np.sin(i)), axis=-1)


@dataclass(frozen=True)
class Field:
    """A static geomagnetic field.

    Attributes
    ----------
    F_uT : float
        Total intensity, microtesla.
    I_deg : float
        Inclination, degrees, positive down.
    D_deg : float
        Declination, degrees east of north.
    source : str
        Where it came from (``"given"``, ``"IGRF-14 ..."``).
    """

    F_uT: float
    I_deg: float
    D_deg: float = 0.0
    source: str = "given"

    def __post_init__(self):
        field_vector(self.F_uT, self.I_deg, self.D_deg)  # validates

    @property
    def vector(self) -> np.ndarray:
        """``(3,)`` NED vector, tesla."""
        return field_vector(self.F_uT, self.I_deg, self.D_deg)

    @property
    def direction(self) -> np.ndarray:
        """``(3,)`` unit vector along the field, NED (undefined for ``F = 0``: raises)."""
        if self.F_uT == 0:
            raise InputError("a zero field has no direction", key="F_uT")
        v = field_vector(1.0, self.I_deg, self.D_deg)
        return v / np.linalg.norm(v)

    @property
    def components_nT(self) -> np.ndarray:
        """``(X, Y, Z)`` in nanotesla (north, east, down)."""
        return self.vector * 1e9

    def reversed(self) -> "Field":
        """The same field with its polarity reversed (``B -> -B``).

        Returns
        -------
        Field
            Same intensity, inclination negated, declination turned by 180 degrees (in [-180, 180)).
        """
        return Field(self.F_uT, -self.I_deg, (self.D_deg + 180.0 + 180.0) % 360.0 - 180.0,
                     source=f"reversed {self.source}")

    @classmethod
    def from_vector(cls, b_T, source: str = "given") -> "Field":
        """The field of a vector in the world frame.

        Parameters
        ----------
        b_T : array_like (3,)
            North, east and down components, tesla, finite.
        source : str
            Where the field comes from, for provenance.

        Returns
        -------
        Field
            Intensity in uT, inclination and declination in degrees (declination 0 for a vertical
            field).

        Raises
        ------
        InputError
            Key ``field``, for anything but three finite numbers.
        """
        b = np.asarray(b_T, dtype=float)
        if b.shape != (3,) or not np.all(np.isfinite(b)):
            raise InputError(f"expected a finite (3,) field vector in tesla, got {b_T!r}",
                             key="field")
        F = float(np.linalg.norm(b))
        H = math.hypot(b[0], b[1])
        inc = math.degrees(math.atan2(b[2], H))
        dec = math.degrees(math.atan2(b[1], b[0])) if H > 0 else 0.0
        return cls(F * 1e6, inc, dec, source=source)


def decimal_year(date) -> float:
    """A date as a decimal year.

    Parameters
    ----------
    date : datetime.date, datetime.datetime, float or str
        A calendar date/time, a decimal year (e.g. ``2025.5``) or an ISO string (``"2025-06-01"``).

    Returns
    -------
    float
        The year plus the elapsed fraction of it.

    Raises
    ------
    InputError
        Key ``date``, for text that is neither an ISO date nor a number, or a non-finite year.
    """
    if isinstance(date, str):
        try:
            date = _dt.datetime.fromisoformat(date)
        except ValueError:
            try:
                return float(date)
            except ValueError:
                raise InputError("expected an ISO date (YYYY-MM-DD) or a decimal year, got "
                                 f"{date!r}", key="date") from None
    if isinstance(date, (int, float, np.integer, np.floating)) and not isinstance(date, bool):
        y = float(date)
        if not math.isfinite(y):
            raise InputError(f"expected a finite decimal year, got {date!r}", key="date")
        return y
    if isinstance(date, _dt.datetime):
        d = date.replace(tzinfo=None) if date.tzinfo is None else \
            date.astimezone(_dt.timezone.utc).replace(tzinfo=None)
    elif isinstance(date, _dt.date):
        d = _dt.datetime(date.year, date.month, date.day)
    else:
        raise InputError(f"expected a date, a datetime, an ISO string or a decimal year, got "
                         f"{type(date).__name__}", key="date")
    start = _dt.datetime(d.year, 1, 1)
    end = _dt.datetime(d.year + 1, 1, 1)
    return d.year + (d - start).total_seconds() / (end - start).total_seconds()


def _as_datetime(year: float) -> _dt.datetime:
    y = int(math.floor(year))
    start = _dt.datetime(y, 1, 1)
    end = _dt.datetime(y + 1, 1, 1)
    return start + (end - start) * (year - y)


def field_at(lat_deg: float, lon_deg: float, alt_km: float = 0.0, date=2025.0) -> Field:
    """The IGRF-14 main field at a place and time.

    Parameters
    ----------
    lat_deg : float
        Geodetic latitude, degrees, in [-90, 90].  At the poles the horizontal directions are
        undefined; latitudes within 1e-6 degrees of a pole are evaluated at 1e-6 degrees from it.
    lon_deg : float
        Longitude, degrees east (any finite value; wrapped).
    alt_km : float
        Height above the WGS84 ellipsoid, km, within :data:`ALTITUDE_RANGE_KM`.
    date : datetime.date, datetime.datetime, float or str
        See :func:`decimal_year`; must lie in :data:`IGRF_VALID`.

    Returns
    -------
    Field
        ``F`` in microtesla, ``I`` and ``D`` in degrees, ``source`` naming the model and inputs.

    Raises
    ------
    InputError
        For a latitude outside [-90, 90], a non-finite longitude or altitude, an altitude out of
        range, or a date outside the validity of IGRF-14.
    """
    for name, v in (("lat_deg", lat_deg), ("lon_deg", lon_deg), ("alt_km", alt_km)):
        try:
            fv = float(v)
        except (TypeError, ValueError):
            raise InputError(f"expected a number, got {v!r}", key=name) from None
        if not math.isfinite(fv):
            raise InputError(f"expected a finite number, got {v!r}", key=name)
    lat, lon, alt = float(lat_deg), float(lon_deg), float(alt_km)
    if abs(lat) > 90:
        raise InputError(f"expected a latitude in [-90, 90] degrees, got {lat_deg!r}",
                         key="lat_deg")
    if not ALTITUDE_RANGE_KM[0] <= alt <= ALTITUDE_RANGE_KM[1]:
        raise InputError(f"expected an altitude in [{ALTITUDE_RANGE_KM[0]}, "
                         f"{ALTITUDE_RANGE_KM[1]}] km, got {alt_km!r}", key="alt_km")
    year = decimal_year(date)
    if not IGRF_VALID[0] <= year <= IGRF_VALID[1]:
        raise InputError(f"IGRF-14 is valid from {IGRF_VALID[0]:.1f} to {IGRF_VALID[1]:.1f}; "
                         f"got the date {date!r} ({year:.3f})", key="date")
    lat = float(np.clip(lat, -90 + 1e-6, 90 - 1e-6))
    lon = (lon + 180.0) % 360.0 - 180.0
    import ppigrf  # a few hundred ms to import (pandas); keep it out of the core import

    with contextlib.redirect_stdout(io.StringIO()):  # ppigrf prints warnings instead of raising
        be, bn, bu = ppigrf.igrf(lon, lat, alt, _as_datetime(year),
                                 coeff_fn=ppigrf.ppigrf.shc_fn_igrf14)
    X, Y, Z = float(np.ravel(bn)[0]), float(np.ravel(be)[0]), -float(np.ravel(bu)[0])
    f = Field.from_vector(np.array([X, Y, Z]) * 1e-9,
                          source=f"IGRF-14 at {lat_deg} N {lon_deg} E, {alt_km} km, {year:.3f}")
    return f
