"""Whole-pair RF method: the exact Floquet-Liouville backward equation.

The RF field, its directions and the azimuth rule follow :mod:`retina.spin._rf_common`; the
pair's static Liouvillian is that of :mod:`retina.spin.liouville` (any rates, exchange, dipolar
coupling, relaxation).  In Liouville space (row-major vectorisation of :mod:`retina.spin.operators`)

    d vec(rho) / dt = (L0 + cos(w t + theta) L1) vec(rho),   L1 = -i [H1, .],

with ``L0`` the complete static Liouvillian (coherent part, Haberkorn recombination, relaxation).
The pair is born at a random RF phase, so the reported yield is the average over ``theta``
(uniform on ``[0, 2 pi)``); the yield at one phase is available too.

Derivation (backward equation)
------------------------------
Write the reported yield as a linear functional of the state at birth, ``Y(theta, rho) =
a(theta) . vec(rho)`` (plain dot product, no conjugation), with ``a = k_S vec(P_S^T)`` integrated
along the future: ``Y = k_S int_0^inf Tr(P_S rho(t)) dt`` (``k_T``, ``P_T`` for the triplet yield).
Split the future into a first step ``dt`` and the rest: during ``dt`` the yield collects
``k_S vec(P_S^T) . vec(rho) dt``; afterwards the pair is in ``(1 + dt L(theta)) rho`` at phase
``theta + w dt``, so

    a(theta) . rho = q . rho dt + a(theta + w dt) . (1 + dt L(theta)) rho,    q = k_S vec(P_S^T),

and to first order in ``dt``, for every ``rho``,

    0 = q + w da/dtheta + L(theta)^T a(theta),    L(theta) = L0 + cos(theta) L1.

With ``a(theta) = sum_n a_n exp(i n theta)`` and ``cos(theta) = (e^{i theta} + e^{-i theta}) / 2``,
the coefficient of ``exp(i n theta)`` gives the Floquet equations

    q delta_n0 + i n w a_n + L0^T a_n + (L1^T / 2) (a_{n-1} + a_{n+1}) = 0,     n = 0, +/-1, ...

The phase average of ``Y`` is ``a_0 . vec(rho0)`` and the yield at phase ``theta`` is
``sum_n a_n exp(i n theta) . vec(rho0)``.  The harmonics are truncated at ``|n| <= N``
(``a_{+/-(N+1)} = 0``); for weak or fast RF the neglected part falls off geometrically in ``N``
(roughly like ``(|L1| / max(w, k))^N``).
With ``harmonics="auto"`` the order is doubled (1, 2, 4, ...) until the phase-averaged yield changes
by less than ``tol``; the order used is reported.

Four solvers of the truncated block-tridiagonal system (``2N + 1`` blocks of size ``D = d^2``), all
exact for the truncated system and agreeing to round-off (tested):

- ``"sylvester"`` (the default): the same equations for the (d, d) matrices ``X_n`` with
  ``vec(X_n) = a_n``, in Hilbert space: GMRES preconditioned by the exact inverse of the Sylvester
  part of each diagonal block, through one eigen-decomposition of the (d, d) effective Hamiltonian
  per static field direction (shared by every RF azimuth and Floquet order).  Memory O(N d^2), time
  O(d^3) per GMRES step; details in :class:`_Sylvester`.
- ``"eig"``: GMRES in the eigenbasis of the (D, D) matrix ``L(B0)^T``, preconditioned by the exact
  inverse of the diagonal blocks ``L(B0)^T + i n w``.
- ``"blocks"``: elimination from both ends (a matrix continued fraction).  With
  ``D_n = L0^T + i n w`` and ``C = L1^T / 2``, ``a_n = S_n a_{n-1}`` for ``n >= 1`` with
  ``S_N = -D_N^-1 C`` and ``S_n = -(D_n + C S_{n+1})^-1 C``; likewise ``a_{-n} = R_n a_{-n+1}``
  with ``D_{-n}``; then ``(D_0 + C S_1 + C R_1) a_0 = -q``.  Dense (D, D) blocks.
- ``"splu"``: one sparse LU factorisation (``scipy.sparse.linalg.splu``) of the whole
  ``(2N + 1) D`` system.

The iterative solvers check the residual of the full system and hand a direction to ``"blocks"``
(pairs with ``d <= 32``) when it is not below ``1e-11`` relative, or when the eigenvectors are
ill-conditioned (near an exceptional point).  :func:`floquet_bytes` estimates the memory, and
:class:`retina.errors.ResourceError` refuses a job that would not fit before anything is allocated.

Evenness
--------
The resulting yield depends on the static field direction only.  It is even, ``Phi(-b) = Phi(b)``
(for perpendicular, parallel and fixed RF directions alike).  Argument: time reversal (which
reverses every spin and leaves hyperfine, exchange and dipolar terms alone) maps the drive
``(b, n)`` on ``(-b, -n)`` with the RF phase history reversed, the phase average removes the
dependence on that history, and ``-n`` is the phase shift ``theta -> theta + pi``.  The tests check
it numerically, with unequal rates and relaxation too;
:func:`retina.spin.rf_yieldfn.rf_yield_function` measures the evenness on its check directions,
which lie on the opposite hemisphere from its grid directions.
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from retina.errors import InputError, ResourceError
from retina.spin import memory
from retina.spin import operators as ops
from retina.spin._rf_common import (MAX_HARMONICS, azimuth_mean, check_azimuths, check_harmonics, check_rf,
                                    check_tol, perp_basis)
from retina.spin.hilbert import validate_field
from retina.spin.liouville import _lindblad_terms, check_scope

__all__ = ["yields_rf", "floquet_bytes", "check_memory", "MAX_HARMONICS", "SOLVERS"]

#: The solvers of the truncated Floquet system (module docstring); "auto" is "sylvester".
SOLVERS = ("auto", "sylvester", "eig", "blocks", "splu")
#: Eigenvector condition estimate above which the "eig" solver hands a direction to "blocks".
_COND_LIMIT = 1e7
#: Relative residual of the Floquet system above which the "eig" solver hands over to "blocks".
_RESID_LIMIT = 1e-11
#: Up to this Hilbert dimension the Liouvillians are assembled and kept dense.
_DENSE_UP_TO = 32


# ------------------------------------------------------------------------------------------ memory

def floquet_bytes(system, harmonics: int = 4, solver: str = "auto") -> int:
    """Estimated peak working memory of one Floquet solve at order ``N = harmonics``.

    With ``m = 2N + 1`` harmonics, ``d`` the Hilbert and ``D = d^2`` the Liouville dimension:
    ``"sylvester"`` keeps about ``52 m`` (d, d) complex matrices (40 Krylov vectors of ``m`` blocks
    and the working arrays), plus the ``"blocks"`` estimate when ``d <= 32`` (its fallback);
    ``"eig"`` about 8 dense (D, D) complex matrices plus 60 Krylov vectors of length ``m D``;
    ``"blocks"`` about ``6 + 2N`` dense (D, D) blocks; ``"splu"`` the LU fill of the
    block-tridiagonal system, taken as 3 dense blocks per block row at 24 bytes per entry.

    Parameters
    ----------
    system : SpinSystem
        The pair (its Hilbert dimension ``d``).
    harmonics : int
        Floquet order ``N``.
    solver : str
        One of :data:`SOLVERS`.

    Returns
    -------
    int
        Bytes.
    """
    d = system.dimension
    dd = d * d
    m = 2 * int(harmonics) + 1
    blocks = 16 * (6 + 2 * int(harmonics)) * dd * dd + 8 * 24 * dd * max(4, d)
    if solver in ("auto", "sylvester"):
        return int(16 * dd * (52 * m + 24) + (blocks if d <= _DENSE_UP_TO else 0))
    if solver == "eig":
        return int(16 * 8 * dd * dd + 16 * 60 * m * dd)
    if solver == "splu":
        return int(24 * 3 * m * dd * dd + 8 * 24 * dd * max(4, d))
    return int(blocks)


def check_memory(system, harmonics, solver, max_bytes):
    """Refuse, before anything is allocated, a Floquet solve that would not fit in memory.

    Parameters
    ----------
    system : SpinSystem
        The pair (its Hilbert dimension sets the cost).
    harmonics : int
        Floquet order ``N`` of the estimate (the solvers start at 4 with ``harmonics="auto"``).
    solver : str
        One of :data:`SOLVERS`.
    max_bytes : int or None
        Limit in bytes; None takes 60 % of the available memory (:mod:`retina.spin.memory`).

    Raises
    ------
    ResourceError
        Naming the estimate, the limit and what to change.
    """
    limit = int(0.6 * memory.available_bytes()) if max_bytes is None else int(max_bytes)
    need = floquet_bytes(system, harmonics, solver)
    if need > limit:
        d = system.dimension
        raise ResourceError(
            f"{system.name!r}: the Floquet space of Hilbert dimension {d} (Liouville blocks of {d * d} x {d * d}) "
            f"needs about {need / 2**30:.3g} GiB with solver {solver!r}, more than the limit of "
            f"{limit / 2**30:.3g} GiB; use a pair with fewer nuclei (the RF method works in Liouville space, "
            f"memory grows as d^4)")


# ------------------------------------------------------------------------------------------ core

class _Floquet:
    """The static Liouvillian parts of one system, transposed for the backward equation."""

    def __init__(self, system):
        check_scope(system)
        space = ops.pair_space(system)
        self.space = space
        self.d = d = space.dimension
        self.dense = d <= _DENSE_UP_TO
        if self.dense:  # small pairs: dense Kronecker assembly (cheaper than sparse bookkeeping)
            parts = ops.hamiltonian_parts(system)
            eye = np.eye(d)

            def comm(h):
                return np.kron(h, eye) - np.kron(eye, h.T)

            ps = ops.singlet_projector(space)
            kmat = float(system.k_singlet) * ps + float(system.k_triplet) * (eye - ps)
            l0 = -1j * comm(parts.h0) - 0.5 * (np.kron(kmat, eye) + np.kron(eye, kmat.T))
            if system.relaxation.any:
                l0 = l0 + ops.relaxation_superoperator(system, space).toarray()
            self.l0t = np.ascontiguousarray(l0.T)
            self.lbt = [np.ascontiguousarray((-1j * comm(h)).T) for h in parts.hb]
        else:
            l0, lb, _ = ops.liouvillian_parts(system)
            self.l0t = l0.T.tocsr()
            self.lbt = [m.T.tocsr() for m in lb]
        self.rho0 = ops.initial_density(system, space).reshape(-1)
        if system.reported_yield == "singlet":
            p = ops.singlet_projector(space) * float(system.k_singlet)
        else:
            p = ops.triplet_projector(space) * float(system.k_triplet)
        self.q = p.T.reshape(-1).astype(complex)

    def static_t(self, b_t):
        """``L(B0)^T`` (dense for small pairs, else sparse CSR) for a field vector in tesla."""
        out = self.l0t + b_t[0] * self.lbt[0] + b_t[1] * self.lbt[1] + b_t[2] * self.lbt[2]
        return out if self.dense else out.tocsr()

    def rf_t(self, b1_t):
        """``L1^T`` (dense for small pairs, else sparse CSR) for an RF amplitude vector in tesla."""
        out = b1_t[0] * self.lbt[0] + b1_t[1] * self.lbt[1] + b1_t[2] * self.lbt[2]
        return out if self.dense else out.tocsr()

    @staticmethod
    def as_dense(m):
        return m if isinstance(m, np.ndarray) else m.toarray()

    # -- solvers: return the harmonics a_n, shape (2N + 1, D), n = -N..N (or only a_0 when phase is None)

    def solve_blocks(self, lt, ct, omega, n_h, want_all):
        dd = self.d * self.d
        lt_d = self.as_dense(lt)
        c = 0.5 * self.as_dense(ct)
        eye = np.eye(dd)
        if n_h == 0:
            a0 = np.linalg.solve(lt_d, -self.q)
            return a0[None, :]
        s_of = {1: {}, -1: {}}  # s_of[sign][n]: a_{sign n} = s_of[sign][n] a_{sign (n - 1)}
        for sign in (1, -1):
            s_next = None
            for n in range(n_h, 0, -1):
                blk = lt_d + (1j * sign * n * omega) * eye
                if s_next is not None:
                    blk = blk + c @ s_next
                s_next = -np.linalg.solve(blk, c)
                s_of[sign][n] = s_next
        a0 = np.linalg.solve(lt_d + c @ s_of[1][1] + c @ s_of[-1][1], -self.q)
        if not want_all:
            return a0[None, :]
        out = np.zeros((2 * n_h + 1, dd), dtype=complex)
        out[n_h] = a0
        for n in range(1, n_h + 1):
            out[n_h + n] = s_of[1][n] @ out[n_h + n - 1]
            out[n_h - n] = s_of[-1][n] @ out[n_h - n + 1]
        return out

    def solve_splu(self, lt, ct, omega, n_h, want_all):
        dd = self.d * self.d
        m = 2 * n_h + 1
        ns = np.arange(-n_h, n_h + 1)
        lt, ct = sp.csr_matrix(lt), sp.csr_matrix(ct)
        big = sp.kron(sp.identity(m, format="csr"), lt) + sp.kron(sp.diags(1j * omega * ns), sp.identity(dd))
        if n_h > 0:
            off = sp.diags([np.ones(m - 1), np.ones(m - 1)], [-1, 1])
            big = big + sp.kron(off, 0.5 * ct)
        rhs = np.zeros(m * dd, dtype=complex)
        rhs[n_h * dd:(n_h + 1) * dd] = -self.q
        try:
            x = spla.splu(big.tocsc()).solve(rhs)
        except RuntimeError as exc:
            raise InputError(f"the Floquet system is singular ({exc}): some state never recombines; give both "
                             "rates > 0 or add relaxation", key="k_triplet") from None
        x = x.reshape(m, dd)
        return x if want_all else x[n_h:n_h + 1]

    def prepare_eig(self, lt):
        """Eigen-decomposition ``L(B0)^T = W diag(lam) W^-1`` for the ``"eig"`` solver (None if ill-conditioned)."""
        lam, w = np.linalg.eig(lt)
        try:
            winv = np.linalg.inv(w)
        except np.linalg.LinAlgError:
            return None
        cond = np.linalg.norm(w) * np.linalg.norm(winv) / lam.size
        if not np.isfinite(cond) or cond > _COND_LIMIT:
            return None
        return lam, w, winv

    def solve_eig(self, lt, ct, omega, n_h, want_all, eig):
        """GMRES on the Floquet system in the eigenbasis of ``L(B0)^T``, preconditioned by the exact
        inverse of its diagonal blocks; the residual of the original system is checked, and the
        block elimination answers when it is not small enough."""
        if eig is None:
            return self.solve_blocks(lt, ct, omega, n_h, want_all)
        lam, w, winv = eig
        dd = lam.size
        m = 2 * n_h + 1
        ns = np.arange(-n_h, n_h + 1)
        denom = lam[None, :] + 1j * omega * ns[:, None]  # (m, D): the diagonal blocks in the eigenbasis
        c = 0.5 * ct
        wt, winvt = w.T, winv.T

        def couple(y):  # C' (y_{n-1} + y_{n+1}) in the eigenbasis, y of shape (m, D)
            s = np.zeros_like(y)
            s[1:] += y[:-1]
            s[:-1] += y[1:]
            return ((s @ wt) @ c.T) @ winvt

        def apply(v):
            y = v.reshape(m, dd)
            return (y + couple(y) / denom).reshape(-1)

        rhs = np.zeros((m, dd), dtype=complex)
        rhs[n_h] = -(winv @ self.q) / denom[n_h]
        if n_h == 0:
            y = rhs
        else:
            op = spla.LinearOperator((m * dd, m * dd), matvec=apply, dtype=complex)
            yv, info = spla.gmres(op, rhs.reshape(-1), x0=rhs.reshape(-1), rtol=1e-14, atol=0.0,
                                  restart=min(m * dd, 60), maxiter=20)
            y = yv.reshape(m, dd)
        a = y @ wt  # back to the original basis, (m, D)
        resid = a @ lt.T + (1j * omega) * ns[:, None] * a
        if n_h > 0:
            sh = np.zeros_like(a)
            sh[1:] += a[:-1]
            sh[:-1] += a[1:]
            resid += sh @ c.T
        resid[n_h] += self.q
        if not np.linalg.norm(resid) <= _RESID_LIMIT * np.linalg.norm(self.q):
            return self.solve_blocks(lt, ct, omega, n_h, want_all)
        return a if want_all else a[n_h:n_h + 1]


class _Sylvester:
    """Hilbert-space form of the Floquet system (solver ``"sylvester"``): memory O(N d^2), time O(d^3).

    With the Lindblad terms of the relaxation written ``c_j (A_j x A_j^+ - {A_j^+ A_j, x} / 2)`` and
    ``G = H - (i/2)(k_S P_S + k_T P_T + sum_j c_j A_j^+ A_j)``, the transposed Liouvillian acts on the
    matrix ``X`` with ``vec(X) = a`` as ``L^T X = -i (G^T X - X G^*) + sum_j c_j A_j^T X A_j^*`` and
    ``L1^T X = -i (H1^T X - X H1^T)``.  The Sylvester part ``-i (G^T X - X G^*) + i n w X`` is
    inverted exactly through ``G = V diag(lam) V^-1``:
    ``X = V^-T [(V^T R V^*) / (-i (lam_i - conj(lam_j)) + i n w)] V^-*``; it preconditions GMRES
    (``scipy.sparse.linalg.gmres``) on the whole system, whose residual is checked at the end.
    Time is scaled by the largest rate.
    """

    def __init__(self, system):
        check_scope(system)
        parts = ops.hamiltonian_parts(system)
        space = parts.space
        self.space = space
        self.d = d = space.dimension
        ks, kt = float(system.k_singlet), float(system.k_triplet)
        self.scale = scale = max(ks, kt)
        ps = ops.singlet_projector(space)
        eye = np.eye(d)
        damp = ks * ps + kt * (eye - ps)
        terms = _lindblad_terms(system, space)
        for c, a in terms:
            damp = damp + c * (a.conj().T @ a).toarray()
        self.g0 = (parts.h0 - 0.5j * damp) / scale
        self.hb = parts.hb / scale
        self.terms = [(c / scale, a.toarray().T.copy(), a.toarray().conj()) for c, a in terms]
        self.rho0 = ops.initial_density(system, space).reshape(-1)
        p = ps * ks if system.reported_yield == "singlet" else (eye - ps) * kt
        self.qmat = p.T / scale
        self.q = self.qmat.reshape(-1)
        self._system = system
        self._fallback_floquet = None  # the block-elimination fallback, built when first needed
        self._b = None

    @staticmethod
    def as_dense(m):
        return m

    def static_t(self, b_t):
        """Per-direction data: ``G`` and its eigen-decomposition (None when ill-conditioned)."""
        self._b = np.asarray(b_t, dtype=float)
        g = self.g0 + np.einsum("k,kij->ij", self._b.astype(complex), self.hb)
        lam, v = np.linalg.eig(g)
        try:
            vinv = np.linalg.inv(v)
        except np.linalg.LinAlgError:
            return g, None
        cond = np.linalg.norm(v) * np.linalg.norm(vinv) / self.d
        if not np.isfinite(cond) or cond > _COND_LIMIT:
            return g, None
        return g, (lam, v, vinv)

    def rf_t(self, b1_t):
        """``(H1, B1 vector)``: the RF Hamiltonian (scaled) for an amplitude vector in tesla."""
        b1 = np.asarray(b1_t, dtype=float)
        return np.einsum("k,kij->ij", b1.astype(complex), self.hb), b1

    def _fallback(self, ct, omega, n_h, want_all, why):
        if self.d > _DENSE_UP_TO:
            raise ResourceError(f"the Hilbert-space Floquet solver {why}; try solver='blocks' on a smaller pair "
                                "or a weaker RF field")
        if self._fallback_floquet is None:
            self._fallback_floquet = _Floquet(self._system)
        fl = self._fallback_floquet
        lt = fl.as_dense(fl.static_t(self._b))
        return fl.solve_blocks(lt, fl.as_dense(fl.rf_t(ct[1])), omega, n_h, want_all)

    def solve(self, lt, ct, omega, n_h, want_all):
        g, eig = lt
        h1 = ct[0]
        if eig is None:
            return self._fallback(ct, omega, n_h, want_all, "met an ill-conditioned eigenbasis")
        lam, v, vinv = eig
        d, m = self.d, 2 * n_h + 1
        w = omega / self.scale
        ns = np.arange(-n_h, n_h + 1)
        base = -1j * (lam[:, None] - lam.conj()[None, :])
        denom = base[None] + 1j * w * ns[:, None, None]  # (m, d, d)
        vt, vc, vinvt, vinvc = v.T, v.conj(), vinv.T, vinv.conj()
        gt, gc, h1t = g.T, g.conj(), h1.T

        def prec(r):  # exact inverse of the Sylvester blocks, r of shape (m, d, d)
            return vinvt @ ((vt @ r @ vc) / denom) @ vinvc

        def rest(x):  # sandwiches and the RF coupling
            out = np.zeros_like(x)
            for c, at_, ac in self.terms:
                out += c * (at_ @ x @ ac)
            if n_h > 0:
                sh = np.zeros_like(x)
                sh[1:] += x[:-1]
                sh[:-1] += x[1:]
                out += -0.5j * (h1t @ sh - sh @ h1t)
            return out

        rhs = np.zeros((m, d, d), dtype=complex)
        rhs[n_h] = -self.qmat
        b = prec(rhs)
        if n_h == 0 and not self.terms:
            x = b
        else:
            op = spla.LinearOperator((m * d * d,) * 2, dtype=complex,
                                     matvec=lambda u: (u.reshape(m, d, d) + prec(rest(u.reshape(m, d, d)))).reshape(-1))
            xv, _ = spla.gmres(op, b.reshape(-1), x0=b.reshape(-1), rtol=1e-14, atol=0.0, restart=40, maxiter=10)
            x = xv.reshape(m, d, d)
        resid = -1j * (gt @ x - x @ gc) + 1j * w * ns[:, None, None] * x + rest(x) - rhs
        if not np.linalg.norm(resid) <= _RESID_LIMIT * np.linalg.norm(self.qmat):
            return self._fallback(ct, omega, n_h, want_all, "did not converge")
        a = x.reshape(m, d * d)
        return a if want_all else a[n_h:n_h + 1]


def _solve_one(fl, solver, lt, ct, omega, n_h, phase):
    """Phase-averaged yield (and the yield at ``phase`` radians, or None) at Floquet order ``n_h``."""
    want_all = phase is not None
    if solver == "eig":
        a = fl.solve_eig(lt, ct, omega, n_h, want_all, fl.eig)
    elif solver == "sylvester":
        a = fl.solve(lt, ct, omega, n_h, want_all)
    else:
        a = (fl.solve_splu if solver == "splu" else fl.solve_blocks)(lt, ct, omega, n_h, want_all)
    if want_all:
        n0 = a.shape[0] // 2
        avg = float(np.real(a[n0] @ fl.rho0))
        ns = np.arange(-n0, n0 + 1)
        at = np.exp(1j * ns * phase) @ a
        return avg, float(np.real(at @ fl.rho0))
    return float(np.real(a[0] @ fl.rho0)), None


def _solve_auto(fl, solver, lt, ct, omega, harmonics, tol, phase, start):
    """Solve at a fixed order, or double the order until the average changes by < tol.

    Returns ``(average, at_phase, order_used)``.
    """
    if harmonics != "auto":
        avg, at = _solve_one(fl, solver, lt, ct, omega, harmonics, phase)
        return avg, at, harmonics
    n_h = max(1, start)
    prev, _ = _solve_one(fl, solver, lt, ct, omega, n_h, None)
    while True:
        nxt = 2 * n_h
        if nxt > MAX_HARMONICS:
            raise ResourceError(f"the Floquet expansion did not converge to {tol:g} within {MAX_HARMONICS} "
                                "harmonics (the RF field is too strong for its frequency); raise tol or fix "
                                "harmonics")
        cur, at = _solve_one(fl, solver, lt, ct, omega, nxt, phase)
        if abs(cur - prev) < tol:
            return cur, at, nxt
        prev, n_h = cur, nxt


def _yields_detail(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction, harmonics, tol, progress,
                   phase_deg, solver, max_bytes, azimuths="auto"):
    src = system.source
    omega, b1, rfdir = check_rf(rf_MHz, rf_nT, rf_direction, source=src)
    harmonics = check_harmonics(harmonics, src)
    tol = check_tol(tol, src)
    if solver not in SOLVERS:
        raise InputError(f"expected solver one of {SOLVERS}, got {solver!r}", source=src, key="solver")
    solver = "sylvester" if solver == "auto" else solver
    azimuths = check_azimuths(azimuths, src)
    phase = None
    if phase_deg is not None:
        try:
            phase = float(np.radians(float(phase_deg)))
        except (TypeError, ValueError):
            phase = float("nan")
        if not np.isfinite(phase):
            raise InputError(f"expected an RF phase in degrees or None, got {phase_deg!r}", source=src,
                             key="phase_deg")
    b, dirs = validate_field(field_uT, directions, src)
    check_memory(system, 4 if harmonics == "auto" else harmonics, solver, max_bytes)
    fl = _Sylvester(system) if solver == "sylvester" else _Floquet(system)
    # the block solver works on dense blocks: convert once per direction and azimuth, not per order
    prep = fl.as_dense if solver in ("blocks", "eig") else (lambda m: m)
    fl.eig = None
    n = dirs.shape[0]
    out = np.empty(n)
    out_phase = np.empty(n) if phase is not None else None
    orders = np.zeros(n, dtype=int)
    n_az = np.ones(n, dtype=int)
    last = 1
    every = max(1, n // 100)
    for i in range(n):
        bd = dirs[i]
        lt = fl.static_t(b * bd)
        lt = prep(lt)
        if solver == "eig":
            fl.eig = fl.prepare_eig(lt)  # shared by every azimuth and Floquet order of this direction
        if isinstance(rfdir, str) and rfdir == "perpendicular":
            e1, e2 = perp_basis(bd)
            used = []

            def value_at(t):  # azimuth phi = pi t
                phi = np.pi * t
                ct = prep(fl.rf_t(b1 * (np.cos(phi) * e1 + np.sin(phi) * e2)))
                avg, at_phase, o = _solve_auto(fl, solver, lt, ct, omega, harmonics, tol, phase, max(1, last // 2))
                used.append(o)
                return (avg,) if phase is None else (avg, at_phase)

            cur, k = azimuth_mean(value_at, azimuths, tol)
            out[i] = cur[0]
            if phase is not None:
                out_phase[i] = cur[1]
            orders[i] = max(used)
            n_az[i] = k
        else:
            nrf = bd if isinstance(rfdir, str) else rfdir
            ct = prep(fl.rf_t(b1 * nrf))
            out[i], p_val, orders[i] = _solve_auto(fl, solver, lt, ct, omega, harmonics, tol, phase,
                                                   max(1, last // 2))
            if phase is not None:
                out_phase[i] = p_val
        last = int(orders[i])
        if progress is not None and ((i + 1) % every == 0 or i + 1 == n):
            progress(i + 1, n)
    info = {"harmonics": orders, "azimuths": n_az, "solver": solver, "tol": tol}
    return out, out_phase, info


def yields_rf(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction="perpendicular", harmonics="auto",
              tol=1e-10, progress: Callable[[int, int], None] | None = None, phase_deg=None, solver="auto",
              azimuths="auto", max_bytes=None, return_info=False):
    """The reported yield under a static field plus a linearly polarised RF field (exact, Floquet).

    Parameters
    ----------
    system : SpinSystem
        Any system the Liouville method accepts (rates, exchange, dipolar, relaxation).
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Static field directions in the molecular frame (normalised here).
    rf_MHz : float
        RF frequency ``f`` (MHz, > 0); ``w = 2 pi f``.
    rf_nT : float
        RF amplitude ``B1`` (nT, >= 0): the field is ``B1 n cos(w t + theta)``.
    rf_direction : {"perpendicular", "parallel"} or array_like, shape (3,)
        See :mod:`retina.spin._rf_common` ("perpendicular" averages over the azimuth about ``b``).
    harmonics : "auto" or int
        Floquet truncation order ``N`` (``|n| <= N``); "auto" doubles it until converged.
    tol : float
        Convergence tolerance on the yield (for "auto" harmonics and azimuths), yield units.
    progress : callable(done, total), optional
    phase_deg : float, optional
        Also return the yield for a pair born at this RF phase ``theta`` (degrees).
    solver : {"auto", "sylvester", "eig", "blocks", "splu"}
        See the module docstring ("auto" is "sylvester").
    azimuths : "auto" or int
        Number of equally spaced azimuths for "perpendicular" (a divisor of 64).
    max_bytes : int, optional
        Memory limit (default 60 % of the available memory).
    return_info : bool
        Also return a dict: ``harmonics`` (N,) the orders used, ``azimuths`` (N,), ``solver``, ``tol``.

    Returns
    -------
    ndarray, shape (N,)
        Phase-averaged reported yield (dimensionless).  With ``phase_deg``: a tuple
        ``(averaged, at_phase)``; with ``return_info`` the info dict is appended.

    Raises
    ------
    InputError
        Bad field, directions or RF parameters.
    ResourceError
        When the Floquet space would not fit in memory (checked before allocating), or when the
        expansion does not converge.
    """
    avg, at, info = _yields_detail(system, field_uT, directions, rf_MHz=rf_MHz, rf_nT=rf_nT,
                                   rf_direction=rf_direction, harmonics=harmonics, tol=tol, progress=progress,
                                   phase_deg=phase_deg, solver=solver, max_bytes=max_bytes, azimuths=azimuths)
    res = (avg,) if phase_deg is None else (avg, at)
    if return_info:
        res = res + (info,)
    return res[0] if len(res) == 1 else res

