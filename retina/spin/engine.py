"""Method choice, cost estimate and batched yields over field directions.

Methods (all exact for their scope):

- ``"separable"`` (:mod:`retina.spin.separable`): no electron-electron coupling, equal rates, no
  relaxation.  Two radical-sized eigenproblems and a pair sum of ``d_A^2 d_B^2 / 2`` terms per
  direction: cheapest for small radicals.
- ``"fast-separable"`` (:mod:`retina.spin.fast_separable`): the same scope and quantity to an
  absolute tolerance (default 1e-10, bound stated and checked) through each radical's correlation
  functions on a time grid; its cost is set by the two eigendecompositions, so it takes over from
  ``"separable"`` as the radicals grow.  ``RETINA_JOBS`` (environment) sets its worker processes.
- ``"sampled"`` (:mod:`retina.spin.sampling`): the separable scope, by stochastic trace estimation
  with random vectors propagated in time: **an approximation with error bars**.  ``"auto"`` chooses
  it only when an ``accuracy`` (a standard error per yield the caller accepts) is given and its
  modelled time is below that of every exact method; it then runs with as many random states as
  a pilot run says the accuracy needs, one count per radical where the variance and the cost
  per state are (:func:`retina.spin.sampling.states_for`), in
  ``RETINA_JOBS`` worker processes over directions.  It samples each direction and its opposite
  with the same random vectors and averages them (a control variate whose expectation is exactly
  zero), draws the random phases with each nucleus quantised along its dominant hyperfine axis,
  and stops the states in halves over time (the halving schedule: all to about 1.4 lifetimes,
  then half of those left every 0.87, two per radical to the end): the pilot, the estimate and
  the method choice all count these (the cost model follows the schedule and the doubled
  propagation), and the provenance names them.  An exact
  estimate of more than an hour names it when it is faster.
- ``"hilbert"`` (:mod:`retina.spin.hilbert`): equal rates, no relaxation.  One (d, d) ``eigh``.
- ``"liouville"`` (:mod:`retina.spin.liouville`): everything else (unequal rates, relaxation).
  Without relaxation it diagonalises the (d, d) effective Hamiltonian; with relaxation it runs a
  Sylvester-preconditioned GMRES (O(d^2) memory); only when a rate is zero does it factorise the
  (d^2, d^2) Liouvillian, whose LU fill-in grows as about ``0.7 d^4`` entries.

:func:`estimate_cost` uses a flop model whose one constant (seconds per ``d^3`` of a complex
Hermitian ``eigh``) is measured once per process on a small matrix, so estimates follow the machine.
:func:`compute_yields` refuses with :class:`retina.errors.ResourceError` before allocating when the
estimated memory exceeds ``max_bytes`` (default: 60 % of ``MemAvailable`` in ``/proc/meminfo``).
"""

from __future__ import annotations

import functools
import logging
import math
import time
from dataclasses import dataclass

import numpy as np

from retina.errors import InputError, ResourceError
from retina.spin import memory
from retina.spin._spectral import spread_bound
from retina.spin.memory import available_bytes  # noqa: F401  (public here too: engine.available_bytes)

__all__ = ["Cost", "METHODS", "choose_method", "estimate_cost", "compute_yields", "available_bytes"]

METHODS = ("separable", "fast-separable", "hilbert", "liouville", "sampled")
#: Methods whose scope is a pair with uncoupled electrons, equal rates and no relaxation.
SEPARABLE_METHODS = ("separable", "fast-separable", "sampled")
#: Exact methods (``"auto"`` chooses among these).
EXACT_METHODS = ("separable", "fast-separable", "hilbert", "liouville")
_GIB = 2**30
_log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Cost:
    """An estimate of one yield computation.

    Attributes
    ----------
    seconds : float
        Expected wall time on this machine (order of magnitude; the flop model is calibrated once).
    bytes : int
        Expected peak working memory, bytes.
    method : str
        The method the estimate is for.
    note : str
        What dominates, in words.
    """

    seconds: float
    bytes: int
    method: str
    note: str = ""


def _separable_available() -> bool:
    try:
        import retina.spin.separable  # noqa: F401
    except ImportError:
        return False
    return True


