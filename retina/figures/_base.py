"""Shared figure plumbing: sizes, style, metadata and atomic saving (conventions: package docstring)."""

from __future__ import annotations

from pathlib import Path
from typing import Iterable, Sequence

import matplotlib
import numpy as np
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
    for fmt in formats:
        if fmt not in _FORMATS:
            raise InputError(f"expected a figure format among {', '.join(_FORMATS)}, got {fmt!r}",
                             key="formats")
    written = []
    bbox = "tight"
    png = None
    if "png" in formats:
        # One Agg draw gives the PNG and the tight bounding box the other formats reuse, instead of
        # matplotlib's extra layout draw for every "tight" save (:func:`_render_tight_png`).
        png, box = _render_tight_png(fig, dpi)
        if box is not None:
            bbox = box
    for fmt in formats:
        meta = {"Title": title}
        if fmt == "pdf":
            meta["Subject"] = desc
        else:
            meta["Description"] = desc
        if fmt == "png":
            meta["Software"] = "retina-compass"
        target = stem.parent / f"{stem.name}.{fmt}"
        with atomic_path(target, force=force) as tmp:
            if fmt == "png" and png is not None:
                import matplotlib.image

                matplotlib.image.imsave(tmp, png, format="png", origin="upper", dpi=dpi, metadata=meta)
            else:
                fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta, bbox_inches=bbox,
                            pad_inches=_PAD_IN)
        written.append(target)
    return written


_PAD_IN = 0.03
"""Padding around the tight bounding box, inches (as ``savefig.pad_inches`` in :data:`STYLE`)."""


def _render_tight_png(fig: Figure, dpi: int):
    """Draw ``fig`` once at ``dpi`` on an Agg canvas; return its pixels cropped to the padded
    tight bounding box and that box (inches), as ``savefig(bbox_inches="tight")`` would use.

    matplotlib's tight save lays the figure out in a draw without rendering, then draws it again
    shifted by the box's corner; here the box comes from the one full draw and the PNG is the
    crop of that draw (the same pixels, up to the sub-pixel part of the shift).  When the box
    reaches outside the figure (an artist sticking out) there are no pixels to crop:
    ``(None, box)`` is returned and the caller saves the PNG the usual way.

    Returns
    -------
    rgba : ndarray (H, W, 4) uint8 or None
    bbox : matplotlib.transforms.Bbox or None
        Inches; None when the figure has no tight box.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    old_dpi = fig.dpi
    try:
        fig.set_dpi(dpi)
        canvas = FigureCanvasAgg(fig)
        canvas.draw()
        box = fig.get_tightbbox(canvas.get_renderer())
        if box is None or not (box.width > 0 and box.height > 0):
            return None, None
        box = box.padded(_PAD_IN)
        buf = np.asarray(canvas.buffer_rgba())
        H, W = buf.shape[:2]
        c0, r0 = int(round(box.x0 * dpi)), int(round(H - box.y1 * dpi))
        w, h = int(box.width * dpi), int(box.height * dpi)
        if c0 < 0 or r0 < 0 or c0 + w > W or r0 + h > H or w < 1 or h < 1:
            return None, box
        return buf[r0:r0 + h, c0:c0 + w].copy(), box
    finally:
        fig.set_dpi(old_dpi)


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
