r"""Sampling method for pairs beyond exact reach: stochastic trace estimation (``"sampled"``).

An approximation with error bars, named ``"sampled"`` wherever the method is recorded (engine,
provenance, summaries).  Scope: that of :mod:`retina.spin.separable` (uncoupled electrons, equal
rates, no relaxation).

Estimator
---------
With the notation of :mod:`retina.spin.fast_separable`,
``Phi_S = 1/4 + (1/M) int_0^inf k e^{-kt} sum_ab C^A_ab(t) C^B_ab(t) dt`` and
``C^r_ab(t) = Tr_r[S_a U^+ S_b U]``, ``U = exp(-i H_r t)``.  For a random vector ``z`` with
independent entries of unit modulus and uniformly random phase, ``E[z z^+] = 1``, so
``Tr X = E[z^+ X z]`` for every operator ``X`` (Hutchinson's estimator; see e.g. A. Hutchinson,
Commun. Stat. Simul. Comput. 18, 1059 (1989), from memory).  Hence

    c^r_ab(t; z) = Re <U S_a z | S_b | U z>

is an unbiased estimate of ``C^r_ab(t)`` (``C`` is real).  Drawing one vector ``z_s^A`` for A and an
independent ``z_s^B`` for B, ``E[c^A c^B] = C^A C^B``, so

    Phi_s = 1/4 + (1/M) Q[ sum_ab c^A_ab(t; z_s^A) c^B_ab(t; z_s^B) ]

is unbiased up to the time quadrature ``Q`` (below), and ``R`` independent draws give the mean and
its standard error ``std(Phi_s) / sqrt(R)`` (sample standard deviation): the error bar comes from
the method's own variance.  This is the ``"paired"`` estimator.

The default, ``"product"``, pairs every A draw with every B draw: since ``Q`` and the sum over
``ab`` are bilinear in the two radicals' series, the mean over all ``R^2`` pairs is simply
``Phi = 1/4 + (1/M) Q[sum_ab cbar^A_ab cbar^B_ab]`` with ``cbar`` the mean over draws, unbiased
because the two radicals' vectors are independent.  It is a two-sample U-statistic with a
bilinear kernel; its delete-one jackknife variance (J. N. Arvesen, Ann. Math. Stat. 40, 2076
(1969), from memory) reduces, by the bilinearity, to ``var_i(g_i) / R + var_j(h_j) / R`` with
``g_i = 1/4 + Q[c^A_i cbar^B] / M`` and ``h_j = 1/4 + Q[cbar^A c^B_j] / M`` (derived: deleting draw
``i`` of A moves the estimate by ``-(g_i - gbar) / (R - 1)``).  Against the paired estimator it drops
most of the term in which both radicals' sampling errors multiply (its share falls from ``1/R`` to
``1/R^2``); the jackknife counts that term once more at order ``1/R^2`` (it errs on the side of a
larger error bar).  The same propagated states serve both estimators; the gain is largest when
each radical's trace estimate is noisy (small radicals), small otherwise.  The *same* vectors serve every field direction, so the sampling
errors of different directions are strongly correlated and largely cancel in differences: the
anisotropy is resolved far better than the mean.  :func:`sampled_yields` returns the per-draw
terms (``parts``), from which the standard error of any linear functional (a difference, the
anisotropic part, a harmonic coefficient) follows.

The size of the error: a random-phase estimate of ``Tr X`` has variance ``sum_{i != j} |X_ij|^2``
(derived: ``E[z_i^* z_j z_k z_l^*]`` vanishes unless the indices pair up), at most
``||X||_F^2 <= d / 16`` for ``X = S_a S_b(t)``, while ``Tr X`` grows as ``d``; so each radical's
relative error falls as ``1 / sqrt(d)`` (typicality), and a pair with radicals 32 times larger
needs about 32 times fewer states for the same relative error.

Each vector set ``[z, S_x z, S_y z, S_z z]`` is propagated on the time grid ``t_j = j h`` by
Chebyshev expansions of ``exp(-i H tau)`` (H. Tal-Ezer and R. Kosloff, J. Chem. Phys. 81, 3967
(1984), from memory), accurate to 1e-13 in norm, with the spectral interval bounded by Gershgorin
discs intersected with Weyl's bound (each hyperfine term's eigenvalues summed,
:func:`retina.spin._spectral.hyperfine_interval`; no eigendecomposition of the radical, sparse matrix
products only).  One expansion covers ``SUBSTEPS`` grid
steps: the Chebyshev vectors ``T_n((H - c)/a) v`` are formed once, and the states at all the
intermediate grid times are their combinations with the coefficients
``(2 - delta_n0) (-i)^n J_n(a tau) exp(-i c tau)`` (one matrix product).  Groups of equivalent nuclei are reduced to
their total-spin blocks (:mod:`retina.spin.equivalence`), each block sampled with its multiplicity.

Time quadrature (derived here; deterministic errors bounded and stated).  ``Q`` is the trapezoid
rule of :mod:`retina.spin.fast_separable` on ``t_j = j h`` with ``h <= 0.9 pi / W`` (``W`` the sum of
the two radicals' bounded spectral spreads (above), so every frequency of ``F`` has ``|Omega h| <=
0.9 pi``), whose exact error is ``sum_l c_l g(Omega_l)`` (aliasing kernel ``g`` of that module).
Without the spectrum, the correction is folded into the first few weights instead: fit
``g(theta / h) ~ sum_{j=0}^{J} gamma_j cos(j theta)`` on ``0 <= theta <= W h`` (least squares, ``J``
raised until the fit's largest error on a dense check grid is below ``bias_tol / 10``); since ``F``
is real and even, ``sum_l c_l cos(j Omega_l h) = F(t_j)``, so the correction is
``sum_j gamma_j F(t_j)``, an end correction on the first ``J + 1`` samples.  Its error is at most
``(9/4)`` times the fit error; the truncation of the time integral at ``T`` adds at most
``(3/4) k h exp(-k T) / (1 - exp(-k h))``.  Their sum (``bias_bound``) is kept below ``bias_tol``
(default 1e-7), far below the statistical error.

Cost per direction: ``~ (T / h) (a h SUBSTEPS + 15) / SUBSTEPS`` sparse products of each radical's
Hamiltonian with ``4 R`` vectors, i.e. proportional to the hyperfine bandwidth times the lifetime,
and linear in the radical dimension rather than cubic.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numba
import numpy as np
import scipy.sparse as sp
import scipy.special

from retina.spin._spectral import aliasing_kernel, hyperfine_interval, spread_bound
from retina.spin.separable import _check_inputs, check_scope
from retina.spin.system import equal_rate_reported_yield

__all__ = ["SampledYields", "sampled_yields", "yields", "cost_model", "states_for", "DEFAULT_STATES",
           "DEFAULT_BIAS_TOL", "ESTIMATORS", "MAX_STATES"]

#: Default number of random vectors per radical (independent draws).
DEFAULT_STATES = 16
#: Default bound on the deterministic (quadrature and truncation) error.
DEFAULT_BIAS_TOL = 1e-7
_MULT = np.array([1.0, 1.0, 1.0, 2.0, 2.0, 2.0, 2.0, 2.0, 2.0])
_PAIRS = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))


#: Estimators of :func:`sampled_yields` (module docstring).
ESTIMATORS = ("product", "paired")


@dataclass(frozen=True)
class SampledYields:
    """Singlet-start singlet yields estimated by sampling.

    Attributes
    ----------
    mean : ndarray (N,)
        The estimate for each direction.
    standard_error : ndarray (N,)
        Its standard error per direction (``standard_error_of`` a unit weight).
    parts : tuple of ndarray (R, N)
        Independent per-draw terms whose sample variances over ``R`` add up to the estimate's
        variance (``"paired"``: the per-draw estimates; ``"product"``: the jackknife terms of radical
        A and of radical B).  The same random vectors serve every direction, so any linear
        combination ``c`` over directions has standard error ``sqrt(sum_k var(parts_k @ c) / R)``.
    bias_bound : float
        Bound on the deterministic error (quadrature and truncation) of every value.
    estimator : str
        ``"product"`` or ``"paired"`` (module docstring).
    n_states : int
        Random vectors per radical.
    """

    mean: np.ndarray
    standard_error: np.ndarray
    parts: tuple
    bias_bound: float
    estimator: str = "product"
    n_states: int = 0

    def standard_error_of(self, weights) -> float:
        """Standard error of ``sum_i weights_i Phi_i`` (for example a difference of directions)."""
        w = np.asarray(weights, dtype=float)
        var = 0.0
        for part in self.parts:
            v = part @ w
            var += float(np.var(v, ddof=1)) / v.shape[0]
        return math.sqrt(var)


def _sparse_ops(block, radical):
    """``(s_e, h_hf, weyl)`` of a sparse block: its electron spin (three CSR matrices), hyperfine
    Hamiltonian and the Weyl bounds of the latter's spectrum."""
    return list(block.s_e), block.h_hf, _block_weyl(radical, block)


