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
- Colour scale: ``lock_scale`` keeps the colour limits taken when it was switched on
  (:attr:`ViewerState.locked_limits`, set by the window from the result shown then), so a weaker
  pattern visibly fades instead of being stretched to the full scale again.
- Head scan playback (``scan_amplitude_deg``, ``scan_steps``, ``scan_repeats``,
  ``scan_speed_deg_s``): a triangular yaw sweep about the heading at which play starts,
  :func:`scan_yaws`.
- Undo and redo (:class:`History`): every user change (:meth:`ViewerState.set` and
  :meth:`ViewerState.update` with ``record=True``) is one step; rapid changes of the same field
  (a slider drag, less than :data:`MERGE_SECONDS` apart) merge into one step.  Loading a scenario
  clears the history; scan playback does not record.
- RF field (``rf``, ``rf_MHz``, ``rf_nT``, ``rf_direction``): ``rf = "off"`` or ``"tone"``, a
  linearly polarised field of one frequency (MHz) and amplitude (nT), perpendicular to the static
  field (averaged over its azimuth about it) or parallel to it, as an ``[rf]`` tone condition of
  :mod:`retina.stages.rf`.  A tone needs the spin system (``yield.system``): with a yield function
  read from a file or a table, ``rf = "tone"`` is refused (:func:`rf_unavailable` says why).
  Loading a scenario switches RF on only when its ``[rf]`` lists exactly one condition besides
  "off" and that is a perpendicular or parallel tone (what a saved viewer state holds); otherwise
  RF is off, with the frequency, amplitude and direction of its first such tone (else 1 MHz,
  100 nT, perpendicular) ready for the control.  :func:`describe_rf` is the readout's wording.
- :meth:`ViewerState.to_scenario` writes the current pose, field, light level, ordering and (when
  on) the RF tone into a copy of the scenario, so ``retina patterns`` on it reproduces what the
  viewer shows without RF, and the ``rf`` stage (``retina run``) the RF condition.
- The model never knows its views: views and panels subscribe with :meth:`EventEmitter.connect`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

from retina.errors import InputError

__all__ = ["Event", "EventEmitter", "ViewerState", "History", "FIELDS", "DISPLAYS", "EYES", "ORDERINGS",
           "RANGES", "INTEGER_FIELDS", "MERGE_SECONDS", "scan_yaws", "RF_MODES", "RF_DIRECTIONS",
           "describe_rf", "rf_unavailable"]

#: Display choices: what the colours show.
DISPLAYS = ("modulation", "yields")
#: Eye choices: which receptors are shown.
EYES = ("both", "left", "right")
#: Ordering choices: the scenario's own model or one of :data:`retina.eye.ordering.MODELS`.
ORDERINGS = ("scenario", "aligned", "axial", "cone", "cone_no_twist", "plane", "isotropic")
#: RF choices: no RF field, or one tone (frequency and amplitude).
RF_MODES = ("off", "tone")
#: RF directions relative to the static field (:mod:`retina.stages.rf`).
RF_DIRECTIONS = ("perpendicular", "parallel")
#: RF settings when the scenario names no tone: frequency (MHz), amplitude (nT), direction.
RF_DEFAULT = (1.0, 100.0, "perpendicular")

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
    "scan_amplitude_deg": (0.0, 180.0),
    "scan_steps": (2.0, 721.0),
    "scan_repeats": (1.0, 100.0),
    "scan_speed_deg_s": (1.0, 2000.0),
    "rf_MHz": (1e-3, 1e4),
    "rf_nT": (0.0, 1e6),
}

#: Numeric fields that take whole numbers only.
INTEGER_FIELDS = ("scan_steps", "scan_repeats")

#: Units of the numeric fields, for messages and tooltips.
UNITS = {"yaw_deg": "degrees", "pitch_deg": "degrees", "roll_deg": "degrees", "intensity_uT": "uT",
         "inclination_deg": "degrees", "declination_deg": "degrees", "photons": "photons",
         "kappa": "", "scan_amplitude_deg": "degrees", "scan_steps": "steps",
         "scan_repeats": "sweeps", "scan_speed_deg_s": "deg/s", "rf_MHz": "MHz", "rf_nT": "nT"}

#: Changes of one field closer together than this (seconds) merge into one undo step.
MERGE_SECONDS = 0.6

