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

PNG_COMPRESS_LEVEL = 3
"""zlib level of the PNG files (Pillow's default is 6).  Measured on the demo's ten figures at
300 dpi: level 3 encodes in about half the time of level 6, and with the opaque pictures stored as
RGB (no alpha channel) the files are no larger than RGBA at level 6 (2.9 MB in all)."""

_SUPERSCRIPT = str.maketrans("-\N{MINUS SIGN}0123456789", "\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT MINUS}"
                             "\N{SUPERSCRIPT ZERO}\N{SUPERSCRIPT ONE}\N{SUPERSCRIPT TWO}"
                             "\N{SUPERSCRIPT THREE}\N{SUPERSCRIPT FOUR}\N{SUPERSCRIPT FIVE}"
                             "\N{SUPERSCRIPT SIX}\N{SUPERSCRIPT SEVEN}\N{SUPERSCRIPT EIGHT}"
                             "\N{SUPERSCRIPT NINE}")


def power_label(value: float, base: float = 10.0) -> str:
    """A tick label of a logarithmic axis in plain text with Unicode superscripts.

    Decades read ``10\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT THREE}``; other values
    ``2\N{MULTIPLICATION SIGN}10\N{SUPERSCRIPT MINUS}\N{SUPERSCRIPT THREE}``; 0 reads ``0``; negative
    values carry a minus sign (U+2212), as matplotlib's mathtext labels do.

    Parameters
    ----------
    value : float
        The tick value.
    base : float
        The axis base.

    Returns
    -------
    str
    """
    import math

    if value == 0:
        return "0"
    sign = "\N{MINUS SIGN}" if value < 0 else ""
    x = abs(float(value))
    b = f"{base:g}"
    fx = math.log(x) / math.log(base)
    e = round(fx)
    if abs(fx - e) < 1e-10:
        return f"{sign}{b}{str(int(e)).translate(_SUPERSCRIPT)}"
    e = math.floor(fx)
    coeff = base ** (fx - e)
    if abs(coeff - round(coeff)) < 1e-10:
        coeff = round(coeff)
    return f"{sign}{coeff:g}\N{MULTIPLICATION SIGN}{b}{str(int(e)).translate(_SUPERSCRIPT)}"


def _plain_log_formatter_class():
    from matplotlib.ticker import LogFormatterSciNotation

    class PlainLogFormatter(LogFormatterSciNotation):
        """matplotlib's scientific log-axis formatter (same ticks labelled, same rules), writing
        plain text with Unicode superscripts (:func:`power_label`) instead of mathtext, which
        matplotlib would parse for every label of every figure."""

        def __call__(self, x, pos=None):
            s = super().__call__(x, pos)
            if not s:
                return s
            return power_label(x, self._base)

    return PlainLogFormatter


_PLAIN = None


def plain_log_labels(fig: Figure) -> Figure:
    """Label every logarithmic (and symmetric-log) axis of ``fig`` with :func:`power_label`.

    Each matplotlib log formatter (``LogFormatterMathtext`` or its scientific variant, which a
    ``set_xscale("log")`` installs) is replaced by a plain-text one with the same settings, so the
    same ticks are labelled; other formatters are left alone.  :func:`finish` calls it for every
    builder.

    Parameters
    ----------
    fig : matplotlib.figure.Figure

    Returns
    -------
    matplotlib.figure.Figure
        ``fig``.
    """
    global _PLAIN
    from matplotlib.ticker import LogFormatterMathtext

    if _PLAIN is None:
        _PLAIN = _plain_log_formatter_class()
    axes = list(fig.axes)
    for ax in list(axes):
        axes.extend(getattr(ax, "child_axes", ()))
    for ax in axes:
        for axis in (ax.xaxis, ax.yaxis):
            for get, put in ((axis.get_major_formatter, axis.set_major_formatter),
                             (axis.get_minor_formatter, axis.set_minor_formatter)):
                f = get()
                if isinstance(f, LogFormatterMathtext) and not isinstance(f, _PLAIN):
                    new = _PLAIN.__new__(_PLAIN)
                    new.__dict__.update(f.__dict__)
                    put(new)
    return fig


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
        plain_log_labels(fig)
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
                if png.shape[2] == 4 and np.all(png[..., 3] == 255):
                    png = png[..., :3]           # opaque: RGB, a quarter fewer bytes to compress
                _save_png(tmp, png, dpi, meta)
            else:
                extra = {"pil_kwargs": {"compress_level": PNG_COMPRESS_LEVEL}} if fmt == "png" else {}
                fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta, bbox_inches=bbox,
                            pad_inches=_PAD_IN, **extra)
        written.append(target)
    return written


