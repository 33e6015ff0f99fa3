"""A sweep's points: the dotted keys applied to the base scenario, and each point's seed.

:func:`expand` turns a validated :class:`retina.sweep.schema.SweepSpec` into the list of
:class:`Point` s, each a fully validated :class:`retina.scenario.Scenario`: the ``[set]`` keys and
then the axes' values are applied to a plain copy of the base scenario (:func:`apply_key`; the
``system.`` keys to a copy of its spin-system file, written to the sweep's work folder), and point
``i`` (C order over the grid) gets the seed of the ``i``-th child of
``numpy.random.SeedSequence(seed)`` (:func:`point_seed`), so that its numbers do not depend on how
many workers ran or in which order.  What each key means is documented with the schema
(:mod:`retina.sweep.schema`).
"""

from __future__ import annotations

import copy
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from retina.errors import InputError
from retina.sweep.schema import SweepSpec, _jsonable, _suggest

__all__ = ["Point", "expand", "point_seed", "apply_key"]


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
