"""The viewer's main window: views, panels, menus, keyboard shortcuts and the worker.

Conventions (owned here)
------------------------
- Start-up: the scenario given, else the bundled demo scenario (:func:`retina.data.demo_scenario_path`)
  reduced by :func:`retina.build.quick_scenario` ("quick settings"; ``quick=False`` keeps it
  whole).  A scenario that fails validation is reported in a dialog (or raised before the window
  exists), never as a traceback.  The first request is sent once the scenario is loaded (nothing
  is computed for the defaults before it).
- Every change of a field that affects the pattern asks for a new pattern; display, eye and colour
  lock only recolour.  Coalescing, latest wins: requests are sent from a zero-delay timer (many
  changes in one pass of the event loop make one request), the worker keeps only the newest
  pending request, and results are applied from a zero-delay timer too (only the newest result
  waiting is drawn).  ``synchronous=True`` sends and applies at once (tests, scripts).
- While a yield function is computed (a new field strength, or a new RF setting with RF on)
  the status bar says so and which one (``MainWindow._computing_message``).
- Keyboard: in a view, Left/Right turn the head 5 degrees (with Shift 1 degree), Up/Down pitch
  it, Page Up/Page Down roll it; in a control the keys belong to the control.  Ctrl+O opens a
  scenario, Ctrl+Shift+S saves the state as a scenario, Ctrl+E exports a publication figure,
  Ctrl+S saves a screenshot, Ctrl+Z / Ctrl+Shift+Z undo and redo, Ctrl+Q quits.
- Files are written atomically (:mod:`retina.io.atomic`): screenshots (the whole window,
  ``QWidget.grab``, or one view, the vispy canvas ``render()``), scenarios
  (:func:`retina.scenario.save_scenario`) and figures (:func:`retina.figures.modulation_fields`, the
  builder ``retina patterns`` uses).
- No exception escapes a Qt slot: every slot is wrapped by :func:`_slot`, which shows the message
  in a dialog (an :class:`~retina.errors.InputError` or ``OSError``) or in the status bar.
- Opening a scenario first loads what its yield source names (a spin-system file is validated);
  if that, or the first pattern of the new scenario, fails, the previous scenario is restored and
  a dialog says why.
"""

from __future__ import annotations

import dataclasses
import functools
import sys
from pathlib import Path

import numpy as np
from PyQt6.QtCore import QBuffer, QByteArray, QIODevice, Qt, QTimer
from PyQt6.QtGui import QAction, QImage, QKeySequence, QShortcut
from PyQt6.QtWidgets import (QApplication, QFileDialog, QMainWindow, QMessageBox, QScrollArea,
                             QSplitter, QVBoxLayout, QWidget)

from retina.errors import InputError
from .deferred import AfterFrames
from .panels import BoundPlot, ControlPanel, ReadoutPanel
from .state import ViewerState, scan_yaws
from .views import HeadView, MapView, colour_limits
from .workers import QtPatternWorker, format_deg

__all__ = ["MainWindow", "load_start_scenario", "png_bytes", "rgba_png_bytes", "main",
           "OFFSCREEN_MESSAGE"]

#: Fields whose change needs a new pattern.
_REQUEST_FIELDS = ("yaw_deg", "pitch_deg", "roll_deg", "intensity_uT", "inclination_deg",
                   "declination_deg", "photons", "ordering", "kappa", "rf", "rf_MHz", "rf_nT", "rf_direction")
#: Fields whose change may need another yield function (the status bar says when it is computed).
_YIELD_FIELDS = ("intensity_uT", "rf", "rf_MHz", "rf_nT", "rf_direction")

OFFSCREEN_MESSAGE = ("the viewer cannot draw its OpenGL views on Qt's '{}' platform (they would be "
                     "blank); run it on a display or under a virtual X server: xvfb-run -s "
                     "\"-screen 0 1600x1000x24\" retina view")


def _slot(fn):
    """Wrap a Qt slot so that no exception escapes it (module docstring)."""

    @functools.wraps(fn)
    def wrapper(self, *args, **kwargs):
        try:
            return fn(self, *args, **kwargs)
        except (InputError, OSError) as exc:
            self.report_error("Could not do that", exc)
        except Exception as exc:  # noqa: BLE001 - a slot must never raise into Qt
            self.report_error("Unexpected error", exc, unexpected=True)
        return None

    return wrapper


