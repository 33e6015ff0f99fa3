"""Import a yield table computed by another engine and fit it as a :class:`YieldFunction`.

Formats (chosen by content first, then by extension)
----------------------------------------------------
CSV (``.csv``, ``.txt``)
    A header line is required; cells are separated by commas, semicolons, tabs or spaces (the
    first of these found in the header).  Columns ``x, y, z, value`` (a direction in the molecular frame,
    normalised here) or ``theta_deg, phi_deg, value`` (polar angle from +z and azimuth from +x
    towards +y, degrees).  Other columns are ignored; ``#`` starts a comment line.
NPZ (``.npz``)
    Arrays ``directions`` (N, 3) and ``values`` (N,).
HDF5 (``.h5``, ``.hdf5``)
    Datasets ``directions`` (N, 3) and ``values`` (N,) by default; other names through
    ``directions_key`` / ``values_key`` (paths inside the file are allowed, e.g. ``"run1/dirs"``).

Fit: the even degrees ``0..L`` by linear least squares (:func:`scipy.linalg.lstsq` on
:func:`retina.sphere.real_sh`).  Directions may cover only one hemisphere, since the yield is even.
The fit reports the residual at the data points (rms and max, yield units), the numerical rank of
the design matrix and its condition number; when the directions do not determine all ``K``
coefficients (rank < K, or condition number above 1e8) it issues a :class:`FitWarning` and records
the warning in the provenance.
"""

from __future__ import annotations

import csv
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.linalg

from retina import sphere
from retina.errors import InputError

__all__ = ["FitWarning", "FitReport", "read_table", "fit_least_squares", "import_table"]

CONDITION_LIMIT = 1e8
_CART = ("x", "y", "z", "value")
_ANGLES = ("theta_deg", "phi_deg", "value")


class FitWarning(UserWarning):
    """The directions of an imported table do not pin down every coefficient of degree L."""


@dataclass(frozen=True)
class FitReport:
    """Least-squares fit diagnostics.

    Attributes
    ----------
    rms, max : float
        Residual at the data points, yield units.
    rank : int
        Numerical rank of the (N, K) design matrix.
    n_coeffs : int
        K for the requested degree.
    condition : float
        Ratio of the largest to the smallest singular value (inf when rank deficient).
    warning : str
        Empty when the fit is well posed.
    """

    rms: float
    max: float
    rank: int
    n_coeffs: int
    condition: float
    warning: str = ""


# ------------------------------------------------------------------------------ readers


