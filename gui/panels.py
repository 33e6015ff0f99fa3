"""Qt widgets bound both ways to the viewer state.

Conventions (owned here)
------------------------
- A widget writes through the state's validating setter (:mod:`retina_viewer.state`) and listens to the
  state's event for its field; while it shows a value that came from the state it blocks its own
  signals, so a change never echoes back (no feedback loop).
- The controls are table-driven: :data:`CONTROLS` describes every numeric control (label, unit,
  slider span, decimals, step, log scale, tooltip), :data:`CHOICES` every choice control (label,
  choices with their shown texts, tooltip) and :data:`GROUPS` places them in boxes, so a new
  control is one row in two tables (plus its state field).  Every control has a tooltip that gives
  its unit.
- The RF box is disabled, with a tooltip saying why, when the scenario's yield function does not
  come from a spin system (:func:`retina_viewer.state.rf_unavailable`).
- Numeric controls pair a slider (coarse, drag) with a spin box (exact, typed); log-scaled fields
  (photons, kappa, RF) move the slider in equal steps of ``log10``; the far left of a slider with
  ``zero_left`` is 0 (kappa: no order, isotropic for the "cone" and "plane" models; RF amplitude:
  no field).  The heading spin box takes any
  angle (360 is 0, -10 is 350: the state wraps it) and its slider ends at 359 deg.
- Arrow keys belong to the focused control: the window's head-turning keys act only when a view
  has the focus (:mod:`retina_viewer.window`).
- The readout panel and the bound plot show the numbers of the latest worker result
  (:mod:`retina_viewer.workers`) with their units, in words where a number would mislead
  (:func:`retina_viewer.workers.describe_bound`); they never compute anything themselves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from PyQt6.QtCore import QPointF, QRectF, Qt
from PyQt6.QtGui import QColor, QImage, QPainter, QPainterPath, QPen
from PyQt6.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout, QGridLayout, QGroupBox,
                             QLabel, QPushButton, QSlider, QToolButton, QVBoxLayout, QWidget)

from retina.errors import InputError

__all__ = ["Control", "CONTROLS", "CHOICES", "GROUPS", "BoundSlider", "ChoiceBox", "CheckBox", "ControlPanel",
           "ReadoutPanel", "BoundPlot"]

_TICKS = 1000


@dataclass(frozen=True)
class Control:
    """One numeric control: state field, label, spin-box suffix (the unit), slider span, decimals,
    spin step, log-scaled slider, tooltip, and whether the far left of the slider is 0."""

    name: str
    label: str
    unit: str
    span: tuple
    decimals: int = 1
    step: float = 1.0
    log: bool = False
    tip: str = ""
    zero_left: bool = False


#: Every numeric control (module docstring).
CONTROLS = (
    Control("yaw_deg", "heading (yaw)", " deg", (0.0, 359.0), 1, 1.0, False,
            "Heading of the beak, degrees clockwise from geographic north (0-360; typed values "
            "wrap, -10 is 350). Keys in a view: Left/Right 5 deg, with Shift 1 deg."),
    Control("pitch_deg", "pitch (nose up +)", " deg", (-90.0, 90.0), 1, 1.0, False,
            "Head pitch, degrees, nose up positive (-90 to 90). Keys in a view: Up/Down."),
    Control("roll_deg", "roll (right down +)", " deg", (-180.0, 180.0), 1, 1.0, False,
            "Head roll, degrees, right side down positive (-180 to 180). Keys in a view: "
            "Page Up/Page Down."),
    Control("intensity_uT", "intensity", " uT", (10.0, 100.0), 1, 1.0, False,
            "Total field intensity F, microtesla. A yield function computed from a spin system is "
            "recomputed at this field; one read from a file is not."),
    Control("inclination_deg", "inclination (down +)", " deg", (-90.0, 90.0), 1, 1.0, False,
            "Field inclination I, degrees below the horizontal (-90 to 90; 0 horizontal, "
            "90 straight down)."),
    Control("declination_deg", "declination (east +)", " deg", (-180.0, 180.0), 1, 1.0, False,
            "Field declination D, degrees east of geographic north (-180 to 180)."),
    Control("photons", "light level", " photons", (1.0, 1e6), 1, 10.0, True,
            "Light level: mean photons (radical pairs formed) per receptor per look; log slider."),
    Control("kappa", "ordering kappa", "", (0.1, 1000.0), 2, 1.0, True,
            "Concentration kappa of the ordering model (cone: von Mises-Fisher concentration of the "
            "molecular axis about the receptor axis; plane: Watson girdle concentration; "
            "dimensionless, larger is better ordered); log slider, far left is 0 (no order). "
            "'scenario' returns to the scenario's own kappa.", True),
    Control("scan_amplitude_deg", "scan amplitude (+/-)", " deg", (0.0, 180.0), 0, 5.0, False,
            "Half-width of the head scan, degrees: the scan sweeps heading +/- amplitude about the "
            "heading at which it starts."),
    Control("scan_steps", "scan looks per sweep", " looks", (2.0, 73.0), 0, 1.0, False,
            "Looks (poses) from one end of the sweep to the other, a count (2-721)."),
    Control("scan_repeats", "scan repeats", " sweeps", (1.0, 10.0), 0, 1.0, False,
            "How many times the scan goes out and back, a count (1-100)."),
    Control("scan_speed_deg_s", "scan playback speed", " deg/s", (5.0, 720.0), 0, 5.0, True,
            "How fast the head turns while the scan plays, degrees per second (playback only; "
            "the bound depends on the looks, not on the speed)."),
    Control("rf_MHz", "RF frequency", " MHz", (0.01, 100.0), 3, 0.1, True,
            "Frequency of the oscillating (RF) field, MHz; log slider. A free electron's Larmor "
            "frequency is 28.0 MHz per mT of static field (1.4 MHz at 50 uT)."),
    Control("rf_nT", "RF amplitude", " nT", (1.0, 1e5), 1, 10.0, True,
            "Amplitude (peak) of the linearly polarised RF field, nanotesla; log slider, far left "
            "is 0 (no field).", True),
)

_ORDERING_TIP = ("scenario: the scenario's own model; aligned; axial: free rotation about the receptor "
                 "axis; cone: a vMF cone with the twist as the scenario says (tied: isotropic at kappa 0); "
                 "cone_no_twist: the cone without twist (not isotropic at kappa 0); plane: a molecular "
                 "direction in the membrane plane (Watson girdle kappa); isotropic: no order")

#: Choice controls: field -> (label, ((state value, text shown), ...), tooltip).
CHOICES = {
    "ordering": ("ordering model", None, _ORDERING_TIP),
    "rf": ("RF field", (("off", "off"), ("tone", "single frequency")),
           "An oscillating (RF) magnetic field at the bird: off, or one frequency (MHz) and amplitude "
           "(nT). Its yield function is computed from the spin system at the scenario's [rf] degree on "
           "the worker (seconds to minutes for a large pair; the status bar says so)."),
    "rf_direction": ("RF direction", None,
                     "Direction of the RF field relative to the static field: perpendicular (90 deg to it, "
                     "averaged over its azimuth about the field) or parallel to it (0 deg)."),
}

#: Boxes of the control panel: (title, fields).
GROUPS = (
    ("Head pose (keys in a view turn and tilt)", ("yaw_deg", "pitch_deg", "roll_deg")),
    ("Geomagnetic field", ("intensity_uT", "inclination_deg", "declination_deg")),
    ("Receptors and light", ("photons", "ordering", "kappa")),
    ("Head scan", ("scan_amplitude_deg", "scan_steps", "scan_repeats", "scan_speed_deg_s")),
    ("RF field", ("rf", "rf_MHz", "rf_nT", "rf_direction")),
)

#: Title of the box that holds the RF controls (disabled without a spin system).
RF_BOX = "RF field"

#: Tooltips of the non-numeric controls.
TIPS = {
    "display": "What the colours show: relative modulation (yield / mean - 1 of each eye, %) or the "
               "yield itself (dimensionless, 0-1).",
    "eye": "Show both eyes, or one (the other is drawn faint grey).",
    "lock_scale": "Keep the colour limits of the pattern shown now, so weaker patterns visibly fade "
                  "(units of the colour bar: % modulation or yield).",
    "play": "Play the head scan from the current heading (Stop returns to it). The readout compares "
            "the bound after the looks so far with as many looks straight at the start heading "
            "(degrees).",
}


def _guarded(widget, fn, *args):
    """Run a widget's slot so that no exception escapes into Qt: an error is handed to the
    ``on_error(title, exception)`` of the widget (the window's report), else printed."""
    try:
        return fn(*args)
    except Exception as exc:  # noqa: BLE001 - a slot must never raise into Qt
        handler = getattr(widget, "on_error", None)
        if handler is not None:
            handler("Could not apply that change", exc)
        else:
            import sys

            print(f"retina viewer: {type(exc).__name__}: {exc}", file=sys.stderr)
        return None


def _scenario_kappa(state) -> float:
    sc = state.scenario
    if sc is None:
        return 20.0
    return float(sc["ordering"]["kappa"])


class BoundSlider(QWidget):
    """A label, a slider and a spin box bound to one numeric state field.

    Parameters
    ----------
    state : retina_viewer.state.ViewerState
    control : Control
        The row of :data:`CONTROLS` (label, unit, span, decimals, step, log, tooltip).
    """

    def __init__(self, state, control: Control, parent=None):
        super().__init__(parent)
        from .state import RANGES

        c = control
        name = c.name
        self.state, self.name, self.log = state, name, bool(c.log)
        self.lo, self.hi = float(c.span[0]), float(c.span[1])
        self.zero_left = bool(c.zero_left)
        self.label = QLabel(c.label)
        self.slider = QSlider(Qt.Orientation.Horizontal)
        self.slider.setRange(0, _TICKS)
        self.slider.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.spin = QDoubleSpinBox()
        full = RANGES.get(name, c.span)
        if name == "yaw_deg":
            self.spin.setRange(-360.0, 720.0)  # any typed angle; the state wraps it into [0, 360)
        else:
            lo = max(full[0], 10.0 ** -c.decimals) if c.log and not c.zero_left else full[0]
            self.spin.setRange(lo, full[1])
        self.spin.setDecimals(c.decimals)
        self.spin.setSingleStep(c.step)
        self.spin.setSuffix(c.unit)
        self.spin.setKeyboardTracking(False)
        self.spin.setMinimumWidth(96)
        for w in (self.label, self.slider, self.spin):
            w.setToolTip(c.tip)
        self.reset = None
        lay = QGridLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.label, 0, 0, 1, 2)
        lay.addWidget(self.slider, 1, 0)
        lay.addWidget(self.spin, 1, 1)
        if name == "kappa":
            self.reset = QToolButton()
            self.reset.setText("scenario")
            self.reset.setToolTip("use the scenario's own ordering model (kappa dimensionless)")
            self.reset.clicked.connect(lambda: _guarded(self, self.state.set, "kappa", None))
            lay.addWidget(self.reset, 1, 2)
        self.on_error = None
        self.slider.valueChanged.connect(lambda k: _guarded(self, self._from_slider, k))
        self.spin.valueChanged.connect(lambda v: _guarded(self, self._from_spin, v))
        self._unsub = [state.events.connect(name, lambda e: self.sync()),
                       state.events.connect("scenario", lambda e: self.sync())]
        self.sync()

    # value <-> slider position
    def to_ticks(self, v: float) -> int:
        """The slider position of a value.

        Parameters
        ----------
        v : float
            A value in the control's unit.

        Returns
        -------
        int
            Slider position, 0 to the slider's maximum (linear or logarithmic in ``v``; 0 for a value
            <= 0 when the far left means zero).
        """
        if self.zero_left and v <= 0:
            return 0
        if self.log:
            t = (math.log10(max(v, 1e-300)) - math.log10(self.lo)) / (math.log10(self.hi) - math.log10(self.lo))
        else:
            t = (v - self.lo) / (self.hi - self.lo)
        return int(round(min(max(t, 0.0), 1.0) * _TICKS))

    def from_ticks(self, k: int) -> float:
        """The value at a slider position (inverse of :meth:`to_ticks`).

        Parameters
        ----------
        k : int
            Slider position.

        Returns
        -------
        float
            The value in the control's unit.
        """
        if self.zero_left and k == 0:
            return 0.0  # the far left: no order (kappa), no field (RF amplitude)
        t = k / _TICKS
        if self.log:
            return 10.0 ** (math.log10(self.lo) + t * (math.log10(self.hi) - math.log10(self.lo)))
        return self.lo + t * (self.hi - self.lo)

    def value(self) -> float:
        """The state's value of this control.

        Returns
        -------
        float
            In the control's unit; for kappa left to the scenario, the scenario's own kappa.
        """
        v = self.state.get(self.name)
        return _scenario_kappa(self.state) if v is None else float(v)

    def sync(self) -> None:
        """Show the state's value without emitting anything."""
        v = self.value()
        for w in (self.slider, self.spin):
            w.blockSignals(True)
        try:
            self.slider.setValue(self.to_ticks(v))
            self.spin.setValue(v)
        finally:
            for w in (self.slider, self.spin):
                w.blockSignals(False)
        if self.reset is not None:
            own = self.state.get("kappa") is None
            self.label.setText("ordering kappa" + (": scenario's" if own else ": override")
                               + (" (0 = isotropic)" if self.value() == 0 else ""))
            self.reset.setEnabled(not own)

    def _set(self, v: float) -> None:
        try:
            self.state.set(self.name, v)
        except InputError:
            self.sync()  # out of range: show the state's value again
        else:
            if self.name == "yaw_deg" and self.spin.value() != self.value():
                self.sync()  # a typed 360 or -10 shows the wrapped heading

    def _from_slider(self, k: int) -> None:
        v = self.from_ticks(k)
        if not self.log:
            step = self.spin.singleStep()
            v = round(v / step) * step
        else:
            v = float(f"{v:.3g}")
        self._set(v)

    def _from_spin(self, v: float) -> None:
        self._set(v)

    def close_binding(self) -> None:
        """Disconnect from the state (the widget shows no more changes)."""
        for u in self._unsub:
            u()
        self._unsub.clear()


