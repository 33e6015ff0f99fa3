"""Precision curves (heading bound against photon count) and disorder tolerance."""

from __future__ import annotations

from typing import Mapping

import numpy as np

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, SINGLE_IN, annotate, finish, new_figure, style

from retina.readout.fisher import INFORMATIVE_BOUND_DEG, UNIFORM_RMS_DEG

#: rms error of a heading drawn uniformly from (-180, 180] deg: sqrt(int x^2 dx / 360) = 180 / sqrt(3).
#: Derived, shown as the "no information" level (:data:`retina.readout.fisher.UNIFORM_RMS_DEG`).
CHANCE_RMS_DEG = UNIFORM_RMS_DEG


def _shade_uninformative(ax, top: float) -> None:
    """Grey band where a Cramer-Rao bound is not informative (:mod:`retina.readout.fisher`)."""
    ax.axhspan(INFORMATIVE_BOUND_DEG, top, color="0.93", lw=0, zorder=0)


def _series(name, d, m):
    out = {}
    for k, v in dict(d or {}).items():
        a = np.asarray(v, float).reshape(-1)
        if a.size != m:
            raise InputError(f"expected {m} values for series {k!r}, got {a.size}", key=name)
        out[k] = a
    return out


def precision_curves(photons, bounds_deg: Mapping[str, np.ndarray], *,
                     decoded_deg: Mapping[str, np.ndarray] | None = None,
                     light_levels: Mapping[str, float] | None = None, params: str = "",
                     title: str = "Heading precision against light level",
                     path=None, formats=("png", "svg"), dpi: int = 300):
    """Cramer-Rao bounds (lines) and decoding errors (markers) against photons per receptor.

    Parameters
    ----------
    photons : ndarray (M,)
        Mean photon count per receptor per integration window (> 0).
    bounds_deg : mapping label -> ndarray (M,)
        Cramer-Rao lower bound on the heading standard deviation, degrees.
    decoded_deg : mapping label -> ndarray (M,), optional
        Measured rms decoding error, degrees (same labels draw in the same colour).
    light_levels : mapping name -> float, optional
        Named light levels drawn as vertical lines (photons per receptor).
    params : str
        Parameters for the caption (units and values), stored with the figure as metadata.
    title : str
        Figure title (also the metadata title).
    path : str or Path, optional
        Save as ``path.<fmt>`` for each of ``formats`` (atomically); nothing is written when None.
    formats : sequence of {"png", "svg", "pdf"}
        Output formats when saving.
    dpi : int
        Resolution of raster output (PNG), dots per inch.

    Returns
    -------
    matplotlib.figure.Figure
    """
    n = np.asarray(photons, float).reshape(-1)
    if n.size < 2 or np.any(n <= 0):
        raise InputError("expected at least two positive photon levels", key="photons")
    b = _series("bounds_deg", bounds_deg, n.size)
    if not b:
        raise InputError("expected at least one bound curve", key="bounds_deg")
    dec = _series("decoded_deg", decoded_deg, n.size)
    with style():
        fig = new_figure(SINGLE_IN, 3.3)
        ax = fig.add_subplot(1, 1, 1)
        colours = {}
        for i, (lab, y) in enumerate(b.items()):
            (ln,) = ax.plot(n, y, ("-", "--", "-.", ":")[i % 4], color=f"C{i}", label=f"bound: {lab}")
            colours[lab] = ln.get_color()
        for j, (lab, y) in enumerate(dec.items()):
            ax.plot(n, y, "o", ms=3.5, mfc="none", color=colours.get(lab, f"C{len(b) + j}"),
                    label=f"decoded: {lab}")
        # a 1/sqrt(n) guide through the first curve's middle point
        first = next(iter(b.values()))
        ok = np.isfinite(first) & (first > 0)
        if ok.any():
            i0 = np.flatnonzero(ok)[len(np.flatnonzero(ok)) // 2]
            ax.plot(n, first[i0] * np.sqrt(n[i0] / n), ":", color="0.5", lw=0.8, label=r"$\propto n^{-1/2}$")
        ax.axhline(CHANCE_RMS_DEG, color="0.3", lw=0.7, ls="--")
        ax.text(n[0], CHANCE_RMS_DEG * 1.08, "no information (uniform heading)", fontsize=6, va="bottom")
        for name, val in dict(light_levels or {}).items():
            ax.axvline(val, color="0.75", lw=0.7)
            ax.text(val, 0.02, f" {name}", transform=ax.get_xaxis_transform(), fontsize=6, rotation=90,
                    va="bottom", ha="right")
        ax.set_xscale("log")
        ax.set_yscale("log")
        allv = np.concatenate([v[np.isfinite(v) & (v > 0)] for v in list(b.values()) + list(dec.values())])
        lo = max(allv.min() / 2, 1e-4) if allv.size else 1e-2
        ax.set_ylim(lo, CHANCE_RMS_DEG * 3)
        _shade_uninformative(ax, CHANCE_RMS_DEG * 3)
        ax.text(n[-1], CHANCE_RMS_DEG * 2.6, f"grey: bound > {INFORMATIVE_BOUND_DEG:g} deg, not informative",
                fontsize=5.5, ha="right", va="top", color="0.35")
        ax.set_xlabel("photons per receptor per look")
        ax.set_ylabel("heading error (s.d.), deg")
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=2, frameon=False)
        ax.grid(True, which="major", lw=0.3, color="0.85")
    caption = ("Cramer-Rao lower bound on the heading standard deviation (lines, deg) and rms error of a "
               "maximum-likelihood decoder under Poisson photon noise (circles, deg) against the mean photon "
               "count per receptor per look (a head scan splits it over its poses); dotted: the n^-1/2 scaling; dashed: the rms error of a uniformly random "
               f"heading ({CHANCE_RMS_DEG:.1f} deg). Grey band: bounds above {INFORMATIVE_BOUND_DEG:g} deg are "
               "not informative on a circle (the bound is a local Gaussian approximation; the decoding error "
               "saturates at the random-guess level instead)." + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)


