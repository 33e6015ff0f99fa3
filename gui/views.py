"""vispy scene views of the viewer state: a 3-D head view and a 2-D visual-field map.

Conventions (owned here)
------------------------
- Display frame of the 3-D view: world north-east-down (:mod:`retina.eye.field`) turned so that
  ``z`` points up: ``p_display = diag(1, -1, -1) p_ned`` (x north, y west, z up; a proper
  rotation).  Head-frame points (millimetres, :mod:`retina.eye.geometry`) are drawn at
  ``diag(1, -1, -1) R p_head`` with ``R`` the pose rotation (:mod:`retina.eye.pose`).
- The field is drawn as an axis through the head centre with its arrow head at ``+B``; the world
  axes (north, east, down) start from the point of a ground grid 16 mm below the head.
- The map shows head-frame visual directions: azimuth from the beak (degrees, positive to the
  bird's right) across, elevation (degrees, positive up) upward, 2-degree pixels.  Each pixel takes
  the value of the receptor whose visual direction is nearest (:func:`retina.eye.pattern.resample`);
  with both eyes shown, a direction seen by both takes the eye whose optical axis is nearer.
  Marks (:data:`retina.figures.marks.MARKS`, the same as the figures'): the beak (+, at 0, 0), both
  ends of the field axis (filled circle ``B``, open circle ``-B``; yields are even), the world
  horizon (the head-frame directions of the horizontal plane) with the cardinal points on it, and
  each eye's visual-field edge.  Labels are placed by :func:`layout_labels` so that they never
  overlap each other or a mark.  The axes and the colour bar sit outside the zoomable scene.
- Colours: "RdBu_r" for the modulation, symmetric about 0 with limits +/- the largest shown
  ``|modulation|``; "viridis" for yields between the shown minimum and maximum (the colour maps
  of :mod:`retina.figures`).  A flat pattern (range below
  :data:`retina_viewer.workers.FLAT_MODULATION`) is drawn in the middle colour, never stretched;
  with ``lock_scale`` the limits stay those of :attr:`retina_viewer.state.ViewerState.locked_limits`.
  Receptors of a hidden eye are drawn faint grey.
- One draw per change: in the window the views follow *results* (``follow="result"``): the pose,
  the field marks and the colours all come from the result's request, so a heading step is drawn
  once, with matching pose and colours.  A view alone (``follow="state"``) follows the pose and
  field events directly.  A result that changes nothing a view shows (a new light level: same
  pose, same colours) draws nothing there; the view's ``skipped`` counts such results.
- Views subscribe to the state model in their constructor and only update their scene nodes; the
  model never knows its views.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

__all__ = ["HeadView", "MapView", "colour_values", "colour_limits", "layout_labels",
           "DISPLAY_FROM_NED", "MAP_STEP_DEG", "ensure_backend", "map_grid", "map_index",
           "PatternColours", "pattern_colours", "receptor_points_class", "flat_image_class",
           "image_bytes"]

#: NED -> display (x north, y west, z up).
DISPLAY_FROM_NED = np.diag([1.0, -1.0, -1.0])
#: Pixel size of the visual-field map, degrees.
MAP_STEP_DEG = 2.0
#: The map's home range (degrees): azimuth, elevation.
MAP_RANGE = ((-180.0, 180.0), (-90.0, 90.0))
_BG = (0.12, 0.12, 0.14, 1.0)
_HIDDEN = np.array([0.55, 0.55, 0.55, 0.18])
_NO_DATA = np.array([0.22, 0.22, 0.25, 1.0])
#: Colour of the dark halo behind the map's labels (RGBA).
HALO_COLOUR = (0.0, 0.0, 0.0, 1.0)
#: How far the halo reaches beyond each label's glyphs, canvas pixels.
HALO_PX = 1.0
_HALO_DIRECTIONS = np.array([(1, 1), (1, -1), (-1, 1), (-1, -1)], float)
_POSE_EVENTS = ("yaw_deg", "pitch_deg", "roll_deg")
_FIELD_EVENTS = ("inclination_deg", "declination_deg")
_COLOUR_EVENTS = ("display", "eye", "lock_scale")


def ensure_backend() -> None:
    """Select vispy's PyQt6 backend (idempotent)."""
    import vispy.app

    vispy.app.use_app("pyqt6")


_CMAPS: dict = {}


def _cmap(name: str):
    """matplotlib's colour map ``name``, one object per name for the process: the registry hands
    out a new copy on every lookup, which builds its lookup table again on its first use (about
    1.5 ms per pattern on the worker thread).  Colour maps are not modified here."""
    cm = _CMAPS.get(name)
    if cm is None:
        import matplotlib

        cm = _CMAPS[name] = matplotlib.colormaps[name]
    return cm


def _shown(result, eye: str) -> np.ndarray:
    idx = result.pattern.receptors.eye_index
    return np.ones(idx.shape, bool) if eye == "both" else idx == (0 if eye == "left" else 1)


def colour_limits(result, display: str, eye: str) -> tuple[float, float]:
    """The automatic colour-scale limits ``(lo, hi)`` of a result (module docstring).

    A flat pattern (range below :data:`retina_viewer.workers.FLAT_MODULATION`, relative) gets
    limits around its value so that every receptor takes the middle colour.

    Parameters
    ----------
    result : retina_viewer.workers.PatternResult
    display : {"modulation", "yields"}
    eye : {"both", "left", "right"}
        The receptors the limits are taken over.

    Returns
    -------
    tuple of float
        ``(lo, hi)`` in the unit of the values shown (modulation, dimensionless, symmetric about
        0; or yield); ``lo < hi``.
    """
    from .workers import FLAT_MODULATION

    pat = result.pattern
    values = np.asarray(pat.modulation if display == "modulation" else pat.yields, dtype=float)
    shown = _shown(result, eye)
    v = values[shown] if np.any(shown) else values
    if display == "modulation":
        h = float(np.max(np.abs(v)))
        if h < FLAT_MODULATION:
            h = 1.0  # flat: 0 is the middle colour; rounding noise stays invisible
        return -h, h
    lo, hi = float(v.min()), float(v.max())
    mid = 0.5 * (lo + hi)
    if hi - lo < FLAT_MODULATION * max(abs(mid), 1e-300):
        return mid - 1.0, mid + 1.0
    return lo, hi


def colour_values(result, display: str, eye: str, limits=None):
    """Colours of every receptor for a worker result.

    Parameters
    ----------
    result : retina_viewer.workers.PatternResult
    display : {"modulation", "yields"}
    eye : {"both", "left", "right"}
    limits : tuple of float, optional
        Fixed colour-scale limits (a locked scale); default :func:`colour_limits`.

    Returns
    -------
    values : ndarray, shape (N,)
        Modulation (dimensionless) or yield of every receptor.
    rgba : ndarray, shape (N, 4)
        Colours in [0, 1]; receptors of a hidden eye are faint grey.
    limits : tuple of float
        The colour-scale limits ``(lo, hi)`` (same unit as ``values``).
    shown : ndarray of bool, shape (N,)
    """
    pat = result.pattern
    values = np.asarray(pat.modulation if display == "modulation" else pat.yields, dtype=float)
    shown = _shown(result, eye)
    lo, hi = colour_limits(result, display, eye) if limits is None else (float(limits[0]), float(limits[1]))
    if hi <= lo:
        hi = lo + 1e-12
    cmap = _cmap("RdBu_r" if display == "modulation" else "viridis")
    # Rounded to 12 decimals so that rounding noise (a flat pattern's +-1e-16) cannot tip a value
    # across a colour-map bin edge: 0.5 - 6e-17 would otherwise take the entry below the middle.
    rgba = cmap(np.round(np.clip((values - lo) / (hi - lo), 0.0, 1.0), 12))
    rgba[~shown] = _HIDDEN
    return values, rgba, (lo, hi), shown


def map_grid() -> tuple[np.ndarray, np.ndarray]:
    """Pixel centres of the visual-field map.

    Returns
    -------
    azimuth : ndarray, shape (A,)
        Degrees, from -180 to 180 in steps of :data:`MAP_STEP_DEG`.
    elevation : ndarray, shape (E,)
        Degrees, from -90 to 90.
    """
    s = MAP_STEP_DEG
    return np.arange(-180.0 + s / 2, 180.0, s), np.arange(-90.0 + s / 2, 90.0, s)


