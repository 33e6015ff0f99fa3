"""Shared figure plumbing: sizes, style, metadata and atomic saving (conventions: package docstring)."""

from __future__ import annotations

from pathlib import Path
from typing import Iterable, Sequence

import matplotlib
from matplotlib.figure import Figure

from retina.errors import InputError
from retina.io.atomic import atomic_path

SINGLE_IN = 3.5
DOUBLE_IN = 7.2

STYLE = {
    "font.size": 7.5,
    "axes.titlesize": 8,
    "axes.labelsize": 7.5,
    "xtick.labelsize": 6.5,
    "ytick.labelsize": 6.5,
    "legend.fontsize": 6.5,
    "axes.linewidth": 0.6,
    "lines.linewidth": 1.2,
    "svg.fonttype": "none",
    "savefig.bbox": "tight",
    "savefig.pad_inches": 0.03,
}

_FORMATS = ("png", "svg", "pdf")


def new_figure(width_in: float, height_in: float) -> Figure:
    """A figure with the package style, not registered with pyplot (no window, no global state).

    Figures are built as ``matplotlib.figure.Figure`` objects and saved through the Agg renderer;
    pyplot is never imported, so no GUI backend (and no Qt) is ever loaded.

    Parameters
    ----------
    width_in, height_in : float
        Size in inches.

    Returns
    -------
    matplotlib.figure.Figure
    """
    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(width_in, height_in), dpi=100)
    return fig


def style():
    """Context manager applying :data:`STYLE` while artists are created.

    Returns
    -------
    contextlib.AbstractContextManager
        ``matplotlib.rc_context`` over :data:`STYLE`.
    """
    return matplotlib.rc_context(STYLE)


def annotate(fig: Figure, title: str, caption: str) -> Figure:
    """Attach the title and caption (units, parameters) that :func:`save_figure` writes as metadata.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    title : str
        Its title.
    caption : str
        Its caption (units and parameters).

    Returns
    -------
    matplotlib.figure.Figure
        ``fig``, with ``retina_title`` and ``retina_caption`` set.
    """
    fig.retina_title = title
    fig.retina_caption = caption
    return fig


def save_figure(fig: Figure, stem: str | Path, formats: Sequence[str] = ("png", "svg"), *,
                dpi: int = 300, force: bool = True, metadata: dict | None = None) -> list[Path]:
    """Write ``fig`` as ``stem.<fmt>`` for each format, atomically.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    stem : str or Path
        Output path without extension (an extension among png/svg/pdf is stripped).
    formats : sequence of {"png", "svg", "pdf"}
    dpi : int
        Resolution of raster output (PNG), dots per inch.
    force : bool
        Overwrite existing files (default True: the pipeline checks its output folder once).
    metadata : dict, optional
        Extra "Title"/"Description" overriding ``fig.retina_title`` / ``fig.retina_caption``.

    Returns
    -------
    list of Path
        The files written, in the order of ``formats``.
    """
    stem = Path(stem)
    if stem.suffix.lower().lstrip(".") in _FORMATS:
        stem = stem.with_suffix("")
    title = getattr(fig, "retina_title", "") or ""
    desc = getattr(fig, "retina_caption", "") or ""
    if metadata:
        title = metadata.get("Title", title)
        desc = metadata.get("Description", desc)
    written = []
    for fmt in formats:
        if fmt not in _FORMATS:
            raise InputError(f"expected a figure format among {', '.join(_FORMATS)}, got {fmt!r}",
                             key="formats")
        meta = {"Title": title}
        if fmt == "pdf":
            meta["Subject"] = desc
        else:
            meta["Description"] = desc
        if fmt == "png":
            meta["Software"] = "retina-compass"
        target = stem.parent / f"{stem.name}.{fmt}"
        with atomic_path(target, force=force) as tmp:
            fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta, bbox_inches="tight", pad_inches=0.03)
        written.append(target)
    return written


def finish(fig: Figure, path, formats: Iterable[str], dpi: int) -> Figure:
    """Save the figure when a path is given.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    path : str or Path or None
        Output stem (:func:`save_figure`); None saves nothing.
    formats : iterable of {"png", "svg", "pdf"}
        Output formats.
    dpi : int
        Resolution of raster output (PNG), dots per inch.

    Returns
    -------
    matplotlib.figure.Figure
        ``fig``.
    """
    if path is not None:
        save_figure(fig, path, tuple(formats), dpi=dpi)
    return fig
