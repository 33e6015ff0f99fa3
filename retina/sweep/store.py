"""The sweep's dataset: one labelled xarray Dataset, written to netCDF-4 (HDF5) through h5netcdf.

Layout of ``sweep.nc``
----------------------
- Dimensions: one per axis (``combine = "grid"``), or one named after the first axis
  (``combine = "zip"``, the other axes are coordinates along it); then the outputs' own
  dimensions ``readout_photons`` (photon levels of ``readout.photons``), ``light_level`` (names of
  ``light.names``), ``disorder_kappa`` (``ordering.disorder_kappas``) where an output has them.
- Coordinates: the axis values (numbers or strings), each with attributes ``units`` and ``key``
  (the swept dotted key); the outputs' coordinates with ``units``.
- Data variables: one per collected output (float64, NaN where a point failed), attributes
  ``units``, ``long_name`` and ``stage``; ``failed`` (int8 over the axes: 1 where the point
  failed) and ``seed`` (int64 over the axes: the seed each point ran with).
- Global attributes: ``format = "retina-compass sweep"``, ``format_version = 1``, ``name``,
  ``description``, ``combine``, ``seed``, ``quick``, ``sweep_toml`` (the sweep file's text),
  ``scenario_toml`` (the base scenario's text), ``failures`` (JSON list of ``{index, params,
  error}``), ``versions`` (JSON).

``retina.sweep.load(path)`` and plain ``xarray.open_dataset(path)`` read it alike; ``load`` also
checks the format and opens the data in memory (the file is not held open).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from retina.errors import InputError

__all__ = ["to_dataset", "save_dataset", "load", "SWEEP_FORMAT", "SWEEP_VERSION"]

SWEEP_FORMAT = "retina-compass sweep"
SWEEP_VERSION = 1


def to_dataset(plan, values: dict, failures: dict):
    """The dataset of a sweep (module docstring).

    Parameters
    ----------
    plan : retina.sweep.run.Plan
    values : dict
        Flat point index -> ``{output name: ndarray}`` for every finished point.
    failures : dict
        Flat point index -> error message.

    Returns
    -------
    xarray.Dataset
    """
    import xarray as xr

    from retina.sweep.outputs import OUTPUTS, dim_units
    from retina.yieldfn import package_versions

    spec = plan.spec
    shape, dims = spec.shape, spec.dims
    coords = {}
    for i, a in enumerate(spec.axes):
        vals = np.asarray(a.values)
        attrs = {"units": a.units, "key": a.key}
        if spec.combine == "grid" or i == 0:
            coords[a.name] = xr.Variable((a.name,) if spec.combine == "grid" else dims, vals, attrs)
        else:
            coords[a.name] = xr.Variable(dims, vals, attrs)
    for d, c in plan.coords.items():
        coords[d] = xr.Variable((d,), np.asarray(c), {"units": dim_units(d)} if dim_units(d) else {})
    data = {}
    for name in spec.outputs:
        o = OUTPUTS[name]
        own = tuple(len(plan.coords[d]) for d in o.dims)
        arr = np.full(shape + own, np.nan)
        flat = arr.reshape((-1,) + own)
        for i, v in values.items():
            flat[i] = np.asarray(v[name], float).reshape(own)
        data[name] = xr.Variable(dims + o.dims, arr, {"units": o.units, "long_name": o.long_name,
                                                      "stage": o.stage or "yield function"})
    failed = np.zeros(shape, np.int8)
    failed.reshape(-1)[list(failures)] = 1
    data["failed"] = xr.Variable(dims, failed, {"units": "1", "long_name": "1 where the point failed"})
    seeds = np.array([p.scenario.seed for p in plan.points], np.int64).reshape(shape)
    data["seed"] = xr.Variable(dims, seeds, {"units": "1", "long_name": "scenario seed of the point"})
    fail_list = [{"index": int(i), "params": {k: _plain(v) for k, v in plan.points[i].params.items()},
                  "error": msg} for i, msg in sorted(failures.items())]
    attrs = {"format": SWEEP_FORMAT, "format_version": SWEEP_VERSION, "name": spec.name,
             "description": spec.description, "combine": spec.combine, "seed": int(spec.seed),
             "quick": int(spec.quick), "sweep_toml": spec.text, "scenario_toml": spec.scenario_text(),
             "failures": json.dumps(fail_list), "versions": json.dumps(package_versions(), sort_keys=True)}
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _plain(v):
    if isinstance(v, (np.generic,)):
        return v.item()
    return v if isinstance(v, (int, float, str, bool)) else str(v)


def save_dataset(ds, path: str | Path, *, force: bool = False) -> Path:
    """Write ``ds`` to netCDF-4 with h5netcdf, atomically (temporary file, then rename).

    Parameters
    ----------
    ds : xarray.Dataset
    path : str or Path
    force : bool
        Replace an existing file.

    Returns
    -------
    Path
    """
    from retina.io.atomic import atomic_path

    with atomic_path(path, force=force) as tmp:
        enc = {v: {"zlib": True, "complevel": 4} for v in ds.data_vars}
        ds.to_netcdf(tmp, engine="h5netcdf", encoding=enc, invalid_netcdf=False)
    return Path(path)


def load(path: str | Path):
    """Read a sweep dataset written by ``retina sweep``.

    Parameters
    ----------
    path : str or Path
        ``sweep.nc``, or the sweep's output folder.

    Returns
    -------
    xarray.Dataset
        In memory (the file is closed).

    Raises
    ------
    InputError
        Missing file, not netCDF/HDF5, or not a sweep dataset.
    """
    import xarray as xr

    path = Path(path)
    if path.is_dir():
        path = path / "sweep.nc"
    if not path.is_file():
        raise InputError("sweep dataset not found", source=path)
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            ds.load()
            out = ds.copy()
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read it as netCDF ({' '.join(str(exc).split())})", source=path) from None
    if out.attrs.get("format") != SWEEP_FORMAT:
        raise InputError(f"not a {SWEEP_FORMAT} file (format attribute {out.attrs.get('format')!r})",
                         source=path, key="format")
    return out
