"""Modulation patterns over the visual fields of the eyes: heading panels, head-scan film strip, GIF.

Each receptor is drawn at its visual direction (``Receptors.visual_dirs``, head frame: x beak,
y right, z down) on a Mollweide map of the head-centred sphere: azimuth ``atan2(y, x)`` (positive to
the right of the beak) and elevation ``-asin(z)`` (positive up).  The receptors of each eye are
triangulated separately so the gap between the eyes stays empty.  Marked on every panel: the beak
(centre, "+"), the horizon (dashed), the field direction in the head frame ("B", filled circle) and
its opposite ("-B", open circle; the compass is axial so both ends matter); the marks are
:data:`retina.figures.marks.MARKS`, which the viewer's map uses too.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np
from matplotlib.tri import Triangulation

from retina.errors import InputError
from retina.figures._base import DOUBLE_IN, annotate, finish, new_figure, style
from retina.figures.marks import MARKS


def head_lonlat(dirs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Map head-frame unit vectors to azimuth and elevation.

    Parameters
    ----------
    dirs : ndarray, shape (N, 3)
        Directions, head frame (x forward, y right, z down); normalised here.

    Returns
    -------
    azimuth : ndarray, shape (N,)
        Radians from the beak, positive to the right.
    elevation : ndarray, shape (N,)
        Radians, positive up.
    """
    d = np.asarray(dirs, float).reshape(-1, 3)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    return np.arctan2(d[:, 1], d[:, 0]), -np.arcsin(np.clip(d[:, 2], -1.0, 1.0))


def _check(visual_dirs, eye_index, values, b_head, what):
    visual_dirs = np.asarray(visual_dirs, float)
    eye_index = np.asarray(eye_index, int)
    values = np.atleast_2d(np.asarray(values, float))
    b_head = np.atleast_2d(np.asarray(b_head, float))
    n = visual_dirs.shape[0]
    if visual_dirs.ndim != 2 or visual_dirs.shape[1] != 3:
        raise InputError(f"expected visual_dirs of shape (N, 3), got {visual_dirs.shape}", key="visual_dirs")
    if eye_index.shape != (n,):
        raise InputError(f"expected eye_index of shape ({n},), got {eye_index.shape}", key="eye_index")
    if values.shape[1] != n:
        raise InputError(f"expected {what} of shape (P, {n}), got {values.shape}", key=what)
    if b_head.shape != (values.shape[0], 3):
        raise InputError(f"expected b_head of shape ({values.shape[0]}, 3), got {b_head.shape}", key="b_head")
    return visual_dirs, eye_index, values, b_head


