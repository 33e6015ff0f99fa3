"""RF yield functions and spectra: the front end that turns RF yields into what the rest of the tool uses.

:func:`rf_yield_function` fits the phase-averaged yield under RF over the sphere (a
:class:`~retina.yieldfn.YieldFunction` with provenance), and :func:`rf_spectrum` scans the RF
frequency at one static field direction.  Both compute through :func:`retina.spin.rf_method.rf_yields`
(the cheapest exact RF method).  The fit uses the evenness ``Phi(-b) = Phi(b)`` of the
phase-averaged yield (argument in :mod:`retina.spin.rf_floquet`).
"""

from __future__ import annotations

import datetime as _dt
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np

from retina import sphere
from retina.errors import InputError
from retina.spin import engine
from retina.spin._rf_common import check_rf
from retina.spin.io import dump_system
from retina.spin.rf_method import rf_yields
from retina.yieldfn import YieldFunction, _check_degree, _check_field, content_hash, package_versions

__all__ = ["rf_yield_function", "RFSpectrum", "rf_spectrum"]


def rf_yield_function(system, field_uT, *, rf_MHz, rf_nT, rf_direction="perpendicular", degree=8,
                      progress: Callable[[int, int], None] | None = None, check_points: int = 20, tol=1e-10,
                      harmonics="auto", max_bytes=None, method="auto", angle_deg=90.0):
    """The phase-averaged yield under RF as a :class:`~retina.yieldfn.YieldFunction`.

    Computed like :meth:`YieldFunction.from_system`: on one hemisphere of the smallest Lebedev rule
    exact to ``2 L`` (using ``Phi(b) = Phi(-b)``, :mod:`retina.spin.rf_floquet`) and fitted by
    projection; the ``check_points`` independent directions are Fibonacci points of the *lower*
    hemisphere, so the reported truncation error also bounds any failure of the evenness.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
        Static field, microtesla.
    rf_MHz, rf_nT, rf_direction, harmonics, tol, max_bytes
        As in :func:`retina.spin.rf_floquet.yields_rf`.
    degree : int
        Even maximum degree ``L``.
    progress : callable(done, total), optional
    check_points : int
        Independent check directions (>= 1).
    method : {"auto", "separable", "floquet"}
        See :func:`retina.spin.rf_method.choose_rf_method`.
    angle_deg : float
        See :func:`retina.spin.rf_method.rf_yields` (recorded as ``rf_angle_deg``).

    Returns
    -------
    YieldFunction
        Provenance as in ``from_system`` (``kind = "rf_from_system"``, ``method`` "separable-floquet"
        or "floquet") plus
        ``rf_MHz``, ``rf_nT``, ``rf_direction`` (a word or "x y z"), ``rf_phase`` ("averaged"),
        ``rf_harmonics_max``, ``rf_azimuths_max``, ``rf_tol``, ``rf_solver``.
    """
    field_uT = _check_field(field_uT)
    degree = _check_degree(degree)
    omega, b1, rfdir = check_rf(rf_MHz, rf_nT, rf_direction, source=system.source)
    if isinstance(check_points, bool) or not isinstance(check_points, (int, np.integer)) or check_points < 1:
        raise InputError(f"expected check_points >= 1, got {check_points!r}", key="check_points")
    grid = sphere.grid_for_degree(degree)
    half, full_from_half = grid.hemisphere()
    check = sphere.fibonacci(int(check_points), hemisphere=True)
    dirs = np.concatenate([grid.points[half], -check.points], axis=0)
    t0 = time.perf_counter()
    values, info = rf_yields(system, field_uT, dirs, rf_MHz=rf_MHz, rf_nT=rf_nT, rf_direction=rfdir,
                             harmonics=harmonics, tol=tol, progress=progress, max_bytes=max_bytes,
                             return_info=True, method=method, angle_deg=angle_deg)
    seconds = time.perf_counter() - t0
    h = half.size
    coeffs = sphere.fit_even(values[:h][full_from_half], grid, degree)
    err = sphere.evaluate(coeffs, -check.points) - values[h:]
    err_max = float(np.max(np.abs(err)))
    prov = {
        "kind": "rf_from_system",
        "spin_system_toml": dump_system(system),
        "system_name": system.name,
        "system_source": system.source or "",
        "reported_yield": system.reported_yield,
        "initial_state": system.initial_state,
        "field_uT": field_uT,
        "method": info["method"],
        "rf_MHz": float(rf_MHz),
        "rf_nT": float(rf_nT),
        "rf_direction": rfdir if isinstance(rfdir, str) else " ".join(f"{x:.17g}" for x in rfdir),
        "rf_angle_deg": float(angle_deg),
        "rf_phase": "averaged",
        "rf_harmonics_max": int(np.max(info["harmonics"])),
        "rf_azimuths_max": int(np.max(info["azimuths"])),
        "rf_tol": float(info["tol"]),
        "rf_solver": info.get("solver", "separable"),
        "degree": degree,
        "grid": grid.name,
        "grid_order": int(grid.degree),
        "grid_points": len(grid),
        "computed_points": int(h),
        "check_grid": check.name + " (negated: lower hemisphere)",
        "check_points": len(check),
        "truncation_error_max": err_max,
        "truncation_error_rms": float(np.sqrt(np.mean(err**2))),
        "compute_seconds": float(seconds),
        "versions": package_versions(),
        "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "content_hash": content_hash(coeffs, degree),
    }
    return YieldFunction(coeffs, degree, prov, err_max)