def map_index(rec) -> np.ndarray:
    """Receptor drawn at each map pixel, for the eye choices both, left and right.

    Parameters
    ----------
    rec : retina.eye.geometry.Receptors

    Returns
    -------
    ndarray of int64, shape (3, E, A)
        Receptor index per pixel of :func:`map_grid` (-1: no receptor), for "both", "left" and
        "right" (module docstring: a direction seen by both eyes takes the eye whose optical
        axis is nearer).
    """
    from retina.eye.geometry import optical_axis
    from retina.eye.pattern import resample

    az, el = map_grid()
    fake = SimpleNamespace(modulation=np.arange(len(rec), dtype=float), receptors=rec)
    per = resample(fake, (az, el))  # (2, E, A) receptor indices or NaN
    A, E = np.meshgrid(np.radians(az), np.radians(el))
    d = np.stack([np.cos(E) * np.cos(A), np.cos(E) * np.sin(A), -np.sin(E)], axis=-1)
    cosang = np.full((2,) + A.shape, -np.inf)
    for eye in rec.eyes:
        cosang[eye.index] = d @ optical_axis(eye.azimuth_deg, eye.elevation_deg)
    cosang = np.where(np.isnan(per), -np.inf, cosang)
    best = np.argmax(cosang, axis=0)
    both = np.take_along_axis(per, best[None], axis=0)[0]
    maps = np.stack([both, per[0], per[1]])
    return np.where(np.isnan(maps), -1, maps).astype(np.int64)


_EYE_ROW = {"both": 0, "left": 1, "right": 2}


@dataclass(frozen=True, eq=False)
class PatternColours:
    """Colours of a pattern, ready to upload: computed on the worker thread, so that the GUI
    thread only hands arrays to the GPU (:func:`pattern_colours`).

    Attributes
    ----------
    display, eye : str
        The display and eye choice they were made for.
    limits : tuple of float
        Colour-scale limits ``(lo, hi)`` (:func:`colour_limits`, or the locked ones).
    locked : bool
        Made with fixed (locked) limits.
    rgba : ndarray of float32, shape (N, 4)
        Colour of every receptor (the head view's markers).
    image : ndarray of float32, shape (E, A, 4)
        The visual-field map (:func:`map_grid` pixels; no receptor: the no-data colour).
    image_bytes : ndarray of uint8, shape (E, A, 4)
        The same as the 8-bit values of the map's texture (:func:`image_bytes`), made here so
        that the GUI thread only uploads them.
    """

    display: str
    eye: str
    limits: tuple
    locked: bool
    rgba: np.ndarray
    image: np.ndarray
    image_bytes: np.ndarray = None

    def fits(self, display: str, eye: str, limits) -> bool:
        """Whether these colours are the ones asked for.

        Parameters
        ----------
        display : {"modulation", "yields"}
        eye : {"both", "left", "right"}
        limits : tuple of float or None
            Fixed colour-scale limits ``(lo, hi)``; None: fitted to the pattern.

        Returns
        -------
        bool
        """
        if display != self.display or eye != self.eye or (limits is not None) != self.locked:
            return False
        return limits is None or tuple(float(x) for x in limits) == self.limits


def pattern_colours(result, display: str, eye: str, limits=None, index=None) -> PatternColours:
    """The colours of a result's pattern (:class:`PatternColours`).

    Parameters
    ----------
    result : object with ``pattern``
        A :class:`retina_viewer.workers.PatternResult` (or anything with its ``pattern``).
    display, eye, limits
        As for :func:`colour_values`.
    index : ndarray, shape (3, E, A), optional
        :func:`map_index` of the pattern's receptors (computed when not given).

    Returns
    -------
    PatternColours
        Receptor colours ``rgba`` ``(N, 4)`` and the map ``image`` ``(E, A, 4)`` (also as the
        texture's 8-bit values, ``image_bytes``), float32 in
        [0, 1], with the limits used.
    """
    _, rgba, lims, _ = colour_values(result, display, eye, limits)
    if index is None:
        index = map_index(result.pattern.receptors)
    idx = index[_EYE_ROW[eye]]
    rgba32 = rgba.astype(np.float32)
    image = np.where((idx >= 0)[..., None], rgba32[np.maximum(idx, 0)], _NO_DATA.astype(np.float32))
    image = image.astype(np.float32)
    return PatternColours(display=display, eye=eye, limits=(float(lims[0]), float(lims[1])),
                          locked=limits is not None, rgba=rgba32, image=image, image_bytes=image_bytes(image))


def _colours_for(view, res) -> PatternColours:
    """The worker's colours of ``res`` when they fit the state's display choice, else computed
    here (a display, eye or lock change without a new pattern)."""
    st = view.state
    limits = _state_limits(st, res)
    cols = getattr(res, "colours", None)
    if cols is not None and cols.fits(st.display, st.eye, limits):
        return cols
    key = (st.display, st.eye, None if limits is None else tuple(limits))
    cache = _colours_for.cache
    if cache.get("result") is not res or cache.get("key") != key:
        index = getattr(view, "_index", None)
        if index is None or getattr(view, "_receptors", None) is not res.pattern.receptors:
            index = map_index(res.pattern.receptors)
        cache.update(result=res, key=key, value=pattern_colours(res, st.display, st.eye, limits, index))
    return cache["value"]


_colours_for.cache = {}


_POINTS_VERT = """
attribute vec3 a_position;
attribute vec4 a_color;
attribute float a_size;
varying vec4 v_color;
varying float v_size;
void main() {
    v_color = a_color;
    vec4 pos = vec4(a_position, 1.0);
    vec4 fb = $visual_to_framebuffer(pos);
    // the diameter a_size (visual units, perpendicular to the line of sight) in framebuffer pixels
    vec4 p = $framebuffer_to_visual(fb);
    vec4 x = $framebuffer_to_visual(fb + vec4(1e10, 0.0, 0.0, 0.0)) - p;
    vec4 edge = $visual_to_framebuffer(p + normalize(x) * a_size);
    v_size = max(edge.x / edge.w - fb.x / fb.w, 1.0) + 0.5;  // + 0.5: no pixel gaps between discs
    gl_PointSize = v_size;
    gl_Position = $framebuffer_to_render(fb);
}
"""

_POINTS_FRAG = """
varying vec4 v_color;
varying float v_size;
void main() {
    vec2 c = gl_PointCoord - vec2(0.5);
    float r2 = dot(c, c);
    if (r2 > 0.25)
        discard;
    // discs of 6 pixels and more get a darker 1-pixel rim, so that neighbours stay apart
    float inner = max(0.5 - 1.0 / v_size, 0.0);
    gl_FragColor = (v_size >= 6.0 && r2 > inner * inner) ? vec4(0.55 * v_color.rgb, v_color.a) : v_color;
}
"""

_POINTS_CLASS = None


