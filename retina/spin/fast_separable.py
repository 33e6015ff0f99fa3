r"""Fast exact separable-radicals method: correlation functions on a time grid (``"separable-fast"``).

Scope
-----
The scope of :mod:`retina.spin.separable` (uncoupled electrons, equal rates ``k``, no relaxation);
:func:`retina.spin.separable.check_scope` is reused.  The result is the same quantity, computed to a
stated absolute tolerance ``tol`` (default ``1e-10``) at a cost set by the two radicals'
eigendecompositions instead of the ``O(d_A^2 d_B^2)`` pair sum.

Derivation
----------
Notation of :mod:`retina.spin.separable` (angular-frequency units, ``hbar = 1``).  There it is shown
that, for a singlet start,

    Phi_S = 1/4 + (1/M) int_0^inf k exp(-k t) F(t) dt,   F(t) = sum_{a,b} C^A_ab(t) C^B_ab(t),
    C^r_ab(t) = Tr_r[S_a S_b(t)] = sum_{m,n} (S_a)_mn (S_b)_nm exp(i omega_mn t),
    omega_mn = lambda_n - lambda_m,

with ``lambda`` the eigenvalues of radical ``r`` and ``S`` its electron spin in its eigenbasis.
Facts used below (each follows from ``S_a`` Hermitian):

1. The weight of ``(n, m)`` is the conjugate of the weight ``w_ab,mn = (S_a)_mn conj((S_b)_mn)``
   of ``(m, n)`` at the opposite frequency, so every ``C^r_ab(t)`` is real.  Split it into the part
   symmetric and antisymmetric in ``ab``; with eigenvalues in ascending order and ``m < n``
   (``omega_mn >= 0``),

       Cs_ab(t) = D_ab + 2 sum_{m<n} Re(w_ab,mn) cos(omega_mn t),   D_ab = sum_m (S_a)_mm (S_b)_mm,
       Ca_ab(t) = -2 sum_{m<n} Im(w_ab,mn) sin(omega_mn t),

   and ``F = sum_ab (Cs^A_ab Cs^B_ab + Ca^A_ab Ca^B_ab)``: six symmetric and three antisymmetric
   real-weighted trigonometric sums per radical, each over ``d (d - 1) / 2`` frequencies.
2. ``Tr[P_S P_S(t)] = ||P_S U P_S||_F^2`` lies in ``[0, M]``, so ``|F(t)| <= 3M/4``; and by
   Cauchy-Schwarz ``|C^r_ab(t)| <= ||S_a||_F ||S_b||_F = d_r / 4``.

**Time grid (trapezoid rule, exact up to a known kernel).**  Sample ``t_j = j h`` and form
``Q = k h [F(0)/2 + sum_{j>=1} exp(-k t_j) F(t_j)]``.  For one frequency ``Omega`` of ``F`` the
infinite sum is geometric: ``k h [1/2 + sum_{j>=1} exp(-z j h)] = k (h/2) coth(z h / 2)`` with
``z = k - i Omega``, while the integral is ``k / z``.  So, writing ``F = sum_l c_l exp(i Omega_l t)``
(``Omega_l`` running over all sums ``omega^A + omega^B``),

    int_0^inf k e^{-kt} F dt = Q_inf - sum_l c_l g(Omega_l),
    g(Omega) = Re[ k ((h/2) coth(z h / 2) - 1/z) ] = Re[ k sum_{m != 0} 1 / (z - 2 pi i m / h) ],

the real part because ``F`` is real and even, so its spectrum is real and symmetric.  ``g`` is the
trapezoid rule's aliasing (Poisson-summation) kernel: analytic on ``|Omega| < 2 pi / h`` and of size
``~ (k h)^2 / 12``; it is *not* an error term to be hoped small but an exact correction, evaluated as
described next.  We take ``h = theta pi / W`` with ``W = W_A + W_B``, ``W_r`` the eigenvalue spread
of radical ``r`` (so every ``|Omega| <= W``), ``theta = 0.9``, and ``h <= 0.1 / k``.

**Truncation.**  The sum stops at ``j = N - 1``.  By fact 2 the rest is at most
``(3M/4) k h exp(-k N h) / (1 - exp(-k h))``; ``N`` is chosen to make it ``<= tol M / 4``.

**The correction term, exactly separable.**  ``sum_l c_l g(Omega_l)`` is a sum over all pairs of an
A frequency ``x`` and a B frequency ``y`` of ``g(x + y)``.  On ``[-W_A, W_A] x [-W_B, W_B]`` ``g(x+y)``
is analytic (nearest singularity at ``|x + y| = 2 pi / h = 2 W / theta``), so a tensor Chebyshev expansion
``g(x + y) ~ sum_pq c_pq T_p(x / W_A) T_q(y / W_B)`` converges geometrically, and the correction
becomes ``sum_comp sum_pq c_pq mu^A_p mu^B_q`` with Chebyshev moments ``mu^r_p = sum c^r T_p(omega /
W_r)`` of each radical's spectrum: ``O(d^2 P)`` work.  Its error is at most ``(9/4) M`` times the
largest difference between ``g`` and the truncated expansion (``sum |weights|`` per radical is at
most ``d_r / 4`` by Cauchy-Schwarz, fact 2), which is measured on a dense check grid.

**The time series: a type-1 non-uniform FFT.**  ``sum_{m<n} r_mn exp(i j omega_mn h)`` for
``j = 0 .. N-1`` is a type-1 NUFFT with points ``x = omega h`` and real weights ``r``.  Points are
spread onto a uniform grid of ``n_f = 4 N`` nodes with the "exponential of semicircle" kernel
``phi(z) = exp(beta (sqrt(1 - z^2) - 1))`` of width ``w`` nodes (``beta = 2.30 w``), the grid is
Fourier transformed and divided by the kernel's transform ``psi`` (A. H. Barnett, J. Magland and
L. af Klinteberg, SIAM J. Sci. Comput. 41, C479 (2019); parameters from memory), its value at each
of the ``w`` nodes evaluated as a polynomial in the point's offset inside a grid cell (Horner's rule,
:func:`_kernel_poly`; the same paper evaluates its kernel this way).  The relative error
``|sum_g phi(..) e^{i j x_g} / psi(j) - e^{i j x}|`` depends only on ``j / n_f`` and the point's offset
inside a grid cell, so it is *measured* once per width on a dense set of both
(:func:`nufft_error`), and ``w`` is the smallest width meeting the budget.  The error in each
``C^r`` is then at most ``2 eps sum |r|`` and propagates to ``Phi`` through fact 2.

The stated bound (returned by :func:`singlet_start_singlet_yield` with ``return_bound=True``) is
the sum of the four parts (truncation, correction, both NUFFTs); rounding in the FFT (~1e-15
relative) is not counted.  The spreading and the Chebyshev moments run in one numba pass over the
``d (d - 1) / 2`` pairs of each radical; the eigenbasis spin operators come from two half-size
products (``S_z = V_up^+ V_up - 1/2``, ``S_+ = V_up^+ V_down``).  Cost per direction: two
eigendecompositions (``O(d_A^3 + d_B^3)``), ``O(d_A^2 + d_B^2)`` spreading and ``O(N log N)`` FFTs
with ``N ~ 28 W / (pi theta k)``.

Groups of magnetically equivalent nuclei are reduced exactly: each radical is handled as its
distinct total-spin blocks, each spread with its multiplicity as weight
(:mod:`retina.spin.equivalence`, derivation there), so the eigendecompositions are of block size.

Other starts and reported yields follow from the singlet-start singlet yield exactly as in
:mod:`retina.spin.separable` (:func:`retina.spin.system.equal_rate_reported_yield`).
"""

