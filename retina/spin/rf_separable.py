r"""Separable RF method: exact RF yields of a pair whose electrons do not interact.

Scope
-----
The scope of :mod:`retina.spin.separable` (no exchange, no dipolar coupling, equal rates
``k_S = k_T = k``, no relaxation), with a linearly polarised RF field added as in
:mod:`retina.spin._rf_common`: ``B1 n cos(w t + theta)``, the pair born at a uniformly random phase
``theta``.  Outside the scope :class:`retina.errors.InputError` names the reason; the whole-pair
Floquet solver :func:`retina.spin.rf_floquet.yields_rf` covers everything else.

Derivation
----------
Notation of :mod:`retina.spin.separable` (angular-frequency units, ``hbar = 1``).  The RF field acts
on each electron spin, so ``H(t) = H_A(t) + H_B(t)`` with ``H_r(t) = H_r + V_r cos(w t)``,
``V_r = B1 n . (mu_B / hbar) g_r . S_r``, and the propagator from the birth time ``t0``
(``theta = w t0``) factorises, ``U = U_A U_B``.  The derivation of the static method goes through
unchanged up to

    Phi_S(t0) = 1/4 + (k / M) int_0^inf exp(-k t) sum_{a,b} C^A_ab(t, t0) C^B_ab(t, t0) dt,
    C^r_ab(t, t0) = Tr_r[S_ra U_r^+ S_rb U_r],    U_r = U_r(t0 + t, t0).

Both correlation functions depend on the same birth phase, so the phase average is taken of the
product, not of each factor.

*Floquet states of one radical.*  ``H_r(t)`` has period ``T = 2 pi / w``; by Floquet's theorem
``U_r(t1, t0) = sum_j |u_j(t1)> <u_j(t0)| exp(-i eps_j (t1 - t0))`` with ``d_r`` quasienergies
``eps_j`` and periodic, orthonormal-at-every-time states ``|u_j(t)> = sum_m exp(i m w t) |u_jm>``.
The Fourier blocks solve the Hermitian Floquet eigenproblem

    (H_r + m w) u_jm + (V_r / 2) (u_j,m-1 + u_j,m+1) = eps_j u_jm,     m = 0, +/-1, ...,

truncated at ``|m| <= N``.  Of each family ``(eps_j + l w, u_j,m-l)`` one member is kept (the
one whose harmonic centroid ``sum_m m |u_jm|^2`` lies in ``[-1/2, 1/2)``; any member gives the
same ``U_r``).  Inserting the expansion,

    C^A_ab(t, t0) = sum_{j,k} <u_j(t0)|S_a|u_k(t0)> <u_k(t1)|S_b|u_j(t1)> exp(i (eps_k - eps_j) t),

with ``t1 = t0 + t``, and likewise for B with states ``p, q``.  Summing over ``a, b`` regroups the
product of the two radicals, exactly as in the static derivation, into::

    sum_ab C^A_ab C^B_ab = sum_{jk,pq} X_{jp,kq}(t0) conj(X_{jp,kq}(t1)) exp(i Omega0 t),
    X_{jp,kq}(tau) = <u_j(tau) u_p(tau)| S_A . S_B |u_k(tau) u_q(tau)>,
    Omega0 = eps_k - eps_j + eps_q - eps_p.

``X(tau)`` is periodic, ``X(tau) = sum_n x_n exp(i n w tau)``; its Fourier coefficients are the
convolution of the radicals' own ones::

    x_n = sum_a sum_s alpha^a_{jk,s} beta^a_{pq,n-s},    alpha^a_{jk,s} = sum_m <u_jm|S_Aa|u_k,m+s>.

*Phase average.*  Averaging over the birth time ``t0`` uniformly over a period (Parseval),
``< X(t0) conj(X(t0 + t)) > = sum_n |x_n|^2 exp(-i n w t)``.  The Laplace transform against
``k exp(-k t)`` gives ``k / (k - i (Omega0 - n w))``; the term ``(kj, qp, -n)`` carries the same
weight with the opposite frequency, so only the real part survives::

    <Phi_S> = 1/4 + (1 / M) sum_{j,k in A} sum_{p,q in B} sum_n |x_n^{jp,kq}|^2
                              k^2 / (k^2 + (eps_k - eps_j + eps_q - eps_p - n w)^2).

Without RF only ``n = 0`` survives and this is the static formula of :mod:`retina.spin.separable`.
The ``(jk) <-> (kj)`` symmetry folds the A sum as there.  Other starts and yields follow as in the
static method (:func:`retina.spin.system.equal_rate_reported_yield`).

Numerics: each radical costs one Hermitian eigenproblem of size ``d_r (2N + 1)`` per direction,
the pair sum ``~ 3 d_A^2 d_B^2 h_A h_B`` multiply-adds (``h_r`` the number of significant
harmonics of ``alpha``, ``beta``, usually 3 to 5 for weak RF) done as one matrix product, never a
``(d_A d_B)^2`` Liouvillian.  ``harmonics="auto"`` doubles ``N`` from 2 until the edge blocks
``u_j,+/-N`` of every kept state are below ``max(0.1 tol, 1e-13)`` in norm (the floor is the
eigensolver's round-off); every solve checks that the kept
states are orthonormal at all times (``sum_m u_jm^+ u_k,m+s = delta_jk delta_s0`` to ``1e-9``),
which fails if the truncation is too short or a family was missed.  Harmonics of ``alpha``,
``beta`` below ``0.1 sqrt(tol)`` relative to the largest are dropped: a dropped harmonic ``delta``
changes ``x_0`` by ``delta^2`` and ``|x_n|^2`` by ``delta^2``, so the yield by about ``tol / 100``.

RF directions: a vector fixed in the molecular frame, ``"parallel"`` or ``"perpendicular"``
(azimuth average with the nested equally spaced rule of :mod:`retina.spin._rf_common`).
"""

