"""The RF method choice: the separable RF method when the pair allows it, else the whole-pair solver.

:func:`choose_rf_method` picks the method and :func:`rf_yields` runs it; both RF methods are exact
(:mod:`retina.spin.rf_separable` for a pair without electron-electron coupling, equal rates and no
relaxation; :mod:`retina.spin.rf_floquet` for everything else) and agree to round-off where both
apply (tested).
"""

from __future__ import annotations

from retina.errors import InputError
from retina.spin import engine, rf_floquet, rf_separable

__all__ = ["RF_METHODS", "choose_rf_method", "rf_yields"]

#: RF methods: the separable one (:mod:`retina.spin.rf_separable`) and the whole-pair Floquet solver
#: (:mod:`retina.spin.rf_floquet`).
RF_METHODS = ("auto", "separable", "floquet")


def choose_rf_method(system, method="auto") -> str:
    """The RF method for a pair: ``"separable"`` when it is in the separable scope, else ``"floquet"``.

    Parameters
    ----------
    system : SpinSystem
        The pair.  The separable scope (:mod:`retina.spin.rf_separable`) is no exchange or dipolar
        coupling, equal rates and no relaxation, as decided by
        :func:`retina.spin.engine.choose_method`.
    method : {"auto", "separable", "floquet"}
        An explicit method is checked and returned as it is.

    Returns
    -------
    str
        ``"separable"`` or ``"floquet"``.

    Raises
    ------
    InputError
        Key ``method``, for a name outside :data:`RF_METHODS`.
    """
    if method not in RF_METHODS:
        raise InputError(f"expected an RF method among {RF_METHODS}, got {method!r}", source=system.source,
                         key="method")
    if method != "auto":
        return method
    return "separable" if engine.choose_method(system) == "separable" else "floquet"


def rf_yields(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction="perpendicular", method="auto",
              harmonics="auto", tol=1e-10, progress=None, max_bytes=None, return_info=False, angle_deg=90.0):
    """Phase-averaged RF yields by the cheapest exact method (see :func:`choose_rf_method`).

    Parameters
    ----------
    system : SpinSystem
        The pair.
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Static field directions in the molecular frame (normalised by the method).
    rf_MHz, rf_nT : float
        RF frequency (MHz, > 0) and amplitude ``B1`` (nT, >= 0).
    rf_direction : {"perpendicular", "parallel"} or array_like, shape (3,)
        See :mod:`retina.spin._rf_common`.
    method : {"auto", "separable", "floquet"}
        See :func:`choose_rf_method`.
    harmonics : "auto" or int
        Floquet truncation order.
    tol : float
        Convergence tolerance on the yield (yield units).
    progress : callable(done, total), optional
        Counts directions.
    max_bytes : int, optional
        Memory limit of the whole-pair solver (default 60 % of the available memory).
    return_info : bool
        Also return the method's info dict, with ``method`` ("separable-floquet" or "floquet") and
        the per-direction ``harmonics`` (N,) and ``azimuths`` (N,).
    angle_deg : float
        With ``rf_direction="perpendicular"``: the angle of the azimuth-averaged RF direction to the
        static field, degrees (separable method only for angles other than 90;
        :func:`retina.spin.rf_separable.yields_rf`).

    Returns
    -------
    ndarray, shape (N,)
        Phase-averaged reported yield (dimensionless); with ``return_info`` a tuple ``(yields, info)``.

    Raises
    ------
    InputError
        Bad input, or an angle other than 90 degrees for a pair outside the separable scope.
    ResourceError
        From the whole-pair solver: not enough memory, or no convergence.
    """
    m = choose_rf_method(system, method)
    if m == "separable":
        y, info = rf_separable.yields_rf(system, field_uT, directions, rf_MHz=rf_MHz, rf_nT=rf_nT,
                                         rf_direction=rf_direction, harmonics=harmonics, tol=tol,
                                         progress=progress, return_info=True, angle_deg=angle_deg)
    else:
        if float(angle_deg) != 90.0:
            raise InputError("an RF direction at an angle other than 90 degrees to the static field needs the "
                             "separable RF method (a pair without electron-electron coupling, equal rates)",
                             source=system.source, key="angle_deg")
        y, info = rf_floquet.yields_rf(system, field_uT, directions, rf_MHz=rf_MHz, rf_nT=rf_nT,
                                       rf_direction=rf_direction, harmonics=harmonics, tol=tol, progress=progress,
                                       max_bytes=max_bytes, return_info=True)
    info = dict(info, method="separable-floquet" if m == "separable" else "floquet")
    return (y, info) if return_info else y