from __future__ import annotations

import functools
import math
from typing import Callable

import numba
import numpy as np
import scipy.fft
import scipy.linalg

from retina.spin._spectral import aliasing_kernel, spread_bound
from retina.spin.separable import _check_inputs, check_scope
from retina.spin.system import equal_rate_reported_yield

__all__ = ["yields", "singlet_start_singlet_yield", "nufft_error", "working_bytes", "plan",
           "DEFAULT_TOL"]

#: Default absolute tolerance on each yield.
DEFAULT_TOL = 1e-10
#: Fraction of the aliasing-free step: ``h = THETA pi / (W_A + W_B)``.
THETA = 0.9
#: Upper bound on ``k h``.
MAX_KH = 0.1
#: Multiplicities of the nine correlation components (xx, yy, zz, xy, xz, yz sym; xy, xz, yz anti).
_MULT = np.array([1.0, 1.0, 1.0, 2.0, 2.0, 2.0, 2.0, 2.0, 2.0])
_PAIRS = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))


# ------------------------------------------------------------------------------------------------
# The NUFFT kernel and its measured error
# ------------------------------------------------------------------------------------------------

def _beta(width: int) -> float:
    return 2.30 * width


def _phi(z, beta):
    t = 1.0 - np.asarray(z, dtype=float) ** 2
    return np.where(t > 0, np.exp(beta * (np.sqrt(np.clip(t, 0, None)) - 1.0)), 0.0)


