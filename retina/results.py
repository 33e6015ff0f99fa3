"""The results of a run: the :class:`Results` container and its HDF5 file.

Schema of ``results.h5`` (format "retina-compass results", version 2)
---------------------------------------------------------------------
This docstring is the one place that documents the results file; README.md points here.

One group per stage, written by :func:`save_results`.  Inside a group, every array is a dataset,
every number, flag or string is an attribute, and a nested dict is a sub-group.  Every dataset
carries a ``units`` attribute ("1" for dimensionless numbers and indices) and HDF5 dimension
scales (h5py ``dims``) naming its axes, so ``xarray.open_dataset(path, group="precision",
engine="h5netcdf")`` shows named dimensions with their coordinates, and
:meth:`Results.to_xarray` gives the same from memory.  Coordinate datasets are their own scales
(``headings_deg``, ``yaw_deg``, ``photons``, ``info_headings_deg``, ``scan_offsets_deg``,
``kappas``, ``light_photons``); axes without a natural coordinate get an index scale in the group
(``receptor``, ``xyz``, ``coeff``, ``trial``, values ``0 .. n - 1``).  Dimension letters:
``N`` receptors, ``H`` headings, ``F`` scan poses, ``M`` photon levels, ``V`` light levels
(``[light]``), ``G`` decoder-grid headings (360), ``K`` disorder concentrations, ``P`` precision
scan offsets, ``Q`` trial scan offsets, ``T`` trials, ``C`` coefficients (from the degree), ``S``
order-study concentrations, ``R``, ``W``, ``Z``, ``L`` the RF degree's coefficients, the RF
conditions' headings, the RF sweep's frequencies and lifetimes.  A stage's group is present when
the stage ran.  The table below is rendered from :data:`RESULTS_SCHEMA`, which
:func:`save_results` checks its own file against before publishing it and :func:`load_results`
checks every file against (:mod:`retina.io.schema`); items not listed (such as the dimension
scales) are allowed and ignored.  Version 1 files (no scales, no units) are read the same way.
``retina export results.h5 --csv/--json`` writes the key numbers (:mod:`retina.outputs.export`).

{schema}
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
           "RESULTS_SCHEMA", "DIMENSIONS", "dims_and_units"]

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


def _n_coeffs(degree: int) -> int:
    if degree < 2 or degree % 2 or degree > 64:
        raise ValueError("an even degree between 2 and 64")
    return (degree + 1) * (degree + 2) // 2


def _items():
    from retina.io.schema import Item as I  # noqa: E741

    A, NF = {"attr": True}, {"finite": False}
    deg = {"unit": "deg"}
    return {
        "provenance": (
            I("scenario_toml", "str", **A, doc="the scenario actually run (TOML text)"),
            I("scenario_name", "str", **A), I("scenario_source", "str", **A, required=False),
            I("seed", "int", **A, low=0), I("quick", "bool", **A),
            I("versions", "json", **A, required=False), I("yield_provenance", "json", **A, required=False),
            I("python", "str", **A, required=False), I("date_utc", "str", **A, required=False),
            I("field", "str", **A, required=False), I("ordering", "str", **A, required=False),
            I("stages", "str", **A, required=False), I("sky", "str", **A, required=False),
        ),
        "yield_function": (
            I("coeffs", shape=("C",)), I("argmax", shape=(3,)), I("argmin", shape=(3,)),
            I("degree", "int", **A, low=2, high=64),
            I("max", **A), I("min", **A), I("mean", **A, low=0, high=1, doc="> 0"),
            I("relative", **A, low=0), I("fit_error", **A, **NF, low=0, doc="NaN when unknown"),
        ),
        "field": (I("F_uT", **A, low=1e-3, high=1e4, unit="uT"), I("I_deg", **A, low=-90, high=90, **deg),
                  I("D_deg", **A, low=-360, high=360, **deg)),
        "receptors": (I("visual_dirs", shape=("N", 3)), I("axes", shape=("N", 3)),
                      I("solid_angle", shape=("N",), low=0, unit="sr"),
                      I("eye_index", "int", shape=("N",), low=0, high=1)),
        "patterns": (I("headings_deg", shape=("H",), **deg), I("b_head", shape=("H", 3)),
                     I("yields", shape=("H", "N")), I("modulation", shape=("H", "N")),
                     I("depth", shape=("H",), low=0)),
        "scan": (I("yaw_deg", shape=("F",), **deg), I("b_head", shape=("F", 3)),
                 I("yields", shape=("F", "N")), I("modulation", shape=("F", "N")),
                 I("depth", shape=("F",), low=0), I("change_per_degree", shape=("F",), **NF)),
        "precision": (
            I("photons", shape=("M",), low=0, doc="> 0"), I("info_headings_deg", shape=("G",), **deg),
            I("info_per_photon_single", shape=("G",), **NF, low=0), I("info_per_photon_scan", shape=("G",), **NF, low=0),
            I("bound_single_deg", shape=("M",), **NF, low=0, **deg), I("bound_scan_deg", shape=("M",), **NF, low=0, **deg),
            I("scan_offsets_deg", shape=("P",), **deg),
            I("decoded_single_rms_deg", shape=("M",), **NF, low=0, **deg),
            I("decoded_scan_rms_deg", shape=("M",), **NF, low=0, **deg),
            I("compare_nuisance", "str", **A, required=False),
            I("info_per_photon_single_compare", shape=("G",), **NF, required=False),
            I("info_per_photon_scan_compare", shape=("G",), **NF, required=False),
            I("bound_single_compare_deg", shape=("M",), **NF, required=False, **deg),
            I("bound_scan_compare_deg", shape=("M",), **NF, required=False, **deg),
        ),
        "disorder": (I("kappas", shape=("K",), **NF, low=0), I("depth", shape=("K",), **NF, low=0),
                     I("info_per_photon", shape=("K",), **NF, low=0), I("light_photons", shape=("V",), low=0),
                     I("bound_deg", shape=("V", "K"), **NF, low=0, **deg),
                     I("scenario_kappa", **A, **NF, required=False),
                     I("model", "str", **A, required=False, doc="the ordering model swept")),
        "order": (I("light_photons", shape=("V",), low=0), I("mean_orientation_deg", shape=(3,), **deg),
                  I("class_order", "str", **A, doc="comma-separated class keys"),
                  I("curve_order", "str", **A, doc="comma-separated curve keys")),
        "order/classes/*": (I("bound_deg", shape=("V",), **NF, low=0, **deg), I("label", "str", **A),
                            I("depth", **A, **NF, low=0), I("info_per_photon", **A, **NF, low=0)),
        "order/curves/*": (I("kappas", shape=("S",), **NF, low=0), I("depth", shape=("S",), **NF, low=0),
                           I("info_per_photon", shape=("S",), **NF, low=0),
                           I("bound_deg", shape=("V", "S"), **NF, low=0, **deg), I("label", "str", **A)),
        "trials": (I("scan_offsets_deg", shape=("Q",), **deg), I("goal_deg", **A, **NF, **deg)),
        "rf": (I("light_photons", shape=("V",), low=0), I("names", "json", **A), I("light_names", "json", **A),
               I("degree", "int", **A, low=2, high=64)),
        "rf/conditions/*": (
            I("coeffs", shape=("R",)), I("depth", shape=("W",), **NF, low=0),
            I("bound_single_deg", shape=("V",), **NF, low=0, **deg), I("bound_scan_deg", shape=("V",), **NF, low=0, **deg),
            I("trial_r", shape=("V",), **NF, low=0, high=1), I("trial_mean_deg", shape=("V",), **NF, **deg),
            I("rayleigh_p", shape=("V",), **NF, low=0, high=1), I("v_p", shape=("V",), **NF, low=0, high=1),
            I("name", "str", **A), I("record", "json", **A), I("method", "str", **A, required=False),
            I("relative_anisotropy", **A, **NF, low=0), I("mean_yield", **A, **NF, required=False),
            I("fit_error", **A, **NF, required=False), I("eta", **A, **NF, low=0, required=False),
            I("weak_valid", "int", **A, low=0, high=1, required=False), I("b_rms_nT", **A, **NF, low=0, required=False),
        ),
        "rf_sweep": (
            I("freqs_MHz", shape=("Z",), low=0, unit="MHz"), I("lifetimes_us", shape=("L",), low=0, unit="us"),
            I("curve_MHz", shape=("Y",), low=0, unit="MHz", doc="the curve's frequencies (sweep_points)"),
            I("light_photons", shape=("V",), low=0), I("eta", shape=("L",), **NF, low=0,
                                                         doc="gamma_e B1 / k at the sweep amplitude"),
            I("control_bound_deg", shape=("L", "V"), **NF, low=0, **deg),
            I("perp_bound_deg", shape=("L", "Z", "V"), **NF, low=0, **deg),
            I("par_bound_deg", shape=("L", "Z", "V"), **NF, low=0, **deg),
            I("control_anisotropy", shape=("L",), **NF, low=0),
            I("perp_anisotropy", shape=("L", "Z"), **NF, low=0), I("par_anisotropy", shape=("L", "Z"), **NF, low=0),
            I("control_r", shape=("L",), **NF, low=0, high=1), I("trial_perp_r", shape=("L",), **NF, low=0, high=1),
            I("trial_MHz", shape=("L",), **NF, low=0, unit="MHz", doc="frequency of the RF trials"),
            I("perp_sensitivity", shape=("L", "Y"), **NF, unit="nT^-2",
              doc="s(f): (bound / control)^2 - 1 per nT^2 of amplitude squared"),
            I("par_sensitivity", shape=("L", "Y"), **NF, unit="nT^-2"),
            I("perp_rise", shape=("L", "Y"), **NF, doc="bound / control - 1 at the sweep amplitude"),
            I("par_rise", shape=("L", "Y"), **NF),
            I("perp_threshold_nT", shape=("L", "Y"), **NF, low=0, unit="nT",
              doc="amplitude for a rise of onset_rise; NaN: never at second order"),
            I("par_threshold_nT", shape=("L", "Y"), **NF, low=0, unit="nT"),
            I("threshold_eta", shape=("L", "Y"), **NF, low=0, doc="gamma_e b / k at the perpendicular threshold"),
            I("onset_MHz", shape=("L",), **NF, unit="MHz", doc="NaN: no onset in the sweep"),
            I("departure_MHz", shape=("L",), **NF, unit="MHz", doc="where the response leaves the quasi-static value"),
            I("linearisation_error", shape=("L",), **NF, low=0,
              doc="largest |curve rise - bound rise| at the swept frequencies"),
            I("amplitude_nT", **A, low=0, unit="nT"), I("sweep_light", "str", **A),
            I("light_names", "json", **A), I("method", "json", **A), I("onset_rise", **A, low=0),
            I("degree", "int", **A, low=2, high=64),
        ),
        "trials/levels/*": (
            I("start_deg", shape=("T",), **deg), I("decoded_deg", shape=("T",), **NF, **deg),
            I("error_deg", shape=("T",), **NF, **deg), I("chosen_deg", shape=("T",), **NF, **deg),
            I("ambiguous", "int", shape=("T",), low=0, high=1),
            I("photons", **A, low=0), I("mean_deg", **A, **NF, **deg), I("r", **A, **NF, low=0, high=1),
            I("rayleigh_p", **A, **NF, low=0, high=1), I("v_u", **A, **NF), I("v_p", **A, **NF, low=0, high=1),
            I("r_axial", **A, **NF, low=0, high=1), I("rayleigh_p_axial", **A, **NF, low=0, high=1),
            I("preferred_analysis", "str", **A),
        ),
    }


def _positive_mean(values: dict) -> str:
    m = values.get("yield_function/mean")
    if m is not None and not float(m) > 0:
        return f"the mean yield is {float(m):g}; expected a reaction yield > 0"
    return ""


def _schema():
    from retina.io.schema import FileSchema, Group

    items = _items()
    optional = {"patterns", "scan", "precision", "disorder", "order", "order/classes/*", "order/curves/*",
                "trials", "trials/levels/*", "rf", "rf/conditions/*", "rf_sweep"}
    docs = {"provenance": "the run's provenance", "trials/levels/*": "one group per light level",
            "order/classes/*": "one group per restraint class (aligned, restrained_two, restrained_one, "
                               "isotropic)",
            "order/curves/*": "one group per concentration curve (S = ordering.study_kappas)",
            "rf/conditions/*": "one group per RF condition, c0 = the control (R = the RF degree's coefficients, "
                               "W = patterns' headings)",
            "rf_sweep": "Z swept frequencies, Y curve frequencies, L lifetimes"}
    groups = tuple(Group(name, its, required=name not in optional, doc=docs.get(name, ""))
                   for name, its in items.items())
    return FileSchema(RESULTS_FORMAT, RESULTS_VERSION, groups,
                      derived={"C": ("yield_function", "degree", _n_coeffs)},
                      checks=(("/yield_function@mean", _positive_mean),))


RESULTS_SCHEMA = _schema()


def _describe_schema() -> str:
    from retina.io.schema import describe

    return describe(RESULTS_SCHEMA)


"""The results file's schema (:mod:`retina.io.schema`): the one description of the format."""


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
    from retina.io.schema import check_written

    with atomic_path(path, force=force) as tmp:
        with h5py.File(tmp, "w") as h:
            h.attrs["format"] = RESULTS_FORMAT
            h.attrs["format_version"] = RESULTS_VERSION
            pg = h.create_group("provenance")
            for k, v in results.provenance.items():
                pg.attrs[k] = json.dumps(v, sort_keys=True) if isinstance(v, dict) else v
            for name, g in results.groups.items():
                _write_group(h.create_group(name), g, name)
        check_written(tmp, RESULTS_SCHEMA, target=path)
    return Path(path)


