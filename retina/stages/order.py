"""Stage ``order``: how much molecular order the compass needs, and in which dimension.

Two parts, both from the ensemble (annealed) response of :mod:`retina.eye.ordering` models placed
at the scenario's mean orientation ``M`` (``[ordering] orientation_deg``, or the smallest rotation
taking ``[ordering] axis`` to the receptor axis):

- the restraint classes (:func:`retina.eye.ordering.restraint_classes`): aligned (restrained in
  three), restrained in two and free in one (free rotation about the receptor axis of the molecular
  direction ``M^-1 z``), restrained in one and free in two (the molecular direction ``M^-1 x`` in the
  membrane plane, free in azimuth and free to twist about itself), isotropic (free in three);
- curves against each concentration of ``[ordering] study_kappas``
  (:func:`retina.eye.ordering.concentration_curves`): the cone with tied twist (aligned at
  ``inf`` to isotropic at 0), the cone with free twist (restrained in two to isotropic), the plane's
  girdle with free twist (restrained in one to isotropic), the twist concentration about the
  receptor axis (aligned to restrained in two) and in the plane (restrained in two to restrained in
  one), and the cone without twist for comparison (it keeps a pattern at 0).

For each model: the modulation depth (``(max - min) / mean`` of the receptor yields over both
eyes, averaged over the scenario's headings) and the heading information per photon of a single
pose averaged over headings 0, 10, ..., 350 deg, with the bound ``1 / sqrt(photons * info)``
(degrees) at every light level of ``[light]``, as in :mod:`retina.stages.disorder`.  An isotropic
response is exactly constant, so its depth and information are exactly 0 and its bound infinite.
"""

from __future__ import annotations

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import Stage, bounds_over_light, study_probe_many

__all__ = ["compute_order", "STAGE", "n_steps"]


def n_steps(sc: Scenario) -> int:
    """The number of models the study evaluates (its progress total).

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    int
        Four restraint classes plus one per curve and concentration of ``ordering.study_kappas``.
    """
    from retina.eye.ordering import concentration_curves

    return 4 + len(concentration_curves()) * len(sc["ordering"]["study_kappas"])


def compute_order(sc: Scenario, yf, receptors, fld, *, progress=None) -> dict:
    """Depth, information and bounds for the restraint classes and the concentration curves.

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
        ``light_photons (V,)``; ``classes``: one sub-dict per class key with attrs ``label``,
        ``depth``, ``info_per_photon`` and ``bound_deg (V,)``; ``curves``: one sub-dict per curve
        key with attr ``label`` and ``kappas (K,)``, ``depth (K,)``, ``info_per_photon (K,)``,
        ``bound_deg (V, K)``; attrs ``class_order`` and ``curve_order`` (comma-separated keys).
    """
    from scipy.spatial.transform import Rotation

    from retina.eye.ordering import concentration_curves, restraint_classes

    o = sc["ordering"]
    mean = Rotation.from_euler("ZYZ", list(o["orientation_deg"]), degrees=True)
    if o["axis"] is not None:  # the cone's convention: the axis on the receptor axis
        from retina.eye.ordering import Cone

        mean = Cone.restraining(o["axis"], kappa=0.0).mean
    light = np.asarray(sc["light"]["photons"], float)
    kap = np.asarray(o["study_kappas"], float)
    cls, crv = restraint_classes(mean), concentration_curves(mean)
    models = [case.build for case in cls] + [case.build(float(k)) for case in crv for k in kap]
    # every model's ensemble response, then all of them probed at once (shared harmonics and catch)
    coeffs = np.asarray(yf.coeffs, float)
    dps, infos = study_probe_many(sc, fld, receptors, np.array([m.ensemble(coeffs) for m in models]),
                                  progress=progress)
    classes, curves = {}, {}
    for i, case in enumerate(cls):
        classes[case.key] = {"label": case.label, "depth": float(dps[i]), "info_per_photon": float(infos[i]),
                             "bound_deg": bounds_over_light(light, float(infos[i]))}
    for j, case in enumerate(crv):
        sl = slice(len(cls) + j * kap.size, len(cls) + (j + 1) * kap.size)
        info = infos[sl].copy()
        curves[case.key] = {"label": case.label, "kappas": kap.copy(), "depth": dps[sl].copy(),
                            "info_per_photon": info, "bound_deg": bounds_over_light(light, info)}
    return {"light_photons": light, "classes": classes, "curves": curves,
            "class_order": ",".join(classes), "curve_order": ",".join(curves),
            "mean_orientation_deg": np.asarray(o["orientation_deg"], float)}


def _compute(built, progress):
    return compute_order(built.scenario, built.yield_function, built.receptors, built.field, progress=progress)


STAGE = Stage("order", _compute, label="order study", steps=n_steps)
