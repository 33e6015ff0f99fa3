"""What a sweep can collect from each point: the catalogue :data:`OUTPUTS`.

Each output is read from the :class:`retina.results.Results` of one point and has fixed units and
its own dimensions (besides the sweep's axes): a scalar, or an array along the point's photon
levels (``readout_photons``, from ``readout.photons``), light levels (``light_level``, from
``light.names``) or disorder concentrations (``disorder_kappa``, from ``ordering.disorder_kappas``);
the table abbreviates them as photons, light and kappa.  Axes may not take these three names.  Those coordinates must be
the same at every point of a sweep (sweep them through an axis instead).

=============================  =========  ===========  ==================================================
name                           stage      dims         meaning (units)
=============================  =========  ===========  ==================================================
``yield_mean``                 (none)     ()           mean of the yield function over directions (1)
``yield_anisotropy``           (none)     ()           (max - min) / mean of the yield function (1)
``modulation_depth``           patterns   ()           (max - min) / mean of the receptor yields, mean
                                                       over the scenario's headings (1)
``scan_change_per_degree``     scan       ()           rms relative pattern change per degree of head
                                                       turn, mean over the scan (deg^-1)
``bound_single_deg``           precision  (photons,)   Cramer-Rao bound, one pose (deg)
``bound_scan_deg``             precision  (photons,)   Cramer-Rao bound, head scan (deg)
``bound_single_compare_deg``   precision  (photons,)   the same with ``readout.compare_nuisance`` (deg)
``bound_scan_compare_deg``     precision  (photons,)   the same, head scan (deg)
``decoder_error_single_deg``   precision  (photons,)   rms maximum-likelihood decoding error, one pose (deg)
``decoder_error_scan_deg``     precision  (photons,)   rms decoding error, head scan (deg)
``disorder_depth``             disorder   (kappa,)     modulation depth against cone concentration (1)
``disorder_bound_deg``         disorder   (light,      single-pose bound against concentration at each
                                          kappa)       light level (deg)
``trial_mean_deg``             trials     (light,)     mean chosen direction of the simulated trials (deg)
``trial_r``                    trials     (light,)     mean vector length of the trials (1)
``rayleigh_p``                 trials     (light,)     Rayleigh test p value (1)
``v_test_p``                   trials     (light,)     V-test p value against the goal (1)
=============================  =========  ===========  ==================================================
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

__all__ = ["Output", "OUTPUTS", "OUTPUT_DIMS", "dim_units", "stages_for", "output_coords", "extract"]


@dataclass(frozen=True)
class Output:
    """One collectable output.

    Attributes
    ----------
    name : str
    stage : str or None
        The stage that computes it (None: the yield function, always built).
    dims : tuple of str
        Its own dimensions, among :data:`OUTPUT_DIMS`.
    units : str
    long_name : str
    read : callable(groups) -> array_like
        From ``Results.groups`` to the value, of shape given by ``dims``.
    """

    name: str
    stage: str | None
    dims: tuple
    units: str
    long_name: str
    read: Callable


def _levels(g, key):
    lv = g["trials"]["levels"]
    return np.array([float(lv[n][key]) for n in lv])


def _compare(g, key):
    p = g["precision"]
    return np.asarray(p[key], float) if key in p else np.full(len(p["photons"]), np.nan)


_LIST = [
    Output("yield_mean", None, (), "1", "mean yield over field directions", lambda g: g["yield_function"]["mean"]),
    Output("yield_anisotropy", None, (), "1", "relative anisotropy of the yield (max - min) / mean",
           lambda g: g["yield_function"]["relative"]),
    Output("modulation_depth", "patterns", (), "1", "modulation depth over both retinas, mean over headings",
           lambda g: float(np.mean(g["patterns"]["depth"]))),
    Output("scan_change_per_degree", "scan", (), "deg^-1", "rms relative pattern change per degree of head turn",
           lambda g: float(np.mean(g["scan"]["change_per_degree"]))),
    Output("bound_single_deg", "precision", ("readout_photons",), "deg", "Cramer-Rao bound on heading, one pose",
           lambda g: g["precision"]["bound_single_deg"]),
    Output("bound_scan_deg", "precision", ("readout_photons",), "deg", "Cramer-Rao bound on heading, head scan",
           lambda g: g["precision"]["bound_scan_deg"]),
    Output("bound_single_compare_deg", "precision", ("readout_photons",), "deg",
           "Cramer-Rao bound, one pose, with the comparison nuisance",
           lambda g: _compare(g, "bound_single_compare_deg")),
    Output("bound_scan_compare_deg", "precision", ("readout_photons",), "deg",
           "Cramer-Rao bound, head scan, with the comparison nuisance",
           lambda g: _compare(g, "bound_scan_compare_deg")),
    Output("decoder_error_single_deg", "precision", ("readout_photons",), "deg", "rms decoding error, one pose",
           lambda g: g["precision"]["decoded_single_rms_deg"]),
    Output("decoder_error_scan_deg", "precision", ("readout_photons",), "deg", "rms decoding error, head scan",
           lambda g: g["precision"]["decoded_scan_rms_deg"]),
    Output("disorder_depth", "disorder", ("disorder_kappa",), "1", "modulation depth against cone concentration",
           lambda g: g["disorder"]["depth"]),
    Output("disorder_bound_deg", "disorder", ("light_level", "disorder_kappa"), "deg",
           "single-pose bound against cone concentration", lambda g: g["disorder"]["bound_deg"]),
    Output("trial_mean_deg", "trials", ("light_level",), "deg", "mean chosen direction of the trials",
           lambda g: _levels(g, "mean_deg")),
    Output("trial_r", "trials", ("light_level",), "1", "mean vector length of the trials", lambda g: _levels(g, "r")),
    Output("rayleigh_p", "trials", ("light_level",), "1", "Rayleigh test p value", lambda g: _levels(g, "rayleigh_p")),
    Output("v_test_p", "trials", ("light_level",), "1", "V-test p value against the goal", lambda g: _levels(g, "v_p")),
]

OUTPUTS: dict[str, Output] = {o.name: o for o in _LIST}
"""Every collectable output by name (module docstring)."""

_DIM_UNITS = {"readout_photons": "photons per receptor", "light_level": "", "disorder_kappa": "1"}
OUTPUT_DIMS = tuple(_DIM_UNITS)
"""The outputs' own dimension names (reserved: no axis may use them)."""


