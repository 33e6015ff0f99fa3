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

Values are reaction yields: probabilities in [0, 1] (rounding of 1e-9 outside is clipped), not all
zero; at most 10,000,000 points and 2 GiB of file.

Fit: the even degrees ``0..L`` by linear least squares on :func:`retina.sphere.real_sh`: the normal
equations (Cholesky) when the design matrix is well conditioned (condition number <= 1e4, checked
from the Gram matrix's eigenvalues), otherwise :func:`scipy.linalg.lstsq` with the SVD driver; see
:func:`fit_least_squares`.  Directions may cover only one hemisphere, since the yield is even.
The fit reports the residual at the data points (rms and max, yield units), the numerical rank of
the design matrix and its condition number; when the directions do not determine all ``K``
coefficients (rank < K, or condition number above 1e8) it issues a :class:`FitWarning` and records
the warning in the provenance.
"""

from __future__ import annotations

import csv
import zipfile
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.linalg

from retina import sphere
from retina.errors import InputError

__all__ = ["FitWarning", "FitReport", "read_table", "fit_least_squares", "import_table", "fit_bytes",
           "check_fit_memory"]

CONDITION_LIMIT = 1e8
NORMAL_CONDITION_LIMIT = 1e4
MAX_TABLE_POINTS = 10_000_000
"""Largest table accepted (a (N, K) design matrix of degree 16 at this size takes 12 GiB; the memory
guard of :func:`import_table` refuses earlier when the machine has less)."""
MAX_TABLE_BYTES = 2 * 2**30
"""Files larger than this are refused before parsing."""
YIELD_SLACK = 1e-9
"""Rounding tolerated outside [0, 1] in imported yields (clipped back into [0, 1])."""
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
    solver : str
        Which solve was used: ``"normal equations (Cholesky)"`` or ``"scipy.linalg.lstsq, gelsd"``.
    """

    rms: float
    max: float
    rank: int
    n_coeffs: int
    condition: float
    warning: str = ""
    solver: str = ""


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
    data = _csv_fast(lines, delim, cols, len(names))
    if data is None:
        data = _csv_slow(path, lines, delim, wanted, cols, len(names))
    if not data.shape[0]:
        raise InputError("no data rows after the header", source=path)
    return _csv_directions(path, lines, data, kind)


def _csv_fast(lines, delim, cols, n_names):
    """Parse the data lines with numpy's C reader; None when any line is not plain (the slow reader
    then finds and names the faulty line)."""
    import io

    if len(lines) < 2:
        return np.zeros((0, len(cols)))
    body = "\n".join(ln for _, ln in lines[1:])
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            data = np.loadtxt(io.StringIO(body), delimiter=None if delim == " " else delim, usecols=None,
                              ndmin=2, dtype=float, comments=None)
    except (ValueError, Warning):
        return None
    if data.shape[1] < n_names or not np.all(np.isfinite(data[:, cols])):
        return None
    return data[:, cols]


def _csv_slow(path, lines, delim, wanted, cols, n_names):
    rows = []
    for lineno, ln in lines[1:]:
        cells = [c.strip() for c in (ln.split() if delim == " " else next(csv.reader([ln], delimiter=delim)))]
        if len(cells) < n_names:
            raise InputError(f"line {lineno}: {len(cells)} cells, the header names {n_names} columns",
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
    return np.array(rows).reshape(len(rows), len(wanted))


def _csv_directions(path, lines, data, kind):
    if kind == "cartesian":
        dirs, bad = _unit_rows(data[:, :3])
        if bad.size:
            raise InputError(f"line {lines[1 + bad[0]][0]}, columns x,y,z: the zero vector is not a direction",
                             source=path, key="x,y,z")
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
    d, bad = _unit_rows(d)
    if bad.size:
        raise InputError(f"row {int(bad[0])}: the zero vector is not a direction", source=path, key=dkey)
    return d, v


def _unit_rows(d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows scaled to unit length without overflow (each row is first divided by its largest entry);
    also the indices of zero rows."""
    scale = np.max(np.abs(d), axis=1)
    bad = np.flatnonzero(scale == 0)
    if bad.size:
        return d, bad
    d = d / scale[:, None]
    return d / np.linalg.norm(d, axis=1)[:, None], bad


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
    except (ValueError, OSError, EOFError, zipfile.BadZipFile, KeyError) as exc:
        raise InputError(f"not a readable NPZ file ({exc}); expected arrays directions (N, 3) and values (N,)",
                         source=path) from None
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
            ds = f[k]
            if ds.size > 3 * MAX_TABLE_POINTS:
                raise InputError(f"{ds.size:,} entries; expected at most {3 * MAX_TABLE_POINTS:,}", source=path, key=k)
            if ds.dtype.kind not in "iuf":
                raise InputError(f"expected numbers, got dtype {ds.dtype}", source=path, key=k)
            arrays[k] = ds[()]
    d, v = _check_arrays(path, arrays[dkey], arrays[vkey], dkey, vkey)
    return d, v, "hdf5"


def read_table(path: str | Path, *, directions_key: str = "directions", values_key: str = "values"
               ) -> tuple[np.ndarray, np.ndarray, str]:
    """Read a table of yields at directions.

    Parameters
    ----------
    path : str or Path
        CSV (``x,y,z,value`` or ``theta_deg,phi_deg,value``), NPZ or HDF5 (module docstring).
    directions_key, values_key : str
        Array or dataset names in NPZ and HDF5 files.

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
    size = path.stat().st_size
    if size > MAX_TABLE_BYTES:
        raise InputError(f"file of {size / 2**30:.3g} GiB; expected a table of at most "
                         f"{MAX_TABLE_BYTES / 2**30:g} GiB (about {MAX_TABLE_POINTS:,} points)", source=path)
    with path.open("rb") as fh:
        head = fh.read(8)
    if head.startswith(b"\x89HDF\r\n\x1a\n"):
        return _check_values(path, *_h5_table(path, directions_key, values_key), values_key)
    if head.startswith(b"PK\x03\x04"):
        return _check_values(path, *_npz_table(path), "values")
    suffix = path.suffix.lower()
    if suffix in (".h5", ".hdf5", ".npz"):
        raise InputError(f"the extension says {suffix[1:]} but the content is not; known formats: CSV, NPZ, HDF5",
                         source=path)
    try:
        text = path.read_bytes().decode("utf-8-sig")  # a byte-order mark is dropped
    except UnicodeDecodeError:
        raise InputError("not a CSV text file, an NPZ archive or an HDF5 file", source=path) from None
    return _check_values(path, *_csv_table(path, text), "value")


def _check_values(path: Path, dirs: np.ndarray, values: np.ndarray, fmt: str, vkey: str):
    """The table's physical checks, the same for every format: at most MAX_TABLE_POINTS points,
    values are reaction yields (probabilities in [0, 1], with YIELD_SLACK for rounding) and not all
    zero (the relative modulation divides by the mean yield)."""
    n = int(values.shape[0])
    if n == 0:
        raise InputError("no points; expected at least one direction and value", source=path, key=vkey)
    if n > MAX_TABLE_POINTS:
        raise InputError(f"{n:,} points; expected at most {MAX_TABLE_POINTS:,}", source=path, key=vkey)
    bad = np.flatnonzero((values < -YIELD_SLACK) | (values > 1 + YIELD_SLACK))
    if bad.size:
        raise InputError(f"entry {int(bad[0])} is {values[bad[0]]:.6g}; expected a reaction yield in [0, 1]",
                         source=path, key=vkey)
    if not np.any(values > YIELD_SLACK):
        raise InputError("every value is zero; expected reaction yields with a positive mean",
                         source=path, key=vkey)
    return dirs, np.clip(values, 0.0, 1.0), fmt


# ------------------------------------------------------------------------------ fitting


def fit_least_squares(directions, values, degree: int, *, method: str = "auto") -> tuple[np.ndarray, FitReport]:
    """Fit even degrees ``0..L`` to scattered values by linear least squares.

    Parameters
    ----------
    directions : array_like, shape (N, 3)
    values : array_like, shape (N,)
    degree : int
        Even ``L``.
    method : {"auto", "normal", "svd"}
        ``"auto"`` (default) solves the normal equations ``(Y^T Y) c = Y^T v`` by a Cholesky
        factorisation when the design matrix ``Y (N, K)`` is well conditioned, and falls back to the
        SVD driver otherwise (see below); ``"svd"`` always uses :func:`scipy.linalg.lstsq` with the
        ``gelsd`` driver (the minimum-norm solution; the reference path of the import benchmark);
        ``"normal"`` forces the normal equations (an error when ``Y`` is not of full rank).

    Returns
    -------
    coeffs : ndarray (K,)
        The least-squares solution (minimum-norm when rank deficient).
    report : FitReport

    Notes
    -----
    Conditioning check: the singular values of ``Y`` are the square roots of the eigenvalues of the
    Gram matrix ``G = Y^T Y`` (a ``K x K`` matrix, cheap).  Forming ``G`` squares the condition number,
    so the normal equations lose about ``cond(Y)^2 * eps`` of relative accuracy (Golub and Van Loan,
    *Matrix Computations*, section 5.3, from memory).  They are used only when the condition number
    estimated from ``G`` is at most :data:`NORMAL_CONDITION_LIMIT` (1e4, so at most ~1e-8 relative
    error in double precision); eigenvalues of ``G`` below ``eps * max`` are not resolved, so the
    estimate is itself reliable only up to ~1e7, well above that limit.  Above the limit (an
    ill-conditioned or rank-deficient table) the SVD driver gives the exact rank, condition number and
    minimum-norm solution, and the :class:`FitWarning` logic is unchanged.
    """
    if method not in ("auto", "normal", "svd"):
        raise ValueError(f"method must be 'auto', 'normal' or 'svd', got {method!r}")
    d = np.asarray(directions, dtype=float)
    v = np.asarray(values, dtype=float)
    Y = sphere.real_sh(degree, d)
    K = Y.shape[1]
    coeffs = None
    if method != "svd" and d.shape[0] >= K:
        G = Y.T @ Y
        ev = np.linalg.eigvalsh(G)
        top = float(ev[-1])
        cond_est = float(np.sqrt(top / ev[0])) if ev[0] > 0 else float("inf")
        if top > 0 and cond_est <= NORMAL_CONDITION_LIMIT:
            coeffs = scipy.linalg.cho_solve(scipy.linalg.cho_factor(G, check_finite=False), Y.T @ v,
                                            check_finite=False)
            rank, cond, solver = K, cond_est, "normal equations (Cholesky)"
        elif method == "normal":
            raise ValueError(f"the normal equations need a well-conditioned design matrix; estimated "
                             f"condition number {cond_est:.3g} > {NORMAL_CONDITION_LIMIT:g}")
    elif method == "normal":
        raise ValueError(f"the normal equations need at least K = {K} points, got {d.shape[0]}")
    if coeffs is None:
        coeffs, _, rank, sv = scipy.linalg.lstsq(Y, v, lapack_driver="gelsd")
        cond = float(sv[0] / sv[-1]) if (sv.size and sv[-1] > 0 and rank == K) else float("inf")
        solver = "scipy.linalg.lstsq, gelsd"
    resid = Y @ coeffs - v
    msg = ""
    if rank < K:
        msg = (f"the {d.shape[0]} directions constrain only {rank} of the {K} coefficients of degree {degree}; "
               "lower the degree or supply more, better spread directions")
    elif cond > CONDITION_LIMIT:
        msg = (f"the fit of degree {degree} is ill conditioned (condition number {cond:.2g}); "
               "lower the degree or supply better spread directions")
    return coeffs, FitReport(float(np.sqrt(np.mean(resid**2))), float(np.max(np.abs(resid))), int(rank), K, cond, msg, solver)


def fit_bytes(n_points: int, degree: int) -> int:
    """Peak working memory of :func:`fit_least_squares`, in bytes (exact integers).

    The design matrix ``(N, K)`` and one temporary of its size (the SVD fallback copies it), in
    float64.

    Parameters
    ----------
    n_points : int
        Number of table rows ``N``.
    degree : int
        Even fit degree (``K`` coefficients).

    Returns
    -------
    int
    """
    from retina.sphere import n_coeffs

    return 2 * 8 * int(n_points) * n_coeffs(int(degree))


def check_fit_memory(n_points: int, degree: int, *, max_bytes: int | None = None, source=None) -> None:
    """Refuse a fit whose working memory exceeds the limit.

    Parameters
    ----------
    n_points : int
        Number of table rows.
    degree : int
        Even fit degree.
    max_bytes : int, optional
        Limit in bytes; None takes 60 % of the machine's available memory (the spin engine's
        default).
    source : str, optional
        File named in the message.

    Raises
    ------
    ResourceError
        Naming the estimate, the limit and what to change.
    """
    from retina.errors import ResourceError
    from retina.spin.memory import available_bytes

    need = fit_bytes(n_points, degree)
    limit = int(0.6 * available_bytes()) if max_bytes is None else int(max_bytes)
    if need > limit:
        raise ResourceError(f"{source}: fitting {n_points:,} points at degree {degree} needs "
                            f"{need / 2**30:.3g} GiB, more than the {limit / 2**30:.3g} GiB allowed; "
                            "lower the degree or thin the table")


def import_table(path: str | Path, degree: int, *, directions_key: str = "directions",
                 values_key: str = "values", provenance: dict | None = None, max_bytes: int | None = None):
    """Read another engine's table and fit it as a :class:`retina.yieldfn.YieldFunction`.

    The provenance records the file, format, number of points, degree, residual rms and max, rank,
    condition number and any fit warning; ``fit_error`` is the maximum residual.

    Parameters
    ----------
    path : str or Path
        The table (:func:`read_table`).
    degree : int
        Even degree of the fit.
    directions_key, values_key : str
        Array or dataset names in NPZ and HDF5 files.
    provenance : dict, optional
        Extra provenance entries.
    max_bytes : int, optional
        Memory limit of the fit (:func:`check_fit_memory`).

    Returns
    -------
    YieldFunction

    Raises
    ------
    InputError
        For a bad file or values (:func:`read_table`, physical ranges in the module docstring).
    ResourceError
        When the fit would not fit in memory.

    Warns
    -----
    FitWarning
        When the directions do not determine every coefficient (see the module docstring).
    """
    from retina.yieldfn import YieldFunction, _check_degree, content_hash, package_versions

    path = Path(path)
    degree = _check_degree(degree)
    dirs, values, fmt = read_table(path, directions_key=directions_key, values_key=values_key)
    check_fit_memory(dirs.shape[0], degree, max_bytes=max_bytes, source=path)
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
        "fit": f"least squares; {rep.solver}",
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
