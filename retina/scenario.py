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
    ``sweep_light`` (str, "": the last light level): the light level of the sweep's trials,
    ``sweep_points`` (int 0..2000, 41): log-spaced frequencies between the lowest and highest of
    ``sweep_MHz`` (joined with them) at which the bound's RF sensitivity, the threshold amplitude
    and the onset are computed, ``onset_rise`` (float in (0, 10], 0.1): the relative rise of the
    single-pose bound over the control that counts as the onset of disorientation.
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
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from retina.errors import InputError
from retina.keytable import (MAX_FILE_BYTES, MAX_PHOTONS, MISSING, Key, all_of, concentration,
                             even_degree, in_range, level_names, nonempty, section, suggest)

__all__ = ["Scenario", "load_scenario", "scenario_from_dict", "dump_scenario", "save_scenario",
           "SCHEMA"]

SCHEMA: dict[str, dict[str, Key]] = {
    "scenario": {
        "name": Key("str", "unnamed"),
        "description": Key("str", ""),
        "seed": Key("int", 0, check=in_range(0, 2**63 - 1)),
    },
    "yield": {
        "system": Key("path", None),
        "file": Key("path", None),
        "import": Key("path", None),
        "degree": Key("int", 12, check=even_degree),
        "field_uT": Key("float", None, check=in_range(0.0, 1e6, lo_open=True)),
        "method": Key("choice", "auto", choices=("auto", "hilbert", "liouville", "separable")),
    },
    "ordering": {
        "model": Key("choice", "cone", choices=("aligned", "axial", "cone", "cone_no_twist", "plane",
                                                 "isotropic")),
        "kappa": Key("float", 20.0, check=concentration, allow_inf=True),
        "twist": Key("choice", "tied", choices=("tied", "free", "fixed", "restrained")),
        "twist_kappa": Key("float", 1.0, check=concentration, allow_inf=True),
        "orientation_deg": Key("floats", [0.0, 0.0, 0.0], length=3, check=in_range(-720.0, 720.0)),
        "axis": Key("floats", None, length=3,
                    check=lambda v: "a non-zero direction" if not any(v) else None),
        "mode": Key("choice", "ensemble", choices=("ensemble", "molecules")),
        "n_molecules": Key("int", 1000, check=in_range(1, 10**7)),
        "disorder_kappas": Key("floats", [1.0, 3.0, 10.0, 30.0, 100.0],
                               check=all_of(nonempty, in_range(0.0, 1e6, lo_open=True))),
        "study_kappas": Key("floats", [0.0, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0],
                            check=all_of(nonempty, in_range(0.0, 1e6))),
    },
    "eyes[]": {
        "side": Key("choice", choices=("left", "right")),
        "azimuth_deg": Key("float", check=in_range(-180.0, 180.0)),
        "elevation_deg": Key("float", 0.0, check=in_range(-90.0, 90.0)),
        "extent_deg": Key("float", 90.0, check=in_range(1.0, 180.0)),
        "n_receptors": Key("int", 400, check=in_range(1, 200_000)),
        "density": Key("choice", "uniform", choices=("uniform", "central")),
        "central_ratio": Key("float", 4.0, check=in_range(1.0, 1e4)),
        "central_width_deg": Key("float", 20.0, check=in_range(0.0, 180.0, lo_open=True)),
    },
    "light": {
        "photons": Key("floats", [100.0, 10000.0], check=all_of(nonempty, in_range(0.0, MAX_PHOTONS, lo_open=True))),
        "names": Key("strs", ["dim", "bright"], check=all_of(nonempty, level_names)),
        "sky": Key("choice", "uniform", choices=("uniform", "horizon")),
        "ground_ratio": Key("float", 0.2, check=in_range(0.0, 1.0)),
        "horizon_deg": Key("float", 0.0, check=in_range(-90.0, 90.0)),
        "softness_deg": Key("float", 5.0, check=in_range(0.0, 90.0)),
    },
    "field": {
        "intensity_uT": Key("float", None, check=in_range(1.0, 1000.0)),
        "inclination_deg": Key("float", None, check=in_range(-90.0, 90.0)),
        "declination_deg": Key("float", None, check=in_range(-180.0, 180.0)),
        "latitude_deg": Key("float", None, check=in_range(-90.0, 90.0)),
        "longitude_deg": Key("float", None, check=in_range(-360.0, 360.0)),
        "altitude_km": Key("float", 0.0, check=in_range(-1.0, 1000.0)),
        "date": Key("date", None),
    },
    "pose": {
        "headings_deg": Key("floats", [0.0, 90.0, 180.0, 270.0], check=all_of(nonempty, in_range(-3600.0, 3600.0))),
        "pitch_deg": Key("float", 0.0, check=in_range(-90.0, 90.0)),
        "roll_deg": Key("float", 0.0, check=in_range(-180.0, 180.0)),
    },
    "scan": {
        "heading_deg": Key("float", 0.0, check=in_range(-3600.0, 3600.0)),
        "amplitude_deg": Key("float", 60.0, check=in_range(0.0, 180.0)),
        "steps": Key("int", 25, check=in_range(2, 721)),
        "pitch_deg": Key("float", 0.0, check=in_range(-90.0, 90.0)),
    },
    "readout": {
        "photons": Key("floats", [10.0, 100.0, 1e3, 1e4, 1e5, 1e6],
                       check=all_of(nonempty, in_range(0.0, MAX_PHOTONS, lo_open=True))),
        "decode_repeats": Key("int", 200, check=in_range(1, 10**6)),
        "nuisance": Key("choice", "gain", choices=("none", "gain")),
        "compare_nuisance": Key("choice", "receptor_gain", choices=("receptor_gain", "pose_gain", "none")),
    },
    "trials": {
        "n_trials": Key("int", 40, check=in_range(1, 10**6)),
        "goal_deg": Key("float", 0.0, check=in_range(-3600.0, 3600.0)),
        "scan_steps": Key("int", 9, check=in_range(1, 721)),
    },
    "rf": {
        "degree": Key("int", 4, check=even_degree),
        "check_points": Key("int", 6, check=in_range(1, 200)),
        "tol": Key("float", 1e-8, check=in_range(0.0, 1.0, lo_open=True)),
        "cache": Key("bool", True),
        "conditions": Key("tables", [], table={
            "name": Key("str"),
            "kind": Key("choice", choices=("off", "tone", "band")),
            "frequency_MHz": Key("float", None, check=in_range(0.0, 1e5, lo_open=True)),
            "amplitude_nT": Key("float", None, check=in_range(0.0, 1e9)),
            "direction": Key("choice", "perpendicular", choices=("perpendicular", "parallel", "angle", "coil")),
            "angle_deg": Key("float", 90.0, check=in_range(0.0, 180.0)),
            "coil": Key("floats", [0.0, 1.0, 0.0], length=3),
            "band_MHz": Key("floats", None, length=2, check=in_range(0.0, 1e5, lo_open=True)),
            "asd_nT_per_rtHz": Key("float", None, check=in_range(0.0, 1e9)),
            "rms_nT": Key("float", None, check=in_range(0.0, 1e9)),
        }),
        "sweep_MHz": Key("floats", [], check=in_range(0.0, 1e5, lo_open=True)),
        "sweep_nT": Key("float", 50.0, check=in_range(0.0, 1e9, lo_open=True)),
        "sweep_lifetimes_us": Key("floats", [], check=in_range(0.0, 1e6, lo_open=True)),
        "sweep_light": Key("str", ""),
        "sweep_points": Key("int", 41, check=in_range(0, 2000)),
        "onset_rise": Key("float", 0.1, check=in_range(0.0, 10.0, lo_open=True)),
    },
    "output": {
        "dir": Key("path", "retina-results"),
        "formats": Key("strs", ["png", "svg"], choices=("png", "svg", "pdf"), check=nonempty),
        "dpi": Key("int", 300, check=in_range(50, 1200)),
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
        """``[scenario] seed``: the root of every stage's random numbers."""
        return int(self.data["scenario"]["seed"])

    @property
    def name(self) -> str:
        """``[scenario] name``."""
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
        """True when the field comes from a location and date (a field model), not from F, I, D."""
        return self.data["field"]["latitude_deg"] is not None

    def replace(self, **sections) -> "Scenario":
        """A copy with some keys changed, re-validated: ``s.replace(trials={"n_trials": 5})``.

        Parameters
        ----------
        **sections : dict or list
            Section name -> ``{key: value}`` merged into that section; ``eyes`` replaces the list of
            eyes whole.

        Returns
        -------
        Scenario
            Validated as a loaded file is (same source, base folder and text).

        Raises
        ------
        InputError
            An unknown section, or a changed value the schema refuses.
        """
        d = copy.deepcopy(self.data)
        for sec, vals in sections.items():
            if sec == "eyes":
                d["eyes"] = copy.deepcopy(vals)
            else:
                if sec not in d:
                    raise InputError(f"unknown section{suggest(sec, _SECTIONS)}", key=sec)
                d[sec].update(vals)
        return scenario_from_dict(_to_plain(d), source=self.source,
                                  base_dir=self.source.parent if self.source else None, text=self.text)


# ----------------------------------------------------------------------------------------------
# loading and validation


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
            raise InputError(f"unknown section{suggest(sec, _SECTIONS)}", source=src, key=sec)
    for sec_name, keys in SCHEMA.items():
        if sec_name == "eyes[]":
            raw = doc.get("eyes", MISSING)
            if raw is MISSING:
                out["eyes"] = copy.deepcopy(_DEFAULT_EYES)
                continue
            if not isinstance(raw, list) or not all(isinstance(e, dict) for e in raw):
                raise InputError("expected an array of tables ([[eyes]] ...)", source=src, key="eyes")
            if not 1 <= len(raw) <= 2:
                raise InputError(f"expected one or two eyes, got {len(raw)}", source=src, key="eyes")
            out["eyes"] = [section(e, keys, src, f"eyes[{i}]", base) for i, e in enumerate(raw)]
            sides = [e["side"] for e in out["eyes"]]
            if len(set(sides)) != len(sides):
                raise InputError(f"expected one left and one right eye, got {sides}", source=src,
                                 key="eyes")
            continue
        raw = doc.get(sec_name, {})
        if not isinstance(raw, dict):
            raise InputError(f"expected a table [{sec_name}], got {type(raw).__name__}", source=src, key=sec_name)
        out[sec_name] = section(raw, keys, src, sec_name, base)
    _cross_checks(out, src)
    sc = Scenario(data=out, source=src, text="")
    if text is None:
        text = dump_scenario(sc)
    return Scenario(data=out, source=src, text=text)


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