class _FieldMap:
    """Precomputed triangulations of each eye's visual field (reused across panels and frames)."""

    def __init__(self, visual_dirs, eye_index):
        lon, lat = head_lonlat(visual_dirs)
        self.tris = []
        for e in np.unique(eye_index):
            sel = np.flatnonzero(eye_index == e)
            if sel.size < 3:
                continue
            tri = Triangulation(lon[sel], lat[sel])
            # Mask triangles that bridge gaps (long edges in angle) or wrap the +/-180 deg seam.
            p = np.stack([visual_dirs[sel][tri.triangles[:, k]] for k in range(3)], axis=1)
            p = p / np.linalg.norm(p, axis=2, keepdims=True)
            edge = np.stack([np.arccos(np.clip(np.sum(p[:, a] * p[:, (a + 1) % 3], axis=1), -1, 1))
                             for a in range(3)], axis=1).max(axis=1)
            tlon = lon[sel][tri.triangles]
            wraps = tlon.max(axis=1) - tlon.min(axis=1) > np.pi
            limit = 3.0 * np.median(edge) if edge.size else np.inf
            tri.set_mask(wraps | (edge > limit))
            self.tris.append((sel, tri))

    def draw(self, ax, values, b, vlim, *, cmap="RdBu_r", label_marks=True):
        return self.draw_updatable(ax, values, b, vlim, cmap=cmap, label_marks=label_marks)[0]

    def draw_updatable(self, ax, values, b, vlim, *, cmap="RdBu_r", label_marks=True):
        """Draw one panel; return its colour artist and ``update(values, b)``, which moves the
        panel to another pattern and field direction without rebuilding it (animation frames)."""
        meshes = []
        for sel, tri in self.tris:
            meshes.append(ax.tripcolor(tri, values[sel], cmap=cmap, vmin=-vlim, vmax=vlim, shading="gouraud",
                                       rasterized=True))
        art = meshes[-1] if meshes else None
        ax.plot(np.linspace(-np.pi, np.pi, 181), np.zeros(181), ls="--", color="0.35", lw=0.6)
        beak = MARKS["beak"]
        ax.plot([0], [0], beak.mpl, color=beak.face, ms=beak.size_pt, mew=beak.edge_width)
        bl, bb = head_lonlat(b[None, :])
        ml, mb = head_lonlat(-b[None, :])
        marks = []
        for (lo, la), mk in (((bl, bb), MARKS["field"]), ((ml, mb), MARKS["field_opposite"])):
            marks += ax.plot(lo, la, mk.mpl, ms=mk.size_pt, mfc=mk.face, mec=mk.edge, mew=mk.edge_width)
        labels = []
        if label_marks:
            ax.annotate("beak", (0, 0), xytext=(3, -8), textcoords="offset points", fontsize=6)
            for side, lon0 in (("left eye", -1.0), ("right eye", 1.0)):  # azimuth < 0 is the bird's left
                ax.text(lon0 * np.radians(110), np.radians(4), side, fontsize=6, ha="center", va="bottom",
                        color="0.15")
            labels.append(ax.annotate("B", (bl[0], bb[0]), xytext=(4, 2), textcoords="offset points",
                                      fontsize=6.5, fontweight="bold"))
            labels.append(ax.annotate("-B", (ml[0], mb[0]), xytext=(4, 2), textcoords="offset points",
                                      fontsize=6.5, fontweight="bold"))
        ax.grid(True, lw=0.25, color="0.6")
        ax.set_xticks(np.radians([-150, -90, -30, 30, 90, 150]))
        ax.set_xticklabels([])
        ax.set_yticks(np.radians([-60, -30, 0, 30, 60]))
        ax.set_yticklabels([])

        def update(values, b):
            for (sel, _), m in zip(self.tris, meshes):
                m.set_array(np.asarray(values, float)[sel])
            ends = (head_lonlat(b[None, :]), head_lonlat(-b[None, :]))
            for (lo, la), line in zip(ends, marks):
                line.set_data(lo, la)
            for (lo, la), lab in zip(ends, labels):
                lab.xy = (lo[0], la[0])

        return art, update


def _vlim(values_pct):
    v = float(np.nanmax(np.abs(values_pct)))
    return v if v > 0 else 1.0


