"""The native HDF5 file of a yield function.

Layout (format version 1; the table is rendered from :data:`YIELD_SCHEMA`, which the writer
checks its own file against and the reader checks every file against; see :mod:`retina.io.schema`)
---------------------------------------------------------------------------------------------------
/provenance is a group: the provenance dict (retina.yieldfn docstring), one attribute per str /
int / float / bool entry, a sub-group per nested dict, and a scalar UTF-8 dataset for strings longer
than 1024 characters (e.g. spin_system_toml, the spin system as canonical TOML text).

{schema}
Writing is atomic (:mod:`retina.io.atomic`); reading returns the coefficients bit for bit and the
provenance as the same Python types (str, int, float, bool, dict).

This module sits below :mod:`retina.yieldfn` and :mod:`retina.cache` and imports neither: it
writes any object with ``coeffs``, ``degree``, ``mean``, ``fit_error`` and ``provenance`` and
reads into a plain :class:`YieldRecord` (:meth:`retina.yieldfn.YieldFunction.load` turns it into
a yield function).  It also owns :data:`BASIS` and :func:`content_hash`, the checksum stored in the
provenance of every yield function.
"""

from __future__ import annotations

import hashlib
import math
import threading
from pathlib import Path
from typing import NamedTuple

import numpy as np

from retina.errors import InputError
from retina.io.atomic import atomic_path
from retina.io.schema import FileSchema, Group, Item, check_written, describe, validate

__all__ = ["save_yield_function", "read_yield_function", "YieldRecord", "content_hash", "BASIS", "FORMAT",
           "FORMAT_VERSION"]

FORMAT = "retina-compass yield function"
FORMAT_VERSION = 1
BASIS = "real-sh-even-orthonormal-no-cs"
"""The coefficient basis: real, orthonormal, even-degree spherical harmonics without the
Condon-Shortley phase (:mod:`retina.sphere`)."""
_LONG_STRING = 1024
MAX_DEGREE = 64
"""Largest degree a yield-function file may hold: the largest the Lebedev rules of scipy support
(checked against :func:`retina.yieldfn._check_degree` in the tests)."""


def _n_coeffs(degree: int) -> int:
    if degree < 0 or degree % 2 or degree > MAX_DEGREE:
        raise ValueError("an even degree between 2 and 64")
    return (degree + 1) * (degree + 2) // 2


def _mean_is_a_yield(values: dict) -> str:
    c = values.get("yield_function/coeffs")
    if c is None:
        return ""
    mean = float(np.asarray(c)[0]) / math.sqrt(4 * math.pi)
    if not 0 < mean <= 1 + 1e-9:
        return (f"the mean yield (first coefficient / sqrt(4 pi)) is {mean:.6g}; expected a reaction yield "
                "in (0, 1]")
    return ""


YIELD_SCHEMA = FileSchema(
    format="retina-compass yield function",
    version=1,
    groups=(
        Group("yield_function", (
            Item("coeffs", "float", ("K",), doc="even-degree real-SH coefficients (retina.sphere layout)"),
            Item("coeffs@degree", "int", attr=True, low=2, high=MAX_DEGREE, doc="even L"),
            Item("coeffs@basis", "str", attr=True, choices=(BASIS,)),
            Item("coeffs@mean", "float", attr=True, required=False, low=0, high=1, doc="informative"),
            Item("coeffs@fit_error", "float", attr=True, required=False, low=0, doc="absent when unknown"),
        ), doc="the coefficients"),
    ),
    derived={"K": ("yield_function", "coeffs@degree", _n_coeffs)},
    format_required=False,
    checks=(("/yield_function/coeffs", _mean_is_a_yield),),
)