def cost_model(system, n_directions: int, *, n_states: int = DEFAULT_STATES,
               field_uT: float = 50.0) -> tuple[float, int, str]:
    """Estimated seconds, bytes and a note for :func:`sampled_yields` (engine cost model).

    Per direction and block: ``n_t = 17 / (k h)`` time steps of ``(a h SUBSTEPS + 15) / SUBSTEPS``
    sparse products with ``4 R`` vectors (``~3e-9 s`` per stored entry and vector, plus ``2e-5 s``
    per product and ``1e-4 s`` per step of Python overhead; rough, from small pairs).

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        The pair.
    n_directions : int
        Number of field directions.
    n_states : int
        Random vectors per radical.
    field_uT : float
        Field strength in microtesla (for the spectral spread).

    Returns
    -------
    (float, int, str)
        Seconds, bytes and a note in words.
    """
    from retina.spin.equivalence import reduced_dimensions

    k = float(system.k_singlet)
    spreads = [spread_bound(r, field_uT) for r in system.radicals]
    h = min(0.9 * np.pi / max(sum(spreads), 1e-30), 0.5 / k)
    n_t = 17.0 / (k * h)
    secs = 0.0
    mem = 0
    for rad, spread in zip(system.radicals, spreads):
        n_cheb = (0.5 * spread * h * SUBSTEPS + 15) / SUBSTEPS
        nnz_row = 1 + 6 * len(rad.nuclei)
        for dim, _ in reduced_dimensions(rad):
            secs += n_t * (n_cheb * (2e-5 + 3e-9 * nnz_row * dim * 4 * n_states) + 1e-4)
            # Chebyshev vectors (a h SUBSTEPS + 15 of them) and the states, 4 R columns each
            n_vec = 0.5 * spread * h * SUBSTEPS + 15 + SUBSTEPS + 4
            mem = max(mem, 16 * dim * (4 * n_states * n_vec + 4 * nnz_row))
    # per-draw series of both radicals (R, n_t, 9) and their products
    mem += 8 * n_states * n_t * (2 * 9 + 4)
    note = (f"{n_directions} x stochastic trace estimates with {n_states} random states per radical, "
            f"{int(n_t)} time steps (an approximation with error bars)")
    return n_directions * secs, int(1.3 * mem + 2**20), note


