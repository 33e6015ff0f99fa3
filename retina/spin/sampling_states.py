"""How many random states the sampling method needs (:mod:`retina.spin.sampling`): the cheapest
counts per radical whose predicted variance meets a target (:func:`cheapest_states`), from the
draw schedule's variance model (:func:`retina.spin.sampling_result.schedule_variance`) and the cost
model (:mod:`retina.spin.sampling_cost`), and the pilot's size.  The pilot run itself,
:func:`retina.spin.sampling.states_for`, stays with the sampler it runs (no import circle).

Split out of :mod:`retina.spin.sampling`, which re-exports these names.
"""

from __future__ import annotations

import math

import numpy as np

from retina.spin.sampling_cost import _T_MATVEC, _radical_seconds
from retina.spin.sampling_result import DEFAULT_BIAS_TOL, DEFAULT_TAIL_SPLIT, schedule_variance

__all__ = ["cheapest_states", "MAX_STATES", "PILOT_STATES", "PILOT_DIRECTIONS"]


#: Most random states :func:`retina.spin.sampling.states_for` asks for.
MAX_STATES = 1024
#: States and directions of the pilot run of :func:`retina.spin.sampling.states_for`.
PILOT_STATES, PILOT_DIRECTIONS = 4, 6


def cheapest_states(system, field_uT, draw_variances, target: float,
                    tail_split: str | float | None = DEFAULT_TAIL_SPLIT) -> tuple[int, int]:
    """The cheapest random states per radical whose predicted variance ``v_A s(R_A) + v_B s(R_B)``
    is at most ``target`` (:func:`retina.spin.sampling.states_for`; ``s`` from :func:`schedule_variance`, the cost from
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
