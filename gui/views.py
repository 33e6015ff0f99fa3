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
  Marks: the beak (0, 0), the world horizon (the head-frame directions of the horizontal plane)
  with the cardinal points on it, both ends of the field axis (``B`` and ``-B``; yields are even),
  and each eye's visual-field edge.
- Colours: "RdBu_r" for the modulation, symmetric about 0 with limits +/- the largest shown
  ``|modulation|``; "viridis" for yields between the shown minimum and maximum (the colour maps
  of :mod:`retina.figures`).  Receptors of a hidden eye are drawn faint grey.
- Views subscribe to the state model in their constructor and only update their scene nodes; the
  model never knows its views.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np

__all__ = ["HeadView", "MapView", "colour_values", "DISPLAY_FROM_NED", "MAP_STEP_DEG",
           "ensure_backend"]

#: NED -> display (x north, y west, z up).
DISPLAY_FROM_NED = np.diag([1.0, -1.0, -1.0])
#: Pixel size of the visual-field map, degrees.
MAP_STEP_DEG = 2.0
_BG = (0.12, 0.12, 0.14, 1.0)
_HIDDEN = np.array([0.55, 0.55, 0.55, 0.18])
_NO_DATA = np.array([0.22, 0.22, 0.25, 1.0])
_POSE_EVENTS = ("yaw_deg", "pitch_deg", "roll_deg")
_FIELD_EVENTS = ("inclination_deg", "declination_deg")


def ensure_backend() -> None:
    """Select vispy's PyQt6 backend (idempotent)."""
    import vispy.app

    vispy.app.use_app("pyqt6")


def _cmap(name: str):
    import matplotlib

    return matplotlib.colormaps[name]


