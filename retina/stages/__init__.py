"""The stages of a run, one module each, and their registry.

A stage takes the objects built from a scenario (:class:`retina.build.Built`) and returns one
group of the results file (:mod:`retina.results`).  :data:`STAGES` lists them in the order
:func:`retina.pipeline.run` computes them; a new stage is a new module here with a ``STAGE``
(:class:`~retina.stages._common.Stage`) added to :data:`STAGES` (or :func:`register`).

- :mod:`retina.stages.patterns` - modulation patterns at the scenario's headings;
- :mod:`retina.stages.scan` - the pattern through a head scan;
- :mod:`retina.stages.precision` - heading bounds and decoding errors against light;
- :mod:`retina.stages.disorder` - depth and bounds over molecular disorder;
- :mod:`retina.stages.order` - how much order the compass needs: restraint classes and curves
  against each concentration;
- :mod:`retina.stages.trials` - simulated orientation trials;
- :mod:`retina.stages.rf` - RF conditions beside the control (``rf``);
- :mod:`retina.stages.rf_sweep` - the RF frequency sweep (``rf_sweep``): onset of disorientation and
  threshold amplitude per lifetime; both RF stages skip (return None, no group) when ``[rf]`` asks
  for nothing;
- :mod:`retina.stages._common` - what they share (generators, signal model, decoder grid).
"""

from __future__ import annotations

from retina.stages import disorder, order, patterns, precision, rf, rf_sweep, scan, trials
from retina.stages._common import Stage

__all__ = ["Stage", "STAGES", "register", "stage_names"]

STAGES: dict[str, Stage] = {s.name: s for s in (patterns.STAGE, scan.STAGE, precision.STAGE, disorder.STAGE,
                                                order.STAGE, trials.STAGE, rf.STAGE, rf_sweep.SWEEP_STAGE)}
"""Every stage by name, in computing order."""


def register(stage: Stage) -> None:
    """Add a stage to :data:`STAGES`, after the others.

    Parameters
    ----------
    stage : Stage
        Its name must be new.

    Raises
    ------
    ValueError
        When a stage of that name is registered already.
    """
    if stage.name in STAGES:
        raise ValueError(f"a stage named {stage.name!r} is registered already")
    STAGES[stage.name] = stage


def stage_names() -> tuple[str, ...]:
    """The registered stage names.

    Returns
    -------
    tuple of str
        In computing order.
    """
    return tuple(STAGES)
