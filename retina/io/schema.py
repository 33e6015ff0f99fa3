"""The HDF5 schemas of the files this tool writes and reads back: one description per file kind,
used by the writer (it checks its own file before publishing it) and by the reader (it checks a
file before using it), and rendered into the documentation (:func:`describe`).

A schema (:class:`FileSchema`) lists the file's format name and version, its groups and, for each
group, its items: datasets (a shape in named dimensions) and attributes (scalars).  Each item has a
kind (float, int, str, bool, json), whether non-finite values are allowed, an optional physical
range and unit.  Dimensions are letters shared across the whole file (``N`` receptors in every
group), or derived from an attribute (``K`` coefficients from the degree ``L``).  A group may stand
for each member of a parent group (``trials/levels/*``).  Items and groups not in the schema are
allowed (forward compatibility: a newer writer may add them) and ignored by :func:`validate`.

The schemas live beside their writers: :data:`retina.io.hdf5.YIELD_SCHEMA` (yield-function files)
and :data:`retina.results.RESULTS_SCHEMA` (results files); their module docstrings show the
rendered tables.  :func:`validate` raises :class:`~retina.errors.InputError` naming the file, the
HDF5 path of the item (``/group/dataset`` or ``/group@attribute``) and what was expected.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from retina.errors import InputError

__all__ = ["Item", "Group", "FileSchema", "validate", "validate_file", "describe", "check_written", "MAX_ELEMENTS"]

MAX_ELEMENTS = 1 << 28
"""Largest dataset accepted (elements; 2 GiB of float64) before anything is read."""

_KINDS = {"float": "fiu", "int": "iu", "bool": "b", "str": "OSU", "json": "OSU"}


@dataclass(frozen=True)
class Item:
    """One dataset (``shape`` given) or attribute (``attr=True``) of a group.

    Parameters
    ----------
    name : str
    kind : {"float", "int", "bool", "str", "json"}
    shape : tuple of (int or str)
        Dataset shape in named dimensions (letters) or fixed sizes; ``()`` for attributes.
    attr : bool
        An attribute of the group rather than a dataset.
    required : bool
    finite : bool
        Reject NaN and infinities (floats).
    low, high : float, optional
        Physical range (inclusive).
    unit : str
    doc : str
    choices : tuple of str, optional
        Allowed values of a string.
    """

    name: str
    kind: str = "float"
    shape: tuple = ()
    attr: bool = False
    required: bool = True
    finite: bool = True
    low: float | None = None
    high: float | None = None
    unit: str = ""
    doc: str = ""
    choices: tuple | None = None


@dataclass(frozen=True)
class Group:
    """A group and its items; ``path`` may end in ``/*`` (each member of the parent group)."""

    path: str
    items: tuple[Item, ...]
    required: bool = True
    doc: str = ""


@dataclass(frozen=True)
class FileSchema:
    """A file kind: format attributes, groups, derived dimensions and whole-file checks.

    ``derived`` maps a dimension letter to ``(group path, attribute, function)``: the dimension's
    size is ``function(value of the attribute)``.  ``checks`` are ``(key, function)`` pairs called
    with the read values ``{"group/item": value}``; a function returns an error text or "".
    """

    format: str
    version: int
    groups: tuple[Group, ...]
    dims: dict = field(default_factory=dict)
    derived: dict = field(default_factory=dict)
    checks: tuple = ()
    format_required: bool = True


def _fail(source, key, message) -> InputError:
    return InputError(message, source=source, key=key)


def _kind_name(kind: str) -> str:
    return {"float": "a number", "int": "a whole number", "bool": "a flag", "str": "text",
            "json": "JSON text"}[kind]


def _check_value(src, key, item: Item, value, dims: dict):
    """Check one value (already read); return it as a Python/numpy value."""
    arr = np.asarray(value)
    kinds = _KINDS[item.kind]
    if arr.dtype.kind not in kinds:
        raise _fail(src, key, f"expected {_kind_name(item.kind)}, got HDF5 type {arr.dtype}")
    if item.kind in ("str", "json"):
        if arr.shape != ():
            raise _fail(src, key, f"expected one {_kind_name(item.kind)}, got an array of shape {arr.shape}")
        v = arr[()]
        if isinstance(v, bytes):
            try:
                v = v.decode("utf-8")
            except UnicodeDecodeError:
                raise _fail(src, key, "expected UTF-8 text") from None
        v = str(v)
        if item.choices is not None and v not in item.choices:
            raise _fail(src, key, f"expected one of {', '.join(item.choices)}, got {v!r}")
        if item.kind == "json":
            try:
                json.loads(v)
            except ValueError as exc:
                raise _fail(src, key, f"expected JSON text ({exc})") from None
        return v
    if arr.shape != tuple(item.shape) and not item.shape:
        raise _fail(src, key, f"expected a single {_kind_name(item.kind)}, got an array of shape {arr.shape}")
    if item.shape:
        if arr.ndim != len(item.shape):
            raise _fail(src, key, f"expected {len(item.shape)} dimensions {_shape_text(item.shape)}, got shape "
                                  f"{arr.shape}")
        for axis, (want, got) in enumerate(zip(item.shape, arr.shape)):
            if isinstance(want, int):
                if got != want:
                    raise _fail(src, key, f"expected shape {_shape_text(item.shape)}, got {arr.shape}")
            elif want in dims and dims[want][0] != got:
                size, where = dims[want]
                raise _fail(src, key, f"expected shape {_shape_text(item.shape)} with {want} = {size} "
                                      f"(from {where}), got {arr.shape}")
            else:
                dims.setdefault(want, (got, key))
    if item.kind == "float":
        a = arr.astype(float)
        if item.finite and not np.all(np.isfinite(a)):
            bad = np.argwhere(~np.isfinite(a))
            at = f" at index {tuple(int(i) for i in bad[0])}" if a.ndim else ""
            raise _fail(src, key, f"expected finite numbers, got {a[tuple(bad[0])] if a.ndim else a}{at}")
        fin = a[np.isfinite(a)]
    else:
        fin = arr.astype(np.int64) if item.kind == "int" else arr
    if item.kind in ("float", "int") and fin.size and (item.low is not None or item.high is not None):
        lo = item.low if item.low is not None else -math.inf
        hi = item.high if item.high is not None else math.inf
        out = (fin < lo) | (fin > hi)
        if np.any(out):
            v = fin[out].flat[0]
            raise _fail(src, key, f"expected values in [{lo:g}, {hi:g}]{' ' + item.unit if item.unit else ''}, "
                                  f"got {v:g}")
    return arr[()] if arr.shape == () else arr


def _shape_text(shape) -> str:
    return "(" + ", ".join(str(s) for s in shape) + ("," if len(shape) == 1 else "") + ")"


def _members(h5, path: str):
    """The HDF5 groups a schema group path stands for: ``[(path, group or None)]``."""
    import h5py

    if not path.endswith("/*"):
        obj = h5.get(path)
        return [(path, obj)]
    parent = h5.get(path[:-2])
    if parent is None or not isinstance(parent, h5py.Group):
        return []
    return [(f"{path[:-2]}/{name}", obj) for name, obj in parent.items()]


def validate(h5, schema: FileSchema, source) -> dict:
    """Check an open HDF5 file against a schema.

    Parameters
    ----------
    h5 : h5py.File
        The open file.
    schema : FileSchema
        Its description.
    source : str or Path
        File named in error messages.

    Returns
    -------
    dict
        The checked values, ``{"group/item": value}``.

    Raises
    ------
    InputError
        On the first problem, naming ``source``, the item's HDF5 path and what was expected.
    """
    import h5py

    src = str(source)
    fmt = h5.attrs.get("format")
    if isinstance(fmt, bytes):
        fmt = fmt.decode("utf-8", "replace")
    if fmt is not None or schema.format_required:
        if fmt != schema.format:
            raise _fail(src, "/@format", f"expected {schema.format!r}, got {fmt!r}; not a {schema.format} file")
        ver = h5.attrs.get("format_version")
        if not isinstance(ver, (int, np.integer)) or int(ver) != schema.version:
            raise _fail(src, "/@format_version", f"expected {schema.version}, got {ver!r}")
    dims = {k: (v, "the format") for k, v in schema.dims.items()}
    values: dict = {}
    # derived dimensions first (their attribute is checked by its own item below as well)
    for letter, (gpath, attr, fn) in schema.derived.items():
        if "@" in attr:
            ds_name, attr = attr.split("@")
            gpath = f"{gpath}/{ds_name}"
        g = h5.get(gpath)
        if g is not None and attr in g.attrs:
            raw = np.asarray(g.attrs[attr])
            if raw.dtype.kind in "iu" and raw.shape == ():
                try:
                    dims[letter] = (int(fn(int(raw))), f"/{gpath}@{attr}")
                except (ValueError, OverflowError) as exc:
                    raise _fail(src, f"/{gpath}@{attr}", f"expected {exc}, got {int(raw)}") from None
    for grp in schema.groups:
        for gpath, obj in _members(h5, grp.path):
            gkey = f"/{gpath}"
            if obj is None:
                if grp.required:
                    raise _fail(src, gkey, f"missing group; expected {grp.doc or 'this group'}")
                continue
            if not isinstance(obj, h5py.Group):
                raise _fail(src, gkey, "expected a group, got a dataset")
            for item in grp.items:
                key = f"{gkey}@{item.name}" if item.attr else f"{gkey}/{item.name}"
                if item.attr:
                    holder, aname = obj, item.name
                    if "@" in item.name:  # an attribute of a dataset of the group
                        ds_name, aname = item.name.split("@")
                        holder = obj.get(ds_name)
                        key = f"{gkey}/{item.name}"
                        if holder is None:
                            if item.required:
                                raise _fail(src, f"{gkey}/{ds_name}", "missing dataset")
                            continue
                    if aname not in holder.attrs:
                        if item.required:
                            raise _fail(src, key, f"missing attribute; expected {_kind_name(item.kind)}"
                                                  f"{' in ' + item.unit if item.unit else ''}")
                        continue
                    try:
                        raw = holder.attrs[aname]
                    except (OSError, TypeError, ValueError) as exc:
                        raise _fail(src, key, f"unreadable attribute ({exc})") from None
                else:
                    ds = obj.get(item.name)
                    if ds is None:
                        if item.required:
                            raise _fail(src, key, f"missing dataset; expected shape {_shape_text(item.shape)}")
                        continue
                    if not isinstance(ds, h5py.Dataset):
                        raise _fail(src, key, f"expected a dataset of shape {_shape_text(item.shape)}, got a group")
                    if ds.size > MAX_ELEMENTS:
                        raise _fail(src, key, f"{ds.size:,} elements; expected at most {MAX_ELEMENTS:,}")
                    if ds.dtype.kind not in _KINDS[item.kind]:
                        raise _fail(src, key, f"expected {_kind_name(item.kind)}, got HDF5 type {ds.dtype}")
                    try:
                        raw = ds[()]
                    except (OSError, TypeError, ValueError) as exc:
                        raise _fail(src, key, f"unreadable dataset ({exc})") from None
                values[f"{gpath}/{item.name}"] = _check_value(src, key, item, raw, dims)
    for key, fn in schema.checks:
        msg = fn(values)
        if msg:
            raise _fail(src, key, msg)
    return values


def validate_file(path, schema: FileSchema, *, source=None) -> dict:
    """Open a file and :func:`validate` it.

    Parameters
    ----------
    path : str or Path
        The HDF5 file.
    schema : FileSchema
        Its description.
    source : str or Path, optional
        Name used in messages (default ``path``).

    Returns
    -------
    dict
        As :func:`validate`.

    Raises
    ------
    InputError
        Also for a missing or non-HDF5 file.
    """
    import h5py

    path = Path(path)
    src = source if source is not None else path
    if not path.is_file():
        raise _fail(src, None, f"file not found; expected a {schema.format} file")
    try:
        h5 = h5py.File(path, "r")
    except OSError:
        raise _fail(src, None, f"not an HDF5 file; expected a {schema.format} file") from None
    with h5:
        return validate(h5, schema, src)


def describe(schema: FileSchema) -> str:
    """The schema as reStructuredText-friendly plain text (for module docstrings and the docs).

    Parameters
    ----------
    schema : FileSchema
        The description.

    Returns
    -------
    str
    """
    lines = [f"    /    attrs: format = {schema.format!r}, format_version = {schema.version}"]
    for grp in schema.groups:
        opt = "" if grp.required else " (optional)"
        lines.append(f"    /{grp.path}{opt}" + (f"  - {grp.doc}" if grp.doc else ""))
        for it in grp.items:
            where = (it.name if "@" in it.name else f"@{it.name}") if it.attr else f"{it.name} {_shape_text(it.shape)}"
            rng = ""
            if it.low is not None or it.high is not None:
                lo = "-inf" if it.low is None else f"{it.low:g}"
                hi = "inf" if it.high is None else f"{it.high:g}"
                rng = f" in [{lo}, {hi}]"
            extra = [it.kind + rng]
            if it.unit:
                extra.append(it.unit)
            if not it.finite:
                extra.append("NaN/inf allowed")
            if not it.required:
                extra.append("optional")
            if it.choices:
                extra.append("one of " + ", ".join(it.choices))
            doc = f"; {it.doc}" if it.doc else ""
            lines.append(f"        {where:34s} {', '.join(extra)}{doc}")
    if schema.derived:
        for letter, (g, a, _) in schema.derived.items():
            lines.append(f"    dimension {letter} follows from /{g}{'/' if '@' in a else '@'}{a}")
    return "::\n\n" + "\n".join(lines) + "\n"


def check_written(path, schema: FileSchema, *, target) -> None:
    """The writer's self-check: a file it wrote must pass its own schema.

    Parameters
    ----------
    path : str or Path
        The file just written (still under its temporary name).
    schema : FileSchema
        Its description.
    target : str or Path
        The final name, used in the message.

    Raises
    ------
    RuntimeError
        When the file fails its schema (a programming error, never the user's).
    """
    try:
        validate_file(path, schema, source=target)
    except InputError as exc:
        raise RuntimeError(f"the writer produced a file outside its own schema: {exc}") from None

