"""The viewer's main window: views, panels, menus, keyboard shortcuts and the worker.

Conventions (owned here)
------------------------
- Start-up: the scenario given, else the bundled demo scenario (:func:`retina.data.demo_scenario_path`)
  reduced by :func:`retina.build.quick_scenario` ("quick settings"; ``quick=False`` keeps it
  whole).  A scenario that fails validation is reported in a dialog (or raised before the window
  exists), never as a traceback.
- Every change of a field that affects the pattern sends :meth:`retina_viewer.state.ViewerState.request`
  to the single worker (:mod:`retina_viewer.workers`); display and eye choices only recolour.
- Keyboard: Left/Right turn the head 5 degrees (with Shift 1 degree), Up/Down pitch it 5 degrees,
  Page Up/Page Down roll it 5 degrees; Ctrl+O opens a scenario, Ctrl+S saves a screenshot, Ctrl+Q
  quits.
- Screenshots are PNG files written atomically (:mod:`retina.io.atomic`): the whole window
  (``QWidget.grab``) or one view (the vispy canvas ``render()``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from PyQt6.QtCore import QBuffer, QByteArray, QIODevice, Qt
from PyQt6.QtGui import QAction, QImage, QKeySequence, QShortcut
from PyQt6.QtWidgets import (QApplication, QFileDialog, QMainWindow, QMessageBox, QScrollArea,
                             QSplitter, QVBoxLayout, QWidget)

from retina.errors import InputError
from .panels import ControlPanel, ReadoutPanel
from .state import ViewerState
from .views import HeadView, MapView
from .workers import QtPatternWorker

__all__ = ["MainWindow", "load_start_scenario", "png_bytes", "rgba_png_bytes", "main"]

#: Fields whose change needs a new pattern.
_REQUEST_FIELDS = ("yaw_deg", "pitch_deg", "roll_deg", "intensity_uT", "inclination_deg",
                   "declination_deg", "photons", "ordering", "kappa")


def load_start_scenario(path=None, *, quick: bool | None = None):
    """The scenario to start from (module docstring).  ``quick=None`` means quick for the bundled
    scenario and as-is for a given one."""
    from retina.build import quick_scenario
    from retina.scenario import load_scenario

    if path is None:
        from retina.data import demo_scenario_path

        path = demo_scenario_path()
        quick = True if quick is None else quick
    sc = load_scenario(path)
    return quick_scenario(sc) if quick else sc


def png_bytes(image: QImage) -> bytes:
    """A QImage encoded as PNG."""
    ba = QByteArray()
    buf = QBuffer(ba)
    buf.open(QIODevice.OpenModeFlag.WriteOnly)
    if not image.save(buf, "PNG"):
        raise InputError("could not encode the image as PNG", key="screenshot")
    buf.close()
    return bytes(ba)


def rgba_png_bytes(rgba: np.ndarray) -> bytes:
    """An RGBA uint8 array ``(H, W, 4)`` encoded as PNG."""
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
        Compute on the GUI thread (tests and scripts).

    Attributes
    ----------
    state : retina_viewer.state.ViewerState
    worker : retina_viewer.workers.QtPatternWorker
    head_view, map_view : retina_viewer.views.HeadView, retina_viewer.views.MapView
    controls : retina_viewer.panels.ControlPanel
    readout : retina_viewer.panels.ReadoutPanel
    """

    def __init__(self, scenario=None, *, synchronous: bool = False, parent=None):
        super().__init__(parent)
        self.setWindowTitle("retina-compass viewer")
        self.state = ViewerState()
        self.worker = QtPatternWorker(synchronous=synchronous, parent=self)
        self.worker.finished.connect(self._on_result)
        self.worker.failed.connect(self._on_failed)
        outer = QSplitter(Qt.Orientation.Horizontal)
        self.setCentralWidget(outer)  # canvases are created inside the window (views.HeadView)
        split = QSplitter(Qt.Orientation.Horizontal)
        outer.addWidget(split)
        self.head_view = HeadView(self.state, parent=split)
        self.map_view = MapView(self.state, parent=split)
        split.addWidget(self.head_view.canvas.native)
        split.addWidget(self.map_view.canvas.native)
        split.setSizes([640, 620])
        side = QWidget()
        sl = QVBoxLayout(side)
        self.controls = ControlPanel(self.state)
        self.readout = ReadoutPanel(self.state)
        sl.addWidget(self.readout)
        sl.addWidget(self.controls)
        scroll = QScrollArea()
        scroll.setWidget(side)
        scroll.setWidgetResizable(True)
        scroll.setMinimumWidth(420)
        outer.addWidget(scroll)
        outer.setStretchFactor(0, 1)
        self._build_menus()
        self._build_shortcuts()
        self._unsub = [self.state.events.connect(n, self._on_change) for n in _REQUEST_FIELDS]
        self._unsub.append(self.state.events.connect("scenario", self._on_scenario))
        self.resize(1560, 820)
        self.state.load_scenario(scenario if scenario is not None else load_start_scenario())

    # ---------------------------------------------------------------- menus and keys
    def _build_menus(self):
        m = self.menuBar().addMenu("&File")
        for text, key, slot in (("&Open scenario...", QKeySequence.StandardKey.Open, self.open_dialog),
                                ("&Save screenshot...", QKeySequence.StandardKey.Save, self.screenshot_dialog),
                                ("Save &head view image...", None, lambda: self.view_image_dialog("head")),
                                ("Save &map image...", None, lambda: self.view_image_dialog("map")),
                                ("&Quit", QKeySequence.StandardKey.Quit, self.close)):
            a = QAction(text, self)
            if key is not None:
                a.setShortcut(QKeySequence(key))
            a.triggered.connect(slot)
            m.addAction(a)
        v = self.menuBar().addMenu("&View")
        a = QAction("&Reset camera", self)
        a.triggered.connect(self.reset_camera)
        v.addAction(a)

    def _build_shortcuts(self):
        self._shortcuts = []
        for key, name, step in ((Qt.Key.Key_Left, "yaw_deg", -5.0), (Qt.Key.Key_Right, "yaw_deg", 5.0),
                                (Qt.Key.Key_Up, "pitch_deg", 5.0), (Qt.Key.Key_Down, "pitch_deg", -5.0),
                                (Qt.Key.Key_PageUp, "roll_deg", -5.0), (Qt.Key.Key_PageDown, "roll_deg", 5.0)):
            for mod, k in ((Qt.KeyboardModifier.NoModifier, 1.0), (Qt.KeyboardModifier.ShiftModifier, 0.2)):
                sc = QShortcut(QKeySequence(mod.value | key.value), self)
                sc.activated.connect(lambda n=name, s=step * k: self.nudge(n, s))
                self._shortcuts.append(sc)

    def nudge(self, name: str, step: float) -> None:
        """Change a pose angle by ``step`` degrees (pitch clamped to [-90, 90], roll wrapped)."""
        v = self.state.get(name) + step
        if name == "pitch_deg":
            v = min(90.0, max(-90.0, v))
        elif name == "roll_deg":
            v = (v + 180.0) % 360.0 - 180.0
        self.state.set(name, v)

    def reset_camera(self) -> None:
        cam = self.head_view.view.camera
        cam.elevation, cam.azimuth, cam.distance = 20.0, -55.0, 82.0
        self.map_view.view.camera.set_range(x=(-214.0, 186.0), y=(-134.0, 104.0), margin=0.0)

    # ---------------------------------------------------------------- state -> worker
    def _on_change(self, event) -> None:
        if event.name == "intensity_uT":
            self.statusBar().showMessage(f"computing the yield function at {event.value:g} uT...")
        self.request()

    def _on_scenario(self, event) -> None:
        sc = event.value
        self.setWindowTitle(f"retina-compass viewer - {sc.name}"
                            + (f" ({Path(sc.source).name})" if sc.source else ""))
        self.statusBar().showMessage("computing the yield function...")
        self.request()

    def request(self) -> None:
        """Send the current state to the worker."""
        if self.state.scenario is not None:
            self.worker.submit(self.state.request())

    def _on_result(self, result) -> None:
        self.state.set_result(result)
        self.statusBar().showMessage(f"pattern for heading {result.request.yaw_deg:.1f} deg "
                                     f"({1000 * result.seconds:.1f} ms)", 4000)

    def _on_failed(self, request, message: str) -> None:
        self.statusBar().showMessage(f"error: {message}")

    # ---------------------------------------------------------------- files
    def open_scenario(self, path) -> None:
        """Load a scenario file (as given, not reduced); raises InputError when it is invalid."""
        from retina.scenario import load_scenario

        self.state.load_scenario(load_scenario(path))

    def open_dialog(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open scenario", "", "Scenario (*.toml);;All files (*)")
        if not path:
            return
        try:
            self.open_scenario(path)
        except InputError as exc:
            QMessageBox.warning(self, "Invalid scenario", " ".join(str(exc).split()))

    def save_screenshot(self, path, *, force: bool = False) -> Path:
        """Save the whole window as PNG (atomic write)."""
        from retina.io.atomic import atomic_write_bytes

        return atomic_write_bytes(path, png_bytes(self.grab().toImage()), force=force)

    def save_view_image(self, which: str, path, *, force: bool = False) -> Path:
        """Save the head (``"head"``) or map (``"map"``) canvas as PNG (atomic write)."""
        from retina.io.atomic import atomic_write_bytes

        views = {"head": self.head_view, "map": self.map_view}
        if which not in views:
            raise InputError(f"expected 'head' or 'map', got {which!r}", key="view")
        return atomic_write_bytes(path, rgba_png_bytes(views[which].render()), force=force)

    def _ask_png(self, title):
        path, _ = QFileDialog.getSaveFileName(self, title, "retina-view.png", "PNG image (*.png)")
        if path and not path.lower().endswith(".png"):
            path += ".png"
        return path

    def screenshot_dialog(self) -> None:
        path = self._ask_png("Save screenshot")
        if path:  # the dialog has asked before replacing a file
            self._report_write(lambda: self.save_screenshot(path, force=True))

    def view_image_dialog(self, which: str) -> None:
        path = self._ask_png(f"Save {which} view image")
        if path:
            self._report_write(lambda: self.save_view_image(which, path, force=True))

    def _report_write(self, fn) -> None:
        try:
            p = fn()
        except (InputError, OSError) as exc:
            QMessageBox.warning(self, "Could not save", " ".join(str(exc).split()))
            return
        self.statusBar().showMessage(f"saved {p}", 5000)

    # ---------------------------------------------------------------- teardown
    def closeEvent(self, event) -> None:  # noqa: N802 - Qt name
        self.shutdown()
        super().closeEvent(event)

    def shutdown(self) -> None:
        """Stop the worker thread and disconnect views and panels (idempotent)."""
        self.worker.close()
        for u in self._unsub:
            u()
        self._unsub.clear()
        self.head_view.close()
        self.map_view.close()
        self.controls.close_bindings()
        self.readout.close_binding()


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
        Save the window as PNG once the first pattern is shown, then quit.
    force : bool
        Replace an existing screenshot file.
    """
    from .views import ensure_backend

    sc = load_start_scenario(scenario, quick=quick)  # InputError before any window exists
    if screenshot is not None:
        from retina.io.atomic import check_writable

        check_writable(screenshot, force=force)
    app = QApplication.instance() or QApplication(list(argv) if argv is not None else sys.argv[:1])
    ensure_backend()
    win = MainWindow(sc)
    status = {"code": 0, "shot": False}
    if screenshot is not None:
        from PyQt6.QtCore import QTimer

        def shoot():
            try:
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