@functools.lru_cache(maxsize=32)
def _gl(nq: int):
    return np.polynomial.legendre.leggauss(nq)


def _psi(rho: np.ndarray, width: int) -> np.ndarray:
    """Fourier transform of the spread kernel at ``rho = j / n_f`` (grid units), shape of ``rho``.

    Derived: ``sum_g phi((g - u) / (w/2)) e^{2 pi i rho g} ~ e^{2 pi i rho u} psi(rho)`` with
    ``psi(rho) = (w/2) int_{-1}^{1} phi(z) cos(pi rho w z) dz`` (Gauss-Legendre, 4 w + 40 nodes).
    """
    z, wq = _gl(4 * width + 40)
    ph = _phi(z, _beta(width)) * wq
    rho = np.asarray(rho, dtype=float)
    return 0.5 * width * (np.cos(np.pi * width * rho[..., None] * z) @ ph)


@functools.lru_cache(maxsize=8)
def _psi_grid(n_t: int, width: int) -> np.ndarray:
    """``psi(j / (4 n_t))`` for ``j = 0 .. n_t - 1`` (read-only, cached)."""
    out = _psi(np.arange(n_t) / (4.0 * n_t), width)
    out.flags.writeable = False
    return out


@functools.lru_cache(maxsize=32)
def _kernel_poly(width: int) -> np.ndarray:
    """Piecewise-polynomial form of the spread kernel, ``(width + 3, width)``, highest power first.

    Column ``i`` holds the power-series coefficients, in ``x = 2 s - 1``, of the kernel's value at the
    ``i``-th node, ``phi((s + i - w/2) / (w/2))``, where ``s`` in ``[0, 1)`` is the distance from
    ``u - w/2`` up to the first node: the Chebyshev interpolant of degree ``w + 2`` (numpy's
    ``chebfit`` at Chebyshev points, converted with ``cheb2poly``).  Evaluating it by Horner's rule
    replaces ``w`` exponentials and square roots per point by multiply-adds; its own error (about
    1e-2 of the NUFFT error, dominated by the kernel's square-root edge) is included in
    :func:`nufft_error`, which measures the whole pass with this very kernel.
    """
    from numpy.polynomial import chebyshev

    deg = width + 2
    half = width / 2.0
    beta = _beta(width)
    x = np.cos(np.pi * (np.arange(deg + 1) + 0.5) / (deg + 1))
    rows = []
    for i in range(width):
        c = chebyshev.chebfit(x, _phi(((x + 1.0) / 2.0 + i - half) / half, beta), deg)
        pw = np.zeros(deg + 1)
        full = chebyshev.cheb2poly(c)                       # may come back shorter (trimmed zeros)
        pw[:full.size] = full
        rows.append(pw[::-1])
    out = np.ascontiguousarray(np.array(rows).T)               # (width + 3, width): power, node
    out.flags.writeable = False
    return out


def _kernel_nodes(width: int, s) -> np.ndarray:
    """Kernel values at the ``width`` nodes for offsets ``s (n,)`` in ``[0, 1)``, shape (n, width),
    from :func:`_kernel_poly` (Horner's rule, as the compiled pass evaluates them)."""
    coef = _kernel_poly(width)
    x = 2.0 * np.asarray(s, dtype=float)[:, None] - 1.0
    v = np.zeros((x.shape[0], width))
    for p in range(coef.shape[0]):
        v = v * x + coef[p][None, :]
    return v