# ------------------------------------------------------------------------------------------ spectrum

@dataclass(frozen=True)
class RFSpectrum:
    """The RF effect against frequency at one static field direction.

    Attributes
    ----------
    freqs_MHz : ndarray (F,)
    static : float
        Yield without RF.
    yields : ndarray (F,)
        Phase-averaged yield with RF.
    delta : ndarray (F,)
        ``yields - static``.
    harmonics : ndarray (F,) of int
        Largest Floquet order used at each frequency.
    relative_anisotropy : ndarray (F,) or None
        ``(max - min) / mean`` of the RF yield function at ``anisotropy_degree`` (when asked).
    static_relative_anisotropy : float or None
        The same without RF, at the same degree.
    """

    freqs_MHz: np.ndarray
    static: float
    yields: np.ndarray
    delta: np.ndarray
    harmonics: np.ndarray
    relative_anisotropy: np.ndarray | None = None
    static_relative_anisotropy: float | None = None


def rf_spectrum(system, field_uT, direction, freqs_MHz, rf_nT, *, rf_direction="perpendicular", harmonics="auto",
                tol=1e-10, anisotropy_degree=None, progress: Callable[[int, int], None] | None = None,
                max_bytes=None, method="auto") -> RFSpectrum:
    """Change of the phase-averaged yield (and optionally of the anisotropy) against RF frequency.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
        Static field strength, microtesla.
    direction : array_like, shape (3,)
        Static field direction, molecular frame.
    freqs_MHz : array_like, shape (F,)
        RF frequencies, MHz (each > 0).
    rf_nT : float
        RF amplitude, nT.
    rf_direction, harmonics, tol, max_bytes
        As in :func:`retina.spin.rf_floquet.yields_rf`.
    method : {"auto", "separable", "floquet"}
        See :func:`retina.spin.rf_method.choose_rf_method`.
    anisotropy_degree : int, optional
        When given (a small even degree such as 2 or 4), also fit the RF yield function at this degree
        for every frequency and report its relative anisotropy (cost: a hemisphere of a Lebedev rule
        per frequency).
    progress : callable(done, total), optional
        Counts frequencies.

    Returns
    -------
    RFSpectrum
    """
    freqs = np.asarray(freqs_MHz, dtype=float).reshape(-1)
    if freqs.size == 0 or not np.all(np.isfinite(freqs)) or np.any(freqs <= 0):
        raise InputError(f"expected one or more RF frequencies > 0 MHz, got {freqs_MHz!r}", source=system.source,
                         key="freqs_MHz")
    d = np.asarray(direction, dtype=float).reshape(1, -1)
    static = float(engine.compute_yields(system, field_uT, d)[0])
    ys = np.empty(freqs.size)
    orders = np.empty(freqs.size, dtype=int)
    aniso = np.empty(freqs.size) if anisotropy_degree is not None else None
    static_aniso = None
    if anisotropy_degree is not None:
        L = _check_degree(anisotropy_degree)
        grid = sphere.grid_for_degree(L)
        half, full = grid.hemisphere()
        sv = engine.compute_yields(system, field_uT, grid.points[half])
        static_aniso = YieldFunction(sphere.fit_even(sv[full], grid, L), L).anisotropy().relative
    for i, f in enumerate(freqs):
        y, info = rf_yields(system, field_uT, d, rf_MHz=f, rf_nT=rf_nT, rf_direction=rf_direction,
                            harmonics=harmonics, tol=tol, max_bytes=max_bytes, return_info=True, method=method)
        ys[i] = y[0]
        orders[i] = info["harmonics"][0]
        if aniso is not None:
            v = rf_yields(system, field_uT, grid.points[half], rf_MHz=f, rf_nT=rf_nT, rf_direction=rf_direction,
                          harmonics=harmonics, tol=tol, max_bytes=max_bytes, method=method)
            aniso[i] = YieldFunction(sphere.fit_even(v[full], grid, L), L).anisotropy().relative
        if progress is not None:
            progress(i + 1, freqs.size)
    return RFSpectrum(freqs, static, ys, ys - static, orders, aniso, static_aniso)
