"""The viewer's state model: plain Python, no Qt.

Conventions (owned here)
------------------------
- One :class:`ViewerState` holds everything the user can change: the scenario, the head pose
  (yaw, pitch, roll; degrees, :mod:`retina.eye.pose`), the field (intensity in microtesla,
  inclination and declination in degrees, :mod:`retina.eye.field`), the light level (photons per
  receptor per look, :mod:`retina.signal.light`), the molecular ordering model ``ordering``
  (``"scenario"``: the scenario's own model, or one of :data:`retina.eye.ordering.MODELS`) and its
  concentration ``kappa`` (``None``: the scenario's own; 0 reaches isotropy for "cone" and "plane",
  :func:`retina.build.build_ordering`) and the display choice (``"modulation"`` or ``"yields"``;
  eye ``"both"``, ``"left"`` or ``"right"``).
- Every field is a validating property: a bad value raises :class:`retina.errors.InputError`
  naming the key and what was expected (``source`` is the scenario file when there is one); a
  value equal to the current one emits nothing; a changed value emits exactly one
  :class:`Event` named after the field.  Yaw is wrapped into [0, 360).
- Derived state (the current pattern and its readout numbers) is not computed here: the window
  asks a worker (:mod:`retina_viewer.workers`) with :meth:`ViewerState.request` and stores the answer with
  :meth:`ViewerState.set_result`, which emits ``"result"``.
- The model never knows its views: views and panels subscribe with :meth:`EventEmitter.connect`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from retina.errors import InputError

__all__ = ["Event", "EventEmitter", "ViewerState", "FIELDS", "DISPLAYS", "EYES", "ORDERINGS", "RANGES"]

#: Display choices: what the colours show.
DISPLAYS = ("modulation", "yields")
#: Eye choices: which receptors are shown.
EYES = ("both", "left", "right")
#: Ordering choices: the scenario's own model or one of :data:`retina.eye.ordering.MODELS`.
ORDERINGS = ("scenario", "aligned", "axial", "cone", "cone_no_twist", "plane", "isotropic")

#: Accepted ranges (inclusive) of the numeric fields, in their units.  The intensity range is the
#: scenario schema's (:mod:`retina.scenario`); photons must be positive, kappa may be 0 (no order).
RANGES: dict[str, tuple[float, float]] = {
    "pitch_deg": (-90.0, 90.0),
    "roll_deg": (-180.0, 180.0),
    "intensity_uT": (1.0, 1000.0),
    "inclination_deg": (-90.0, 90.0),
    "declination_deg": (-180.0, 180.0),
    "photons": (1e-3, 1e9),
    "kappa": (0.0, 1e6),
}

#: The user-settable fields, in the order panels show them.
FIELDS = ("yaw_deg", "pitch_deg", "roll_deg", "intensity_uT", "inclination_deg", "declination_deg",
          "photons", "ordering", "kappa", "display", "eye")


@dataclass(frozen=True)
class Event:
    """One change: the field ``name``, its new ``value`` and the ``old`` one."""

    name: str
    value: Any
    old: Any = None


class EventEmitter:
    """A tiny publish-subscribe hub: callbacks per event name, or ``"*"`` for every event.

    Callbacks are called synchronously, in the order they were connected, with one
    :class:`Event`.  An exception in a callback propagates to the code that changed the state.
    """

    def __init__(self):
        self._subs: dict[str, list[Callable[[Event], None]]] = {}

    def connect(self, name: str, callback: Callable[[Event], None]) -> Callable[[], None]:
        """Call ``callback(event)`` on every event ``name``; return a function that disconnects."""
        if not callable(callback):
            raise InputError(f"expected a callable, got {type(callback).__name__}", key="callback")
        self._subs.setdefault(name, []).append(callback)

        def disconnect():
            subs = self._subs.get(name, [])
            if callback in subs:
                subs.remove(callback)

        return disconnect

    def emit(self, name: str, value: Any, old: Any = None) -> None:
        ev = Event(name, value, old)
        for cb in list(self._subs.get(name, ())) + list(self._subs.get("*", ())):
            cb(ev)

    def n_subscribers(self, name: str | None = None) -> int:
        """How many callbacks listen to ``name`` (all names when ``None``)."""
        if name is None:
            return sum(len(v) for v in self._subs.values())
        return len(self._subs.get(name, ()))


def _number(name: str, value, source) -> float:
    if isinstance(value, bool):
        raise InputError(f"expected a number, got {value!r}", source=source, key=name)
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"expected a number, got {value!r}", source=source, key=name) from None
    if not math.isfinite(v):
        raise InputError(f"expected a finite number, got {value!r}", source=source, key=name)
    return v


class ViewerState:
    """Everything the viewer shows, with validating setters and one event per changed field.

    Parameters
    ----------
    scenario : retina.scenario.Scenario, optional
        Initial values come from it (:meth:`load_scenario`); without one the defaults are a level
        head facing north in a 50 uT field inclined 60 degrees, 300 photons, the scenario ordering.

    Attributes
    ----------
    events : EventEmitter
        Event names: the :data:`FIELDS`, ``"scenario"`` and ``"result"``.
    """

    def __init__(self, scenario=None):
        self.events = EventEmitter()
        self._scenario = None
        self._v: dict[str, Any] = {
            "yaw_deg": 0.0, "pitch_deg": 0.0, "roll_deg": 0.0, "intensity_uT": 50.0,
            "inclination_deg": 60.0, "declination_deg": 0.0, "photons": 300.0, "ordering": "scenario",
            "kappa": None,
            "display": "modulation", "eye": "both",
        }
        self._result = None
        self._serial = 0
        if scenario is not None:
            self.load_scenario(scenario)

    # ---------------------------------------------------------------- validation
    @property
    def _source(self):
        sc = self._scenario
        return None if sc is None else sc.source

    def _validate(self, name: str, value):
        src = self._source
        if name == "yaw_deg":
            return _number(name, value, src) % 360.0
        if name in RANGES:
            if name == "kappa" and value is None:
                return None
            v = _number(name, value, src)
            lo, hi = RANGES[name]
            if not lo <= v <= hi:
                unit = {"intensity_uT": " uT", "photons": " photons", "kappa": ""}.get(name, " degrees")
                raise InputError(f"expected a value in [{lo:g}, {hi:g}]{unit}, got {value!r}",
                                 source=src, key=name)
            return v
        if name == "display":
            if value not in DISPLAYS:
                raise InputError(f"expected one of {DISPLAYS}, got {value!r}", source=src, key=name)
            return value
        if name == "ordering":
            if value not in ORDERINGS:
                raise InputError(f"expected one of {ORDERINGS}, got {value!r}", source=src, key=name)
            return value
        if name == "eye":
            if value not in EYES:
                raise InputError(f"expected one of {EYES}, got {value!r}", source=src, key=name)
            return value
        raise InputError(f"unknown viewer setting {name!r}; expected one of {FIELDS}", key=name)

    def set(self, name: str, value) -> bool:
        """Validate and set one field; emit its event if the value changed.  Returns whether it
        changed."""
        v = self._validate(name, value)
        old = self._v[name]
        if v == old:
            return False
        self._v[name] = v
        self.events.emit(name, v, old)
        return True

    def get(self, name: str):
        if name not in self._v:
            raise InputError(f"unknown viewer setting {name!r}; expected one of {FIELDS}", key=name)
        return self._v[name]

    def update(self, **values) -> list[str]:
        """Validate every value first, then set them (one event per changed field, in
        :data:`FIELDS` order).  Returns the names that changed."""
        checked = {k: self._validate(k, v) for k, v in values.items()}
        changed = []
        for k in FIELDS:
            if k in checked and self.set(k, checked[k]):
                changed.append(k)
        return changed

    # ---------------------------------------------------------------- scenario
    @property
    def scenario(self):
        """The current :class:`retina.scenario.Scenario` (or None)."""
        return self._scenario

    @property
    def scenario_path(self) -> Path | None:
        return self._source

    def load_scenario(self, scenario) -> None:
        """Take a new scenario and reset the pose, field, light and ordering from it.

        Pose: the first of ``pose.headings_deg`` with ``pose.pitch_deg`` and ``pose.roll_deg``.
        Field: the given components, or the IGRF field at the scenario's place and date.  Light:
        the brightest of ``light.photons``.  Ordering: the scenario's own (``ordering =
        "scenario"``, ``kappa = None``).
        Emits ``"scenario"`` and then one event per changed field.
        """
        from retina.scenario import Scenario

        if not isinstance(scenario, Scenario):
            raise InputError(f"expected a Scenario, got {type(scenario).__name__}", key="scenario")
        from retina.build import build_field

        fld = build_field(scenario)
        p = scenario["pose"]
        old = self._scenario
        self._scenario = scenario
        self._result = None
        self.events.emit("scenario", scenario, old)
        self.update(yaw_deg=p["headings_deg"][0], pitch_deg=p["pitch_deg"],
                    roll_deg=p["roll_deg"], intensity_uT=fld.F_uT, inclination_deg=fld.I_deg,
                    declination_deg=((fld.D_deg + 180.0) % 360.0) - 180.0,
                    photons=max(scenario["light"]["photons"]), ordering="scenario", kappa=None)

    # ---------------------------------------------------------------- derived state
    def request(self):
        """A frozen :class:`retina_viewer.workers.PatternRequest` of the current state (serial numbers
        increase by one per call)."""
        from .workers import PatternRequest

        self._serial += 1
        v = self._v
        return PatternRequest(serial=self._serial, scenario=self._scenario, yaw_deg=v["yaw_deg"],
                              pitch_deg=v["pitch_deg"], roll_deg=v["roll_deg"],
                              intensity_uT=v["intensity_uT"], inclination_deg=v["inclination_deg"],
                              declination_deg=v["declination_deg"], photons=v["photons"],
                              ordering=v["ordering"], kappa=v["kappa"])

    @property
    def result(self):
        """The latest :class:`retina_viewer.workers.PatternResult` (or None before the first)."""
        return self._result

    def set_result(self, result) -> None:
        """Store a worker's result and emit ``"result"`` (results for another scenario are
        ignored)."""
        if result.request.scenario is not self._scenario:
            return
        old = self._result
        self._result = result
        self.events.emit("result", result, old)


def _make_property(name: str):
    def fget(self):
        return self._v[name]

    def fset(self, value):
        self.set(name, value)

    return property(fget, fset, doc=f"``{name}`` (validated; emits ``{name!r}`` when changed).")


for _n in FIELDS:
    setattr(ViewerState, _n, _make_property(_n))
del _n
