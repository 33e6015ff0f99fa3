"""Stage ``precision``: Cramer-Rao bounds and maximum-likelihood decoding errors of the heading
against photons per receptor, for one pose and for the head scan.

Conventions
-----------
- Precision curves: the Cramer-Rao bound on the rms heading error over uniformly distributed true
  headings, ``sqrt(mean_h 1 / I(h))`` over 360 grid headings, single pose and head scan; decoding
  error: rms of the wrapped decoding errors at ``readout.decode_repeats`` uniformly random true
  headings per photon level, with its Monte Carlo standard error (delta method).  Bounds above ``retina.readout.fisher.INFORMATIVE_BOUND_DEG`` are
  reported in words as not informative (the numbers stay in the results file).  With
  ``readout.compare_nuisance`` the bounds of one pose and of the scan are also computed with that
  further unknown (``precision/bound_*_compare_deg``).
- Why a scan alone does not help when only the overall light level is unknown: the scan splits the
  same photon budget over its poses, and Fisher information adds over poses, so the scan's
  information is about the average of the single-pose information over the headings it visits (a
  shared gain is pinned down slightly better, :mod:`retina.readout.scans`).  A scan helps when it
  averages out an unknown that a single look cannot separate from the heading, such as a head-fixed
  texture of unknown receptor sensitivities (``compare_nuisance = "receptor_gain"``).
"""

from __future__ import annotations

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import (GridModel, Stage, decode_errors, grid_offsets, rms_bound, scan_yaws,
                                   signal_model, stage_rng)

__all__ = ["compute_precision", "STAGE"]


def compute_precision(sc: Scenario, model, fld, *, progress=None) -> dict:
    """Bounds and decoding errors against photons per receptor (module docstring).

    Bounds and decoders use the same expected counts (360 grid headings, exact trigonometric
    interpolation of the model), so the decoding error can be compared with the bound directly.

    Parameters
    ----------
    sc : Scenario
    model : RetinaModel
    fld : Field
    progress : callable(done, total), optional
        After each photon level.

    Returns
    -------
    dict
        ``photons (M,)``, ``info_headings_deg (G,)``, ``info_per_photon_single``/``_scan (G,)``,
        ``bound_single_deg``/``bound_scan_deg (M,)``, ``scan_offsets_deg (P,)``,
        ``decoded_single_rms_deg``/``decoded_scan_rms_deg (M,)`` and their Monte Carlo standard
        errors ``decoded_single_rms_se_deg``/``decoded_scan_rms_se_deg (M,)``
        (:func:`retina.readout.decode.rms_standard_error`), and with a compare nuisance
        ``compare_nuisance`` (str), ``info_per_photon_*_compare (G,)``, ``bound_*_compare_deg (M,)``.
    """
    from retina.readout.decode import error_summary
    from retina.readout.fisher import gain_schur, poisson_information

    ro = sc["readout"]
    L = model.degree
    photons = np.asarray(ro["photons"], float)
    gain = "free" if ro["nuisance"] == "gain" else "known"
    offsets = grid_offsets(scan_yaws(sc) - sc["scan"]["heading_deg"])
    m1 = GridModel(signal_model(sc, model, fld), L, gain)
    mk = GridModel(signal_model(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), L, gain)
    info1 = (gain_schur if gain == "free" else poisson_information)(m1.lam1, m1.dlam1)
    infok = mk.scan_information(offsets, "global_gain" if gain == "free" else "none")
    out = {"photons": photons, "info_headings_deg": m1.grid,
           "info_per_photon_single": info1, "info_per_photon_scan": infok,
           "bound_single_deg": rms_bound(photons, info1), "bound_scan_deg": rms_bound(photons, infok),
           "scan_offsets_deg": offsets}
    rng = stage_rng(sc.seed, "precision")
    dec1, deck = [], []
    for i, ph in enumerate(photons):
        dec1.append(error_summary(decode_errors(m1, ph, ro["decode_repeats"], rng)))
        deck.append(error_summary(decode_errors(mk, ph, ro["decode_repeats"], rng, offsets)))
        if progress:
            progress(i + 1, photons.size)
    cmp_n = ro.get("compare_nuisance", "none")
    if cmp_n != "none":
        zero = np.zeros(1)
        out["compare_nuisance"] = cmp_n
        out["info_per_photon_single_compare"] = mk.scan_information(zero, cmp_n)
        out["info_per_photon_scan_compare"] = mk.scan_information(offsets, cmp_n)
        out["bound_single_compare_deg"] = rms_bound(photons, out["info_per_photon_single_compare"])
        out["bound_scan_compare_deg"] = rms_bound(photons, out["info_per_photon_scan_compare"])
    for kind, summ in (("single", dec1), ("scan", deck)):
        out[f"decoded_{kind}_rms_deg"] = np.array([d["rms_deg"] for d in summ])
        out[f"decoded_{kind}_rms_se_deg"] = np.array([d["rms_se_deg"] for d in summ])
    return out


STAGE = Stage("precision", lambda b, progress: compute_precision(b.scenario, b.model, b.field, progress=progress),
              label="precision", steps=lambda sc: len(sc["readout"]["photons"]))
