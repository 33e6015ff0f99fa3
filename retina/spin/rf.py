"""Radio-frequency (RF) field effects on the radical-pair yield: an exact Floquet method.

Model (conventions owned here; everything else is that of :mod:`retina.spin.system`)
------------------------------------------------------------------------------------
A linearly polarised RF field of amplitude ``B1`` (tesla) along the unit vector ``n`` (molecular
frame), angular frequency ``w = 2 pi f`` and phase ``theta`` at the birth of the pair adds to the
static Hamiltonian ``H0(B0)`` the term

    H1 cos(w t + theta),   H1 = (mu_B / hbar) B1 n . (g_A . S_A + g_B . S_B)   (rad s^-1),

i.e. the electron Zeeman term of :mod:`retina.spin.operators` evaluated at the field ``B1 n``
(nuclear Zeeman terms are neglected there, and so here).  In Liouville space (row-major
vectorisation of :mod:`retina.spin.operators`)

    d vec(rho) / dt = (L0 + cos(w t + theta) L1) vec(rho),   L1 = -i [H1, .],

with ``L0`` the complete static Liouvillian (coherent part, Haberkorn recombination, relaxation).
At the user boundary the RF frequency ``f`` is in MHz and the amplitude ``B1`` in nT.

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

RF direction
------------
- a vector: fixed in the molecular frame;
- ``"parallel"``: ``n = b``, along the static field;
- ``"perpendicular"``: ``n = cos(phi) e1 + sin(phi) e2`` with ``e1, e2`` orthonormal and
  perpendicular to ``b``, averaged over the azimuth ``phi``.  Since ``n -> -n`` is the phase shift
  ``theta -> theta + pi``, the phase-averaged yield has period ``pi`` in ``phi``; it is a
  trigonometric polynomial in ``2 phi`` of order ``k`` at order ``B1^(2k)``.  The rule with ``K``
  equally spaced azimuths ``phi_j = j pi / K`` integrates every harmonic ``2m`` exactly except the
  non-zero multiples ``m`` of ``K``; ``K`` is doubled from 2 (the rules are nested, so no solve is repeated) until
  the average changes by less than ``tol``.

The resulting yield depends on the static field direction only.  It is even, ``Phi(-b) = Phi(b)``
(for perpendicular, parallel and fixed RF directions alike).  Argument: time reversal (which
reverses every spin and leaves hyperfine, exchange and dipolar terms alone) maps the drive
``(b, n)`` on ``(-b, -n)`` with the RF phase history reversed, the phase average removes the
dependence on that history, and ``-n`` is the phase shift ``theta -> theta + pi``.  The tests check
it numerically, with unequal rates and relaxation too; :func:`rf_yield_function` measures the evenness on its check directions, which lie on the
opposite hemisphere from its grid directions.
"""

from __future__ import annotations

import datetime as _dt
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from retina.errors import InputError, ResourceError
from retina.spin import operators as ops

__all__ = ["RFSpectrum", "yields_rf", "rf_yields", "choose_rf_method", "rf_yield_function", "rf_spectrum",
           "floquet_bytes", "check_rf", "MAX_HARMONICS", "MAX_AZIMUTHS", "RF_METHODS"]

#: RF methods: the separable one (:mod:`retina.spin.rf_separable`) and the whole-pair Floquet solver here.
RF_METHODS = ("auto", "separable", "floquet")

#: Largest Floquet order tried by ``harmonics="auto"``.
MAX_HARMONICS = 256
#: Largest number of azimuths tried for ``rf_direction="perpendicular"``.
MAX_AZIMUTHS = 64
_SOLVERS = ("auto", "sylvester", "eig", "blocks", "splu")
#: Eigenvector condition estimate above which the "eig" solver hands a direction to "blocks".
_COND_LIMIT = 1e7
#: Relative residual of the Floquet system above which the "eig" solver hands over to "blocks".
_RESID_LIMIT = 1e-11
#: Up to this Hilbert dimension the Liouvillians are assembled and kept dense.
_DENSE_UP_TO = 32


# ------------------------------------------------------------------------------------------ checks