from __future__ import annotations

import time
from typing import Callable

import numba
import numpy as np
import scipy.linalg

from retina.errors import InputError, ResourceError
from retina.spin._rf_common import azimuth_mean, check_azimuths, check_harmonics, check_rf, check_tol, perp_basis
from retina.spin.hilbert import validate_field
from retina.spin.separable import check_scope, radical_operators
from retina.spin.system import equal_rate_reported_yield

__all__ = ["yields_rf", "MAX_HARMONICS", "radical_floquet"]

#: Largest Floquet order tried by ``harmonics="auto"``.
MAX_HARMONICS = 512
_ORTHO_LIMIT = 1e-9


def radical_floquet(h0, v, omega, n_h):
    """Floquet states of one radical: ``H(t) = h0 + v cos(omega t)`` truncated at ``|m| <= n_h``.

    Parameters
    ----------
    h0, v : ndarray (d, d) complex Hermitian
        Static Hamiltonian and RF amplitude operator (any consistent angular-frequency unit).
    omega : float
        RF angular frequency, same unit.
    n_h : int
        Truncation order ``N``.

    Returns
    -------
    eps : ndarray (d,)
        Quasienergies of the kept family members.
    u : ndarray (2N + 1, d, d) complex
        ``u[m + N][:, j]`` is the Fourier block ``u_jm``.
    edge : float
        Largest norm of an edge block ``u_j,+/-N`` (truncation indicator).
    ortho : float
        Largest deviation from ``sum_m u_jm^+ u_k,m+s = delta_jk delta_s0`` over ``s``.
    """
    d = h0.shape[0]
    m = 2 * n_h + 1
    big = np.zeros((m * d, m * d), dtype=complex)
    half = 0.5 * v
    for i in range(m):
        sl = slice(i * d, (i + 1) * d)
        big[sl, sl] = h0 + (i - n_h) * omega * np.eye(d)
        if i + 1 < m:
            nx = slice((i + 1) * d, (i + 2) * d)
            big[sl, nx] = half
            big[nx, sl] = half
    evals, vecs = scipy.linalg.eigh(big, driver="evd", check_finite=False)
    blocks = vecs.reshape(m, d, m * d)                         # (m, d, all states)
    weight = np.sum(np.abs(blocks) ** 2, axis=1)               # (m, all)
    centroid = np.arange(-n_h, n_h + 1) @ weight
    keep = np.flatnonzero((centroid >= -0.5) & (centroid < 0.5))
    if keep.size != d:
        keep = _greedy_select(blocks, centroid, d)
    u = blocks[:, :, keep]
    eps = evals[keep]
    edge = float(max(np.max(np.linalg.norm(u[0], axis=0)), np.max(np.linalg.norm(u[-1], axis=0))))
    ortho = 0.0
    eye = np.eye(d)
    for s in range(0, m):
        g = np.einsum("mij,mik->jk", u[:m - s].conj(), u[s:])
        ortho = max(ortho, float(np.max(np.abs(g - (eye if s == 0 else 0.0)))))
    return eps, u, edge, ortho