@numba.njit(cache=True, nogil=True)
def _cheb_step(indptr, indices, data, alpha, x, beta, y, out):
    """``out = alpha * (A @ x) + beta * y`` for a CSR matrix ``A`` and dense (d, n) ``x``, ``y``
    (rows contiguous, so the inner loop runs over the vectors)."""
    n_rows, n_cols = x.shape
    for i in range(n_rows):
        for c in range(n_cols):
            out[i, c] = beta * y[i, c]
        for p in range(indptr[i], indptr[i + 1]):
            a = alpha * data[p]
            j = indices[p]
            for c in range(n_cols):
                out[i, c] += a * x[j, c]


def _gershgorin(h):
    """Lower and upper bounds of the spectrum of a Hermitian sparse matrix."""
    diag = h.diagonal().real
    off = np.asarray(abs(h).sum(axis=1)).ravel() - np.abs(diag)
    return float(np.min(diag - off)), float(np.max(diag + off))


def _interval(hm, weyl, w):
    """Bounds of the spectrum of ``hm = H_hf + w . S``: Gershgorin discs intersected with the Weyl
    bounds ``weyl`` of ``H_hf`` (:func:`retina.spin._spectral.hyperfine_interval`) widened by
    ``|w| / 2``; both are rigorous, so their intersection is."""
    lo, hi = _gershgorin(hm)
    half = 0.5 * float(np.linalg.norm(w))
    return max(lo, weyl[0] - half), min(hi, weyl[1] + half)