def disorder_tolerance(kappas, depth, bounds_deg: Mapping[str, np.ndarray], *, marked_kappa: float | None = None,
                       params: str = "",
                       title: str = "Tolerance to molecular disorder",
                       path=None, formats=("png", "svg"), dpi: int = 300):
    """Modulation depth and heading bound against the order of the molecules in a receptor.

    Parameters
    ----------
    kappas : ndarray (K,)
        von Mises-Fisher concentration of the molecular axes about the receptor axis (> 0; large =
        well ordered).
    depth : ndarray (K,)
        Modulation depth over the retinas, ``(max - min) / mean`` of the receptor yields
        (dimensionless).
    bounds_deg : mapping label -> ndarray (K,)
        Cramer-Rao bound on the heading s.d. (deg), one curve per light level.
    marked_kappa : float, optional
        A concentration to mark with a vertical line (e.g. the scenario's own).
    params : str
        Parameters for the caption (units and values), stored with the figure as metadata.
    title : str
        Figure title (also the metadata title).
    path : str or Path, optional
        Save as ``path.<fmt>`` for each of ``formats`` (atomically); nothing is written when None.
    formats : sequence of {"png", "svg", "pdf"}
        Output formats when saving.
    dpi : int
        Resolution of raster output (PNG), dots per inch.

    Returns
    -------
    matplotlib.figure.Figure
    """
    k = np.asarray(kappas, float).reshape(-1)
    if k.size < 2 or np.any(k <= 0):
        raise InputError("expected at least two positive concentrations", key="kappas")
    dpt = np.asarray(depth, float).reshape(-1)
    if dpt.size != k.size:
        raise InputError(f"expected {k.size} depths, got {dpt.size}", key="depth")
    b = _series("bounds_deg", bounds_deg, k.size)
    order = np.argsort(k)
    k, dpt = k[order], dpt[order]
    b = {lab: v[order] for lab, v in b.items()}
    with style():
        fig = new_figure(DOUBLE_IN, 2.5)
        ax1 = fig.add_subplot(1, 2, 1)
        ax1.plot(k, 100 * dpt, "o-", ms=3.5, color="C0")
        ax1.set_xscale("log")
        ax1.set_xlabel(r"cone concentration $\kappa$ (von Mises-Fisher)")
        ax1.set_ylabel("modulation depth (max - min) / mean, %")
        ax1.set_ylim(bottom=0)
        ax1.grid(True, lw=0.3, color="0.85")
        sec = ax1.secondary_xaxis("top", functions=(_kappa_to_angle, _angle_to_kappa))
        from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

        sec.xaxis.set_major_locator(FixedLocator([60, 45, 30, 20, 10, 5]))
        sec.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        sec.xaxis.set_minor_locator(NullLocator())
        sec.set_xlabel(r"typical tilt arccos$\langle\cos\theta\rangle$, deg", fontsize=6.5)
        ax2 = fig.add_subplot(1, 2, 2)
        for i, (lab, v) in enumerate(b.items()):
            ax2.plot(k, v, "o-", ms=3.5, color=f"C{i + 1}", label=lab)
        ax2.axhline(CHANCE_RMS_DEG, color="0.3", lw=0.7, ls="--")
        ax2.set_xscale("log")
        ax2.set_yscale("log")
        top = max([CHANCE_RMS_DEG * 1.5] + [float(np.nanmax(v[np.isfinite(v)])) * 1.2
                                            for v in b.values() if np.isfinite(v).any()])
        _shade_uninformative(ax2, top)
        ax2.set_ylim(top=top)
        ax2.set_xlabel(r"cone concentration $\kappa$")
        ax2.set_ylabel("heading bound (s.d.), deg")
        ax2.legend(frameon=False, title="light level", title_fontsize=6.5)
        ax2.grid(True, lw=0.3, color="0.85")
        if marked_kappa is not None:
            for a in (ax1, ax2):
                a.axvline(marked_kappa, color="0.4", lw=0.8, ls=":")
            ax1.text(marked_kappa, 0.03, " scenario", transform=ax1.get_xaxis_transform(), fontsize=6,
                     rotation=90, va="bottom", ha="right", color="0.3")
        fig.subplots_adjust(wspace=0.35)
    caption = ("Left: modulation depth (%) of the receptor yields over both retinas against the concentration "
               "kappa of the von Mises-Fisher cone of molecular axes about each receptor axis (top axis: typical "
               "tilt arccos<cos theta>, deg). Right: Cramer-Rao bound on the heading s.d. (deg) at each light level; dashed: a "
               f"uniformly random heading ({CHANCE_RMS_DEG:.1f} deg); grey band: bounds above "
               f"{INFORMATIVE_BOUND_DEG:g} deg, not informative on a circle."
               + (f" Dotted: the scenario's kappa = {marked_kappa:g} (order parameter <P2> = "
                  f"{_order_parameter(marked_kappa):.2f})." if marked_kappa is not None else "")
               + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)


