"""The results of a run: the :class:`Results` container and its HDF5 file.

Schema of ``results.h5`` (format "retina-compass results", version 2)
--------------------------------------------------------------------
This docstring is the one place that documents the results file; README.md points here.

One group per stage, written by :func:`save_results`.  Inside a group, every array is a dataset,
every number, flag or string is an attribute, and a nested dict is a sub-group.  Every dataset
carries a ``units`` attribute ("1" for dimensionless numbers and indices) and HDF5 dimension
scales (h5py ``dims``) naming its axes, so ``xarray.open_dataset(path, group="precision",
engine="h5netcdf")`` shows named dimensions with their coordinates, and
:meth:`Results.to_xarray` gives the same from memory.  Coordinate datasets are their own scales
(``headings_deg``, ``yaw_deg``, ``photons``, ``info_headings_deg``, ``scan_offsets_deg``,
``kappas``, ``light_photons``); axes without a natural coordinate get an index scale in the group
(``receptor``, ``xyz``, ``coeff``, ``trial``, values ``0 .. n - 1``).  Dimension letters below:
``N`` receptors, ``H`` headings, ``F`` scan poses, ``M`` photon levels, ``V`` light levels
(``[light]``), ``G = 360`` decoder-grid headings, ``K`` disorder concentrations, ``P`` scan
offsets, ``T`` trials.  A group is present when its stage ran::

    /                      attrs: format = "retina-compass results", format_version = 2
    /provenance            attrs: scenario_toml, scenario_source, scenario_name, versions (JSON),
                           python, date_utc, seed, quick, yield_provenance (JSON), field, ordering,
                           stages, sky
    /yield_function        coeffs (coeff: 153 for degree 16; retina.sphere layout) 1,
                           argmax, argmin (xyz) 1; attrs degree, max, mean, min, relative,
                           fit_error (NaN when unknown)
    /field                 attrs F_uT, I_deg, D_deg
    /receptors             visual_dirs, axes (receptor, xyz) 1, solid_angle (receptor) sr,
                           eye_index (receptor) int8 1
    /patterns              headings_deg (headings_deg: H) deg, b_head (H, xyz) 1 (unit vector),
                           yields (H, receptor) 1, modulation (H, receptor) 1, depth (H) 1
    /scan                  yaw_deg (yaw_deg: F) deg, b_head (F, xyz) 1, yields (F, receptor) 1,
                           modulation (F, receptor) 1, depth (F) 1, change_per_degree (F) deg^-1
    /precision             photons (photons: M) "photons per receptor",
                           info_headings_deg (info_headings_deg: G) deg,
                           info_per_photon_single, info_per_photon_scan (G) rad^-2,
                           bound_single_deg, bound_scan_deg (M) deg,
                           scan_offsets_deg (scan_offsets_deg: P) deg,
                           decoded_single_rms_deg, decoded_scan_rms_deg (M) deg;
                           with a compare nuisance: attr compare_nuisance and
                           info_per_photon_{single,scan}_compare (G) rad^-2,
                           bound_{single,scan}_compare_deg (M) deg
    /disorder              kappas (kappas: K) 1, depth (K) 1, info_per_photon (K) rad^-2,
                           light_photons (light_photons: V) "photons per receptor",
                           bound_deg (V, K) deg; attrs model (the model swept), scenario_kappa
                           (when the scenario's model has a kappa)
    /order                 light_photons (light_photons: V) "photons per receptor",
                           mean_orientation_deg (euler_zyz: 3) deg; attrs class_order,
                           curve_order (comma-separated keys)
    /order/classes/<key>   bound_deg (light_level: V) deg; attrs label, depth, info_per_photon
                           (keys: aligned, restrained_two, restrained_one, isotropic)
    /order/curves/<key>    kappas (kappas: S) 1, depth (S) 1, info_per_photon (S) rad^-2,
                           bound_deg (light_level: V, S) deg; attr label (keys: cone_tied,
                           cone_free, plane_free, twist_axis, twist_plane, cone_no_twist;
                           S = ordering.study_kappas)
    /trials                scan_offsets_deg (scan_offsets_deg: P) deg; attr goal_deg
    /trials/levels/<name>  start_deg, decoded_deg, error_deg, chosen_deg (trial: T) deg,
                           ambiguous (T) int8 1; attrs photons, mean_deg, r, rayleigh_p, v_u, v_p,
                           r_axial, rayleigh_p_axial, preferred_analysis

Version 1 files (no scales, no units) are read the same way.  ``retina export results.h5
--csv/--json`` writes the key numbers (:mod:`retina.outputs.export`).

What each stage's numbers mean: the module docstrings of :mod:`retina.stages`.  The file is
written atomically (:mod:`retina.io.atomic`).
"""