class ChoiceBox(QComboBox):
    """A combo box bound to a choice field of the state (``display``, ``eye``, ``ordering``, ``rf``,
    ``rf_direction``).  ``texts``: what each choice is shown as (default: the choices)."""

    def __init__(self, state, name, choices, parent=None, texts=None):
        super().__init__(parent)
        self.state, self.name = state, name
        self.values = list(choices)
        self.addItems(list(texts) if texts is not None else self.values)
        self.setToolTip(TIPS.get(name, ""))
        self.on_error = None
        self.currentIndexChanged.connect(lambda i: _guarded(self, self._from_index, i))
        self._unsub = [state.events.connect(name, lambda e: self.sync()),
                       state.events.connect("scenario", lambda e: self.sync())]
        self.sync()

    def _from_index(self, i: int) -> None:
        if 0 <= i < len(self.values):
            try:
                self.state.set(self.name, self.values[i])
            except InputError:
                self.sync()  # refused (an RF tone without a spin system): show the state's value again
                raise

    def sync(self) -> None:
        """Show the state's value without emitting anything."""
        self.blockSignals(True)
        try:
            self.setCurrentIndex(self.values.index(self.state.get(self.name)))
        finally:
            self.blockSignals(False)

    def close_binding(self) -> None:
        """Disconnect from the state (the widget shows no more changes)."""
        for u in self._unsub:
            u()
        self._unsub.clear()


