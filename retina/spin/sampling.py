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
Commun. Stat. Simul. Comput. 18, 1059 (1989), from memory).  The electron's two states are traced
exactly and only the nuclear trace is sampled: with ``xi`` such a vector on the nuclei and
``|e_i, xi>`` (``e_i`` = up, down; the electron is the first tensor factor),
``Tr X = E[sum_i <e_i, xi| X |e_i, xi>]``.  Since ``S_a |e_i, xi> = sum_j (S_a)_ji |e_j, xi>``,
the two propagated states ``psi_i = U |e_i, xi>`` give every component (derived)::

    c^r_ab(t; xi) = Re sum_ij conj((S_a)_ji) <psi_j| S_b |psi_i>,
    <psi_j| S_b |psi_i> = sum_st (S_b)_st <psi_j,s | psi_i,t>,

an unbiased estimate of ``C^r_ab(t)`` (``C`` is real) from the 4 x 4 Gram matrix of the four
nuclear half-vectors ``psi_i,s`` (electron component ``s``): two propagated vectors per draw
instead of the four (``z`` and ``S_a z``) a full-space vector needs.  Drawing one ``xi_s^A`` for
A and an independent ``xi_s^B`` for B, ``E[c^A c^B] = C^A C^B``, so::

    Phi_s = 1/4 + (1/M) Q[ sum_ab c^A_ab(t; xi_s^A) c^B_ab(t; xi_s^B) ]

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

Control variate: the opposite direction (the default, ``control="opposite"``)
-----------------------------------------------------------------------------
The exact yield is even, ``Phi(b) = Phi(-b)``, but one draw's estimate ``Y(b)`` is not: time
reversal maps it to the estimate for ``-b`` at negative times, which the method never forms, so
its error has a part odd in ``b``.  That part, to first order in the weak field, is of the order of
the whole error, while the anisotropy (second order) is small; kept to one hemisphere it looks
like a ``|b . v|``-shaped pattern and lands in every even harmonic of the fit.  With the same
random vectors at ``b`` and ``-b``, the control ``D = Y(b) - Y(-b)`` has expectation exactly zero,
so ``Y_cv = Y(b) - beta D`` is unbiased for every *fixed* ``beta`` (derived: linearity of the
expectation).  Its variance ``Var Y(b) - 2 beta Cov(Y(b), D) + beta^2 Var D`` is least at
``beta* = (Var Y(b) - Cov(Y(b), Y(-b))) / (Var Y(b) + Var Y(-b) - 2 Cov(Y(b), Y(-b)))``, which is
exactly ``1/2`` when the two directions' estimates have equal variances (derived); we fix
``beta = 1/2``, i.e. ``Y_cv = (Y(b) + Y(-b)) / 2``, rather than fit it from the draws, so that no
``O(1/R)`` bias from a fitted coefficient arises at all (with the 4 states of a large run a fitted
``beta`` would be poorly determined anyway).  Measured on the invented axial 10-nucleus pair of
``benchmarks/bench_spin_large.py`` (radicals 144 x 144, 55 directions of a degree-8 fit, 8 states):
the in-sample optimum for the fitted maximum-minus-minimum was ``beta* = 0.502``; ``Y(b)`` and
``Y(-b)`` of that functional correlate at ``-0.83``, and the control cuts its variance 11.8-fold
(the variance of single yields only 1.3-fold, median over directions); a second, independent set
of 18 states gave 3.0-fold (sample variances of few draws scatter widely), and over 30
independent seeds of 16 states the difference between the exact extreme directions had a median
reduction of 2.4 (z-scores of that difference against the exact value: mean -0.04, standard
deviation 0.94, Kolmogorov-Smirnov p = 0.92 against Student's t with 15 degrees of freedom,
scipy.stats.kstest).  For twice the propagation that is a typical gain of about 1.2 (up to 6) in
cost per unit variance of the anisotropy, and nothing for single yields: the control serves the
anisotropy, modestly at these sizes.  On the invented axial 20-nucleus
pair (4608 x 4608, degree 8, 4 states) the same draws gave a 2.2-fold reduction of the fitted
anisotropy's variance (standard error 13 % of the anisotropy without the control, 9 % with it):
about break-even for the doubled propagation there, and uncertain (a sample variance of 4 draws);
64 draws per radical recorded over the whole time grid (two directions and their opposites) gave
2.3 for radical A and 2.2 for B, which under the halving schedule is break-even to 1.15-fold net.  Since ``D``'s expectation is zero
for every direction, the same control acts on every value, hence on every fitted harmonic
coefficient and every difference of directions alike.  The per-draw terms of ``Y_cv`` (the parts,
above) are again independent over draws, so the standard error comes from the residual variance
``Var(Y - D / 2)`` exactly as before; :attr:`SampledYields.plain_parts` keeps the terms of ``Y(b)``
alone, so every run also reports the variance reduction it achieved
(:meth:`SampledYields.variance_reduction`).

Candidates measured and not taken (same pair, same draws, in-sample regression coefficient, so
the numbers are if anything optimistic): the pair with only the isotropic parts of its tensors
(its exact anisotropy is zero; correlation with the anisotropy's error -0.23 without the opposite
control and 0.04 with it: variance reductions 1.06 and 1.00) and the pair reduced to its two
nitrogens per radical (exact yield from the small pair; correlations 0.19 and -0.24: 1.04 and
1.06).  A control Hamiltonian that differs from the true one by couplings ``dA`` decorrelates from
it after ``t ~ 1 / dA``: a few tens of nanoseconds for the weak protons here, against the 1 us
lifetime that weights the integral, so such controls cannot help at these lifetimes.

