"""Qt widgets bound both ways to the viewer state.

Conventions (owned here)
------------------------
- A widget writes through the state's validating setter (:mod:`retina_viewer.state`) and listens to the
  state's event for its field; while it shows a value that came from the state it blocks its own
  signals, so a change never echoes back (no feedback loop).
- Numeric controls pair a slider (coarse, drag) with a spin box (exact, typed); log-scaled fields
  (photons, kappa) move the slider in equal steps of ``log10``; the far left of the kappa slider
  is 0 (no order: isotropic for the "cone" and "plane" models).
- The readout panel shows the numbers of the latest worker result (:mod:`retina_viewer.workers`) with their
  units; it never computes anything itself.
"""

from __future__ import annotations

import math

import numpy as np
from PyQt6.QtCore import Qt
from PyQt6.QtWidgets import (QComboBox, QDoubleSpinBox, QFormLayout, QGridLayout, QGroupBox,
                             QLabel, QSlider, QToolButton, QVBoxLayout, QWidget)

from retina.errors import InputError

__all__ = ["BoundSlider", "ChoiceBox", "ControlPanel", "ReadoutPanel", "CONTROLS"]

_TICKS = 1000

#: (field, label, unit suffix, slider range, decimals, spin step, log scale) of every numeric control.
CONTROLS = (
    ("yaw_deg", "heading (yaw)", " deg", (0.0, 360.0), 1, 1.0, False),
    ("pitch_deg", "pitch (nose up +)", " deg", (-90.0, 90.0), 1, 1.0, False),
    ("roll_deg", "roll (right down +)", " deg", (-180.0, 180.0), 1, 1.0, False),
    ("intensity_uT", "intensity", " uT", (10.0, 100.0), 1, 1.0, False),
    ("inclination_deg", "inclination (down +)", " deg", (-90.0, 90.0), 1, 1.0, False),
    ("declination_deg", "declination (east +)", " deg", (-180.0, 180.0), 1, 1.0, False),
    ("photons", "light (photons/receptor)", "", (1.0, 1e6), 1, 10.0, True),
    ("kappa", "ordering kappa", "", (0.1, 1000.0), 2, 1.0, True),
)


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
    name : str
        The state field.
    label, unit : str
    span : tuple of float
        Slider range (the spin box accepts the state's full range where it is wider).
    decimals : int
    step : float
        Spin-box step (for log fields: a multiplicative step is not used; the step is additive).
    log : bool
        Log-scaled slider.
    """

    def __init__(self, state, name, label, unit, span, decimals=1, step=1.0, log=False, parent=None):
        super().__init__(parent)
        from .state import RANGES

        self.state, self.name, self.log = state, name, bool(log)
        self.lo, self.hi = float(span[0]), float(span[1])
        self.label = QLabel(label)
        self.slider = QSlider(Qt.Orientation.Horizontal)
        self.slider.setRange(0, _TICKS)
        self.slider.setFocusPolicy(Qt.FocusPolicy.ClickFocus)
        self.spin = QDoubleSpinBox()
        full = RANGES.get(name, span)
        if name == "yaw_deg":
            self.spin.setRange(0.0, 359.9)
        else:
            lo = max(full[0], 10.0 ** -decimals) if log and name != "kappa" else full[0]
            self.spin.setRange(lo, full[1])
        if name == "yaw_deg":
            self.spin.setWrapping(True)
        self.spin.setDecimals(decimals)
        self.spin.setSingleStep(step)
        self.spin.setSuffix(unit)
        self.spin.setKeyboardTracking(False)
        self.spin.setMinimumWidth(92)
        self.reset = None
        lay = QGridLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.label, 0, 0, 1, 2)
        lay.addWidget(self.slider, 1, 0)
        lay.addWidget(self.spin, 1, 1)
        if name == "kappa":
            self.reset = QToolButton()
            self.reset.setText("scenario")
            self.reset.setToolTip("use the scenario's own ordering model")
            self.reset.clicked.connect(lambda: self.state.set("kappa", None))
            lay.addWidget(self.reset, 1, 2)
        self.slider.valueChanged.connect(self._from_slider)
        self.spin.valueChanged.connect(self._from_spin)
        self._unsub = [state.events.connect(name, lambda e: self.sync()),
                       state.events.connect("scenario", lambda e: self.sync())]
        self.sync()

    # value <-> slider position
    def to_ticks(self, v: float) -> int:
        if self.name == "kappa" and v <= 0:
            return 0
        if self.log:
            t = (math.log10(max(v, 1e-300)) - math.log10(self.lo)) / (math.log10(self.hi) - math.log10(self.lo))
        else:
            t = (v - self.lo) / (self.hi - self.lo)
        return int(round(min(max(t, 0.0), 1.0) * _TICKS))

    def from_ticks(self, k: int) -> float:
        if self.name == "kappa" and k == 0:
            return 0.0  # the far left: no order
        t = k / _TICKS
        if self.log:
            return 10.0 ** (math.log10(self.lo) + t * (math.log10(self.hi) - math.log10(self.lo)))
        return self.lo + t * (self.hi - self.lo)

    def value(self) -> float:
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
        for u in self._unsub:
            u()
        self._unsub.clear()


_ORDERING_TIP = ("scenario: the scenario's own model; aligned; axial: free rotation about the receptor "
                 "axis; cone: a vMF cone with the twist as the scenario says (tied: isotropic at kappa 0); "
                 "cone_no_twist: the cone without twist (not isotropic at kappa 0); plane: a molecular "
                 "direction in the membrane plane (Watson girdle kappa); isotropic: no order")


class ChoiceBox(QComboBox):
    """A combo box bound to a choice field of the state (``display``, ``eye`` or ``ordering``)."""

    def __init__(self, state, name, choices, parent=None):
        super().__init__(parent)
        self.state, self.name = state, name
        self.addItems(list(choices))
        self.currentTextChanged.connect(lambda t: self.state.set(self.name, t))
        self._unsub = [state.events.connect(name, lambda e: self.sync())]
        self.sync()

    def sync(self) -> None:
        self.blockSignals(True)
        try:
            self.setCurrentText(self.state.get(self.name))
        finally:
            self.blockSignals(False)

    def close_binding(self) -> None:
        for u in self._unsub:
            u()
        self._unsub.clear()


class ControlPanel(QWidget):
    """All controls: head pose, field, receptors and light, display.

    Attributes
    ----------
    controls : dict
        Field name -> :class:`BoundSlider` or :class:`ChoiceBox`.
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
        row.addWidget(QLabel("colour by"), 0, 0)
        row.addWidget(self.controls["display"], 0, 1)
        row.addWidget(QLabel("eye"), 0, 2)
        row.addWidget(self.controls["eye"], 0, 3)
        lay.addWidget(box)
        groups = (("Head pose (arrow keys turn and tilt)", ("yaw_deg", "pitch_deg", "roll_deg")),
                  ("Geomagnetic field", ("intensity_uT", "inclination_deg", "declination_deg")),
                  ("Receptors and light", ("photons", "ordering", "kappa")))
        spec = {c[0]: c for c in CONTROLS}
        for title, names in groups:
            box = QGroupBox(title)
            bl = QVBoxLayout(box)
            bl.setSpacing(2)
            for n in names:
                if n == "ordering":
                    from .state import ORDERINGS

                    self.controls[n] = ChoiceBox(state, n, ORDERINGS)
                    self.controls[n].setToolTip(_ORDERING_TIP)
                    bl.addWidget(QLabel("ordering model"))
                    bl.addWidget(self.controls[n])
                    continue
                _, label, unit, span, dec, step, log = spec[n]
                w = BoundSlider(state, n, label, unit, span, dec, step, log)
                self.controls[n] = w
                bl.addWidget(w)
            lay.addWidget(box)
        lay.addStretch(1)

    def close_bindings(self) -> None:
        for w in self.controls.values():
            w.close_binding()


def _fmt_deg(v: float) -> str:
    return "no information (infinite)" if not np.isfinite(v) else f"{v:.2f} deg"


class ReadoutPanel(QGroupBox):
    """Live numbers of the latest result (module docstring)."""

    ROWS = (("depth", "modulation depth"), ("bound", "Cramer-Rao bound here"),
            ("rms", "bound, rms over headings"), ("light", "light level"),
            ("bhead", "field in head (az, el)"), ("yield", "yield function"),
            ("time", "computed in"))

    def __init__(self, state, parent=None):
        super().__init__("Readout", parent)
        self.state = state
        fl = QFormLayout(self)
        self.labels = {}
        for key, text in self.ROWS:
            lab = QLabel("-")
            lab.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
            self.labels[key] = lab
            fl.addRow(text, lab)
        self._unsub = [state.events.connect("result", lambda e: self.refresh()),
                       state.events.connect("scenario", lambda e: self.clear())]

    def clear(self) -> None:
        for lab in self.labels.values():
            lab.setText("-")

    def refresh(self) -> None:
        res = self.state.result
        if res is None:
            self.clear()
            return
        b = np.asarray(res.pattern.b_head, float)
        az = math.degrees(math.atan2(b[1], b[0]))
        el = math.degrees(math.asin(max(-1.0, min(1.0, -b[2]))))
        nuis = res.request.scenario["readout"]["nuisance"]
        self.labels["depth"].setText(f"{100.0 * res.depth:.2f} %")
        self.labels["bound"].setText(_fmt_deg(res.bound_deg))
        self.labels["rms"].setText(_fmt_deg(res.rms_bound_deg))
        self.labels["light"].setText(f"{res.request.photons:.4g} photons"
                                     + (", gain unknown" if nuis == "gain" else ""))
        self.labels["bhead"].setText(f"{az:.1f} deg, {el:.1f} deg")
        F = res.yield_field_uT
        self.labels["yield"].setText((f"at {F:g} uT" if np.isfinite(F) else "field not recorded")
                                     + " (hover: source)")
        self.labels["yield"].setToolTip(res.yield_note)
        self.labels["time"].setText(f"{1000.0 * res.seconds:.1f} ms")

    def close_binding(self) -> None:
        for u in self._unsub:
            u()
        self._unsub.clear()