class CheckBox(QCheckBox):
    """A check box bound to a true/false field of the state (``lock_scale``)."""

    def __init__(self, state, name, text, parent=None):
        super().__init__(text, parent)
        self.state, self.name = state, name
        self.setToolTip(TIPS.get(name, ""))
        self.on_error = None
        self.toggled.connect(lambda on: _guarded(self, self.state.set, self.name, bool(on)))
        self._unsub = [state.events.connect(name, lambda e: self.sync())]
        self.sync()

    def sync(self) -> None:
        """Show the state's value without emitting anything."""
        self.blockSignals(True)
        try:
            self.setChecked(bool(self.state.get(self.name)))
        finally:
            self.blockSignals(False)

    def close_binding(self) -> None:
        """Disconnect from the state (the widget shows no more changes)."""
        for u in self._unsub:
            u()
        self._unsub.clear()


class ControlPanel(QWidget):
    """All controls (:data:`GROUPS`), the display choices and the scan's play button.

    Attributes
    ----------
    controls : dict
        Field name -> :class:`BoundSlider`, :class:`ChoiceBox` or :class:`CheckBox`.
    play : QPushButton
        Checkable; the window plays the scan while it is checked.
    scan_label : QLabel
        The scan's progress and bounds (set by the window).
    """

    def __init__(self, state, parent=None):
        super().__init__(parent)
        from .state import DISPLAYS, EYES

        self.state = state
        self.controls = {}
        lay = QVBoxLayout(self)
        lay.setSpacing(4)
        box = QGroupBox("Display")
        row = QGridLayout(box)
        self.controls["display"] = ChoiceBox(state, "display", DISPLAYS)
        self.controls["eye"] = ChoiceBox(state, "eye", EYES)
        self.controls["lock_scale"] = CheckBox(state, "lock_scale", "lock colour scale")
        for col, (text, key) in enumerate((("colour by", "display"), ("eye", "eye"))):
            lab = QLabel(text)
            lab.setToolTip(TIPS[key])
            row.addWidget(lab, 0, 2 * col)
            row.addWidget(self.controls[key], 0, 2 * col + 1)
        row.addWidget(self.controls["lock_scale"], 1, 0, 1, 4)
        lay.addWidget(box)
        spec = {c.name: c for c in CONTROLS}
        self.boxes = {}
        from .state import ORDERINGS, RF_DIRECTIONS

        own = {"ordering": ORDERINGS, "rf_direction": RF_DIRECTIONS}
        for title, names in GROUPS:
            box = QGroupBox(title)
            bl = QVBoxLayout(box)
            bl.setSpacing(2)
            for n in names:
                if n in CHOICES:
                    text, pairs, tip = CHOICES[n]
                    values = [v for v, _ in pairs] if pairs else own[n]
                    texts = [t for _, t in pairs] if pairs else None
                    self.controls[n] = ChoiceBox(state, n, values, texts=texts)
                    self.controls[n].setToolTip(tip)
                    lab = QLabel(text)
                    lab.setToolTip(tip)
                    bl.addWidget(lab)
                    bl.addWidget(self.controls[n])
                    continue
                w = BoundSlider(state, spec[n])
                self.controls[n] = w
                bl.addWidget(w)
            self.boxes[title] = (box, bl)
            lay.addWidget(box)
        scan_box = self.boxes["Head scan"][1]
        self.play = QPushButton("Play scan")
        self.play.setCheckable(True)
        self.play.setToolTip(TIPS["play"])
        self.scan_label = QLabel("not playing")
        self.scan_label.setWordWrap(True)
        self.scan_label.setToolTip(TIPS["play"])
        scan_box.addWidget(self.play)
        scan_box.addWidget(self.scan_label)
        lay.addStretch(1)
        self._unsub = [state.events.connect("scenario", lambda e: self.sync_rf_box())]
        self.sync_rf_box()

    def sync_rf_box(self) -> None:
        """Enable the RF box when the scenario has a spin system; else disable it and say why in
        its tooltip (and every control's in it)."""
        from .state import rf_unavailable

        box = self.boxes[RF_BOX][0]
        why = rf_unavailable(self.state.scenario) if self.state.scenario is not None else None
        box.setEnabled(why is None)
        box.setToolTip("" if why is None else why)
        for n in GROUPS[[t for t, _ in GROUPS].index(RF_BOX)][1]:
            w = self.controls[n]
            ws = (w.label, w.slider, w.spin) if isinstance(w, BoundSlider) else (w,)
            for x in ws:
                x.setToolTip(CHOICES[n][2] if n in CHOICES else next(c.tip for c in CONTROLS if c.name == n))
                if why is not None:
                    x.setToolTip(f"{why}. {x.toolTip()}")

    def set_error_handler(self, on_error) -> None:
        """Send errors raised while a control applies a change to a handler.

        Parameters
        ----------
        on_error : callable(str, Exception)
            Called with a title and the exception (the window shows it).
        """
        for w in self.controls.values():
            w.on_error = on_error

    def close_bindings(self) -> None:
        """Disconnect every control, and the panel, from the state."""
        for w in self.controls.values():
            w.close_binding()
        for u in self._unsub:
            u()
        self._unsub.clear()