from __future__ import annotations

import datetime as _dt
import json
import platform
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from retina.errors import InputError

__all__ = ["Results", "save_results", "load_results", "make_provenance", "RESULTS_FORMAT", "RESULTS_VERSION",
           "DIMENSIONS", "dims_and_units"]

RESULTS_FORMAT = "retina-compass results"
RESULTS_VERSION = 2


# group -> dataset -> (dimension names, units); a dimension named like a dataset of the same group
# is that coordinate; the others are index scales (module docstring).
_PH = "photons per receptor"
DIMENSIONS: dict[str, dict[str, tuple[tuple[str, ...], str]]] = {
    "yield_function": {"coeffs": (("coeff",), "1"), "argmax": (("xyz",), "1"), "argmin": (("xyz",), "1")},
    "receptors": {"visual_dirs": (("receptor", "xyz"), "1"), "axes": (("receptor", "xyz"), "1"),
                  "solid_angle": (("receptor",), "sr"), "eye_index": (("receptor",), "1")},
    "patterns": {"headings_deg": (("headings_deg",), "deg"), "b_head": (("headings_deg", "xyz"), "1"),
                 "yields": (("headings_deg", "receptor"), "1"), "modulation": (("headings_deg", "receptor"), "1"),
                 "depth": (("headings_deg",), "1")},
    "scan": {"yaw_deg": (("yaw_deg",), "deg"), "b_head": (("yaw_deg", "xyz"), "1"),
             "yields": (("yaw_deg", "receptor"), "1"), "modulation": (("yaw_deg", "receptor"), "1"),
             "depth": (("yaw_deg",), "1"), "change_per_degree": (("yaw_deg",), "deg^-1")},
    "precision": {"photons": (("photons",), _PH), "info_headings_deg": (("info_headings_deg",), "deg"),
                  "info_per_photon_single": (("info_headings_deg",), "rad^-2"),
                  "info_per_photon_scan": (("info_headings_deg",), "rad^-2"),
                  "info_per_photon_single_compare": (("info_headings_deg",), "rad^-2"),
                  "info_per_photon_scan_compare": (("info_headings_deg",), "rad^-2"),
                  "bound_single_deg": (("photons",), "deg"), "bound_scan_deg": (("photons",), "deg"),
                  "bound_single_compare_deg": (("photons",), "deg"), "bound_scan_compare_deg": (("photons",), "deg"),
                  "scan_offsets_deg": (("scan_offsets_deg",), "deg"),
                  "decoded_single_rms_deg": (("photons",), "deg"), "decoded_scan_rms_deg": (("photons",), "deg")},
    "disorder": {"kappas": (("kappas",), "1"), "depth": (("kappas",), "1"), "info_per_photon": (("kappas",), "rad^-2"),
                 "light_photons": (("light_photons",), _PH), "bound_deg": (("light_photons", "kappas"), "deg")},
    "order": {"light_photons": (("light_photons",), _PH), "mean_orientation_deg": (("euler_zyz",), "deg")},
    "order/classes/*": {"bound_deg": (("light_level",), "deg")},
    "order/curves/*": {"kappas": (("kappas",), "1"), "depth": (("kappas",), "1"),
                       "info_per_photon": (("kappas",), "rad^-2"), "bound_deg": (("light_level", "kappas"), "deg")},
    "trials": {"scan_offsets_deg": (("scan_offsets_deg",), "deg")},
    "trials/levels/*": {"start_deg": (("trial",), "deg"), "decoded_deg": (("trial",), "deg"),
                        "error_deg": (("trial",), "deg"), "chosen_deg": (("trial",), "deg"),
                        "ambiguous": (("trial",), "1")},
}
"""The dimensions and units of every dataset of the results file (module docstring)."""

_ATTR_UNITS = {"F_uT": "uT", "I_deg": "deg", "D_deg": "deg", "goal_deg": "deg", "mean_deg": "deg",
               "photons": _PH, "scenario_kappa": "1"}