def receptor_points_class():
    """The scene node class :class:`ReceptorPoints` (built on first use: it imports vispy).

    ``ReceptorPoints(parent=node)`` draws one flat disc per point, its diameter given in the
    node's own units (millimetres in the head), as ``GL_POINTS`` with a one-line fragment shader:
    no signed-distance symbol, no edge and no anti-aliased rim (vispy's ``Markers`` draws each
    marker over a square about 6 pixels wider than the disc, with a signed-distance shader; at
    4,000 receptors per eye that was most of the head view's raster time).  Methods:
    ``set_points(positions (N, 3), sizes (N,), colors (N, 4))`` and ``set_colors(colors (N, 4))``,
    which re-sends only the colour buffer.  Attributes ``positions``, ``sizes``, ``colors`` hold
    what was last sent (float32).

    Returns
    -------
    type
        A vispy scene node class (one per process).
    """
    global _POINTS_CLASS
    if _POINTS_CLASS is None:
        from vispy import gloo
        from vispy.scene.visuals import create_visual_node
        from vispy.visuals import Visual

        class ReceptorPointsVisual(Visual):
            """Flat discs of per-point colour and size (:func:`receptor_points_class`)."""

            def __init__(self):
                Visual.__init__(self, vcode=_POINTS_VERT, fcode=_POINTS_FRAG)
                self._draw_mode = "points"
                self.positions = np.zeros((0, 3), np.float32)
                self.sizes = np.zeros(0, np.float32)
                self.colors = np.zeros((0, 4), np.float32)
                self._vbo_pos = gloo.VertexBuffer(np.zeros((1, 3), np.float32))
                self._vbo_size = gloo.VertexBuffer(np.zeros(1, np.float32))
                self._vbo_col = gloo.VertexBuffer(np.zeros((1, 4), np.float32))
                self.shared_program["a_position"] = self._vbo_pos
                self.shared_program["a_size"] = self._vbo_size
                self.shared_program["a_color"] = self._vbo_col
                self.set_gl_state("translucent", depth_test=True)

            def set_points(self, positions, sizes, colors) -> None:
                pos = np.ascontiguousarray(positions, np.float32).reshape(-1, 3)
                n = len(pos)
                siz = np.ascontiguousarray(np.broadcast_to(np.asarray(sizes, np.float32), (n,)))
                col = np.ascontiguousarray(colors, np.float32).reshape(n, 4)
                self.positions, self.sizes, self.colors = pos, siz, col
                if n:
                    self._vbo_pos.set_data(pos)
                    self._vbo_size.set_data(siz)
                    self._vbo_col.set_data(col)
                self.update()

            def set_colors(self, colors) -> None:
                col = np.ascontiguousarray(colors, np.float32)
                if col.shape != self.colors.shape:
                    raise ValueError(f"expected colours of shape {self.colors.shape}, got {col.shape}")
                self.colors = col
                if len(col):
                    self._vbo_col.set_data(col)
                self.update()

            def _prepare_transforms(self, view):
                tr = view.transforms
                vert = view.view_program.vert
                vert["visual_to_framebuffer"] = tr.get_transform("visual", "framebuffer")
                vert["framebuffer_to_visual"] = tr.get_transform("framebuffer", "visual")
                vert["framebuffer_to_render"] = tr.get_transform("framebuffer", "render")

            def _prepare_draw(self, view):
                return len(self.positions) > 0

            def _compute_bounds(self, axis, view):
                if not len(self.positions):
                    return None
                return float(self.positions[:, axis].min()), float(self.positions[:, axis].max())

        _POINTS_CLASS = create_visual_node(ReceptorPointsVisual)
    return _POINTS_CLASS


_IMAGE_VERT = """
attribute vec2 a_position;
attribute vec2 a_texcoord;
varying vec2 v_texcoord;
void main() {
    v_texcoord = a_texcoord;
    gl_Position = $transform(vec4(a_position, 0.0, 1.0));
}
"""

_IMAGE_FRAG = """
uniform sampler2D u_texture;
varying vec2 v_texcoord;
void main() {
    gl_FragColor = texture2D(u_texture, v_texcoord);
}
"""

_IMAGE_CLASS = None


def image_bytes(rgba) -> np.ndarray:
    """RGBA colours in [0, 1] as the 8-bit values an RGBA8 texture stores.

    Parameters
    ----------
    rgba : array_like, shape (H, W, 4)
        Colours in [0, 1] (values outside are clipped).

    Returns
    -------
    ndarray of uint8, shape (H, W, 4)
        ``round(255 * c)`` per channel (ties to even, as OpenGL's conversion of a float to an
        8-bit normalised value rounds).
    """
    return np.rint(np.clip(np.asarray(rgba, np.float32), 0.0, 1.0) * np.float32(255.0)).astype(np.uint8)


def flat_image_class():
    """The scene node class :class:`FlatImage` (built on first use: it imports vispy).

    ``FlatImage(rgba (H, W, 4), parent=node)`` draws an RGBA image over ``0 <= x <= W``,
    ``0 <= y <= H`` of its node (one texel per unit), nearest-texel sampling, blended as vispy's
    ``translucent`` preset: the picture of vispy's ``Image`` visual for RGBA data in [0, 1] with
    ``interpolation="nearest"`` and the default colour limits and gamma, pixel for pixel (a test
    compares them), drawn with a one-line fragment shader (a texel fetch) from an 8-bit texture.
    vispy's image shader also applies colour limits and ``pow(colour, gamma)`` to every pixel, per
    frame, which on Mesa's software renderer cost about a quarter of the map's rasterisation; it
    stores the colours as 8-bit values too (the texture is ``GL_RGBA``), so nothing is lost here.
    Method: ``set_data(rgba)`` (floats in [0, 1], or uint8 from :func:`image_bytes`).

    Returns
    -------
    type
        A vispy scene node class (one per process).
    """
    global _IMAGE_CLASS
    if _IMAGE_CLASS is None:
        from vispy import gloo
        from vispy.scene.visuals import create_visual_node
        from vispy.visuals import Visual

        class FlatImageVisual(Visual):
            """An RGBA image drawn as one textured quad (:func:`flat_image_class`)."""

            def __init__(self, rgba):
                Visual.__init__(self, vcode=_IMAGE_VERT, fcode=_IMAGE_FRAG)
                self._draw_mode = "triangles"
                data = self._bytes(rgba)
                h, w = data.shape[:2]
                # two triangles in the corner order of vispy's Image (subdivide method, one cell)
                tc = np.array([[0, 0], [1, 0], [1, 1], [0, 0], [1, 1], [0, 1]], np.float32)
                self.size = (w, h)
                self.shared_program["a_texcoord"] = gloo.VertexBuffer(tc)
                self.shared_program["a_position"] = gloo.VertexBuffer(tc * np.array([w, h], np.float32))
                self._texture = gloo.Texture2D(data, interpolation="nearest")
                self.shared_program["u_texture"] = self._texture
                self.set_gl_state("translucent", cull_face=False)

            @staticmethod
            def _bytes(rgba) -> np.ndarray:
                a = np.asarray(rgba)
                if a.ndim != 3 or a.shape[2] != 4:
                    raise ValueError(f"expected an RGBA image of shape (H, W, 4), got {a.shape}")
                return np.ascontiguousarray(a) if a.dtype == np.uint8 else image_bytes(a)

            def set_data(self, rgba) -> None:
                data = self._bytes(rgba)
                if (data.shape[1], data.shape[0]) != self.size:
                    raise ValueError(f"expected an image of {self.size[1]} x {self.size[0]} pixels, "
                                     f"got {data.shape[0]} x {data.shape[1]}")
                self._texture.set_data(data)
                self.update()

            def _prepare_transforms(self, view):
                view.view_program.vert["transform"] = view.transforms.get_transform()

            def _prepare_draw(self, view):
                return True

            def _compute_bounds(self, axis, view):
                return (0.0, float(self.size[axis])) if axis < 2 else (0.0, 0.0)

        _IMAGE_CLASS = create_visual_node(FlatImageVisual)
    return _IMAGE_CLASS


def _state_limits(state, result):
    if not state.lock_scale:
        return None
    return state.locked_limits.get(state.display)


