"""Scenario files: one TOML file names everything an end-to-end run needs.

A scenario is read by the CLI, the viewer and the Python API alike.  :func:`load_scenario`
validates it against the schema below and returns a :class:`Scenario` whose ``data`` holds every
key with its default filled in and every path made absolute; :func:`dump_scenario` writes that
back to TOML so that ``load -> dump -> load`` gives an equal scenario.

Schema (section, key, type, default; units in the key name)
-------------------------------------------------------------
``[scenario]``
    ``name`` (str, "unnamed"), ``description`` (str, ""), ``seed`` (int >= 0, 0): the one seed from
    which every random stream of the run is derived.
``[yield]`` (exactly one of ``system``, ``file``, ``import``)
    ``system`` (path to a spin-system TOML file: the yield function is computed),
    ``file`` (path to a native yield-function HDF5 file: loaded),
    ``import`` (path to another engine's table, CSV/NPZ/HDF5: imported and fitted),
    ``degree`` (even int 2..40, 12): spherical-harmonic degree of the yield function,
    ``field_uT`` (float > 0, optional): field strength for the spin computation; defaults to the
    scenario's field intensity,
    ``method`` ("auto" | "hilbert" | "liouville" | "separable", "auto").
``[ordering]`` (the models of :mod:`retina.eye.ordering`, via :func:`~retina.eye.ordering.from_settings`)
    ``model`` ("aligned" | "axial" | "cone" | "cone_no_twist" | "plane" | "isotropic", "cone"):
    how the molecules sit in a receptor: fixed in the receptor frame; free rotation about the
    receptor axis; a von Mises-Fisher cone of the molecular direction that the orientation puts on
    the receptor axis, with a twist about it (``Cone``); the same cone without twist
    (``ConeNoTwist``, kept for comparison: not isotropic at kappa 0); the molecular direction that
    the orientation puts on the receptor ``x`` axis restrained to the plane normal to the receptor
    axis (a membrane), softened by a Watson girdle (``Planar``); no order.  Scenario files written
    before the twist was modelled keep ``model = "cone"`` and now get the cone with the twist tied
    to the tilt, which reaches isotropy as kappa goes to 0; ``"cone_no_twist"`` gives the old law.
    ``kappa`` (float from 0 to 1e6, or ``inf``; 20.0): concentration of the cone or of the girdle
    ("cone", "cone_no_twist", "plane"; 0 is uniform, ``inf`` no tilt / exactly in the plane),
    ``twist`` ("tied" | "free" | "fixed" | "restrained", "tied"): the twist about the restrained
    direction in "cone" and "plane": von Mises with the concentration ``kappa``, uniform, none, or
    von Mises with ``twist_kappa``,
    ``twist_kappa`` (float from 0 to 1e6, or ``inf``; 1.0): the twist concentration for "restrained",
    ``orientation_deg`` (3 floats, [0, 0, 0]): z-y-z Euler angles of the mean molecular frame in
    the receptor frame (the reference frame of "plane"),
    ``axis`` (3 floats, optional; "cone", "cone_no_twist" and "plane" only, not with a non-zero
    ``orientation_deg``): the restrained molecular direction (molecular frame, any non-zero
    vector); the mean orientation is then the smallest rotation taking it to the receptor axis
    (cone) or to the receptor x axis (plane) (:meth:`retina.eye.ordering.Cone.restraining`,
    :meth:`retina.eye.ordering.Planar.restraining`),
    ``mode`` ("ensemble" | "molecules", "ensemble"): annealed average or a finite sample,
    ``n_molecules`` (int >= 1, 1000): molecules per receptor in "molecules" mode,
    ``disorder_kappas`` (list of floats > 0, [1, 3, 10, 30, 100]): the concentrations of the
    disorder-tolerance sweep (stage "disorder"), applied to the scenario's model when it has a
    kappa ("cone", "cone_no_twist", "plane") and otherwise to a "cone" with the scenario's twist,
    ``study_kappas`` (list of floats >= 0, [0, 0.3, 1, 3, 10, 30, 100]): the concentrations of the
    order study (stage "order", :mod:`retina.stages.order`): each curve varies one concentration
    of one model over this list.
``[[eyes]]`` (one or two tables; the fields of :class:`retina.eye.geometry.Eye`)
    ``side`` ("left" | "right", required), ``azimuth_deg`` (optical axis azimuth from the beak,
    positive to the right, required), ``elevation_deg`` (optical axis elevation, positive up, 0),
    ``extent_deg`` (angular radius of the retinal cap, 1..180, 90), ``n_receptors`` (int
    1..200000, 400), ``density`` ("uniform" | "central"), ``central_ratio`` (>= 1, 4.0),
    ``central_width_deg`` (> 0, 20.0).  Default: a left and a right eye at azimuth -/+ 60 deg.
``[light]``
    ``photons`` (list of floats in (0, 1e12], [100, 10000]): mean photon count per receptor per
    integration window for each light level, ``names`` (list of str, ["dim", "bright"]), same
    length, each 1-64 letters, digits, spaces, ``_ - + .`` (they name HDF5 groups), starting with a
    letter, digit or ``_``;
    ``sky`` ("uniform" | "horizon", "uniform"): a uniform sky, or a bright sky over darker ground
    with ``ground_ratio`` (0..1, 0.2), ``horizon_deg`` (0.0) and ``softness_deg`` (5.0)
    (:mod:`retina.signal.light`).
``[field]`` (either the three components or a location and date)
    ``intensity_uT`` (float 1..1000), ``inclination_deg`` (-90..90, positive down),
    ``declination_deg`` (-180..180, east of north); or ``latitude_deg``, ``longitude_deg``,
    ``altitude_km`` (0.0), ``date`` (TOML date or "YYYY-MM-DD"), evaluated with the IGRF.
``[pose]``
    ``headings_deg`` (list of floats, [0, 90, 180, 270]; yaw, degrees clockwise from geographic north),
    ``pitch_deg`` (0.0), ``roll_deg`` (0.0).
``[scan]``
    ``heading_deg`` (float, 0.0): centre of the head scan, ``amplitude_deg`` (float 0..180, 60.0):
    the scan sweeps heading +/- amplitude, ``steps`` (int 2..721, 25), ``pitch_deg`` (0.0).
``[readout]``
    ``photons`` (list of floats in (0, 1e12], log-spaced 10..1e6): photon levels of the precision curves,
    ``decode_repeats`` (int >= 1, 200): noisy decodings per photon level for the decoding error,
    ``nuisance`` ("none" | "gain", "gain"): whether the readout must also infer the overall light
    level (see :mod:`retina.readout.fisher`),
    ``compare_nuisance`` ("receptor_gain" | "pose_gain" | "none", "receptor_gain"): a further unknown
    for which the bounds of one pose and of the head scan are also computed (bounds only):
    "receptor_gain" an unknown head-fixed texture (every receptor has its own unknown sensitivity,
    fixed during the scan: one pose then carries no heading information, a scan does),
    "pose_gain" a light level that changes unknown from pose to pose, "none" no comparison
    (:mod:`retina.readout.scans`).
``[trials]``
    ``n_trials`` (int >= 1, 40): simulated orientation trials per light level,
    ``goal_deg`` (float, 0.0): the heading the simulated bird intends to take (degrees clockwise
    from geographic north, like every heading here; magnetic north lies ``declination_deg`` east),
    ``scan_steps`` (int >= 1, 9): head-scan poses integrated per trial.
``[rf]`` (optional; radio-frequency conditions, :mod:`retina.stages.rf`)
    ``degree`` (even int 2..40, 4): degree of the RF yield functions (the control uses the static
    yield function truncated to it), ``check_points`` (int 1..200, 6): independent check
    directions of each RF fit, ``tol`` (float > 0, 1e-8): convergence tolerance of the exact RF
    method (yield units), ``cache`` (bool, true): keep RF yield functions in the content-hash
    cache (:mod:`retina.cache`);
    ``[[rf.conditions]]`` (array of tables, none): each has ``name`` (str, required), ``kind``
    ("off" | "tone" | "band", required); a tone has ``frequency_MHz`` (> 0) and ``amplitude_nT``
    (>= 0); a band has ``band_MHz`` ([f1, f2], 0 < f1 < f2) and exactly one of
    ``asd_nT_per_rtHz`` (amplitude spectral density, one-sided) or ``rms_nT`` (rms over the band);
    both take ``direction`` ("perpendicular" | "parallel" | "angle" | "coil", "perpendicular"),
    relative to the static field (azimuth-averaged about it) except "coil", ``angle_deg`` (0..180,
    90; for "angle") and ``coil`` (3 floats, [0, 1, 0]: a fixed direction in the world frame,
    north-east-down, like a coil's axis; see :mod:`retina.stages.rf` for how it is treated);
    ``sweep_MHz`` (list of floats > 0, none): frequencies of the sweep stage ``rf_sweep``,
    ``sweep_nT`` (float > 0, 50.0): its amplitude, ``sweep_lifetimes_us`` (list of floats > 0,
    none: the pair's own lifetime): pair lifetimes swept (equal rates ``k = 1 / lifetime``),
    ``sweep_light`` (str, "": the last light level): the light level of the sweep's trials.
``[output]``
    ``dir`` (path, "retina-results"), ``formats`` (list from "png", "svg", "pdf", ["png", "svg"]),
    ``dpi`` (int 50..1200, 300), ``animation`` (bool, true).

Limits for every key: strings are printable (no control characters), at most 10,000 characters;
lists hold at most 10,000 entries; angles not listed above lie within +/- 3600 degrees
(``orientation_deg`` within +/- 720); the file is at most 1 MiB.  How much memory the stages of a
scenario need is checked before they start (:mod:`retina.stages`; ``--max-memory-gb``).

Relative paths resolve from the folder of the scenario file.  Unknown keys and sections raise
:class:`retina.errors.InputError` with a "did you mean" suggestion; every error names the file and
the dotted key.
"""