def load_start_scenario(path=None, *, quick: bool | None = None):
    """The scenario to start from (module docstring).

    Parameters
    ----------
    path : str or pathlib.Path, optional
        A scenario file; default the bundled demo scenario.
    quick : bool, optional
        Reduce it (:func:`retina.build.quick_scenario`); None: quick for the bundled scenario and
        as written for a given one.

    Returns
    -------
    retina.scenario.Scenario

    Raises
    ------
    retina.errors.InputError
        The file is missing or invalid (naming the file and the key).
    """
    from retina.build import quick_scenario
    from retina.scenario import load_scenario

    if path is None:
        from retina.data import demo_scenario_path

        path = demo_scenario_path()
        quick = True if quick is None else quick
    sc = load_scenario(path)
    return quick_scenario(sc) if quick else sc


def png_bytes(image: QImage) -> bytes:
    """A QImage encoded as PNG.

    Parameters
    ----------
    image : PyQt6.QtGui.QImage

    Returns
    -------
    bytes
        The PNG file's bytes.
    """
    ba = QByteArray()
    buf = QBuffer(ba)
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    if not image.save(buf, "PNG"):
        raise InputError("could not encode the image as PNG", key="screenshot")
    buf.close()
    return bytes(ba)


def rgba_png_bytes(rgba: np.ndarray) -> bytes:
    """An RGBA image encoded as PNG.

    Parameters
    ----------
    rgba : ndarray, shape (H, W, 4), uint8

    Returns
    -------
    bytes
        The PNG file's bytes.

    Raises
    ------
    retina.errors.InputError
        Not an ``(H, W, 4)`` array.
    """
    a = np.ascontiguousarray(rgba, dtype=np.uint8)
    if a.ndim != 3 or a.shape[2] != 4:
        raise InputError(f"expected an (H, W, 4) image, got {a.shape}", key="screenshot")
    h, w = a.shape[:2]
    img = QImage(a.data, w, h, 4 * w, QImage.Format.Format_RGBA8888).copy()
    return png_bytes(img)


