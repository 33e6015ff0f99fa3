"""The yield function over the sphere of field directions (molecular frame).

Layout: left, a Lambert azimuthal equal-area map of the upper hemisphere (z >= 0) seen from +z,
which shows everything for an even function (``Phi(b) = Phi(-b)``); right, a Mollweide map of the
whole sphere (longitude = azimuth about z from +x, latitude = 90 deg - polar angle).  The
directions of the largest and smallest yield are marked on both (both ends of each axis).
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, annotate, finish, new_figure, style


def lambert_upper(n: int = 161) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A pixel grid of the Lambert azimuthal equal-area map of the upper hemisphere.

    Parameters
    ----------
    n : int
        Pixels per side.

    Returns
    -------
    X, Y : ndarray (n, n)
        Map coordinates in [-sqrt 2, sqrt 2] (radius ``r = 2 sin(theta / 2)``, theta the polar
        angle from +z; the rim r = sqrt 2 is the equator).
    dirs : ndarray (n, n, 3)
        Unit vectors of the pixels; NaN outside the hemisphere.
    """
    s = np.sqrt(2.0)
    x = np.linspace(-s, s, n)
    X, Y = np.meshgrid(x, x)
    r = np.hypot(X, Y)
    inside = r <= s * (1 + 1e-12)
    theta = 2.0 * np.arcsin(np.clip(r / 2.0, 0.0, 1.0))
    phi = np.arctan2(Y, X)
    dirs = np.stack([np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi), np.cos(theta)], axis=-1)
    dirs[~inside] = np.nan
    return X, Y, dirs


def _to_lambert(v: np.ndarray) -> tuple[float, float]:
    v = np.asarray(v, float) / np.linalg.norm(v)
    if v[2] < 0:
        v = -v
    theta = np.arccos(np.clip(v[2], -1, 1))
    r = 2 * np.sin(theta / 2)
    phi = np.arctan2(v[1], v[0])
    return r * np.cos(phi), r * np.sin(phi)


def _to_lonlat(v: np.ndarray) -> tuple[float, float]:
    v = np.asarray(v, float) / np.linalg.norm(v)
    return float(np.arctan2(v[1], v[0])), float(np.arcsin(np.clip(v[2], -1, 1)))


