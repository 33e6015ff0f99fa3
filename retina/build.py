"""Scenario -> built objects: the field, the eyes and their receptors, the molecular ordering, the
yield function, the retina model and the sky, each from a validated
:class:`retina.scenario.Scenario`.

:func:`build_all` makes everything the stages (:mod:`retina.stages`) need, as one :class:`Built`;
the single builders serve notebooks, the viewer and tests.  :func:`quick_scenario` is the reduced
copy behind ``--quick``.

Randomness (owned here)
-----------------------
Every stage draws from its own generator
``numpy.random.default_rng(SeedSequence([seed, crc32(stage name)]))`` (:func:`stage_rng`), so a
stage's numbers do not depend on which other stages ran; the same scenario and seed give identical
arrays.  The sampled-molecules retina draws from the stage name ``"molecules"``.
"""

from __future__ import annotations

import logging
import zlib
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from retina.errors import InputError
from retina.scenario import Scenario

__all__ = [
    "Built", "build_all", "stage_rng", "quick_scenario", "build_field", "build_eyes", "build_ordering",
    "build_yield_function", "build_retina", "build_sky", "field_uT", "ProgressFactory", "no_progress",
    "KAPPA_MODELS",
]

_log = logging.getLogger(__name__)

ProgressFactory = Callable[[str, int], Callable[[int, int], None] | None]
"""``factory(description, total) -> progress(done, total)`` (or None): one callback per long step."""


def no_progress(desc: str, total: int):
    """The progress factory that shows nothing.

    Parameters
    ----------
    desc : str
    total : int

    Returns
    -------
    None
        The core treats a None callback as no progress.
    """
    return None


def stage_rng(seed: int, stage: str) -> np.random.Generator:
    """The generator of one stage (module docstring, "Randomness").

    Parameters
    ----------
    seed : int
        The scenario's seed.
    stage : str
        The stage name (``"precision"``, ``"trials/dim"``, ``"molecules"``, ...).

    Returns
    -------
    numpy.random.Generator
    """
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(stage.encode())]))


