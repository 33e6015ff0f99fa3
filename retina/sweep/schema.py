"""Sweep files: a base scenario, the axes swept over it and the outputs to collect.

A sweep file (TOML) is read by :func:`load_sweep`, which validates it against the schema below and
returns a :class:`SweepSpec`; :func:`expand` turns it into the list of :class:`Point` s, each a
fully validated :class:`retina.scenario.Scenario`.

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
    (:func:`point_seed`), so its numbers do not depend on how many workers ran or in which order,
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

import copy
import difflib
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from retina.errors import InputError

__all__ = ["Axis", "SweepSpec", "Point", "load_sweep", "sweep_from_dict", "expand", "point_seed",
           "units_for_key", "apply_key"]

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


@dataclass(frozen=True)
class Point:
    """One point of a sweep.

    Attributes
    ----------
    index : int
        Flat index (C order over :attr:`SweepSpec.shape`).
    position : tuple of int
        Index along each dimension.
    params : dict
        Axis name -> value at this point.
    scenario : Scenario
        The validated scenario of the point (seed = :func:`point_seed`; ``--quick`` applied when the
        sweep asks for it).
    """

    index: int
    position: tuple
    params: dict
    scenario: Any

    def label(self) -> str:
        """The point's axis values, for messages.

        Returns
        -------
        str
            ``name = value, ...`` in axis order (floats in ``%g`` form).
        """
        return ", ".join(f"{k} = {_fmt(v)}" for k, v in self.params.items())

    def digest(self, extra: str = "") -> str:
        """sha256 (16 hex digits) of the index, the axis values, the seed and ``extra`` (the run passes
        the yield function's key, which hashes the pair file's content): names the point's result
        file, independent of where the folder lies (the sweep as a whole is checked by
        :meth:`SweepSpec.fingerprint`).

        Parameters
        ----------
        extra : str
            More text to hash with the point.

        Returns
        -------
        str
            The first 16 hex digits of the sha256.
        """
        rec = json.dumps([self.index, _jsonable(self.params), self.scenario.seed, extra], sort_keys=True)
        return hashlib.sha256(rec.encode()).hexdigest()[:16]


def _fmt(v) -> str:
    return f"{v:g}" if isinstance(v, float) else str(v)


def _jsonable(v):
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, Path):
        return str(v)
    return v


def point_seed(seed: int, index: int, n_points: int) -> int:
    """The scenario seed of point ``index``: the ``index``-th child of ``SeedSequence(seed)``, reduced
    to a 63-bit integer (what a scenario's seed holds).

    Parameters
    ----------
    seed : int
        The sweep's seed.
    index : int
        Flat point index.
    n_points : int
        Number of points (children are spawned once for all of them).

    Returns
    -------
    int
        In ``[0, 2**63)``.
    """
    return _child_seed(np.random.SeedSequence(int(seed)).spawn(int(n_points))[int(index)])


def _child_seed(child: np.random.SeedSequence) -> int:
    words = child.generate_state(2, dtype=np.uint32)
    return int((int(words[0]) << 32 | int(words[1])) & (2**63 - 1))


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


# ----------------------------------------------------------------------------------------------
# applying keys and expanding the points

_PART = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)(?:\[(\d+)\])?$")


def _parts(key: str, src, where: str):
    out = []
    for p in key.split("."):
        m = _PART.match(p)
        if not m:
            raise InputError(f"cannot read the key {key!r} (part {p!r})", source=src, key=where)
        out.append((m.group(1), None if m.group(2) is None else int(m.group(2))))
    return out


def _set_in(doc, parts, value, key: str, src, where: str) -> None:
    cur = doc
    for i, (name, idx) in enumerate(parts):
        last = i == len(parts) - 1
        if not isinstance(cur, dict):
            raise InputError(f"{key!r}: {name!r} is not inside a table", source=src, key=where)
        if last and idx is None:
            cur[name] = copy.deepcopy(value)
            return
        if name not in cur:
            if idx is not None:
                raise InputError(f"{key!r}: no list {name!r} to index", source=src, key=where)
            cur[name] = {}
        cur = cur[name]
        if idx is not None:
            if not isinstance(cur, list) or idx >= len(cur):
                raise InputError(f"{key!r}: index {idx} out of range", source=src, key=where)
            if last:
                cur[idx] = copy.deepcopy(value)
                return
            cur = cur[idx]


def apply_key(scen_doc: dict, sys_doc: dict | None, key: str, value, *, src=None, where: str = "",
              scenario_keys=None) -> None:
    """Set dotted ``key`` to ``value`` in a plain scenario document (in place), or in the spin-system
    document for ``system.`` keys (module docstring).

    Parameters
    ----------
    scen_doc : dict
        Plain scenario document (``section -> key -> value``; ``eyes`` a list of tables).
    sys_doc : dict or None
        Spin-system document (None when the scenario has no ``yield.system``).
    key : str
    value : object
    src : Path, optional
        The sweep file, for error messages.
    where : str
        The dotted location in the sweep file, for error messages.
    scenario_keys : set of str, optional
        Every key the sweep sets (a scalar ``light.photons`` renames ``light.names`` unless it is
        among them).
    """
    from retina.scenario import SCHEMA

    parts = _parts(key, src, where)
    if parts[0][0] == "system":
        if sys_doc is None:
            raise InputError(f"{key!r} changes the spin system, but the scenario has no yield.system",
                             source=src, key=where)
        _set_in(sys_doc, parts[1:], value, key, src, where)
        return
    sec, idx = parts[0]
    if len(parts) != 2 or parts[1][1] is not None:
        raise InputError(f"expected section.key, got {key!r}", source=src, key=where)
    name = parts[1][0]
    sections = [s.rstrip("[]") for s in SCHEMA]
    if sec not in sections:
        raise InputError(f"unknown scenario section {sec!r}{_suggest(sec, sections)}", source=src, key=where)
    schema = SCHEMA["eyes[]" if sec == "eyes" else sec]
    if name not in schema:
        raise InputError(f"unknown key {sec}.{name}{_suggest(name, schema)}", source=src, key=where)
    spec = schema[name]
    if spec.kind in ("floats", "strs") and not isinstance(value, list):
        value = [value]
        if sec == "light" and name == "photons" and not (scenario_keys and "light.names" in scenario_keys):
            scen_doc.setdefault("light", {})["names"] = [_fmt(float(v)) for v in value]
    if isinstance(value, Path):
        value = str(value)
    if sec == "eyes":
        eyes = scen_doc["eyes"]
        targets = range(len(eyes)) if idx is None else [idx]
        for i in targets:
            if i >= len(eyes):
                raise InputError(f"{key!r}: the scenario has {len(eyes)} eye(s)", source=src, key=where)
            eyes[i][name] = copy.deepcopy(value)
    else:
        if idx is not None:
            raise InputError(f"{sec} is not a list; use {sec}.{name}", source=src, key=where)
        scen_doc.setdefault(sec, {})[name] = copy.deepcopy(value)


def _plain_scenario(sc) -> dict:
    """A scenario's data as a plain document (paths as absolute strings, dates as ISO text)."""
    import datetime as _dt

    def conv(v):
        if isinstance(v, dict):
            return {k: conv(x) for k, x in v.items() if x is not None}
        if isinstance(v, list):
            return [conv(x) for x in v]
        if isinstance(v, Path):
            return str(v)
        if isinstance(v, _dt.date):
            return v.isoformat()
        return v

    return conv(copy.deepcopy(sc.data))


def expand(spec: SweepSpec, work_dir: str | Path | None = None) -> list[Point]:
    """Every point of the sweep, validated, in flat (C) order.

    Parameters
    ----------
    spec : SweepSpec
    work_dir : str or Path, optional
        Where spin systems changed by ``system.`` keys are written (``<work_dir>/systems/``);
        required when an axis or ``[set]`` has such a key.

    Returns
    -------
    list of Point

    Raises
    ------
    InputError
        A point's scenario or spin system is invalid; the message names the sweep file, the axis
        key and the point's values.
    """
    import tomli_w

    from retina.build import quick_scenario
    from retina.scenario import load_scenario, scenario_from_dict
    from retina.spin.io import system_from_document

    base_sc = load_scenario(spec.scenario_path)
    src = spec.source
    touched = set(spec.fixed) | {a.key for a in spec.axes}
    uses_system = any(k.startswith("system.") for k in touched)
    if uses_system and work_dir is None:
        raise InputError("system. keys need a work folder to write the changed spin systems", source=src)
    shape = spec.shape
    n = spec.n_points
    base_sys_doc = None
    if uses_system:
        kind, path = base_sc.yield_source
        if kind != "system":
            raise InputError("system. keys need a scenario with yield.system", source=src, key="axes")
        base_sys_doc = tomllib.loads(Path(path).read_text(encoding="utf-8"))
    points = []
    seeds_given = "scenario.seed" in touched
    children = np.random.SeedSequence(int(spec.seed)).spawn(n)
    for flat in range(n):
        pos = (flat,) * len(spec.axes) if spec.combine == "zip" else tuple(int(i) for i in np.unravel_index(flat, shape))
        params = {a.name: a.values[p] for a, p in zip(spec.axes, pos)}
        doc = _plain_scenario(base_sc)
        sys_doc = copy.deepcopy(base_sys_doc) if base_sys_doc is not None else None
        for key, val in spec.fixed.items():
            apply_key(doc, sys_doc, key, _resolve(key, val, src), src=src, where=f"set.{key}", scenario_keys=touched)
        for i, (a, p) in enumerate(zip(spec.axes, pos)):
            apply_key(doc, sys_doc, a.key, _resolve(a.key, a.values[p], src), src=src, where=f"axes[{i}].key",
                      scenario_keys=touched)
        if not seeds_given:
            doc["scenario"]["seed"] = _child_seed(children[flat])
        label = ", ".join(f"{k} = {_fmt(v)}" for k, v in params.items())
        if sys_doc is not None:
            text = tomli_w.dumps(sys_doc)
            digest = hashlib.sha256(text.encode()).hexdigest()[:16]
            sys_path = Path(work_dir) / "systems" / f"system-{digest}.toml"
            try:
                system_from_document(tomllib.loads(text), source=f"{spec.scenario_path.name} with {label}")
            except InputError as exc:
                raise InputError(f"the spin system at point {label} is invalid: {exc.detail}", source=src,
                                 key=exc.key) from None
            if not sys_path.exists():
                from retina.io.atomic import atomic_write_text

                sys_path.parent.mkdir(parents=True, exist_ok=True)
                atomic_write_text(sys_path, text, force=True)
            doc["yield"]["system"] = str(sys_path)
        try:
            sc = scenario_from_dict(doc, source=spec.scenario_path, base_dir=spec.scenario_path.parent)
        except InputError as exc:
            raise InputError(f"the scenario at point {label} is invalid: {exc.detail}", source=src,
                             key=exc.key) from None
        if spec.quick:
            sc = quick_scenario(sc)
        points.append(Point(flat, pos if spec.combine == "grid" else (flat,), params, sc))
    return points


def _resolve(key: str, value, src):
    """Path-valued scenario keys resolve from the sweep file's folder."""
    from retina.scenario import SCHEMA

    parts = key.split(".")
    if len(parts) == 2 and parts[0] in SCHEMA and SCHEMA[parts[0]].get(parts[1]) is not None \
            and SCHEMA[parts[0]][parts[1]].kind == "path" and isinstance(value, str):
        base = src.parent if src is not None else Path.cwd()
        return str((base / Path(value).expanduser()).resolve())
    return value