def _save_png(path, pixels: np.ndarray, dpi: int, meta: dict) -> None:
    """Write ``pixels`` (H, W, 3 or 4) uint8 as PNG with Pillow at :data:`PNG_COMPRESS_LEVEL`."""
    from PIL import Image, PngImagePlugin

    info = PngImagePlugin.PngInfo()
    for k, v in meta.items():
        if v is not None:
            info.add_text(k, v)
    Image.fromarray(np.ascontiguousarray(pixels)).save(path, format="png", pnginfo=info, dpi=(dpi, dpi),
                                                       compress_level=PNG_COMPRESS_LEVEL)


_PAD_IN = 0.03
"""Padding around the tight bounding box, inches (as ``savefig.pad_inches`` in :data:`STYLE`)."""


MARGIN_IN = 1.5
"""Blank margin (inches) drawn around the figure by :func:`_render_tight_png`, so that artists
sticking out of the figure (legends under the axes, labels) are still in the one draw."""


def _render_tight_png(fig: Figure, dpi: int):
    """Draw ``fig`` once at ``dpi`` on an Agg canvas with a :data:`MARGIN_IN` margin on every side;
    return its pixels cropped to the padded tight bounding box and that box (inches), as
    ``savefig(bbox_inches="tight")`` would use.

    matplotlib's tight save lays the figure out in a draw without rendering, then draws it again
    shifted by the box's corner; here the figure is drawn once on the larger canvas (matplotlib's
    own ``bbox_inches`` machinery with a box that is the figure grown by the margin, so the
    margin is painted like the figure's background and the layout is the figure's own), the box
    comes from that draw's renderer, and the PNG is the crop of that draw (the same pixels, up to
    the sub-pixel part of the shift).  When the box reaches even beyond the margin there are no
    pixels to crop: ``(None, box)`` is returned and the caller saves the PNG the usual way.

    Returns
    -------
    rgba : ndarray (H, W, 4) uint8 or None
    bbox : matplotlib.transforms.Bbox or None
        Inches; None when the figure has no tight box.
    """
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.transforms import Bbox

    old_dpi = fig.dpi
    try:
        fig.set_dpi(dpi)
        canvas = FigureCanvasAgg(fig)
        w_in, h_in = fig.get_size_inches()
        m = MARGIN_IN
        raw = io.BytesIO()
        fig.savefig(raw, format="rgba", dpi=dpi, bbox_inches=Bbox.from_extents(-m, -m, w_in + m, h_in + m),
                    pad_inches=0)
        renderer = canvas.renderer          # the renderer of that draw: its text layouts are cached
        W, H = int(renderer.width), int(renderer.height)
        buf = np.frombuffer(raw.getbuffer(), np.uint8)
        if buf.size != W * H * 4:
            raise RuntimeError(f"unexpected raw buffer of {buf.size} bytes for {W} x {H} pixels")
        buf = buf.reshape(H, W, 4)
        box = fig.get_tightbbox(renderer)
        if box is None or not (box.width > 0 and box.height > 0):
            return None, None
        box = box.padded(_PAD_IN)
        # anchored at the box's lower left corner, as matplotlib's tight save places the figure
        w, h = int(box.width * dpi), int(box.height * dpi)
        c0, r0 = int(round((box.x0 + m) * dpi)), H - int(round((box.y0 + m) * dpi)) - h
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
    plain_log_labels(fig)
    if path is not None:
        save_figure(fig, path, tuple(formats), dpi=dpi)
    return fig
