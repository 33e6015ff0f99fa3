"""Circular histograms of simulated orientation trials, with the mean vector and test statistics.

Compass convention: 0 deg (geographic north, the world x axis of :mod:`retina.eye.field`) at the
top, angles increasing clockwise, as headings
are counted in :mod:`retina.eye.pose`.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, annotate, finish, new_figure, style
from retina.readout.circstats import rayleigh_test


def trial_histograms(headings_deg: Mapping[str, np.ndarray], goal_deg: float | None = None, *,
                     bins: int = 36, params: str = "", title: str = "Simulated orientation trials",
                     path=None, formats=("png", "svg"), dpi: int = 300):
    """One circular histogram per condition, with the mean vector, the goal and the Rayleigh test.

    Parameters
    ----------
    headings_deg : mapping label -> ndarray (n,)
        Chosen headings of the trials of each condition, degrees clockwise from geographic north.
    goal_deg : float, optional
        The intended heading, drawn as a dashed line.
    bins : int
        Histogram sectors over 360 deg.
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
    data = {k: np.asarray(v, float).reshape(-1) for k, v in dict(headings_deg).items()}
    if not data or any(v.size == 0 for v in data.values()):
        raise InputError("expected at least one non-empty condition", key="headings_deg")
    m = len(data)
    edges = np.linspace(0, 2 * np.pi, bins + 1)
    width = 2 * np.pi / bins
    stats_txt = []
    with style():
        fig = new_figure(DOUBLE_IN if m > 1 else 3.5, 2.9)
        for i, (lab, ang) in enumerate(data.items()):
            ax = fig.add_subplot(1, m, i + 1, projection="polar")
            ax.set_theta_zero_location("N")
            ax.set_theta_direction(-1)
            counts, _ = np.histogram(np.radians(ang % 360.0), bins=edges)
            ax.bar(edges[:-1] + width / 2, counts, width=width * 0.92, color="C0", alpha=0.75,
                   edgecolor="none")
            top = max(counts.max(), 1)
            ray = rayleigh_test(ang)
            mu, r, p = ray.mean_deg, ray.r, ray.p
            ax.annotate("", xy=(np.radians(mu), r * top), xytext=(0, 0),
                        arrowprops=dict(arrowstyle="-|>", color="C3", lw=1.5, shrinkA=0, shrinkB=0))
            if goal_deg is not None:
                ax.plot([np.radians(goal_deg)] * 2, [0, top * 1.1], ls="--", color="0.2", lw=0.8)
            ax.set_ylim(0, top * 1.1)
            ax.set_yticks([top])
            ax.set_yticklabels([str(top)], fontsize=5.5)
            ax.set_xticks(np.radians([0, 90, 180, 270]))
            ax.set_xticklabels(["N", "E", "S", "W"])
            ax.set_title(lab, pad=10)
            ptxt = f"{p:.2g}" if p >= 1e-4 else "< 1e-4"
            ax.text(0.5, -0.17, f"n = {ang.size}, mean {mu:.0f}\N{DEGREE SIGN}, r = {r:.2f}, Rayleigh p {ptxt}",
                    transform=ax.transAxes, ha="center", fontsize=6.5)
            stats_txt.append(f"{lab}: n = {ang.size}, mean {mu:.1f} deg, r = {r:.3f}, Rayleigh p = {p:.3g}")
        fig.subplots_adjust(wspace=0.45, bottom=0.15)
    caption = ("Headings chosen in simulated orientation trials (circular histograms, "
               f"{360 / bins:g} deg sectors, geographic north up, clockwise); red arrow: mean vector (length r times the "
               "largest count); " + ("dashed: the goal heading " + f"{goal_deg:g} deg; " if goal_deg is not None else "")
               + "; ".join(stats_txt) + "." + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)