def check_rf(rf_MHz, rf_nT, rf_direction="perpendicular", *, source=None):
    """Validate the RF parameters.

    Parameters
    ----------
    rf_MHz : float
        RF frequency, MHz (finite, > 0).
    rf_nT : float
        RF amplitude, nT (finite, >= 0).
    rf_direction : {"perpendicular", "parallel"} or array_like, shape (3,)
        See the module docstring; a vector is normalised.

    Returns
    -------
    omega : float
        Angular frequency, rad s^-1.
    b1 : float
        Amplitude, tesla.
    direction : str or ndarray (3,)

    Raises
    ------
    InputError
        Naming the offending key and what was expected.
    """
    try:
        f = float(rf_MHz)
    except (TypeError, ValueError):
        raise InputError(f"expected an RF frequency in MHz, got {rf_MHz!r}", source=source, key="rf_MHz") from None
    if not np.isfinite(f) or f <= 0:
        raise InputError(f"expected an RF frequency > 0 MHz, got {rf_MHz!r}", source=source, key="rf_MHz")
    try:
        a = float(rf_nT)
    except (TypeError, ValueError):
        raise InputError(f"expected an RF amplitude in nT, got {rf_nT!r}", source=source, key="rf_nT") from None
    if not np.isfinite(a) or a < 0:
        raise InputError(f"expected an RF amplitude >= 0 nT, got {rf_nT!r}", source=source, key="rf_nT")
    if isinstance(rf_direction, str):
        if rf_direction not in ("perpendicular", "parallel"):
            raise InputError(f"expected 'perpendicular', 'parallel' or a vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction")
        direction = rf_direction
    else:
        try:
            v = np.asarray(rf_direction, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"expected 'perpendicular', 'parallel' or a vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction") from None
        if v.shape != (3,) or not np.all(np.isfinite(v)) or not np.linalg.norm(v) > 0:
            raise InputError(f"expected a finite non-zero vector of 3 numbers, got {rf_direction!r}",
                             source=source, key="rf_direction")
        direction = v / np.linalg.norm(v)
    return 2 * np.pi * f * 1e6, a * 1e-9, direction


def _check_harmonics(harmonics, source=None):
    if isinstance(harmonics, str) and harmonics == "auto":
        return "auto"
    if isinstance(harmonics, (bool, np.bool_)) or not isinstance(harmonics, (int, np.integer)) \
            or not 0 <= harmonics <= MAX_HARMONICS:
        raise InputError(f"expected 'auto' or a whole number of harmonics 0..{MAX_HARMONICS}, got {harmonics!r}",
                         source=source, key="harmonics")
    return int(harmonics)


def _check_tol(tol, source=None):
    try:
        t = float(tol)
    except (TypeError, ValueError):
        t = float("nan")
    if not np.isfinite(t) or t <= 0:
        raise InputError(f"expected a tolerance > 0, got {tol!r}", source=source, key="tol")
    return t


# ------------------------------------------------------------------------------------------ memory