@functools.lru_cache(maxsize=32)
def nufft_error(width: int) -> float:
    """Largest relative error of the spread-FFT-divide approximation of ``e^{i j x}``, measured.

    Over ``j / n_f`` in ``[0, 1/4]`` (513 values; this module uses ``n_f = 4 N``) and the offset of
    the point inside a grid cell (32 values), the quantity
    ``|sum_g phi_w(g - u) e^{2 pi i rho (g - u)} / psi(rho) - 1|`` with the kernel values exactly as
    the compiled pass forms them (:func:`_kernel_poly`); it depends on nothing else (derived in the
    module docstring).  A safety factor 2 covers the sampling (on a four times denser sampling the
    largest value grew by less than 10 %).
    """
    half = width / 2.0
    rho = np.linspace(0.0, 0.25, 513)
    psi = _psi(rho, width)
    worst = 0.0
    u = np.arange(32) / 32.0
    i0 = np.ceil(u - half)
    ker = _kernel_nodes(width, i0 - u + half)                     # (32, width)
    for a in range(u.size):
        g = i0[a] + np.arange(width)
        s = np.exp(2j * np.pi * rho[:, None] * (g - u[a])[None, :]) @ ker[a]
        worst = max(worst, float(np.max(np.abs(s / psi - 1.0))))
    return 2.0 * worst


def _width_for(eps: float) -> int:
    # the error falls about tenfold per unit of width (measured by nufft_error); start just below
    for w in range(max(6, int(-math.log10(eps)) - 1), 17):
        if nufft_error(w) <= eps:
            return w
    return 16


# ------------------------------------------------------------------------------------------------
# The aliasing kernel g and its tensor Chebyshev expansion
# ------------------------------------------------------------------------------------------------

#: The trapezoid rule's aliasing kernel (:func:`retina.spin._spectral.aliasing_kernel`).
_g = aliasing_kernel


def _cheb_coeffs(k, h, wa, wb, tol_abs, n_nodes=40):
    """Coefficients ``c_pq`` (P+1, P+1) of ``g(wa x + wb y)`` and the measured max error."""
    t = np.pi * (np.arange(n_nodes) + 0.5) / n_nodes
    x = np.cos(t)
    vals = _g(wa * x[:, None] + wb * x[None, :], k, h)
    tm = np.cos(np.outer(np.arange(n_nodes), t))                 # T_p(x_i)
    c = (2.0 / n_nodes) ** 2 * (tm @ vals @ tm.T)
    c[0, :] *= 0.5
    c[:, 0] *= 0.5
    # smallest P whose discarded coefficients sum to less than a tenth of the budget
    absc = np.abs(c)
    p_max = n_nodes - 1
    for p in range(1, n_nodes):
        if absc[p + 1:, :].sum() + absc[:p + 1, p + 1:].sum() <= 0.1 * tol_abs:
            p_max = p
            break
    c = c[:p_max + 1, :p_max + 1]
    # measured error on a dense check grid that excludes the nodes
    xc = np.linspace(-1.0, 1.0, 61)
    tx = np.cos(np.outer(np.arange(p_max + 1), np.arccos(xc)))
    approx = tx.T @ c @ tx
    err = float(np.max(np.abs(approx - _g(wa * xc[:, None] + wb * xc[None, :], k, h))))
    return c, err


# ------------------------------------------------------------------------------------------------
# The one pass over a radical's frequency pairs
# ------------------------------------------------------------------------------------------------