The size of the error: a random-phase estimate of ``Tr X`` has variance ``sum_{i != j} |X_ij|^2``
(derived: ``E[z_i^* z_j z_k z_l^*]`` vanishes unless the indices pair up); with the electron traced
exactly ``X`` is the nuclear operator ``Tr_e[S_a S_b(t)]``, whose squared Frobenius norm is at most
``d / 16``, while ``Tr X`` grows as ``d``; so each radical's relative error falls as ``1 / sqrt(d)``
(typicality), and a pair with radicals 32 times larger needs about 32 times fewer states for the
same relative error.

The basis of the phases (``basis``, default ``"nucleus-axis"``)
---------------------------------------------------------------
The variance ``sum_{i != j} |X_ij|^2`` is that of the off-diagonal part of ``X`` *in the basis in
which the phases are drawn*.  For any fixed unitary ``V``, ``xi = V z`` (``z`` random phases) still
has ``E[xi xi^+] = V V^+ = 1``, so the estimator stays unbiased in every basis (derived), but its
variance becomes ``sum_{i != j} |(V^+ X V)_ij|^2``.  With ``"nucleus-axis"``, ``V = kron_k D_k``
with ``D_k`` the spin rotation taking ``z`` to nucleus ``k``'s principal axis of largest
``|A|`` (:func:`retina.spin._random_states.spin_rotation`, :func:`~retina.spin._random_states.dominant_axis`):
each nucleus is quantised along its own dominant hyperfine axis.  A nucleus with a strongly
axial tensor (``A ~ a_par n n^T``, the nitrogens of many pairs) nearly conserves ``I . n``: the
term ``a_par (S . n)(I . n)`` commutes with it and the rest (the perpendicular couplings, the
electron Zeeman term) is small against ``a_par``.  Then ``X`` is nearly block diagonal over the
eigenvalues ``m`` of ``I . n``, and the random-phase terms between different ``m``, which carry
most of the variance in the laboratory basis, nearly vanish: the phases stratify ``m`` for free, at
no extra propagation.  When ``I . n`` is conserved exactly (``a_perp = 0``, zero field) that
nucleus contributes no variance at all (checked in the tests).  The basis only rotates the random
vectors before propagation; nothing else changes.  Measured on the invented axial 10-nucleus pair
of ``benchmarks/bench_spin_large.py`` (radicals 144 x 144, the 63 directions of a degree-8 fit,
8 states per radical, the same seeds for both bases): over 8
seeds, the variance of the fitted anisotropy (maximum minus minimum, linear in the values) fell
1.4-fold with the opposite-direction control (2.6e-7 to 1.9e-7) and 1.9-fold without it (9.7e-7
to 5.1e-7), and that of single yields (median over directions) 6.3-fold with the control and
4.5-fold without, for the same time (123 and 129 s a run, the machine shared).  The z-scores of
the anisotropy against the exact value stayed standard (8 seeds: mean 0.60, standard deviation
1.13, Kolmogorov-Smirnov p = 0.51 against Student's t with 7 degrees of freedom; without the
control 0.09, 1.31, p = 0.96).  The gain is smallest on the controlled anisotropy because most of
its remaining variance is radical B's (weaker nitrogens, protons of comparable size), which the
basis barely touches (1.5e-7 of the 1.9e-7).