def _block_weyl(radical, block):
    """Weyl bounds of one block's hyperfine Hamiltonian (its groups' total spins and tensors)."""
    from retina.spin.equivalence import groups

    grp = groups(radical)
    return hyperfine_interval([(j, radical.nuclei[g[0]].hyperfine_mT) for j, g in zip(block.spins, grp)])


def _cheb_coeffs(x: float, tol: float = 1e-13) -> np.ndarray:
    """Coefficients ``(2 - delta_n0) (-i)^n J_n(x)`` of ``exp(-i x y)`` on ``y in [-1, 1]``."""
    n_max = int(x + 10)
    while True:
        n = np.arange(n_max + 1)
        j = scipy.special.jv(n, x)
        if abs(j[-1]) < tol and abs(j[-2]) < tol:
            break
        n_max += 8
    c = (2.0 - (n == 0)) * (-1j) ** n * j
    keep = np.nonzero(np.abs(c) >= tol * 1e-3)[0]
    return c[: keep[-1] + 1]


#: Grid steps per Chebyshev expansion (states at the intermediate grid times come from the same
#: Chebyshev vectors with other coefficients, so a long expansion serves several grid times).
SUBSTEPS = 8


def _sub_coeffs(a: float, c: float, h: float, m: int, tol: float = 1e-13) -> np.ndarray:
    """``(N + 1, m)`` coefficients of ``exp(-i H tau_i)``, ``tau_i = i h`` (i = 1..m), on the
    Chebyshev vectors ``T_n((H - c) / a) v``: ``(2 - delta_n0) (-i)^n J_n(a tau) exp(-i c tau)``."""
    longest = _cheb_coeffs(a * h * m, tol)
    n = np.arange(longest.shape[0])
    tau = h * np.arange(1, m + 1)
    j = scipy.special.jv(n[:, None], a * tau[None, :])
    return (2.0 - (n == 0))[:, None] * ((-1j) ** n)[:, None] * j * np.exp(-1j * c * tau)[None, :]


def _correlations(v, s_e, r, mult, out_row):
    """Add one time's draw estimates (9 combinations per draw) to ``out_row (R, 9)``."""
    phi = v[:, :r]
    sb = np.stack([s_e[k] @ phi for k in range(3)], axis=1)         # S_b U z, (d, 3, R)
    chi = v[:, r:].reshape(v.shape[0], 3, r)                       # U S_a z, (d, 3, R)
    cab = np.einsum("iar,ibr->abr", chi.conj(), sb).real * mult
    for ci, (ia, ib) in enumerate(_PAIRS):
        out_row[:, ci] += 0.5 * (cab[ia, ib] + cab[ib, ia])
    for ci, (ia, ib) in enumerate(_PAIRS[3:]):
        out_row[:, 6 + ci] += 0.5 * (cab[ia, ib] - cab[ib, ia])


def _radical_series(blocks, vectors, bvec, h, n_t):
    """Per-draw correlation estimates ``c_ab(t_j)``, shape (R, n_t, 9) (six symmetric, three
    antisymmetric combinations as in :mod:`retina.spin.fast_separable`)."""
    r = vectors[0].shape[1]
    out = np.zeros((r, n_t, 9))
    for (blk, (s_e, h_hf, weyl)), z in zip(blocks, vectors):
        w = bvec @ blk.zeeman
        hm = (h_hf + w[0] * s_e[0] + w[1] * s_e[1] + w[2] * s_e[2]).tocsr()
        lo, hi = _interval(hm, weyl, w)
        c = 0.5 * (lo + hi)
        a = max(0.5 * (hi - lo), 1e-30)
        hs = ((hm - c * sp.identity(hm.shape[0], format="csr")) / a).tocsr()
        hs.sort_indices()
        hs.data = hs.data.astype(complex)
        coef = _sub_coeffs(a, c, h, SUBSTEPS)                          # (N + 1, m)
        # columns: z, S_x z, S_y z, S_z z for each draw
        v = np.ascontiguousarray(np.concatenate([z] + [s_e[k] @ z for k in range(3)], axis=1))
        mult = blk.multiplicity
        _correlations(v, s_e, r, mult, out[:, 0])
        j = 1
        while j < n_t:
            m = min(SUBSTEPS, n_t - j)
            # Chebyshev vectors of v, accumulated into the m later states at once
            # the Chebyshev vectors T_n((H - c)/a) v, then all m states by one matrix product
            cheb = np.empty((coef.shape[0],) + v.shape, dtype=complex)
            cheb[0] = v
            if coef.shape[0] > 1:
                _cheb_step(hs.indptr, hs.indices, hs.data, 1.0, v, 0.0, v, cheb[1])
            for n in range(2, coef.shape[0]):
                _cheb_step(hs.indptr, hs.indices, hs.data, 2.0, cheb[n - 1], -1.0, cheb[n - 2], cheb[n])
            states = (coef[:, :m].T @ cheb.reshape(coef.shape[0], -1)).reshape((m,) + v.shape)
            for i in range(m):
                _correlations(states[i], s_e, r, mult, out[:, j + i])
            v = states[m - 1]
            j += m
    return out