@numba.njit(cache=True, nogil=True)
def _spread_and_moments(lam, spt, szt, weight, h, nf, width, kpoly, inv_w, n_mom, grid, mom, absw):
    """Spread the nine real weights of every pair ``m < n`` onto ``grid (9, nf)``, accumulate the
    Chebyshev moments ``mom (9, n_mom)`` of ``omega / W`` (sym components even orders, antisymmetric
    components odd orders; the others vanish) and the absolute weight sums ``absw (9,)``.

    ``spt`` is the transpose of ``S_+`` in the eigenbasis (so ``S_x = (S_+ + S_+^+)/2``,
    ``S_y = (S_+ - S_+^+)/2i``), ``szt`` the transpose of ``S_z`` holding it on and above the
    diagonal (so on and below its own; transposes because BLAS returns Fortran-ordered products,
    whose transposes are C-ordered views, no copies); every weight is multiplied by ``weight`` (a
    block's multiplicity, :mod:`retina.spin.equivalence`); the kernel's node values come from the
    polynomials ``kpoly`` of :func:`_kernel_poly`."""
    d = lam.shape[0]
    half = 0.5 * width
    n_coef = kpoly.shape[0]
    scale = nf * h / (2.0 * np.pi)
    ker = np.empty(width)
    tp = np.empty(n_mom)
    rr = np.empty(9)
    for m in range(d):
        for n in range(m + 1, d):
            p_mn = spt[n, m]
            p_nm = spt[m, n].conjugate()
            ax = 0.5 * (p_mn + p_nm)
            ay = -0.5j * (p_mn - p_nm)
            az = szt[n, m]
            rr[0] = ax.real * ax.real + ax.imag * ax.imag
            rr[1] = ay.real * ay.real + ay.imag * ay.imag
            rr[2] = az.real * az.real + az.imag * az.imag
            # a conj(b) = (ar br + ai bi) + i (ai br - ar bi)
            rr[3] = ax.real * ay.real + ax.imag * ay.imag
            rr[4] = ax.real * az.real + ax.imag * az.imag
            rr[5] = ay.real * az.real + ay.imag * az.imag
            rr[6] = ax.imag * ay.real - ax.real * ay.imag
            rr[7] = ax.imag * az.real - ax.real * az.imag
            rr[8] = ay.imag * az.real - ay.real * az.imag
            for c in range(9):
                rr[c] *= weight
            om = lam[n] - lam[m]
            u = om * scale
            i0 = int(np.ceil(u - half))
            x = 2.0 * (i0 - u + half) - 1.0
            for i in range(width):
                ker[i] = kpoly[0, i]
            for q in range(1, n_coef):        # Horner's rule, vectorised across the nodes
                for i in range(width):
                    ker[i] = ker[i] * x + kpoly[q, i]
            g = i0 % nf                       # one modulo per pair, then a wrap test per node
            for i in range(width):
                kv = ker[i]
                for c in range(9):
                    grid[c, g] += rr[c] * kv
                g += 1
                if g == nf:
                    g = 0
            xq = om * inv_w
            tp[0] = 1.0
            if n_mom > 1:
                tp[1] = xq
            for p in range(2, n_mom):
                tp[p] = 2.0 * xq * tp[p - 1] - tp[p - 2]
            for c in range(9):
                r = rr[c]
                absw[c] += abs(r)
                for p in range(0 if c < 6 else 1, n_mom, 2):
                    mom[c, p] += r * tp[p]


def _eigen_spin(h_full, n_nuc):
    """Eigenvalues (ascending), ``S_+`` and ``S_z`` (upper triangle) in the eigenbasis (Fortran
    ordered, as BLAS returns them).

    The ``evr`` driver: at ``d = 576`` it took 0.28-0.34 s against 0.34-0.46 s for ``evd`` (best of
    six alternating calls, shared machine).  The matrix stays complex: a real symmetric form needs
    an antiunitary symmetry, and a product of complex conjugation with spin rotations of the
    electron and each nucleus leaves the Hamiltonian invariant only when every ``A_i A_i^T`` shares
    an eigenvector perpendicular to the field (derived from the conditions ``M_xy = M_yx = M_yz =
    M_zy = 0`` on each rotated tensor ``M = R_e^T A_i R_i`` and ``b_y = 0``), which generic
    anisotropic tensors do not.
    """
    lam, v = scipy.linalg.eigh(h_full, driver="evr", overwrite_a=True, check_finite=False)
    up = np.asfortranarray(v[:n_nuc])
    dn = np.asfortranarray(v[n_nuc:])
    # S_z = V_up^+ V_up - 1/2 (V is unitary); only the upper triangle is formed (zherk)
    sz = scipy.linalg.blas.zherk(1.0, up, trans=2, lower=0)
    sz[np.diag_indices_from(sz)] -= 0.5
    sp = scipy.linalg.blas.zgemm(1.0, up, dn, trans_a=2)
    # both products come back Fortran-ordered (their transposes, which the pass reads, are
    # C-ordered views: no copies)
    return lam, sp, sz