def load_results(path: str | Path) -> Results:
    """Read a results file written by :func:`save_results`, checked against :data:`RESULTS_SCHEMA`.

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
        When the file is missing, not HDF5, or any group, dataset or attribute is missing, of the
        wrong kind or shape, not finite where it must be, or outside its range (naming the file
        and the HDF5 path).
    """
    import h5py

    from retina.io.schema import validate

    path = Path(path)
    if not path.is_file():
        raise InputError("results file not found", source=path)
    try:
        h = h5py.File(path, "r")
    except OSError:
        raise InputError(f"not an HDF5 file; expected a {RESULTS_FORMAT} file", source=path) from None
    try:
        with h:
            validate(h, RESULTS_SCHEMA, path)
            prov = {k: (v.item() if isinstance(v, np.generic) else v) for k, v in h["provenance"].attrs.items()}
            groups = {k: _read_group(v) for k, v in h.items() if k != "provenance" and isinstance(v, h5py.Group)}
    except OSError as exc:
        raise InputError(f"cannot read HDF5 ({exc})", source=path) from None
    for k in ("versions",):
        if isinstance(prov.get(k), str):
            prov[k] = json.loads(prov[k])
    return Results(groups, prov)


__doc__ = __doc__.replace("{schema}", _describe_schema())
