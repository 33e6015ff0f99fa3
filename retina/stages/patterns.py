"""Stage ``patterns``: the modulation pattern over both retinas at the scenario's headings."""

from __future__ import annotations

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import Stage, depth

__all__ = ["compute_patterns", "STAGE"]


def compute_patterns(sc: Scenario, model, fld) -> dict:
    """Patterns at the scenario's headings.

    Parameters
    ----------
    sc : Scenario
    model : RetinaModel
        ``N`` receptors.
    fld : Field

    Returns
    -------
    dict
        ``headings_deg (H,)``, ``b_head (H, 3)``, ``yields (H, N)``, ``modulation (H, N)``,
        ``depth (H,)``.
    """
    from retina.eye.pose import Pose

    p = sc["pose"]
    pats = [model.pattern(Pose(h, p["pitch_deg"], p["roll_deg"]), fld) for h in p["headings_deg"]]
    y = np.array([q.yields for q in pats])
    return {"headings_deg": np.asarray(p["headings_deg"], float), "b_head": np.array([q.b_head for q in pats]),
            "yields": y, "modulation": np.array([q.modulation for q in pats]), "depth": depth(y)}


STAGE = Stage("patterns", lambda b, progress: compute_patterns(b.scenario, b.model, b.field))