def _with_zeeman(h_hf, w):
    """``h_hf + w . S`` for the electron as the first factor, in O(d) on a copy: ``w . S`` is
    ``(w_z / 2) diag(1, -1)`` and ``(w_x -+ i w_y) / 2`` times the identity on the off-diagonal
    halves (the electron spin matrices)."""
    n = h_hf.shape[0] // 2
    out = np.array(h_hf, dtype=complex, order="C")
    idx = np.arange(n)
    out[idx, idx] += 0.5 * w[2]
    out[idx + n, idx + n] -= 0.5 * w[2]
    out[idx, idx + n] += 0.5 * (w[0] - 1j * w[1])
    out[idx + n, idx] += 0.5 * (w[0] + 1j * w[1])
    return out


def _radical_pass(blocks, h, n_t, width, n_mom, w_spread):
    """One radical's time series (n_t, 9) of Cs/Ca, the Chebyshev moments of its full spectra
    (9, n_mom) and its absolute weight sums (9,), from ``blocks = [(lam, sp, sz, multiplicity)]``."""
    nf = 4 * n_t
    grid = np.zeros((9, nf))                    # component-major: each row transformed in place
    mom = np.zeros((9, n_mom))
    absw = np.zeros(9)
    diag = np.zeros(6)
    for lam, sp, sz, mult in blocks:
        _spread_and_moments(lam, sp.T, sz.T, float(mult), h, nf, width, _kernel_poly(width), 1.0 / w_spread, n_mom,
                            grid, mom, absw)
        dp = sp.diagonal()
        dx, dy, dz = dp.real, dp.imag, sz.diagonal().real        # diagonal of S_x, S_y, S_z
        diag += mult * np.array([dx @ dx, dy @ dy, dz @ dz, dx @ dy, dx @ dz, dy @ dz])
    # sum_g b_g e^{-2 pi i j g / nf}, transformed along contiguous rows
    spec = scipy.fft.rfft(grid, axis=1, overwrite_x=True)[:, :n_t]
    inv_psi = 2.0 / _psi_grid(n_t, width)[None, :]
    series_t = np.empty((9, n_t))
    # G = conj(spec) / psi;  Cs = D + 2 Re G,  Ca = -2 Im G = 2 Im(spec) / psi
    series_t[:6] = diag[:, None] + spec[:6].real * inv_psi
    series_t[6:] = spec[6:].imag * inv_psi
    series = series_t.T                                               # (n_t, 9), a view
    # full-spectrum moments: sym comps even p only (+ diagonal at omega = 0), anti comps odd p only
    p = np.arange(n_mom)
    full = np.zeros((9, n_mom), dtype=complex)
    even = (p % 2 == 0)
    full[:6, even] = 2.0 * mom[:6, even] + diag[:, None] * np.cos(p[even] * np.pi / 2)[None, :]
    full[6:, ~even] = 2j * mom[6:, ~even]
    return series, full, absw


def plan(wa: float, wb: float, k: float, tol: float = DEFAULT_TOL) -> dict:
    """Time step, number of samples and NUFFT width for spreads ``wa``, ``wb`` (rad s^-1) and rate ``k``.

    Parameters
    ----------
    wa, wb : float
        The two radicals' spectral spreads, rad s^-1.
    k : float
        Recombination rate, s^-1.
    tol : float
        Absolute tolerance on the yield.

    Returns
    -------
    dict
        ``h`` (s), ``n_t``, ``width``, ``eps_nufft``.
    """
    w_tot = max(wa + wb, 1e-300)
    h = min(THETA * np.pi / w_tot, MAX_KH / k)
    kh = k * h
    # tail <= (3/4) kh exp(-k N h) / (1 - exp(-kh)) <= tol / 4
    n_t = int(math.ceil(math.log(3.0 * kh / (tol * -math.expm1(-kh))) / kh)) + 1
    # rounded up onto a ladder of ratio 2^(1/4), so that directions share the cached kernel transform
    n_t = scipy.fft.next_fast_len(int(math.ceil(2.0 ** (math.ceil(4 * math.log2(max(n_t, 16))) / 4))),
                                  real=True)
    eps = tol / 40.0
    width = _width_for(eps)
    return {"h": h, "n_t": n_t, "width": width, "eps_nufft": nufft_error(width)}