def quick_scenario(sc: Scenario) -> Scenario:
    """A reduced copy for smoke tests and ``--quick``.

    Degree <= 8, <= 120 receptors per eye, <= 4 photon levels, few repeats, trials and sweep points,
    the first two headings, RF degree <= 4 with <= 2 check points, <= 4 RF sweep frequencies and
    <= 2 lifetimes, PNG at 100 dpi.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    Scenario
    """
    eyes = [dict(e, n_receptors=min(e["n_receptors"], 120)) for e in sc["eyes"]]
    ro = sc["readout"]
    ph = ro["photons"]
    if len(ph) > 4:
        ph = [ph[i] for i in np.unique(np.round(np.linspace(0, len(ph) - 1, 4)).astype(int))]
    kap = sc["ordering"]["disorder_kappas"]
    if len(kap) > 3:
        kap = [kap[0], kap[len(kap) // 2], kap[-1]]
    return sc.replace(
        **{"yield": {"degree": min(sc["yield"]["degree"], 8)},
           "eyes": eyes,
           "ordering": {"disorder_kappas": kap, "n_molecules": min(sc["ordering"]["n_molecules"], 50)},
           "readout": {"photons": ph, "decode_repeats": min(ro["decode_repeats"], 40)},
           "scan": {"steps": min(sc["scan"]["steps"], 9)},
           "trials": {"n_trials": min(sc["trials"]["n_trials"], 20),
                      "scan_steps": min(sc["trials"]["scan_steps"], 5)},
           "pose": {"headings_deg": sc["pose"]["headings_deg"][:2]},
           "rf": {"degree": min(sc["rf"]["degree"], 4), "check_points": min(sc["rf"]["check_points"], 2),
                  "sweep_MHz": sc["rf"]["sweep_MHz"][:: max(1, -(-len(sc["rf"]["sweep_MHz"]) // 4))],
                  "sweep_lifetimes_us": sc["rf"]["sweep_lifetimes_us"][:2]},
           "output": {"dpi": 100}})


def build_field(sc: Scenario):
    """The field of the scenario: its given components, or IGRF-14 at its place and date.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    retina.eye.field.Field
    """
    from retina.eye.field import Field, field_at

    f = sc["field"]
    if sc.field_uses_location:
        return field_at(f["latitude_deg"], f["longitude_deg"], f["altitude_km"], f["date"])
    return Field(f["intensity_uT"], f["inclination_deg"], f["declination_deg"], source="scenario")


def build_eyes(sc: Scenario) -> list:
    """The eyes of the scenario.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    list of retina.eye.geometry.Eye
        In file order.

    Raises
    ------
    InputError
        Naming the eye (``eyes[i].key``) for an invalid value.
    """
    from retina.eye.geometry import Eye

    out = []
    for i, e in enumerate(sc["eyes"]):
        try:
            out.append(Eye(**e))
        except InputError as exc:
            raise InputError(exc.detail, source=sc.source, key=f"eyes[{i}].{(exc.key or '').split('.')[-1]}") from None
    return out


def build_ordering(sc: Scenario, kappa: float | None = None, *, model: str | None = None):
    """The ordering model of the scenario (:func:`retina.eye.ordering.from_settings`).

    Parameters
    ----------
    sc : Scenario
    kappa : float, optional
        Replace the scenario's concentration.  When the scenario's model has none ("aligned",
        "axial", "isotropic") and ``model`` is not given, a cone ("cone", with the scenario's
        twist) of this concentration is used.
    model : str, optional
        Replace the scenario's model (one of :data:`retina.eye.ordering.MODELS`); ``kappa`` is
        ignored by a model without a concentration.

    Returns
    -------
    Ordering
        A model of :mod:`retina.eye.ordering`.
    """
    from retina.eye import ordering as om

    o = sc["ordering"]
    name = o["model"] if model is None else model
    if kappa is not None and model is None and name not in KAPPA_MODELS:
        name = "cone"
    return om.from_settings(name, kappa=float(o["kappa"] if kappa is None else kappa), twist=o["twist"],
                            twist_kappa=o["twist_kappa"], orientation_deg=o["orientation_deg"],
                            axis=o["axis"] if name in KAPPA_MODELS else None)


KAPPA_MODELS = ("cone", "cone_no_twist", "plane")
"""The ordering models that have a concentration ``kappa``."""


def field_uT(sc: Scenario) -> float:
    """The field strength the yield function is computed at.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    float
        Microtesla: ``[yield] field_uT`` when given, else the scenario field's intensity.
    """
    if sc["yield"]["field_uT"] is not None:
        return float(sc["yield"]["field_uT"])
    return float(build_field(sc).F_uT)


def build_yield_function(sc: Scenario, *, progress=None, cache: bool = True):
    """Compute, load or import the scenario's yield function (:class:`retina.yieldfn.YieldFunction`).

    A computed yield function goes through the content-hash cache (:mod:`retina.cache`): a run
    that changes only the retina, the light or the read-out reuses it instead of recomputing it.

    Parameters
    ----------
    sc : Scenario
    progress : callable(done, total), optional
        Called while the spin engine works.
    cache : bool
        Look the yield function up in, and store it into, the cache (``$RETINA_CACHE`` or
        ``~/.cache/retina-compass``).

    Returns
    -------
    retina.yieldfn.YieldFunction
        Computed from ``[yield] system``, read from ``file`` or fitted to ``table``.
    """
    from retina.yieldfn import YieldFunction

    kind, path = sc.yield_source
    degree = sc["yield"]["degree"]
    _log.info("yield function: %s %s, degree %d", {"system": "spin system", "file": "file"}.get(kind, "table"),
              path, degree)
    if kind == "system":
        from retina.spin.io import load_system

        system = load_system(path)
        return YieldFunction.from_system(system, field_uT(sc), degree=degree, method=sc["yield"]["method"],
                                         progress=progress, cache=cache)
    if kind == "file":
        return YieldFunction.load(path)
    from retina.io.importers import import_table

    return import_table(path, degree)


def build_retina(sc: Scenario, yf, receptors=None, *, kappa: float | None = None, ordering=None,
                 progress=None):
    """The :class:`retina.eye.pattern.RetinaModel` of the scenario.

    Parameters
    ----------
    sc : Scenario
    yf : YieldFunction
    receptors : Receptors, optional
        Default: built from the scenario's eyes.
    kappa : float, optional
        Replace the concentration of the ordering (:func:`build_ordering`), in ensemble mode
        (disorder sweep).
    ordering : Ordering, optional
        Use this ordering model instead, in ensemble mode (order study).
    progress : callable(done, total), optional

    Returns
    -------
    retina.eye.pattern.RetinaModel
        Sampled molecules draw from :func:`stage_rng` ``(seed, "molecules")``.
    """
    from retina.eye.geometry import build_receptors
    from retina.eye.pattern import RetinaModel

    if receptors is None:
        receptors = build_receptors(build_eyes(sc))
    o = sc["ordering"]
    mode = o["mode"] if kappa is None and ordering is None else "ensemble"
    order = build_ordering(sc, kappa) if ordering is None else ordering
    return RetinaModel(yf, receptors, order, mode=mode, n_molecules=o["n_molecules"],
                       seed=stage_rng(sc.seed, "molecules"), progress=progress)


def build_sky(sc: Scenario):
    """The sky model of ``[light]``.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    retina.signal.light.UniformSky or retina.signal.light.HorizonSky
    """
    from retina.signal.light import HorizonSky, UniformSky

    li = sc["light"]
    if li["sky"] == "horizon":
        return HorizonSky(horizon_deg=li["horizon_deg"], softness_deg=li["softness_deg"],
                          ground_ratio=li["ground_ratio"])
    return UniformSky()


@dataclass
class Built:
    """Everything the stages work on, built from one scenario.

    Attributes
    ----------
    scenario : Scenario
        The scenario actually run (after ``--quick``).
    field : retina.eye.field.Field
    yield_function : retina.yieldfn.YieldFunction
    receptors : retina.eye.geometry.Receptors
        ``N`` receptors over both eyes.
    model : retina.eye.pattern.RetinaModel
        The retina with the scenario's ordering.
    """

    scenario: Scenario
    field: Any
    yield_function: Any
    receptors: Any
    model: Any


def build_all(sc: Scenario, *, yield_function=None, progress_factory: ProgressFactory | None = None) -> Built:
    """Build the field, yield function, receptors and retina model of ``sc``.

    Parameters
    ----------
    sc : Scenario
    yield_function : YieldFunction, optional
        Use this instead of computing, loading or importing the scenario's.
    progress_factory : callable(description, total), optional
        Progress callbacks for the yield function and the molecule sampling.

    Returns
    -------
    Built
    """
    from retina.eye.geometry import build_receptors

    pf = progress_factory or no_progress
    fld = build_field(sc)
    yf = yield_function if yield_function is not None else build_yield_function(sc, progress=pf("yield function", 0))
    yf.anisotropy()
    receptors = build_receptors(build_eyes(sc))
    model = build_retina(sc, yf, receptors, progress=pf("molecules", 0))
    return Built(sc, fld, yf, receptors, model)
