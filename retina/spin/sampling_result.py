"""Settings and the result type of the sampling method (:mod:`retina.spin.sampling`, whose docstring
derives the estimator, the control variate, the basis of the phases and the split tail).

Split out of :mod:`retina.spin.sampling`, which re-exports every name here, so callers and pickled
results (:class:`SampledYields`) keep working under either module.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from retina.spin import _propagation as _prop

__all__ = ["SampledYields", "DEFAULT_STATES", "DEFAULT_BIAS_TOL", "ESTIMATORS", "CONTROLS", "DEFAULT_CONTROL",
           "BASES", "DEFAULT_BASIS", "BASIS_NAMES", "DEFAULT_TAIL_SPLIT", "TAIL_STATES", "DEFAULT_BLOCK_WIDTH", "CONTROL_NAMES",
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
#: Split tail (module docstring): beyond ``DEFAULT_TAIL_SPLIT`` lifetimes only ``TAIL_STATES``
#: draws per radical are propagated on.
DEFAULT_TAIL_SPLIT = 3.0
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
        ``"product"``: the jackknife terms of radical A and of radical B; with a split tail each of
        these as two strata, module docstring).  The same random vectors serve every direction, so
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
    tail_split : float or None
        Lifetimes after which only :data:`TAIL_STATES` draws per radical went on (``None``: all).
    parts_a : int
        How many of the leading ``parts`` (and ``plain_parts``) are radical A's (product
        estimator: 2 with a split tail, else 1; the rest are B's).
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
    tail_split: float | None = None
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
    """The split tail in words (empty without one)."""
    if tail_split is None:
        return ""
    return f" (beyond {float(tail_split):g} lifetimes only {TAIL_STATES} states per radical go on)"