def _greedy_select(blocks, centroid, d):
    """One member per Floquet family, by increasing ``|centroid|`` and shifted-overlap exclusion.

    Used only when the centroid window does not hold exactly ``d`` states (a centroid at +/- 1/2,
    e.g. two levels mixed half and half at an exact resonance).
    """
    m = blocks.shape[0]
    order = np.argsort(np.abs(centroid), kind="stable")
    chosen: list[int] = []
    for idx in order:
        ok = True
        for c in chosen:
            for s in range(-(m - 1), m):
                a = blocks[max(0, -s):m - max(0, s), :, idx]
                b = blocks[max(0, s):m - max(0, -s), :, c]
                if abs(np.vdot(a, b)) > 0.5:
                    ok = False
                    break
            if not ok:
                break
        if ok:
            chosen.append(int(idx))
            if len(chosen) == d:
                break
    return np.array(sorted(chosen))


def _spin_harmonics(s_e, u, cut):
    """``alpha[a, j, k, s] = sum_m <u_jm|S_a|u_k,m+s>`` for ``s = -S..S`` (trimmed), and ``S``."""
    m = u.shape[0]
    d = u.shape[2]
    ucat = u.transpose(1, 0, 2).reshape(u.shape[1], m * d)      # columns: block m, state k
    full = (ucat.conj().T[None] @ s_e @ ucat[None]).reshape(3, m, d, m, d)   # <u_jm|S_a|u_kn>
    smax = m - 1
    out = np.zeros((3, d, d, 2 * smax + 1), dtype=complex)
    for s in range(-smax, smax + 1):
        lo, hi = max(0, -s), min(m, m - s)
        idx = np.arange(lo, hi)
        out[..., s + smax] = full[:, idx, :, idx + s, :].sum(axis=0)
    mag = np.max(np.abs(out), axis=(0, 1, 2))
    big = np.flatnonzero(mag > cut * mag.max())
    reach = int(max(abs(big - smax).max(), 0)) if big.size else 0
    return out[..., smax - reach:smax + reach + 1], reach


@numba.njit(cache=True, fastmath={"reassoc", "contract", "nsz"})
def _kernel_sum(x, wb, wa, harm, wgt):
    """``sum_{p, a, n} wgt_a |x[p, a, n]|^2 / (1 + (wb_p + wa_a - harm_n)^2)`` (frequencies in units of k)."""
    total = 0.0
    for p in range(x.shape[0]):
        for a in range(x.shape[1]):
            acc = 0.0
            base = wb[p] + wa[a]
            for n in range(x.shape[2]):
                om = base - harm[n]
                v = x[p, a, n]
                acc += (v.real * v.real + v.imag * v.imag) / (1.0 + om * om)
            total += wgt[a] * acc
    return total


class _Radical:
    def __init__(self, radical, scale):
        s_e, h_hf, zee = radical_operators(radical)
        self.s_e, self.h_hf, self.zee, self.scale = s_e, h_hf, zee, scale
        self.d = h_hf.shape[0]

    def hamiltonians(self, b_t, b1_t):
        h0 = (self.h_hf + np.einsum("j,jab->ab", b_t @ self.zee, self.s_e)) * self.scale
        v = np.einsum("j,jab->ab", b1_t @ self.zee, self.s_e) * self.scale
        return h0, v