class MainWindow(QMainWindow):
    """The viewer window.

    Parameters
    ----------
    scenario : retina.scenario.Scenario, optional
        Default: :func:`load_start_scenario` ``()``.
    synchronous : bool
        Compute on the GUI thread and apply results at once (tests and scripts).

    Attributes
    ----------
    state : retina_viewer.state.ViewerState
    worker : retina_viewer.workers.QtPatternWorker
    head_view, map_view : retina_viewer.views.HeadView, retina_viewer.views.MapView
    controls : retina_viewer.panels.ControlPanel
    readout : retina_viewer.panels.ReadoutPanel
    bound_plot : retina_viewer.panels.BoundPlot
    dialogs : bool
        Show errors in dialogs (tests set False and read :attr:`last_error`).
    """

    def __init__(self, scenario=None, *, synchronous: bool = False, parent=None):
        super().__init__(parent)
        self.setWindowTitle("retina-compass viewer")
        self.synchronous = bool(synchronous)
        self.dialogs = True
        self.last_error = None
        self.state = ViewerState()
        self.worker = QtPatternWorker(synchronous=synchronous, parent=self)
        self.worker.finished.connect(self._on_result)
        self.worker.failed.connect(self._on_failed)
        self._request_pending = False
        self._pending_result = None
        self._applied_serial = -1
        self._fallback = None        # (scenario, values) to restore if a new scenario fails
        self._scan = None            # playback: dict(yaws, k, centre)
        self._scan_len = 0
        self._scan_timer = QTimer(self)
        self._scan_timer.timeout.connect(self._scan_tick)
        outer = QSplitter(Qt.Orientation.Horizontal)
        outer.setChildrenCollapsible(False)
        self.setCentralWidget(outer)  # canvases are created inside the window (views.HeadView)
        split = QSplitter(Qt.Orientation.Horizontal)
        split.setChildrenCollapsible(False)
        outer.addWidget(split)
        self.views_widget = split
        self.head_view = HeadView(self.state, parent=split, follow="result")
        self.map_view = MapView(self.state, parent=split, follow="result")
        for v in (self.head_view, self.map_view):
            v.canvas.native.setMinimumSize(160, 160)
            v.canvas.native.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        split.addWidget(self.head_view.canvas.native)
        split.addWidget(self.map_view.widget)
        split.setSizes([620, 640])
        side = QWidget()
        sl = QVBoxLayout(side)
        self.controls = ControlPanel(self.state)
        # the readout, the bound plot and the status bar follow the results after the frames are
        # drawn, once per burst (at most every 250 ms during a drag): gui/deferred.py
        self.readout = ReadoutPanel(self.state, follow_results=False)
        self.bound_plot = BoundPlot(self.state, follow_results=False)
        self._result_message = None
        self.after_frames = AfterFrames(self._show_result_text, immediate=self.synchronous, parent=self)
        sl.addWidget(self.readout)
        sl.addWidget(self.bound_plot)
        sl.addWidget(self.controls)
        scroll = QScrollArea()
        self.side_scroll = scroll
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        scroll.setWidget(side)
        scroll.setWidgetResizable(True)
        scroll.setMinimumWidth(200)   # the views keep their own minimum; nothing squeezes them away
        outer.addWidget(scroll)
        outer.setStretchFactor(0, 1)
        outer.setSizes([1180, 380])
        self.map_view.on_hover = self.readout.show_receptor
        self.controls.set_error_handler(
            lambda title, exc: self.report_error(title, exc, unexpected=not isinstance(exc, (InputError, OSError))))
        self.controls.play.toggled.connect(self._on_play)
        self._build_menus()
        self._build_shortcuts()
        self._unsub = [self.state.events.connect(n, self._on_change) for n in _REQUEST_FIELDS]
        self._unsub.append(self.state.events.connect("scenario", self._on_scenario))
        self._unsub.append(self.state.events.connect("lock_scale", self._on_lock))
        self.resize(1560, 860)
        self.state.load_scenario(scenario if scenario is not None else load_start_scenario())
        self.head_view.canvas.native.setFocus()

    # ---------------------------------------------------------------- errors
    def report_error(self, title: str, exc, *, unexpected: bool = False) -> None:
        """Show an error in a dialog (or the status bar without dialogs); never raises.

        Parameters
        ----------
        title : str
            The dialog's title.
        exc : Exception or str
            What went wrong (shown as one line).
        unexpected : bool, optional
            Not an input error: the message starts with the exception's type.
        """
        text = " ".join(str(exc).split())
        if unexpected:
            text = f"{type(exc).__name__}: {text}"
        self.last_error = text
        try:
            self.statusBar().showMessage(f"error: {text}")
            if self.dialogs:
                QMessageBox.warning(self, title, text)
        except Exception:  # noqa: BLE001 - reporting must not fail
            pass

    # ---------------------------------------------------------------- menus and keys
    def _build_menus(self):
        self.actions = {}
        SK = QKeySequence.StandardKey
        menus = (
            ("&File", (("open", "&Open scenario...", SK.Open, self.open_dialog),
                       ("save_scenario", "Save state as &scenario...", "Ctrl+Shift+S", self.save_scenario_dialog),
                       ("export", "&Export figure (PNG/SVG/PDF)...", "Ctrl+E", self.export_dialog),
                       ("screenshot", "Save screens&hot...", SK.Save, self.screenshot_dialog),
                       ("head_image", "Save &head view image...", None, lambda: self.view_image_dialog("head")),
                       ("map_image", "Save &map image...", None, lambda: self.view_image_dialog("map")),
                       ("quit", "&Quit", "Ctrl+Q", self.close))),
            ("&Edit", (("undo", "&Undo", SK.Undo, self.undo),
                       ("redo", "&Redo", SK.Redo, self.redo))),
            ("&View", (("reset_camera", "&Reset views", None, self.reset_camera),)),
        )
        for title, items in menus:
            m = self.menuBar().addMenu(title)
            for key, text, shortcut, fn in items:
                a = QAction(text, self)
                if shortcut is not None:
                    a.setShortcut(QKeySequence(shortcut))
                a.triggered.connect(lambda checked=False, f=fn: self._run_action(f))
                m.addAction(a)
                self.actions[key] = a

    @_slot
    def _run_action(self, fn):
        fn()

    def _build_shortcuts(self):
        """Head-turning keys, active only while a view (or the splitter holding them) has focus."""
        self._shortcuts = []
        for key, name, step in ((Qt.Key.Key_Left, "yaw_deg", -5.0), (Qt.Key.Key_Right, "yaw_deg", 5.0),
                                (Qt.Key.Key_Up, "pitch_deg", 5.0), (Qt.Key.Key_Down, "pitch_deg", -5.0),
                                (Qt.Key.Key_PageUp, "roll_deg", -5.0), (Qt.Key.Key_PageDown, "roll_deg", 5.0)):
            for mod, k in ((Qt.KeyboardModifier.NoModifier, 1.0), (Qt.KeyboardModifier.ShiftModifier, 0.2)):
                sc = QShortcut(QKeySequence(mod.value | key.value), self.views_widget)
                sc.setContext(Qt.ShortcutContext.WidgetWithChildrenShortcut)
                sc.activated.connect(lambda n=name, s=step * k: self._nudge_slot(n, s))
                self._shortcuts.append(sc)

    @_slot
    def _nudge_slot(self, name, step):
        self.nudge(name, step)

    def nudge(self, name: str, step: float) -> None:
        """Change a pose angle by a step (pitch clamped to [-90, 90], roll wrapped).

        Parameters
        ----------
        name : {"yaw_deg", "pitch_deg", "roll_deg"}
        step : float
            Degrees to add.
        """
        v = self.state.get(name) + step
        if name == "pitch_deg":
            v = min(90.0, max(-90.0, v))
        elif name == "roll_deg":
            v = (v + 180.0) % 360.0 - 180.0
        self.state.set(name, v)

    def reset_camera(self) -> None:
        """Put the head view's camera and the map's range back where they started."""
        cam = self.head_view.view.camera
        cam.elevation, cam.azimuth, cam.distance = 20.0, -55.0, 82.0
        self.map_view.reset_range()

    def undo(self) -> None:
        """Undo the last change of a control (the status bar says when there is none)."""
        if not self.state.undo():
            self.statusBar().showMessage("nothing to undo", 2000)

    def redo(self) -> None:
        """Redo the last undone change (the status bar says when there is none)."""
        if not self.state.redo():
            self.statusBar().showMessage("nothing to redo", 2000)

    # ---------------------------------------------------------------- state -> worker
    def _computing_message(self, sc) -> str | None:
        """What the status bar says while the next request computes a yield function (None: it
        needs none)."""
        from .state import describe_rf

        st = self.state
        rf = st.rf_setting()
        if not self.worker.computer.yield_is_computed(sc, st.intensity_uT, rf):
            return None
        F = st.intensity_uT if sc["yield"]["field_uT"] is None else float(sc["yield"]["field_uT"])
        if rf is None:
            return f"computing the yield function at {F:g} uT..."
        return (f"computing the RF yield function ({describe_rf(rf)}) at {F:g} uT, degree "
                f"{sc['rf']['degree']}; the pattern shown meanwhile is the previous one...")

    def _on_change(self, event) -> None:
        sc = self.state.scenario
        msg = self._computing_message(sc) if sc is not None and event.name in _YIELD_FIELDS else None
        if msg is not None:
            self.statusBar().showMessage(msg)
        elif event.name == "intensity_uT" and sc is not None:
            kind, path = sc.yield_source
            if kind != "system" or sc["yield"]["field_uT"] is not None:
                what = ("computed at the scenario's yield.field_uT" if kind == "system"
                        else f"read from {Path(path).name}")
                self.statusBar().showMessage(f"the yield function is {what}; the intensity changes "
                                             "the field direction only", 6000)
        self._schedule_request()

    def _on_scenario(self, event) -> None:
        sc = event.value
        self.setWindowTitle(f"retina-compass viewer - {sc.name}"
                            + (f" ({Path(sc.source).name})" if sc.source else ""))
        self._stop_scan(restore=False)
        if self.state.rf_setting() is not None:
            self.statusBar().showMessage(self._computing_message(sc) or "computing the RF yield function...")
        elif self.worker.computer.yield_is_computed(sc, self.state.intensity_uT):
            self.statusBar().showMessage("computing the yield function...")
        else:
            self.statusBar().showMessage(f"reading the yield function from {Path(sc.yield_source[1]).name}...")
        self._schedule_request()

    def _on_lock(self, event) -> None:
        res = self.state.result
        if event.value and res is not None:
            self.state.locked_limits = {d: colour_limits(res, d, self.state.eye)
                                        for d in ("modulation", "yields")}

    def _schedule_request(self) -> None:
        if self.synchronous:
            self.request()
        elif not self._request_pending:
            self._request_pending = True
            QTimer.singleShot(0, self._send_request)

    @_slot
    def _send_request(self):
        self._request_pending = False
        self.request()

    def request(self) -> None:
        """Send the current state to the worker (with the scan's looks while one plays)."""
        if self.state.scenario is None:
            return
        st = self.state
        lock = st.locked_limits.get(st.display) if st.lock_scale else None
        req = dataclasses.replace(st.request(), display=st.display, eye=st.eye,
                                  colour_limits=None if lock is None else tuple(float(x) for x in lock))
        if self._scan is not None:
            sc = self._scan
            req = dataclasses.replace(req, scan_yaws=tuple(sc["yaws"][:sc["k"]]),
                                      scan_centre_deg=sc["centre"])
        self.worker.submit(req)
        if not self.synchronous:  # while the worker computes: the map's geometry of that pose
            self.map_view.prepare_pose(req.yaw_deg, req.pitch_deg, req.roll_deg, req.inclination_deg,
                                       req.declination_deg)

    @_slot
    def _on_result(self, result) -> None:
        if self.synchronous:
            self._apply_result(result)
            return
        first = self._pending_result is None
        self._pending_result = result
        if first:
            QTimer.singleShot(0, self._apply_pending)

    @_slot
    def _apply_pending(self):
        res, self._pending_result = self._pending_result, None
        if res is not None:
            self._apply_result(res)

    def _apply_result(self, result) -> None:
        if result.request.serial <= self._applied_serial and \
                result.request.scenario is self.state.scenario:
            return  # an older result overtaken by a newer one: latest wins
        self._applied_serial = result.request.serial
        if result.request.scenario is self.state.scenario:
            self._fallback = None  # the scenario produced a pattern: no way back needed
        self.state.set_result(result)
        if result.request.scan_yaws:
            self._show_scan(result)
        took = f"{1000 * result.seconds:.1f} ms" if result.seconds < 10.0 else f"{result.seconds:.1f} s"
        # shown unless another message (an error, "computing...") replaces the one of now first
        self._result_message = (f"pattern for heading {format_deg(result.request.yaw_deg)} ({took})",
                                self.statusBar().currentMessage())
        self.after_frames.poke()

    def _show_result_text(self) -> None:
        """The readout, the bound plot and the status bar for the latest result (run after the
        frames: :attr:`after_frames`)."""
        self.readout.refresh()
        self.bound_plot.update()
        if self._result_message is not None:
            text, before = self._result_message
            self._result_message = None
            if self.statusBar().currentMessage() in (before, ""):
                self.statusBar().showMessage(text, 4000)

    @_slot
    def _on_failed(self, request, message: str) -> None:
        if self._fallback is not None and request.scenario is self.state.scenario:
            fallback, self._fallback = self._fallback, None
            # restore from the event loop, not inside the new scenario's own events
            QTimer.singleShot(0, lambda: self._restore(fallback, message))
            return
        self.statusBar().showMessage(f"error: {message}")
        self.last_error = message

    @_slot
    def _restore(self, fallback, message) -> None:
        old, values = fallback
        self.state.load_scenario(old)
        self.state.update(record=False, **values)
        self.report_error("Could not open the scenario", f"{message} (the previous scenario is kept)")

    # ---------------------------------------------------------------- head scan playback
    @_slot
    def _on_play(self, on: bool) -> None:
        if on:
            self.play_scan()
        else:
            self._stop_scan(restore=True)

    def play_scan(self) -> None:
        """Start playing the head scan from the current heading (state.py :func:`scan_yaws`)."""
        st = self.state
        yaws = scan_yaws(st.yaw_deg, st.scan_amplitude_deg, st.scan_steps, st.scan_repeats)
        step = 2.0 * st.scan_amplitude_deg / max(st.scan_steps - 1, 1)
        interval = 1000.0 * step / st.scan_speed_deg_s if step > 0 else 100.0
        self._scan = {"yaws": yaws, "k": 0, "centre": st.yaw_deg}
        self._scan_len = len(yaws)
        self.controls.play.blockSignals(True)
        self.controls.play.setChecked(True)
        self.controls.play.setText("Stop scan")
        self.controls.play.blockSignals(False)
        self._scan_timer.start(max(15, int(round(interval))))
        self._scan_tick()

    def scan_step(self) -> bool:
        """Advance the playing scan by one look.

        Returns
        -------
        bool
            False when the scan has ended (the head is back at the start heading).
        """
        sc = self._scan
        if sc is None or sc["k"] >= len(sc["yaws"]):
            return False
        sc["k"] += 1
        self.state.set("yaw_deg", float(sc["yaws"][sc["k"] - 1]), record=False)
        self._schedule_request()  # the yaw may not change at a turning point; the looks do
        return True

    @_slot
    def _scan_tick(self):
        if not self.scan_step():
            self._stop_scan(restore=True)  # the scan has ended: back to the start heading

    def _scan_done(self):
        self.controls.play.blockSignals(True)
        self.controls.play.setChecked(False)
        self.controls.play.setText("Play scan")
        self.controls.play.blockSignals(False)

    def _stop_scan(self, restore: bool) -> None:
        self._scan_timer.stop()
        sc, self._scan = self._scan, None
        self._scan_done()
        if sc is not None and restore:
            self.state.set("yaw_deg", sc["centre"], record=False)

    def _show_scan(self, res) -> None:
        from .workers import describe_bound

        q = res.request
        k = len(q.scan_yaws)
        self.controls.scan_label.setText(
            f"look {k} of {self._scan_len}: bound after the scan so far "
            f"{describe_bound(res.scan_bound_deg)}; after {k} looks straight at "
            f"{format_deg(q.scan_centre_deg)}: {describe_bound(res.look_bound_deg)}")

    # ---------------------------------------------------------------- files
    def open_scenario(self, path) -> None:
        """Load a scenario file (as given, not reduced).

        Parameters
        ----------
        path : str or pathlib.Path

        Raises
        ------
        retina.errors.InputError
            The file, or the spin-system file its yield source names, is invalid (module docstring);
            the current scenario is kept.
        """
        from retina.scenario import load_scenario

        sc = load_scenario(path)
        kind, ypath = sc.yield_source
        if kind == "system":
            from retina.spin.io import load_system

            load_system(ypath)   # a broken spin-system file fails here, before anything changes
        old = self.state.scenario
        if old is not None:
            values = {k: self.state.get(k) for k in _REQUEST_FIELDS}
            self._fallback = (old, values)
        self.state.load_scenario(sc)

    def open_dialog(self) -> None:
        """Ask for a scenario file and open it; an invalid one is reported in a dialog."""
        path, _ = QFileDialog.getOpenFileName(self, "Open scenario", "", "Scenario (*.toml);;All files (*)")
        if not path:
            return
        try:
            self.open_scenario(path)
        except InputError as exc:
            self.report_error("Invalid scenario", exc)

    def save_scenario(self, path, *, force: bool = False) -> Path:
        """Save the current state as a scenario file (:meth:`ViewerState.to_scenario`), atomically.

        Parameters
        ----------
        path : str or pathlib.Path
            ``.toml`` is added when the name has another suffix.
        force : bool, optional
            Replace an existing file.

        Returns
        -------
        pathlib.Path
            The file written.

        Raises
        ------
        retina.errors.InputError
            The file exists (without ``force``) or cannot be written, or no scenario is loaded.
        """
        from retina.scenario import save_scenario

        path = Path(path)
        if path.suffix.lower() != ".toml":
            path = path.with_name(path.name + ".toml")
        return save_scenario(self.state.to_scenario(), path, force=force)

    def export_figure(self, stem, formats=("png", "svg", "pdf"), *, dpi: int = 300, force: bool = False):
        """Write the current pattern as a publication figure with the figure builder the ``patterns``
        command uses (:func:`retina.figures.modulation_fields`, one panel).

        Parameters
        ----------
        stem : str or pathlib.Path
            File name without suffix (a .png, .svg or .pdf suffix is dropped).
        formats : sequence of {"png", "svg", "pdf"}, optional
            One file per format.
        dpi : int, optional
            Resolution of the PNG, dots per inch.
        force : bool, optional
            Replace existing files.

        Returns
        -------
        list of pathlib.Path
            The files written.

        Raises
        ------
        retina.errors.InputError
            No pattern yet, or a file exists (without ``force``).
        """
        from retina.figures import modulation_fields, save_figure
        from retina.io.atomic import check_writable

        from .state import describe_rf

        res = self.state.result
        if res is None:
            raise InputError("no pattern to export yet", key="figure")
        stem = Path(stem)
        if stem.suffix.lower() in (".png", ".svg", ".pdf"):
            stem = stem.with_suffix("")
        for f in formats:
            check_writable(stem.with_name(f"{stem.name}.{f}"), force=force)
        p = res.request
        rec = res.pattern.receptors
        sc = p.scenario
        params = (f"Scenario {sc.name}; pitch {p.pitch_deg:g} deg, roll {p.roll_deg:g} deg; field "
                  f"{p.intensity_uT:g} uT, inclination {p.inclination_deg:g} deg, declination "
                  f"{p.declination_deg:g} deg; ordering "
                  + (f"cone kappa {p.kappa:g}" if p.kappa is not None else sc["ordering"]["model"])
                  + f"; {len(rec)} receptors"
                  + ("" if p.rf is None else f"; {describe_rf(p.rf)} to the static field")
                  + "; exported from the viewer")
        fig = modulation_fields(rec.visual_dirs, rec.eye_index, res.pattern.modulation[None, :],
                                [p.yaw_deg], np.asarray(res.pattern.b_head, float)[None, :],
                                params=params, ncols=1,
                                title=f"Modulation over the visual fields, heading {p.yaw_deg:g} deg")
        return save_figure(fig, stem, formats, dpi=dpi, force=True)

    def save_screenshot(self, path, *, force: bool = False) -> Path:
        """Save the whole window as PNG (atomic write).

        Parameters
        ----------
        path : str or pathlib.Path
        force : bool, optional
            Replace an existing file.

        Returns
        -------
        pathlib.Path
            The file written.
        """
        from retina.io.atomic import atomic_write_bytes

        return atomic_write_bytes(path, png_bytes(self.grab().toImage()), force=force)

    def save_view_image(self, which: str, path, *, force: bool = False) -> Path:
        """Save one view as rendered by OpenGL as PNG (atomic write).

        Parameters
        ----------
        which : {"head", "map"}
        path : str or pathlib.Path
        force : bool, optional
            Replace an existing file.

        Returns
        -------
        pathlib.Path
            The file written (RGBA, opaque, the canvas's size in pixels).
        """
        from retina.io.atomic import atomic_write_bytes

        views = {"head": self.head_view, "map": self.map_view}
        if which not in views:
            raise InputError(f"expected 'head' or 'map', got {which!r}", key="view")
        return atomic_write_bytes(path, rgba_png_bytes(views[which].render()), force=force)

    def _ask(self, title, default, filters):
        path, _ = QFileDialog.getSaveFileName(self, title, default, filters)
        return path

    def screenshot_dialog(self) -> None:
        """Ask for a file name and save the window there as PNG (File > Save screenshot)."""
        path = self._ask("Save screenshot", "retina-view.png", "PNG image (*.png)")
        if path:  # the dialog has asked before replacing a file
            if not path.lower().endswith(".png"):
                path += ".png"
            self._report_write(lambda: self.save_screenshot(path, force=True))

    def view_image_dialog(self, which: str) -> None:
        """Ask for a file name and save one view there as PNG.

        Parameters
        ----------
        which : {"head", "map"}
        """
        path = self._ask(f"Save {which} view image", f"retina-{which}.png", "PNG image (*.png)")
        if path:
            if not path.lower().endswith(".png"):
                path += ".png"
            self._report_write(lambda: self.save_view_image(which, path, force=True))

    def save_scenario_dialog(self) -> None:
        """Ask for a file name and save the state there as a scenario."""
        path = self._ask("Save state as scenario", "viewer-state.toml", "Scenario (*.toml)")
        if path:
            self._report_write(lambda: self.save_scenario(path, force=True))

    def export_dialog(self) -> None:
        """Ask for a file name and export the figure (the suffix picks the format; none: all three)."""
        path, filt = QFileDialog.getSaveFileName(
            self, "Export figure (the suffix picks the format; no suffix: PNG, SVG and PDF)",
            "retina-pattern", "PNG, SVG and PDF (*);;PNG (*.png);;SVG (*.svg);;PDF (*.pdf)")
        if not path:
            return
        suffix = Path(path).suffix.lower().lstrip(".")
        formats = (suffix,) if suffix in ("png", "svg", "pdf") else ("png", "svg", "pdf")
        self._report_write(lambda: self.export_figure(path, formats, force=True))

    def _report_write(self, fn) -> None:
        try:
            p = fn()
        except (InputError, OSError) as exc:
            self.report_error("Could not save", exc)
            return
        shown = ", ".join(str(x) for x in p) if isinstance(p, (list, tuple)) else str(p)
        self.statusBar().showMessage(f"saved {shown}", 5000)

    # ---------------------------------------------------------------- teardown
    def closeEvent(self, event) -> None:  # noqa: N802 - Qt name
        """Stop the worker and disconnect the views (:meth:`shutdown`), then close (Qt's handler).

        Parameters
        ----------
        event : PyQt6.QtGui.QCloseEvent
        """
        self.shutdown()
        super().closeEvent(event)

    def shutdown(self) -> None:
        """Stop the worker thread and disconnect views and panels (idempotent)."""
        self._scan_timer.stop()
        self.after_frames.cancel()
        self.worker.close()
        for u in self._unsub:
            u()
        self._unsub.clear()
        self.head_view.close()
        self.map_view.close()
        self.controls.close_bindings()
        self.readout.close_binding()
        self.bound_plot.close_binding()