def content_hash(coeffs: np.ndarray, degree: int) -> str:
    """The content hash of a yield function.

    sha256 of :data:`BASIS`, ``degree`` and the little-endian float64 bytes of ``coeffs``.

    Parameters
    ----------
    coeffs : ndarray, shape (K,)
        Even-degree coefficients.
    degree : int
        Their degree ``L``.

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    h = hashlib.sha256()
    h.update(f"{BASIS}:{int(degree)}:".encode())
    h.update(np.ascontiguousarray(coeffs, dtype="<f8").tobytes())
    return h.hexdigest()


class YieldRecord(NamedTuple):
    """The content of a yield-function file.

    Attributes
    ----------
    coeffs : ndarray (K,)
        Even-degree coefficients, ``K = (L + 1)(L + 2) / 2``.
    degree : int
        ``L``.
    provenance : dict
    fit_error : float or None
    """

    coeffs: np.ndarray
    degree: int
    provenance: dict
    fit_error: float | None

#: HDF5 is not thread-safe: every file access of this module holds this lock (worker threads of the
#: viewer may save and load concurrently).
HDF5_LOCK = threading.RLock()


def _write_dict(group, d: dict, where: str) -> None:
    import h5py

    for key, value in d.items():
        if not isinstance(key, str) or not key or "/" in key:
            raise ValueError(f"provenance key {where}{key!r} must be a non-empty string without '/'")
        if isinstance(value, dict):
            _write_dict(group.create_group(key), value, f"{where}{key}.")
        elif isinstance(value, str):
            if len(value) > _LONG_STRING:
                group.create_dataset(key, data=value, dtype=h5py.string_dtype("utf-8"))
            else:
                group.attrs.create(key, value, dtype=h5py.string_dtype("utf-8"))
        elif isinstance(value, (bool, np.bool_)):
            group.attrs[key] = np.bool_(value)
        elif isinstance(value, (int, np.integer)):
            group.attrs[key] = np.int64(value)
        elif isinstance(value, (float, np.floating)):
            group.attrs[key] = np.float64(value)
        else:
            raise ValueError(f"provenance entry {where}{key} has type {type(value).__name__}; "
                             "expected str, int, float, bool or dict")


def _plain(value):
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.ndarray) and value.shape == ():
        return _plain(value[()])
    return value


def _read_dict(group, source=None, where: str = "/provenance") -> dict:
    """A provenance group back to a dict; anything but scalars, strings and sub-groups is refused."""
    import h5py

    out = {}
    for k, v in group.attrs.items():
        p = _plain(v)
        if not isinstance(p, (str, int, float, bool)):
            raise InputError(f"expected a number, flag or text, got an array of shape {np.shape(v)}",
                             source=source, key=f"{where}@{k}")
        out[k] = p
    for key, item in group.items():
        if isinstance(item, h5py.Group):
            out[key] = _read_dict(item, source, f"{where}/{key}")
        elif item.shape == () and item.dtype.kind in "OSU":
            out[key] = _plain(item[()])
        else:
            raise InputError(f"expected a scalar text dataset, got {item.dtype} of shape {item.shape}",
                             source=source, key=f"{where}/{key}")
    return out


def save_yield_function(yf, path: str | Path, *, force: bool = False) -> Path:
    """Write ``yf`` (a :class:`retina.yieldfn.YieldFunction`) to ``path`` atomically.

    Parameters
    ----------
    yf : YieldFunction
        Any object with ``coeffs (K,)``, ``degree``, ``mean``, ``fit_error`` and ``provenance``.
    path : str or Path
    force : bool
        Replace an existing file.

    Returns
    -------
    Path

    Raises
    ------
    InputError
        When ``path`` exists and ``force`` is false, or its folder does not exist.
    """
    import h5py

    path = Path(path)
    with HDF5_LOCK, atomic_path(path, force=force) as tmp:
        with h5py.File(tmp, "w") as f:
            f.attrs.create("format", FORMAT, dtype=h5py.string_dtype("utf-8"))
            f.attrs["format_version"] = np.int64(FORMAT_VERSION)
            g = f.create_group("yield_function")
            ds = g.create_dataset("coeffs", data=np.asarray(yf.coeffs, dtype="<f8"))
            ds.attrs["degree"] = np.int64(yf.degree)
            ds.attrs.create("basis", BASIS, dtype=h5py.string_dtype("utf-8"))
            ds.attrs["mean"] = np.float64(yf.mean)
            if yf.fit_error is not None:
                ds.attrs["fit_error"] = np.float64(yf.fit_error)
            _write_dict(f.create_group("provenance"), yf.provenance, "")
        check_written(tmp, YIELD_SCHEMA, target=path)
    return path


def read_yield_function(path: str | Path) -> YieldRecord:
    """Read a native yield-function file.

    Parameters
    ----------
    path : str or Path
        The HDF5 file (layout :data:`YIELD_SCHEMA`).

    Returns
    -------
    YieldRecord
        Coefficients, degree, provenance and fit error, checked against the schema.

    Raises
    ------
    InputError
        When the file is missing, is not HDF5, or lacks the datasets and attributes of the layout
        (the message names the file and what is missing).
    """
    path = Path(path)
    if not path.exists():
        raise InputError("file not found; expected a yield-function HDF5 file", source=path)
    with HDF5_LOCK:
        return _load(path)


def _load(path: Path):
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError:
        raise InputError("not an HDF5 file; expected a yield-function file written by retina-compass",
                         source=path) from None
    with f:
        if f.attrs.get("format") is None and "yield_function/coeffs" not in f:
            raise InputError("no dataset /yield_function/coeffs; not a retina-compass yield-function file "
                             "(import other engines' tables with retina.io.importers)", source=path,
                             key="/yield_function/coeffs")
        values = validate(f, YIELD_SCHEMA, path)
        coeffs = np.asarray(values["yield_function/coeffs"], dtype=float)
        degree = int(values["yield_function/coeffs@degree"])
        fe = values.get("yield_function/coeffs@fit_error")
        fit_error = None if fe is None else float(fe)
        prov = {}
        if "provenance" in f:
            if not isinstance(f["provenance"], h5py.Group):
                raise InputError("expected a group of provenance attributes, got a dataset", source=path,
                                 key="/provenance")
            prov = _read_dict(f["provenance"], path, "/provenance")
    return YieldRecord(coeffs, degree, prov, fit_error)


__doc__ = __doc__.replace("{schema}", describe(YIELD_SCHEMA))