def _harmonic_cut(tol):
    """Relative size below which a harmonic of ``alpha``, ``beta`` is dropped: the yield error is
    quadratic in it (module docstring), so ``0.1 sqrt(tol)`` keeps it below ``tol / 100``."""
    return 0.1 * np.sqrt(tol)


def _floquet_auto(rad, h0, v, w, harmonics, tol):
    if harmonics != "auto":
        eps, u, edge, ortho = radical_floquet(h0, v, w, int(harmonics))
        return eps, u, int(harmonics), ortho
    # start where the first-order estimate |v| / w of the harmonic decay reaches the target
    ratio = float(np.linalg.norm(v, 2)) / w
    target = max(0.1 * tol, 1e-13)
    n_h = 2
    while ratio ** n_h > target and n_h < 16:
        n_h *= 2
    while True:
        eps, u, edge, ortho = radical_floquet(h0, v, w, n_h)
        if edge < max(0.1 * tol, 1e-13) and ortho < _ORTHO_LIMIT:
            return eps, u, n_h, ortho
        if 2 * n_h > MAX_HARMONICS:
            raise ResourceError(
                f"the Floquet states of one radical did not converge with {n_h} harmonics (edge block "
                f"{edge:.2g}, orthonormality error {ortho:.2g}); the RF field is too strong or too slow for "
                "the Floquet method at this tolerance")
        n_h *= 2