from __future__ import annotations

import copy
import datetime as _dt
import difflib
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from retina.errors import InputError

__all__ = ["Scenario", "load_scenario", "scenario_from_dict", "dump_scenario", "save_scenario",
           "SCHEMA"]

_MISSING = object()


@dataclass(frozen=True)
class Key:
    """One key of the schema: its type, default and an optional extra check.

    ``kind`` is one of "str", "int", "float", "bool", "path", "date", "floats", "strs", "choice".
    ``check(value) -> str | None`` returns a description of what was expected when the value is
    out of range.  ``allow_inf`` lets a "float" be ``inf`` (a concentration with no disorder).
    """

    kind: str
    default: Any = _MISSING
    choices: tuple = ()
    check: Callable[[Any], str | None] | None = None
    length: int | None = None
    doc: str = ""
    allow_inf: bool = False
    table: dict | None = None        # for kind "tables": the schema of each table


def _rng(lo=None, hi=None, *, lo_open=False):
    def check(v):
        vals = v if isinstance(v, list) else [v]
        for x in vals:
            if lo is not None and (x <= lo if lo_open else x < lo):
                return f"{'>' if lo_open else '>='} {lo}" + (f" and <= {hi}" if hi is not None else "")
            if hi is not None and x > hi:
                return f"<= {hi}" + (f" and {'>' if lo_open else '>='} {lo}" if lo is not None else "")
        return None
    return check