def floquet_bytes(system, harmonics: int = 4, solver: str = "auto") -> int:
    """Estimated peak working memory (bytes) of one Floquet solve at order ``N = harmonics``.

    With ``m = 2N + 1`` harmonics, ``d`` the Hilbert and ``D = d^2`` the Liouville dimension:
    ``"sylvester"`` keeps about ``52 m`` (d, d) complex matrices (40 Krylov vectors of ``m`` blocks
    and the working arrays), plus the ``"blocks"`` estimate when ``d <= 32`` (its fallback);
    ``"eig"`` about 8 dense (D, D) complex matrices plus 60 Krylov vectors of length ``m D``;
    ``"blocks"`` about ``6 + 2N`` dense (D, D) blocks; ``"splu"`` the LU fill of the
    block-tridiagonal system, taken as 3 dense blocks per block row at 24 bytes per entry.
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


def _check_memory(system, harmonics, solver, max_bytes):
    from retina.spin import memory

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
        from retina.spin.liouville import check_scope

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
        from retina.spin.liouville import _lindblad_terms, check_scope

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


def _perp_basis(b):
    e1 = np.cross(b, [1.0, 0.0, 0.0] if abs(b[0]) < 0.9 else [0.0, 1.0, 0.0])
    e1 /= np.linalg.norm(e1)
    return e1, np.cross(b, e1)


def _yields_detail(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction, harmonics, tol, progress,
                   phase_deg, solver, max_bytes, azimuths="auto"):
    from retina.spin.hilbert import validate_field

    src = system.source
    omega, b1, rfdir = check_rf(rf_MHz, rf_nT, rf_direction, source=src)
    harmonics = _check_harmonics(harmonics, src)
    tol = _check_tol(tol, src)
    if solver not in _SOLVERS:
        raise InputError(f"expected solver one of {_SOLVERS}, got {solver!r}", source=src, key="solver")
    solver = "sylvester" if solver == "auto" else solver
    if azimuths != "auto" and (isinstance(azimuths, bool) or not isinstance(azimuths, (int, np.integer))
                               or not 1 <= azimuths <= MAX_AZIMUTHS):
        raise InputError(f"expected 'auto' or 1..{MAX_AZIMUTHS} azimuths, got {azimuths!r}", source=src,
                         key="azimuths")
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
    _check_memory(system, 4 if harmonics == "auto" else harmonics, solver, max_bytes)
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
            e1, e2 = _perp_basis(bd)
            vals, vals_p, used = {}, {}, []

            def at(j, k):  # azimuth j pi / k, memoised on the reduced fraction
                key = (j * (MAX_AZIMUTHS // k))
                if key not in vals:
                    phi = np.pi * j / k
                    ct = prep(fl.rf_t(b1 * (np.cos(phi) * e1 + np.sin(phi) * e2)))
                    vals[key], vals_p[key], o = _solve_auto(fl, solver, lt, ct, omega, harmonics, tol, phase,
                                                            max(1, last // 2))
                    used.append(o)
                return vals[key], vals_p[key]

            def mean(k):
                pts = [at(j, k) for j in range(k)]
                return (float(np.mean([p[0] for p in pts])),
                        None if phase is None else float(np.mean([p[1] for p in pts])))

            if azimuths == "auto":
                k = 2
                prev = mean(k)
                while True:
                    if 2 * k > MAX_AZIMUTHS:
                        raise ResourceError(f"the azimuth average did not converge to {tol:g} with {MAX_AZIMUTHS} "
                                            "azimuths; raise tol")
                    k *= 2
                    cur = mean(k)
                    if abs(cur[0] - prev[0]) < tol:
                        break
                    prev = cur
            else:
                k = int(azimuths)
                if MAX_AZIMUTHS % k:
                    raise InputError(f"expected a number of azimuths dividing {MAX_AZIMUTHS}, got {k}",
                                     source=src, key="azimuths")
                cur = mean(k)
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
        See the module docstring ("perpendicular" averages over the azimuth about ``b``).
    harmonics : "auto" or int
        Floquet truncation order ``N`` (``|n| <= N``); "auto" doubles it until converged.
    tol : float
        Convergence tolerance on the yield (for "auto" harmonics and azimuths), yield units.
    progress : callable(done, total), optional
    phase_deg : float, optional
        Also return the yield for a pair born at this RF phase ``theta`` (degrees).
    solver : {"auto", "blocks", "splu"}
        See the module docstring.
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


# ------------------------------------------------------------------------------------------ method choice

def choose_rf_method(system, method="auto") -> str:
    """``"separable"`` when ``system`` is in the separable scope (:mod:`retina.spin.rf_separable`:
    no exchange or dipolar coupling, equal rates, no relaxation), else ``"floquet"`` (whole pair).
    An explicit method is checked and returned."""
    if method not in RF_METHODS:
        raise InputError(f"expected an RF method among {RF_METHODS}, got {method!r}", source=system.source,
                         key="method")
    if method != "auto":
        return method
    from retina.spin.engine import choose_method

    return "separable" if choose_method(system) == "separable" else "floquet"


def rf_yields(system, field_uT, directions, *, rf_MHz, rf_nT, rf_direction="perpendicular", method="auto",
              harmonics="auto", tol=1e-10, progress=None, max_bytes=None, return_info=False, angle_deg=90.0):
    """Phase-averaged RF yields by the cheapest exact method (see :func:`choose_rf_method`).

    Parameters as in :func:`yields_rf`; ``method`` one of :data:`RF_METHODS`; ``angle_deg`` (with
    ``rf_direction="perpendicular"``, separable method only) tilts the azimuth-averaged RF direction
    to that angle from the static field (:func:`retina.spin.rf_separable.yields_rf`).  ``info`` (with
    ``return_info``) holds ``method`` and the per-direction ``harmonics`` and ``azimuths``.
    """
    m = choose_rf_method(system, method)
    if m == "separable":
        from retina.spin import rf_separable

        y, info = rf_separable.yields_rf(system, field_uT, directions, rf_MHz=rf_MHz, rf_nT=rf_nT,
                                         rf_direction=rf_direction, harmonics=harmonics, tol=tol,
                                         progress=progress, return_info=True, angle_deg=angle_deg)
    else:
        if float(angle_deg) != 90.0:
            raise InputError("an RF direction at an angle other than 90 degrees to the static field needs the "
                             "separable RF method (a pair without electron-electron coupling, equal rates)",
                             source=system.source, key="angle_deg")
        y, info = yields_rf(system, field_uT, directions, rf_MHz=rf_MHz, rf_nT=rf_nT, rf_direction=rf_direction,
                            harmonics=harmonics, tol=tol, progress=progress, max_bytes=max_bytes,
                            return_info=True)
    info = dict(info, method="separable-floquet" if m == "separable" else "floquet")
    return (y, info) if return_info else y


# ------------------------------------------------------------------------------------------ yield function

def rf_yield_function(system, field_uT, *, rf_MHz, rf_nT, rf_direction="perpendicular", degree=8,
                      progress: Callable[[int, int], None] | None = None, check_points: int = 20, tol=1e-10,
                      harmonics="auto", max_bytes=None, method="auto", angle_deg=90.0):
    """The phase-averaged yield under RF as a :class:`~retina.yieldfn.YieldFunction`.

    Computed like :meth:`YieldFunction.from_system`: on one hemisphere of the smallest Lebedev rule
    exact to ``2 L`` (using ``Phi(b) = Phi(-b)``, module docstring) and fitted by projection; the
    ``check_points`` independent directions are Fibonacci points of the *lower* hemisphere, so the
    reported truncation error also bounds any failure of the evenness.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
        Static field, microtesla.
    rf_MHz, rf_nT, rf_direction, harmonics, tol, max_bytes
        As in :func:`yields_rf`.
    degree : int
        Even maximum degree ``L``.
    progress : callable(done, total), optional
    check_points : int
        Independent check directions (>= 1).
    method : {"auto", "separable", "floquet"}
        See :func:`choose_rf_method`.
    angle_deg : float
        See :func:`rf_yields` (recorded as ``rf_angle_deg``).

    Returns
    -------
    YieldFunction
        Provenance as in ``from_system`` (``kind = "rf_from_system"``, ``method`` "separable-floquet"
        or "floquet") plus
        ``rf_MHz``, ``rf_nT``, ``rf_direction`` (a word or "x y z"), ``rf_phase`` ("averaged"),
        ``rf_harmonics_max``, ``rf_azimuths_max``, ``rf_tol``, ``rf_solver``.
    """
    from retina import sphere
    from retina.spin.io import dump_system
    from retina.yieldfn import YieldFunction, _check_degree, _check_field, content_hash, package_versions

    field_uT = _check_field(field_uT)
    degree = _check_degree(degree)
    omega, b1, rfdir = check_rf(rf_MHz, rf_nT, rf_direction, source=system.source)
    if isinstance(check_points, bool) or not isinstance(check_points, (int, np.integer)) or check_points < 1:
        raise InputError(f"expected check_points >= 1, got {check_points!r}", key="check_points")
    grid = sphere.grid_for_degree(degree)
    half, full_from_half = grid.hemisphere()
    check = sphere.fibonacci(int(check_points), hemisphere=True)
    dirs = np.concatenate([grid.points[half], -check.points], axis=0)
    t0 = time.perf_counter()
    values, info = rf_yields(system, field_uT, dirs, rf_MHz=rf_MHz, rf_nT=rf_nT, rf_direction=rfdir,
                             harmonics=harmonics, tol=tol, progress=progress, max_bytes=max_bytes,
                             return_info=True, method=method, angle_deg=angle_deg)
    seconds = time.perf_counter() - t0
    h = half.size
    coeffs = sphere.fit_even(values[:h][full_from_half], grid, degree)
    err = sphere.evaluate(coeffs, -check.points) - values[h:]
    err_max = float(np.max(np.abs(err)))
    prov = {
        "kind": "rf_from_system",
        "spin_system_toml": dump_system(system),
        "system_name": system.name,
        "system_source": system.source or "",
        "reported_yield": system.reported_yield,
        "initial_state": system.initial_state,
        "field_uT": field_uT,
        "method": info["method"],
        "rf_MHz": float(rf_MHz),
        "rf_nT": float(rf_nT),
        "rf_direction": rfdir if isinstance(rfdir, str) else " ".join(f"{x:.17g}" for x in rfdir),
        "rf_angle_deg": float(angle_deg),
        "rf_phase": "averaged",
        "rf_harmonics_max": int(np.max(info["harmonics"])),
        "rf_azimuths_max": int(np.max(info["azimuths"])),
        "rf_tol": float(info["tol"]),
        "rf_solver": info.get("solver", "separable"),
        "degree": degree,
        "grid": grid.name,
        "grid_order": int(grid.degree),
        "grid_points": len(grid),
        "computed_points": int(h),
        "check_grid": check.name + " (negated: lower hemisphere)",
        "check_points": len(check),
        "truncation_error_max": err_max,
        "truncation_error_rms": float(np.sqrt(np.mean(err**2))),
        "compute_seconds": float(seconds),
        "versions": package_versions(),
        "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "content_hash": content_hash(coeffs, degree),
    }
    return YieldFunction(coeffs, degree, prov, err_max)


# ------------------------------------------------------------------------------------------ spectrum

@dataclass(frozen=True)
class RFSpectrum:
    """The RF effect against frequency at one static field direction.

    Attributes
    ----------
    freqs_MHz : ndarray (F,)
    static : float
        Yield without RF.
    yields : ndarray (F,)
        Phase-averaged yield with RF.
    delta : ndarray (F,)
        ``yields - static``.
    harmonics : ndarray (F,) of int
        Largest Floquet order used at each frequency.
    relative_anisotropy : ndarray (F,) or None
        ``(max - min) / mean`` of the RF yield function at ``anisotropy_degree`` (when asked).
    static_relative_anisotropy : float or None
        The same without RF, at the same degree.
    """

    freqs_MHz: np.ndarray
    static: float
    yields: np.ndarray
    delta: np.ndarray
    harmonics: np.ndarray
    relative_anisotropy: np.ndarray | None = None
    static_relative_anisotropy: float | None = None


def rf_spectrum(system, field_uT, direction, freqs_MHz, rf_nT, *, rf_direction="perpendicular", harmonics="auto",
                tol=1e-10, anisotropy_degree=None, progress: Callable[[int, int], None] | None = None,
                max_bytes=None, method="auto") -> RFSpectrum:
    """Change of the phase-averaged yield (and optionally of the anisotropy) against RF frequency.

    Parameters
    ----------
    system : SpinSystem
    field_uT : float
        Static field strength, microtesla.
    direction : array_like, shape (3,)
        Static field direction, molecular frame.
    freqs_MHz : array_like, shape (F,)
        RF frequencies, MHz (each > 0).
    rf_nT : float
        RF amplitude, nT.
    rf_direction, harmonics, tol, max_bytes
        As in :func:`yields_rf`.
    method : {"auto", "separable", "floquet"}
        See :func:`choose_rf_method`.
    anisotropy_degree : int, optional
        When given (a small even degree such as 2 or 4), also fit the RF yield function at this degree
        for every frequency and report its relative anisotropy (cost: a hemisphere of a Lebedev rule
        per frequency).
    progress : callable(done, total), optional
        Counts frequencies.

    Returns
    -------
    RFSpectrum
    """
    from retina.spin import engine

    freqs = np.asarray(freqs_MHz, dtype=float).reshape(-1)
    if freqs.size == 0 or not np.all(np.isfinite(freqs)) or np.any(freqs <= 0):
        raise InputError(f"expected one or more RF frequencies > 0 MHz, got {freqs_MHz!r}", source=system.source,
                         key="freqs_MHz")
    d = np.asarray(direction, dtype=float).reshape(1, -1)
    static = float(engine.compute_yields(system, field_uT, d)[0])
    ys = np.empty(freqs.size)
    orders = np.empty(freqs.size, dtype=int)
    aniso = np.empty(freqs.size) if anisotropy_degree is not None else None
    static_aniso = None
    if anisotropy_degree is not None:
        from retina import sphere
        from retina.yieldfn import YieldFunction, _check_degree

        L = _check_degree(anisotropy_degree)
        grid = sphere.grid_for_degree(L)
        half, full = grid.hemisphere()
        sv = engine.compute_yields(system, field_uT, grid.points[half])
        static_aniso = YieldFunction(sphere.fit_even(sv[full], grid, L), L).anisotropy().relative
    for i, f in enumerate(freqs):
        y, info = rf_yields(system, field_uT, d, rf_MHz=f, rf_nT=rf_nT, rf_direction=rf_direction,
                            harmonics=harmonics, tol=tol, max_bytes=max_bytes, return_info=True, method=method)
        ys[i] = y[0]
        orders[i] = info["harmonics"][0]
        if aniso is not None:
            v = rf_yields(system, field_uT, grid.points[half], rf_MHz=f, rf_nT=rf_nT, rf_direction=rf_direction,
                          harmonics=harmonics, tol=tol, max_bytes=max_bytes, method=method)
            aniso[i] = YieldFunction(sphere.fit_even(v[full], grid, L), L).anisotropy().relative
        if progress is not None:
            progress(i + 1, freqs.size)
    return RFSpectrum(freqs, static, ys, ys - static, orders, aniso, static_aniso)
