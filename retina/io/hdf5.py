"""The native HDF5 file of a yield function.

Layout (format version 1)
-------------------------
::

    /                            attrs: format = "retina-compass yield function", format_version = 1
    /yield_function/coeffs       float64 (K,)  even-degree real-SH coefficients (retina.sphere layout)
        attrs: degree (int), basis = "real-sh-even-orthonormal-no-cs", mean (float, informative),
               fit_error (float; absent when unknown)
    /provenance                  group: the provenance dict (retina.yieldfn docstring)
        attrs                    one attribute per str / int / float / bool entry
        <name> (group)           a nested dict, recursively
        <name> (scalar dataset)  strings longer than 1024 characters, e.g. spin_system_toml
                                 (the spin system as canonical TOML text), UTF-8

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
import threading
from pathlib import Path
from typing import NamedTuple

import numpy as np

from retina.errors import InputError
from retina.io.atomic import atomic_path

__all__ = ["save_yield_function", "read_yield_function", "YieldRecord", "content_hash", "BASIS", "FORMAT",
           "FORMAT_VERSION"]

FORMAT = "retina-compass yield function"
FORMAT_VERSION = 1
BASIS = "real-sh-even-orthonormal-no-cs"
"""The coefficient basis: real, orthonormal, even-degree spherical harmonics without the
Condon-Shortley phase (:mod:`retina.sphere`)."""
_LONG_STRING = 1024


def content_hash(coeffs: np.ndarray, degree: int) -> str:
    """sha256 hex digest of :data:`BASIS`, ``degree`` and the little-endian float64 bytes of ``coeffs``."""
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


def _read_dict(group) -> dict:
    import h5py

    out = {k: _plain(v) for k, v in group.attrs.items()}
    for key, item in group.items():
        if isinstance(item, h5py.Group):
            out[key] = _read_dict(item)
        else:
            out[key] = _plain(item[()])
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
    return path


def read_yield_function(path: str | Path) -> YieldRecord:
    """Read a native yield-function file.

    Returns
    -------
    YieldRecord

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

    from retina import sphere

    try:
        f = h5py.File(path, "r")
    except OSError:
        raise InputError("not an HDF5 file; expected a yield-function file written by retina-compass",
                         source=path) from None
    with f:
        if "yield_function/coeffs" not in f:
            raise InputError("no dataset /yield_function/coeffs; not a retina-compass yield-function file "
                             "(import other engines' tables with retina.io.importers)", source=path,
                             key="/yield_function/coeffs")
        ds = f["yield_function/coeffs"]
        if not isinstance(ds, h5py.Dataset):
            raise InputError("expected a dataset", source=path, key="/yield_function/coeffs")
        if "degree" not in ds.attrs:
            raise InputError("missing attribute 'degree'", source=path, key="/yield_function/coeffs")
        basis = _plain(ds.attrs.get("basis", ""))
        if basis != BASIS:
            raise InputError(f"basis is {basis!r}; expected {BASIS!r}", source=path,
                             key="/yield_function/coeffs.basis")
        coeffs = np.asarray(ds[()], dtype=float)
        degree = int(ds.attrs["degree"])
        if coeffs.ndim != 1 or degree < 0 or degree % 2 or coeffs.shape[0] != sphere.n_coeffs(degree):
            raise InputError(f"coefficient vector of shape {coeffs.shape} does not match degree {degree}",
                             source=path, key="/yield_function/coeffs")
        fit_error = _plain(ds.attrs["fit_error"]) if "fit_error" in ds.attrs else None
        prov = _read_dict(f["provenance"]) if "provenance" in f else {}
    return YieldRecord(coeffs, degree, prov, fit_error)
