"""RF figures: conditions beside the control, and the frequency sweep (bound rise at a fixed amplitude
and the amplitude needed to disorient against frequency, perpendicular and parallel, one colour per
pair lifetime)."""

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
        Light-level names, one bar colour each.
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


def rf_sweep(curve_MHz, lifetimes_us, perp_rise, par_rise, perp_threshold_nT, par_threshold_nT, *,
             amplitude_nT: float, rise: float, weak_nT, onset_MHz=None, params: str = "",
             title: str = "RF frequency sweep: bound rise and the amplitude needed to disorient", path=None,
             formats=("png", "svg"), dpi: int = 300):
    """The planning figure: bound rise at a fixed amplitude (left) and threshold amplitude (right)
    against RF frequency, perpendicular (solid) and parallel (dashed), one colour per lifetime.

    Parameters
    ----------
    curve_MHz : ndarray (Y,)
        Frequencies, MHz (log axis).
    lifetimes_us : ndarray (T,)
        Pair lifetimes, microseconds (one colour each).
    perp_rise, par_rise : ndarray (T, Y)
        Bound / bound without RF - 1 at ``amplitude_nT``.
    perp_threshold_nT, par_threshold_nT : ndarray (T, Y)
        Amplitude (nT) that raises the bound by ``rise``; NaN where it never does.
    amplitude_nT : float
        The fixed amplitude of the left panel (a grey line on the right).
    rise : float
        The onset's relative rise (0.1 = 10 %).
    weak_nT : ndarray (T,)
        Amplitude at which ``gamma_e b / k`` reaches the weak-field limit: threshold curves above it
        are drawn thin and dotted (second order extrapolated).
    onset_MHz : ndarray (T,), optional
        Marked with a vertical line where finite.
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
    f = np.asarray(curve_MHz, float)
    lt = np.asarray(lifetimes_us, float)
    pr, qr = np.asarray(perp_rise, float), np.asarray(par_rise, float)
    pt, qt = np.asarray(perp_threshold_nT, float), np.asarray(par_threshold_nT, float)
    wk = np.asarray(weak_nT, float).reshape(-1)
    shape = (lt.size, f.size)
    if f.size < 1 or np.any(f <= 0) or any(a.shape != shape for a in (pr, qr, pt, qt)) or wk.size != lt.size:
        raise InputError("expected positive frequencies and arrays of shape (lifetimes, frequencies)",
                         key="curve_MHz")
    with style():
        fig = new_figure(DOUBLE_IN, 2.8)
        axes = fig.subplots(1, 2)
        for t, tau in enumerate(lt):
            col = f"C{t}"
            axes[0].plot(f, 100 * pr[t], "-", color=col, label=f"{tau:g} us, perpendicular")
            axes[0].plot(f, 100 * qr[t], "--", color=col, lw=0.9, label=f"{tau:g} us, parallel")
            for arr, ls, lab in ((pt[t], "-", "perpendicular"), (qt[t], "--", "parallel")):
                axes[1].plot(f, arr, ls, color=col, lw=0.5, alpha=0.6)
                valid = np.where(arr <= wk[t], arr, np.nan)
                axes[1].plot(f, valid, ls, color=col, lw=1.4 if ls == "-" else 1.0, label=f"{tau:g} us, {lab}")
            axes[1].axhline(wk[t], color=col, lw=0.6, ls=":")
            axes[1].annotate(f"second order valid below ({tau:g} us)", (f[0], wk[t]), fontsize=5.5, color=col,
                             xytext=(2, 2), textcoords="offset points")
            if onset_MHz is not None and np.isfinite(onset_MHz[t]):
                for ax in axes:
                    ax.axvline(onset_MHz[t], color=col, lw=0.7, ls="-.")
                axes[1].plot([onset_MHz[t]], [amplitude_nT], "o", color=col, ms=4, mfc="none")
        axes[0].axhline(100 * rise, color="0.3", lw=0.6, ls="-.")
        axes[0].annotate(f"onset level (+{100 * rise:g} %)", (f[0], 100 * rise), fontsize=5.5, color="0.3",
                         xytext=(2, -8), textcoords="offset points")
        axes[0].set_yscale("symlog", linthresh=1e-5)
        axes[0].set_ylabel(f"bound rise at {amplitude_nT:g} nT (%)")
        axes[1].axhline(amplitude_nT, color="0.4", lw=0.6, ls="-.")
        axes[1].annotate(f"swept amplitude ({amplitude_nT:g} nT)", (f[-1], amplitude_nT), fontsize=5.5, color="0.3",
                         xytext=(-2, -8), textcoords="offset points", ha="right")
        axes[1].set_yscale("log")
        lo, hi = axes[1].get_ylim()
        axes[1].set_ylim(min(lo, amplitude_nT / 3.0), hi)   # room for the label under the amplitude line
        axes[1].set_ylabel(f"amplitude for a {100 * rise:g} % rise (nT)")
        for ax in axes:
            ax.set_xscale("log")
            ax.set_xlabel("RF frequency (MHz)")
        # below the onset line, clear of it and of the curves' quasi-static plateau
        axes[0].legend(frameon=False, fontsize=5.5, loc="upper center", bbox_to_anchor=(0.55, 0.86), ncol=2)
        fig.tight_layout()
    cap = (f"Left: rise of the single-pose heading bound over the bound without RF for a field of {amplitude_nT:g} nT "
           f"(amplitude) perpendicular to the static field (azimuth-averaged, solid) or parallel to it (dashed), one "
           f"colour per pair lifetime; dash-dotted horizontal: the onset level ({100 * rise:g} %). Right: the amplitude "
           f"that raises the bound by {100 * rise:g} % (second order in the amplitude); thick where the weak-field "
           "parameter gamma_e b / k stays below its limit (dotted horizontal lines), thin where the result is "
           f"extrapolated; grey dash-dotted: {amplitude_nT:g} nT. Vertical dash-dotted lines and circles: onset of "
           "disorientation at that amplitude, where reached. " + params)
    return finish(annotate(fig, title, cap), path, formats, dpi)
