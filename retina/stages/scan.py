"""Stage ``scan``: the pattern through a head scan and how fast it changes with the head's yaw."""

from __future__ import annotations

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import Stage, depth, scan_yaws, signal_model

__all__ = ["compute_scan", "STAGE"]


def compute_scan(sc: Scenario, model, fld) -> dict:
    """The head scan (:func:`retina.stages._common.scan_yaws`).

    Parameters
    ----------
    sc : Scenario
    model : RetinaModel
        ``N`` receptors.
    fld : Field

    Returns
    -------
    dict
        ``yaw_deg (F,)``, ``b_head (F, 3)``, ``yields``/``modulation (F, N)``, ``depth (F,)`` and
        ``change_per_degree (F,)``, the rms over receptors of the relative yield change per degree
        of head turn (:func:`retina.readout.scans.pattern_change_per_degree`).
    """
    from retina.eye.pattern import modulation
    from retina.eye.pose import head_field, pose_rotation
    from retina.readout.scans import pattern_change_per_degree

    yaw = scan_yaws(sc)
    rot = pose_rotation(yaw, sc["scan"]["pitch_deg"], 0.0)
    b = head_field(rot, fld.vector)
    y = model.yields(b)
    change = pattern_change_per_degree(signal_model(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), yaw)
    return {"yaw_deg": yaw, "b_head": b, "yields": y, "modulation": modulation(y, model.receptors),
            "depth": depth(y), "change_per_degree": np.asarray(change, float)}


STAGE = Stage("scan", lambda b, progress: compute_scan(b.scenario, b.model, b.field))