def _concentration(v):
    """A concentration: 0 (uniform) to 1e6 (a tilt of about 0.06 deg), or ``inf`` (no disorder)."""
    if v == float("inf"):
        return None
    if v < 0 or v > 1e6:
        return ">= 0 and <= 1e6, or inf for no disorder"
    return None


def _even_degree(v):
    if v < 2 or v > 40 or v % 2:
        return "an even integer between 2 and 40"
    return None


MAX_PHOTONS = 1e12
"""Largest photon count of a light or readout level: far above daylight catches, and safely inside
what Poisson samplers take (numpy refuses means near 1e19)."""
MAX_LIST = 10_000
"""Longest list accepted for any list key."""
MAX_TEXT = 10_000
"""Longest string accepted (a description); names are limited to 64 characters."""
MAX_FILE_BYTES = 1 << 20
"""Scenario files larger than 1 MiB are refused before parsing."""


def _level_name(v):
    import re

    for x in v:
        if not re.fullmatch(r"[A-Za-z0-9_]([A-Za-z0-9_ .+-]{0,62}[A-Za-z0-9_.+-])?", x):
            return ("names of 1 to 64 letters, digits, spaces, '_', '-', '+' or '.', starting with a letter, "
                    "digit or '_' and not ending in a space "
                    f"(they name HDF5 groups and files; {x!r} is not)")
    return None


def _nonempty(v):
    return "a non-empty list" if len(v) == 0 else None


def _both(*checks):
    def check(v):
        for c in checks:
            msg = c(v)
            if msg:
                return msg
        return None
    return check


