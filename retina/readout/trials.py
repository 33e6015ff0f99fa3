"""Simulated orientation trials: virtual birds decode their heading and choose a direction.

Conventions (owned here)
------------------------
- Each of ``n_birds`` birds starts facing a heading ``h_b`` (uniformly random by default, seeded),
  collects Poisson counts there (or over a head scan about it; the Poisson law, drawn by a walk
  along dim rows unless ``sampler="direct"``), and decodes a heading estimate
  ``psi_b`` (``retina.readout.decode``).  Intending to fly toward the goal direction ``goal_deg``
  (clockwise from north), it turns by ``goal - psi_b`` and so departs in

      chosen_b = goal + (h_b - psi_b) + e_b,

  where ``e_b`` is optional von Mises behavioural noise of concentration ``behaviour_kappa``
  (``inf``: none).  A perfect decoder gives ``chosen = goal``.
- An ambiguous decode (two candidates, typically ``psi`` and ``psi + 180`` near a horizontal field)
  is resolved by the bird at random, with equal probability, between the two candidates: the group
  then shows an axial (bimodal) distribution.  Group statistics are therefore reported both as
  directions (Rayleigh test, V-test toward the goal) and as axes (angle doubling,
  ``retina.readout.circstats``); ``preferred_analysis`` is "axial" when at least half of the
  decodes were ambiguous, else "directional".
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from retina.errors import InputError
from retina.readout import circstats
from retina.readout.decode import HeadingDecoder
from retina.signal.poisson import make_rng, sample_counts, sample_counts_split

__all__ = ["TrialResult", "simulate_trials"]


@dataclass(frozen=True)
class TrialResult:
    """One simulated experiment.

    Attributes
    ----------
    start_deg : ndarray, shape (n,)
        Heading each bird faced while reading the compass.
    decoded_deg : ndarray, shape (n,)
        The decoded heading it acted on (after resolving an ambiguity).
    ambiguous : ndarray of bool, shape (n,)
    chosen_deg : ndarray, shape (n,)
        Departure directions, degrees in [0, 360).
    goal_deg : float
    rayleigh, rayleigh_axial : circstats.RayleighResult
    v_test, v_test_axial : circstats.VTestResult
        Against the goal direction.
    circ_std_deg : float
        Circular standard deviation of the departure directions.
    preferred_analysis : {"directional", "axial"}
    """

    start_deg: np.ndarray
    decoded_deg: np.ndarray
    ambiguous: np.ndarray
    chosen_deg: np.ndarray
    goal_deg: float
    rayleigh: circstats.RayleighResult
    rayleigh_axial: circstats.RayleighResult
    v_test: circstats.VTestResult
    v_test_axial: circstats.VTestResult
    circ_std_deg: float
    preferred_analysis: str

    @property
    def ambiguous_fraction(self) -> float:
        """Fraction of the trials whose decode was ambiguous (0..1)."""
        return float(np.mean(self.ambiguous))

    @property
    def mean_deg(self) -> float:
        """Mean departure direction of the preferred analysis."""
        return (self.rayleigh_axial if self.preferred_analysis == "axial" else self.rayleigh).mean_deg


def simulate_trials(truth, decoder: HeadingDecoder, n_birds: int, *, goal_deg: float = 0.0,
                    behaviour_kappa: float = np.inf, start_deg=None, scan_offsets_deg=None,
                    rng=None, sampler: str = "walked") -> TrialResult:
    """Simulate one orientation experiment with ``n_birds`` virtual birds.

    Parameters
    ----------
    truth : retina.signal.noise.SignalModel
        The world the birds live in (counts are drawn from it; it may differ from the decoder's
        model, e.g. by a scene texture or a light level).
    decoder : HeadingDecoder
        Every bird's internal model.
    n_birds : int
    goal_deg : float
        Intended direction, degrees clockwise from north.
    behaviour_kappa : float
        Von Mises concentration of the behavioural noise (``inf``: none; 0: random choice).
    start_deg : array_like, shape (n_birds,), optional
        Starting headings; default uniformly random.
    scan_offsets_deg : array_like, shape (P,), optional
        Each bird scans its head through these yaw offsets (multiples of the decoder's grid step;
        the photon budget of ``truth`` is split over them) and decodes from all poses together.
    rng : numpy.random.Generator or int
        Source of the starting headings, counts, ambiguity coin flips and behavioural noise.
    sampler : {"walked", "direct"}
        How the Poisson counts are drawn (the same law either way): "walked"
        (``retina.signal.poisson.sample_counts_split``: dim rows by one walk along the row, faster)
        or "direct" (``sample_counts``: one draw per count).  Use "direct" to compare experiments
        that differ only slightly in their expected counts with common random numbers (the same
        ``rng`` seed): its counts change only where a cell's law changes enough, while a walk
        shifts every later cell of the row.

    Returns
    -------
    TrialResult
        Every bird's start, decoded heading and chosen direction, with the experiment's circular
        statistics (Rayleigh, V-test, axial analysis).

    Raises
    ------
    InputError
        Keys ``trials.n_trials``, ``trials.start_deg`` or ``sampler``.
    """
    if sampler not in ("walked", "direct"):
        raise InputError(f"expected sampler 'walked' or 'direct', got {sampler!r}", key="sampler")
    if int(n_birds) != n_birds or n_birds < 1:
        raise InputError(f"expected a positive number of birds, got {n_birds!r}", key="trials.n_trials")
    n = int(n_birds)
    g = make_rng(rng)
    if start_deg is None:
        start = g.uniform(0.0, 360.0, n)
    else:
        start = np.asarray(start_deg, dtype=float).ravel()
        if start.shape != (n,):
            raise InputError(f"expected {n} starting headings, got {start.shape}", key="trials.start_deg")
    threads = numba.get_num_threads()     # 1 inside a sweep's task (retina.sweep.run.single_threaded)

    def draw(lam):
        return sample_counts_split(lam, g, threads=threads) if sampler == "walked" else sample_counts(lam, g)

    if scan_offsets_deg is None:
        lam = truth.expected(start)                                   # (n, N)
        res = decoder.decode(draw(lam))
    else:
        off = np.atleast_1d(np.asarray(scan_offsets_deg, dtype=float))
        lam = truth.expected((start[:, None] + off[None, :]).ravel()).reshape(n, off.size, -1)
        res = decoder.decode_scan(draw(lam / off.size), off)
    decoded = res.heading_deg.copy()
    amb = res.ambiguous.copy()
    flip = amb & (g.random(n) < 0.5) & np.isfinite(res.second_deg)
    decoded[flip] = res.second_deg[flip]
    chosen = goal_deg + circstats.circular_difference(start, decoded)
    noise = circstats.von_mises_deg(0.0, behaviour_kappa, n, g)
    chosen = circstats.wrap360(chosen + noise)
    preferred = "axial" if np.mean(amb) >= 0.5 else "directional"
    return TrialResult(
        start_deg=start, decoded_deg=decoded, ambiguous=amb, chosen_deg=chosen,
        goal_deg=float(goal_deg) % 360.0,
        rayleigh=circstats.rayleigh_test(chosen),
        rayleigh_axial=circstats.rayleigh_test(chosen, axial=True),
        v_test=circstats.v_test(chosen, goal_deg),
        v_test_axial=circstats.v_test(chosen, goal_deg, axial=True),
        circ_std_deg=circstats.circular_std(chosen),
        preferred_analysis=preferred,
    )
