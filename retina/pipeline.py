"""The end-to-end job in one call: scenario -> built objects -> every stage -> :class:`Results`.

:func:`run` is the call a notebook needs::

    from retina.scenario import load_scenario
    from retina.pipeline import run
    res = run(load_scenario("assets/demo_scenario.toml"), quick=True)
    res.groups["precision"]["bound_single_deg"]

Where the pieces live: :mod:`retina.build` (scenario -> field, eyes, ordering, yield function,
retina model, sky; the randomness convention), :mod:`retina.stages` (one module per stage and the
registry), :mod:`retina.results` (the container and its HDF5 schema) and :mod:`retina.outputs`
(figures, key numbers, report).
"""

from __future__ import annotations

import logging
import time

import numpy as np

from retina.build import ProgressFactory, build_all, no_progress, quick_scenario
from retina.errors import InputError
from retina.results import Results, make_provenance
from retina.scenario import Scenario
from retina.stages import STAGES
from retina.stages.memory import check_memory

__all__ = ["run"]

_log = logging.getLogger(__name__)


def run(sc: Scenario, *, quick: bool = False,
        stages=("patterns", "scan", "precision", "disorder", "order", "trials", "rf", "rf_sweep"),
        progress_factory: ProgressFactory | None = None, yield_function=None,
        max_bytes: int | None = None, on_group=None) -> Results:
    """Run the scenario's stages and collect their results.

    Parameters
    ----------
    sc : Scenario
    quick : bool
        Apply :func:`retina.build.quick_scenario` first.
    stages : sequence of str
        Names in :data:`retina.stages.STAGES` ("patterns", "scan", "precision", "disorder",
        "order", "trials", "rf", "rf_sweep"); they run in the registry's order, except that with
        ``on_group`` the stages of :data:`EARLY_FIGURE_STAGES` run right after ``patterns`` and
        ``scan`` (their figures are the slowest to draw); the results are the same either way.  A stage with nothing to do
        (``rf`` and ``rf_sweep`` without an ``[rf]`` request) adds no group.  The yield function
        and the retina are always
        built.
    progress_factory : callable(description, total) -> progress(done, total), optional
        Makes a progress callback for each long step (the CLI passes :class:`retina.progress.ProgressBars`).
    yield_function : YieldFunction, optional
        Use this instead of computing/loading the scenario's.
    max_bytes : int, optional
        Memory limit of every step (default 60 % of the available memory): checked before anything
        is built (:func:`retina.stages.memory.check_memory`) and passed to the spin engine.
    on_group : callable(Results), optional
        Called with the results so far (same provenance as the final ones) once the built
        groups (``yield_function``, ``receptors``, ``field``) exist and again after every stage
        that adds a group, so that figures of finished stages can be drawn while later stages
        run (:class:`retina.outputs.OutputWriter`).  It must not modify them.

    Raises
    ------
    ResourceError
        When a step's memory estimate exceeds ``max_bytes``.

    Returns
    -------
    Results
        ``groups`` holds ``yield_function``, ``receptors``, ``field`` and one group per stage run;
        ``scenario`` is the (possibly reduced) scenario actually run.
    """
    bad = set(stages) - set(STAGES)
    if bad:
        raise InputError(f"unknown stage(s) {sorted(bad)}", key="stages")
    if quick:
        sc = quick_scenario(sc)
    check_memory(sc, stages, max_bytes)
    pf = progress_factory or no_progress
    t0 = time.perf_counter()
    built = build_all(sc, yield_function=yield_function, progress_factory=pf)
    _log.info("built the yield function and %d receptors in %.1f s", built.receptors.eye_index.size,
              time.perf_counter() - t0)
    yf, receptors, fld = built.yield_function, built.receptors, built.field
    an = yf.anisotropy()
    g: dict = {}
    g["yield_function"] = {"coeffs": np.asarray(yf.coeffs), "degree": int(yf.degree), "max": an.max,
                           "min": an.min, "mean": an.mean, "relative": an.relative,
                           "argmax": np.asarray(an.argmax), "argmin": np.asarray(an.argmin),
                           "fit_error": np.nan if yf.fit_error is None else float(yf.fit_error)}
    g["receptors"] = {"visual_dirs": receptors.visual_dirs, "axes": receptors.axes,
                      "solid_angle": receptors.solid_angle, "eye_index": receptors.eye_index}
    g["field"] = {"F_uT": float(fld.F_uT), "I_deg": float(fld.I_deg), "D_deg": float(fld.D_deg)}
    prov = make_provenance(sc, yf, fld, quick=quick, stages=stages)
    if on_group is not None:
        on_group(Results(dict(g), prov, scenario=sc))
    for name in _compute_order(on_group is not None):
        stage = STAGES[name]
        if name in stages:
            if stage.steps(sc) == 0 and name in ("rf", "rf_sweep"):
                continue
            progress = pf(stage.label, stage.steps(sc)) if stage.label else None
            t0 = time.perf_counter()
            out = stage.compute(built, progress)
            _log.info("stage %s: %.1f s", name, time.perf_counter() - t0)
            if out is not None:
                g[name] = out
                if on_group is not None:
                    on_group(Results(dict(g), prov, scenario=sc))
    order = ["yield_function", "receptors", "field", *STAGES]
    return Results({k: g[k] for k in order if k in g}, prov, scenario=sc)


#: Stages whose figures take longest to draw, computed first when figures are drawn while the
#: run goes on (``on_group``), so that the figure left to draw after the last stage is a quick one.
#: Every stage draws from its own generator (:func:`retina.build.stage_rng`) and reads only the
#: built objects, so the results do not depend on the order.
EARLY_FIGURE_STAGES = ("rf_sweep", "rf")


def _compute_order(early_figures: bool) -> list[str]:
    names = list(STAGES)
    if not early_figures:
        return names
    first = [n for n in ("patterns", "scan") if n in names]
    return first + [n for n in EARLY_FIGURE_STAGES if n in names] + [n for n in names
                                                                      if n not in first + list(EARLY_FIGURE_STAGES)]
