"""The results of a run: the :class:`Results` container and its HDF5 file.

Schema of ``results.h5`` (format "retina-compass results", version 1)
---------------------------------------------------------------------
One group per stage, written by :func:`save_results`.  Inside a group, every array is a dataset,
every number, flag or string is an attribute, and a nested dict is a sub-group.  Units are in the
names (``_deg`` degrees, ``_uT`` microtesla); ``N`` receptors, ``H`` headings, ``F`` scan poses,
``M`` photon levels, ``V`` light levels (``[light]``), ``G = 360`` decoder-grid headings, ``K`` disorder concentrations, ``P`` scan
offsets, ``T`` trials.  A group is present when its stage ran::

    /                      attrs: format = "retina-compass results", format_version = 1
    /provenance            attrs: scenario_toml, scenario_source, scenario_name, versions (JSON),
                           python, date_utc, seed, quick, yield_provenance (JSON), field, ordering,
                           stages, sky
    /yield_function        coeffs (153,) for degree 16 (retina.sphere layout), argmax (3,), argmin (3,);
                           attrs degree, max, mean, min, relative, fit_error (NaN when unknown)
    /field                 attrs F_uT, I_deg, D_deg
    /receptors             visual_dirs (N, 3), axes (N, 3), solid_angle (N,) sr, eye_index (N,) int8
    /patterns              headings_deg (H,), b_head (H, 3), yields (H, N), modulation (H, N), depth (H,)
    /scan                  yaw_deg (F,), b_head (F, 3), yields (F, N), modulation (F, N), depth (F,),
                           change_per_degree (F,) per degree
    /precision             photons (M,), info_headings_deg (G,), info_per_photon_single (G,),
                           info_per_photon_scan (G,), bound_single_deg (M,), bound_scan_deg (M,),
                           scan_offsets_deg (P,), decoded_single_rms_deg (M,), decoded_scan_rms_deg (M,);
                           with a compare nuisance: attr compare_nuisance and
                           info_per_photon_{single,scan}_compare (G,), bound_{single,scan}_compare_deg (M,)
    /disorder              kappas (K,), depth (K,), info_per_photon (K,), light_photons (V,),
                           bound_deg (V, K); attrs model (the model swept), scenario_kappa (when the
                           scenario's model has a kappa)
    /order                 light_photons (V,), mean_orientation_deg (3,); attrs class_order,
                           curve_order (comma-separated keys)
    /order/classes/<key>   bound_deg (V,); attrs label, depth, info_per_photon (keys: aligned,
                           restrained_two, restrained_one, isotropic)
    /order/curves/<key>    kappas (S,), depth (S,), info_per_photon (S,), bound_deg (V, S); attr label
                           (keys: cone_tied, cone_free, plane_free, twist_axis, twist_plane,
                           cone_no_twist; S = ordering.study_kappas)
    /trials                scan_offsets_deg (P,); attr goal_deg
    /trials/levels/<name>  start_deg, decoded_deg, error_deg, chosen_deg (T,), ambiguous (T,) int8;
                           attrs photons, mean_deg, r, rayleigh_p, v_u, v_p, r_axial,
                           rayleigh_p_axial, preferred_analysis

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

__all__ = ["Results", "save_results", "load_results", "make_provenance", "RESULTS_FORMAT", "RESULTS_VERSION"]

RESULTS_FORMAT = "retina-compass results"
RESULTS_VERSION = 1


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


def _write_group(grp, d: dict):
    for k, v in d.items():
        if isinstance(v, dict):
            _write_group(grp.create_group(k), v)
        elif isinstance(v, str):
            grp.attrs[k] = v
        elif np.isscalar(v) or isinstance(v, (bool, np.bool_)):
            grp.attrs[k] = v
        else:
            grp.create_dataset(k, data=np.asarray(v))


def _read_group(grp) -> dict:
    import h5py

    out = {}
    for k, v in grp.attrs.items():
        out[k] = v.item() if isinstance(v, np.generic) else v
    for k, v in grp.items():
        out[k] = _read_group(v) if isinstance(v, h5py.Group) else v[()]
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
            _write_group(h, results.groups)
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
