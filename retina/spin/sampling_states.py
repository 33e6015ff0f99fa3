"""How many random states the sampling method needs (:mod:`retina.spin.sampling`): a pilot run's
variances (:func:`states_for`) and the cheapest counts per radical whose predicted variance meets
a target (:func:`cheapest_states`), from the draw schedule's variance model
(:func:`retina.spin.sampling_result.schedule_variance`) and the cost model
(:mod:`retina.spin.sampling_cost`).

Split out of :mod:`retina.spin.sampling`, which re-exports these names.
"""

from __future__ import annotations

import math

import numpy as np

from retina.spin.sampling_cost import _T_MATVEC, _radical_seconds
from retina.spin.sampling_result import (DEFAULT_BASIS, DEFAULT_BIAS_TOL, DEFAULT_CONTROL, DEFAULT_TAIL_SPLIT,
                                         schedule_variance)

__all__ = ["states_for", "cheapest_states", "MAX_STATES", "PILOT_STATES", "PILOT_DIRECTIONS"]


#: Most random states :func:`states_for` asks for.
MAX_STATES = 1024
#: States and directions of the pilot run of :func:`states_for`.
PILOT_STATES, PILOT_DIRECTIONS = 4, 6


def states_for(system, field_uT, directions, accuracy: float, *, seed: int = 0,
               n_jobs: int | None = None, control: str = DEFAULT_CONTROL, basis: str = DEFAULT_BASIS,
               tail_split: str | float | None = DEFAULT_TAIL_SPLIT) -> tuple[tuple[int, int], float]:
    """Random states per radical needed for a standard error of at most ``accuracy`` per yield, by
    a pilot run.

    The pilot samples ``PILOT_STATES`` states on (at most) ``PILOT_DIRECTIONS`` of the directions,
    spread over the list, with seed ``seed + 1`` (so the final run's vectors, seed ``seed``, are
    independent of it: the choice of the counts then does not bias the final estimate or its error
    bar).  The product estimator's variance is ``v_A s(R_A) + v_B s(R_B)`` (module docstring) with
    ``v_r`` one draw's variance when every draw runs to the end and ``s(R)`` the draw schedule's
    factor (:func:`schedule_variance`: ``1 / R`` without a schedule, about ``1.6 / R`` halving), the
    ``v_r`` measured by the pilot (its direction of largest variance, divided by the pilot's own
    factor); with each radical's cost at ``R`` states from :func:`retina.spin.sampling_cost.cost_model`'s model, the
    cheapest counts whose predicted variance meets ``accuracy^2 / 1.2`` are searched over counts
    from ``PILOT_STATES`` to ``MAX_STATES`` (steps of about 5 %; without a schedule the optimum is
    ``R_r ~ sqrt(v_r / c_r)``, Lagrange multipliers, derived).  The pilot uses the final run's
    control variate, basis and draw schedule, so ``v_r`` already carries their effect (the pilot
    costs twice as much with ``"opposite"``, like the run).

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
    field_uT : float
    directions : array_like (N, 3)
    accuracy : float
        Wanted standard error per (singlet-start singlet) yield, > 0.
    seed : int
        The final run's seed.
    n_jobs : int, optional
        Worker processes over the pilot's directions (as in :func:`retina.spin.sampling.sampled_yields`).
    control : {"opposite", "none"}
        The final run's control variate (:func:`retina.spin.sampling.sampled_yields`).
    basis : str
        The final run's basis of the random phases (:func:`retina.spin.sampling.sampled_yields`).
    tail_split : "halving", float or None
        The final run's draw schedule (:func:`retina.spin.sampling.sampled_yields`).

    Returns
    -------
    ((int, int), float)
        The numbers of states of radicals A and B, and the pilot's largest standard error.
    """
    from retina.errors import InputError

    if not (np.isfinite(accuracy) and 0 < accuracy < 1):
        raise InputError(f"expected an accuracy (standard error per yield) between 0 and 1, got {accuracy!r}",
                         key="accuracy")
    dirs = np.asarray(directions, dtype=float).reshape(-1, 3)
    pick = np.unique(np.linspace(0, dirs.shape[0] - 1, min(PILOT_DIRECTIONS, dirs.shape[0])).round().astype(int))
    from retina.spin import sampling          # the pilot is a sampled run (looked up at call time)

    pilot = sampling.sampled_yields(system, field_uT, dirs[pick], n_states=PILOT_STATES, seed=seed + 1, n_jobs=n_jobs,
                           control=control, basis=basis, tail_split=tail_split)
    se = float(np.max(pilot.standard_error))
    var_a, var_b = pilot.radical_variances()
    worst = int(np.argmax(var_a + var_b))
    s_pilot = schedule_variance(PILOT_STATES, tail_split)
    v = [float(var_a[worst]) / s_pilot, float(var_b[worst]) / s_pilot]
    return cheapest_states(system, field_uT, v, accuracy**2 / 1.2, tail_split), se


def cheapest_states(system, field_uT, draw_variances, target: float,
                    tail_split: str | float | None = DEFAULT_TAIL_SPLIT) -> tuple[int, int]:
    """The cheapest random states per radical whose predicted variance ``v_A s(R_A) + v_B s(R_B)``
    is at most ``target`` (:func:`states_for`; ``s`` from :func:`schedule_variance`, the cost from
    :func:`retina.spin.sampling_cost.cost_model`'s model with its fixed constants), searched over counts from
    ``PILOT_STATES`` to ``MAX_STATES`` in steps of about 5 %; ``(MAX_STATES, MAX_STATES)`` when
    none meets it.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
    field_uT : float
    draw_variances : (float, float)
        One draw's variance ``v_r`` of each radical when every draw runs to the end.
    target : float
        The largest variance allowed.
    tail_split : "halving", float or None
        The draw schedule.

    Returns
    -------
    (int, int)
    """
    counts = np.unique(np.round(PILOT_STATES * 1.05 ** np.arange(
        int(math.log(MAX_STATES / PILOT_STATES) / math.log(1.05)) + 2)).astype(int).clip(PILOT_STATES, MAX_STATES))
    # per radical: predicted variance and modelled seconds at each count
    var = [np.array([max(float(vr), 0.0) * schedule_variance(int(c), tail_split) for c in counts])
           for vr in draw_variances]
    secs = np.array([_radical_seconds(system, field_uT, DEFAULT_BIAS_TOL, (int(c), int(c)), tail_split, _T_MATVEC)[0]
                     for c in counts])                                    # (n, 2)
    ok = (var[0][:, None] + var[1][None, :]) <= target
    if not ok.any():
        return MAX_STATES, MAX_STATES
    cost = secs[:, 0][:, None] + secs[:, 1][None, :]
    ia, ib = np.unravel_index(int(np.argmin(np.where(ok, cost, np.inf))), ok.shape)
    return int(counts[ia]), int(counts[ib])
