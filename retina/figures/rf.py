"""RF figures: conditions beside the control, and the frequency sweep (bound and trial r against
frequency, perpendicular and parallel, one colour per pair lifetime)."""

from __future__ import annotations

import numpy as np

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, annotate, finish, new_figure, style

__all__ = ["rf_conditions", "rf_sweep"]


def rf_conditions(names, bound_deg, trial_r, light_names, *, params: str = "",
                  title: str = "Heading bound and trial orientation under RF conditions",
                  path=None, formats=("png", "svg"), dpi: int = 300):
    """Grouped bars: single-pose bound (left) and trial mean vector length r (right) per condition.

    Parameters
    ----------
    names : sequence of str (C,)
        Condition names (the control first).
    bound_deg : ndarray (C, V)
        Cramer-Rao bound on the rms heading error, degrees, per condition and light level.
    trial_r : ndarray (C, V)
        Mean vector length of the simulated trials (0..1).
    light_names : sequence of str (V,)

    Returns
    -------
    matplotlib.figure.Figure
    """
    b = np.asarray(bound_deg, float)
    r = np.asarray(trial_r, float)
    c, v = len(names), len(light_names)
    if b.shape != (c, v) or r.shape != (c, v):
        raise InputError(f"expected arrays of shape ({c}, {v}), got {b.shape} and {r.shape}", key="bound_deg")
    with style():
        fig = new_figure(DOUBLE_IN, 2.6)
        axes = fig.subplots(1, 2)
        x = np.arange(c)
        w = 0.8 / max(v, 1)
        for j, ln in enumerate(light_names):
            axes[0].bar(x + (j - (v - 1) / 2) * w, b[:, j], w, color=f"C{j}", label=ln)
            axes[1].bar(x + (j - (v - 1) / 2) * w, r[:, j], w, color=f"C{j}", label=ln)
        axes[0].set_yscale("log")
        axes[0].set_ylabel("heading bound, single pose (deg)")
        axes[1].set_ylabel("trial mean vector length r")
        axes[1].set_ylim(0, 1.05)
        for ax in axes:
            ax.set_xticks(x)
            ax.set_xticklabels(list(names), rotation=20, ha="right")
            ax.legend(frameon=False, title="light")
        fig.tight_layout()
    cap = ("Cramer-Rao bound on the heading standard deviation (rms over headings, one pose) and the mean "
           "vector length of simulated orientation trials (same random numbers for every condition), for the "
           "control without RF and each RF condition. " + params)
    return finish(annotate(fig, title, cap), path, formats, dpi)


def rf_sweep(freqs_MHz, lifetimes_us, control_bound_deg, perp_bound_deg, par_bound_deg, control_r, perp_r,
             par_r, *, amplitude_nT: float, light: str, onset_MHz=None, params: str = "",
             title: str = "RF frequency sweep at fixed amplitude", path=None, formats=("png", "svg"),
             dpi: int = 300):
    """Bound relative to the control, and trial r, against RF frequency (log axis).

    Parameters
    ----------
    freqs_MHz : ndarray (F,)
    lifetimes_us : ndarray (T,)
    control_bound_deg : ndarray (T,)
        Control bound at the sweep's light level, degrees.
    perp_bound_deg, par_bound_deg : ndarray (T, F)
        Bounds with a perpendicular and a parallel RF field, degrees.
    control_r : ndarray (T,)
    perp_r, par_r : ndarray (T, F)
        Trial mean vector lengths.
    amplitude_nT : float
    light : str
        Name of the light level.
    onset_MHz : ndarray (T,), optional
        Marked with a vertical line where finite.

    Returns
    -------
    matplotlib.figure.Figure
    """
    f = np.asarray(freqs_MHz, float)
    lt = np.asarray(lifetimes_us, float)
    cb = np.asarray(control_bound_deg, float).reshape(-1)
    pb, qb = np.asarray(perp_bound_deg, float), np.asarray(par_bound_deg, float)
    cr = np.asarray(control_r, float).reshape(-1)
    pr, qr = np.asarray(perp_r, float), np.asarray(par_r, float)
    if f.size < 1 or np.any(f <= 0) or pb.shape != (lt.size, f.size) or qb.shape != pb.shape:
        raise InputError("expected positive frequencies and bounds of shape (lifetimes, frequencies)",
                         key="freqs_MHz")
    with style():
        fig = new_figure(DOUBLE_IN, 2.6)
        axes = fig.subplots(1, 2)
        for t, tau in enumerate(lt):
            col = f"C{t}"
            axes[0].plot(f, pb[t] / cb[t], "-o", ms=3, color=col, label=f"{tau:g} us, perpendicular")
            axes[0].plot(f, qb[t] / cb[t], "--s", ms=3, mfc="none", color=col, label=f"{tau:g} us, parallel")
            axes[1].plot(f, pr[t], "-o", ms=3, color=col, label=f"{tau:g} us, perpendicular")
            axes[1].plot(f, qr[t], "--s", ms=3, mfc="none", color=col, label=f"{tau:g} us, parallel")
            axes[1].axhline(cr[t], color=col, lw=0.6, ls=":")
            if onset_MHz is not None and np.isfinite(onset_MHz[t]):
                for ax in axes:
                    ax.axvline(onset_MHz[t], color=col, lw=0.6, ls="-.")
        axes[0].axhline(1.0, color="0.4", lw=0.6, ls=":")
        axes[0].set_ylabel("bound / bound without RF")
        axes[1].set_ylabel(f"trial mean vector length r ({light} light)")
        axes[1].set_ylim(0, 1.05)
        for ax in axes:
            ax.set_xscale("log")
            ax.set_xlabel("RF frequency (MHz)")
        axes[0].legend(frameon=False, fontsize=5.5)
        fig.tight_layout()
    cap = (f"RF field of {amplitude_nT:g} nT (amplitude) perpendicular to the static field (azimuth-averaged, solid) "
           f"and parallel to it (dashed), for each pair lifetime; single-pose heading bound at the '{light}' light "
           "level relative to the bound without RF, and the mean vector length of simulated trials (dotted: without "
           "RF). Dash-dotted lines: onset of disorientation (bound doubled), where reached. " + params)
    return finish(annotate(fig, title, cap), path, formats, dpi)