#: The user-settable fields, in the order panels show them.
FIELDS = ("yaw_deg", "pitch_deg", "roll_deg", "intensity_uT", "inclination_deg", "declination_deg",
          "photons", "ordering", "kappa", "display", "eye", "lock_scale", "scan_amplitude_deg",
          "scan_steps",
          "scan_repeats", "scan_speed_deg_s", "rf", "rf_MHz", "rf_nT", "rf_direction")


def describe_rf(rf) -> str:
    """The readout's words for an RF setting.

    Parameters
    ----------
    rf : tuple (float, float, str) or None
        ``(frequency_MHz, amplitude_nT, direction)`` of a tone (MHz, nT peak, "perpendicular" or
        "parallel"), or None for no RF.

    Returns
    -------
    str
        "RF off", or e.g. "RF 1.2 MHz, 500 nT, perpendicular".
    """
    if rf is None:
        return "RF off"
    f, b, d = rf
    return f"RF {float(f):g} MHz, {float(b):g} nT, {d}"


def rf_unavailable(scenario) -> str | None:
    """Why the scenario cannot take an RF field in the viewer: RF acts on the spin system, so the
    yield function must be computed from one (``yield.system``).

    Parameters
    ----------
    scenario : retina.scenario.Scenario or None

    Returns
    -------
    str or None
        One sentence naming the scenario's yield source, or None when RF can be applied.
    """
    if scenario is None:
        return "no scenario loaded"
    kind, path = scenario.yield_source
    if kind == "system":
        return None
    name = getattr(path, "name", str(path))
    return (f"RF needs the spin system (yield.system): this scenario's yield function is read from "
            f"{name} (yield.{kind}), which holds the static yield only")


def _rf_from_scenario(scenario) -> dict:
    """The RF fields a scenario starts with (module docstring)."""
    conds = [c for c in scenario["rf"]["conditions"] if c["kind"] != "off"]
    tones = [c for c in conds if c["kind"] == "tone" and c["direction"] in RF_DIRECTIONS]
    f, b, d = RF_DEFAULT
    if tones:
        f, b, d = tones[0]["frequency_MHz"], tones[0]["amplitude_nT"], tones[0]["direction"]
    on = len(conds) == 1 and len(tones) == 1 and rf_unavailable(scenario) is None
    return {"rf": "tone" if on else "off", "rf_MHz": f, "rf_nT": b, "rf_direction": d}


def scan_yaws(centre_deg: float, amplitude_deg: float, steps: int, repeats: int):
    """Yaw of every look of a played head scan, degrees, shape ``(L,)``.

    A triangular sweep: ``steps`` looks evenly spaced from ``centre - amplitude`` to
    ``centre + amplitude`` and back, ``repeats`` times (out and back is one repeat; the turning
    points are not visited twice), ending where it started; ``L = repeats * 2 * (steps - 1) + 1``.
    Amplitude 0 is ``L`` looks at the centre.

    Parameters
    ----------
    centre_deg : float
        The heading where the scan starts and ends, degrees.
    amplitude_deg : float
        Half the sweep, degrees (the head turns to ``centre +/- amplitude``).
    steps : int
        Looks from one end of the sweep to the other, ends included (>= 2).
    repeats : int
        Out-and-back sweeps (>= 1).

    Returns
    -------
    numpy.ndarray, shape (L,)
        Yaw of each look in degrees, wrapped to ``[0, 360)``.
    """
    import numpy as np

    steps, repeats = int(steps), int(repeats)
    out = np.linspace(centre_deg - amplitude_deg, centre_deg + amplitude_deg, steps)
    one = np.concatenate([out, out[-2::-1]])  # out and back: 2 * steps - 1 looks
    yaws = np.concatenate([one[:-1]] * repeats + [one[-1:]])
    return yaws % 360.0


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
        """Call ``callback(event)`` on every event ``name``.

        Parameters
        ----------
        name : str
            A field name of :data:`FIELDS`, another event name (``"scenario"``, ``"result"``) or
            ``"*"`` for every event.
        callback : callable(Event)
            Called synchronously with one :class:`Event`.

        Returns
        -------
        callable()
            Disconnects the callback (a second call does nothing).
        """
        if not callable(callback):
            raise InputError(f"expected a callable, got {type(callback).__name__}", key="callback")
        self._subs.setdefault(name, []).append(callback)

        def disconnect():
            subs = self._subs.get(name, [])
            if callback in subs:
                subs.remove(callback)

        return disconnect

    def emit(self, name: str, value: Any, old: Any = None) -> None:
        """Call every callback of ``name`` and of ``"*"`` with one :class:`Event`.

        Parameters
        ----------
        name : str
            The event name.
        value : object
            The new value.
        old : object, optional
            The value before the change.
        """
        ev = Event(name, value, old)
        for cb in list(self._subs.get(name, ())) + list(self._subs.get("*", ())):
            cb(ev)

    def n_subscribers(self, name: str | None = None) -> int:
        """How many callbacks listen to ``name``.

        Parameters
        ----------
        name : str or None, optional
            An event name; None counts the callbacks of every name.

        Returns
        -------
        int
        """
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


