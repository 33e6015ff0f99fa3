"""What the RF methods share: the RF field's conventions, their checks and the azimuth rule.

Conventions (owned here; everything else is that of :mod:`retina.spin.system`)
-------------------------------------------------------------------------------
A linearly polarised RF field of amplitude ``B1`` (tesla) along the unit vector ``n`` (molecular
frame), angular frequency ``w = 2 pi f`` and phase ``theta`` at the birth of the pair adds to the
static Hamiltonian ``H0(B0)`` the term

    H1 cos(w t + theta),   H1 = (mu_B / hbar) B1 n . (g_A . S_A + g_B . S_B)   (rad s^-1),

i.e. the electron Zeeman term of :mod:`retina.spin.operators` evaluated at the field ``B1 n``
(nuclear Zeeman terms are neglected there, and so here).  The pair is born at a uniformly random
RF phase, so the reported yield is the average over ``theta``.  At the user boundary the RF
frequency ``f`` is in MHz and the amplitude ``B1`` in nT (:func:`check_rf`).

RF direction
------------
- a vector: fixed in the molecular frame;
- ``"parallel"``: ``n = b``, along the static field;
- ``"perpendicular"``: ``n = cos(phi) e1 + sin(phi) e2`` with ``e1, e2`` orthonormal and
  perpendicular to ``b`` (:func:`perp_basis`), averaged over the azimuth ``phi``.  Since
  ``n -> -n`` is the phase shift ``theta -> theta + pi``, the phase-averaged yield has period ``pi``
  in ``phi``; it is a trigonometric polynomial in ``2 phi`` of order ``k`` at order ``B1^(2k)``.
  The rule with ``K`` equally spaced azimuths ``phi_j = j pi / K`` integrates every harmonic ``2m``
  exactly except the non-zero multiples ``m`` of ``K``; ``K`` is doubled from 2 (the rules are
  nested, so no solve is repeated) until the average changes by less than ``tol``
  (:func:`azimuth_mean`).

Both RF methods (:mod:`retina.spin.rf_floquet`, :mod:`retina.spin.rf_separable`) import from here;
neither imports the other.
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from retina.errors import InputError, ResourceError

__all__ = ["check_rf", "check_harmonics", "check_tol", "check_azimuths", "perp_basis", "azimuth_mean",
           "MAX_HARMONICS", "MAX_AZIMUTHS"]

#: Largest Floquet order accepted for a fixed ``harmonics`` (and tried by the whole-pair solver's "auto").
MAX_HARMONICS = 256
#: Largest number of azimuths tried for ``rf_direction="perpendicular"``; fixed counts must divide it.
MAX_AZIMUTHS = 64


def check_rf(rf_MHz, rf_nT, rf_direction="perpendicular", *, source=None):
    """Validate the RF parameters and convert them to SI.

    Parameters
    ----------
    rf_MHz : float
        RF frequency, MHz (finite, > 0).
    rf_nT : float
        RF amplitude, nT (finite, >= 0).
    rf_direction : {"perpendicular", "parallel"} or array_like, shape (3,)
        See the module docstring; a vector is normalised.
    source : str, optional
        File named in the error message.

    Returns
    -------
    omega : float
        Angular frequency, rad s^-1.
    b1 : float
        Amplitude, tesla.
    direction : str or ndarray, shape (3,)
        The word, or the unit vector (molecular frame).

    Raises
    ------
    InputError
        Naming the offending key (``rf_MHz``, ``rf_nT`` or ``rf_direction``) and what was expected.
    """
    try:
        f = float(rf_MHz)
    except (TypeError, ValueError):
        raise InputError(f"expected an RF frequency in MHz, got {rf_MHz!r}", source=source, key="rf_MHz") from None
    if not np.isfinite(f) or f <= 0:
        raise InputError(f"expected an RF frequency > 0 MHz, got {rf_MHz!r}", source=source, key="rf_MHz")
    try:
        a = float(rf_nT)
    except (TypeError, ValueError):
        raise InputError(f"expected an RF amplitude in nT, got {rf_nT!r}", source=source, key="rf_nT") from None
    if not np.isfinite(a) or a < 0:
        raise InputError(f"expected an RF amplitude >= 0 nT, got {rf_nT!r}", source=source, key="rf_nT")
    if isinstance(rf_direction, str):
        if rf_direction not in ("perpendicular", "parallel"):
            raise InputError(f"expected 'perpendicular', 'parallel' or a vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction")
        direction = rf_direction
    else:
        try:
            v = np.asarray(rf_direction, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"expected 'perpendicular', 'parallel' or a vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction") from None
        if v.shape != (3,) or not np.all(np.isfinite(v)) or not np.linalg.norm(v) > 0:
            raise InputError(f"expected a finite non-zero vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction")
        direction = v / np.linalg.norm(v)
    return 2 * np.pi * f * 1e6, a * 1e-9, direction


def check_harmonics(harmonics, source=None):
    """Validate a Floquet truncation order.

    Parameters
    ----------
    harmonics : "auto" or int
        ``"auto"``, or a whole number ``0 <= N <=`` :data:`MAX_HARMONICS`.
    source : str, optional
        File named in the error message.

    Returns
    -------
    "auto" or int
        The order, as a Python int.

    Raises
    ------
    InputError
        Key ``harmonics``.
    """
    if isinstance(harmonics, str) and harmonics == "auto":
        return "auto"
    if isinstance(harmonics, (bool, np.bool_)) or not isinstance(harmonics, (int, np.integer)) \
            or not 0 <= harmonics <= MAX_HARMONICS:
        raise InputError(f"expected 'auto' or a whole number of harmonics 0..{MAX_HARMONICS}, got {harmonics!r}",
                         source=source, key="harmonics")
    return int(harmonics)


def check_tol(tol, source=None):
    """Validate a convergence tolerance on the yield.

    Parameters
    ----------
    tol : float
        Tolerance in yield units (finite, > 0).
    source : str, optional
        File named in the error message.

    Returns
    -------
    float

    Raises
    ------
    InputError
        Key ``tol``.
    """
    try:
        t = float(tol)
    except (TypeError, ValueError):
        t = float("nan")
    if not np.isfinite(t) or t <= 0:
        raise InputError(f"expected a tolerance > 0, got {tol!r}", source=source, key="tol")
    return t


def check_azimuths(azimuths, source=None):
    """Validate the number of azimuths of the ``"perpendicular"`` average.

    Parameters
    ----------
    azimuths : "auto" or int
        ``"auto"``, or a divisor of :data:`MAX_AZIMUTHS` (so that the nested rules share points).
    source : str, optional
        File named in the error message.

    Returns
    -------
    "auto" or int

    Raises
    ------
    InputError
        Key ``azimuths``.
    """
    if isinstance(azimuths, str) and azimuths == "auto":
        return "auto"
    if isinstance(azimuths, (bool, np.bool_)) or not isinstance(azimuths, (int, np.integer)) \
            or not 1 <= azimuths <= MAX_AZIMUTHS or MAX_AZIMUTHS % int(azimuths):
        raise InputError(f"expected 'auto' or a divisor of {MAX_AZIMUTHS} azimuths, got {azimuths!r}",
                         source=source, key="azimuths")
    return int(azimuths)


def perp_basis(b):
    """Two unit vectors completing the unit vector ``b`` to a right-handed orthonormal frame.

    Parameters
    ----------
    b : ndarray, shape (3,)
        Unit vector (the static field direction).

    Returns
    -------
    e1, e2 : ndarray, shape (3,)
        Orthonormal, both perpendicular to ``b``, with ``e2 = b x e1``.
    """
    e1 = np.cross(b, [1.0, 0.0, 0.0] if abs(b[0]) < 0.9 else [0.0, 1.0, 0.0])
    e1 /= np.linalg.norm(e1)
    return e1, np.cross(b, e1)


def azimuth_mean(value_at: Callable[[float], Sequence[float]], azimuths, tol: float):
    """Mean over equally spaced azimuths, by the nested rule of the module docstring.

    Parameters
    ----------
    value_at : callable(t) -> sequence of float
        The quantities at the azimuth fraction ``t = j / K`` of the averaged span (``0 <= t < 1``);
        called once per distinct azimuth (the rules are nested).  The first quantity decides
        convergence; the others are averaged alongside.
    azimuths : "auto" or int
        Checked number of azimuths (:func:`check_azimuths`); ``"auto"`` doubles ``K`` from 2 until
        the first quantity changes by less than ``tol``.
    tol : float
        Tolerance on the first quantity.

    Returns
    -------
    means : list of float
        One mean per quantity.
    k : int
        Number of azimuths used.

    Raises
    ------
    ResourceError
        When ``"auto"`` has not converged with :data:`MAX_AZIMUTHS` azimuths.
    """
    vals: dict[int, Sequence[float]] = {}

    def mean(k):
        step = MAX_AZIMUTHS // k
        rows = []
        for j in range(k):
            key = j * step
            if key not in vals:
                vals[key] = tuple(value_at(key / MAX_AZIMUTHS))
            rows.append(vals[key])
        return [float(np.mean(col)) for col in zip(*rows)]

    if azimuths != "auto":
        return mean(int(azimuths)), int(azimuths)
    k = 2
    prev = mean(k)
    while True:
        if 2 * k > MAX_AZIMUTHS:
            raise ResourceError(f"the azimuth average did not converge to {tol:g} with {MAX_AZIMUTHS} azimuths; "
                                "raise tol")
        k *= 2
        cur = mean(k)
        if abs(cur[0] - prev[0]) < tol:
            return cur, k
        prev = cur