class ReadoutPanel(QGroupBox):
    """Live numbers of the latest result (module docstring)."""

    ROWS = (("pose", "pattern shown for"), ("depth", "modulation depth"), ("bound", "Cramer-Rao bound here"),
            ("rms", "bound, rms over headings"), ("mirror", "heading + 180 deg"),
            ("light", "light level"), ("rf", "RF field"), ("bhead", "field in head (az, el)"),
            ("yield", "yield function"), ("time", "computed in"), ("hover", "under the cursor"))

    def __init__(self, state, parent=None, *, follow_results: bool = True):
        super().__init__("Readout", parent)
        self.state = state
        fl = QFormLayout(self)
        self.labels = {}
        for key, text in self.ROWS:
            lab = QLabel("-")
            lab.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
            lab.setWordWrap(True)
            self.labels[key] = lab
            fl.addRow(text, lab)
        self.labels["hover"].setToolTip("The receptor under the mouse in the map: eye, visual "
                                        "direction (azimuth, elevation, deg), yield, modulation (%)")
        # follow_results=False: the owner calls refresh() (the window: after the frames, coalesced)
        self._unsub = [state.events.connect("scenario", lambda e: self.clear())]
        if follow_results:
            self._unsub.append(state.events.connect("result", lambda e: self.refresh()))

    def clear(self) -> None:
        """Show "-" in every line (a new scenario, before its first result)."""
        for lab in self.labels.values():
            lab.setText("-")

    def refresh(self) -> None:
        """Show the numbers and words of the state's current result."""
        from .state import describe_rf
        from .workers import describe_bound, format_deg

        res = self.state.result
        if res is None:
            self.clear()
            return
        b = np.asarray(res.pattern.b_head, float)
        az = math.degrees(math.atan2(b[1], b[0]))
        el = math.degrees(math.asin(max(-1.0, min(1.0, -b[2]))))
        nuis = res.request.scenario["readout"]["nuisance"]
        q = res.request
        self.labels["pose"].setText(f"heading {format_deg(q.yaw_deg)}, pitch {format_deg(q.pitch_deg)}, "
                                    f"roll {format_deg(q.roll_deg)}")
        self.labels["depth"].setText("0 % (flat pattern)" if res.flat else f"{100.0 * res.depth:.2f} %")
        self.labels["bound"].setText(describe_bound(res.bound_deg, res.status))
        rms_status = "none" if res.status == "none" else "ok"
        self.labels["rms"].setText(describe_bound(res.rms_bound_deg, rms_status))
        if res.status == "none":
            mirror = "-"
        elif res.ambiguous:
            mirror = (f"ambiguous: gives the same pattern (d' = {res.mirror_dprime:.2g} < 1); "
                      "heading known only up to 180 deg")
        else:
            mirror = f"told apart (d' = {res.mirror_dprime:.3g})"
        self.labels["mirror"].setText(mirror)
        self.labels["light"].setText(f"{res.request.photons:.4g} photons per receptor per look"
                                     + (", gain unknown" if nuis == "gain" else ""))
        self.labels["rf"].setText(describe_rf(q.rf))
        self.labels["bhead"].setText(f"{format_deg(az)}, {format_deg(el)}")
        F = res.yield_field_uT
        self.labels["yield"].setText((f"at {F:g} uT" if np.isfinite(F) else "field not recorded")
                                     + " (hover: source)")
        self.labels["yield"].setToolTip(res.yield_note)
        self.labels["time"].setText(f"{1000.0 * res.seconds:.1f} ms" if res.seconds < 10.0
                                    else f"{res.seconds:.1f} s")

    def show_receptor(self, info) -> None:
        """Show the receptor under the mouse in the map.

        Parameters
        ----------
        info : dict or None
            :meth:`retina_viewer.views.MapView.receptor_info` of the receptor; None: off the eyes.
        """
        from .workers import format_deg

        if info is None:
            self.labels["hover"].setText("-")
            return
        self.labels["hover"].setText(
            f"{info['eye']} eye #{info['index']}: az {format_deg(info['azimuth_deg'])}, "
            f"el {format_deg(info['elevation_deg'])}; yield {info['yield']:.5f}, "
            f"modulation {100.0 * info['modulation']:+.3f} %")

    def close_binding(self) -> None:
        """Disconnect from the state (the panel shows no more changes)."""
        for u in self._unsub:
            u()
        self._unsub.clear()