class History:
    """Undo and redo of user changes (module docstring).

    Each step maps field names to ``(old, new)`` values.  ``clock`` returns seconds (injectable for
    tests).
    """

    def __init__(self, clock=None, merge_seconds: float = MERGE_SECONDS):
        import time

        self._clock = clock or time.monotonic
        self.merge_seconds = float(merge_seconds)
        self._undo: list[dict] = []
        self._redo: list[dict] = []
        self._last = None  # (time, names) of the last recorded step, for merging

    def record(self, changes: dict) -> None:
        """Record one step; a step with the same fields within :attr:`merge_seconds` of the last
        one is merged into it (a slider drag is one step).

        Parameters
        ----------
        changes : dict
            ``{name: (old, new)}`` for each field the step changed.
        """
        if not changes:
            return
        now = self._clock()
        names = frozenset(changes)
        if (self._undo and self._last is not None and self._last[1] == names
                and now - self._last[0] < self.merge_seconds):
            step = self._undo[-1]
            for k, (_, new) in changes.items():
                step[k] = (step[k][0], new)
        else:
            self._undo.append(dict(changes))
        self._last = (now, names)
        self._redo.clear()

    def clear(self) -> None:
        """Forget every undo and redo step."""
        self._undo.clear()
        self._redo.clear()
        self._last = None

    @property
    def can_undo(self) -> bool:
        return bool(self._undo)

    @property
    def can_redo(self) -> bool:
        return bool(self._redo)

    def _move(self, src: list, dst: list, side: int) -> dict | None:
        """Move the newest step from ``src`` to ``dst``; the values on ``side`` (0 old, 1 new)."""
        if not src:
            return None
        step = src.pop()
        dst.append(step)
        self._last = None
        return {k: pair[side] for k, pair in step.items()}

    def pop_undo(self) -> dict | None:
        """Take the newest step off the undo list (it can be redone).

        Returns
        -------
        dict or None
            ``{name: old value}`` to set, or None when there is nothing to undo.
        """
        return self._move(self._undo, self._redo, 0)

    def pop_redo(self) -> dict | None:
        """Take the newest undone step off the redo list (it can be undone again).

        Returns
        -------
        dict or None
            ``{name: new value}`` to set, or None when there is nothing to redo.
        """
        return self._move(self._redo, self._undo, 1)


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
    history : History
        Undo and redo of user changes.
    """

    def __init__(self, scenario=None):
        self.events = EventEmitter()
        self._scenario = None
        self._v: dict[str, Any] = {
            "yaw_deg": 0.0, "pitch_deg": 0.0, "roll_deg": 0.0, "intensity_uT": 50.0,
            "inclination_deg": 60.0, "declination_deg": 0.0, "photons": 300.0, "ordering": "scenario",
            "kappa": None,
            "display": "modulation", "eye": "both", "lock_scale": False,
            "scan_amplitude_deg": 45.0, "scan_steps": 13, "scan_repeats": 1, "scan_speed_deg_s": 90.0,
            "rf": "off", "rf_MHz": RF_DEFAULT[0], "rf_nT": RF_DEFAULT[1], "rf_direction": RF_DEFAULT[2],
        }
        self._result = None
        self._serial = 0
        self.history = History()
        #: Colour limits per display kept while ``lock_scale`` is on: {"modulation": (lo, hi), ...}.
        self.locked_limits: dict = {}
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
                unit = UNITS.get(name, "")
                raise InputError(f"expected a value in [{lo:g}, {hi:g}]{' ' + unit if unit else ''}, "
                                 f"got {value!r}", source=src, key=name)
            if name in INTEGER_FIELDS:
                if v != int(v):
                    raise InputError(f"expected a whole number, got {value!r}", source=src, key=name)
                return int(v)
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
        if name == "rf":
            if value not in RF_MODES:
                raise InputError(f"expected one of {RF_MODES}, got {value!r}", source=src, key=name)
            why = rf_unavailable(self._scenario) if value != "off" else None
            if why is not None:
                raise InputError(why, source=src, key=name)
            return value
        if name == "rf_direction":
            if value not in RF_DIRECTIONS:
                raise InputError(f"expected one of {RF_DIRECTIONS}, got {value!r}", source=src, key=name)
            return value
        if name == "lock_scale":
            if not isinstance(value, bool):
                raise InputError(f"expected true or false, got {value!r}", source=src, key=name)
            return value
        raise InputError(f"unknown viewer setting {name!r}; expected one of {FIELDS}", key=name)

    def set(self, name: str, value, *, record: bool = True) -> bool:
        """Validate and set one field; emit its event if the value changed.

        Parameters
        ----------
        name : str
            One of :data:`FIELDS`.
        value : object
            The new value, in the field's unit (module docstring: degrees, uT, photons, MHz, nT).
        record : bool, optional
            Make the change one undo step (:class:`History`).

        Returns
        -------
        bool
            Whether the value changed.

        Raises
        ------
        retina.errors.InputError
            An unknown field or a value out of its range (naming the field).
        """
        v = self._validate(name, value)
        old = self._v[name]
        if v == old:
            return False
        self._v[name] = v
        if record:
            self.history.record({name: (old, v)})
        self.events.emit(name, v, old)
        return True

    def get(self, name: str):
        """The value of one field.

        Parameters
        ----------
        name : str
            One of :data:`FIELDS`.

        Returns
        -------
        object
            The value, in the field's unit.
        """
        if name not in self._v:
            raise InputError(f"unknown viewer setting {name!r}; expected one of {FIELDS}", key=name)
        return self._v[name]

    def update(self, *, record: bool = True, **values) -> list[str]:
        """Validate every value first, then set them (one event per changed field, in
        :data:`FIELDS` order): all or nothing.

        Parameters
        ----------
        record : bool, optional
            Make the changes one undo step.
        **values
            ``name=value`` for fields of :data:`FIELDS`.

        Returns
        -------
        list of str
            The names that changed.
        """
        checked = {k: self._validate(k, v) for k, v in values.items()}
        changed, step = [], {}
        for k in FIELDS:
            if k in checked:
                old = self._v[k]
                if self.set(k, checked[k], record=False):
                    changed.append(k)
                    step[k] = (old, self._v[k])
        if record:
            self.history.record(step)
        return changed

    def undo(self) -> list[str]:
        """Undo the last user change.

        Returns
        -------
        list of str
            The fields changed (empty when there is nothing to undo).
        """
        vals = self.history.pop_undo()
        return [] if vals is None else self.update(record=False, **vals)

    def redo(self) -> list[str]:
        """Redo the last undone change.

        Returns
        -------
        list of str
            The fields changed (empty when there is nothing to redo).
        """
        vals = self.history.pop_redo()
        return [] if vals is None else self.update(record=False, **vals)

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
        Scan: ``scan.amplitude_deg`` and ``scan.steps``.  RF: as the module docstring says.  Emits
        only ``"scenario"``, after every value is set (subscribers read the new values from the
        state), so one change of scenario makes one request.  Clears the undo history.

        Parameters
        ----------
        scenario : retina.scenario.Scenario

        Raises
        ------
        retina.errors.InputError
            Not a scenario, or a value of it outside the viewer's ranges.
        """
        from retina.scenario import Scenario

        if not isinstance(scenario, Scenario):
            raise InputError(f"expected a Scenario, got {type(scenario).__name__}", key="scenario")
        from retina.build import build_field

        fld = build_field(scenario)
        p = scenario["pose"]
        sc_scan = scenario["scan"]
        values = dict(yaw_deg=p["headings_deg"][0], pitch_deg=p["pitch_deg"],
                      roll_deg=p["roll_deg"], intensity_uT=fld.F_uT, inclination_deg=fld.I_deg,
                      declination_deg=((fld.D_deg + 180.0) % 360.0) - 180.0,
                      photons=max(scenario["light"]["photons"]), ordering="scenario", kappa=None,
                      scan_amplitude_deg=sc_scan["amplitude_deg"], scan_steps=sc_scan["steps"])
        values.update(_rf_from_scenario(scenario))
        old = self._scenario
        self._scenario = scenario
        checked = {k: self._validate(k, v) for k, v in values.items()}
        self._v.update(checked)
        self._result = None
        self.events.emit("scenario", scenario, old)
        self.history.clear()

    def to_scenario(self):
        """A copy of the scenario with the current pose, field, light and ordering (module
        docstring): ``pose.headings_deg = [yaw]``, pitch and roll; the field as intensity,
        inclination and declination; ``light.photons = [photons]``; with a model or kappa override,
        the scenario's ordering with that model and kappa in ensemble mode; ``yield.field_uT`` kept;
        with RF on, ``[rf] conditions`` is that one tone (named by :func:`describe_rf`).

        Returns
        -------
        retina.scenario.Scenario

        Raises
        ------
        retina.errors.InputError
            No scenario is loaded.
        """
        sc = self._scenario
        if sc is None:
            raise InputError("no scenario loaded; open one with File > Open scenario", key="scenario")
        v = self._v
        field = {"intensity_uT": v["intensity_uT"], "inclination_deg": v["inclination_deg"],
                 "declination_deg": v["declination_deg"], "latitude_deg": None,
                 "longitude_deg": None, "date": None}
        sections = {"pose": {"headings_deg": [v["yaw_deg"]], "pitch_deg": v["pitch_deg"],
                             "roll_deg": v["roll_deg"]},
                    "field": field,
                    "light": {"photons": [v["photons"]], "names": ["viewer"]},
                    "scan": {"heading_deg": v["yaw_deg"], "amplitude_deg": v["scan_amplitude_deg"],
                             "steps": v["scan_steps"], "pitch_deg": v["pitch_deg"]}}
        if sc["rf"].get("sweep_light") is not None:
            sections["rf"] = {"sweep_light": "viewer"}  # the one light level a saved state has
        rf = self.rf_setting()
        if rf is not None:
            tone = {"name": describe_rf(rf), "kind": "tone", "frequency_MHz": rf[0], "amplitude_nT": rf[1],
                    "direction": rf[2]}
            sections.setdefault("rf", {})["conditions"] = [tone]
        if v["kappa"] is not None or v["ordering"] != "scenario":
            o = dict(sc["ordering"])
            if v["ordering"] != "scenario":
                o["model"] = v["ordering"]
            elif v["kappa"] is not None and o["model"] in ("aligned", "axial", "isotropic"):
                o["model"] = "cone"  # a kappa override of a model without one: a cone (build_ordering)
            if v["kappa"] is not None:
                o["kappa"] = v["kappa"]
            o["mode"] = "ensemble"
            sections["ordering"] = o
        return sc.replace(**sections)

    # ---------------------------------------------------------------- derived state
    def rf_setting(self):
        """The RF field asked for.

        Returns
        -------
        tuple (float, float, str) or None
            None (RF off) or ``(frequency_MHz, amplitude_nT, direction)``: MHz, nT (peak),
            "perpendicular" or "parallel".
        """
        v = self._v
        return None if v["rf"] == "off" else (v["rf_MHz"], v["rf_nT"], v["rf_direction"])

    def request(self):
        """A request for the pattern of the current state.

        Returns
        -------
        retina_viewer.workers.PatternRequest
            Frozen; serial numbers increase by one per call.
        """
        from .workers import PatternRequest

        self._serial += 1
        v = self._v
        return PatternRequest(serial=self._serial, scenario=self._scenario, yaw_deg=v["yaw_deg"],
                              pitch_deg=v["pitch_deg"], roll_deg=v["roll_deg"],
                              intensity_uT=v["intensity_uT"], inclination_deg=v["inclination_deg"],
                              declination_deg=v["declination_deg"], photons=v["photons"],
                              ordering=v["ordering"], kappa=v["kappa"], rf=self.rf_setting())

    @property
    def result(self):
        """The latest :class:`retina_viewer.workers.PatternResult` (or None before the first)."""
        return self._result

    def set_result(self, result) -> None:
        """Store a worker's result and emit ``"result"`` (results for another scenario are
        ignored).

        Parameters
        ----------
        result : retina_viewer.workers.PatternResult
        """
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
