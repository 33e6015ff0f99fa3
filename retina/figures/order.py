"""How much molecular order the compass needs: restraint classes and concentration curves."""

from __future__ import annotations

from typing import Mapping

import numpy as np

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, annotate, finish, new_figure, style
from retina.figures.curves import CHANCE_RMS_DEG, _shade_uninformative
from retina.readout.fisher import INFORMATIVE_BOUND_DEG

__all__ = ["order_study"]

_DASHES = {"cone_no_twist": (0, (3, 2))}


def order_study(classes: Mapping[str, tuple[str, float, float]],
                curves: Mapping[str, tuple[str, np.ndarray, np.ndarray, np.ndarray]], *,
                light_label: str = "", params: str = "",
                title: str = "How much molecular order the compass needs",
                path=None, formats=("png", "svg"), dpi: int = 300):
    """Modulation depth and heading bound for the restraint classes and against each concentration.

    Parameters
    ----------
    classes : mapping key -> (label, depth, bound_deg)
        The restraint classes in order of decreasing order; ``depth`` is ``(max - min) / mean`` of
        the receptor yields (dimensionless), ``bound_deg`` the heading bound (deg, ``inf`` when
        there is no information) at one light level.
    curves : mapping key -> (label, kappas (K,), depth (K,), bound_deg (K,))
        One curve per varied concentration (>= 0; 0 is drawn on the linear part of a symmetric-log
        axis).
    light_label : str
        The light level of the bounds, for the panel title.
    params : str
        Run parameters for the caption.
    title : str
    path : str or Path, optional
        File stem to write (:func:`retina.figures.save_figure`).
    formats : sequence of str
    dpi : int

    Returns
    -------
    matplotlib.figure.Figure
    """
    if len(classes) < 1 or len(curves) < 1:
        raise InputError("expected at least one class and one curve", key="classes")
    cur = {}
    for key, (lab, k, d, bd) in curves.items():
        k, d, bd = (np.asarray(x, float).reshape(-1) for x in (k, d, bd))
        if k.size < 2 or np.any(k < 0) or d.size != k.size or bd.size != k.size:
            raise InputError(f"curve {key!r}: expected at least two concentrations >= 0 with one depth "
                             f"and one bound each", key="curves")
        o = np.argsort(k)
        cur[key] = (lab, k[o], d[o], bd[o])
    pos = np.concatenate([c[1][c[1] > 0] for c in cur.values()])
    lin = float(pos.min()) if pos.size else 1.0
    kmax = max(float(c[1].max()) for c in cur.values())
    ticks = [0.0] + [10.0 ** e for e in range(int(np.ceil(np.log10(lin))), int(np.floor(np.log10(kmax))) + 1)]
    with style():
        from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

        fig = new_figure(DOUBLE_IN, 3.3)
        ax0 = fig.add_subplot(1, 3, 1)
        labels = [v[0] for v in classes.values()]
        dep = np.array([v[1] for v in classes.values()], float)
        bnd = np.array([v[2] for v in classes.values()], float)
        y = np.arange(len(labels))[::-1]
        ax0.barh(y, 100 * dep, color="C0", height=0.6)
        for yi, dp, bd in zip(y, dep, bnd):
            txt = f"{100 * dp:.2f} %, " + (f"{bd:.3g} deg" if np.isfinite(bd) and bd <= INFORMATIVE_BOUND_DEG
                                          else "no heading")
            ax0.text(100 * dp, yi, " " + txt, va="center", ha="left", fontsize=6)
        ax0.set_yticks(y)
        ax0.set_yticklabels([lab.replace(", ", ",\n").replace(" (", "\n(") for lab in labels], fontsize=6.5)
        ax0.set_xlabel("modulation depth, %")
        ax0.set_xlim(0, 100 * max(float(dep.max()), 1e-12) * 2.1)
        ax0.set_title("restraint classes (depth, bound)", fontsize=7)
        ax0.grid(True, axis="x", lw=0.3, color="0.85")
        ax1 = fig.add_subplot(1, 3, 2)
        ax2 = fig.add_subplot(1, 3, 3)
        tops = [CHANCE_RMS_DEG * 1.5]
        for i, (key, (lab, k, d, bd)) in enumerate(cur.items()):
            ls = _DASHES.get(key, "-")
            ax1.plot(k, 100 * d, marker="o", ms=2.8, lw=1.0, ls=ls, color=f"C{i}", label=lab)
            shown = np.where(np.isfinite(bd), bd, np.nan)
            ax2.plot(k, shown, marker="o", ms=2.8, lw=1.0, ls=ls, color=f"C{i}")
            if np.isfinite(bd).any():
                tops.append(float(np.nanmax(shown)) * 1.2)
        for ax in (ax1, ax2):
            ax.set_xscale("symlog", linthresh=lin, linscale=0.5)
            ax.set_xlim(0, kmax * 1.3)
            ax.xaxis.set_major_locator(FixedLocator(ticks))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            ax.xaxis.set_minor_locator(NullLocator())
            ax.set_xlabel(r"concentration $\kappa$ (0 = free)")
            ax.grid(True, lw=0.3, color="0.85")
        ax1.set_ylabel("modulation depth, %")
        ax1.set_ylim(bottom=0)
        ax1.set_title("depth against concentration", fontsize=7)
        top = max(tops)
        ax2.set_yscale("log")
        ax2.axhline(CHANCE_RMS_DEG, color="0.3", lw=0.7, ls="--")
        _shade_uninformative(ax2, top)
        ax2.set_ylim(top=top)
        ax2.set_ylabel("heading bound (s.d.), deg")
        ax2.set_title("bound" + (f", {light_label}" if light_label else ""), fontsize=7)
        fig.legend(*ax1.get_legend_handles_labels(), loc="lower center", ncol=3, frameon=False, fontsize=6,
                   bbox_to_anchor=(0.62, 0.0))
        fig.subplots_adjust(left=0.16, right=0.985, wspace=0.42, bottom=0.29, top=0.92)
    caption = ("Left: modulation depth (%) of the receptor yields over both retinas, and the heading bound (deg), "
               "for the restraint classes: aligned; restrained in two rotation angles and free in one (free rotation "
               "about the receptor axis); restrained in one and free in two (a molecular direction in the membrane "
               "plane, free in azimuth and in twist about itself); isotropic (free in three). Middle and right: the "
               "same against each concentration kappa (symmetric-log axis, 0 = no restraint); the curves' "
               "labels give the limits at kappa = inf and 0; dashed: the cone without twist, which keeps a pattern "
               f"at kappa = 0. Right: dashed horizontal line, a uniformly random heading ({CHANCE_RMS_DEG:.1f} deg); "
               f"grey band, bounds above {INFORMATIVE_BOUND_DEG:g} deg, not informative; missing points, no "
               "information at all."
               + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)