def _order_parameter(kappa: float) -> float:
    """``<P2>`` of the von Mises-Fisher cone (:func:`retina.eye.ordering.order_parameter_from_kappa`)."""
    from retina.eye.ordering import order_parameter_from_kappa

    return order_parameter_from_kappa(float(kappa))


def _kappa_to_angle(kappa):
    """Typical tilt (deg) of a von Mises-Fisher axis from its mean: arccos of the mean cosine
    ``<cos theta> = coth(kappa) - 1/kappa`` (Derived: the density on the sphere is proportional to
    ``exp(kappa cos theta)``; integrate ``cos theta`` against it)."""
    k = np.clip(np.asarray(kappa, float), 1e-6, 1e6)
    c = 1.0 / np.tanh(k) - 1.0 / k
    return np.degrees(np.arccos(np.clip(c, -1, 1)))


def _angle_to_kappa(angle):
    a = np.clip(np.asarray(angle, float), 1e-3, 89.9)
    target = np.cos(np.radians(a))
    lo, hi = np.full_like(target, 1e-6), np.full_like(target, 1e6)
    for _ in range(80):
        mid = np.sqrt(lo * hi)
        c = 1.0 / np.tanh(mid) - 1.0 / mid
        hi = np.where(c > target, mid, hi)
        lo = np.where(c > target, lo, mid)
    return np.sqrt(lo * hi)