def _pair_value(ra, rb, b_t, b1_t, w, harmonics, tol):
    """Singlet-start singlet yield for one static field and one RF vector (tesla); and the orders used."""
    h0a, va = ra.hamiltonians(b_t, b1_t)
    h0b, vb = rb.hamiltonians(b_t, b1_t)
    ea, ua, na, oa = _floquet_auto(ra, h0a, va, w, harmonics, tol)
    eb, ub, nb, ob = _floquet_auto(rb, h0b, vb, w, harmonics, tol)
    alpha, sa = _spin_harmonics(ra.s_e, ua, _harmonic_cut(tol))       # (3, dA, dA, 2sa+1)
    beta, sb = _spin_harmonics(rb.s_e, ub, _harmonic_cut(tol))        # (3, dB, dB, 2sb+1)
    da, db = ra.d, rb.d
    nn = 2 * (sa + sb) + 1
    # x[jk, pq, n] = sum_a sum_s alpha[a, jk, s] beta[a, pq, n - s]: one matrix product with a
    # Toeplitz arrangement of alpha, shape (3 (2sb+1), dA^2 nn).
    hb = 2 * sb + 1
    toe = np.zeros((3, hb, da * da, nn), dtype=complex)
    af = alpha.reshape(3, da * da, 2 * sa + 1)
    for t in range(hb):                                          # beta harmonic index t - sb
        toe[:, t, :, t:t + 2 * sa + 1] = af                      # n - s = t - sb  ->  n index = s + t
    bf = beta.reshape(3, db * db, hb).transpose(1, 0, 2).reshape(db * db, 3 * hb)
    # fold the A sum: j <= k, weight 2 off the diagonal
    jj, kk = np.triu_indices(da)
    sel = jj * da + kk
    wgt = np.where(jj == kk, 1.0, 2.0)
    x = bf @ toe[:, :, sel, :].reshape(3 * hb, sel.size * nn)    # (dB^2, nA * nn)
    x = x.reshape(db * db, sel.size, nn)
    wa = (ea[kk] - ea[jj])                                       # (nA,)
    pb, qb = np.divmod(np.arange(db * db), db)
    wb = eb[qb] - eb[pb]                                         # (dB^2,)
    harm = np.arange(-(sa + sb), sa + sb + 1) * w
    tot = _kernel_sum(x, wb, wa, harm, wgt)
    m_ab = (da // 2) * (db // 2)
    return 0.25 + float(tot) / m_ab, max(na, nb), max(oa, ob)


def yields_rf(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction="perpendicular", harmonics="auto",
              tol=1e-10, azimuths="auto", progress: Callable[[int, int], None] | None = None, return_info=False,
              angle_deg=90.0):
    """The phase-averaged reported yield under static plus RF field, by the separable RF method.

    Parameters
    ----------
    system : SpinSystem
        Within the separable scope (module docstring), else :class:`InputError`.
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Static field directions in the molecular frame (normalised here).
    rf_MHz : float
        RF frequency, MHz (> 0).
    rf_nT : float
        RF amplitude ``B1``, nT (>= 0); the field is ``B1 n cos(w t + theta)``.
    rf_direction : {"perpendicular", "parallel"} or array_like, shape (3,)
        As in :func:`retina.spin.rf_floquet.yields_rf`.
    angle_deg : float
        With "perpendicular": the RF direction makes this angle with the static field and is
        averaged over its azimuth about it (90, the default, is perpendicular; other angles use
        azimuths over the whole circle, since ``n -> -n`` then leaves the cone).
    harmonics : "auto" or int
        Floquet truncation ``N`` per radical.
    tol : float
        Tolerance on the yield for "auto" harmonics and azimuths.
    azimuths : "auto" or int
        Azimuths for "perpendicular" (a divisor of 64).
    progress : callable(done, total), optional
    return_info : bool
        Also return a dict: ``harmonics`` (N,) largest order used, ``azimuths`` (N,),
        ``orthonormality`` (N,) largest Floquet-state orthonormality error, ``seconds``.

    Returns
    -------
    ndarray, shape (N,)
        Phase-averaged reported yield (dimensionless); with ``return_info`` a tuple ``(yields, info)``.
    """
    check_scope(system)
    src = system.source
    omega, b1, rfdir = check_rf(rf_MHz, rf_nT, rf_direction, source=src)
    if harmonics != "auto":
        harmonics = check_harmonics(harmonics, src)
    tol = check_tol(tol, src)
    azimuths = check_azimuths(azimuths, src)
    b, dirs = validate_field(field_uT, directions, src)
    try:
        alpha = float(np.radians(float(angle_deg)))
    except (TypeError, ValueError):
        alpha = float("nan")
    if not (np.isfinite(alpha) and 0.0 <= alpha <= np.pi):
        raise InputError(f"expected an angle to the static field in 0..180 degrees, got {angle_deg!r}", source=src,
                         key="angle_deg")
    ca, sa = (0.0, 1.0) if float(angle_deg) == 90.0 else (np.cos(alpha), np.sin(alpha))
    span = np.pi if float(angle_deg) == 90.0 else 2 * np.pi
    k = float(system.k_singlet)
    scale = 1.0 / k                                   # dimensionless: frequencies in units of k
    ra, rb = (_Radical(r, scale) for r in system.radicals)
    w = omega * scale
    n = dirs.shape[0]
    out = np.empty(n)
    orders = np.zeros(n, dtype=int)
    n_az = np.ones(n, dtype=int)
    ortho = np.zeros(n)
    t0 = time.perf_counter()
    for i in range(n):
        bd = dirs[i]
        if isinstance(rfdir, str) and rfdir == "perpendicular":
            e1, e2 = perp_basis(bd)

            def value_at(t):  # azimuth phi = span t
                phi = span * t
                nrf = ca * bd + sa * (np.cos(phi) * e1 + np.sin(phi) * e2)
                val, o, err = _pair_value(ra, rb, b * bd, b1 * nrf, w, harmonics, tol)
                orders[i] = max(orders[i], o)
                ortho[i] = max(ortho[i], err)
                return (val,)

            (cur,), kk = azimuth_mean(value_at, azimuths, tol)
            out[i] = cur
            n_az[i] = kk
        else:
            nrf = bd if isinstance(rfdir, str) else rfdir
            out[i], orders[i], ortho[i] = _pair_value(ra, rb, b * bd, b1 * nrf, w, harmonics, tol)
        if progress is not None:
            progress(i + 1, n)
    res = equal_rate_reported_yield(system, out)
    if return_info:
        return res, {"harmonics": orders, "azimuths": n_az, "orthonormality": ortho,
                     "seconds": time.perf_counter() - t0, "method": "separable-floquet", "tol": tol}
    return res