def colour_values(result, display: str, eye: str):
    """Colours of every receptor for a worker result.

    Parameters
    ----------
    result : retina_viewer.workers.PatternResult
    display : {"modulation", "yields"}
    eye : {"both", "left", "right"}

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
    idx = pat.receptors.eye_index
    shown = np.ones(values.shape, bool) if eye == "both" else idx == (0 if eye == "left" else 1)
    v = values[shown] if np.any(shown) else values
    if display == "modulation":
        h = float(np.max(np.abs(v))) or 1e-12
        lo, hi, cmap = -h, h, _cmap("RdBu_r")
    else:
        lo, hi = float(v.min()), float(v.max())
        if hi <= lo:
            hi = lo + 1e-12
        cmap = _cmap("viridis")
    rgba = cmap(np.clip((values - lo) / (hi - lo), 0.0, 1.0))
    rgba[~shown] = _HIDDEN
    return values, rgba, (lo, hi), shown


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


def _pose_matrix(state) -> np.ndarray:
    from retina.eye.pose import pose_rotation

    return pose_rotation(state.yaw_deg, state.pitch_deg, state.roll_deg).as_matrix()


def _field_direction(state) -> np.ndarray:
    from retina.eye.field import field_vector

    v = field_vector(1.0, state.inclination_deg, state.declination_deg)
    return v / np.linalg.norm(v)


def _render(canvas) -> np.ndarray:
    """``canvas.render()``, refused for a canvas inside a window that has never been shown: Qt
    creates the GL context of an embedded GL widget when its window first shows and would discard
    one made earlier (with everything uploaded to it)."""
    from retina.errors import InputError

    w = canvas.native
    if w.parentWidget() is not None and not w.isVisible():
        raise InputError("show the window before rendering one of its views", key="view")
    return canvas.render()


class _Subscriber:
    """Connects ``self._on_*`` handlers to state events; :meth:`close` disconnects them."""

    def _subscribe(self, state, names, handler):
        for n in names:
            self._unsub.append(state.events.connect(n, handler))

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

    Attributes
    ----------
    canvas : vispy.scene.SceneCanvas
        ``canvas.native`` is the Qt widget.
    markers : vispy.scene.visuals.Markers
        One marker per receptor; :attr:`face_colors` holds the colours last set ``(N, 4)``.
    """

    def __init__(self, state, *, size=(640, 520), parent=None):
        ensure_backend()
        from vispy import scene
        from vispy.visuals.transforms import MatrixTransform

        self.state = state
        self._unsub = []
        self.canvas = scene.SceneCanvas(keys=None, size=size, show=False, bgcolor=_BG, parent=parent)
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
        scene.visuals.Line(np.array(seg, np.float32), connect="segments", color=(0.5, 0.5, 0.55, 0.5),
                           parent=root)
        D = DISPLAY_FROM_NED
        origin = np.array([0.0, 0.0, z0])
        for vec, col, label in (((1, 0, 0), (0.95, 0.35, 0.3, 1), "N"), ((0, 1, 0), (0.95, 0.8, 0.3, 1), "E"),
                                ((0, 0, 1), (0.5, 0.9, 0.5, 1), "down")):
            v = D @ np.array(vec, float) * (9.0 if label != "down" else 6.0)
            verts, faces = _arrow_mesh(origin, v, 0.25, 1.6, 0.7)
            scene.visuals.Mesh(verts, faces, color=col, shading=None, parent=root)
            scene.visuals.Text(label, pos=origin + v * 1.25, color=col, font_size=11, bold=True,
                               parent=root)
        # field axis (rebuilt on field events)
        self.field_mesh = scene.visuals.Mesh(shading=None, color=(0.95, 0.45, 0.9, 1.0), parent=root)
        self.field_label = scene.visuals.Text("B", color=(0.95, 0.45, 0.9, 1.0), font_size=13,
                                              bold=True, parent=root)
        # head node: everything in the head frame, one transform
        self.head = scene.Node(parent=root)
        self.head.transform = MatrixTransform()
        self.markers = scene.visuals.Markers(scaling="scene", parent=self.head)
        self.markers.set_gl_state("translucent", depth_test=True)
        sv, sf = _ellipsoid((-3.5, 0.0, -0.5), (8.0, 5.6, 5.6))
        self.skull = scene.visuals.Mesh(sv, sf, color=(0.75, 0.66, 0.52, 0.13), shading=None,
                                        parent=self.head)
        self.skull.set_gl_state("translucent", depth_test=False)
        self.skull.order = -5  # drawn first, so the receptors show through it
        bv, bf = _arrow_mesh((3.5, 0.0, 0.8), (8.5, 0.0, 0.0), 1e-3, 8.5, 1.7)
        self.beak = scene.visuals.Mesh(bv, bf, color=(0.95, 0.75, 0.25, 1.0), shading=None,
                                       parent=self.head)
        self.face_colors = None
        self._receptors = None
        self._update_pose()
        self._update_field()
        self._subscribe(state, _POSE_EVENTS, lambda e: self._update_pose())
        self._subscribe(state, _FIELD_EVENTS, lambda e: self._update_field())
        self._subscribe(state, ("result", "display", "eye"), lambda e: self._update_colours())
        self._subscribe(state, ("scenario",), lambda e: self._clear())
        if state.result is not None:
            self._update_colours()

    def _update_pose(self):
        M = np.eye(4)
        M[:3, :3] = (DISPLAY_FROM_NED @ _pose_matrix(self.state)).T  # vispy: row vectors
        self.head.transform.matrix = M
        self.canvas.update()

    def _update_field(self):
        b = DISPLAY_FROM_NED @ _field_direction(self.state)
        L = 13.0
        verts, faces = _arrow_mesh(-L * b, 2 * L * b, 0.2, 2.2, 0.8)
        self.field_mesh.set_data(vertices=verts, faces=faces, color=(0.95, 0.45, 0.9, 1.0))
        self.field_label.pos = (L + 2.0) * b + np.array([0.0, 0.0, 1.5])
        self.canvas.update()

    def _clear(self):
        self._receptors = None
        self.face_colors = None
        self.markers.set_data(np.zeros((0, 3), np.float32))
        self.canvas.update()

    def _update_colours(self):
        res = self.state.result
        if res is None:
            return
        rec = res.pattern.receptors
        _, rgba, _, shown = colour_values(res, self.state.display, self.state.eye)
        self.face_colors = rgba
        self._receptors = rec
        # marker diameter (mm, scaled with the scene): 1.2 x the mean receptor spacing on the eye
        spacing = np.sqrt(np.mean(rec.solid_angle)) * np.mean([e.radius_mm for e in rec.eyes])
        size = np.where(shown, 1.2 * spacing, 0.7 * spacing)
        self.markers.set_data(np.asarray(rec.positions, np.float32), face_color=rgba,
                              edge_color=rgba, edge_width=0.0, size=size)
        self.canvas.update()

    def render(self) -> np.ndarray:
        """The canvas as an RGBA image ``(H, W, 4)`` uint8 (off-screen render)."""
        return _render(self.canvas)