def dims_and_units(group: str, name: str, ndim: int) -> tuple[tuple[str, ...], str]:
    """The dimension names and units of one dataset of the results file.

    Parameters
    ----------
    group : str
        Group path, such as ``"precision"`` or ``"trials/levels/dim"``.
    name : str
        Dataset name.
    ndim : int
        Its number of dimensions.

    Returns
    -------
    dims : tuple of str
        From :data:`DIMENSIONS`; ``<name>_dim_0, ...`` for an unknown dataset.
    units : str
        "" for an unknown dataset.
    """
    parts = group.split("/")
    key = "/".join(parts[:2]) + "/*" if len(parts) == 3 else group
    dims, units = DIMENSIONS.get(key, {}).get(name, (None, ""))
    if dims is None or len(dims) != ndim:
        dims = tuple(f"{name}_dim_{i}" for i in range(ndim))
    return dims, units


@dataclass
class Results:
    """Everything a run computed.

    Attributes
    ----------
    groups : dict
        ``{"yield_function": {...}, "field": {...}, "receptors": {...}, "patterns": {...},
        "scan": {...}, "precision": {...}, "disorder": {...}, "trials": {...}}``: arrays and scalars
        (nested dicts for the trial light levels), the layout of the results file (module docstring).
    provenance : dict
        ``scenario_toml`` (the scenario text), ``scenario_source``, ``versions``, ``date_utc``,
        ``seed``, ``quick``, ``yield_provenance`` (JSON text), ``field`` (text), ``python``, ...
    scenario : Scenario or None
        The (possibly reduced) scenario actually run; None for results read from a file.
    """

    groups: dict = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)
    scenario: object = None

    def to_xarray(self):
        """The results as an ``xarray.DataTree``: one node per group (``/precision``,
        ``/trials/levels/dim``, ...), named dimensions with coordinates and ``units`` attributes
        (:data:`DIMENSIONS`), scalars and strings as node attributes, the provenance as the root's
        attributes.

        Returns
        -------
        xarray.DataTree
        """
        import xarray as xr

        nodes = {"/": xr.Dataset(attrs={k: (json.dumps(v, sort_keys=True) if isinstance(v, dict) else v)
                                        for k, v in self.provenance.items()})}

        def add(path: str, d: dict):
            data, attrs = {}, {}
            for k, v in d.items():
                if isinstance(v, dict):
                    add(f"{path}/{k}", v)
                elif isinstance(v, str) or np.isscalar(v) or isinstance(v, (bool, np.bool_)):
                    attrs[k] = v
                else:
                    a = np.asarray(v)
                    dims, units = dims_and_units(path, k, a.ndim)
                    data[k] = xr.Variable(dims, a, {"units": units})
            coords = {k: data.pop(k) for k in list(data) if data[k].dims == (k,)}
            for k, u in _ATTR_UNITS.items():
                if k in attrs:
                    attrs[f"{k}_units"] = u
            nodes["/" + path] = xr.Dataset(data, coords=coords, attrs=attrs)

        for name, d in self.groups.items():
            add(name, d)
        return xr.DataTree.from_dict(nodes)


def _jsonable(d):
    if isinstance(d, dict):
        return {str(k): _jsonable(v) for k, v in d.items()}
    if isinstance(d, (list, tuple)):
        return [_jsonable(v) for v in d]
    if isinstance(d, (np.generic,)):
        return d.item()
    if isinstance(d, np.ndarray):
        return d.tolist()
    return d if isinstance(d, (str, int, float, bool)) or d is None else str(d)


def _ordering_text(sc) -> str:
    o = sc["ordering"]
    s = f"{o['model']}"
    if o["model"] in ("cone", "plane"):
        tw = o["twist"] if o["twist"] != "restrained" else f"restrained, twist kappa = {o['twist_kappa']:g}"
        s += f" (kappa = {o['kappa']:g}, twist {tw})"
    elif o["model"] == "cone_no_twist":
        s += f" (kappa = {o['kappa']:g})"
    s += f", {o['mode']}"
    if o["mode"] == "molecules":
        s += f" ({o['n_molecules']} molecules per receptor)"
    return s