def _end_correction(k: float, h: float, theta_max: float, tol: float):
    """``gamma (J+1,)`` and the fit's largest error for the trapezoid end correction (docstring)."""
    theta = np.linspace(0.0, max(theta_max, 1e-9), 300)
    check = np.linspace(0.0, max(theta_max, 1e-9), 2401)
    target = aliasing_kernel(theta / h, k, h)
    want = aliasing_kernel(check / h, k, h)
    err = np.inf
    gamma = np.zeros(1)
    for n_terms in (2, 4, 6, 8, 12, 16, 24, 32, 48, 64):
        basis = np.cos(np.outer(theta, np.arange(n_terms)))
        gamma = np.linalg.lstsq(basis, target, rcond=None)[0]
        err = float(np.max(np.abs(np.cos(np.outer(check, np.arange(n_terms))) @ gamma - want)))
        if err <= tol:
            break
    return gamma, err


def _random_vectors(blocks, n_states, rng):
    return [np.exp(2j * np.pi * rng.random((blk.dimension, n_states))) for blk, _ in blocks]


def _upper(dirs: np.ndarray) -> np.ndarray:
    """Each direction or its opposite, whichever lies on the upper hemisphere (z > 0; on the
    equator y > 0; then x > 0)."""
    x, y, z = dirs.T
    flip = (z < 0) | ((z == 0) & ((y < 0) | ((y == 0) & (x < 0))))
    return np.where(flip[:, None], -dirs, dirs)


#: Directions per worker task when ``n_jobs > 1``.
_BATCH = 4


def _check_jobs(n_jobs) -> int:
    from retina.errors import InputError

    if n_jobs is None:
        return 1
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs < 1:
        raise InputError(f"expected a positive whole number of worker processes, got {n_jobs!r}",
                         key="n_jobs")
    return int(n_jobs)