def check_platform(app) -> None:
    """Refuse a Qt platform that cannot draw OpenGL views (offscreen, minimal).

    Parameters
    ----------
    app : PyQt6.QtWidgets.QApplication

    Raises
    ------
    retina.errors.InputError
        On such a platform, saying to use Xvfb instead.
    """
    name = app.platformName()
    if name in ("offscreen", "minimal"):
        raise InputError(OFFSCREEN_MESSAGE.format(name), key="QT_QPA_PLATFORM")


def main(argv=None, *, scenario=None, quick: bool | None = None, screenshot=None,
         force: bool = False) -> int:
    """Open the viewer and run the Qt event loop; return the exit status.

    Parameters
    ----------
    argv : list of str, optional
        Qt arguments (default ``sys.argv[:1]``).
    scenario : str or Path, optional
        Scenario file (default: the bundled demo in quick settings).
    quick : bool, optional
        Reduce the scenario (default: only the bundled one).
    screenshot : str or Path, optional
        Save the window as PNG once the first pattern is shown, then quit.  The views must have
        drawn something: blank views give an error (status 1), not a blank file.
    force : bool
        Replace an existing screenshot file.

    Returns
    -------
    int
        Exit status: 0; 1 when the views drew nothing or the first pattern failed; 2 when the
        screenshot could not be written.

    Raises
    ------
    retina.errors.InputError
        An invalid scenario, a screenshot file that exists (without ``force``), or a Qt platform
        that cannot draw OpenGL views; raised before any window opens.
    """
    from .views import ensure_backend

    sc = load_start_scenario(scenario, quick=quick)  # InputError before any window exists
    if screenshot is not None:
        from retina.io.atomic import check_writable

        check_writable(screenshot, force=force)
    app = QApplication.instance() or QApplication(list(argv) if argv is not None else sys.argv[:1])
    check_platform(app)
    ensure_backend()
    win = MainWindow(sc)
    status = {"code": 0, "shot": False}
    if screenshot is not None:
        def shoot():
            try:
                for v in (win.head_view, win.map_view):
                    img = v.render()[..., :3]
                    if img.reshape(-1, 3).std(axis=0).max() < 1.0:
                        print("retina: error: the views drew nothing (blank); the OpenGL driver "
                              "does not work here, try xvfb-run", file=sys.stderr)
                        status["code"] = 1
                        win.close()
                        return
                win.save_screenshot(screenshot, force=force)
            except (InputError, OSError) as exc:
                print(f"retina: error: {' '.join(str(exc).split())}", file=sys.stderr)
                status["code"] = 2
            win.close()

        def first(_event):
            if not status["shot"]:
                status["shot"] = True
                QTimer.singleShot(300, shoot)  # let both canvases draw the result first

        def failed(_req, message):
            print(f"retina: error: {message}", file=sys.stderr)
            status["code"] = 1
            win.close()

        win.state.events.connect("result", first)  # set on the GUI thread, inside app.exec()
        win.worker.failed.connect(failed)
    win.show()
    app.exec()
    return status["code"]