def stages_for(names) -> tuple[str, ...]:
    """The stages needed for some outputs.

    Parameters
    ----------
    names : iterable of str
        Output names.

    Returns
    -------
    tuple of str
        In the registry's order.
    """
    from retina.stages import STAGES

    need = {OUTPUTS[n].stage for n in names}
    return tuple(s for s in STAGES if s in need)


def output_coords(sc) -> dict:
    """The coordinates of the outputs' own dimensions.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    dict
        ``{"readout_photons": (M,) floats, "light_level": (V,) names, "disorder_kappa": (K,) floats}``.
    """
    return {"readout_photons": np.asarray(sc["readout"]["photons"], float),
            "light_level": np.asarray(sc["light"]["names"], dtype=str),
            "disorder_kappa": np.asarray(sc["ordering"]["disorder_kappas"], float)}


def dim_units(dim: str) -> str:
    """The ``units`` attribute of an output dimension.

    Parameters
    ----------
    dim : str
        One of :data:`OUTPUT_DIMS`.

    Returns
    -------
    str
    """
    return _DIM_UNITS.get(dim, "")


def extract(groups: dict, names) -> dict:
    """Read outputs from a run.

    Parameters
    ----------
    groups : dict
        ``Results.groups`` of the run.
    names : iterable of str
        Output names.

    Returns
    -------
    dict
        ``{name: float ndarray}`` shaped by each output's own dimensions.
    """
    return {n: np.asarray(OUTPUTS[n].read(groups), dtype=float) for n in names}
