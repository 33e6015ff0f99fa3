"""Settings and the result type of the sampling method (:mod:`retina.spin.sampling`, whose docstring
derives the estimator, the control variate, the basis of the phases and the draw schedules).

Split out of :mod:`retina.spin.sampling`, which re-exports every name here, so callers and pickled
results (:class:`SampledYields`) keep working under either module.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from retina.spin import _propagation as _prop

__all__ = ["SampledYields", "DEFAULT_STATES", "DEFAULT_BIAS_TOL", "ESTIMATORS", "CONTROLS", "DEFAULT_CONTROL",
           "BASES", "DEFAULT_BASIS", "BASIS_NAMES", "DEFAULT_TAIL_SPLIT", "TAIL_STATES", "HALVING", "alive_counts",
           "schedule_levels", "schedule_variance", "DEFAULT_BLOCK_WIDTH", "CONTROL_NAMES",
           "DEFAULT_PRECISION", "PRECISIONS"]

#: Default number of random vectors per radical (independent draws).
DEFAULT_STATES = 16
#: Default bound on the deterministic (quadrature and truncation) error: a hundredth of the 1e-4
#: standard errors typical of large pairs, and stated with every result (``bias_bound``).
DEFAULT_BIAS_TOL = 1e-6


#: Estimators of :func:`sampled_yields` (module docstring).
ESTIMATORS = ("product", "paired")
#: Control variates of :func:`sampled_yields` (module docstring) and the default: the opposite
#: direction sampled with the same random vectors.
CONTROLS = ("opposite", "none")
DEFAULT_CONTROL = "opposite"
#: Bases of the random phases (module docstring) and the default.
BASES = _prop.BASES
DEFAULT_BASIS = "nucleus-axis"
#: Names of the bases in provenance and summaries.
BASIS_NAMES = {"lab": "random phases in the laboratory basis",
               "nucleus-axis": "random phases with each nucleus quantised along its dominant hyperfine axis"}
#: The halving schedule of the draws (module docstring of :mod:`retina.spin.sampling`): the number of
#: draws still propagated halves every ``HALVING_STRETCH ln 2`` lifetimes from about
#: ``HALVING_DELAY`` on, down to :data:`TAIL_STATES`.
HALVING = "halving"
#: Draw schedule by default (``tail_split`` of :func:`retina.spin.sampling.sampled_yields`):
#: :data:`HALVING`; a number of lifetimes is the two-stratum split tail (beyond it only
#: ``TAIL_STATES`` draws per radical go on), ``None`` propagates every draw to the end.
DEFAULT_TAIL_SPLIT = HALVING
#: Draws per radical propagated to the end of the time grid under a split tail or the halving
#: schedule (at least 2: every stratum needs a sample variance).
TAIL_STATES = 2
#: Fields propagated together by default (:func:`retina.spin.sampling.sampled_yields`, ``block_width``):
#: two directions with their opposites, 64 vectors for radical B at 4 + 8 states.  Measured in
#: ``benchmarks/bench_spin_fused.py`` (axial pairs, 4 + 8 states, one process, load 1.2-2.0): 1.49x,
#: 1.50x and 1.53x against field by field at 12, 16 and 20 nuclei (8 fields: 1.59x and 1.78x at 12
#: and 16; at 20 nuclei the benchmark's two directions are only 4 fields).  At dimension 4608 the
#: fused kernel's time per entry and vector, relative to 8 vectors, was 0.74, 0.57, 0.63 and 0.71
#: at 16, 32, 64 and 128 vectors (one run, load 2.2: cache-limited beyond 32), so wider blocks
#: would gain little there and cost memory in proportion.
DEFAULT_BLOCK_WIDTH = 4
#: Real type of the propagated states by default (:func:`retina.spin.sampling.sampled_yields`,
#: ``precision``): complex64 states and float32 matrices, with every sum (Gram matrices, time
#: integrals, jackknife) in double.  Measured in ``benchmarks/bench_spin_fused.py --single 4``
#: (axial pairs, 4 + 8 states, load 1.9-2.1): 1.39x, 1.33x and 1.45x faster than double at 12, 16
#: and 20 nuclei, with a difference from double on the same draws of at most 3.4e-9 in the yields
#: and 1.0e-9 in the anisotropy: far below the bias bound (1e-6) and the standard errors (1e-4).
DEFAULT_PRECISION = "single"
#: Real types of the propagated states (:func:`retina.spin.sampling.sampled_yields`, ``precision``).
PRECISIONS = {"double": np.float64, "single": np.float32}
#: Names of the controls in provenance and summaries.
CONTROL_NAMES = {"opposite": "opposite-direction control variate (b and -b averaged, same states)",
                 "none": "no control variate"}


@dataclass(frozen=True)
class SampledYields:
    """Singlet-start singlet yields estimated by sampling.

    Attributes
    ----------
    mean : ndarray (N,)
        The estimate for each direction.
    standard_error : ndarray (N,)
        Its standard error per direction (``standard_error_of`` a unit weight).
    parts : tuple of ndarray (n_k, N)
        Independent per-draw terms whose sample variances over their ``n_k`` rows, each divided by
        ``n_k``, add up to the estimate's variance (``"paired"``: the per-draw estimates;
        ``"product"``: the jackknife terms of radical A and of radical B; under a draw schedule each of
        these by strata, the draws that stopped at the same time, module docstring).  The same random vectors serve every direction, so
        any linear combination ``c`` over directions has standard error
        ``sqrt(sum_k var(parts_k @ c) / n_k)``.
    bias_bound : float
        Bound on the deterministic error (quadrature and truncation) of every value.
    estimator : str
        ``"product"`` or ``"paired"`` (module docstring).
    n_states : int
        Random vectors per radical (the larger count when they differ).
    control : str
        The control variate, one of :data:`CONTROLS` (module docstring).
    plain_parts : tuple of ndarray (n_k, N)
        With a control, the per-draw terms of the estimate without it (the field ``b`` alone, from
        the same draws), so that the control's variance reduction is measured in every run
        (:meth:`variance_reduction`); empty without a control.
    states : tuple of int
        Random vectors of radical A and of radical B.
    basis : str
        The basis of the random phases, one of :data:`BASES` (module docstring).
    tail_split : str, float or None
        The draw schedule: :data:`HALVING`, lifetimes after which only :data:`TAIL_STATES` draws
        per radical went on, or ``None`` (every draw to the end).
    parts_a : int
        How many of the leading ``parts`` (and ``plain_parts``) are radical A's (product
        estimator: one per stratum of A's draws, draws that stopped at the same time; the rest are
        B's).
    precision : str
        Real type the states were propagated in (``"double"`` or ``"single"``).
    """

    mean: np.ndarray
    standard_error: np.ndarray
    parts: tuple
    bias_bound: float
    estimator: str = "product"
    n_states: int = 0
    control: str = "none"
    plain_parts: tuple = ()
    states: tuple = ()
    basis: str = "lab"
    tail_split: str | float | None = None
    parts_a: int = 1
    precision: str = "double"

    @staticmethod
    def _variance(parts, weights) -> float:
        w = np.asarray(weights, dtype=float)
        var = 0.0
        for part in parts:
            v = part @ w
            var += float(np.var(v, ddof=1)) / v.shape[0]
        return var

    def standard_error_of(self, weights) -> float:
        """Standard error of ``sum_i weights_i Phi_i`` (for example a difference of directions).

        Parameters
        ----------
        weights : array_like (N,)
            One weight per direction of this result (``+1, -1`` for the difference of two).

        Returns
        -------
        float
            The standard error from the spread of the independent per-draw terms (their sample
            variance over the draws divided by the number of draws, summed over the parts), after
            the control variate when one was used.
        """
        return math.sqrt(self._variance(self.parts, weights))

    def radical_variances(self, weights=None):
        """The product estimator's two variance terms, of radical A's draws and of radical B's
        (their sum is the squared standard error), per direction or for ``sum_i weights_i Phi_i``.

        Parameters
        ----------
        weights : array_like (N,), optional
            A linear combination of the directions (default: every direction apart).

        Returns
        -------
        (ndarray (N,) or float, ndarray (N,) or float)
        """
        if self.estimator != "product":
            raise ValueError("the variance splits by radical only for the product estimator")
        half = self.parts_a
        out = []
        for parts in (self.parts[:half], self.parts[half:]):
            if weights is None:
                out.append(sum(np.var(p, axis=0, ddof=1) / p.shape[0] for p in parts))
            else:
                out.append(self._variance(parts, weights))
        return out[0], out[1]

    def variance_reduction(self, weights) -> float:
        """The control's variance reduction for ``sum_i weights_i Phi_i``: the variance without
        the control over the variance with it, both estimated from the same draws (``nan`` without
        a control).

        Parameters
        ----------
        weights : array_like (N,)

        Returns
        -------
        float
        """
        if not self.plain_parts:
            return float("nan")
        with_control = self._variance(self.parts, weights)
        return self._variance(self.plain_parts, weights) / with_control if with_control > 0 else float("inf")



def _states_pair(n_states) -> tuple:
    """``(R_A, R_B)`` from an int (both radicals) or a pair."""
    if isinstance(n_states, (tuple, list, np.ndarray)):
        return int(n_states[0]), int(n_states[1])
    return int(n_states), int(n_states)


def _states_words(states) -> str:
    """``"16 random states per radical"`` or ``"4 + 8 random states (radicals A, B)"``."""
    a, b = _states_pair(states)
    return f"{a} random states per radical" if a == b else f"{a} + {b} random states (radicals A, B)"


def _tail_words(tail_split) -> str:
    """The draw schedule in words (empty when every draw runs to the end)."""
    if tail_split is None:
        return ""
    if tail_split == HALVING:
        return (f" (draws stop in halves: the number still propagated halves every "
                f"{HALVING_STRETCH * math.log(2):.2f} lifetimes from {HALVING_DELAY + HALVING_STRETCH * math.log(2) / 2:.2f}"
                f" on, down to {TAIL_STATES} per radical)")
    return f" (beyond {float(tail_split):g} lifetimes only {TAIL_STATES} states per radical go on)"


def check_tail_split(tail_split):
    """``tail_split`` if it is a draw schedule (:data:`HALVING`, a positive number of lifetimes or
    ``None``), else :class:`retina.errors.InputError` naming the setting.

    Parameters
    ----------
    tail_split : object
        The setting as given.

    Returns
    -------
    str, float or None
        The schedule (a number as a float).
    """
    from retina.errors import InputError

    if tail_split is None or (isinstance(tail_split, str) and tail_split == HALVING):
        return tail_split
    if (isinstance(tail_split, (int, float, np.floating)) and not isinstance(tail_split, bool)
            and np.isfinite(tail_split) and tail_split > 0):
        return float(tail_split)
    raise InputError(f"expected {HALVING!r}, a positive number of lifetimes or None for the draw schedule, "
                     f"got {tail_split!r}", key="tail_split")


#: The halving schedule's constants (module docstring of :mod:`retina.spin.sampling`): the count
#: falls from ``n_l`` to ``n_{l+1}`` at ``kT = HALVING_DELAY + HALVING_STRETCH ln(R / sqrt(n_l
#: n_{l+1}))`` lifetimes; they minimise variance times cost under the random-walk noise model
#: (:func:`schedule_variance`) for 100-1000 draws.
HALVING_DELAY, HALVING_STRETCH = 1.0, 1.25


def schedule_levels(r: int, tail_split, delay: float = None, stretch: float = None) -> list:
    """The draw schedule of a radical with ``r`` draws as levels ``[(n_0, 0.0), (n_1, kT_1), ...]``:
    from lifetime ``kT_l`` on only the first ``n_l`` draws are propagated (module docstring of
    :mod:`retina.spin.sampling`, halving schedule).

    ``None``: one level.  A number ``T_s`` of lifetimes: ``[(r, 0), (TAIL_STATES, T_s)]`` when both
    strata keep at least 2 draws, else one level.  :data:`HALVING`: ``n_{l+1} = max(TAIL_STATES,
    n_l // 2)``, or ``TAIL_STATES`` when that level could not split again (``n_{l+1} -
    TAIL_STATES < 2``: 6 draws go on as 2, not 3), while each level stops at least 2 draws; so the
    last level holds ``TAIL_STATES`` draws (unless ``r = 3``), and the count falls from ``n_l`` to
    ``n_{l+1}`` at ``kT = delay + stretch ln(r / sqrt(n_l n_{l+1}))``
    (:data:`HALVING_DELAY`, :data:`HALVING_STRETCH` by default).

    Parameters
    ----------
    r : int
        The radical's draws.
    tail_split : str, float or None
        The schedule (:func:`check_tail_split`).
    delay, stretch : float, optional
        The halving schedule's constants (default :data:`HALVING_DELAY`, :data:`HALVING_STRETCH`).

    Returns
    -------
    list of (int, float)
    """
    r = int(r)
    if tail_split is None:
        return [(r, 0.0)]
    if tail_split == HALVING:
        delay = HALVING_DELAY if delay is None else float(delay)
        stretch = HALVING_STRETCH if stretch is None else float(stretch)
        counts = [r]
        while True:
            nxt = max(TAIL_STATES, counts[-1] // 2)
            if nxt - TAIL_STATES < 2:
                nxt = TAIL_STATES           # a level that could not split again: straight to the last
            if counts[-1] - nxt < 2:
                break
            counts.append(nxt)
        return [(counts[0], 0.0)] + [(b, delay + stretch * math.log(r / math.sqrt(a * b)))
                                     for a, b in zip(counts, counts[1:])]
    if r - TAIL_STATES >= 2 and TAIL_STATES >= 2:
        return [(r, 0.0), (TAIL_STATES, float(tail_split))]
    return [(r, 0.0)]


def alive_counts(r: int, n_t: int, kh: float, n_min: int, tail_split) -> np.ndarray:
    """Draws propagated at each grid time ``t_j = j h`` (``(n_t,)`` int, non-increasing): the levels
    of :func:`schedule_levels` on the grid, each switch on the first grid time at or after its
    lifetime ``kT_l`` and not before ``n_min`` (the end correction's samples).

    Parameters
    ----------
    r : int
        The radical's draws.
    n_t : int
        Grid times.
    kh : float
        The time step in lifetimes.
    n_min : int
        First grid time at which a draw may stop.
    tail_split : str, float or None
        The schedule (:func:`check_tail_split`).

    Returns
    -------
    ndarray (n_t,) int
    """
    alive = np.full(int(n_t), int(r), dtype=np.int64)
    for count, kt in schedule_levels(r, tail_split)[1:]:
        j = min(int(n_t), max(int(math.ceil(kt / kh - 1e-9)), int(n_min)))
        alive[j:] = count
    return alive


def _walk_covariance(edges) -> np.ndarray:
    """``K[l, l']``: covariance of one draw's error integrated over the lifetimes ``[edges[l],
    edges[l + 1])`` and ``[edges[l'], edges[l' + 1])`` under the random-walk model (module docstring
    of :mod:`retina.spin.sampling`): integrand error ``e^{-t} W(t)``, ``W`` a Wiener process, so
    ``Cov = 2 int int e^{-t - t'} min(t, t')`` (normalised so that the whole integral's variance
    is 1) ``= 2 int_0^inf g_l(u) g_l'(u) du`` with ``g_l(u) = int_{[edges_l, edges_{l+1}) > u}
    e^{-t} dt`` (derived: ``min(t, t') = int_0^inf [u < t] [u < t'] du``), by the trapezoid rule
    on a fine grid of ``u`` (20,001 points over 40 lifetimes)."""
    lo = np.asarray(edges[:-1], dtype=float)
    hi = np.asarray(edges[1:], dtype=float)
    u = np.linspace(0.0, 40.0, 20001)[:, None]
    g = np.clip(np.exp(-np.maximum(u, lo)) - np.exp(-np.maximum(u, hi)), 0.0, None)
    return 2.0 * np.trapezoid(g[:, :, None] * g[:, None, :], u[:, 0], axis=0)


def schedule_variance(r: int, tail_split, delay: float = None, stretch: float = None) -> float:
    """The variance of a radical's mean under its draw schedule in units of one draw's variance
    when every draw runs to the end (``1 / r`` without a schedule), under the random-walk model of
    the noise (module docstring of :mod:`retina.spin.sampling`: one draw's error of the integrand
    grows as a random walk under the kernel, ``e^{-kt} W(t)``, which gives a tail variance
    fraction ``(1 + 2kT) e^{-2kT}`` from ``T`` on, as measured on the axial 20-nucleus pair):
    ``sum_{l, l'} K_{l l'} / max(n_l, n_l')`` over the levels (derived: two levels' means share
    the ``min(n_l, n_l')`` draws that run through both; :func:`_walk_covariance`).  A model, for
    choosing counts and projecting costs; the error bars come from the draws.

    Parameters
    ----------
    r : int
        The radical's draws.
    tail_split : str, float or None
        The schedule.
    delay, stretch : float, optional
        The halving schedule's constants (:func:`schedule_levels`).

    Returns
    -------
    float
    """
    levels = schedule_levels(r, tail_split, delay, stretch)
    counts = np.array([n for n, _ in levels], dtype=float)
    edges = [kt for _, kt in levels] + [np.inf]
    k = _walk_covariance(edges)
    return float(np.sum(k / np.maximum(counts[:, None], counts[None, :])))