def _sample_directions(system, b_all, n_states, seed, bias_tol, estimator, progress):
    """Estimates, per-draw terms and bias bound for field vectors ``b_all (N, 3)`` (tesla, already
    on the upper hemisphere); the random vectors come from ``seed`` alone."""
    from retina.spin.equivalence import radical_blocks

    k = float(system.k_singlet)
    rng = np.random.default_rng(seed)
    rads = []
    for rad in system.radicals:
        blocks = [(b, _sparse_ops(b, rad)) for b in radical_blocks(rad, sparse=True)]
        rads.append((blocks, _random_vectors(blocks, int(n_states), rng)))
    m_tot = system.radicals[0].dimension * system.radicals[1].dimension / 4.0
    n_dir = b_all.shape[0]
    r = int(n_states)
    parts = [np.empty((r, n_dir)) for _ in range(1 if estimator == "paired" else 2)]
    mean = np.empty(n_dir)
    bias = 0.0
    for i, bvec in enumerate(b_all):
        # spectral spread bound per radical (Gershgorin and Weyl), then the time grid
        spreads = []
        for blocks, _ in rads:
            s = 0.0
            for blk, (s_e, h_hf, weyl) in blocks:
                w = bvec @ blk.zeeman
                lo, hi = _interval((h_hf + w[0] * s_e[0] + w[1] * s_e[1] + w[2] * s_e[2]).tocsr(), weyl, w)
                s = max(s, hi - lo)
            spreads.append(max(s, 1e-30 * k))
        w_tot = spreads[0] + spreads[1]
        h = min(0.9 * np.pi / w_tot, 0.5 / k)
        kh = k * h
        gamma, fit_err = _end_correction(k, h, w_tot * h, bias_tol / 10.0)
        n_t = int(math.ceil(math.log(1.5 * kh / (bias_tol * -math.expm1(-kh))) / kh)) + 1
        n_t = max(n_t, gamma.shape[0])
        series = [_radical_series(blocks, vecs, bvec, h, n_t) for blocks, vecs in rads]
        decay = np.exp(-kh * np.arange(n_t))

        def quad(f):                 # the end-corrected trapezoid rule on the last axis (linear)
            return kh * (f @ decay - 0.5 * f[..., 0]) - f[..., :gamma.shape[0]] @ gamma

        if estimator == "paired":
            f = np.einsum("rjc,rjc,c->rj", series[0], series[1], _MULT)
            parts[0][:, i] = 0.25 + quad(f) / m_tot
            mean[i] = parts[0][:, i].mean()
        else:
            abar, bbar = series[0].mean(axis=0), series[1].mean(axis=0)
            mean[i] = 0.25 + quad(np.einsum("jc,jc,c->j", abar, bbar, _MULT)) / m_tot
            parts[0][:, i] = 0.25 + quad(np.einsum("rjc,jc,c->rj", series[0], bbar, _MULT)) / m_tot
            parts[1][:, i] = 0.25 + quad(np.einsum("jc,rjc,c->rj", abar, series[1], _MULT)) / m_tot
        bias = max(bias, 2.25 * fit_err + 0.75 * kh * math.exp(-kh * n_t) / -math.expm1(-kh))
        if progress is not None:
            progress(i + 1, n_dir)
    return mean, parts, bias


