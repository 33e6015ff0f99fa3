"""The order study's cases: the restraint classes and the concentration curves, built from the
models of :mod:`retina.eye.order_laws` (used by :mod:`retina.stages.order`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy.spatial.transform import Rotation

from retina.eye.order_laws import Aligned, Cone, Isotropic, Planar

__all__ = ["StudyCase", "restraint_classes", "concentration_curves"]


@dataclass(frozen=True)
class StudyCase:
    """One ordering model of the order study: a key, a label for figures and tables, and the model
    (or, for a curve, a function of the concentration that builds it)."""

    key: str
    label: str
    build: object


def restraint_classes(mean: Rotation | None = None) -> tuple[StudyCase, ...]:
    """The four restraint classes of the order study, in the order of decreasing order.

    With ``M = mean`` (identity by default): aligned, ``Aligned(M)``; restrained in two (free in
    one), ``Cone(kappa=inf, twist="free", mean=M)``, free rotation about the receptor axis of the
    molecular direction ``M^-1 z``; restrained in one (free in two), ``Planar(kappa=inf,
    twist="free", mean=M)``, the molecular direction ``M^-1 x`` in the membrane plane with a free
    twist; isotropic.

    Parameters
    ----------
    mean : scipy Rotation, optional
        The mean orientation ``M`` (molecule to receptor).

    Returns
    -------
    tuple of StudyCase
        Keys "aligned", "restrained_two", "restrained_one", "isotropic"; ``build`` is the model.
    """
    M = Rotation.identity() if mean is None else mean
    return (
        StudyCase("aligned", "aligned (restrained in three)", Aligned(M)),
        StudyCase("restrained_two", "restrained in two, free in one",
                  Cone(kappa=math.inf, twist="free", mean=M)),
        StudyCase("restrained_one", "restrained in one, free in two",
                  Planar(kappa=math.inf, twist="free", mean=M)),
        StudyCase("isotropic", "isotropic (free in three)", Isotropic()),
    )


def concentration_curves(mean: Rotation | None = None) -> tuple[StudyCase, ...]:
    """The curves of the order study: each varies one concentration of one model (``build(kappa)
    -> Ordering``); the labels give the limits at ``kappa = inf`` and 0.

    The first three reach isotropy at 0 (tilt with tied twist, tilt with free twist, the plane's
    girdle with free twist); the two twist curves join restraint classes; the last is the cone
    without twist, for comparison (not isotropic at 0).

    Parameters
    ----------
    mean : scipy Rotation, optional
        The mean orientation ``M`` (molecule to receptor), as in :func:`restraint_classes`.

    Returns
    -------
    tuple of StudyCase
        Keys "cone_tied", "cone_free", "plane_free", "twist_axis", "twist_plane",
        "cone_no_twist"; ``build(kappa)`` makes the model.
    """
    M = Rotation.identity() if mean is None else mean
    inf = math.inf
    return (
        StudyCase("cone_tied", "cone, twist tied: aligned to isotropic",
                  lambda k: Cone(kappa=k, twist="tied", mean=M)),
        StudyCase("cone_free", "cone, free twist: restrained in two to isotropic",
                  lambda k: Cone(kappa=k, twist="free", mean=M)),
        StudyCase("plane_free", "plane girdle, free twist: restrained in one to isotropic",
                  lambda k: Planar(kappa=k, twist="free", mean=M)),
        StudyCase("twist_axis", "twist about the axis: aligned to restrained in two",
                  lambda k: Cone(kappa=inf, twist=k, mean=M)),
        StudyCase("twist_plane", "twist in the plane: restrained in two to restrained in one",
                  lambda k: Planar(kappa=inf, twist=k, mean=M)),
        StudyCase("cone_no_twist", "cone without twist (not isotropic at 0)",
                  lambda k: Cone(kappa=k, twist="fixed", mean=M)),
    )