def layout_labels(anchors, sizes, obstacles=(), *, gap: float = 1.0, mark_half: float = 1.0):
    """Place text labels beside their anchor points so that no two overlap and none covers a mark.

    Parameters
    ----------
    anchors : array_like, shape (K, 2)
        The point each label belongs to (map degrees).
    sizes : array_like, shape (K, 2)
        Width and height of each label box (map degrees).
    obstacles : array_like, shape (M, 2)
        Marks a label must not cover (each a square of half-width ``mark_half`` degrees).
    gap : float
        Free space kept around every box (degrees).
    mark_half : float
        Half-width of the square each obstacle covers (degrees).

    Returns
    -------
    ndarray, shape (K, 2)
        Label centres.  Candidates are tried in a fixed order (above, below, right, left, the
        diagonals, then farther out); a label that finds no free place takes its first candidate.
    """
    # plain Python floats (the same double arithmetic as numpy's scalars, several times faster in
    # these small loops: this runs on the GUI thread for every heading step)
    anchors = np.asarray(anchors, float).reshape(-1, 2)
    sizes = np.asarray(sizes, float).reshape(-1, 2).tolist()
    obst = np.asarray(obstacles, float).reshape(-1, 2).tolist()
    gap, mark_half = float(gap), float(mark_half)
    boxes = [(p[0], p[1], mark_half, mark_half) for p in obst]  # centre x, y, half w, half h
    out = np.zeros_like(anchors)
    for k, (a, (w, h)) in enumerate(zip(anchors.tolist(), sizes)):
        hw, hh = 0.5 * w, 0.5 * h
        cands = []
        for r in (1.0, 2.0, 3.0):
            dy, dx = r * (hh + 2.5), r * (hw + 2.5)
            cands += [(0, dy), (0, -dy), (dx, 0), (-dx, 0), (dx, dy), (-dx, dy), (dx, -dy), (-dx, -dy)]
        chosen = None
        for cx, cy in cands:
            c = (a[0] + cx, a[1] + cy)
            if all(abs(c[0] - b[0]) >= hw + b[2] + gap or abs(c[1] - b[1]) >= hh + b[3] + gap
                   for b in boxes):
                chosen = c
                break
        if chosen is None:
            chosen = (a[0] + cands[0][0], a[1] + cands[0][1])
        out[k] = chosen
        boxes.append((chosen[0], chosen[1], hw, hh))
    return out


def _share_fonts(texts) -> None:
    """Give the Text visuals of one canvas one glyph atlas, fed from the glyph caches, and a
    blending that keeps the frame opaque (:func:`_blend_keeping_alpha`).

    vispy gives every Text visual its own font manager, so each renders every glyph it shows
    again (a freetype rendering at 256 pt and a distance transform: milliseconds per glyph, the
    bulk of the first frame).  Within a canvas (one GL context) one atlas serves them all, and
    :mod:`retina_viewer.glyphs` keeps each glyph made once, for the other canvas and for later
    starts.
    """
    from .glyphs import font_manager

    fm = font_manager()
    for t in texts:
        t._font_manager = fm
        t._update_font()
    _blend_keeping_alpha(texts)


def _blend_keeping_alpha(visuals) -> None:
    """Blend ``visuals`` over the frame's colours but leave the frame's alpha at 1 (opaque).

    vispy's Text (and Markers) visuals blend with ``glBlendFunc(SRC_ALPHA, ONE_MINUS_SRC_ALPHA)``
    for all four channels, so each partly covered pixel of a glyph's edge also writes
    ``a_out = a**2 + (1 - a)`` (< 1) into the frame's alpha.  The colours are right, but the frame
    is no longer opaque there: an image saved from it has translucent text, and an image taken as
    premultiplied (Qt's read-back of a framebuffer, and Qt's own OpenGL widget) shows channels above
    their alpha, which Qt's compositing turns into purple, red, yellow and cyan fringes round every
    small label.  vispy's ``"translucent"`` preset blends the colours the same way and the alpha
    with ``(ZERO, ONE)``: the frame, cleared opaque, stays opaque.
    """
    for v in visuals:
        v.set_gl_state("translucent", depth_test=False)


def _keep_grid_layout(grid) -> None:
    """Solve a vispy ``Grid``'s layout only when one of its inputs changed.

    vispy's ``Grid`` solves its layout (a constraint solver, then every child's place and size)
    before every draw, about a millisecond of CPU per frame, although the result changes only
    with the grid's rectangle, its widgets, their size limits and stretch, or a new solver.  Here
    the solve runs when any of those differs from the last solve (the children's rectangles
    included, so a layout changed from outside is solved again); the layout is the same.
    """
    solve = grid._update_child_widget_dim
    last = {"key": None}

    def key():
        out = [tuple(grid.rect.pos), tuple(grid.rect.size), repr(grid.padding), repr(grid.margin),
               repr(grid.spacing), grid._need_solver_recreate, tuple(grid.grid_size)]
        for row, col, rspan, cspan, w in grid._grid_widgets.values():
            out.append((row, col, rspan, cspan, id(w), tuple(w.rect.pos), tuple(w.rect.size),
                        w.width_min, w.width_max, w.height_min, w.height_max, tuple(w.stretch)))
        return tuple(out)

    def prepare(view=None):
        k = key()
        if k != last["key"]:
            solve()
            last["key"] = key()  # with the children's places the solve gave them

    grid._prepare_draw = prepare