Split tail (``tail_split=T_s``, lifetimes)
------------------------------------------
The kernel ``k e^{-kt}`` weights late times little, so the sampling noise of the time integral
beyond ``T_s`` is small: on the axial 10-nucleus pair the variance of the integral from ``T_s``
on was about ``e^{-2 k T_s}`` of the whole (difference of the extreme directions with the
control, 16 states: 0.24 % from 3 lifetimes on, 0.05 % from 4, against ``e^{-6} = 0.25 %`` and
``e^{-8} = 0.03 %``; at 20 nuclei it is about 8 times larger: the halving schedule, below), while propagating to the truncation time
``ln(1.5 / bias_tol) / k`` (14 lifetimes at the default ``bias_tol``) costs 14 / 3 times as much as
propagating to 3 lifetimes.  So all ``R`` draws of a radical run to ``T_s = tail_split / k`` and
only the first ``r = TAIL_STATES`` go on to the end; the integral's early part averages over all
draws and its tail over the first ``r``.  Unbiased (derived: each part is a product of the two
radicals' independent unbiased means), with the jackknife term of draw ``i`` of a radical
``u_i = Q_early[c_i cbar] + (R / r) [i < r] Q_tail[c_i cbar_tail]`` (``cbar``, ``cbar_tail``: the
other radical's means over its draws and over its tail draws), whose mean over ``i`` is the
estimate.  The ``u_i`` are independent but of two kinds, so their variance is estimated by strata
(draws ``< r`` and the rest): ``Var = sum_s n_s s_s^2 / R^2`` with ``s_s^2`` the sample variance in
stratum ``s`` (unbiased for each stratum; derived), which is what the parts hold: each stratum's
terms scaled by ``n_s / R``, so that their sample variance over ``n_s`` draws divided by ``n_s``
is ``n_s s_s^2 / R^2`` and the strata's means add up to the estimate.  A radical splits only when
both strata keep at least 2 draws (``R >= 4``); the split lies on the time grid after the end
correction's samples.  The deterministic error bound (``bias_bound``) is unchanged: every time
sample of the full grid is still estimated, by fewer draws late.  Measured on the axial
10-nucleus pair (63 directions with the control, 8 + 8 states, one process, the same run): 106
and 116 s against 152 s without the split (0.69-0.76 of the time; the cost model says 0.41, but
at dimension 144 the per-step overheads that do not shrink with the vectors dominate).

The halving schedule (``tail_split="halving"``, the default)
-------------------------------------------------------------
The split tail generalised: a draw may stop at any of several times, the number still propagated
falling roughly exponentially.  What it should follow depends on how one draw's error is spread
over time, measured on the invented axial 20-nucleus pair (``benchmarks/bench_spin_large.py``):
32 draws per radical (two seeds of 16) propagated to the end for two directions and their
opposites, the per-draw integrand of the controlled difference of the two directions recorded
over the whole time grid.  The share of one draw's variance from lifetime ``T`` on was 0.40,
0.10, 0.021 and 0.0027 at ``T`` = 1, 2, 3 and 4 (radical A; B 0.47, 0.11, 0.021, 0.003), far
above the ``e^{-2T}`` of stationary noise (0.14, 0.018, 0.0025, 0.0003), and the errors of the
early (``< 1``) and late parts correlated (0.3 for A, 0.5 for B).  Both follow when the error of
a draw's correlation grows like a random walk under the kernel, integrand error ``e^{-t} W(t)``
(``W`` a Wiener process, ``t`` in lifetimes): its tail share is ``(1 + 2T) e^{-2T}`` (derived:
``min(t, t') = int [u < t][u < t'] du``), 0.41, 0.092, 0.017 and 0.003, and early and late parts
correlate.  So the early times carry little of the variance, and a schedule tuned for stationary
noise (half the draws stopping at 0.35 lifetimes, the last 2 at 3.3) wastes draws early and
starves the tail: on the same measured covariance it gave variance times cost 4.7-5.0 (in units
of one draw's variance and one lifetime of propagation), the split at 3 lifetimes 6.4 and no
schedule 14.2.

Under the random-walk model (:func:`retina.spin.sampling_result.schedule_variance`) the variance
of a schedule with levels ``n_l`` over lifetimes ``[T_l, T_{l+1})`` is ``sum_{l,l'} K_{ll'} /
max(n_l, n_l')`` (derived: the means of two levels share the ``min(n_l, n_l')`` draws that run
through both), ``K`` the model's covariance of the levels' integrals.  The counts halve
(``n_{l+1} = n_l // 2``, at least ``TAIL_STATES``, each level stopping at least 2 draws so that
every stratum has a sample variance; a level that could not split again goes straight to
``TAIL_STATES``), and the count falls from ``n_l`` to ``n_{l+1}`` at ``kT = HALVING_DELAY +
HALVING_STRETCH ln(R / sqrt(n_l n_{l+1}))`` (:func:`retina.spin.sampling_result.schedule_levels`):
every draw runs to about 1.4 lifetimes, then half of those left stop every 0.87 lifetimes.  The
constants (1.0, 1.25) minimise the model's variance times cost for 100-400 draws (3.35-3.45,
against 4.3-4.7 for the stationary-noise schedule; checked in the tests), and the same search on
the measured covariance put its optimum at (0.75-1.0, 1.25-1.5) with 3.4-3.5: about 1.4 times
less cost per unit variance than the first halving schedule, 1.9 times less than the split at 3
lifetimes and 4.2 times less than running every draw to the end.  Real runs of the whole
degree-8 fit (``benchmarks/bench_spin_large.py`` row 5b, 63 directions each with its opposite, 2
workers, load 0.1-1.9): the schedule tuned for stationary noise with 96 draws per radical gave a
standard error of 2.9 % of the anisotropy in 14.8 min, this one with 80 draws 2.3 % in 21.0 min
(with the shorter single-precision series below), about 1.1 times less cost per unit variance
where 1.5 was expected; both error bars rest on few deep draws, so the ratio is uncertain by some
tens of percent.  The switches lie on the time
grid (the first grid time at or after each, never before the end correction's samples:
:func:`retina.spin.sampling_result.alive_counts`).

The estimator is the split tail's with one stratum per stopping time: at each grid time ``t_j``
the mean over the ``n_j`` draws propagated there (unbiased; the product of the two radicals'
independent means stays unbiased), and draw ``i``'s jackknife term
``u_i = sum_j w_j (R / n_j) [i < n_j] c_i(t_j) cbar(t_j)`` (``cbar``: the other radical's mean at
``t_j``), whose mean over ``i`` is the estimate; the draws that stop at the same time form a
stratum and the variance is ``sum_s n_s s_s^2 / R^2`` as above (a stratum of ``n_s`` draws scaled by
``n_s / R``).  :func:`retina.spin.sampling_result.schedule_variance` gives the model's factor
``s(R)`` (``v s(R)`` the variance: ``1 / R`` without a schedule, about ``1.6 / R`` halving), which
:func:`states_for` and the benchmarks use to size counts; the error bars themselves come from the
draws, whatever the noise's law.  Many draws are propagated in chunks of at most
:data:`retina.spin._propagation.MAX_BLOCK_VECTORS` vectors (over both electron states and the fused
fields), which bounds memory and keeps the sparse product's block within the caches; chunks change
nothing but rounding.

Unequal states per radical (``n_states=(R_A, R_B)``)
----------------------------------------------------
The product estimator's variance is ``v_A / R_A + v_B / R_B`` (its two jackknife terms, above; each
radical's per-draw variance ``v_r``), and the cost ``c_A R_A + c_B R_B``.  At a fixed variance the
cost is least at ``R_r ~ sqrt(v_r / c_r)`` (derived: Lagrange multipliers), with a gain of
``(v_A + v_B)(c_A + c_B) / (sqrt(v_A c_A) + sqrt(v_B c_B))^2`` over equal counts.  On the axial
pairs the radical with the weaker nitrogens (B) carries most of the variance of the anisotropy;
:func:`states_for` sizes both counts from a pilot's ``v_r`` and the cost model's ``c_r``
(:meth:`SampledYields.radical_variances` gives the two terms of any run).

Measured together on the invented axial 20-nucleus pair (``benchmarks/bench_spin_large.py`` row
5b: 63 directions of a degree-8 fit, each with its opposite, 4 + 8 states, nucleus-axis basis,
split at 3 lifetimes, 2 worker processes, the machine shared, load 4-5.5): 36.8 min, anisotropy
1.08e-3 with a standard error of 6.0 % of it (13 % without the control from the same draws: a
5.1-fold variance reduction), against 9.3 % for 4 + 4 states in the laboratory basis without the
split in an earlier run (variance 4.2e-9 against 8.6e-9).  At this size radical A carried the
larger variance term (2.8e-9 against 1.4e-9 for B), unlike at 10 nuclei.  One direction with
both fields in one process, the same run: 27.3 s for this configuration against 29.0 and 33.4 s
for 4 + 4 states in the laboratory basis without the split (0.87 of the time for twice B's
states; the cost model expected 0.70: the few tail vectors use the sparse product less well).
So the cost per unit variance of the anisotropy fell about 2.3-fold; 2 % would still need about
5.5 h at that load (the variance falling as ``1 / R``).

The ``2 R`` vectors of a radical (a block of states, ``dim x 2R``) are propagated together on the
time grid ``t_j = j h`` by Chebyshev expansions of ``exp(-i H tau)`` (H. Tal-Ezer and R. Kosloff,
J. Chem. Phys. 81, 3967 (1984), from memory), truncated at ``retina.spin._propagation.CHEB_TOL`` in norm, with a compiled
sparse product (numba, real and imaginary parts apart) of the CSR Hamiltonian with the whole block.
The spectral interval is rigorous: Gershgorin discs intersected with Weyl's bound taken one
nucleus at a time (:func:`retina.spin._spectral.hyperfine_interval`) and a few nuclei at a time
(:func:`retina.spin._spectral.grouped_interval`, the tight one: within about 7 % of the exact
spread on the benchmark's random 10-nucleus radicals, against 60 % too wide per nucleus); no
eigendecomposition of the radical.  One expansion covers ``m`` grid steps (:func:`retina.spin._propagation.substeps`): the
Chebyshev vectors ``T_n((H - c)/a) v`` are formed once, and the states at all the intermediate grid
times are their combinations with the coefficients ``(2 - delta_n0) (-i)^n J_n(a tau)`` (two real
matrix products; the phase ``exp(-i c tau)``, common to the whole block, cancels in every Gram
matrix and is left out).  Directions that are each other's opposites share one estimate (with
the control below it is formed from both).  Groups of equivalent nuclei are reduced to
their total-spin blocks (:mod:`retina.spin.equivalence`), each block sampled with its multiplicity.

Fused fields (``block_width``).  The sparse product is bound by reading the matrix, so its time per
vector falls with the block's width; all fields of a run share the hyperfine matrix and the random
vectors, and differ only in the electron Zeeman term, a 2 x 2 matrix on the electron factor.
``block_width`` fields (``b`` and ``-b`` are two) are propagated as one block of vectors
(:mod:`retina.spin._fused`): the hyperfine entries are read once for all of them and each field's
Zeeman term is applied per column, on the hull of the fields' spectral intervals.  Every field of
a run uses one time grid (the step from the largest spread sum over the run's fields, so that
grouping the fields into blocks or workers changes nothing but the Chebyshev truncation); the
estimator, its vectors and its error bar are those of field-by-field propagation.

Time quadrature (derived here; deterministic errors bounded and stated).  ``Q`` is the trapezoid
rule of :mod:`retina.spin.fast_separable` on ``t_j = j h`` with ``h <= 0.9 pi / W`` (``W`` the sum of
the two radicals' bounded spectral spreads (above), the largest over the run's fields, so every frequency of ``F`` has ``|Omega h| <=
0.9 pi``), whose exact error is ``sum_l c_l g(Omega_l)`` (aliasing kernel ``g`` of that module).
Without the spectrum, the correction is folded into the first few weights instead: fit
``g(theta / h) ~ sum_{j=0}^{J} gamma_j cos(j theta)`` on ``0 <= theta <= W h`` (least squares, ``J``
raised until the fit's largest error on a dense check grid is below ``bias_tol / 10``); since ``F``
is real and even, ``sum_l c_l cos(j Omega_l h) = F(t_j)``, so the correction is
``sum_j gamma_j F(t_j)``, an end correction on the first ``J + 1`` samples.  Its error is at most
``(9/4)`` times the fit error; the truncation of the time integral at ``T`` adds at most
``(3/4) k h exp(-k T) / (1 - exp(-k h))``.  Their sum (``bias_bound``) is kept below ``bias_tol``
(default 1e-6), far below the statistical error, and stated with every result.

Cost per direction: about ``a T (1 + 25 / (a h m))`` sparse products of each radical's Hamiltonian
with ``2 R`` vectors (``a`` the Chebyshev half-width), i.e. proportional to the hyperfine bandwidth
times the lifetime, and linear in the radical dimension rather than cubic (:func:`cost_model`);
under a draw schedule each level's ``2 n_l`` vectors run over that level's time only.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from retina.spin import _fused
from retina.spin import _propagation as _prop
from retina.spin.separable import _check_inputs, check_scope
from retina.spin.system import equal_rate_reported_yield
# settings, the result type and the cost model live in their own modules; re-exported here so that
# callers and pickled results keep working
from retina.spin.sampling_cost import (_R_COMB, _R_CORR, _T_GROUP, _T_MATVEC, _WIDTH_COST,  # noqa: F401
                                       _model_spread, _nnz_row, _radical_seconds, _width_cost, cost_model,
                                       matvec_seconds)
from retina.spin.sampling_states import (MAX_STATES, PILOT_DIRECTIONS, PILOT_STATES,  # noqa: F401
                                         cheapest_states)
from retina.spin.sampling_result import (BASES, BASIS_NAMES, CONTROL_NAMES, CONTROLS,  # noqa: F401
                                         DEFAULT_BASIS, DEFAULT_BIAS_TOL, DEFAULT_CONTROL, DEFAULT_STATES,
                                         DEFAULT_BLOCK_WIDTH, DEFAULT_PRECISION, DEFAULT_TAIL_SPLIT, ESTIMATORS,
                                         HALVING, PRECISIONS, TAIL_STATES, SampledYields, _states_pair,
                                         _states_words, _tail_words, alive_counts, check_tail_split,
                                         schedule_levels, schedule_variance)

__all__ = ["SampledYields", "sampled_yields", "yields", "cost_model", "matvec_seconds", "states_for",
           "cheapest_states", "schedule_variance", "HALVING", "CONTROLS",
           "DEFAULT_CONTROL", "CONTROL_NAMES", "DEFAULT_STATES", "DEFAULT_BIAS_TOL", "ESTIMATORS", "MAX_STATES",
           "PRECISIONS", "DEFAULT_PRECISION"]

_MULT = np.array([1.0, 1.0, 1.0, 2.0, 2.0, 2.0, 2.0, 2.0, 2.0])


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


def _strata(rows, alive) -> list:
    """Per-draw terms ``rows (R, ...)`` as the parts of a stratified variance (module docstring,
    draw schedules): the draws that stopped at the same grid time (``alive``: draws propagated at
    each grid time, :func:`retina.spin.sampling_result.alive_counts`) form a stratum, each scaled by
    its share ``n_s / R`` so that the sample variance of a part over its ``n_s`` rows, divided by
    ``n_s``, is ``n_s s_s^2 / R^2`` and the parts' means add up to the mean of ``rows``."""
    r = rows.shape[0]
    depth = (np.asarray(alive)[None, :] > np.arange(r)[:, None]).sum(axis=1)   # grid times per draw
    edges = [0] + [i for i in range(1, r) if depth[i] != depth[i - 1]] + [r]
    if len(edges) == 2:
        return [rows]
    return [rows[i0:i1] * ((i1 - i0) / r) for i0, i1 in zip(edges, edges[1:])]


def _field_hams(rads, bvec):
    """Per radical and block the Hamiltonian for field ``bvec`` (tesla) and its rigorous spectral
    bounds (Gershgorin, Weyl per nucleus and per group: :func:`retina.spin._propagation.block_hamiltonian`)."""
    return [[_prop.block_hamiltonian(pb, bvec) for pb in prepared] for prepared, _ in rads]


def _spread_sum(hams, k: float) -> float:
    """The sum of the two radicals' bounded spectral spreads (largest over their blocks)."""
    return sum(max(max(hi - lo for _, lo, hi in hs), 1e-30 * k) for hs in hams)


def _run_spread(system, fields) -> float:
    """The largest spread sum over the field vectors ``fields (F, 3)`` (tesla): it sets the run's
    time grid (module docstring, time quadrature), so every field of a run shares one grid and the
    result does not depend on how the fields are grouped (``block_width``, ``n_jobs``)."""
    rads = [(_prop.prepare(rad), None) for rad in system.radicals]
    k = float(system.k_singlet)
    return max(_spread_sum(_field_hams(rads, b), k) for b in fields)


def _grid(w_tot: float, k: float, bias_tol: float, tail, rs):
    """``(h, n_t, alive, gamma, fit_err)``: the time grid for spread sum ``w_tot``, the end
    correction and per radical its draws propagated at each grid time under the draw schedule
    ``tail`` (module docstring)."""
    h = min(0.9 * np.pi / w_tot, 0.5 / k)
    kh = k * h
    gamma, fit_err = _prop.end_correction(k, h, w_tot * h, bias_tol / 10.0)
    n_t = int(math.ceil(math.log(1.5 * kh / (bias_tol * -math.expm1(-kh))) / kh)) + 1
    n_t = max(n_t, gamma.shape[0])
    # draws stop on the grid, after the end correction's samples
    alive = [alive_counts(r, n_t, kh, gamma.shape[0], tail) for r in rs]
    return h, n_t, alive, gamma, fit_err


def _one_field(rads, bvec, k, m_tot, bias_tol, estimator, tail=None, w_tot=None):
    """Estimate and per-draw terms ``[(n_s,), ...]`` for one field vector ``bvec`` (tesla), and the
    bound on its deterministic error.  ``tail``: the draw schedule (``tail_split`` of
    :func:`sampled_yields`).  ``w_tot``: the run's spread sum (:func:`_run_spread`; default this
    field's own)."""
    hams = _field_hams(rads, bvec)
    rs = [xis[0].shape[1] for _, xis in rads]
    grid = _grid(_spread_sum(hams, k) if w_tot is None else w_tot, k, bias_tol, tail, rs)
    h, n_t, alive = grid[:3]
    series = [_prop.radical_series(prepared, hs, xis, h, n_t, alive=al)
              for (prepared, xis), hs, al in zip(rads, hams, alive)]
    return _estimate(series, grid, k, m_tot, estimator)


def _fused_fields(rads, bvecs, k, m_tot, bias_tol, estimator, tail, w_tot, dtype=np.float64):
    """:func:`_one_field` for the field vectors ``bvecs (W, 3)`` propagated together
    (:mod:`retina.spin._fused`), on the run's grid ``w_tot``: a list of ``W`` results."""
    hams = [_field_hams(rads, b) for b in bvecs]
    rs = [xis[0].shape[1] for _, xis in rads]
    grid = _grid(w_tot, k, bias_tol, tail, rs)
    h, n_t, alive = grid[:3]
    series = []
    for ri, ((prepared, xis), al) in enumerate(zip(rads, alive)):
        ws = [[b @ pb.block.zeeman for pb in prepared] for b in bvecs]
        series.append(_fused.fused_series(prepared, [hs[ri] for hs in hams], ws, xis, h, n_t, alive=al,
                                          dtype=dtype))
    return [_estimate([series[0][f], series[1][f]], grid, k, m_tot, estimator) for f in range(len(bvecs))]


def _estimate(series, grid, k, m_tot, estimator):
    """Estimate, per-draw terms and bias bound from the two radicals' series on ``grid`` (:func:`_grid`)."""
    h, n_t, alive, gamma, fit_err = grid
    kh = k * h
    # the end-corrected trapezoid rule as weights (linear)
    weights = kh * np.exp(-kh * np.arange(n_t))
    weights[0] *= 0.5
    weights[:gamma.shape[0]] -= gamma
    a_s, b_s = series
    (r_a, r_b), (al_a, al_b) = (a_s.shape[0], b_s.shape[0]), alive
    # each grid time's mean over the draws propagated there (the rest are zero in the series)
    a_m = a_s.sum(axis=0) / al_a[:, None]
    b_m = b_s.sum(axis=0) / al_b[:, None]
    if estimator == "paired":
        # one stratified sum: u_i = sum_j w_j (R / alive_j) [i < alive_j] a_ij b_ij
        f = np.einsum("rjc,rjc,c->rj", a_s, b_s, _MULT)
        rows = 0.25 + (f @ (weights * (r_a / al_a))) / m_tot
        mean = float(rows.mean())
        parts = _strata(rows, al_a)
    else:
        mean = 0.25 + float(np.einsum("jc,jc,c->j", a_m, b_m, _MULT) @ weights) / m_tot
        # jackknife terms of each radical (module docstring), each grid time's draws weighted up
        u = np.einsum("rjc,jc,c->rj", a_s, b_m, _MULT) @ (weights * (r_a / al_a))
        v = np.einsum("jc,rjc,c->rj", a_m, b_s, _MULT) @ (weights * (r_b / al_b))
        parts = _strata(0.25 + u / m_tot, al_a) + _strata(0.25 + v / m_tot, al_b)
    bias = 2.25 * fit_err + 0.75 * kh * math.exp(-kh * n_t) / -math.expm1(-kh)
    return mean, parts, bias


def _sample_directions(system, b_all, n_states, seed, bias_tol, estimator, progress, control="none",
                       basis="lab", tail=None, block_width=1, w_tot=None, precision="double"):
    """Estimates, per-draw terms, bias bound and the per-draw terms without the control for field
    vectors ``b_all (N, 3)`` (tesla, already on the upper hemisphere); the random vectors come from
    ``seed`` alone (``n_states``: an int, or one count per radical).  With ``control="opposite"``
    each field is also sampled at ``-b`` with the same vectors and the two are averaged (module
    docstring); ``basis``, ``tail`` and ``block_width`` as in :func:`sampled_yields`; ``w_tot``
    the run's spread sum (:func:`_run_spread`; default from these fields); ``precision`` as in
    :func:`sampled_yields`."""
    k = float(system.k_singlet)
    rng = np.random.default_rng(seed)
    states = _states_pair(n_states)
    rads = []
    for rad, r in zip(system.radicals, states):
        prepared = _prop.prepare(rad)
        rads.append((prepared, _prop.random_vectors(prepared, r, rng, radical=rad, basis=basis)))
    m_tot = system.radicals[0].dimension * system.radicals[1].dimension / 4.0
    n_dir = b_all.shape[0]
    per_dir = 2 if control == "opposite" else 1
    # every field of the run, each direction followed by its opposite with the control
    fields = np.stack([b_all, -b_all], axis=1).reshape(-1, 3) if per_dir == 2 else np.asarray(b_all)
    if w_tot is None:
        w_tot = max(_spread_sum(_field_hams(rads, b), k) for b in fields)
    width = max(1, int(block_width))
    results = []
    for start in range(0, fields.shape[0], width):
        block = fields[start:start + width]
        if width == 1 and precision == "double":
            results.append(_one_field(rads, block[0], k, m_tot, bias_tol, estimator, tail, w_tot))
        else:
            results.extend(_fused_fields(rads, block, k, m_tot, bias_tol, estimator, tail, w_tot,
                                         PRECISIONS[precision]))
        if progress is not None:
            progress(min(n_dir, len(results) // per_dir), n_dir)
    cols, plain_cols = [], []
    mean = np.empty(n_dir)
    bias = 0.0
    for i in range(n_dir):
        m_i, p_i, b_i = results[per_dir * i]
        if control == "opposite":
            # the control D = Y(b) - Y(-b) (expectation exactly zero) with beta = 1/2
            m_o, p_o, b_o = results[per_dir * i + 1]
            plain_cols.append(p_i)
            m_i = 0.5 * (m_i + m_o)
            p_i = [0.5 * (x + y) for x, y in zip(p_i, p_o)]
            b_i = max(b_i, b_o)
        mean[i] = m_i
        cols.append(p_i)
        bias = max(bias, b_i)

    def stack(columns):        # per part, (n_s, N) from the directions' (n_s,) columns
        return [np.stack([c[j] for c in columns], axis=1) for j in range(len(columns[0]))] if columns else []

    return mean, stack(cols), bias, stack(plain_cols)


def sampled_yields(system, field_uT, directions, *, n_states=DEFAULT_STATES, seed: int = 0,
                   bias_tol: float = DEFAULT_BIAS_TOL, estimator: str = "product",
                   progress: Callable[[int, int], None] | None = None,
                   n_jobs: int | None = None, control: str = DEFAULT_CONTROL,
                   basis: str = DEFAULT_BASIS, tail_split: str | float | None = DEFAULT_TAIL_SPLIT,
                   block_width: int = DEFAULT_BLOCK_WIDTH,
                   precision: str = DEFAULT_PRECISION) -> SampledYields:
    """Singlet-start singlet yields with standard errors, by stochastic trace estimation.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        Separable scope (:func:`retina.spin.separable.check_scope`).
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame.
    n_states : int or (int, int)
        Random vectors per radical (independent draws, >= 2): one count for both radicals, or one
        per radical (A, B; the product estimator only) to spend the draws where the variance is
        (module docstring, unequal states).
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
    control : {"opposite", "none"}
        The control variate (module docstring): ``"opposite"`` also samples ``-b`` with the same
        random vectors and averages (twice the cost); ``"none"`` samples each direction once.
    basis : {"nucleus-axis", "lab"}
        The basis in which the random phases are drawn (module docstring): each nucleus quantised
        along its own dominant hyperfine axis, or the laboratory ``I_z`` basis.
    tail_split : "halving", float or None
        The draw schedule (module docstring): ``"halving"`` (:data:`HALVING`, the default) stops the
        draws in halves, the number still propagated halving every ``ln 2`` lifetimes down to
        :data:`TAIL_STATES`; a number ``T_s`` is the split tail (beyond ``T_s``
        lifetimes ``k t`` only :data:`TAIL_STATES` draws per radical go on); ``None`` propagates
        every draw to the end.
    block_width : int
        Fields propagated together (:mod:`retina.spin._fused`; with the control ``b`` and ``-b`` are
        two fields): the radicals' hyperfine matrices are read once for all their vectors.  ``1``
        propagates field by field.  A pure speed setting: every field of a run shares one time
        grid, so the result does not depend on it beyond the Chebyshev truncation (~1e-12).
    precision : {"double", "single"}
        Real type of the propagated states (:data:`PRECISIONS`): ``"single"`` (complex64 states,
        float32 matrix; sums still in double) halves the memory traffic; the default
        (:data:`DEFAULT_PRECISION`, in the engine's cache key and provenance).  Measured (``benchmarks/bench_spin_fused.py
        --single 4``, axial pairs, 4 + 8 states, load 1.9-2.1): 1.33x faster at 16 nuclei, 1.45x at
        20, bias of the anisotropy 1e-9 and 1.3e-10 against standard errors of 1.3e-4 and 1.1e-4.

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
    pair = n_states if isinstance(n_states, (tuple, list, np.ndarray)) else (n_states, n_states)
    if len(pair) != 2 or any(isinstance(x, bool) or not isinstance(x, (int, np.integer)) or x < 2 for x in pair):
        raise InputError(f"expected at least 2 random states (one count, or one per radical), got {n_states!r}",
                         key="n_states")
    if estimator not in ESTIMATORS:
        raise InputError(f"expected an estimator among {', '.join(ESTIMATORS)}, got {estimator!r}",
                         key="estimator")
    if estimator == "paired" and pair[0] != pair[1]:
        raise InputError(f"the paired estimator needs equal states per radical, got {n_states!r}", key="n_states")
    if not (np.isfinite(bias_tol) and 0 < bias_tol < 1):
        raise InputError(f"expected a bias tolerance between 0 and 1, got {bias_tol!r}", key="bias_tol")
    if control not in CONTROLS:
        raise InputError(f"expected a control among {', '.join(CONTROLS)}, got {control!r}", key="control")
    if basis not in BASES:
        raise InputError(f"expected a sampling basis among {', '.join(BASES)}, got {basis!r}", key="basis")
    tail_split = check_tail_split(tail_split)
    if isinstance(block_width, bool) or not isinstance(block_width, (int, np.integer)) or block_width < 1:
        raise InputError(f"expected a positive whole number of fields per block, got {block_width!r}",
                         key="block_width")
    if precision not in PRECISIONS:
        raise InputError(f"expected a precision among {', '.join(PRECISIONS)}, got {precision!r}", key="precision")
    states = (int(pair[0]), int(pair[1]))
    tail = tail_split
    # directions that share an upper-hemisphere representative (b and -b) share one estimate
    b_all, inverse = np.unique(_upper(dirs) * (float(field_uT) * 1e-6), axis=0, return_inverse=True)
    inverse = np.asarray(inverse).ravel()
    n_dir = b_all.shape[0]
    n_jobs = _check_jobs(n_jobs)
    if progress is not None and n_dir != dirs.shape[0]:
        outer, n_all = progress, dirs.shape[0]

        def progress(done, total):          # in units of the directions asked for
            outer(n_all if done >= total else done * n_all // total, n_all)
    # the run's time grid, from every field it samples (the same whatever the blocks and workers)
    w_tot = _run_spread(system, np.concatenate([b_all, -b_all]) if control == "opposite" else b_all)
    width = int(block_width)
    if n_jobs == 1 or n_dir < 2:
        mean, parts, bias, plain = _sample_directions(system, b_all, states, seed, bias_tol, estimator, progress,
                                                      control, basis, tail, width, w_tot, precision)
    else:
        # worker processes over directions; every worker draws the same random vectors from the
        # seed, so the errors stay shared across directions exactly as in one process
        from joblib import Parallel, delayed

        # tasks hold whole blocks of fields, so that the blocks (and the rounding) do not depend on n_jobs
        unit = width // math.gcd(width, 2 if control == "opposite" else 1)
        step = unit * max(1, -(-max(1, min(_BATCH, -(-n_dir // n_jobs))) // unit))
        starts = list(range(0, n_dir, step))
        results = Parallel(n_jobs=n_jobs, backend="loky", return_as="generator")(
            delayed(_sample_directions)(system, b_all[i:i + step], states, seed, bias_tol, estimator, None, control,
                                        basis, tail, width, w_tot, precision)
            for i in starts)
        means, part_list, plain_list = [], [], []
        bias = 0.0
        for i, (m_i, p_i, b_i, q_i) in zip(starts, results):
            means.append(m_i)
            part_list.append(p_i)
            plain_list.append(q_i)
            bias = max(bias, b_i)
            if progress is not None:
                progress(i + m_i.shape[0], n_dir)
        mean = np.concatenate(means)
        parts = [np.concatenate([p[j] for p in part_list], axis=1) for j in range(len(part_list[0]))]
        plain = ([np.concatenate([p[j] for p in plain_list], axis=1) for j in range(len(plain_list[0]))]
                 if plain_list[0] else [])
    mean = mean[inverse]
    parts = [p[:, inverse] for p in parts]
    plain = [p[:, inverse] for p in plain]
    se = np.sqrt(sum(np.var(p, axis=0, ddof=1) / p.shape[0] for p in parts))
    # radical A's parts lead (product estimator): one per stratum of its draws (the run's grid)
    alive_a = _grid(w_tot, float(system.k_singlet), bias_tol, tail, states)[2][0]
    parts_a = len(parts) if estimator == "paired" else len(_strata(np.zeros((states[0], 1)), alive_a))
    return SampledYields(mean, se, tuple(parts), bias, estimator, max(states), control, tuple(plain),
                         states=states, basis=basis, tail_split=tail_split, parts_a=parts_a,
                         precision=precision)


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
    factor); with each radical's cost at ``R`` states from :func:`cost_model`'s model, the
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
        Worker processes over the pilot's directions (as in :func:`sampled_yields`).
    control : {"opposite", "none"}
        The final run's control variate (:func:`sampled_yields`).
    basis : str
        The final run's basis of the random phases (:func:`sampled_yields`).
    tail_split : "halving", float or None
        The final run's draw schedule (:func:`sampled_yields`).

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
    pilot = sampled_yields(system, field_uT, dirs[pick], n_states=PILOT_STATES, seed=seed + 1, n_jobs=n_jobs,
                           control=control, basis=basis, tail_split=tail_split)
    se = float(np.max(pilot.standard_error))
    var_a, var_b = pilot.radical_variances()
    worst = int(np.argmax(var_a + var_b))
    s_pilot = schedule_variance(PILOT_STATES, tail_split)
    v = [float(var_a[worst]) / s_pilot, float(var_b[worst]) / s_pilot]
    return cheapest_states(system, field_uT, v, accuracy**2 / 1.2, tail_split), se


def yields(system, field_uT, directions, *, n_states: int = DEFAULT_STATES, seed: int = 0,
           progress: Callable[[int, int], None] | None = None, control: str = DEFAULT_CONTROL) -> np.ndarray:
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
    control : {"opposite", "none"}
        The control variate (:func:`sampled_yields`).

    Returns
    -------
    ndarray (N,)
        The estimates (product estimator).

    See :func:`sampled_yields` for the standard errors; the reported-yield conversion is the
    exact affine map of :func:`retina.spin.system.equal_rate_reported_yield`, so the standard
    error of a reported singlet yield from a triplet start is a third of the singlet-start one.
    """
    res = sampled_yields(system, field_uT, directions, n_states=n_states, seed=seed, progress=progress,
                         control=control)
    return equal_rate_reported_yield(system, res.mean)