SCHEMA: dict[str, dict[str, Key]] = {
    "scenario": {
        "name": Key("str", "unnamed"),
        "description": Key("str", ""),
        "seed": Key("int", 0, check=_rng(0, 2**63 - 1)),
    },
    "yield": {
        "system": Key("path", None),
        "file": Key("path", None),
        "import": Key("path", None),
        "degree": Key("int", 12, check=_even_degree),
        "field_uT": Key("float", None, check=_rng(0.0, 1e6, lo_open=True)),
        "method": Key("choice", "auto", choices=("auto", "hilbert", "liouville", "separable")),
    },
    "ordering": {
        "model": Key("choice", "cone", choices=("aligned", "axial", "cone", "cone_no_twist", "plane",
                                                 "isotropic")),
        "kappa": Key("float", 20.0, check=_concentration, allow_inf=True),
        "twist": Key("choice", "tied", choices=("tied", "free", "fixed", "restrained")),
        "twist_kappa": Key("float", 1.0, check=_concentration, allow_inf=True),
        "orientation_deg": Key("floats", [0.0, 0.0, 0.0], length=3, check=_rng(-720.0, 720.0)),
        "axis": Key("floats", None, length=3,
                    check=lambda v: "a non-zero direction" if not any(v) else None),
        "mode": Key("choice", "ensemble", choices=("ensemble", "molecules")),
        "n_molecules": Key("int", 1000, check=_rng(1, 10**7)),
        "disorder_kappas": Key("floats", [1.0, 3.0, 10.0, 30.0, 100.0],
                               check=_both(_nonempty, _rng(0.0, 1e6, lo_open=True))),
        "study_kappas": Key("floats", [0.0, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0],
                            check=_both(_nonempty, _rng(0.0, 1e6))),
    },
    "eyes[]": {
        "side": Key("choice", choices=("left", "right")),
        "azimuth_deg": Key("float", check=_rng(-180.0, 180.0)),
        "elevation_deg": Key("float", 0.0, check=_rng(-90.0, 90.0)),
        "extent_deg": Key("float", 90.0, check=_rng(1.0, 180.0)),
        "n_receptors": Key("int", 400, check=_rng(1, 200_000)),
        "density": Key("choice", "uniform", choices=("uniform", "central")),
        "central_ratio": Key("float", 4.0, check=_rng(1.0, 1e4)),
        "central_width_deg": Key("float", 20.0, check=_rng(0.0, 180.0, lo_open=True)),
    },
    "light": {
        "photons": Key("floats", [100.0, 10000.0], check=_both(_nonempty, _rng(0.0, MAX_PHOTONS, lo_open=True))),
        "names": Key("strs", ["dim", "bright"], check=_both(_nonempty, _level_name)),
        "sky": Key("choice", "uniform", choices=("uniform", "horizon")),
        "ground_ratio": Key("float", 0.2, check=_rng(0.0, 1.0)),
        "horizon_deg": Key("float", 0.0, check=_rng(-90.0, 90.0)),
        "softness_deg": Key("float", 5.0, check=_rng(0.0, 90.0)),
    },
    "field": {
        "intensity_uT": Key("float", None, check=_rng(1.0, 1000.0)),
        "inclination_deg": Key("float", None, check=_rng(-90.0, 90.0)),
        "declination_deg": Key("float", None, check=_rng(-180.0, 180.0)),
        "latitude_deg": Key("float", None, check=_rng(-90.0, 90.0)),
        "longitude_deg": Key("float", None, check=_rng(-360.0, 360.0)),
        "altitude_km": Key("float", 0.0, check=_rng(-1.0, 1000.0)),
        "date": Key("date", None),
    },
    "pose": {
        "headings_deg": Key("floats", [0.0, 90.0, 180.0, 270.0], check=_both(_nonempty, _rng(-3600.0, 3600.0))),
        "pitch_deg": Key("float", 0.0, check=_rng(-90.0, 90.0)),
        "roll_deg": Key("float", 0.0, check=_rng(-180.0, 180.0)),
    },
    "scan": {
        "heading_deg": Key("float", 0.0, check=_rng(-3600.0, 3600.0)),
        "amplitude_deg": Key("float", 60.0, check=_rng(0.0, 180.0)),
        "steps": Key("int", 25, check=_rng(2, 721)),
        "pitch_deg": Key("float", 0.0, check=_rng(-90.0, 90.0)),
    },
    "readout": {
        "photons": Key("floats", [10.0, 100.0, 1e3, 1e4, 1e5, 1e6],
                       check=_both(_nonempty, _rng(0.0, MAX_PHOTONS, lo_open=True))),
        "decode_repeats": Key("int", 200, check=_rng(1, 10**6)),
        "nuisance": Key("choice", "gain", choices=("none", "gain")),
        "compare_nuisance": Key("choice", "receptor_gain", choices=("receptor_gain", "pose_gain", "none")),
    },
    "trials": {
        "n_trials": Key("int", 40, check=_rng(1, 10**6)),
        "goal_deg": Key("float", 0.0, check=_rng(-3600.0, 3600.0)),
        "scan_steps": Key("int", 9, check=_rng(1, 721)),
    },
    "rf": {
        "degree": Key("int", 4, check=_even_degree),
        "check_points": Key("int", 6, check=_rng(1, 200)),
        "tol": Key("float", 1e-8, check=_rng(0.0, 1.0, lo_open=True)),
        "cache": Key("bool", True),
        "conditions": Key("tables", [], table={
            "name": Key("str"),
            "kind": Key("choice", choices=("off", "tone", "band")),
            "frequency_MHz": Key("float", None, check=_rng(0.0, 1e5, lo_open=True)),
            "amplitude_nT": Key("float", None, check=_rng(0.0, 1e9)),
            "direction": Key("choice", "perpendicular", choices=("perpendicular", "parallel", "angle", "coil")),
            "angle_deg": Key("float", 90.0, check=_rng(0.0, 180.0)),
            "coil": Key("floats", [0.0, 1.0, 0.0], length=3),
            "band_MHz": Key("floats", None, length=2, check=_rng(0.0, 1e5, lo_open=True)),
            "asd_nT_per_rtHz": Key("float", None, check=_rng(0.0, 1e9)),
            "rms_nT": Key("float", None, check=_rng(0.0, 1e9)),
        }),
        "sweep_MHz": Key("floats", [], check=_rng(0.0, 1e5, lo_open=True)),
        "sweep_nT": Key("float", 50.0, check=_rng(0.0, 1e9, lo_open=True)),
        "sweep_lifetimes_us": Key("floats", [], check=_rng(0.0, 1e6, lo_open=True)),
        "sweep_light": Key("str", ""),
    },
    "output": {
        "dir": Key("path", "retina-results"),
        "formats": Key("strs", ["png", "svg"], choices=("png", "svg", "pdf"), check=_nonempty),
        "dpi": Key("int", 300, check=_rng(50, 1200)),
        "animation": Key("bool", True),
    },
}