def _rotation_to(z_to: np.ndarray) -> np.ndarray:
    """A rotation matrix taking (0, 0, 1) to the unit vector ``z_to``."""
    z = z_to / np.linalg.norm(z_to)
    a = np.array([1.0, 0.0, 0.0]) if abs(z[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    x = np.cross(a, z)
    x /= np.linalg.norm(x)
    return np.stack([x, np.cross(z, x), z], axis=-1)


def _arrow_mesh(start, vec, radius: float, head_len: float, head_radius: float):
    """Vertices and faces of an arrow (cylinder + cone) from ``start`` along ``vec``."""
    from vispy.geometry import create_cone, create_cylinder

    L = float(np.linalg.norm(vec))
    shaft = max(L - head_len, 1e-6)
    cyl = create_cylinder(4, 16, radius=(radius, radius), length=shaft)
    cone = create_cone(16, radius=head_radius, length=head_len)
    v1 = cyl.get_vertices()
    v2 = cone.get_vertices() + np.array([0.0, 0.0, shaft])
    f = np.vstack([cyl.get_faces(), cone.get_faces() + len(v1)])
    R = _rotation_to(np.asarray(vec, float))
    verts = np.vstack([v1, v2]) @ R.T + np.asarray(start, float)
    return verts.astype(np.float32), f.astype(np.uint32)


def _ellipsoid(centre, radii, rows=24, cols=32):
    from vispy.geometry import create_sphere

    md = create_sphere(rows, cols, radius=1.0)
    return (md.get_vertices() * np.asarray(radii) + np.asarray(centre)).astype(np.float32), \
        md.get_faces().astype(np.uint32)


def _az_el(d: np.ndarray):
    """Azimuth (from x toward y) and elevation (positive toward -z), degrees, of unit vectors."""
    d = np.atleast_2d(d)
    return np.degrees(np.arctan2(d[:, 1], d[:, 0])), np.degrees(np.arcsin(np.clip(-d[:, 2], -1, 1)))


def _pose_matrix(yaw, pitch, roll) -> np.ndarray:
    from retina.eye.pose import pose_rotation

    return pose_rotation(yaw, pitch, roll).as_matrix()


def _field_direction(inclination, declination) -> np.ndarray:
    from retina.eye.field import field_vector

    v = field_vector(1.0, inclination, declination)
    return v / np.linalg.norm(v)


def _render(canvas, what: str = "view") -> np.ndarray:
    """``canvas.render()``, refused for a canvas inside a window that has never been shown (Qt
    creates the GL context of an embedded GL widget when its window first shows and would discard
    one made earlier) and for a canvas squeezed to no pixels."""
    from retina.errors import InputError

    w = canvas.native
    if w.parentWidget() is not None and not w.isVisible():
        raise InputError("show the window before rendering one of its views", key="view")
    width, height = w.width(), w.height()
    if width < 2 or height < 2:
        raise InputError(f"the {what} is too small to render ({width} x {height} pixels); widen it "
                         "(drag the splitter or enlarge the window)", key="view")
    return canvas.render()


class _Subscriber:
    """Connects ``self._on_*`` handlers to state events; :meth:`close` disconnects them."""

    def _subscribe(self, state, names, handler):
        for n in names:
            self._unsub.append(state.events.connect(n, handler))

    def _subscribe_pose(self, state, follow):
        if follow not in ("state", "result"):
            from retina.errors import InputError

            raise InputError(f"expected follow 'state' or 'result', got {follow!r}", key="follow")
        self.follow = follow
        if follow == "state":
            self._subscribe(state, _POSE_EVENTS + _FIELD_EVENTS, lambda e: self._show_pose(
                state.yaw_deg, state.pitch_deg, state.roll_deg, state.inclination_deg,
                state.declination_deg, draw=True))

    def _pose_of(self, res):
        if self.follow == "result" and res is not None:
            p = res.request
            return p.yaw_deg, p.pitch_deg, p.roll_deg, p.inclination_deg, p.declination_deg
        st = self.state
        return st.yaw_deg, st.pitch_deg, st.roll_deg, st.inclination_deg, st.declination_deg

    def close(self) -> None:
        for u in self._unsub:
            u()
        self._unsub.clear()


class HeadView(_Subscriber):
    """The head in the world: skull and beak glyph, receptors coloured by the pattern, the field
    axis, world axes and a ground grid; a turntable camera the mouse rotates.

    Parameters
    ----------
    state : retina_viewer.state.ViewerState
    size : tuple of int
        Initial canvas size in pixels.
    parent : QWidget, optional
        The Qt parent of the canvas widget.  A canvas that will live in a window should be created
        inside it: Qt recreates the GL context of a GL widget moved to another top-level window,
        which loses the uploaded scene.
    follow : {"state", "result"}
        Where the pose comes from (module docstring).

    Attributes
    ----------
    canvas : vispy.scene.SceneCanvas
        ``canvas.native`` is the Qt widget.
    markers : ReceptorPoints
        One flat disc per receptor (:func:`receptor_points_class`); its ``colors`` and
        :attr:`face_colors` hold the colours last set ``(N, 4)``.
    draws : int
        How many times the canvas has been drawn.
    skipped : int
        How many results changed nothing shown here (no draw; module docstring).
    static_layer : retina_viewer.canvas.StaticLayer
        The world and the field axis, kept as pixels with their depth between frames.
    """

    def __init__(self, state, *, size=(640, 520), parent=None, follow="state"):
        ensure_backend()
        from vispy import scene
        from vispy.visuals.transforms import MatrixTransform

        from .canvas import StaticLayer, scene_canvas

        self.state = state
        self._unsub = []
        self.draws = 0
        self.canvas = scene_canvas(keys=None, size=size, show=False, bgcolor=_BG, parent=parent)
        self.canvas.events.draw.connect(self._count_draw)
        self.view = self.canvas.central_widget.add_view()
        self.view.camera = scene.TurntableCamera(fov=30.0, elevation=20.0, azimuth=-55.0,
                                                 distance=82.0, center=(0.0, 0.0, -4.0))
        root = self.view.scene
        # world: ground grid, axes, labels
        g = np.arange(-20.0, 20.1, 5.0)
        z0 = -16.0
        seg = []
        for a in g:
            seg += [(a, g[0], z0), (a, g[-1], z0), (g[0], a, z0), (g[-1], a, z0)]
        ground = scene.visuals.Line(np.array(seg, np.float32), connect="segments",
                                    color=(0.5, 0.5, 0.55, 0.5), parent=root)
        D = DISPLAY_FROM_NED
        origin = np.array([0.0, 0.0, z0])
        cols = ((0.95, 0.35, 0.3, 1), (0.95, 0.8, 0.3, 1), (0.5, 0.9, 0.5, 1))
        label_pos = []
        av, af, ac = [], [], []
        for vec, col, label in (((1, 0, 0), cols[0], "N"), ((0, 1, 0), cols[1], "E"),
                                ((0, 0, 1), cols[2], "down")):
            v = D @ np.array(vec, float) * (9.0 if label != "down" else 6.0)
            verts, faces = _arrow_mesh(origin, v, 0.25, 1.6, 0.7)
            af.append(faces + sum(len(x) for x in av))
            av.append(verts)
            ac.append(np.tile(np.array(col, np.float32), (len(verts), 1)))
            label_pos.append(origin + v * 1.25)
        # the three world axes in one mesh (one draw call), each arrow in its own colour
        world_axes = scene.visuals.Mesh(np.vstack(av), np.vstack(af), vertex_colors=np.vstack(ac),
                                        shading=None, parent=root)
        # one Text visual for all world labels (one glyph atlas, one draw call)
        world_labels = scene.visuals.Text(["N", "E", "down"], pos=np.array(label_pos),
                                          color=np.array(cols), font_size=11, parent=root)
        # field axis (rebuilt when the field direction changes)
        self.field_mesh = scene.visuals.Mesh(shading=None, color=(0.95, 0.45, 0.9, 1.0), parent=root)
        self.field_label = scene.visuals.Text("B", color=(0.95, 0.45, 0.9, 1.0), font_size=13,
                                              parent=root)
        _share_fonts([world_labels, self.field_label])
        # head node: everything in the head frame, one transform
        self.head = scene.Node(parent=root)
        self.head.transform = MatrixTransform()
        self.markers = receptor_points_class()(parent=self.head)
        sv, sf = _ellipsoid((-3.5, 0.0, -0.5), (8.0, 5.6, 5.6))
        self.skull = scene.visuals.Mesh(sv, sf, color=(0.75, 0.66, 0.52, 0.13), shading=None,
                                        parent=self.head)
        self.skull.set_gl_state("translucent", depth_test=False)
        self.skull.order = -5  # drawn first, so the receptors show through it
        bv, bf = _arrow_mesh((3.5, 0.0, 0.8), (8.5, 0.0, 0.0), 1e-3, 8.5, 1.7)
        self.beak = scene.visuals.Mesh(bv, bf, color=(0.95, 0.75, 0.25, 1.0), shading=None,
                                       parent=self.head)
        # the world (ground grid, axes, their labels) and the field axis are drawn before the head
        # and change only with the camera or the field: drawn once and kept with their depth
        # (retina_viewer.canvas.StaticLayer); per frame only the head is drawn
        cam = self.view.camera
        self.static_layer = StaticLayer(
            self.canvas, dynamic=[self.head],
            static=[ground, world_axes, world_labels, self.field_mesh, self.field_label], depth=True,
            key=lambda: repr(sorted(cam.get_state().items())))
        self.face_colors = None
        self._receptors = None
        self._sizes = None
        self._field_key = None
        self._pose_key = None
        self.skipped = 0
        self._subscribe_pose(state, follow)
        self._show_pose(*self._pose_of(None), draw=False)
        self._subscribe(state, ("result",) + _COLOUR_EVENTS, lambda e: self._update_colours())
        self._subscribe(state, ("scenario",), lambda e: self._clear())
        if state.result is not None:
            self._update_colours()

    def _count_draw(self, event=None):
        self.draws += 1

    def _show_pose(self, yaw, pitch, roll, inclination, declination, *, draw=True):
        self._pose_key = (yaw, pitch, roll, inclination, declination)
        M = np.eye(4)
        M[:3, :3] = (DISPLAY_FROM_NED @ _pose_matrix(yaw, pitch, roll)).T  # vispy: row vectors
        self.head.transform.matrix = M
        key = (inclination, declination)
        if key != self._field_key:
            b = DISPLAY_FROM_NED @ _field_direction(inclination, declination)
            L = 13.0
            verts, faces = _arrow_mesh(-L * b, 2 * L * b, 0.2, 2.2, 0.8)
            self.field_mesh.set_data(vertices=verts, faces=faces, color=(0.95, 0.45, 0.9, 1.0))
            self.field_label.pos = (L + 2.0) * b + np.array([0.0, 0.0, 1.5])
            self._field_key = key
        if draw:
            self.canvas.update()

    def _clear(self):
        self._show_pose(*self._pose_of(None), draw=False)
        self._receptors = None
        self.face_colors = None
        self.markers.set_points(np.zeros((0, 3)), np.zeros(0), np.zeros((0, 4)))
        self.canvas.update()

    def _update_colours(self):
        res = self.state.result
        if res is None:
            return
        rec = res.pattern.receptors
        cols = _colours_for(self, res)
        rgba = cols.rgba
        pose = self._pose_of(res)
        if (rec is self._receptors and self._sizes is not None and self._sizes[0] == cols.eye
                and pose == self._pose_key and self.face_colors is not None
                and np.array_equal(rgba, self.face_colors)):
            self.skipped += 1
            return  # nothing shown changes (the light level, say): no draw
        if self.follow == "result":
            self._show_pose(*pose, draw=False)
        self.face_colors = rgba
        if rec is not self._receptors or self._sizes is None or self._sizes[0] != cols.eye:
            # marker diameter (mm, scaled with the scene): 1.2 x the mean receptor spacing on the eye
            shown = _shown(res, cols.eye)
            spacing = np.sqrt(np.mean(rec.solid_angle)) * np.mean([e.radius_mm for e in rec.eyes])
            self._sizes = (cols.eye, np.where(shown, 1.2 * spacing, 0.7 * spacing),
                           np.asarray(rec.positions, np.float32))
            self._receptors = rec
            self.markers.set_points(self._sizes[2], self._sizes[1], rgba)
        else:
            self.markers.set_colors(rgba)  # only the colour buffer: the geometry stays
        self.canvas.update()

    def render(self) -> np.ndarray:
        """The canvas rendered off screen.

        Returns
        -------
        ndarray, shape (H, W, 4), uint8
            RGBA, opaque; H x W the canvas size in physical pixels.

        Raises
        ------
        retina.errors.InputError
            The window was never shown, or the view is squeezed to no pixels.
        """
        return _render(self.canvas, "head view")


class MapView(_Subscriber):
    """The pattern over the visual field of both eyes (azimuth-elevation image, module docstring).

    Parameters
    ----------
    state, size, parent, follow
        As for :class:`HeadView`.

    Attributes
    ----------
    widget : QWidget
        The canvas with its title and caption (Qt labels); put this in a layout.
    canvas : vispy.scene.SceneCanvas
    image : FlatImage
        The map (:func:`flat_image_class`); :attr:`rgba` holds the image last set ``(E, A, 4)``.
    on_hover : callable(dict or None), optional
        Called with :meth:`receptor_info` of the receptor under the mouse (None off the eyes).
    draws : int
        How many times the canvas has been drawn.
    skipped : int
        How many results changed nothing shown here (no draw; module docstring).
    static_layer : retina_viewer.canvas.StaticLayer
        The axes and the colour bar's ramp, kept as pixels between frames.
    point_marks : vispy.scene.visuals.Markers
        The beak, B and -B marks (rows 0, 1, 2).
    labels : vispy.scene.visuals.Text
        The labels of the cardinal points, the beak, B and -B and their halo, in one visual
        (:meth:`show_label_layers`).
    label_positions : ndarray, shape (K, 2)
        The labels' centres, map degrees (:func:`layout_labels`).
    halo_positions : ndarray, shape (4 K, 2)
        The halo's copies of the labels, map degrees (per diagonal, the K labels).
    """

    def __init__(self, state, *, size=(720, 460), parent=None, follow="state"):
        ensure_backend()
        from vispy import scene
        from retina.figures.marks import MARKS

        from .canvas import StaticLayer, scene_canvas

        self.state = state
        self._unsub = []
        self.draws = 0
        self.on_hover = None
        from PyQt6.QtWidgets import QLabel, QVBoxLayout, QWidget

        # Static words live in Qt labels around the canvas, not in GL text: every distinct glyph
        # of GL text costs a freetype rendering at start-up, per canvas.
        self.widget = QWidget(parent)
        lay = QVBoxLayout(self.widget)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(0)
        self.title_label = QLabel("")
        self.caption_label = QLabel("")
        for lab in (self.title_label, self.caption_label):
            lab.setWordWrap(True)
            lab.setStyleSheet("background: rgb(31, 31, 36); color: rgb(230, 230, 230); padding: 2px;")
        self.canvas = scene_canvas(keys=None, size=size, show=False, bgcolor=_BG, parent=self.widget)
        self.canvas.events.draw.connect(self._count_draw)
        lay.addWidget(self.title_label)
        lay.addWidget(self.canvas.native, 1)
        lay.addWidget(self.caption_label)
        grid = self.canvas.central_widget.add_grid(spacing=0)
        _keep_grid_layout(grid)
        self.yaxis = scene.AxisWidget(orientation="left", tick_label_margin=6, tick_font_size=7)
        self.yaxis.width_max = 40
        grid.add_widget(self.yaxis, row=0, col=0)
        self.view = grid.add_view(row=0, col=1)
        self.xaxis = scene.AxisWidget(orientation="bottom", tick_label_margin=14, tick_font_size=7)
        self.xaxis.height_max = 26
        grid.add_widget(self.xaxis, row=1, col=1)
        self.cbar_view = grid.add_view(row=2, col=0, col_span=2)
        self.cbar_view.height_max = 26
        self.cbar_view.camera = scene.PanZoomCamera()
        self.cbar_view.camera.set_range(x=(-160.0, 160.0), y=(-5.0, 6.0), margin=0.0)
        self.cbar_view.camera.interactive = False
        self.view.camera = scene.PanZoomCamera(aspect=1.0)
        self.view.camera.interactive = True
        self.reset_range()
        self.yaxis.link_view(self.view)
        self.xaxis.link_view(self.view)
        # an axis maps its ends through its own place in the grid, which is known only after the
        # layout (done while drawing): map them again after the first draw at a new size (vispy
        # re-maps them only on camera changes)
        self._axes_stale = True
        self.canvas.events.resize.connect(self._relayout_axes)
        self.canvas.events.draw.connect(self._after_draw, position="last")
        root = self.view.scene
        s = MAP_STEP_DEG
        self.az, self.el = map_grid()
        self.rgba = np.tile(_NO_DATA, (self.el.size, self.az.size, 1)).astype(np.float32)
        self.image = flat_image_class()(self.rgba, parent=root)
        self.image.transform = scene.STTransform(scale=(s, s), translate=(-180.0, -90.0))
        grid_lines = []
        for a in range(-180, 181, 30):
            grid_lines += [(a, -90), (a, 90)]
        for e in range(-90, 91, 30):
            grid_lines += [(-180, e), (180, e)]
        scene.visuals.Line(np.array(grid_lines, np.float32), connect="segments",
                           color=(1, 1, 1, 0.12), parent=root)
        self.edges = scene.visuals.Line(color=(0.9, 0.9, 0.9, 0.8), width=1.5, parent=root)
        self.horizon = scene.visuals.Line(color=(0.3, 0.95, 0.4, 1.0), width=2.0, parent=root)
        self.marks = {name: MARKS[name] for name in ("beak", "field", "field_opposite")}
        # the beak, B and -B in one Markers visual (rows 0, 1, 2; drawn in that order, as three
        # visuals would draw them): only the rows of B and -B move with the pose
        self.point_marks = scene.visuals.Markers(parent=root)
        # every label of a point mark in one Text visual: cardinals, beak, B, -B
        self.label_texts = ["N", "E", "S", "W", "beak", self.marks["field"].label,
                            self.marks["field_opposite"].label]
        self._label_colours = np.array([(0.3, 0.95, 0.4, 1.0)] * 4 + [(1.0, 1.0, 1.0, 1.0)] * 3)
        # every label of a point mark (cardinals, beak, B, -B) and its dark halo in one Text visual
        # (one draw call): a halo behind every label, so that the green cardinals on the pale
        # middle of the pattern and the white beak, B and -B on near-white stay legible on any
        # colour, made of the labels drawn in the halo colour, shifted by HALO_PX pixels along the
        # four diagonals; the halo's glyphs come first in the visual's buffer, so they are drawn
        # before (under) the labels, as two visuals drawn one after the other would draw them.
        # The texts and colours are set once: only the positions follow the pose.
        self.labels = scene.visuals.Text(color="w", font_size=8, parent=root, anchor_x="center",
                                         anchor_y="center")
        self.label_positions = self.halo_positions = None
        self._label_layers = None
        self._halo_key = None
        self.show_label_layers(labels=True, halo=True)
        # colour bar in its own fixed view
        self._ramp = np.linspace(0, 1, 256)[None, :].repeat(2, axis=0)
        self.cbar = scene.visuals.Image(np.zeros((2, 256, 4), np.float32), interpolation="linear",
                                        parent=self.cbar_view.scene)
        self.cbar.transform = scene.STTransform(scale=(200.0 / 256, 5.0), translate=(-100.0, -2.0))
        self.cbar_text = scene.visuals.Text(["", ""], pos=np.array(
            [(-128.0, 0.5), (128.0, 0.5)]), color="w", font_size=8,
            parent=self.cbar_view.scene, anchor_x="center", anchor_y="center")
        self._cbar_key = None
        for node in (self.edges, self.horizon, self.point_marks):
            node.set_gl_state("translucent", depth_test=False)
            node.order = 10
        self.labels.order = 12
        _share_fonts([self.labels, self.cbar_text] + [v for ax in (self.xaxis, self.yaxis)
                                                       for v in (ax.axis._text, ax.axis._axis_label_vis)])
        # the axes and the colour bar's ramp change only with the zoom, the size or the display:
        # drawn once and kept as pixels (retina_viewer.canvas.StaticLayer); per frame only the
        # map (image, lines, marks, labels) and the colour bar's end labels are drawn
        self.static_layer = StaticLayer(self.canvas, dynamic=[self.view, self.cbar_text],
                                        static=[self.xaxis, self.yaxis, self.cbar])
        self._index = None
        self._receptors = None
        self._marks_key = None
        self._prepared = {}   # (pose, view size) -> geometry: prepare_pose
        self.skipped = 0
        self.mark_positions = None
        self.label_positions = None
        self.view.scene.events.transform_change.connect(self._place_labels)
        self._subscribe_pose(state, follow)
        self._show_pose(*self._pose_of(None), draw=False)
        self._subscribe(state, ("result",) + _COLOUR_EVENTS, lambda e: self._update_image())
        self._subscribe(state, ("scenario",), lambda e: self._clear())
        self.canvas.events.mouse_move.connect(self._on_mouse_move)
        if state.result is not None:
            self._update_image()

    def _count_draw(self, event=None):
        self.draws += 1

    def _relayout_axes(self, event=None):
        self._axes_stale = True

    def _after_draw(self, event=None):
        """After the first draw at a new size (the grid has laid its widgets out during it): map
        the axes' ends again and draw once more with the new ticks.  The labels' halo is placed
        again if the view's pixels per degree changed (a resize: the grid lays out while drawing),
        which draws once more as well."""
        self._place_labels()
        if not self._axes_stale:
            return
        self._axes_stale = False
        for ax in (self.xaxis, self.yaxis):
            if hasattr(ax, "_view_changed"):
                ax._view_changed()
        self.canvas.update()

    def reset_range(self) -> None:
        """Show the whole visual field."""
        self.view.camera.set_range(x=MAP_RANGE[0], y=MAP_RANGE[1], margin=0.02)

    # ---------------------------------------------------------------- geometry
    def _edge_lines(self, rec):
        from retina.eye.geometry import optical_axis

        pts, conn, n0 = [], [], 0
        for eye in rec.eyes:
            o = optical_axis(eye.azimuth_deg, eye.elevation_deg)
            e1 = np.cross(o, [0.0, 0.0, 1.0])
            e1 = e1 / np.linalg.norm(e1) if np.linalg.norm(e1) > 1e-9 else np.array([1.0, 0.0, 0.0])
            e2 = np.cross(o, e1)
            t = np.linspace(0, 2 * math.pi, 181)
            r = math.radians(eye.extent_deg)
            d = (math.cos(r) * o[None, :] + math.sin(r) * (np.cos(t)[:, None] * e1 + np.sin(t)[:, None] * e2))
            az, el = _az_el(d)
            for i in range(len(t) - 1):
                if abs(az[i + 1] - az[i]) < 90:
                    conn.append((n0 + i, n0 + i + 1))
            pts.append(np.stack([az, el], axis=-1))
            n0 += len(t)
        return np.vstack(pts).astype(np.float32), np.array(conn, np.uint32)

    def _pose_geometry(self, key) -> dict:
        """The map's pose-dependent geometry (plain arrays, no GL): the horizon line, the marks'
        places and the labels' layout, for ``key`` = (yaw, pitch, roll, inclination,
        declination) at the view's current size."""
        yaw, pitch, roll, inclination, declination = key
        R = _pose_matrix(yaw, pitch, roll)
        t = np.radians(np.arange(0.0, 360.0, 1.0))
        h_world = np.stack([np.cos(t), np.sin(t), np.zeros_like(t)], axis=-1)
        az, el = _az_el(h_world @ R)  # rows: R^T h, the head-frame directions
        n = len(t)
        i = np.arange(n)
        keep = np.abs(az[(i + 1) % n] - az) < 90  # no segment across the +/-180 deg seam
        conn = np.stack([i[keep], (i[keep] + 1) % n], axis=-1).astype(np.uint32)
        idx = [0, 90, 180, 270]
        cardinal = np.stack([az[idx], el[idx]], axis=-1)
        b = R.T @ _field_direction(inclination, declination)
        baz, bel = _az_el(np.stack([b, -b]))
        pos = np.stack([baz, bel], axis=-1).astype(np.float32)
        anchors = np.vstack([cardinal, [[0.0, 0.0]], pos])
        sizes = self.label_sizes()
        labels = layout_labels(anchors, sizes, obstacles=anchors, gap=0.1 * sizes[0, 1],
                               mark_half=0.7 * sizes[0, 1])
        return dict(horizon=np.stack([az, el], axis=-1).astype(np.float32), connect=conn,
                    cardinal=cardinal, field=pos, labels=labels)

    def prepare_pose(self, yaw, pitch, roll, inclination, declination) -> None:
        """Compute the geometry of a pose the view will show soon (the window calls this while
        the worker computes that pose's pattern), so that showing it only hands the arrays to
        the scene.  The last few poses prepared are kept.

        Parameters
        ----------
        yaw, pitch, roll : float
            Head pose, degrees (:mod:`retina.eye.pose`).
        inclination, declination : float
            Field direction, degrees (:mod:`retina.eye.field`).
        """
        key = (yaw, pitch, roll, inclination, declination)
        if key == self._marks_key or (key, self._geometry_size()) in self._prepared:
            return
        self._prepared[(key, self._geometry_size())] = self._pose_geometry(key)
        while len(self._prepared) > 4:
            self._prepared.pop(next(iter(self._prepared)))

    def _geometry_size(self):
        return tuple(float(x) for x in self.view.size)

    def _show_pose(self, yaw, pitch, roll, inclination, declination, *, draw=True):
        key = (yaw, pitch, roll, inclination, declination)
        if key == self._marks_key:
            return
        self._marks_key = key
        g = self._prepared.pop((key, self._geometry_size()), None)
        if g is None:
            g = self._pose_geometry(key)
        self.horizon.set_data(g["horizon"], connect=g["connect"])
        pos = g["field"]
        self.mark_positions = {"cardinals": g["cardinal"], "beak": np.zeros(2), "field": pos[0],
                               "field_opposite": pos[1]}
        f, o = self.marks["field"], self.marks["field_opposite"]
        data = getattr(self.point_marks, "_data", None)
        if data is not None and "a_position" in (data.dtype.names or ()) and len(data) == 3:
            data["a_position"][1:, :2] = pos  # only the places of B and -B change
            self.point_marks._vbo.set_data(data)
            self.point_marks.update()
        else:
            mk = self.marks["beak"]
            rows = (mk, f, o)
            self.point_marks.set_data(np.vstack([[[0.0, 0.0]], pos]).astype(np.float32),
                                      symbol=np.array([m.vispy for m in rows]),
                                      size=np.array([2 * m.size_pt for m in rows], np.float32),
                                      face_color=np.array([m.face for m in rows]),
                                      edge_color=np.array([m.edge for m in rows]),
                                      edge_width=np.array([m.edge_width for m in rows], np.float32))
        self.label_positions = g["labels"]
        self._place_labels()
        if draw:
            self.canvas.update()

    def _place_labels(self, event=None) -> None:
        """Put the labels at :attr:`label_positions` and the halo's copies :data:`HALO_PX` canvas
        pixels around each label (:attr:`halo_positions`).

        The labels are placed in map degrees and drawn at a fixed size in pixels, so the halo's
        shift in degrees follows the zoom and the view's size: this runs when the labels move and
        when the map's scene transform changes (pan, zoom, resize), and sets the positions only
        when they differ.  Before the view has a size (no pixels per degree yet) the halo sits
        under the labels; the first draw places it (``_after_draw``).
        """
        if self.label_positions is None:
            return
        pos = np.asarray(self.label_positions, float)
        tr = self.labels.get_transform("visual", "canvas")
        o, ex, ey = tr.map(np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]))[:, :2]
        px_x, px_y = abs(ex[0] - o[0]), abs(ey[1] - o[1])     # pixels per map degree
        if np.isfinite(px_x) and np.isfinite(px_y) and px_x > 0 and px_y > 0:
            scale = (round(px_x, 6), round(px_y, 6))
            shift = _HALO_DIRECTIONS * HALO_PX / np.array([px_x, px_y])   # (4, 2) map degrees
        else:
            scale, shift = None, np.zeros_like(_HALO_DIRECTIONS)
        key = (scale, pos.tobytes(), self._label_layers)
        if key == self._halo_key:
            return
        self._halo_key = key
        self.halo_positions = (pos[None, :, :] + shift[:, None, :]).reshape(-1, 2)
        labels, halo = self._label_layers
        parts = ([self.halo_positions] if halo else []) + ([pos] if labels else [])
        if parts:
            self.labels.pos = np.vstack(parts).astype(np.float32)

    def show_label_layers(self, *, labels: bool = True, halo: bool = True) -> None:
        """Draw the labels of the point marks, their halo, both (the default) or neither.

        Parameters
        ----------
        labels, halo : bool
            Whether the labels and their halo are drawn (one Text visual, :attr:`labels`).
        """
        layers = (bool(labels), bool(halo))
        if layers == self._label_layers:
            return
        self._label_layers = layers
        n = len(_HALO_DIRECTIONS)
        texts = (self.label_texts * n if halo else []) + (list(self.label_texts) if labels else [])
        colours = [np.tile(HALO_COLOUR, (n * len(self.label_texts), 1))] if halo else []
        colours += [self._label_colours] if labels else []
        self.labels.visible = bool(texts)
        if texts:
            self.labels.text = texts
            self.labels.color = np.vstack(colours)
        self._place_labels()

    def label_sizes(self) -> np.ndarray:
        """The boxes of the map's labels: 7 x 13 pixels per character (8 pt text) at the
        whole-field zoom (the labels only get farther apart when the map is zoomed in).

        Returns
        -------
        ndarray, shape (K, 2)
            Width and height of each label of :attr:`label_texts`, map degrees.
        """
        w_px, h_px = (float(x) for x in self.view.size) if self.view.size[0] > 10 else (600.0, 400.0)
        deg_per_px = max((MAP_RANGE[0][1] - MAP_RANGE[0][0]) / w_px,
                         (MAP_RANGE[1][1] - MAP_RANGE[1][0]) / h_px)
        return np.array([((7.0 * len(t) + 4.0) * deg_per_px, 13.0 * deg_per_px) for t in self.label_texts])

    def _clear(self):
        self._show_pose(*self._pose_of(None), draw=False)
        self._index = None
        self._receptors = None
        self.rgba = np.tile(_NO_DATA, (self.el.size, self.az.size, 1)).astype(np.float32)
        self.image.set_data(self.rgba)
        self.canvas.update()

    def _update_image(self):
        res = self.state.result
        if res is None:
            return
        marks_before = self._marks_key
        if self.follow == "result":
            self._show_pose(*self._pose_of(res), draw=False)
        changed = self._marks_key != marks_before
        rec = res.pattern.receptors
        if rec is not self._receptors:
            changed = True
            self._index = map_index(rec)
            pts, conn = self._edge_lines(rec)
            self.edges.set_data(pts, connect=conn)
            self._receptors = rec
        cols = _colours_for(self, res)
        display, eye = cols.display, cols.eye
        lo, hi = cols.limits
        if changed or not np.array_equal(cols.image, self.rgba):
            changed = True
            self.rgba = cols.image
            self.image.set_data(cols.image if cols.image_bytes is None else cols.image_bytes)
        flat = bool(getattr(res, "flat", False))
        locked = cols.locked
        if display == "modulation":
            ends = [f"{100 * lo:+.3g} %", f"{100 * hi:+.3g} %"]
            name = "relative modulation (0 in the middle)"
        else:
            ends = [f"{lo:.4f}", f"{hi:.4f}"]
            name = "yield"
        scale = "locked" if locked else "fitted to this pattern"
        caption = f"{name}, colour scale {scale}"
        if flat:
            ends, caption = ["", ""], "flat pattern: every receptor the same (no modulation)"
        key = (display, tuple(ends), caption)
        if key != self._cbar_key:  # text is laid out again only when it changes
            changed = True
            if self._cbar_key is None or self._cbar_key[0] != display:  # the ramp: only its colour map
                cmap = _cmap("RdBu_r" if display == "modulation" else "viridis")
                self.cbar.set_data(cmap(self._ramp).astype(np.float32))
            self.cbar_text.text = [ends[0], ends[1]]
            self.caption_label.setText("across: azimuth from the beak (deg, right +); up: elevation "
                                       f"(deg). Colours: {caption}.")
            self._cbar_key = key
        title = f"{eye} eye{'s' if eye == 'both' else ''}, head frame (the heading is in the readout)"
        if self.title_label.text() != title:
            self.title_label.setText(title)
        if changed:
            self.canvas.update()
        else:
            self.skipped += 1  # nothing drawn changes (the light level, say): no draw

    # ---------------------------------------------------------------- receptor under the cursor
    def receptor_at(self, az_deg: float, el_deg: float):
        """The receptor drawn at a map point (of the eyes shown).

        Parameters
        ----------
        az_deg, el_deg : float
            Azimuth and elevation of the point, degrees.

        Returns
        -------
        int or None
            Index into the result's receptors; None outside the map or where no receptor is drawn.
        """
        if self._index is None or not (-180.0 <= az_deg < 180.0 and -90.0 <= el_deg < 90.0):
            return None
        j = min(int((az_deg + 180.0) // MAP_STEP_DEG), self.az.size - 1)
        i = min(int((el_deg + 90.0) // MAP_STEP_DEG), self.el.size - 1)
        k = int(self._index[{"both": 0, "left": 1, "right": 2}[self.state.eye], i, j])
        return None if k < 0 else k

    def receptor_info(self, k: int) -> dict:
        """One receptor of the current result.

        Parameters
        ----------
        k : int
            Index into the result's receptors.

        Returns
        -------
        dict
            ``index``, ``eye`` ("left" or "right"), ``azimuth_deg`` and ``elevation_deg`` (its
            visual direction, degrees), ``yield`` and ``modulation`` (relative, dimensionless).
        """
        res = self.state.result
        rec = res.pattern.receptors
        az, el = _az_el(np.asarray(rec.visual_dirs[k], float))
        return {"index": int(k), "eye": "left" if rec.eye_index[k] == 0 else "right",
                "azimuth_deg": float(az[0]), "elevation_deg": float(el[0]),
                "yield": float(res.pattern.yields[k]), "modulation": float(res.pattern.modulation[k])}

    def map_point(self, pos) -> tuple[float, float]:
        """Map coordinates of a canvas position.

        Parameters
        ----------
        pos : array_like, shape (2,)
            ``(x, y)`` in canvas (logical) pixels, origin at the top left.

        Returns
        -------
        tuple of float
            ``(azimuth, elevation)`` in degrees.
        """
        tr = self.canvas.scene.node_transform(self.view.scene)
        p = tr.map(np.asarray(pos, float)[:2])
        return float(p[0]), float(p[1])

    def _on_mouse_move(self, event):
        if self.on_hover is None:
            return
        try:
            az, el = self.map_point(event.pos)
            k = self.receptor_at(az, el) if self.state.result is not None else None
            self.on_hover(None if k is None else self.receptor_info(k))
        except Exception:  # noqa: BLE001 - a hover readout must never break the event loop
            self.on_hover(None)

    def render(self) -> np.ndarray:
        """The canvas rendered off screen.

        Returns
        -------
        ndarray, shape (H, W, 4), uint8
            RGBA, opaque; H x W the canvas size in physical pixels.

        Raises
        ------
        retina.errors.InputError
            The window was never shown, or the view is squeezed to no pixels.
        """
        return _render(self.canvas, "map view")