def sampled_yields(system, field_uT, directions, *, n_states: int = DEFAULT_STATES, seed: int = 0,
                   bias_tol: float = DEFAULT_BIAS_TOL, estimator: str = "product",
                   progress: Callable[[int, int], None] | None = None,
                   n_jobs: int | None = None) -> SampledYields:
    """Singlet-start singlet yields with standard errors, by stochastic trace estimation.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        Separable scope (:func:`retina.spin.separable.check_scope`).
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame.
    n_states : int
        Random vectors per radical (independent draws, >= 2).
    seed : int
        Seed of the random vectors (the same vectors serve every direction).
    bias_tol : float
        Bound on the deterministic error (quadrature and truncation).
    estimator : {"product", "paired"}
        The estimator (module docstring).
    progress : callable(done, total), optional
    n_jobs : int, optional
        Worker processes over directions (joblib, loky backend; default 1); each draws the same
        random vectors, so the result does not depend on it beyond rounding.

    Returns
    -------
    SampledYields

    Notes
    -----
    The exact yield is even in the field, ``Phi(b) = Phi(-b)`` (derived in
    :meth:`retina.yieldfn.YieldFunction.from_system`), but a single random vector's estimate is not
    (time reversal maps it to the estimate for ``-b`` at negative times).  Each direction is
    therefore replaced by its upper-hemisphere representative before sampling: the estimate is
    unbiased for both ``b`` and ``-b`` and even by construction.
    """
    from retina.errors import InputError

    check_scope(system)
    dirs = _check_inputs(field_uT, directions)
    if isinstance(n_states, bool) or not isinstance(n_states, (int, np.integer)) or n_states < 2:
        raise InputError(f"expected at least 2 random states, got {n_states!r}", key="n_states")
    if estimator not in ESTIMATORS:
        raise InputError(f"expected an estimator among {', '.join(ESTIMATORS)}, got {estimator!r}",
                         key="estimator")
    if not (np.isfinite(bias_tol) and 0 < bias_tol < 1):
        raise InputError(f"expected a bias tolerance between 0 and 1, got {bias_tol!r}", key="bias_tol")
    b_all = _upper(dirs) * (float(field_uT) * 1e-6)
    n_dir = dirs.shape[0]
    r = int(n_states)
    n_jobs = _check_jobs(n_jobs)
    if n_jobs == 1 or n_dir < 2:
        mean, parts, bias = _sample_directions(system, b_all, r, seed, bias_tol, estimator, progress)
    else:
        # worker processes over directions; every worker draws the same random vectors from the
        # seed, so the errors stay shared across directions exactly as in one process
        from joblib import Parallel, delayed

        step = max(1, min(_BATCH, -(-n_dir // n_jobs)))
        starts = list(range(0, n_dir, step))
        results = Parallel(n_jobs=n_jobs, backend="loky", return_as="generator")(
            delayed(_sample_directions)(system, b_all[i:i + step], r, seed, bias_tol, estimator, None)
            for i in starts)
        mean = np.empty(n_dir)
        parts = [np.empty((r, n_dir)) for _ in range(1 if estimator == "paired" else 2)]
        bias = 0.0
        for i, (m_i, p_i, b_i) in zip(starts, results):
            stop = i + m_i.shape[0]
            mean[i:stop] = m_i
            for whole, piece in zip(parts, p_i):
                whole[:, i:stop] = piece
            bias = max(bias, b_i)
            if progress is not None:
                progress(stop, n_dir)
    se = np.sqrt(sum(np.var(p, axis=0, ddof=1) for p in parts) / r)
    return SampledYields(mean, se, tuple(parts), bias, estimator, r)


#: Most random states :func:`states_for` asks for.
MAX_STATES = 1024
#: States and directions of the pilot run of :func:`states_for`.
PILOT_STATES, PILOT_DIRECTIONS = 4, 6


def states_for(system, field_uT, directions, accuracy: float, *, seed: int = 0) -> tuple[int, float]:
    """Random states needed for a standard error of at most ``accuracy`` per yield, by a pilot run.

    The pilot samples ``PILOT_STATES`` states on (at most) ``PILOT_DIRECTIONS`` of the directions,
    spread over the list, with seed ``seed + 1`` (so the final run's vectors, seed ``seed``, are
    independent of it: the choice of ``R`` then does not bias the final estimate or its error
    bar).  Since the variance falls as ``1 / R``, ``R = ceil(1.2 PILOT_STATES (se / accuracy)^2)``
    with ``se`` the pilot's largest standard error, between ``PILOT_STATES`` and ``MAX_STATES``.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
    field_uT : float
    directions : array_like (N, 3)
    accuracy : float
        Wanted standard error per (singlet-start singlet) yield, > 0.
    seed : int
        The final run's seed.

    Returns
    -------
    (int, float)
        The number of states and the pilot's largest standard error.
    """
    from retina.errors import InputError

    if not (np.isfinite(accuracy) and 0 < accuracy < 1):
        raise InputError(f"expected an accuracy (standard error per yield) between 0 and 1, got {accuracy!r}",
                         key="accuracy")
    dirs = np.asarray(directions, dtype=float).reshape(-1, 3)
    pick = np.unique(np.linspace(0, dirs.shape[0] - 1, min(PILOT_DIRECTIONS, dirs.shape[0])).round().astype(int))
    pilot = sampled_yields(system, field_uT, dirs[pick], n_states=PILOT_STATES, seed=seed + 1)
    se = float(np.max(pilot.standard_error))
    r = int(math.ceil(1.2 * PILOT_STATES * (se / accuracy) ** 2))
    return max(PILOT_STATES, min(MAX_STATES, r)), se


def yields(system, field_uT, directions, *, n_states: int = DEFAULT_STATES, seed: int = 0,
           progress: Callable[[int, int], None] | None = None) -> np.ndarray:
    """The reported yield for each direction, estimated by sampling.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        Separable scope.
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame.
    n_states : int
        Random vectors per radical.
    seed : int
        Seed of the random vectors.
    progress : callable(done, total), optional
        Progress callback.

    Returns
    -------
    ndarray (N,)
        The estimates (product estimator).

    See :func:`sampled_yields` for the standard errors; the reported-yield conversion is the
    exact affine map of :func:`retina.spin.system.equal_rate_reported_yield`, so the standard
    error of a reported singlet yield from a triplet start is a third of the singlet-start one.
    """
    res = sampled_yields(system, field_uT, directions, n_states=n_states, seed=seed, progress=progress)
    return equal_rate_reported_yield(system, res.mean)