def in_scope(system, method: str) -> bool:
    """True when ``method`` covers ``system`` (see the module docstring for each scope).

    Parameters
    ----------
    system : SpinSystem
        The pair.
    method : str
        One of :data:`METHODS`.

    Returns
    -------
    bool
    """
    plain = system.equal_rates and not system.relaxation.any
    if method in SEPARABLE_METHODS:
        return plain and not system.electron_coupled
    if method == "hilbert":
        return plain
    return method == "liouville"


#: Fixed constants of the separable choice (s per d^3 of eigh, per pair-sum term, per time sample),
#: measured on the development machine; fixed so that the choice, part of the cache key, never
#: depends on the machine's load.
_CHOICE_EIGH, _CHOICE_PAIR, _CHOICE_SAMPLE = 7e-10, 4e-9, 8e-7


def _fast_is_cheaper(system) -> bool:
    """Deterministic per-direction comparison of the two separable methods' cost models."""
    from retina.spin.equivalence import reduced_dimensions
    from retina.spin.fast_separable import MAX_KH, THETA

    dims = [r.dimension for r in system.radicals]
    pair = _CHOICE_PAIR * dims[0] ** 2 * dims[1] ** 2 / 2
    blocks = [d for r in system.radicals for d, _ in reduced_dimensions(r)]
    w_tot = sum(spread_bound(r, 50.0) for r in system.radicals)
    k = float(system.k_singlet)
    n_t = 28.0 / (k * min(THETA * np.pi / max(w_tot, 1e-30), MAX_KH / k))
    fast = sum(1.1 * _CHOICE_EIGH * d**3 + 3.3e-7 * d * d / 2 for d in blocks) + _CHOICE_SAMPLE * n_t
    return fast < pair


def _fixed_separable_seconds(system) -> float:
    """Modelled seconds per direction of the cheaper exact separable method (fixed constants)."""
    from retina.spin.equivalence import reduced_dimensions
    from retina.spin.fast_separable import MAX_KH, THETA

    dims = [r.dimension for r in system.radicals]
    pair = _CHOICE_PAIR * dims[0] ** 2 * dims[1] ** 2 / 2
    blocks = [d for r in system.radicals for d, _ in reduced_dimensions(r)]
    w_tot = sum(spread_bound(r, 50.0) for r in system.radicals)
    k = float(system.k_singlet)
    n_t = 28.0 / (k * min(THETA * np.pi / max(w_tot, 1e-30), MAX_KH / k))
    fast = sum(1.1 * _CHOICE_EIGH * d**3 + 3.3e-7 * d * d / 2 for d in blocks) + _CHOICE_SAMPLE * n_t
    return min(pair, fast)


def _check_accuracy(accuracy):
    if accuracy is None:
        return None
    try:
        a = float(accuracy)
    except (TypeError, ValueError):
        a = float("nan")
    if not (math.isfinite(a) and 0 < a < 1):
        raise InputError(f"expected an accuracy (standard error per yield) between 0 and 1, got {accuracy!r}",
                         key="accuracy")
    return a


def choose_method(system, n_directions: int = 1, accuracy: float | None = None) -> str:
    """The cheapest method whose scope covers ``system`` and that meets ``accuracy``.

    Without ``accuracy`` only exact methods count: among ``"separable"`` and ``"fast-separable"``
    (uncoupled electrons, equal rates, no relaxation, and :mod:`retina.spin.separable` imports)
    the one with the smaller modelled time per direction (fixed constants, so that the choice,
    which is part of the cache key, never depends on the machine's load); else ``"hilbert"`` when
    the rates are equal and there is no relaxation; ``"liouville"`` otherwise.  Every one meets
    the default accuracy (rounding, or 1e-10 for ``"fast-separable"``).

    With ``accuracy`` (a standard error per yield the caller accepts, between 0 and 1) the
    approximate ``"sampled"`` method competes too, in the separable scope, when its modelled time
    (:func:`retina.spin.sampling.cost_model`, fixed constants, default number of states and
    control variate) is below
    the exact separable methods'; its run then sizes its states to meet ``accuracy``.

    Parameters
    ----------
    system : SpinSystem
        The pair.
    n_directions : int
        Number of field directions (kept for the interface; the choice is per direction).
    accuracy : float, optional
        Standard error per yield the caller accepts.

    Returns
    -------
    str
        The method's name.
    """
    accuracy = _check_accuracy(accuracy)
    if system.equal_rates and not system.relaxation.any:
        if not system.electron_coupled and _separable_available():
            if accuracy is not None:
                from retina.spin import sampling

                if sampling.cost_model(system, 1)[0] < _fixed_separable_seconds(system):
                    return "sampled"
            return "fast-separable" if _fast_is_cheaper(system) else "separable"
        return "hilbert"
    return "liouville"


