"""Sweep files: a base scenario, the axes swept over it and the outputs to collect.

A sweep file (TOML) is read by :func:`load_sweep`, which validates it against the schema below and
returns a :class:`SweepSpec`; :func:`retina.sweep.points.expand` turns it into the list of
:class:`retina.sweep.points.Point` s, each a fully validated :class:`retina.scenario.Scenario`.

Schema (section, key, type, default)
------------------------------------
``[sweep]``
    ``name`` (str, the file's stem), ``description`` (str, ""),
    ``scenario`` (path to the base scenario TOML, required; relative to the sweep file),
    ``combine`` ("grid" | "zip", "grid"): every combination of the axes (one dimension per axis),
    or the axes taken together point by point (all of the same length; one dimension, named after
    the first axis, with the other axes as coordinates along it),
    ``seed`` (int >= 0, the base scenario's seed): the sweep's seed; point ``i`` (in C order over the
    grid) runs with the seed of the ``i``-th child of ``numpy.random.SeedSequence(seed)``
    (:func:`retina.sweep.points.point_seed`), so its numbers do not depend on how many workers ran or in which order,
    ``quick`` (bool, false): apply the reduced ``--quick`` settings of a run to every point
    (:func:`retina.build.quick_scenario`),
    ``outputs`` (list of str, required): what to collect from every point, names of
    :data:`retina.sweep.outputs.OUTPUTS` (modulation depth, heading bounds, decoding errors, trial
    statistics, ...; ``retina sweep --list-outputs`` prints them with their units and dimensions).
``[set]`` (optional)
    Fixed changes to the base scenario before the axes are applied: ``"section.key" = value``
    (dotted keys as for ``axes.key``).
``[[axes]]`` (one or more)
    ``key`` (str, required): what to sweep.  Any scenario key as ``section.key``
    (``ordering.kappa``, ``field.inclination_deg``, ``yield.system``, ...); ``eyes.key`` sets
    the key of every eye, ``eyes[0].key`` one eye; ``system.<dotted key>`` a key of the spin-system
    file named by ``yield.system`` (``system.kinetics.lifetime_us``,
    ``system.radical_a.nuclei[0].hyperfine_mT``; the changed system is written to the sweep's work
    folder and validated like any spin-system file).  A scalar value for a list-valued scenario key
    becomes a one-element list (``light.photons = 30`` means ``[30]``; ``light.names`` then
    becomes the number's text, unless it is set or swept too).
    The values, exactly one of: ``values`` (list of numbers or strings), or ``start``, ``stop``,
    ``num`` (int >= 2) with ``spacing`` ("linear" | "log", "linear"), both ends included.
    ``name`` (str, the key's last part, ``lifetime_us``): the dimension's name in the dataset;
    ``units`` (str, from the key's suffix: ``_uT`` -> "uT", ``_deg`` -> "deg", ``_us`` -> "us",
    ``_mT`` -> "mT", ``_per_s`` -> "s^-1", ``_MHz`` -> "MHz", ``_km`` -> "km", ``photons`` ->
    "photons per receptor", otherwise "1"): its ``units`` attribute.

Relative paths (the base scenario, and file values of path keys such as ``yield.system``) resolve
from the folder of the sweep file.  Every error names the file and the dotted key.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from retina.errors import InputError

__all__ = ["Axis", "SweepSpec", "load_sweep", "sweep_from_dict", "units_for_key"]

_SWEEP_KEYS = ("name", "description", "scenario", "combine", "seed", "quick", "outputs")
_AXIS_KEYS = ("key", "values", "start", "stop", "num", "spacing", "name", "units")
_TOP = ("sweep", "set", "axes")

_SUFFIX_UNITS = (("_uT", "uT"), ("_deg", "deg"), ("_us", "us"), ("_mT", "mT"), ("_per_s", "s^-1"),
                 ("_MHz", "MHz"), ("_km", "km"), ("_nm", "nm"))


def units_for_key(key: str) -> str:
    """The ``units`` attribute of a swept key, from its suffix (module docstring).

    Parameters
    ----------
    key : str
        Dotted key.

    Returns
    -------
    str
    """
    last = re.sub(r"\[\d+\]$", "", key.split(".")[-1])
    for suf, u in _SUFFIX_UNITS:
        if last.endswith(suf):
            return u
    if last == "photons":
        return "photons per receptor"
    return "1"


@dataclass(frozen=True)
class Axis:
    """One swept key.

    Attributes
    ----------
    key : str
        Dotted key (module docstring).
    values : tuple
        The values in sweep order (floats, ints, strings or bools).
    name : str
        Dimension (or coordinate) name in the dataset.
    units : str
    """

    key: str
    values: tuple
    name: str
    units: str

    def __len__(self) -> int:
        return len(self.values)


@dataclass(frozen=True)
class SweepSpec:
    """A validated sweep file.

    Attributes
    ----------
    name, description : str
    scenario_path : Path
        The base scenario.
    combine : {"grid", "zip"}
    seed : int
    quick : bool
    outputs : tuple of str
    fixed : dict
        ``[set]``: dotted key -> value.
    axes : tuple of Axis
    source : Path or None
    text : str
        The file's text verbatim (provenance).
    """

    name: str
    description: str
    scenario_path: Path
    combine: str
    seed: int
    quick: bool
    outputs: tuple
    fixed: dict
    axes: tuple
    source: Path | None = None
    text: str = field(default="", repr=False)

    @property
    def shape(self) -> tuple[int, ...]:
        """Dataset shape: one length per axis (grid) or ``(n,)`` (zip)."""
        if self.combine == "zip":
            return (len(self.axes[0]),)
        return tuple(len(a) for a in self.axes)

    @property
    def dims(self) -> tuple[str, ...]:
        """Dimension names: one per axis (grid) or the first axis's name (zip)."""
        if self.combine == "zip":
            return (self.axes[0].name,)
        return tuple(a.name for a in self.axes)

    @property
    def n_points(self) -> int:
        """The number of points (the product of :attr:`shape`)."""
        return int(np.prod(self.shape))

    def fingerprint(self) -> str:
        """sha256 of everything that determines the points' numbers (not the name or description).

        Returns
        -------
        str
            64 hex digits over the base scenario's text, ``combine``, ``seed``, ``quick``, ``[set]``,
            the axes' keys and values and the outputs.
        """
        rec = {"scenario": self.scenario_text(), "combine": self.combine, "seed": self.seed, "quick": self.quick,
               "fixed": _jsonable(self.fixed), "axes": [[a.key, _jsonable(list(a.values))] for a in self.axes],
               "outputs": list(self.outputs)}
        return hashlib.sha256(json.dumps(rec, sort_keys=True).encode()).hexdigest()

    def scenario_text(self) -> str:
        """The base scenario file's text, for the fingerprint.

        Returns
        -------
        str
            The file's UTF-8 text; empty when it cannot be read (the loader has already checked it).
        """
        try:
            return self.scenario_path.read_text(encoding="utf-8")
        except OSError:
            return ""