def _one_direction(rads, bvec, k, tol):
    """Singlet-start singlet yield and its error bound for one field vector ``bvec`` (tesla).

    ``rads`` holds, per radical, its dimension and its blocks ``[Block]`` (one block when no nuclei
    are equivalent)."""
    eig = []
    for _, blocks in rads:
        per = []
        for blk in blocks:
            w = bvec @ blk.zeeman
            hmat = _with_zeeman(blk.h_hf, w)
            per.append(_eigen_spin(hmat, blk.dimension // 2) + (blk.multiplicity,))
        eig.append(per)
    spreads = [max(max(e[0][-1] - e[0][0] for e in per), 1e-30 * k) for per in eig]
    pl = plan(spreads[0], spreads[1], k, tol)
    h, n_t, width = pl["h"], pl["n_t"], pl["width"]
    dims = [d for d, _ in rads]
    m_tot = dims[0] * dims[1] / 4.0
    cheb, cheb_err = _cheb_coeffs(k, h, spreads[0], spreads[1], tol / 4.0 / 2.25)
    n_mom = cheb.shape[0]
    out = [_radical_pass(per, h, n_t, width, n_mom, s) for per, s in zip(eig, spreads)]
    (sa, ma, aa), (sb, mb, ab) = out
    f = (sa * sb) @ _MULT                                        # F(t_j), (n_t,)
    kh = k * h
    decay = np.exp(-kh * np.arange(n_t))
    q = kh * (np.dot(decay, f) - 0.5 * f[0])
    corr = float(np.sum(_MULT * np.einsum("cp,pq,cq->c", ma, cheb, mb).real))
    phi = 0.25 + (q - corr) / m_tot
    # error bound (module docstring)
    eps = pl["eps_nufft"]
    da = 2.0 * eps * aa
    db = 2.0 * eps * ab
    df = float(np.sum(_MULT * (da * dims[1] / 4.0 + db * dims[0] / 4.0 + da * db)))
    nufft_bound = df * kh / -math.expm1(-kh) / m_tot
    tail = 0.75 * kh * math.exp(-kh * n_t) / -math.expm1(-kh)
    bound = tail + 2.25 * cheb_err + nufft_bound
    return phi, bound


#: Directions per worker task when ``n_jobs > 1``.
_BATCH = 8


def _operators(system):
    """Per radical: its dimension and its total-spin blocks (:mod:`retina.spin.equivalence`)."""
    import dataclasses

    from retina.spin.equivalence import radical_blocks

    # large radicals are built sparse (Kronecker products of sparse factors are far cheaper than
    # dense ones there), then made dense; small ones directly dense (less overhead)
    out = []
    for r in system.radicals:
        if r.dimension > _SPARSE_BUILD_FROM:
            blocks = [dataclasses.replace(b, s_e=np.stack([x.toarray() for x in b.s_e]), h_hf=b.h_hf.toarray())
                      for b in radical_blocks(r, sparse=True)]
        else:
            blocks = radical_blocks(r)
        out.append((r.dimension, blocks))
    return out


#: Radical dimension above which operators are built sparse first (measured: dense is faster at 144,
#: sparse three times faster at 576).
_SPARSE_BUILD_FROM = 256


#: The last system's operators in this process (a worker reuses them across its batches).
_LAST_OPERATORS: dict = {}


def _batch(system, bvecs, k, tol):
    """Yields and bounds for a batch of field vectors (one worker task)."""
    import pickle

    key = pickle.dumps(system)
    rads = _LAST_OPERATORS.get(key)
    if rads is None:
        rads = _operators(system)
        _LAST_OPERATORS.clear()
        _LAST_OPERATORS[key] = rads
    res = [_one_direction(rads, bv, k, tol) for bv in bvecs]
    return np.array([r[0] for r in res]), np.array([r[1] for r in res])


def working_bytes(system) -> int:
    """Peak working memory of :func:`yields`, bytes (per direction; directions run one at a time).

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        The pair.

    Returns
    -------
    int
    """
    # both radicals' eigenvalues and three spin components, plus the Hamiltonian, eigenvectors and
    # two products of the radical being decomposed (complex, 16 bytes), per worker
    from retina.spin.equivalence import reduced_dimensions
    d2 = [d * d for r in system.radicals for d, _ in reduced_dimensions(r)]
    # time grid: n_t ~ 28 W / (pi theta k) samples; the spread grid (4 n_t x 9 doubles), its
    # transpose and transform, and the two radicals' series take about 1100 bytes per sample
    w_tot = sum(spread_bound(r, 50.0) for r in system.radicals)
    k = float(system.k_singlet)
    n_t = 28.0 / (k * min(THETA * np.pi / max(w_tot, 1e-30), MAX_KH / k))
    return int(16 * (3 * sum(d2) + 4 * max(d2)) + 1100 * n_t + 2**20)


def _check_jobs(n_jobs) -> int:
    from retina.errors import InputError

    if n_jobs is None:
        return 1
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs < 1:
        raise InputError(f"expected a positive whole number of worker processes, got {n_jobs!r}",
                         key="n_jobs")
    return int(n_jobs)


def singlet_start_singlet_yield(system, field_uT, directions, *, tol: float = DEFAULT_TOL,
                                progress: Callable[[int, int], None] | None = None,
                                return_bound: bool = False, n_jobs: int | None = None):
    """Singlet yield from a singlet start by the time-grid method (module docstring).

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        Must pass :func:`retina.spin.separable.check_scope`.
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame (normalised here).
    tol : float
        Absolute tolerance on each yield (> 0).
    progress : callable(done, total), optional
    return_bound : bool
        Also return the stated error bound of each yield.
    n_jobs : int, optional
        Worker processes over directions (joblib, loky backend; default 1).

    Returns
    -------
    ndarray (N,)
        Yields; with ``return_bound`` a tuple ``(yields, bounds)`` of two (N,) arrays.
    """
    from retina.errors import InputError

    check_scope(system)
    dirs = _check_inputs(field_uT, directions)
    if not (np.isfinite(tol) and 1e-14 <= tol < 1):
        raise InputError(f"expected a tolerance between 1e-14 and 1, got {tol!r}", key="tol")
    b = dirs * (float(field_uT) * 1e-6)
    k = float(system.k_singlet)
    n_dir = dirs.shape[0]
    out = np.empty(n_dir)
    bounds = np.empty(n_dir)
    n_jobs = _check_jobs(n_jobs)
    if n_jobs == 1:
        rads = _operators(system)
        results = (_one_direction(rads, b[i], k, tol) for i in range(n_dir))
        for i, (phi, bound) in enumerate(results):
            out[i], bounds[i] = phi, bound
            if progress is not None:
                progress(i + 1, n_dir)
    else:
        # worker processes (scipy's LAPACK wrappers hold the GIL, so threads would not overlap),
        # each given a batch of directions so that the radical operators are built once per batch
        from joblib import Parallel, delayed

        step = max(1, min(_BATCH, -(-n_dir // n_jobs)))
        starts = range(0, n_dir, step)
        results = Parallel(n_jobs=n_jobs, backend="loky", return_as="generator")(
            delayed(_batch)(system, b[i:i + step], k, tol) for i in starts)
        for i, (phi, bound) in zip(starts, results):
            stop = i + phi.shape[0]
            out[i:stop], bounds[i:stop] = phi, bound
            if progress is not None:
                progress(stop, n_dir)
    if np.any(bounds > tol):
        raise RuntimeError(f"the fast separable method's error bound {bounds.max():.3g} exceeds the "
                           f"tolerance {tol:.3g}; report this with the spin system")
    return (out, bounds) if return_bound else out


def yields(system, field_uT, directions, *, tol: float = DEFAULT_TOL,
           progress: Callable[[int, int], None] | None = None, n_jobs: int | None = None) -> np.ndarray:
    """The system's reported yield for each field direction, by the fast separable method.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        No exchange or dipolar coupling, equal rates, no relaxation (else InputError).
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame.
    tol : float
        Absolute tolerance on each yield (default 1e-10); the stated bound is checked.
    progress : callable(done, total), optional
    n_jobs : int, optional
        Worker processes over directions (default 1).

    Returns
    -------
    ndarray (N,)
    """
    phi_ss = singlet_start_singlet_yield(system, field_uT, directions, tol=tol, progress=progress,
                                         n_jobs=n_jobs)
    return equal_rate_reported_yield(system, phi_ss)