class BoundPlot(QWidget):
    """The Cramer-Rao bound against heading over the whole circle, the current heading marked.

    Log scale in degrees; the band above :data:`retina.readout.fisher.INFORMATIVE_BOUND_DEG` is
    grey ("not informative").  Without information, or with a 180 deg ambiguity, it says so in
    words (:meth:`message`).
    """

    def __init__(self, state, parent=None, *, follow_results: bool = True):
        super().__init__(parent)
        self.state = state
        self.setMinimumSize(200, 150)
        self.setToolTip("Cramer-Rao bound on heading (degrees, log scale) at every heading, at this "
                        "pitch, roll, field and light level; the vertical line is the current heading")
        self._path_key = None
        self._path = None
        self._bg_key = None
        self._bg = None   # the plot without the heading lines and words (QImage, RGB32): _paint
        # follow_results=False: the owner calls update() (the window: after the frames, coalesced)
        self._unsub = [state.events.connect("scenario", lambda e: self.update())]
        if follow_results:
            self._unsub.append(state.events.connect("result", lambda e: self.update()))

    def message(self) -> str:
        """The words shown over the plot.

        Returns
        -------
        str
            "computing...", or why the curve cannot say more ("no heading information...", "not
            informative...", "ambiguous..."); '' when the curve speaks for itself.
        """
        from retina.readout.fisher import INFORMATIVE_BOUND_DEG

        res = self.state.result
        if res is None or res.curve_bound_deg is None:
            return "computing..."
        if res.status == "none":
            return "no heading information at any heading"
        c = np.asarray(res.curve_bound_deg)
        if np.all(c > INFORMATIVE_BOUND_DEG):
            return "not informative at any heading at this light level"
        if res.ambiguous:
            return "ambiguous: heading and heading + 180 deg give the same pattern"
        return ""

    def paintEvent(self, event):  # noqa: N802 - Qt name
        """Draw the plot (Qt's paint handler); an error is logged, never raised.

        Parameters
        ----------
        event : PyQt6.QtGui.QPaintEvent
        """
        try:
            self._paint()
        except Exception:  # noqa: BLE001 - nothing may escape a Qt slot
            pass

    def _paint(self):
        from retina.readout.fisher import INFORMATIVE_BOUND_DEG

        W, H = self.width(), self.height()
        left, right, top, bottom = 44, 10, 18, 28
        pw, ph = max(W - left - right, 1), max(H - top - bottom, 1)
        res = self.state.result
        c = None if res is None or res.curve_bound_deg is None else np.asarray(res.curve_bound_deg, float)
        finite = c[np.isfinite(c)] if c is not None else np.zeros(0)
        lo_dec = math.floor(math.log10(max(0.5 * float(finite.min()), 1e-3))) if finite.size else -1
        ymin, ymax = 10.0 ** lo_dec, 180.0

        def X(h):
            return left + pw * (h / 360.0)

        def Y(v):
            v = min(max(v, ymin), ymax)
            return top + ph * (1.0 - (math.log10(v) - math.log10(ymin)) / (math.log10(ymax) - math.log10(ymin)))

        curve = c is not None and res.status != "none"
        if curve:
            q = res.request
            key = (id(q.scenario), q.pitch_deg, q.roll_deg, q.intensity_uT, q.inclination_deg,
                   q.declination_deg, q.photons, q.kappa, q.ordering, q.rf, W, H)
            if key != self._path_key:  # the curve changes with pitch, roll, field, light only
                xs = left + pw * (np.arange(c.size) / 360.0)
                v = np.clip(np.where(np.isfinite(c), c, ymax), ymin, ymax)
                ys = top + ph * (1.0 - (np.log10(v) - math.log10(ymin)) / (math.log10(ymax) - math.log10(ymin)))
                path = QPainterPath(QPointF(xs[0], ys[0]))
                for x, y in zip(xs[1:].tolist(), ys[1:].tolist()):
                    path.lineTo(x, y)
                self._path, self._path_key = path, key
        # the plot without the heading lines and the words over it changes only with the curve or
        # the size: drawn once into an image of the window's own format (RGB32) and copied per step
        dpr = self.devicePixelRatioF()
        bg_key = (W, H, dpr, lo_dec, self._path_key if curve else None)
        if self._bg is None or bg_key != self._bg_key:
            self._bg = QImage(max(int(round(W * dpr)), 1), max(int(round(H * dpr)), 1),
                              QImage.Format.Format_RGB32)
            self._bg.setDevicePixelRatio(dpr)
            p = QPainter(self._bg)
            try:
                p.setRenderHint(QPainter.RenderHint.Antialiasing)
                p.fillRect(0, 0, W, H, QColor(250, 250, 250))
                p.setPen(QColor(30, 30, 30))
                p.drawText(QRectF(left, 0, pw, top), Qt.AlignmentFlag.AlignCenter,
                           "bound on heading (deg) vs heading")
                # not-informative band
                p.fillRect(QRectF(left, top, pw, Y(INFORMATIVE_BOUND_DEG) - top), QColor(225, 225, 225))
                p.setPen(QPen(QColor(120, 120, 120), 1))
                p.drawRect(QRectF(left, top, pw, ph))
                for d in range(lo_dec, 3):
                    v = 10.0 ** d
                    if v > ymax:
                        break
                    p.drawText(QRectF(0, Y(v) - 8, left - 4, 16),
                               Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter, f"{v:g}")
                for h in (0, 90, 180, 270, 360):
                    p.drawText(QRectF(X(h) - 20, top + ph + 2, 40, 14), Qt.AlignmentFlag.AlignCenter, str(h))
                p.drawText(QRectF(left, top + ph + 13, pw, 14), Qt.AlignmentFlag.AlignCenter,
                           "heading (deg); grey: not informative")
                if curve:
                    p.setPen(QPen(QColor(20, 70, 160), 1.6))
                    p.drawPath(self._path)
            finally:
                p.end()
            self._bg_key = bg_key
        p = QPainter(self)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        p.drawImage(0, 0, self._bg)
        # the heading of the pattern shown (it moves with the result, drawn once per step)
        yaw = float(res.request.yaw_deg) if res is not None else float(self.state.yaw_deg)
        p.setPen(QPen(QColor(200, 60, 30), 1.5))
        p.drawLine(QPointF(X(yaw), top), QPointF(X(yaw), top + ph))
        if res is not None and res.ambiguous:
            p.setPen(QPen(QColor(200, 60, 30), 1.0, Qt.PenStyle.DashLine))
            m = (yaw + 180.0) % 360.0
            p.drawLine(QPointF(X(m), top), QPointF(X(m), top + ph))
        msg = self.message()
        if msg:
            p.setPen(QColor(150, 20, 20))
            p.drawText(QRectF(left + 4, top + 2, pw - 8, ph - 4),
                       Qt.AlignmentFlag.AlignHCenter | Qt.AlignmentFlag.AlignBottom | Qt.TextFlag.TextWordWrap,
                       msg)
        p.end()

    def close_binding(self) -> None:
        """Disconnect from the state (the plot shows no more changes)."""
        for u in self._unsub:
            u()
        self._unsub.clear()