@functools.lru_cache(maxsize=None)
def _eigh_constant() -> float:
    """Seconds per d^3 of a complex Hermitian eigh (values and vectors), measured once (d = 96)."""
    rng = np.random.default_rng(0)
    d = 96
    a = rng.standard_normal((d, d)) + 1j * rng.standard_normal((d, d))
    a = a + a.conj().T
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        np.linalg.eigh(a)
        best = min(best, time.perf_counter() - t0)
    return best / d**3


#: Largest Hilbert dimension the time model is evaluated for; beyond it the estimate is infinite time
#: and the exact byte count of the Hamiltonian (so the memory guard refuses; no float overflow).
MAX_ESTIMATED_DIMENSION = 2**32

#: Fixed Python and LAPACK-call overhead per direction, seconds (measured on small pairs, d = 16).
_PER_DIRECTION = 3e-5


def _t_eigh(d: int) -> float:
    return max(_eigh_constant() * d**3, 2e-6)


def _check_method(method: str) -> str:
    if method not in METHODS:
        raise InputError(f"expected a method among {', '.join(('auto',) + METHODS)}, got {method!r}", key="method")
    return method


def _jobs() -> int:
    """Worker processes of the fast separable method: ``RETINA_JOBS`` (default 1)."""
    import os

    raw = os.environ.get("RETINA_JOBS", "1").strip() or "1"
    try:
        n = int(raw)
    except ValueError:
        raise InputError(f"expected a positive whole number of worker processes, got {raw!r}",
                         key="RETINA_JOBS") from None
    if n < 1:
        raise InputError(f"expected a positive whole number of worker processes, got {raw!r}", key="RETINA_JOBS")
    return n


def _jobs_speedup() -> float:
    import os

    return float(min(_jobs(), os.cpu_count() or 1))


def estimate_cost(system, n_directions: int, method: str = "auto", accuracy: float | None = None) -> Cost:
    """Estimate the time and memory of ``compute_yields`` for ``n_directions`` directions.

    When the estimate exceeds an hour, the note names a faster method in scope, if there is one.

    Parameters
    ----------
    system : SpinSystem
    n_directions : int
    method : str
        ``"auto"`` or one of :data:`METHODS`.
    accuracy : float, optional
        Standard error per yield the caller accepts (lets ``"auto"`` choose ``"sampled"``).

    Returns
    -------
    Cost
    """
    if method == "auto":
        method = choose_method(system, n_directions, accuracy)
    cost = _estimate(system, n_directions, _check_method(method))
    if cost.seconds > 3600:
        others = [(m, _estimate(system, n_directions, m)) for m in METHODS if m != method and in_scope(system, m)]
        faster = [(m, c) for m, c in others if c.seconds < 0.5 * cost.seconds]
        if faster:
            m, c = min(faster, key=lambda mc: mc[1].seconds)
            kind = "approximately (error bars from sampling)" if m == "sampled" else "exactly"
            cost = Cost(cost.seconds, cost.bytes, cost.method,
                        f"{cost.note}; method={m!r} covers this pair {kind} in about {_fmt_duration(c.seconds)}")
    return cost


def _fmt_duration(s: float) -> str:
    if s < 120:
        return f"{s:.3g} s"
    if s < 7200:
        return f"{s / 60:.3g} min"
    return f"{s / 3600:.3g} h"