_DEFAULT_EYES = [
    {"side": side, "azimuth_deg": az, "elevation_deg": 0.0, "extent_deg": 90.0, "n_receptors": 400,
     "density": "uniform", "central_ratio": 4.0, "central_width_deg": 20.0}
    for side, az in (("left", -60.0), ("right", 60.0))
]

_SECTIONS = [s.rstrip("[]") for s in SCHEMA]


@dataclass(frozen=True)
class Scenario:
    """A validated scenario.

    Attributes
    ----------
    data : dict
        Every section and key with defaults filled in; paths are absolute ``pathlib.Path``; the
        field date is a ``datetime.date`` (or None).  ``data["eyes"]`` is a list of dicts.
    source : Path or None
        The file it was read from.
    text : str
        The file's text verbatim (for provenance); for a scenario built from a dict, its TOML dump.
    """

    data: dict
    source: Path | None = field(default=None, compare=False)
    text: str = field(default="", compare=False, repr=False)

    def __getitem__(self, section: str):
        return self.data[section]

    @property
    def seed(self) -> int:
        return int(self.data["scenario"]["seed"])

    @property
    def name(self) -> str:
        return self.data["scenario"]["name"]

    @property
    def yield_source(self) -> tuple[str, Path]:
        """``(kind, path)`` with kind "system", "file" or "import"."""
        y = self.data["yield"]
        for kind in ("system", "file", "import"):
            if y[kind] is not None:
                return kind, y[kind]
        raise AssertionError("validated scenario without a yield source")  # pragma: no cover

    @property
    def field_uses_location(self) -> bool:
        return self.data["field"]["latitude_deg"] is not None

    def replace(self, **sections) -> "Scenario":
        """A copy with some keys changed, re-validated: ``s.replace(trials={"n_trials": 5})``."""
        d = copy.deepcopy(self.data)
        for sec, vals in sections.items():
            if sec == "eyes":
                d["eyes"] = copy.deepcopy(vals)
            else:
                if sec not in d:
                    raise InputError(f"unknown section{_suggest(sec, _SECTIONS)}", key=sec)
                d[sec].update(vals)
        return scenario_from_dict(_to_plain(d), source=self.source,
                                  base_dir=self.source.parent if self.source else None, text=self.text)


# ----------------------------------------------------------------------------------------------
# loading and validation