def _jsonable(v):
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, Path):
        return str(v)
    return v


# ----------------------------------------------------------------------------------------------
# reading


def load_sweep(path: str | Path) -> SweepSpec:
    """Read and validate a sweep TOML file.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    SweepSpec

    Raises
    ------
    InputError
        Missing file, bad TOML, unknown or wrong keys, an unknown output, a bad base scenario;
        the message names the file and the dotted key.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("sweep file not found", source=path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the sweep file ({exc})", source=path) from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=path) from None
    return sweep_from_dict(doc, source=path.resolve(), text=text)


def _suggest(name: str, options) -> str:
    close = difflib.get_close_matches(name, list(options), n=1, cutoff=0.5)
    return f" (did you mean '{close[0]}'?)" if close else f" (expected one of: {', '.join(sorted(options))})"


def _check_keys(table: dict, allowed, src, prefix: str) -> None:
    for k in table:
        if k not in allowed:
            raise InputError(f"unknown key{_suggest(k, allowed)}", source=src, key=f"{prefix}.{k}" if prefix else k)


def _is_num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def sweep_from_dict(doc: dict, *, source: str | Path | None = None, text: str | None = None,
                    base_dir: str | Path | None = None) -> SweepSpec:
    """Validate a parsed sweep document (as from ``tomllib``).

    Parameters
    ----------
    doc : dict
        The parsed document.
    source : str or Path, optional
        The file it came from (error messages, provenance).
    text : str, optional
        The file's text (default: a JSON dump of ``doc``).
    base_dir : str or Path, optional
        Where relative paths resolve from (default: the folder of ``source``, else the current
        folder).

    Returns
    -------
    SweepSpec
    """
    from retina.scenario import load_scenario
    from retina.sweep.outputs import OUTPUTS

    src = Path(source) if source is not None else None
    base = Path(base_dir) if base_dir is not None else (src.parent if src is not None else Path.cwd())
    if not isinstance(doc, dict):
        raise InputError("expected a table of sections", source=src)
    _check_keys(doc, _TOP, src, "")
    sw = doc.get("sweep")
    if not isinstance(sw, dict):
        raise InputError("missing the [sweep] table (expected scenario = \"...\" and outputs = [...])",
                         source=src, key="sweep")
    _check_keys(sw, _SWEEP_KEYS, src, "sweep")
    if "scenario" not in sw or not isinstance(sw["scenario"], str) or not sw["scenario"].strip():
        raise InputError("expected the path of the base scenario (a string)", source=src, key="sweep.scenario")
    scen_path = (base / Path(sw["scenario"]).expanduser()).resolve()
    base_sc = load_scenario(scen_path)  # raises with the scenario's own file and key
    name = sw.get("name", src.stem if src else "sweep")
    desc = sw.get("description", "")
    for k, v in (("name", name), ("description", desc)):
        if not isinstance(v, str):
            raise InputError(f"expected a string, got {v!r}", source=src, key=f"sweep.{k}")
    combine = sw.get("combine", "grid")
    if combine not in ("grid", "zip"):
        raise InputError(f"expected \"grid\" or \"zip\", got {combine!r}", source=src, key="sweep.combine")
    seed = sw.get("seed", base_sc.seed)
    if isinstance(seed, bool) or not isinstance(seed, int) or not 0 <= seed < 2**63:
        raise InputError(f"expected an integer seed >= 0, got {seed!r}", source=src, key="sweep.seed")
    quick = sw.get("quick", False)
    if not isinstance(quick, bool):
        raise InputError(f"expected true or false, got {quick!r}", source=src, key="sweep.quick")
    outs = sw.get("outputs")
    if not isinstance(outs, list) or not outs or not all(isinstance(o, str) for o in outs):
        raise InputError(f"expected a non-empty list of output names, got {outs!r}", source=src, key="sweep.outputs")
    for o in outs:
        if o not in OUTPUTS:
            raise InputError(f"unknown output {o!r}{_suggest(o, OUTPUTS)}", source=src, key="sweep.outputs")
    if len(set(outs)) != len(outs):
        raise InputError("an output is listed twice", source=src, key="sweep.outputs")

    fixed = doc.get("set", {})
    if not isinstance(fixed, dict):
        raise InputError("expected a table of \"section.key\" = value", source=src, key="set")
    fixed = _flatten(fixed)

    raw_axes = doc.get("axes")
    if not isinstance(raw_axes, list) or not raw_axes or not all(isinstance(a, dict) for a in raw_axes):
        raise InputError("expected one or more [[axes]] tables", source=src, key="axes")
    axes = []
    for i, a in enumerate(raw_axes):
        axes.append(_axis(a, src, f"axes[{i}]"))
    names = [a.name for a in axes]
    from retina.sweep.outputs import OUTPUT_DIMS

    for i, nm in enumerate(names):
        if nm in OUTPUT_DIMS:
            raise InputError(f"the axis name {nm!r} is reserved for an output dimension; give the axis "
                             f"another name", source=src, key=f"axes[{i}].name")
    if len(set(names)) != len(names):
        raise InputError(f"two axes share a name ({names}); give one a distinct name", source=src, key="axes")
    keys = [a.key for a in axes]
    if len(set(keys)) != len(keys):
        raise InputError(f"a key is swept twice ({keys})", source=src, key="axes")
    if combine == "zip" and len({len(a) for a in axes}) != 1:
        raise InputError(f"zipped axes need equal lengths, got {[len(a) for a in axes]}", source=src, key="axes")
    spec = SweepSpec(name=name, description=desc, scenario_path=scen_path, combine=combine, seed=int(seed),
                     quick=quick, outputs=tuple(outs), fixed=fixed, axes=tuple(axes), source=src,
                     text=text if text is not None else json.dumps(_jsonable(doc), sort_keys=True))
    return spec


def _flatten(d: dict, prefix: str = "") -> dict:
    """``{"ordering": {"kappa": 3}}`` -> ``{"ordering.kappa": 3}`` (TOML dotted keys parse nested)."""
    out = {}
    for k, v in d.items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, dict) and not (key.startswith("system.") and _is_leaf_table(key)):
            out.update(_flatten(v, key))
        else:
            out[key] = v
    return out


def _is_leaf_table(key: str) -> bool:
    return key.endswith(".orientation") or key.endswith(".dipolar")


def _axis(a: dict, src, where: str) -> Axis:
    _check_keys(a, _AXIS_KEYS, src, where)
    key = a.get("key")
    if not isinstance(key, str) or "." not in key:
        raise InputError(f"expected a dotted key such as \"ordering.kappa\", got {key!r}", source=src,
                         key=f"{where}.key")
    has_vals = "values" in a
    has_range = any(k in a for k in ("start", "stop", "num", "spacing"))
    if has_vals == has_range:
        raise InputError("expected either values = [...] or start, stop and num", source=src, key=where)
    if has_vals:
        vals = a["values"]
        if not isinstance(vals, list) or not vals:
            raise InputError(f"expected a non-empty list, got {vals!r}", source=src, key=f"{where}.values")
        for v in vals:
            if not (_is_num(v) or isinstance(v, (str, bool))):
                raise InputError(f"expected numbers or strings, got {v!r}", source=src, key=f"{where}.values")
        if len({type(v) if not _is_num(v) else float for v in vals}) != 1:
            raise InputError("expected values of one type (all numbers or all strings)", source=src,
                             key=f"{where}.values")
        vals = tuple(float(v) if isinstance(v, float) else v for v in vals)
    else:
        for k in ("start", "stop"):
            if not _is_num(a.get(k)):
                raise InputError(f"expected a number, got {a.get(k)!r}", source=src, key=f"{where}.{k}")
        num = a.get("num")
        if isinstance(num, bool) or not isinstance(num, int) or num < 2:
            raise InputError(f"expected an integer >= 2, got {num!r}", source=src, key=f"{where}.num")
        spacing = a.get("spacing", "linear")
        if spacing == "linear":
            vals = np.linspace(float(a["start"]), float(a["stop"]), num)
        elif spacing == "log":
            if a["start"] <= 0 or a["stop"] <= 0:
                raise InputError("expected start and stop > 0 for log spacing", source=src, key=where)
            vals = np.geomspace(float(a["start"]), float(a["stop"]), num)
        else:
            raise InputError(f"expected \"linear\" or \"log\", got {spacing!r}", source=src, key=f"{where}.spacing")
        vals = tuple(float(v) for v in vals)
    if len(set(vals)) != len(vals):
        raise InputError("expected distinct values", source=src, key=f"{where}.values")
    name = a.get("name", re.sub(r"\[\d+\]", "", key.split(".")[-1]))
    units = a.get("units", units_for_key(key))
    for k, v in (("name", name), ("units", units)):
        if not isinstance(v, str) or not v:
            raise InputError(f"expected a non-empty string, got {v!r}", source=src, key=f"{where}.{k}")
    return Axis(key=key, values=vals, name=name, units=units)