def _estimate(system, n_directions: int, method: str) -> Cost:
    from retina.spin.hilbert import chunk_size

    n = max(int(n_directions), 0)
    d = int(system.dimension)  # an exact Python integer (no 64-bit wrap)
    if d > MAX_ESTIMATED_DIMENSION:
        # beyond any machine: exact bytes of the Hamiltonian alone, no float time model (it would overflow)
        return Cost(float("inf"), 6 * 16 * d * d, method,
                    "a Hilbert space beyond the largest dimension this engine estimates (2^32)")
    base = 6 * 16 * d * d  # Hamiltonian parts and projectors
    if method == "hilbert":
        per = 4 * 16 * d * d
        batch = min(max(n, 1), chunk_size(d))
        from retina.spin.hilbert import TRIDIAGONAL_FROM

        # the tridiagonal path skips the back-transformation: measured at ~0.65 of a full eigh
        seconds = n * ((0.65 if d >= TRIDIAGONAL_FROM else 1.25) * _t_eigh(d) + _PER_DIRECTION)
        return Cost(seconds, int(base + batch * per), method,
                    f"{n} Hermitian eigendecompositions of size {d}")
    if method == "fast-separable":
        from retina.spin import fast_separable

        from retina.spin.equivalence import reduced_dimensions

        dims = [r.dimension for r in system.radicals]
        blocks = [d for r in system.radicals for d, _ in reduced_dimensions(r)]
        # per block: eigh (evr driver, ~0.8 of the calibrated heevd) + two half-size products
        # (~0.3) + the numba pass over d^2/2 pairs (3.3e-7 s each, measured at d = 576)
        # + the time grid: ~8e-7 s per sample for spreading-grid set-up, FFTs and series of both
        # radicals (measured at 2e4-3e4 samples), n_t ~ 28 W / (0.9 pi k) (fast_separable.plan)
        w_tot = sum(spread_bound(r, 50.0) for r in system.radicals)
        k = float(system.k_singlet)
        n_t = 28.0 / (k * min(fast_separable.THETA * np.pi / max(w_tot, 1e-30), fast_separable.MAX_KH / k))
        per = (sum(1.1 * _t_eigh(d) + 3.3e-7 * d * d / 2 + 2e-5 for d in blocks) + 8e-7 * n_t
               + _PER_DIRECTION)
        return Cost(n * per / _jobs_speedup(), fast_separable.working_bytes(system) * _jobs(), method,
                    f"{n} x {len(blocks)} eigendecompositions of sizes up to {max(blocks)} (radicals "
                    f"{dims[0]} and {dims[1]}) and correlation functions on a time grid (absolute error "
                    f"<= {fast_separable.DEFAULT_TOL:g})")
    if method == "sampled":
        from retina.spin import sampling

        # worker processes over directions (RETINA_JOBS), each with its own working memory
        secs, mem, note = sampling.cost_model(system, n, measured=True)
        return Cost(secs / _jobs_speedup(), mem * _jobs(), method, note)
    if method == "separable":
        da, db = system.radicals[0].dimension, system.radicals[1].dimension
        pair_terms = da * da * db * db / 2.0
        seconds = n * (_t_eigh(da) + _t_eigh(db) + 4e-9 * pair_terms + _PER_DIRECTION)
        from retina.spin.separable import working_bytes

        # the method batches directions within its own budget; 25 % headroom over its model
        mem = 1.25 * working_bytes(system, n)
        return Cost(seconds, int(mem), method,
                    f"{n} x 2 eigendecompositions of sizes {da} and {db} and {int(pair_terms)} pair terms")
    # liouville
    from retina.spin.liouville import solver_for

    solver = solver_for(system)
    if solver == "eig":
        per = 12 * 16 * d * d
        batch = min(max(n, 1), max(1, chunk_size(d) // 2))
        seconds = n * 8.0 * _t_eigh(d)
        return Cost(seconds, int(base + batch * per), method,
                    f"{n} non-Hermitian eigendecompositions of size {d} (effective Hamiltonian)")
    if solver == "krylov":
        from retina.spin.liouville import _KRYLOV_MAXITER

        # one non-Hermitian eig + inverse, then ~30 GMRES steps of 4 dense (d, d) products each;
        # the GMRES allocates its whole basis (maxiter + 1 vectors of length d^2) up front, plus
        # the dense relaxation stacks and their batched products (up to 4 x 7 (d, d)) and ~40
        # (d, d) temporaries (eigenvectors, inverses, Sylvester and residual products)
        per_dir = 8.0 * _t_eigh(d) + 30 * 4 * 0.1 * _t_eigh(d) + 1e-3
        mem = base + 16 * d * d * (_KRYLOV_MAXITER + 1 + 28 + 40)
        return Cost(n * per_dir, int(mem), method,
                    f"{n} Sylvester-preconditioned GMRES solves in a Liouville space of size {d * d}")
    dd = d * d
    fill = 0.75 * dd * dd  # measured LU fill-in of the Liouvillian, entries
    mem = 24 * fill + 20 * 40 * dd + base
    # LU work grows as d^6 here; the factor 0.04 (relative to the eigh constant) was measured at d = 32
    seconds = n * (0.04 * _eigh_constant() * d**6 + 1e-3) + 0.02  # plus the Liouvillian assembly
    return Cost(seconds, int(mem), method,
                f"{n} sparse LU factorisations of the {dd} x {dd} Liouvillian")


def _resource_hint(system, method: str) -> str:
    """What the user can change when ``method`` would not fit in memory."""
    raise_limit = "raise the memory limit (max_bytes, or --max-memory-gb on the command line)"
    if method not in SEPARABLE_METHODS and in_scope(system, "separable") and _separable_available():
        return ("method='separable' or method='fast-separable' (method='auto' picks the cheaper) covers this "
                f"pair at a far smaller cost; or use fewer nuclei, or {raise_limit}")
    if method == "separable":
        return (f"method='fast-separable' covers this pair with radical-sized memory; or use fewer nuclei, "
                f"or {raise_limit}")
    if method == "liouville":
        from retina.spin.liouville import solver_for

        if solver_for(system) == "sparse":
            return ("a zero recombination rate forces a sparse LU factorisation of the Liouvillian: give both "
                    f"rates > 0 (then it is not needed), use fewer nuclei, or {raise_limit}")
        if system.equal_rates and not system.relaxation.any:
            return f"method='hilbert' needs less memory for equal rates; or use fewer nuclei, or {raise_limit}"
    return f"use fewer nuclei, or {raise_limit}"


def _fmt_gib(b: float) -> str:
    try:
        return f"{b / _GIB:.3g} GiB"
    except OverflowError:  # an exact integer beyond the float range
        return f"10^{int(math.log10(b)) - 9} GiB"


def compute_yields(system, field_uT, directions, *, method="auto", progress=None, max_bytes=None,
                   info: dict | None = None, accuracy: float | None = None) -> np.ndarray:
    """The system's reported yield for each field direction.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
        Field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised).
    method : {"auto", "separable", "fast-separable", "hilbert", "liouville", "sampled"}
    progress : callable(done, total), optional
    max_bytes : int, optional
        Memory bound; default 60 % of the available memory.
    info : dict, optional
        Filled with what a method reports: ``"fast-separable"`` its largest stated error bound
        (``method_error_bound_max``); ``"sampled"`` the approximation's name, the number of random
        states, the largest standard error and the bias bound.
    accuracy : float, optional
        Standard error per yield the caller accepts: ``"auto"`` may then choose ``"sampled"``
        (:func:`choose_method`), and ``"sampled"`` sizes its number of random states by a pilot
        run to meet it (else it uses :data:`retina.spin.sampling.DEFAULT_STATES`).

    Returns
    -------
    ndarray, shape (N,)
        Dimensionless yields.

    Raises
    ------
    ResourceError
        When the estimate exceeds ``max_bytes`` (nothing is allocated).
    InputError
        Unknown method, or a system outside the method's scope.
    """
    dirs = np.asarray(directions, dtype=float)
    n = dirs.shape[0] if dirs.ndim == 2 else 1
    accuracy = _check_accuracy(accuracy)
    if method == "auto":
        method = choose_method(system, n, accuracy)
    _check_method(method)
    if method in SEPARABLE_METHODS and not _separable_available():
        method = "hilbert"
    limit = int(0.6 * memory.available_bytes()) if max_bytes is None else int(max_bytes)
    cost = estimate_cost(system, n, method)
    _log.debug("%r: method %s, %d directions, estimated %.3g s and %s (limit %s)", system.name, method, n,
               cost.seconds, _fmt_gib(cost.bytes), _fmt_gib(limit))
    if cost.bytes > limit:
        hint = _resource_hint(system, method)
        raise ResourceError(
            f"{system.name!r} (Hilbert dimension {system.dimension}) needs about {_fmt_gib(cost.bytes)} for "
            f"{cost.note} with method={method!r}, more than the limit of {_fmt_gib(limit)}; {hint}")
    if method == "separable":
        from retina.spin import separable

        return separable.yields(system, field_uT, dirs, progress=progress)
    if method == "fast-separable":
        from retina.spin import fast_separable

        if info is None:
            return fast_separable.yields(system, field_uT, dirs, progress=progress, n_jobs=_jobs())
        from retina.spin.system import equal_rate_reported_yield

        phi, bound = fast_separable.singlet_start_singlet_yield(system, field_uT, dirs, progress=progress,
                                                                n_jobs=_jobs(), return_bound=True)
        info.update(method_error_bound_max=float(np.max(bound)) if bound.size else 0.0)
        return equal_rate_reported_yield(system, phi)
    if method == "sampled":
        from retina.spin import sampling
        from retina.spin.system import equal_rate_reported_yield

        # the reported yield is an affine map of the singlet-start one with slope +-1 or +-1/3
        slope = 1.0 if system.initial_state == "singlet" else 1.0 / 3.0
        n_states, pilot_se = sampling.DEFAULT_STATES, None
        if accuracy is not None:
            n_states, pilot_se = sampling.states_for(system, field_uT, dirs, accuracy / slope, n_jobs=_jobs())
        res = sampling.sampled_yields(system, field_uT, dirs, n_states=n_states, progress=progress,
                                      n_jobs=_jobs())
        if info is not None:
            hi, lo = int(np.argmax(res.mean)), int(np.argmin(res.mean))
            w = np.zeros(res.mean.shape[0])
            w[hi], w[lo] = 1.0, -1.0
            spread = float(res.mean[hi] - res.mean[lo])
            if accuracy is not None:
                met = bool(slope * np.max(res.standard_error) <= accuracy)
                info.update(sampling_accuracy_requested=float(accuracy),
                            sampling_pilot_standard_error=float(slope * pilot_se),
                            sampling_accuracy_met=met)
                if not met:
                    _log.warning("%r: the sampled standard error %.2g exceeds the requested %.2g (%s random "
                                 "states%s)", system.name, slope * np.max(res.standard_error), accuracy,
                                 " + ".join(str(r) for r in res.states),
                                 ", the most allowed" if max(res.states) >= sampling.MAX_STATES else "")
            if spread > 0 and res.mean.shape[0] > 1:
                # standard error of the difference between the extreme computed directions, over it
                info.update(sampling_anisotropy_relative_error=res.standard_error_of(w) / spread)
                if res.plain_parts:
                    # the control's variance reduction on that difference, measured from the same draws
                    info.update(sampling_control_variance_reduction=res.variance_reduction(w))
            info.update(approximation=f"stochastic trace estimation, {res.estimator} estimator, "
                                      f"{sampling.CONTROL_NAMES[res.control]}, {sampling.BASIS_NAMES[res.basis]}"
                                      f"{sampling._tail_words(res.tail_split)}"
                                      f"{', single-precision propagation' if res.precision == 'single' else ''}"
                                      " (sampled)",
                        sampling_estimator=res.estimator,
                        sampling_control=res.control,
                        sampling_basis=res.basis,
                        sampling_precision=res.precision,
                        sampling_tail_split=(res.tail_split if isinstance(res.tail_split, str) else
                                             float(res.tail_split) if res.tail_split is not None else 0.0),
                        sampling_states=int(res.n_states),
                        sampling_states_a=int(res.states[0]),
                        sampling_states_b=int(res.states[1]),
                        sampling_standard_error_max=float(slope * np.max(res.standard_error)),
                        sampling_bias_bound=float(slope * res.bias_bound))
        return equal_rate_reported_yield(system, res.mean)
    if method == "hilbert":
        from retina.spin import hilbert

        return hilbert.yields(system, field_uT, dirs, progress=progress, max_bytes=min(limit, 256 * 2**20))
    from retina.spin import liouville

    return liouville.yields(system, field_uT, dirs, progress=progress, max_bytes=min(limit, 256 * 2**20))