def _suggest(name: str, options) -> str:
    close = difflib.get_close_matches(name, list(options), n=1, cutoff=0.5)
    return f" (did you mean '{close[0]}'?)" if close else f" (expected one of: {', '.join(sorted(options))})"


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Scenario

    Raises
    ------
    retina.errors.InputError
        The file is missing or not TOML, a key is unknown, of the wrong type or out of range, or a
        named file does not exist; the message names the file and the dotted key.
    """
    from retina.spin.io import read_text_capped

    path = Path(path)
    try:
        text = read_text_capped(path, MAX_FILE_BYTES).decode("utf-8")
    except FileNotFoundError:
        raise InputError("scenario file not found", source=path) from None
    except IsADirectoryError:
        raise InputError("is a folder; expected a scenario TOML file", source=path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the scenario file ({exc})", source=path) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=path) from None
    except RecursionError:
        raise InputError("arrays or tables nested too deeply; expected a scenario TOML file", source=path) from None
    return scenario_from_dict(doc, source=path.resolve(), base_dir=path.resolve().parent, text=text)


def scenario_from_dict(doc: dict, *, source: str | Path | None = None, base_dir: str | Path | None = None,
                       text: str | None = None) -> Scenario:
    """Validate a parsed scenario document (as from ``tomllib``) and fill in defaults.

    Parameters
    ----------
    doc : dict
        The parsed TOML content (schema in the module docstring).
    source : str or Path, optional
        File named in error messages.
    base_dir : str or Path, optional
        Folder against which relative paths resolve (default: the current folder).
    text : str, optional
        The original text, kept with the scenario.

    Returns
    -------
    Scenario
        Every section complete, paths absolute.

    Raises
    ------
    InputError
        On the first wrong, missing or unknown value, naming the dotted key.
    """
    src = Path(source) if source is not None else None
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    if not isinstance(doc, dict):
        raise InputError("expected a table of sections", source=src)
    out: dict[str, Any] = {}
    for sec in doc:
        if sec not in _SECTIONS:
            raise InputError(f"unknown section{_suggest(sec, _SECTIONS)}", source=src, key=sec)
    for sec_name, keys in SCHEMA.items():
        if sec_name == "eyes[]":
            raw = doc.get("eyes", _MISSING)
            if raw is _MISSING:
                out["eyes"] = copy.deepcopy(_DEFAULT_EYES)
                continue
            if not isinstance(raw, list) or not all(isinstance(e, dict) for e in raw):
                raise InputError("expected an array of tables ([[eyes]] ...)", source=src, key="eyes")
            if not 1 <= len(raw) <= 2:
                raise InputError(f"expected one or two eyes, got {len(raw)}", source=src, key="eyes")
            out["eyes"] = [_section(e, keys, src, f"eyes[{i}]", base) for i, e in enumerate(raw)]
            sides = [e["side"] for e in out["eyes"]]
            if len(set(sides)) != len(sides):
                raise InputError(f"expected one left and one right eye, got {sides}", source=src,
                                 key="eyes")
            continue
        raw = doc.get(sec_name, {})
        if not isinstance(raw, dict):
            raise InputError(f"expected a table [{sec_name}], got {type(raw).__name__}", source=src, key=sec_name)
        out[sec_name] = _section(raw, keys, src, sec_name, base)
    _cross_checks(out, src)
    sc = Scenario(data=out, source=src, text="")
    if text is None:
        text = dump_scenario(sc)
    return Scenario(data=out, source=src, text=text)


def _section(raw: dict, keys: dict[str, Key], src, prefix: str, base: Path) -> dict:
    for k in raw:
        if k not in keys:
            raise InputError(f"unknown key{_suggest(k, keys)}", source=src, key=f"{prefix}.{k}")
    out = {}
    for k, spec in keys.items():
        dotted = f"{prefix}.{k}"
        if k in raw:
            out[k] = _convert(raw[k], spec, src, dotted, base)
        elif spec.default is _MISSING:
            raise InputError(f"missing required key ({_describe(spec)})", source=src, key=dotted)
        else:
            d = copy.deepcopy(spec.default)
            if spec.kind == "path" and d is not None:
                d = (base / d).resolve()
            out[k] = d
    return out


def _describe(spec: Key) -> str:
    names = {"str": "a string", "int": "an integer", "float": "a number", "bool": "true or false",
             "path": "a file path (string)", "date": "a date (1990-05-17 or \"1990-05-17\")",
             "floats": "a list of numbers", "strs": "a list of strings",
             "choice": "one of " + ", ".join(f'"{c}"' for c in spec.choices),
             "tables": "an array of tables ([[...]])"}
    s = names[spec.kind]
    if spec.length:
        s += f" of length {spec.length}"
    return s


def _convert(v, spec: Key, src, key: str, base: Path):
    def bad(what=None):
        got = f"{v!r}" if not isinstance(v, (dict, list)) or len(repr(v)) < 60 else type(v).__name__
        raise InputError(f"expected {what or _describe(spec)}, got {got}", source=src, key=key)

    kind = spec.kind
    if kind == "str":
        if not isinstance(v, str):
            bad()
        val = v
        _printable(val, src, key)
    elif kind == "choice":
        if not isinstance(v, str):
            bad()
        if v not in spec.choices:
            raise InputError(f"expected {_describe(spec)}, got {v!r}{_suggest(v, spec.choices)}",
                             source=src, key=key)
        val = v
    elif kind == "int":
        if isinstance(v, bool) or not isinstance(v, int):
            bad()
        val = int(v)
    elif kind == "float":
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            bad()
        val = float(v)
        if val != val or val == float("-inf") or (val == float("inf") and not spec.allow_inf):
            bad("a finite number" if not spec.allow_inf else "a number or inf")
    elif kind == "bool":
        if not isinstance(v, bool):
            bad()
        val = v
    elif kind == "path":
        if not isinstance(v, str) or not v.strip():
            bad()
        _printable(v, src, key)
        val = (base / Path(v).expanduser()).resolve()
    elif kind == "date":
        if isinstance(v, _dt.datetime):
            val = v.date()
        elif isinstance(v, _dt.date):
            val = v
        elif isinstance(v, str):
            try:
                val = _dt.date.fromisoformat(v)
            except ValueError:
                bad()
        else:
            bad()
    elif kind == "floats":
        if not isinstance(v, list) or any(isinstance(x, bool) or not isinstance(x, (int, float)) for x in v):
            bad()
        val = [float(x) for x in v]
        if any(x != x or abs(x) == float("inf") for x in val):
            bad("a list of finite numbers")
    elif kind == "strs":
        if not isinstance(v, list) or any(not isinstance(x, str) for x in v):
            bad()
        val = list(v)
        for x in val:
            _printable(x, src, key)
        if spec.choices:
            for x in val:
                if x not in spec.choices:
                    raise InputError(f"expected entries among {', '.join(spec.choices)}, got {x!r}"
                                     f"{_suggest(x, spec.choices)}", source=src, key=key)
    elif kind == "tables":
        if not isinstance(v, list) or not all(isinstance(x, dict) for x in v):
            bad()
        val = [_section(x, spec.table, src, f"{key}[{i}]", base) for i, x in enumerate(v)]
    else:  # pragma: no cover - schema error
        raise AssertionError(kind)
    if isinstance(val, list) and len(val) > MAX_LIST:
        raise InputError(f"expected at most {MAX_LIST:,} entries, got {len(val):,}", source=src, key=key)
    if spec.length is not None and len(val) != spec.length:
        bad()
    if spec.check is not None:
        msg = spec.check(val)
        if msg:
            raise InputError(f"expected {msg}, got {v!r}", source=src, key=key)
    return val


def _printable(x: str, src, key: str) -> None:
    if len(x) > MAX_TEXT:
        raise InputError(f"expected at most {MAX_TEXT:,} characters, got {len(x):,}", source=src, key=key)
    bad = next((c for c in x if (ord(c) < 32 and c not in "\t\n") or ord(c) == 127), None)
    if bad is not None:
        raise InputError(f"expected printable text, got the control character {bad!r}", source=src, key=key)


def _cross_checks(d: dict, src) -> None:
    y = d["yield"]
    given = [k for k in ("system", "file", "import") if y[k] is not None]
    if len(given) != 1:
        raise InputError("expected exactly one of yield.system (spin-system file to compute), "
                         "yield.file (yield-function HDF5 to load) or yield.import (table to import)"
                         f", got {len(given)}" + (f" ({', '.join(given)})" if given else ""),
                         source=src, key="yield")
    kind = given[0]
    if not y[kind].is_file():
        raise InputError(f"file not found: {y[kind]}", source=src, key=f"yield.{kind}")

    f = d["field"]
    comp = [k for k in ("intensity_uT", "inclination_deg", "declination_deg") if f[k] is not None]
    loc = [k for k in ("latitude_deg", "longitude_deg", "date") if f[k] is not None]
    if comp and loc:
        raise InputError("give either intensity_uT/inclination_deg/declination_deg or "
                         f"latitude_deg/longitude_deg/date, not both (got {', '.join(comp + loc)})",
                         source=src, key="field")
    if loc and len(loc) != 3:
        missing = sorted({"latitude_deg", "longitude_deg", "date"} - set(loc))
        raise InputError(f"a location needs latitude_deg, longitude_deg and date; missing {', '.join(missing)}",
                         source=src, key="field." + missing[0])
    if not loc and len(comp) != 3:
        missing = [k for k in ("intensity_uT", "inclination_deg", "declination_deg") if f[k] is None]
        raise InputError("expected intensity_uT, inclination_deg and declination_deg (or a location "
                         f"and date); missing {', '.join(missing)}", source=src, key="field." + missing[0])
    if loc and f["date"] is not None and not (1900 <= f["date"].year <= 2030):
        raise InputError(f"expected a date within the IGRF range 1900-2030, got {f['date']}",
                         source=src, key="field.date")

    o = d["ordering"]
    if o["axis"] is not None:
        if o["model"] not in ("cone", "cone_no_twist", "plane"):
            raise InputError(f"ordering.axis is used by the models cone, cone_no_twist and plane, not "
                             f"{o['model']!r}", source=src, key="ordering.axis")
        if any(o["orientation_deg"]):
            raise InputError("give ordering.orientation_deg or ordering.axis, not both", source=src,
                             key="ordering.axis")

    light = d["light"]
    if len(light["names"]) != len(light["photons"]):
        raise InputError(f"expected as many names as photon levels ({len(light['photons'])}), "
                         f"got {len(light['names'])}", source=src, key="light.names")
    if len(set(light["names"])) != len(light["names"]):
        raise InputError(f"light level names must differ, got {light['names']}", source=src, key="light.names")
    _rf_checks(d, src)


def _rf_checks(d: dict, src) -> None:
    rf = d["rf"]
    names = [c["name"] for c in rf["conditions"]]
    if len(set(names)) != len(names):
        raise InputError(f"RF condition names must differ, got {names}", source=src, key="rf.conditions")
    for i, c in enumerate(rf["conditions"]):
        key = f"rf.conditions[{i}]"
        if c["kind"] == "tone":
            for k in ("frequency_MHz", "amplitude_nT"):
                if c[k] is None:
                    raise InputError(f"a tone needs {k}", source=src, key=f"{key}.{k}")
        if c["kind"] == "band":
            if c["band_MHz"] is None or not c["band_MHz"][0] < c["band_MHz"][1]:
                raise InputError(f"a band needs band_MHz = [f1, f2] with 0 < f1 < f2, got {c['band_MHz']}",
                                 source=src, key=f"{key}.band_MHz")
            if (c["asd_nT_per_rtHz"] is None) == (c["rms_nT"] is None):
                raise InputError("a band needs exactly one of asd_nT_per_rtHz (nT/sqrt(Hz)) or rms_nT (nT)",
                                 source=src, key=f"{key}.asd_nT_per_rtHz")
        if c["direction"] == "coil" and not any(c["coil"]):
            raise InputError("expected a non-zero coil direction", source=src, key=f"{key}.coil")
    if rf["sweep_light"] and rf["sweep_light"] not in d["light"]["names"]:
        raise InputError(f"expected one of the light level names {d['light']['names']}, got {rf['sweep_light']!r}",
                         source=src, key="rf.sweep_light")


# ----------------------------------------------------------------------------------------------
# writing


def _to_plain(d):
    if isinstance(d, dict):
        return {k: _to_plain(v) for k, v in d.items() if v is not None}
    if isinstance(d, list):
        return [_to_plain(v) for v in d]
    if isinstance(d, Path):
        return str(d)
    return d


def dump_scenario(scenario: Scenario) -> str:
    """The scenario as TOML text, with every default written out and paths absolute.

    ``None`` values (unset optional keys) are left out, so the text loads back to an equal
    :class:`Scenario`.

    Parameters
    ----------
    scenario : Scenario
        A validated scenario.

    Returns
    -------
    str
    """
    import tomli_w

    plain = _to_plain(scenario.data)
    order = ["scenario", "yield", "ordering", "eyes", "light", "field", "pose", "scan", "readout",
             "trials", "rf", "output"]
    return tomli_w.dumps({k: plain[k] for k in order if k in plain})


def save_scenario(scenario: Scenario, path: str | Path, *, force: bool = False) -> Path:
    """Write :func:`dump_scenario` atomically to a file.

    Parameters
    ----------
    scenario : Scenario
        A validated scenario.
    path : str or Path
        The file.
    force : bool
        Allow overwriting an existing file.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    InputError
        When the file exists (without ``force``) or its folder is not writable.
    """
    from retina.io.atomic import atomic_write_text

    return atomic_write_text(path, dump_scenario(scenario), force=force)
