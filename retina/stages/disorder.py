"""Stage ``disorder``: modulation depth and heading bounds over a sweep of molecular disorder
(the concentrations ``ordering.disorder_kappas`` of the scenario's model when it has one: "cone",
"cone_no_twist" or "plane"; otherwise a "cone" with the scenario's twist).  With the default cone
(twist tied to kappa) the sweep's kappa -> 0 end is isotropic; :func:`swept_model_text` says which
model was swept and whether its kappa -> 0 limit is isotropic.

The bound here is from the heading-averaged information of a single pose,
``1 / sqrt(mean_h I(h))`` over headings 0, 10, ..., 350 deg.
"""

from __future__ import annotations

import numpy as np

from retina.build import KAPPA_MODELS, build_ordering
from retina.scenario import Scenario
from retina.stages._common import Stage, bounds_over_light, study_probe_many

__all__ = ["compute_disorder", "swept_model_text", "STAGE"]


def compute_disorder(sc: Scenario, yf, receptors, fld, *, progress=None) -> dict:
    """Modulation depth and bounds over the cone concentrations ``ordering.disorder_kappas``.

    Parameters
    ----------
    sc : Scenario
    yf : YieldFunction
    receptors : Receptors
    fld : Field
    progress : callable(done, total), optional
        In models done (all models are evaluated together, block by block of receptors:
        :func:`retina.stages._common.study_probe_many`).

    Returns
    -------
    dict
        ``kappas (K,)``, ``depth (K,)`` (mean over the scenario's headings), ``info_per_photon (K,)``,
        ``light_photons (M,)``, ``bound_deg (M, K)`` and, for a cone ordering, ``scenario_kappa``.
    """
    kap = np.asarray(sc["ordering"]["disorder_kappas"], float)
    light = np.asarray(sc["light"]["photons"], float)
    # every concentration's ensemble response, probed at once (shared harmonics and catch)
    coeffs = np.asarray(yf.coeffs, float)
    responses = np.array([build_ordering(sc, float(k)).ensemble(coeffs) for k in kap]).reshape(kap.size, -1)
    dep, info = study_probe_many(sc, fld, receptors, responses, progress=progress)
    has_kappa = sc["ordering"]["model"] in KAPPA_MODELS
    own = float(sc["ordering"]["kappa"]) if has_kappa else None
    return {"kappas": kap, "depth": dep, "info_per_photon": info,
            **({"scenario_kappa": own} if own is not None and np.isfinite(own) else {}),
            "model": swept_model_text(sc), "light_photons": light,
            "bound_deg": bounds_over_light(light, info)}


def swept_model_text(sc: Scenario) -> str:
    """Which model the sweep varies, and where its kappa -> 0 end lies.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    str
        For example "cone (Cone), twist tied; isotropic at kappa = 0".
    """
    o = sc["ordering"]
    name = o["model"] if o["model"] in KAPPA_MODELS else "cone"
    twist = o["twist"] if o["twist"] != "restrained" else f"restrained (twist kappa {o['twist_kappa']:g})"
    if name == "cone_no_twist":
        return "cone without twist (ConeNoTwist; NOT isotropic at kappa = 0)"
    iso = twist in ("tied", "free") or (twist.startswith("restrained") and o["twist_kappa"] == 0)
    what = "cone (Cone)" if name == "cone" else "plane girdle (Planar)"
    return f"{what}, twist {twist}; " + ("isotropic at kappa = 0" if iso else "not isotropic at kappa = 0")


STAGE = Stage("disorder", lambda b, progress: compute_disorder(b.scenario, b.yield_function, b.receptors, b.field,
                                                               progress=progress),
              label="disorder sweep", steps=lambda sc: len(sc["ordering"]["disorder_kappas"]))
