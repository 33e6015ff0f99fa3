"""Stage ``trials``: simulated orientation trials at every light level.

Each bird starts at a uniformly random true heading ``psi``, makes a head scan of
``trials.scan_steps`` poses over ``psi +/- scan.amplitude_deg`` with the light level's budget,
decodes its heading by maximum likelihood from the counts of all poses and turns by
``goal - psi_hat`` (:func:`retina.readout.trials.simulate_trials`).
"""

from __future__ import annotations

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import GridModel, Stage, grid_offsets, signal_model, stage_rng

__all__ = ["compute_trials", "STAGE"]


def compute_trials(sc: Scenario, model, fld, *, progress=None) -> dict:
    """Simulated orientation trials at every light level (module docstring).

    Parameters
    ----------
    sc : Scenario
    model : RetinaModel
    fld : Field
    progress : callable(done, total), optional
        After each light level.

    Returns
    -------
    dict
        ``goal_deg``, ``scan_offsets_deg (P,)`` and ``levels``: per light-level name a dict with
        ``photons``, ``start_deg``/``decoded_deg``/``error_deg``/``chosen_deg (T,)``,
        ``ambiguous (T,) int8`` and the circular statistics (``mean_deg``, ``r``, ``rayleigh_p``,
        ``v_u``, ``v_p``, ``r_axial``, ``rayleigh_p_axial``, ``preferred_analysis``).
    """
    from retina.readout.circstats import circular_difference
    from retina.readout.trials import simulate_trials

    tr = sc["trials"]
    amp = sc["scan"]["amplitude_deg"]
    offsets = grid_offsets(np.linspace(-amp, amp, tr["scan_steps"]) if tr["scan_steps"] > 1 else np.zeros(1))
    gain = "free" if sc["readout"]["nuisance"] == "gain" else "known"
    m = GridModel(signal_model(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), model.degree, gain)
    out = {"goal_deg": float(tr["goal_deg"]), "scan_offsets_deg": offsets, "levels": {}}
    names, photons = sc["light"]["names"], sc["light"]["photons"]
    for i, (name, ph) in enumerate(zip(names, photons)):
        r = simulate_trials(m.truth(ph), m.decoder(ph), tr["n_trials"], goal_deg=tr["goal_deg"],
                            scan_offsets_deg=offsets, rng=stage_rng(sc.seed, f"trials/{name}"))
        out["levels"][name] = {
            "photons": float(ph), "start_deg": r.start_deg, "decoded_deg": r.decoded_deg,
            "ambiguous": r.ambiguous.astype(np.int8),
            "error_deg": circular_difference(r.decoded_deg, r.start_deg),
            "chosen_deg": np.asarray(r.chosen_deg, float), "mean_deg": float(r.rayleigh.mean_deg),
            "r": float(r.rayleigh.r), "rayleigh_p": float(r.rayleigh.p), "v_u": float(r.v_test.u),
            "v_p": float(r.v_test.p), "r_axial": float(r.rayleigh_axial.r),
            "rayleigh_p_axial": float(r.rayleigh_axial.p), "preferred_analysis": r.preferred_analysis}
        if progress:
            progress(i + 1, len(names))
    return out


STAGE = Stage("trials", lambda b, progress: compute_trials(b.scenario, b.model, b.field, progress=progress),
              label="trials", steps=lambda sc: len(sc["light"]["names"]))