def make_provenance(sc, yf, fld, *, quick: bool, stages) -> dict:
    """The ``/provenance`` attributes of a run of scenario ``sc`` (module docstring).

    Parameters
    ----------
    sc : Scenario
    yf : YieldFunction
    fld : Field
    quick : bool
    stages : sequence of str

    Returns
    -------
    dict
    """
    from retina.yieldfn import package_versions

    return {"scenario_toml": sc.text, "scenario_source": str(sc.source or ""), "scenario_name": sc.name,
            "versions": package_versions(), "python": platform.python_version(),
            "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "seed": int(sc.seed), "quick": bool(quick),
            "yield_provenance": json.dumps(_jsonable(yf.provenance), sort_keys=True),
            "field": f"F = {fld.F_uT:.3f} uT, I = {fld.I_deg:.3f} deg, D = {fld.D_deg:.3f} deg ({fld.source})",
            "ordering": _ordering_text(sc), "stages": ",".join(stages),
            "sky": (f"horizon (ground {sc['light']['ground_ratio']:g} of the sky, horizon "
                    f"{sc['light']['horizon_deg']:g} deg, softness {sc['light']['softness_deg']:g} deg)"
                    if sc["light"]["sky"] == "horizon" else "uniform")}


def _write_group(grp, d: dict, path: str = ""):
    arrays = {}
    for k, v in d.items():
        sub = f"{path}/{k}" if path else k
        if isinstance(v, dict):
            _write_group(grp.create_group(k), v, sub)
        elif isinstance(v, str):
            grp.attrs[k] = v
        elif np.isscalar(v) or isinstance(v, (bool, np.bool_)):
            grp.attrs[k] = v
        else:
            arrays[k] = grp.create_dataset(k, data=np.asarray(v))
    if not path:
        return
    # units and dimension scales (module docstring); coordinates first, so they can be attached
    dims_of = {k: dims_and_units(path, k, ds.ndim) for k, ds in arrays.items()}
    scales = {}
    for k, ds in arrays.items():
        dims, units = dims_of[k]
        ds.attrs["units"] = units
        if dims == (k,):
            ds.make_scale(k)
            scales[k] = ds
    for k, ds in arrays.items():
        dims, _ = dims_of[k]
        for i, dim in enumerate(dims):
            if dim not in scales:
                if dim in grp:   # a dataset of that name with another shape: leave the axis unnamed
                    continue
                idx = grp.create_dataset(dim, data=np.arange(ds.shape[i]))
                idx.attrs["units"] = "1"
                idx.attrs["index_scale"] = 1     # not part of the results: skipped on reading
                idx.make_scale(dim)
                scales[dim] = idx
            if scales[dim].shape[0] == ds.shape[i] and scales[dim] is not ds:
                ds.dims[i].attach_scale(scales[dim])


def _read_group(grp) -> dict:
    import h5py

    out = {}
    for k, v in grp.attrs.items():
        out[k] = v.item() if isinstance(v, np.generic) else v
    for k, v in grp.items():
        if isinstance(v, h5py.Group):
            out[k] = _read_group(v)
        elif "index_scale" not in v.attrs:
            out[k] = v[()]
    return out


def save_results(results: Results, path: str | Path, *, force: bool = False) -> Path:
    """Write results to HDF5 atomically: one group per stage, provenance as attributes.

    Parameters
    ----------
    results : Results
    path : str or Path
    force : bool
        Replace an existing file.

    Returns
    -------
    Path
    """
    import h5py

    from retina.io.atomic import atomic_path

    with atomic_path(path, force=force) as tmp:
        with h5py.File(tmp, "w") as h:
            h.attrs["format"] = RESULTS_FORMAT
            h.attrs["format_version"] = RESULTS_VERSION
            pg = h.create_group("provenance")
            for k, v in results.provenance.items():
                pg.attrs[k] = json.dumps(v, sort_keys=True) if isinstance(v, dict) else v
            for name, g in results.groups.items():
                _write_group(h.create_group(name), g, name)
    return Path(path)


def load_results(path: str | Path) -> Results:
    """Read a results file written by :func:`save_results`.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Results
        ``scenario`` is None (the scenario text is in ``provenance["scenario_toml"]``).

    Raises
    ------
    InputError
        When the file is missing, not HDF5 or not a results file.
    """
    import h5py

    path = Path(path)
    if not path.is_file():
        raise InputError("results file not found", source=path)
    try:
        with h5py.File(path, "r") as h:
            if h.attrs.get("format") != RESULTS_FORMAT:
                raise InputError(f"not a {RESULTS_FORMAT} file (format attribute "
                                 f"{h.attrs.get('format')!r})", source=path, key="format")
            prov = dict(h["provenance"].attrs)
            groups = {k: _read_group(v) for k, v in h.items() if k != "provenance"}
    except OSError as exc:
        raise InputError(f"cannot read HDF5 ({exc})", source=path) from None
    if "versions" in prov and isinstance(prov["versions"], str):
        prov["versions"] = json.loads(prov["versions"])
    return Results(groups, prov)
