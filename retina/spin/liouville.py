"""Exact Liouville-space method: unequal recombination rates, exchange, dipolar, relaxation.

The density matrix obeys ``d vec(rho)/dt = L vec(rho)`` with the Liouvillian of
:func:`retina.spin.operators.liouvillian_parts` (row-major vectorisation, stated there).  When every
state decays (``L`` invertible) the time integral ``x = int_0^inf rho(t) dt`` solves

    L vec(x) = -vec(rho0),

and the yields are ``Phi_S = k_S Tr(P_S x)``, ``Phi_T = k_T Tr(P_T x)``.

Two solvers:

- ``"sparse"``: one sparse LU factorisation (``scipy.sparse.linalg.splu``) of the (d^2, d^2)
  Liouvillian per direction.  Handles everything, including relaxation; memory grows as about
  ``d^4`` (fill-in), so it is for small pairs.
- ``"eig"`` (no relaxation, both rates > 0): the non-Hermitian effective Hamiltonian
  ``G = H - (i/2)(k_S P_S + k_T P_T)`` gives ``rho(t) = exp(-iGt) rho0 exp(iG^+ t)``.  With
  ``G = V diag(lambda) V^-1`` and ``r = V^-1 rho0 V^-+``,

      x = V X V^+,   X_mn = r_mn / (i (lambda_m - conj(lambda_n))),

  (``Im lambda < 0`` for every mode when both rates are positive, so the integral converges).
  The singlet structure ``P_S = |S><S| x 1`` keeps every product at (d, M) size.  A direction whose
  eigenvector matrix is ill-conditioned (near an exceptional point) is redone with the sparse solver.

- ``"krylov"`` (relaxation, both rates > 0): writing every relaxation term in Lindblad form
  ``c_j (A_j x A_j^+ - {A_j^+ A_j, x}/2)`` and folding the anticommutators into
  ``G' = H - (i/2)(k_S P_S + k_T P_T + sum_j c_j A_j^+ A_j)``, the equation reads

      -i (G' x - x G'^+) + sum_j c_j A_j x A_j^+ = -rho0.

  The first part is a Sylvester operator, inverted exactly in O(d^3) with the eigenvectors of
  ``G'`` (as in ``"eig"``); it preconditions GMRES (``scipy.sparse.linalg.gmres``) on the whole
  equation (a small GMRES written here, restarted from its last iterate up to
  ``_KRYLOV_RESTARTS`` times), whose remaining terms are sandwiches.  Memory stays O(d^2) instead
  of the O(d^4) fill-in of the LU factors.  The true residual of the full equation is checked
  against ``_RESIDUAL_LIMIT``; a direction that still fails is redone with ``"sparse"`` when its LU
  factors fit in memory, and refused with :class:`retina.errors.ResourceError` when they do not
  (never returned unconverged).

``solver="auto"`` uses ``"eig"`` without relaxation, ``"krylov"`` with relaxation (both rates
> 0), and ``"sparse"`` otherwise.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla
from scipy.sparse.linalg import norm as sp_norm

from retina.errors import InputError
from retina.spin import operators as ops
from retina.spin.hilbert import chunk_size, validate_field

__all__ = ["yields", "check_scope", "solver_for"]

#: Up to this dimension the relaxation sandwiches of the Krylov solver use dense products.
_DENSE_SANDWICH_UP_TO = 64

#: Krylov dimension of the GMRES in the relaxation solver (no restarts).
_KRYLOV_MAXITER = 200

#: GMRES restarts (from the last iterate) before a direction falls back to the sparse solve.
_KRYLOV_RESTARTS = 4

#: Largest accepted normwise backward error ``|L x + rho0| / (|L| |x| + |rho0|)`` (Frobenius norms)
#: of the Krylov solution: the computed ``x`` solves the equation with a relative perturbation of
#: ``L`` and ``rho0`` below this, as a direct solver's answer does to a few eps (the forward error
#: is at most the condition number of ``L`` times it).  Measured: GMRES reaches 1e-16..1e-15 in one
#: cycle for d = 24..128; the limit grows with ``d / 64`` above d = 64 (rounding of the d-term sums).
_RESIDUAL_LIMIT = 1e-15

#: Eigenvector condition estimate above which a direction falls back to the sparse solve.
_COND_LIMIT = 1e7


def check_scope(system) -> None:
    """Refuse a system whose rates make the yields undefined.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Raises
    ------
    InputError
        For a rate that is negative or not finite, both rates zero (the pair never reacts), or an
        initial state or reported yield other than "singlet" or "triplet".
    """
    ks, kt = float(system.k_singlet), float(system.k_triplet)
    for key, k in (("k_singlet", ks), ("k_triplet", kt)):
        if not np.isfinite(k) or k < 0:
            raise InputError(f"expected a finite rate >= 0 s^-1, got {k!r}", source=system.source, key=key)
    if ks == 0 and kt == 0:
        raise InputError("both recombination rates are zero: the pair never reacts and the yields are undefined",
                         source=system.source, key="k_singlet")
    for which in (system.initial_state, system.reported_yield):
        if which not in ("singlet", "triplet"):
            raise InputError(f"expected 'singlet' or 'triplet', got {which!r}", source=system.source,
                             key="initial_state" if which == system.initial_state else "reported_yield")


def solver_for(system) -> str:
    """The Liouville solver this system takes.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Returns
    -------
    str
        ``"eig"`` (no relaxation) or ``"krylov"`` (relaxation) when both rates are positive, else
        ``"sparse"``.
    """
    if not (system.k_singlet > 0 and system.k_triplet > 0):
        return "sparse"
    return "krylov" if system.relaxation.any else "eig"


def _trace_pair(system, space, x) -> tuple[float, float]:
    """``(Tr(P_S x), Tr x)`` for a (d, d) matrix x, from the singlet rows/columns only."""
    i_ud, i_du = space.singlet_indices()
    # Tr(P_S x) = sum_nu <S nu| x |S nu> = (x_uu + x_dd - x_ud - x_du) / 2 over the index pairs
    ts = 0.5 * (x[i_ud, i_ud] + x[i_du, i_du] - x[i_ud, i_du] - x[i_du, i_ud]).sum()
    return complex(ts), complex(np.trace(x))


def _finish(system, ts, tt_total):
    """Reported yield from ``Tr(P_S x)`` and ``Tr x`` (complex, imaginary parts are round-off)."""
    if system.reported_yield == "singlet":
        return float(system.k_singlet) * np.real(ts)
    return float(system.k_triplet) * np.real(tt_total - ts)


def _sparse_solve(system, l0, lb, b_vec, rho0_vec, space):
    lmat = l0 + b_vec[0] * lb[0] + b_vec[1] * lb[1] + b_vec[2] * lb[2]
    try:
        lu = spla.splu(lmat.tocsc())
    except RuntimeError as exc:  # "Factor is exactly singular"
        raise InputError(f"the Liouvillian is singular ({exc}): some state never recombines; give both rates > 0 "
                         "or add relaxation", source=system.source, key="k_triplet") from None
    x = lu.solve(-rho0_vec)
    if not np.all(np.isfinite(x)):
        raise InputError("the Liouvillian is singular: some state never recombines; give both rates > 0",
                         source=system.source, key="k_triplet")
    d = space.dimension
    return _trace_pair(system, space, x.reshape(d, d))


def yields_sparse(system, field_uT, directions, *, progress=None) -> np.ndarray:
    """Reported yields by one sparse LU solve of the Liouvillian per direction.

    Parameters
    ----------
    system : SpinSystem
        Any system :func:`check_scope` accepts.
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
        Counts directions.

    Returns
    -------
    ndarray, shape (N,)
        Reported yield (dimensionless).
    """
    check_scope(system)
    b, dirs = validate_field(field_uT, directions, system.source)
    l0, lb, space = ops.liouvillian_parts(system)
    l0 = l0.tocsc()
    lb = [m.tocsc() for m in lb]
    rho0 = ops.initial_density(system, space).reshape(-1)
    n = dirs.shape[0]
    out = np.empty(n)
    every = max(1, n // 100)
    for i in range(n):
        ts, tr = _sparse_solve(system, l0, lb, b * dirs[i], rho0, space)
        out[i] = _finish(system, ts, tr)
        if progress is not None and ((i + 1) % every == 0 or i + 1 == n):
            progress(i + 1, n)
    return out


def yields_eig(system, field_uT, directions, *, progress=None, max_bytes=None) -> np.ndarray:
    """Reported yields through the eigen-decomposition of the effective Hamiltonian.

    Needs no relaxation and both rates > 0 (else :class:`InputError`).

    Parameters
    ----------
    system : SpinSystem
        The pair (unequal rates, exchange, dipolar coupling allowed).
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
        Counts directions.
    max_bytes : int, optional
        Memory limit for the batched working arrays.

    Returns
    -------
    ndarray, shape (N,)
        Reported yield (dimensionless).
    """
    check_scope(system)
    if system.relaxation.any or solver_for(system) != "eig":
        raise InputError("the effective-Hamiltonian solver needs both rates > 0 and no relaxation; "
                         "use solver='sparse'", source=system.source, key="relaxation")
    b, dirs = validate_field(field_uT, directions, system.source)
    parts = ops.hamiltonian_parts(system)
    space = parts.space
    d, m = space.dimension, space.nuclear_dimension
    i_ud, i_du = space.singlet_indices()
    ps = ops.singlet_projector(space)
    ks, kt = float(system.k_singlet), float(system.k_triplet)
    g0 = parts.h0 - 0.5j * (ks * ps + kt * (np.eye(d) - ps))
    hb = parts.hb.reshape(3, d * d)
    n = dirs.shape[0]
    out = np.empty(n)
    step = max(1, chunk_size(d, max_bytes) // 2)
    sparse_parts = None
    scale = max(ks, kt)
    for start in range(0, n, step):
        stop = min(n, start + step)
        g = ((b * dirs[start:stop]).astype(complex) @ hb).reshape(-1, d, d) + g0
        g /= scale  # work in units of the largest rate
        lam, v = np.linalg.eig(g)
        w = np.linalg.inv(v)
        cond = np.linalg.norm(v, axis=(1, 2)) * np.linalg.norm(w, axis=(1, 2)) / d
        a = (w[:, :, i_ud] - w[:, :, i_du]) * np.sqrt(0.5)  # (n, d, M): V^-1 |S nu>
        r = np.matmul(a, a.conj().transpose(0, 2, 1))  # V^-1 P_S V^-+
        if system.initial_state == "singlet":
            r /= m
        else:
            r = (np.matmul(w, w.conj().transpose(0, 2, 1)) - r) / (3 * m)
        denom = 1j * (lam[:, :, None] - lam[:, None, :].conj())
        xt = r / denom  # X in the eigenbasis, time in units of 1/scale
        c = (v[:, i_ud, :] - v[:, i_du, :]) * np.sqrt(0.5)  # (n, M, d): <S nu| V
        gs = np.matmul(c.conj().transpose(0, 2, 1), c)  # V^+ P_S V
        gt = np.matmul(v.conj().transpose(0, 2, 1), v)  # V^+ V
        ts = np.sum(xt * gs.transpose(0, 2, 1), axis=(1, 2)) / scale
        tr = np.sum(xt * gt.transpose(0, 2, 1), axis=(1, 2)) / scale
        for p in range(stop - start):
            if not (cond[p] < _COND_LIMIT):
                if sparse_parts is None:
                    l0, lb, _ = ops.liouvillian_parts(system)
                    sparse_parts = (l0.tocsc(), [x.tocsc() for x in lb],
                                    ops.initial_density(system, space).reshape(-1))
                ts[p], tr[p] = _sparse_solve(system, sparse_parts[0], sparse_parts[1], b * dirs[start + p],
                                             sparse_parts[2], space)
            out[start + p] = _finish(system, ts[p], tr[p])
        if progress is not None:
            progress(stop, n)
    return out


def _gmres(apply, b, x0, *, rtol, maxiter):
    """Unrestarted GMRES for ``A x = b`` (complex vectors), classical Gram-Schmidt applied twice.

    Returns ``(x, relative residual estimate)``.  Small and allocation-light: the Krylov solver's
    operators are cheap for small pairs, where the bookkeeping of a general-purpose GMRES would
    dominate.
    """
    r0 = b - apply(x0)
    beta = np.linalg.norm(r0)
    bnorm = np.linalg.norm(b) or 1.0
    if beta <= rtol * bnorm:
        return x0, beta / bnorm
    n = b.size
    basis = np.empty((maxiter + 1, n), dtype=complex)
    hess = np.zeros((maxiter + 1, maxiter), dtype=complex)
    basis[0] = r0 / beta
    # Givens rotations keep the least-squares residual |g[j+1]| current
    cs = np.zeros(maxiter, dtype=complex)
    sn = np.zeros(maxiter, dtype=complex)
    g = np.zeros(maxiter + 1, dtype=complex)
    g[0] = beta
    j = -1
    for j in range(maxiter):
        w = apply(basis[j])
        vj = basis[: j + 1]
        h = vj.conj() @ w
        w = w - h @ vj
        h2 = vj.conj() @ w
        w = w - h2 @ vj
        h = h + h2
        hn = np.linalg.norm(w)
        col = np.empty(j + 2, dtype=complex)
        col[: j + 1] = h
        col[j + 1] = hn
        for i in range(j):  # apply the earlier rotations
            t = cs[i] * col[i] + sn[i] * col[i + 1]
            col[i + 1] = -np.conj(sn[i]) * col[i] + np.conj(cs[i]) * col[i + 1]
            col[i] = t
        a, c = col[j], col[j + 1]
        rr = np.hypot(abs(a), abs(c))
        cs[j], sn[j] = (1.0, 0.0) if rr == 0 else (np.conj(a) / rr, np.conj(c) / rr)
        col[j] = rr
        col[j + 1] = 0.0
        g[j + 1] = -np.conj(sn[j]) * g[j]
        g[j] = cs[j] * g[j]
        hess[: j + 2, j] = col
        if abs(g[j + 1]) <= rtol * bnorm or hn == 0.0:
            break
        basis[j + 1] = w / hn
    k = j + 1
    y = np.linalg.solve(np.triu(hess[:k, :k]), g[:k]) if k else np.zeros(0)
    return x0 + y @ basis[:k], abs(g[k]) / bnorm


def _lindblad_terms(system, space):
    """``[(rate, A_j)]`` of the relaxation (sparse CSR A_j), as in retina.spin.operators."""
    terms = []
    relax = system.relaxation
    for rate, s_e in zip(relax.random_field, ops.electron_operators(space)):
        if rate:
            terms += [(float(rate), a.tocsr()) for a in s_e]
    if relax.st_dephasing:
        terms.append((float(relax.st_dephasing), ops.singlet_projector(space, sparse=True)))
    return terms


def sparse_lu_bytes(dimension: int) -> int:
    """Estimated peak memory of one sparse LU solve of the (d^2, d^2) Liouvillian.

    The fill-in of the factors grows as about ``0.75 d^4`` entries (measured, 24 bytes each with
    their indices); the engine's cost model uses the same figure.

    Parameters
    ----------
    dimension : int
        Hilbert dimension ``d``.

    Returns
    -------
    int
        Bytes.
    """
    dd = int(dimension) ** 2
    return int(24 * 0.75 * dd * dd + 20 * 40 * dd)


def _check_sparse_fallback_fits(system, d, resid) -> None:
    """Refuse (ResourceError) instead of starting a sparse fallback that cannot fit in memory."""
    from retina.errors import ResourceError
    from retina.spin import memory

    need = sparse_lu_bytes(d)
    limit = int(0.6 * memory.available_bytes())
    if need > limit:
        raise ResourceError(
            f"{system.name!r}: the relaxation solver (GMRES) did not converge for a field direction "
            f"(relative residual {resid:.2g} after {_KRYLOV_RESTARTS + 1} cycles of {_KRYLOV_MAXITER} "
            f"steps), and the exact sparse fallback for Hilbert dimension {d} would need about "
            f"{need / 2**30:.3g} GiB (limit {limit / 2**30:.3g} GiB); relaxation rates far above the "
            f"recombination rates slow GMRES down: use fewer nuclei or smaller relaxation rates")


def yields_krylov(system, field_uT, directions, *, progress=None, rtol=1e-13) -> np.ndarray:
    """Reported yields by Sylvester-preconditioned GMRES (module docstring).

    Needs both rates > 0 (else :class:`InputError`); meant for systems with relaxation.

    Parameters
    ----------
    system : SpinSystem
        The pair.
    field_uT : float
        Static field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
        Counts directions.
    rtol : float
        Relative residual at which GMRES stops.

    Returns
    -------
    ndarray, shape (N,)
        Reported yield (dimensionless).
    """
    check_scope(system)
    if not (system.k_singlet > 0 and system.k_triplet > 0):
        raise InputError("the Krylov solver needs both recombination rates > 0; use solver='sparse'",
                         source=system.source, key="k_triplet")
    b, dirs = validate_field(field_uT, directions, system.source)
    parts = ops.hamiltonian_parts(system)
    space = parts.space
    d = space.dimension
    ps = ops.singlet_projector(space)
    ks, kt = float(system.k_singlet), float(system.k_triplet)
    terms = _lindblad_terms(system, space)
    damp = ks * ps + kt * (np.eye(d) - ps)
    for c, a in terms:
        damp = damp + c * (a.conj().T @ a).toarray()
    scale = max(ks, kt)
    g0 = (parts.h0 - 0.5j * damp) / scale  # time in units of 1/scale
    dense = d <= _DENSE_SANDWICH_UP_TO
    if dense:  # stacks (J, d, d) of c_j A_j and A_j^+: two batched products per sandwich
        a_stack = np.stack([c / scale * a.toarray() for c, a in terms])
        ah_stack = np.stack([a.conj().T.toarray() for c, a in terms])
    terms = [(c / scale, a, a.conj().T.tocsr()) for c, a in terms]
    sandwich_norm = sum(c * sp_norm(a) ** 2 for c, a, _ in terms)
    rho0 = ops.initial_density(system, space)
    rho0_norm = np.linalg.norm(rho0)
    limit = _RESIDUAL_LIMIT * max(1.0, d / 64.0)
    n = dirs.shape[0]
    out = np.empty(n)
    sparse_parts = None
    for i in range(n):
        g = g0 + np.einsum("k,kij->ij", (b * dirs[i]).astype(complex), parts.hb) / scale
        lam, v = np.linalg.eig(g)
        w = np.linalg.inv(v)
        vh, wh = v.conj().T, w.conj().T
        denom = -1j * (lam[:, None] - lam[None, :].conj())

        # an upper bound of the spectral norm of L: 2 |G'|_F for the commutator, |A|_F^2 per sandwich
        l_norm = 2.0 * np.linalg.norm(g) + sandwich_norm

        def sylv_inv(y):  # solves -i (G' x - x G'^+) = y
            return v @ ((w @ y @ wh) / denom) @ vh

        def sandwich(x):
            if dense:
                return np.matmul(a_stack @ x, ah_stack).sum(axis=0)
            acc = np.zeros_like(x)
            for c, a, ah in terms:  # A x A^+ with sparse A: (A^+)^T x^T = (x A^+)^T
                acc += c * (a @ (ah.T @ x.T).T)
            return acc

        def full(x):
            return -1j * (g @ x - x @ g.conj().T) + sandwich(x)

        def op(xv):
            x_ = xv.reshape(d, d)
            return (x_ + sylv_inv(sandwich(x_))).reshape(-1)

        rhs = sylv_inv(-rho0).reshape(-1)
        xv = rhs.copy()
        for _cycle in range(_KRYLOV_RESTARTS + 1):  # restarted from the last iterate
            xv, est = _gmres(op, rhs, xv, rtol=rtol, maxiter=_KRYLOV_MAXITER)
            x = xv.reshape(d, d)
            # normwise backward error of the full equation (rounding floor ~ eps, whatever |L|)
            resid = np.linalg.norm(full(x) + rho0) / (l_norm * np.linalg.norm(x) + rho0_norm)
            if np.isfinite(resid) and resid <= limit:
                break
        if not (np.isfinite(resid) and resid <= limit):
            _check_sparse_fallback_fits(system, d, resid)
            if sparse_parts is None:
                l0, lb, _ = ops.liouvillian_parts(system)
                sparse_parts = (l0.tocsc(), [m_.tocsc() for m_ in lb], rho0.reshape(-1))
            ts, tr = _sparse_solve(system, sparse_parts[0], sparse_parts[1], b * dirs[i], sparse_parts[2], space)
        else:
            ts, tr = _trace_pair(system, space, x / scale)
        out[i] = _finish(system, ts, tr)
        if progress is not None:
            progress(i + 1, n)
    return out


def yields(system, field_uT, directions, *, progress=None, solver="auto", max_bytes=None) -> np.ndarray:
    """The reported yield of ``system`` for each field direction (exact, Liouville space).

    Parameters
    ----------
    system : SpinSystem
        Any rates (not both zero), exchange, dipolar coupling and relaxation.
    field_uT : float
        Field strength, microtesla.
    directions : array_like, shape (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
    solver : {"auto", "sparse", "eig", "krylov"}
        See the module docstring.
    max_bytes : int, optional
        Working-memory bound for one batch of the ``"eig"`` solver.

    Returns
    -------
    ndarray, shape (N,)
        ``system.reported_yield`` from ``system.initial_state``, dimensionless.
    """
    if solver == "auto":
        solver = solver_for(system)
    if solver == "sparse":
        return yields_sparse(system, field_uT, directions, progress=progress)
    if solver == "eig":
        return yields_eig(system, field_uT, directions, progress=progress, max_bytes=max_bytes)
    if solver == "krylov":
        return yields_krylov(system, field_uT, directions, progress=progress)
    raise InputError(f"expected solver 'auto', 'sparse', 'eig' or 'krylov', got {solver!r}", key="solver")