def yield_sphere(fn: Callable[[np.ndarray], np.ndarray], *, argmax: Sequence[float] | None = None,
                 argmin: Sequence[float] | None = None, label: str = "singlet yield",
                 params: str = "", title: str = "Reaction yield over field directions",
                 resolution: int = 161, path=None, formats=("png", "svg"), dpi: int = 300):
    """Plot a yield function over field directions with its extreme axes marked.

    Parameters
    ----------
    fn : callable
        ``fn(dirs (N, 3)) -> (N,)`` yields (dimensionless, 0..1) at unit field directions in the
        molecular frame, e.g. a :class:`retina.yieldfn.YieldFunction`.
    argmax, argmin : (3,) array_like, optional
        Directions of the largest and smallest yield; when omitted they are taken from
        ``fn.anisotropy()`` if ``fn`` has it, else from the plotted pixels.
    label : str
        Colour-bar label.
    params : str
        Parameters for the caption (field, degree, system), e.g. ``"49 uT, L = 12"``.
    resolution : int
        Pixels per side of the hemisphere map.
    path : str or Path, optional
        Save as ``path.<fmt>`` for each of ``formats``.
    title : str
        Figure title (also the metadata title).
    formats : sequence of {"png", "svg", "pdf"}
        Output formats when saving.
    dpi : int
        Resolution of raster output (PNG), dots per inch.

    Returns
    -------
    matplotlib.figure.Figure
    """
    X, Y, dirs = lambert_upper(resolution)
    inside = np.isfinite(dirs[..., 0])
    vals = np.full(X.shape, np.nan)
    vals[inside] = np.asarray(fn(dirs[inside]), float).reshape(-1)
    nlon, nlat = 2 * resolution, resolution
    lon = np.linspace(-np.pi, np.pi, nlon)
    lat = np.linspace(-np.pi / 2, np.pi / 2, nlat)
    LON, LAT = np.meshgrid(lon, lat)
    mdirs = np.stack([np.cos(LAT) * np.cos(LON), np.cos(LAT) * np.sin(LON), np.sin(LAT)], axis=-1)
    mvals = np.asarray(fn(mdirs.reshape(-1, 3)), float).reshape(LON.shape)
    if not (np.all(np.isfinite(mvals)) and np.all(np.isfinite(vals[inside]))):
        raise InputError("the yield function returned non-finite values", key="fn")

    if argmax is None or argmin is None:
        an = fn.anisotropy() if hasattr(fn, "anisotropy") else None
        if an is not None:
            argmax = an.argmax if argmax is None else argmax
            argmin = an.argmin if argmin is None else argmin
        else:
            flat = mdirs.reshape(-1, 3)
            argmax = flat[np.argmax(mvals)] if argmax is None else argmax
            argmin = flat[np.argmin(mvals)] if argmin is None else argmin
    vmin, vmax = float(np.nanmin(mvals)), float(np.nanmax(mvals))
    mean = float(np.mean(mvals * np.cos(LAT)) / np.mean(np.cos(LAT)))
    delta = vmax - vmin

    with style():
        fig = new_figure(DOUBLE_IN, 3.0)
        gs = fig.add_gridspec(1, 3, width_ratios=[1.0, 1.75, 0.05], wspace=0.3)
        ax1 = fig.add_subplot(gs[0, 0])
        im = ax1.pcolormesh(X, Y, vals, cmap="viridis", vmin=vmin, vmax=vmax, shading="auto",
                            rasterized=True)
        t = np.linspace(0, 2 * np.pi, 361)
        ax1.plot(np.sqrt(2) * np.cos(t), np.sqrt(2) * np.sin(t), color="k", lw=0.6)
        for deg in (30, 60):
            r = 2 * np.sin(np.radians(deg) / 2)
            ax1.plot(r * np.cos(t), r * np.sin(t), color="w", lw=0.4, alpha=0.6)
        ax1.text(np.sqrt(2) * 1.02, 0, "+x", ha="left", va="center")
        ax1.text(0, np.sqrt(2) * 1.02, "+y", ha="center", va="bottom")
        ax1.set_aspect("equal")
        ax1.set_axis_off()
        ax1.set_title("upper hemisphere, seen from +z\n(Lambert equal-area)", pad=12)

        ax2 = fig.add_subplot(gs[0, 1], projection="mollweide")
        ax2.pcolormesh(LON, LAT, mvals, cmap="viridis", vmin=vmin, vmax=vmax, shading="auto",
                       rasterized=True)
        ax2.grid(True, lw=0.3, color="w", alpha=0.7)
        ax2.set_xticks(np.radians([-120, -60, 0, 60, 120]))
        ax2.set_xticklabels([])
        ax2.set_title("whole sphere (Mollweide): centre +x, meridians every 60\N{DEGREE SIGN}\nabout z, latitude from the x-y plane", pad=12)

        for v, mk, name in ((argmax, "^", "max"), (argmin, "v", "min")):
            v = np.asarray(v, float)
            xl, yl = _to_lambert(v)
            ax1.plot([xl], [yl], mk, ms=6, mfc="w", mec="k", mew=0.8)
            ax1.annotate(name, (xl, yl), xytext=(4, 4), textcoords="offset points", color="w",
                         fontsize=7, fontweight="bold")
            for s in (1, -1):
                lo, la = _to_lonlat(s * v)
                ax2.plot([lo], [la], mk, ms=6, mfc="w", mec="k", mew=0.8)
                ax2.annotate(name, (lo, la), xytext=(4, 4), textcoords="offset points", color="w",
                             fontsize=7, fontweight="bold")
        cax = fig.add_subplot(gs[0, 2])
        cb = fig.colorbar(im, cax=cax)
        cb.set_label(label)
        cb.formatter.set_useOffset(False)
        cb.update_ticks()

    from retina.yieldfn import canonical_axis

    amax, amin = (np.where(np.abs(a) < 5e-3, 0.0, a) for a in (canonical_axis(argmax), canonical_axis(argmin)))
    fig.retina_extremes = (amax, amin)
    caption = (f"{label} (dimensionless) against field direction in the molecular frame. "
               f"Range {vmin:.5f}-{vmax:.5f}, mean {mean:.5f}, max - min {delta:.3g} "
               f"({100 * delta / mean:.3g} % of the mean). Largest yield along "
               f"({amax[0]:+.2f}, {amax[1]:+.2f}, {amax[2]:+.2f}), smallest along "
               f"({amin[0]:+.2f}, {amin[1]:+.2f}, {amin[2]:+.2f}) (both ends of each axis marked)."
               + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)