def modulation_fields(visual_dirs, eye_index, modulation, headings_deg: Sequence[float], b_head, *,
                      params: str = "", ncols: int = 2,
                      title: str = "Modulation over the visual fields for several headings",
                      path=None, formats=("png", "svg"), dpi: int = 300):
    """Relative modulation over both eyes' visual fields, one panel per heading.

    Parameters
    ----------
    visual_dirs : ndarray (N, 3)
        Visual direction of each receptor, head frame (unit vectors).
    eye_index : ndarray (N,)
        0 = left eye, 1 = right eye.
    modulation : ndarray (H, N)
        Relative modulation ``(Phi - mean) / mean`` (dimensionless) per heading and receptor.
    headings_deg : sequence of H floats
        Heading (yaw, degrees clockwise from geographic north) of each panel.
    b_head : ndarray (H, 3)
        Unit field direction in the head frame for each heading.
    params : str
        Parameters for the caption (field, ordering, receptors).
    ncols : int
        Panels per row.
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
    visual_dirs, eye_index, modulation, b_head = _check(visual_dirs, eye_index, modulation, b_head,
                                                        "modulation")
    headings = np.asarray(headings_deg, float).reshape(-1)
    if headings.size != modulation.shape[0]:
        raise InputError(f"expected {modulation.shape[0]} headings, got {headings.size}", key="headings_deg")
    pct = 100.0 * modulation
    vlim = _vlim(pct)
    fm = _FieldMap(visual_dirs, eye_index)
    h = modulation.shape[0]
    ncols = max(1, min(ncols, h))
    nrows = int(np.ceil(h / ncols))
    with style():
        fig = new_figure(DOUBLE_IN, 0.4 + 1.95 * nrows * (2 / ncols))
        gs = fig.add_gridspec(nrows + 1, ncols, height_ratios=[1.0] * nrows + [0.06], hspace=0.28, wspace=0.06)
        art = None
        for i in range(h):
            ax = fig.add_subplot(gs[i // ncols, i % ncols], projection="mollweide")
            art = fm.draw(ax, pct[i], b_head[i], vlim, label_marks=(i == 0))
            ax.set_title(f"heading {headings[i]:g}\N{DEGREE SIGN}", pad=3)
        cax = fig.add_subplot(gs[nrows, :])
        cb = fig.colorbar(art, cax=cax, orientation="horizontal")
        cb.set_label("relative modulation (Phi - mean) / mean, %")
    caption = ("Relative modulation of the receptor yields (%, each eye relative to its own mean yield; colour "
               "scale symmetric about zero) over the "
               "visual fields of both eyes (Mollweide, head frame: azimuth right of the beak, elevation up; "
               "grid every 30 deg in elevation, 60 deg in azimuth), for headings "
               + ", ".join(f"{x:g}" for x in headings) + " deg clockwise from geographic north. "
               "+ beak, dashed horizon, filled circle the field direction B, open circle -B. "
               f"Largest |modulation| {vlim:.3g} %." + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)


def _frame_subset(n_total: int, n_frames: int) -> np.ndarray:
    n_frames = max(1, min(n_frames, n_total))
    return np.unique(np.round(np.linspace(0, n_total - 1, n_frames)).astype(int))


def scan_filmstrip(visual_dirs, eye_index, modulation, yaw_deg: Sequence[float], b_head, *,
                   n_frames: int = 8, params: str = "", title: str = "Head scan film strip",
                   path=None, formats=("png", "svg"), dpi: int = 300):
    """A film strip of the modulation pattern through a head scan.

    Parameters
    ----------
    visual_dirs, eye_index
        As in :func:`modulation_fields`.
    modulation : ndarray (F, N)
        Relative modulation per scan pose and receptor.
    yaw_deg : sequence of F floats
        Heading of each scan pose, degrees.
    b_head : ndarray (F, 3)
        Unit field direction in the head frame per pose.
    n_frames : int
        Frames shown (evenly spaced through the scan), in two rows.
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
    visual_dirs, eye_index, modulation, b_head = _check(visual_dirs, eye_index, modulation, b_head,
                                                        "modulation")
    yaw = np.asarray(yaw_deg, float).reshape(-1)
    if yaw.size != modulation.shape[0]:
        raise InputError(f"expected {modulation.shape[0]} yaw angles, got {yaw.size}", key="yaw_deg")
    idx = _frame_subset(modulation.shape[0], n_frames)
    pct = 100.0 * modulation
    vlim = _vlim(pct[idx])
    fm = _FieldMap(visual_dirs, eye_index)
    ncols = int(np.ceil(idx.size / 2)) if idx.size > 1 else 1
    nrows = int(np.ceil(idx.size / ncols))
    with style():
        fig = new_figure(DOUBLE_IN, 0.55 + 0.95 * nrows * (4 / max(ncols, 4)) + 0.6)
        gs = fig.add_gridspec(nrows + 1, ncols + 1, height_ratios=[1.0] * nrows + [0.6],
                              width_ratios=[1.0] * ncols + [0.04], hspace=0.35, wspace=0.05)
        art = None
        for j, k in enumerate(idx):
            ax = fig.add_subplot(gs[j // ncols, j % ncols], projection="mollweide")
            art = fm.draw(ax, pct[k], b_head[k], vlim, label_marks=False)
            ax.set_title(f"{j + 1}: yaw {yaw[k]:g}\N{DEGREE SIGN}", pad=2, fontsize=7)
        axy = fig.add_subplot(gs[nrows, :ncols])
        axy.plot(np.arange(yaw.size), yaw, color="0.2", lw=1.0)
        axy.plot(idx, yaw[idx], "o", ms=3.5, color="C1")
        for j, k in enumerate(idx):
            axy.annotate(str(j + 1), (k, yaw[k]), xytext=(0, 4), textcoords="offset points", fontsize=6,
                         ha="center")
        axy.set_xlabel("scan step")
        axy.set_ylabel("yaw, deg")
        axy.set_xlim(-0.5, yaw.size - 0.5)
        pad = 0.15 * max(np.ptp(yaw), 1.0)
        axy.set_ylim(yaw.min() - pad, yaw.max() + 2 * pad)
        cax = fig.add_subplot(gs[:nrows, ncols])
        cb = fig.colorbar(art, cax=cax)
        cb.set_label("relative modulation, %")
    caption = (f"Modulation pattern (%, symmetric scale, largest |value| {vlim:.3g} %) at {idx.size} of "
               f"{yaw.size} poses of a head scan from yaw {yaw[0]:g} to {yaw[-1]:g} deg; panels as in the "
               "heading figure (+ beak, dashed horizon, filled circle B, open circle -B); the lower trace "
               "shows the yaw of every scan step and the frames drawn." + (f" {params}." if params else ""))
    annotate(fig, title, caption)
    return finish(fig, path, formats, dpi)


def scan_animation(visual_dirs, eye_index, modulation, yaw_deg: Sequence[float], b_head, path, *,
                   fps: float = 8.0, dpi: int = 100, params: str = "", force: bool = True) -> Path:
    """Write the head scan as an animated GIF (Pillow), atomically.

    The panel is drawn once; every frame then redraws only what changes (blitting on the Agg
    canvas): the static background is restored from a saved copy and the colour meshes, the
    artists that lie above them (grid, horizon, beak, labels, outline), the field marks and the
    title are drawn on it, in the same order as a full draw (:func:`_blit_frames`).  All frames
    share one 256-colour palette, computed once from pixels of every frame (median cut), and are
    mapped to it without dithering, so colours do not flicker from frame to frame.

    Parameters
    ----------
    visual_dirs, eye_index, modulation, yaw_deg, b_head
        As in :func:`scan_filmstrip`; one frame per scan pose.
    path : str or Path
        Output file; ``.gif`` is appended when missing.
    fps : float
        Frames per second.
    dpi : int
        Raster resolution of the frames.
    force : bool
        Overwrite an existing file.
    params : str
        Parameters for the caption (units and values), stored with the figure as metadata.

    Returns
    -------
    Path
        The GIF written.
    """
    from retina.io.atomic import atomic_path, check_writable

    visual_dirs, eye_index, modulation, b_head = _check(visual_dirs, eye_index, modulation, b_head,
                                                        "modulation")
    yaw = np.asarray(yaw_deg, float).reshape(-1)
    path = Path(path)
    if path.suffix.lower() != ".gif":
        path = path.with_name(path.name + ".gif")
    check_writable(path, force=force)
    frames = scan_frames(visual_dirs, eye_index, modulation, yaw, b_head, dpi=dpi, params=params)
    images = _palette_frames(frames)
    # the same atomic writer as every other file (mode 0666 & ~umask); Pillow picks the format
    # from the temporary name, so it ends in .gif
    with atomic_path(path, force=force, suffix=".gif") as tmp:
        images[0].save(tmp, save_all=True, append_images=images[1:], duration=int(1000 / fps), loop=0)
    return path


def scan_frames(visual_dirs, eye_index, modulation, yaw_deg, b_head, *, dpi: int = 100, params: str = "",
                blit: bool = True) -> list[np.ndarray]:
    """The frames of :func:`scan_animation` as RGB arrays.

    Parameters
    ----------
    visual_dirs, eye_index, modulation, yaw_deg, b_head
        As in :func:`scan_animation`.
    dpi : int
        Raster resolution.
    params : str
        Caption parameters (metadata only).
    blit : bool
        Redraw only what changes between frames (default); False redraws the whole figure for
        every frame (the reference the blitted frames are tested against).

    Returns
    -------
    list of ndarray, shape (H, W, 3), uint8
        One frame per scan pose.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    visual_dirs, eye_index, modulation, b_head = _check(visual_dirs, eye_index, modulation, b_head,
                                                        "modulation")
    yaw = np.asarray(yaw_deg, float).reshape(-1)
    pct = 100.0 * modulation
    vlim = _vlim(pct)
    fm = _FieldMap(visual_dirs, eye_index)
    n = pct.shape[0]
    with style():
        fig = new_figure(4.8, 3.0)
        fig.set_dpi(dpi)
        canvas = FigureCanvasAgg(fig)
        ax = fig.add_axes([0.03, 0.26, 0.94, 0.66], projection="mollweide")
        cax = fig.add_axes([0.2, 0.16, 0.6, 0.035])
        annotate(fig, "Head scan animation", f"Modulation pattern through a head scan. {params}")
        art, update = fm.draw_updatable(ax, pct[0], b_head[0], vlim, label_marks=True)
        cb = fig.colorbar(art, cax=cax, orientation="horizontal")
        cb.set_label("relative modulation, %")

        def title(k):
            ax.set_title(f"yaw {yaw[k]:.0f}\N{DEGREE SIGN}  (step {k + 1}/{n})", pad=4)

        title(0)
        if not blit:
            out = []
            for k in range(n):
                update(pct[k], b_head[k])
                title(k)
                canvas.draw()
                out.append(np.asarray(canvas.buffer_rgba())[..., :3].copy())
            return out
        return _blit_frames(canvas, ax, update, title, pct, b_head)


def _blit_frames(canvas, ax, update, title, pct, b_head) -> list[np.ndarray]:
    """Frames by blitting: one full draw, then per frame only the artists that change and those
    drawn above them.

    The meshes (collections) change; every artist of the axes with a higher z-order than the
    meshes is drawn after them in a full draw, so all of them are hidden from the saved
    background and redrawn, in z-order, on every frame.  The axis decorations the axes draws
    above the meshes are its grid lines (ticks carry no labels on these maps); the axes title is
    drawn last, as in ``Axes.draw``.
    """
    from matplotlib.collections import Collection

    meshes = [c for c in ax.collections]
    z_mesh = max(m.get_zorder() for m in meshes)
    over = [a for a in ax.get_children()
            if a is not ax.patch and a not in meshes and a.get_visible() and a.get_zorder() >= z_mesh
            and a not in (ax.xaxis, ax.yaxis, ax.title, ax._left_title, ax._right_title)
            and not isinstance(a, Collection)]
    grid = [t.gridline for axis in (ax.xaxis, ax.yaxis) for t in axis.get_major_ticks() if t.gridline.get_visible()]
    # grid lines: drawn by their axis at the axis' z-order
    layers = sorted([(a.get_zorder(), i, [a]) for i, a in enumerate(over)]
                    + [(ax.xaxis.get_zorder(), -1, grid)], key=lambda t: (t[0], t[1]))
    moving = meshes + [a for _, _, arts in layers for a in arts] + [ax.title]
    canvas.draw()                              # lays out ticks, title position, colour bar
    for a in moving:
        a.set_animated(True)
    for g in grid:
        g.set_visible(False)                   # the axes draws grid lines itself; hide them
    canvas.draw()
    background = canvas.copy_from_bbox(canvas.figure.bbox)
    for g in grid:
        g.set_visible(True)
    renderer = canvas.get_renderer()
    frames = []
    try:
        for k in range(pct.shape[0]):
            update(pct[k], b_head[k])
            title(k)
            canvas.restore_region(background)
            for m in meshes:
                ax.draw_artist(m)
            for _, _, arts in layers:
                for a in arts:
                    ax.draw_artist(a)
            ax.draw_artist(ax.title)
            frames.append(np.asarray(canvas.buffer_rgba())[..., :3].copy())
    finally:
        for a in moving:
            a.set_animated(False)
    del renderer
    return frames


def _palette_frames(frames: list[np.ndarray]):
    """Pillow palette images of RGB frames, all sharing one adaptive 256-colour palette.

    The palette is 255 colours of a sample of every frame's pixels (every 3rd pixel in each
    direction, pure white left out; Pillow's fast octree method) plus pure white, so the page
    stays exactly white; each frame is mapped to its nearest palette colour without dithering.
    """
    from PIL import Image

    sample = np.concatenate([f[::3, ::3] for f in frames], axis=0).reshape(-1, 3)
    sample = sample[(sample != 255).any(axis=1)]
    if sample.shape[0] == 0:
        sample = np.zeros((1, 3), np.uint8)
    q = Image.fromarray(np.ascontiguousarray(sample[None])).quantize(255, method=Image.Quantize.FASTOCTREE,
                                                                      dither=Image.Dither.NONE)
    colours = (q.getpalette() or [])[:255 * 3]
    colours += [0] * (255 * 3 - len(colours)) + [255, 255, 255]
    pal = Image.new("P", (1, 1))
    pal.putpalette(colours)
    return [Image.fromarray(f).quantize(palette=pal, dither=Image.Dither.NONE) for f in frames]