def _csv_table(path: Path, text: str) -> tuple[np.ndarray, np.ndarray, str]:
    lines = [(i + 1, ln) for i, ln in enumerate(text.splitlines()) if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError("empty table; expected a header line and rows", source=path)
    header_line, header = lines[0]
    delim = next((c for c in ",;\t" if c in header), " ")
    raw = header.split() if delim == " " else next(csv.reader([header], delimiter=delim))
    names = [h.strip().lower() for h in raw]
    if set(_CART) <= set(names):
        wanted, kind = _CART, "cartesian"
    elif set(_ANGLES) <= set(names):
        wanted, kind = _ANGLES, "angles"
    else:
        if all(_is_float(n) for n in names):
            raise InputError(f"line {header_line}: no header; expected a first line naming the columns "
                             "x,y,z,value or theta_deg,phi_deg,value", source=path)
        raise InputError(f"line {header_line}: header has columns {', '.join(names)}; expected x,y,z,value "
                         "or theta_deg,phi_deg,value", source=path)
    cols = [names.index(w) for w in wanted]
    rows = []
    for lineno, ln in lines[1:]:
        cells = [c.strip() for c in (ln.split() if delim == " " else next(csv.reader([ln], delimiter=delim)))]
        if len(cells) < len(names):
            raise InputError(f"line {lineno}: {len(cells)} cells, the header names {len(names)} columns",
                             source=path)
        row = []
        for w, c in zip(wanted, cols):
            try:
                x = float(cells[c])
            except ValueError:
                raise InputError(f"line {lineno}, column {w!r}: expected a number, got {cells[c]!r}",
                                 source=path, key=w) from None
            if not np.isfinite(x):
                raise InputError(f"line {lineno}, column {w!r}: expected a finite number, got {cells[c]!r}",
                                 source=path, key=w)
            row.append(x)
        rows.append(row)
    if not rows:
        raise InputError("no data rows after the header", source=path)
    data = np.array(rows)
    if kind == "cartesian":
        dirs = data[:, :3]
        norms = np.linalg.norm(dirs, axis=1)
        bad = np.flatnonzero(norms == 0)
        if bad.size:
            raise InputError(f"line {lines[1 + bad[0]][0]}, columns x,y,z: the zero vector is not a direction",
                             source=path, key="x,y,z")
        dirs = dirs / norms[:, None]
    else:
        t, p = np.radians(data[:, 0]), np.radians(data[:, 1])
        dirs = np.stack([np.sin(t) * np.cos(p), np.sin(t) * np.sin(p), np.cos(t)], axis=1)
    return dirs, data[:, -1], f"csv ({kind})"


def _is_float(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def _check_arrays(path: Path, dirs, values, dkey: str, vkey: str) -> tuple[np.ndarray, np.ndarray]:
    d = np.asarray(dirs)
    v = np.asarray(values)
    if d.dtype.kind not in "iuf":
        raise InputError(f"expected numbers, got dtype {d.dtype}", source=path, key=dkey)
    if v.dtype.kind not in "iuf":
        raise InputError(f"expected numbers, got dtype {v.dtype}", source=path, key=vkey)
    d, v = d.astype(float), v.astype(float)
    if d.ndim != 2 or d.shape[1] != 3:
        raise InputError(f"expected shape (N, 3), got {d.shape}", source=path, key=dkey)
    if v.ndim != 1 or v.shape[0] != d.shape[0]:
        raise InputError(f"expected shape ({d.shape[0]},) to match {dkey}, got {v.shape}", source=path, key=vkey)
    if not np.all(np.isfinite(d)):
        raise InputError(f"row {int(np.flatnonzero(~np.isfinite(d).all(axis=1))[0])}: not finite", source=path, key=dkey)
    if not np.all(np.isfinite(v)):
        raise InputError(f"entry {int(np.flatnonzero(~np.isfinite(v))[0])}: not finite", source=path, key=vkey)
    n = np.linalg.norm(d, axis=1)
    if np.any(n == 0):
        raise InputError(f"row {int(np.flatnonzero(n == 0)[0])}: the zero vector is not a direction",
                         source=path, key=dkey)
    return d / n[:, None], v


def _npz_table(path: Path) -> tuple[np.ndarray, np.ndarray, str]:
    try:
        with np.load(path, allow_pickle=False) as z:
            names = list(z.files)
            for k in ("directions", "values"):
                if k not in names:
                    raise InputError(f"no array {k!r} (arrays present: {', '.join(names) or 'none'}); "
                                     "expected directions (N, 3) and values (N,)", source=path, key=k)
            d, v = z["directions"], z["values"]
    except InputError:
        raise
    except (ValueError, OSError) as exc:
        raise InputError(f"not a readable NPZ file ({exc})", source=path) from None
    d, v = _check_arrays(path, d, v, "directions", "values")
    return d, v, "npz"


def _h5_table(path: Path, dkey: str, vkey: str) -> tuple[np.ndarray, np.ndarray, str]:
    import h5py

    try:
        f = h5py.File(path, "r")
    except OSError:
        raise InputError("not an HDF5 file", source=path) from None
    with f:
        arrays = {}
        for k in (dkey, vkey):
            if k not in f or not isinstance(f[k], h5py.Dataset):
                present = []
                f.visititems(lambda name, obj: present.append(name) if isinstance(obj, h5py.Dataset) else None)
                raise InputError(f"no dataset {k!r} (datasets present: {', '.join(present) or 'none'})",
                                 source=path, key=k)
            arrays[k] = f[k][()]
    d, v = _check_arrays(path, arrays[dkey], arrays[vkey], dkey, vkey)
    return d, v, "hdf5"


def read_table(path: str | Path, *, directions_key: str = "directions", values_key: str = "values"
               ) -> tuple[np.ndarray, np.ndarray, str]:
    """Read a table of yields at directions.

    Returns
    -------
    directions : ndarray (N, 3)
        Unit vectors, molecular frame.
    values : ndarray (N,)
    fmt : str
        The format recognised ("csv (cartesian)", "csv (angles)", "npz", "hdf5").

    Raises
    ------
    InputError
        Naming the file and the column, array or dataset at fault.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError("file not found; expected a CSV, NPZ or HDF5 table", source=path)
    with path.open("rb") as fh:
        head = fh.read(8)
    if head.startswith(b"\x89HDF\r\n\x1a\n"):
        return _h5_table(path, directions_key, values_key)
    if head.startswith(b"PK\x03\x04"):
        return _npz_table(path)
    suffix = path.suffix.lower()
    if suffix in (".h5", ".hdf5", ".npz"):
        raise InputError(f"the extension says {suffix[1:]} but the content is not; known formats: CSV, NPZ, HDF5",
                         source=path)
    try:
        text = path.read_bytes().decode("utf-8-sig")  # a byte-order mark is dropped
    except UnicodeDecodeError:
        raise InputError("not a CSV text file, an NPZ archive or an HDF5 file", source=path) from None
    return _csv_table(path, text)


# ------------------------------------------------------------------------------ fitting


def fit_least_squares(directions, values, degree: int) -> tuple[np.ndarray, FitReport]:
    """Fit even degrees ``0..L`` to scattered values by linear least squares.

    Parameters
    ----------
    directions : array_like, shape (N, 3)
    values : array_like, shape (N,)
    degree : int
        Even ``L``.

    Returns
    -------
    coeffs : ndarray (K,)
        The minimum-norm least-squares solution.
    report : FitReport
    """
    d = np.asarray(directions, dtype=float)
    v = np.asarray(values, dtype=float)
    Y = sphere.real_sh(degree, d)
    K = Y.shape[1]
    coeffs, _, rank, sv = scipy.linalg.lstsq(Y, v, lapack_driver="gelsd")
    resid = Y @ coeffs - v
    cond = float(sv[0] / sv[-1]) if (sv.size and sv[-1] > 0 and rank == K) else float("inf")
    msg = ""
    if rank < K:
        msg = (f"the {d.shape[0]} directions constrain only {rank} of the {K} coefficients of degree {degree}; "
               "lower the degree or supply more, better spread directions")
    elif cond > CONDITION_LIMIT:
        msg = (f"the fit of degree {degree} is ill conditioned (condition number {cond:.2g}); "
               "lower the degree or supply better spread directions")
    return coeffs, FitReport(float(np.sqrt(np.mean(resid**2))), float(np.max(np.abs(resid))), int(rank), K, cond, msg)


def import_table(path: str | Path, degree: int, *, directions_key: str = "directions",
                 values_key: str = "values", provenance: dict | None = None):
    """Read another engine's table and fit it as a :class:`retina.yieldfn.YieldFunction`.

    The provenance records the file, format, number of points, degree, residual rms and max, rank,
    condition number and any fit warning; ``fit_error`` is the maximum residual.

    Warns
    -----
    FitWarning
        When the directions do not determine every coefficient (see the module docstring).
    """
    from retina.yieldfn import YieldFunction, _check_degree, content_hash, package_versions

    path = Path(path)
    degree = _check_degree(degree)
    dirs, values, fmt = read_table(path, directions_key=directions_key, values_key=values_key)
    coeffs, rep = fit_least_squares(dirs, values, degree)
    if rep.warning:
        warnings.warn(f"{path}: {rep.warning}", FitWarning, stacklevel=2)
    prov = dict(provenance or {})
    prov.update({
        "kind": "imported",
        "import_file": str(path),
        "import_format": fmt,
        "import_points": int(dirs.shape[0]),
        "degree": degree,
        "fit": "least squares (scipy.linalg.lstsq, gelsd)",
        "residual_rms": rep.rms,
        "residual_max": rep.max,
        "fit_rank": rep.rank,
        "fit_coefficients": rep.n_coeffs,
        "fit_condition": rep.condition,
        "fit_warning": rep.warning,
        "versions": package_versions(),
        "content_hash": content_hash(coeffs, degree),
    })
    return YieldFunction(coeffs, degree, prov, rep.max)