class MapView(_Subscriber):
    """The pattern over the visual field of both eyes (azimuth-elevation image, module docstring).

    Attributes
    ----------
    canvas : vispy.scene.SceneCanvas
    image : vispy.scene.visuals.Image
        :attr:`rgba` holds the image last set ``(E, A, 4)``.
    """

    def __init__(self, state, *, size=(720, 460), parent=None):
        ensure_backend()
        from vispy import scene

        self.state = state
        self._unsub = []
        self.canvas = scene.SceneCanvas(keys=None, size=size, show=False, bgcolor=_BG, parent=parent)
        self.view = self.canvas.central_widget.add_view()
        self.view.camera = scene.PanZoomCamera(aspect=1.0)
        self.view.camera.set_range(x=(-214.0, 186.0), y=(-134.0, 104.0), margin=0.0)
        self.view.camera.interactive = True
        root = self.view.scene
        s = MAP_STEP_DEG
        self.az = np.arange(-180.0 + s / 2, 180.0, s)
        self.el = np.arange(-90.0 + s / 2, 90.0, s)
        self.rgba = np.tile(_NO_DATA, (self.el.size, self.az.size, 1)).astype(np.float32)
        self.image = scene.visuals.Image(self.rgba, interpolation="nearest", parent=root)
        self.image.transform = scene.STTransform(scale=(s, s), translate=(-180.0, -90.0))
        # static marks: beak, eye edges; dynamic: horizon, cardinal points, field ends
        grid_lines = []
        for a in range(-180, 181, 30):
            grid_lines += [(a, -90), (a, 90)]
        for e in range(-90, 91, 30):
            grid_lines += [(-180, e), (180, e)]
        scene.visuals.Line(np.array(grid_lines, np.float32), connect="segments",
                           color=(1, 1, 1, 0.12), parent=root)
        ticks = [(str(a), (a, -97.0)) for a in range(-180, 181, 30)]
        ticks += [(str(e), (-186.0, e)) for e in range(-90, 91, 30)]
        scene.visuals.Text([t for t, _ in ticks], pos=np.array([p for _, p in ticks], float),
                           color=(0.85, 0.85, 0.85, 1), font_size=7, parent=root)
        scene.visuals.Text("azimuth from the beak (deg, right +)", pos=(0.0, -106.0),
                           color=(0.85, 0.85, 0.85, 1), font_size=8, parent=root)
        scene.visuals.Text("elevation (deg)", pos=(-203.0, 0.0), rotation=-90.0,
                           color=(0.85, 0.85, 0.85, 1), font_size=8, parent=root)
        self.edges = scene.visuals.Line(color=(0.9, 0.9, 0.9, 0.8), width=1.5, parent=root)
        self.horizon = scene.visuals.Line(color=(0.3, 0.95, 0.4, 1.0), width=2.0, parent=root)
        self.cardinals = scene.visuals.Text(color=(0.3, 0.95, 0.4, 1.0), font_size=9, bold=True,
                                            parent=root)
        self.beak = scene.visuals.Markers(parent=root)
        self.beak.set_data(np.array([[0.0, 0.0]], np.float32), symbol="triangle_up", size=14,
                           face_color=(0.95, 0.75, 0.25, 1), edge_color="k", edge_width=1)
        scene.visuals.Text("beak", pos=(18, 0), color=(0.95, 0.75, 0.25, 1), font_size=9, bold=True,
                           parent=root)
        self.field_marks = scene.visuals.Markers(parent=root)
        self.field_text = scene.visuals.Text(color=(0.95, 0.45, 0.9, 1.0), font_size=10, bold=True,
                                             parent=root)
        # colour bar under the map
        ramp = np.linspace(0, 1, 256)[None, :].repeat(2, axis=0)
        self.cbar = scene.visuals.Image(np.zeros((2, 256, 4), np.float32), interpolation="linear",
                                        parent=root)
        self.cbar.transform = scene.STTransform(scale=(180.0 / 256, 4.0), translate=(-90.0, -122.0))
        self._ramp = ramp
        self.cbar_text = scene.visuals.Text(color="w", font_size=8, parent=root,
                                            anchor_x="center", anchor_y="center")
        self.title = scene.visuals.Text("", pos=(0, 97), color="w", font_size=9, parent=root)
        for node in (self.edges, self.horizon, self.beak, self.field_marks):
            node.set_gl_state("translucent", depth_test=False)
            node.order = 10
        for node in (self.cardinals, self.field_text, self.title, self.cbar_text):
            node.order = 11
        self._index = None
        self._receptors = None
        self._update_marks()
        self._subscribe(state, _POSE_EVENTS + _FIELD_EVENTS, lambda e: self._update_marks())
        self._subscribe(state, ("result", "display", "eye"), lambda e: self._update_image())
        self._subscribe(state, ("scenario",), lambda e: self._clear())
        if state.result is not None:
            self._update_image()

    # ---------------------------------------------------------------- geometry
    def _index_maps(self, rec):
        """Receptor index of each pixel ``(3, E, A)`` for eye choices both/left/right (-1: none)."""
        from retina.eye.geometry import optical_axis
        from retina.eye.pattern import resample

        fake = SimpleNamespace(modulation=np.arange(len(rec), dtype=float), receptors=rec)
        per = resample(fake, (self.az, self.el))  # (2, E, A) receptor indices or NaN
        A, E = np.meshgrid(np.radians(self.az), np.radians(self.el))
        d = np.stack([np.cos(E) * np.cos(A), np.cos(E) * np.sin(A), -np.sin(E)], axis=-1)
        cosang = np.full((2,) + A.shape, -np.inf)
        for eye in rec.eyes:
            cosang[eye.index] = d @ optical_axis(eye.azimuth_deg, eye.elevation_deg)
        cosang = np.where(np.isnan(per), -np.inf, cosang)
        best = np.argmax(cosang, axis=0)
        both = np.take_along_axis(per, best[None], axis=0)[0]
        maps = np.stack([both, per[0], per[1]])
        return np.where(np.isnan(maps), -1, maps).astype(np.int64)

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

    def _update_marks(self):
        R = _pose_matrix(self.state)
        t = np.radians(np.arange(0.0, 360.0, 1.0))
        h_world = np.stack([np.cos(t), np.sin(t), np.zeros_like(t)], axis=-1)
        az, el = _az_el(h_world @ R)  # rows: R^T h, the head-frame directions
        n = len(t)
        conn = np.array([(i, (i + 1) % n) for i in range(n) if abs(az[(i + 1) % n] - az[i]) < 90],
                        np.uint32)
        self.horizon.set_data(np.stack([az, el], axis=-1).astype(np.float32), connect=conn)
        idx = [0, 90, 180, 270]
        self.cardinals.text = ["N", "E", "S", "W"]
        self.cardinals.pos = np.stack([az[idx], el[idx] + 9.0], axis=-1)
        b = R.T @ _field_direction(self.state)
        baz, bel = _az_el(np.stack([b, -b]))
        pos = np.stack([baz, bel], axis=-1).astype(np.float32)
        self.field_marks.set_data(pos, symbol="star", size=15, face_color=(0.95, 0.45, 0.9, 1),
                                  edge_color="k", edge_width=1)
        self.field_text.text = ["B", "-B"]
        self.field_text.pos = pos + np.array([0.0, 9.0], np.float32)
        self.canvas.update()

    def _clear(self):
        self._index = None
        self._receptors = None
        self.rgba = np.tile(_NO_DATA, (self.el.size, self.az.size, 1)).astype(np.float32)
        self.image.set_data(self.rgba)
        self.canvas.update()

    def _update_image(self):
        res = self.state.result
        if res is None:
            return
        rec = res.pattern.receptors
        if rec is not self._receptors:
            self._index = self._index_maps(rec)
            pts, conn = self._edge_lines(rec)
            self.edges.set_data(pts, connect=conn)
            self._receptors = rec
        display, eye = self.state.display, self.state.eye
        values, rgba, (lo, hi), _ = colour_values(res, display, eye)
        idx = self._index[{"both": 0, "left": 1, "right": 2}[eye]]
        img = np.where((idx >= 0)[..., None], rgba[np.maximum(idx, 0)], _NO_DATA)
        self.rgba = img.astype(np.float32)
        self.image.set_data(self.rgba)
        cmap = _cmap("RdBu_r" if display == "modulation" else "viridis")
        self.cbar.set_data(cmap(self._ramp).astype(np.float32))
        if display == "modulation":
            labels = [f"{100 * lo:+.1f} %", "0", f"{100 * hi:+.1f} %"]
            name = "relative modulation"
        else:
            labels = [f"{lo:.4f}", f"{0.5 * (lo + hi):.4f}", f"{hi:.4f}"]
            name = "yield"
        self.cbar_text.text = labels
        self.cbar_text.pos = np.array([(-106.0, -120.0), (0.0, -128.0), (108.0, -120.0)])
        p = res.request
        self.title.text = (f"{name}, {eye} eye{'s' if eye == 'both' else ''}: heading {p.yaw_deg:.0f}, "
                           f"pitch {p.pitch_deg:.0f}, roll {p.roll_deg:.0f} deg")
        self.canvas.update()

    def render(self) -> np.ndarray:
        """The canvas as an RGBA image ``(H, W, 4)`` uint8 (off-screen render)."""
        return _render(self.canvas)
