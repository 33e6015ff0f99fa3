r"""Separable-radicals method: exact yields of a pair whose electrons do not interact.

Scope
-----
No exchange and no dipolar coupling (``system.electron_coupled`` is False), equal recombination
rates ``k_S = k_T = k`` (the exponential model) and no relaxation.  Anything else raises
:class:`retina.errors.InputError` naming the reason; use the exact methods
(:mod:`retina.spin.hilbert`, :mod:`retina.spin.liouville`) for those systems.  Any nuclear spins,
anisotropic hyperfine tensors and anisotropic g tensors are allowed.

Derivation
----------
Notation as in :mod:`retina.spin.system` (angular-frequency units, ``hbar = 1``).  With no
electron-electron coupling the Hamiltonian splits, ``H = H_A + H_B``, each part acting on one
radical (its electron and its own nuclei), of dimensions ``d_A = 2 M_A`` and ``d_B = 2 M_B``;
``M = M_A M_B``.  With equal rates the Haberkorn equation gives
``rho(t) = exp(-k t) U(t) rho(0) U(t)^+``, so for a singlet start ``rho(0) = P_S / M``

    Phi_S = (k / M) int_0^inf exp(-k t) Tr[P_S P_S(t)] dt,   P_S(t) = U^+ P_S U  (Heisenberg).

Write ``P_S = 1/4 - S_A . S_B``.  Because ``U = U_A U_B`` factorises,
``P_S(t) = 1/4 - sum_b S_Ab(t) S_Bb(t)``, and since every spin component is traceless,

    Tr[P_S P_S(t)] = Tr[1]/16 + sum_{a,b} Tr_A[S_Aa S_Ab(t)] Tr_B[S_Ba S_Bb(t)]
                   = M/4 + sum_{a,b} C^A_ab(t) C^B_ab(t),

the cross terms ``Tr[S_Aa S_Ba] = Tr_A[S_Aa] Tr_B[S_Ba]`` vanishing (a, b run over x, y, z).  At
``t = 0``, ``C^r_ab = delta_ab M_r / 2`` and the bracket is ``M/4 + 3M/4 = M`` as it must be.

In the eigenbasis of each radical (``H_A |m> = lambda_m |m>``, ``H_B |p> = mu_p |p>``),
``C^A_ab(t) = sum_mn (S_Aa)_mn (S_Ab)_nm exp(i (lambda_n - lambda_m) t)`` and likewise for B.  The
sum over a, b of the product then regroups exactly into squared moduli::

    sum_ab C^A_ab C^B_ab = sum_{mnpq} |X_{mp,nq}|^2 exp(i Omega t),
    X_{mp,nq} = sum_a (S_Aa)_mn (S_Ba)_pq = <m p| S_A . S_B |n q>,
    Omega = (lambda_n - lambda_m) + (mu_q - mu_p),

because ``(S_a)_nm = conj((S_a)_mn)`` (Hermitian).  The Laplace transform against ``k exp(-k t)``
gives ``k / (k - i Omega)``; the terms ``(mn, pq)`` and ``(nm, qp)`` have the same weight and
opposite ``Omega``, so the imaginary parts cancel in pairs and only the real part
``k^2 / (k^2 + Omega^2)`` survives::

    Phi_S(singlet start) = 1/4 + (1 / (M_A M_B)) sum_{m,n in A} sum_{p,q in B}
                           |<m p|S_A . S_B|n q>|^2  k^2 / (k^2 + Omega^2).

The kernel is even in ``Omega``, so the ``m > n`` half of the A sum equals the ``m < n`` half and
is folded onto it (a factor 2).  Cost per direction: two eigendecompositions of size ``d_A`` and
``d_B`` (never ``d_A d_B``) and ``~ d_A^2 d_B^2 / 2`` kernel terms in a numba loop, with no
``(d_A d_B)^2`` matrix ever stored.  The result is symmetric in A and B, so the code lets the
larger radical run the kernel's inner (vectorised) loop.

Other starts and yields (equal rates): the total yield is ``k int exp(-k t) Tr rho dt = 1``, so
``Phi_T = 1 - Phi_S``.  For a triplet start ``rho(0) = P_T / (3M) = (1 - P_S) / (3M)``,

    Phi_S(triplet start) = (k / 3M) int e^{-kt} (Tr[P_S] - Tr[P_S P_S(t)]) dt
                         = (1 - Phi_S(singlet start)) / 3,

and ``Phi_T(triplet start) = 1 - Phi_S(triplet start)``.

References: the factorisation of the singlet probability through each radical's own spin
correlation functions is given for the exponential model by C. R. Timmel, U. Till, B. Brocklehurst,
K. A. McLauchlan and P. J. Hore, Mol. Phys. 95, 71 (1998) (volume and page from memory); the
regrouping into ``|<mp|S_A.S_B|nq>|^2`` above is derived here.
"""

from __future__ import annotations

from typing import Callable

import numba
import numpy as np

from retina.errors import InputError
from retina.spin.system import equal_rate_reported_yield
from retina.spin.operators import GAMMA_E, MU_B_OVER_HBAR, spin_matrices

__all__ = ["yields", "check_scope", "radical_operators", "singlet_start_singlet_yield",
           "working_bytes", "batch_bytes", "DEFAULT_BATCH_BYTES"]

#: Default working-set budget (bytes) for one batch of directions.
DEFAULT_BATCH_BYTES = 64 * 2**20


def radical_operators(radical) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The spin operators and field-independent Hamiltonian of one radical on its own space.

    The space is the electron (first factor) times the radical's nuclei in order, dimension
    ``d = 2 prod(2 I_i + 1)``.

    Parameters
    ----------
    radical : retina.spin.system.Radical

    Returns
    -------
    s_e : ndarray (3, d, d) complex
        Electron spin components ``S_x, S_y, S_z``.
    h_hf : ndarray (d, d) complex
        Hyperfine Hamiltonian ``gamma_e sum_i S . A_i . I_i`` in rad s^-1.
    zeeman : ndarray (3, 3) float
        ``(mu_B / hbar) g`` in rad s^-1 T^-1: the electron Zeeman term is
        ``sum_jk B_j zeeman_jk S_k`` for a field ``B`` in tesla.
    """
    se = spin_matrices(0.5)
    mults = [n.multiplicity for n in radical.nuclei]
    d_nuc = int(np.prod(mults)) if mults else 1
    d = 2 * d_nuc
    s_e = np.stack([np.kron(s, np.eye(d_nuc)) for s in se])
    h_hf = np.zeros((d, d), dtype=complex)
    for i, nuc in enumerate(radical.nuclei):
        before = int(np.prod(mults[:i])) if i else 1
        after = int(np.prod(mults[i + 1:])) if i + 1 < len(mults) else 1
        ii = [np.kron(np.kron(np.eye(before), x), np.eye(after)) for x in spin_matrices(nuc.spin)]
        a = np.asarray(nuc.hyperfine_mT, dtype=float) * 1e-3 * GAMMA_E
        for j in range(3):
            for k in range(3):
                if a[j, k] != 0.0:
                    h_hf += a[j, k] * np.kron(se[j], ii[k])
    zeeman = MU_B_OVER_HBAR * np.asarray(radical.g_matrix, dtype=float)
    return s_e, h_hf, zeeman


def check_scope(system) -> None:
    """Refuse a system outside the separable-radicals method.

    The method needs uncoupled electrons (no exchange, no dipolar), equal rates and no relaxation.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Raises
    ------
    InputError
        Naming the coupling, rate or relaxation that is out of scope.
    """
    src = getattr(system, "source", None)
    if system.exchange_mT != 0.0:
        raise InputError(
            f"the separable-radicals method needs uncoupled electrons, but the exchange coupling is "
            f"J = {system.exchange_mT} mT; use the exact method (method='hilbert' or 'liouville')",
            source=src, key="exchange_mT")
    d = system.dipolar_mT
    if d is not None and np.any(np.asarray(d) != 0.0):
        raise InputError(
            "the separable-radicals method needs uncoupled electrons, but a dipolar coupling is "
            "given; use the exact method (method='hilbert' or 'liouville')",
            source=src, key="dipolar_mT")
    if not system.equal_rates:
        raise InputError(
            f"the separable-radicals method needs equal recombination rates, got k_singlet = "
            f"{system.k_singlet} s^-1 and k_triplet = {system.k_triplet} s^-1; use "
            f"method='liouville'", source=src, key="k_triplet")
    if not (np.isfinite(system.k_singlet) and system.k_singlet > 0):
        raise InputError(f"expected a positive finite recombination rate, got {system.k_singlet} s^-1",
                         source=src, key="k_singlet")
    if system.relaxation.any:
        raise InputError(
            "the separable-radicals method has no relaxation; the system sets relaxation rates, "
            "use method='liouville'", source=src, key="relaxation")


@numba.njit(cache=True, fastmath={"reassoc", "contract", "nsz"})
def _pair_sum(ea, sa_re, sa_im, eb, sb_re, sb_im, k):
    """``sum_{mnpq} |<mp|S_A.S_B|nq>|^2 k^2/(k^2 + Omega^2)`` for one direction.

    ``ea (dA,)``, ``eb (dB,)`` eigenvalues (rad s^-1, shifted and scaled by the caller);
    ``sa_* (3, dA, dA)`` electron spin of A in A's eigenbasis, ``sb_* (3, dB*dB)`` of B, flattened
    row-major (index ``p * dB + q``); ``k`` the rate in the same units as the eigenvalues.
    """
    da = ea.shape[0]
    db = eb.shape[0]
    nb = db * db
    wb = np.empty(nb)
    for p in range(db):
        for q in range(db):
            wb[p * db + q] = eb[q] - eb[p]
    k2 = k * k
    bxr = sb_re[0]
    byr = sb_re[1]
    bzr = sb_re[2]
    bxi = sb_im[0]
    byi = sb_im[1]
    bzi = sb_im[2]
    total = 0.0
    for m in range(da):
        for n in range(m, da):
            axr = sa_re[0, m, n]
            ayr = sa_re[1, m, n]
            azr = sa_re[2, m, n]
            axi = sa_im[0, m, n]
            ayi = sa_im[1, m, n]
            azi = sa_im[2, m, n]
            wa = ea[n] - ea[m]
            acc = 0.0
            for j in range(nb):
                xr = axr * bxr[j] - axi * bxi[j] + ayr * byr[j] - ayi * byi[j] \
                    + azr * bzr[j] - azi * bzi[j]
                xi = axr * bxi[j] + axi * bxr[j] + ayr * byi[j] + ayi * byr[j] \
                    + azr * bzi[j] + azi * bzr[j]
                w = wa + wb[j]
                acc += (xr * xr + xi * xi) / (k2 + w * w)
            if n == m:
                total += acc
            else:
                total += 2.0 * acc
    return total * k2


def _check_inputs(field_uT, directions) -> np.ndarray:
    try:
        f = float(field_uT)
    except (TypeError, ValueError):
        raise InputError(f"expected a field strength in microtesla (a number), got {field_uT!r}",
                         key="field_uT") from None
    if not np.isfinite(f) or f < 0:
        raise InputError(f"expected a finite non-negative field strength in uT, got {field_uT!r}",
                         key="field_uT")
    dirs = np.asarray(directions, dtype=float)
    if dirs.ndim == 1 and dirs.shape == (3,):
        dirs = dirs[None, :]
    if dirs.ndim != 2 or dirs.shape[1] != 3:
        raise InputError(f"expected field directions of shape (N, 3), got shape {dirs.shape}",
                         key="directions")
    if not np.all(np.isfinite(dirs)):
        raise InputError("field directions contain non-finite values", key="directions")
    norms = np.linalg.norm(dirs, axis=1)
    if np.any(norms < 1e-12):
        raise InputError("field directions must be non-zero vectors (they are normalised)",
                         key="directions")
    return dirs / norms[:, None]


def batch_bytes(system) -> int:
    """Working memory per direction in a batch (rotated operators and temporaries).

    Parameters
    ----------
    system : SpinSystem
        The pair (its radicals' nuclear dimensions set the cost).

    Returns
    -------
    int
        Bytes.
    """
    d2 = sum(r.dimension ** 2 for r in system.radicals)
    return 16 * 15 * d2


def working_bytes(system, n_directions: int, max_bytes: int | None = None) -> int:
    """Peak working memory of :func:`yields` for a number of directions.

    Parameters
    ----------
    system : SpinSystem
        The pair.
    n_directions : int
        Number of field directions.
    max_bytes : int, optional
        Memory limit that caps the batch size.

    Returns
    -------
    int
        Bytes.
    """
    per = batch_bytes(system)
    budget = DEFAULT_BATCH_BYTES if max_bytes is None else int(max_bytes)
    batch = max(1, min(max(int(n_directions), 1), budget // per))
    return batch * per + 16 * 5 * sum(r.dimension ** 2 for r in system.radicals)


def singlet_start_singlet_yield(system, field_uT, directions, *,
                                progress: Callable[[int, int], None] | None = None,
                                max_bytes: int | None = None) -> np.ndarray:
    """Singlet yield from a singlet start, ``Phi_S = 1/4 + sum |X|^2 K / (M_A M_B)``.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        Must pass :func:`check_scope`.
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Field directions in the molecular frame (normalised here).
    progress : callable(done, total), optional
    max_bytes : int, optional
        Working-memory budget for one batch of directions (default 64 MiB); see
        :func:`working_bytes`.

    Returns
    -------
    ndarray (N,)
        Dimensionless yields in [0, 1].
    """
    check_scope(system)
    dirs = _check_inputs(field_uT, directions)
    n_dir = dirs.shape[0]
    b = dirs * (float(field_uT) * 1e-6)                           # (N, 3) tesla
    k = float(system.k_singlet)
    # The formula is symmetric in A and B; the larger radical goes to the kernel's inner loop.
    radicals = sorted(system.radicals, key=lambda r: r.dimension)
    ops = [radical_operators(r) for r in radicals]
    m_ab = system.radicals[0].nuclear_dimension * system.radicals[1].nuclear_dimension
    d_b = ops[1][1].shape[0]
    budget = DEFAULT_BATCH_BYTES if max_bytes is None else int(max_bytes)
    batch = max(1, min(n_dir, budget // batch_bytes(system)))
    out = np.empty(n_dir)
    # Frequencies are scaled by 1/k inside the kernel (dimensionless Omega / k) for conditioning.
    scale = 1.0 / k
    for start in range(0, n_dir, batch):
        stop = min(n_dir, start + batch)
        rot = []
        for s_e, h_hf, zee in ops:
            w = b[start:stop] @ zee                               # (n, 3) rad s^-1
            h = h_hf[None] + np.einsum("nj,jab->nab", w, s_e)
            evals, vecs = np.linalg.eigh(h)
            # S in the eigenbasis: V^+ S V, (n, 3, d, d)
            s_rot = np.matmul(np.matmul(vecs.conj().transpose(0, 2, 1)[:, None], s_e[None]),
                              vecs[:, None])
            rot.append((evals * scale, s_rot))
        (ea, sa), (eb, sb) = rot
        for i in range(stop - start):
            sbi = sb[i].reshape(3, d_b * d_b)
            total = _pair_sum(ea[i], np.ascontiguousarray(sa[i].real),
                              np.ascontiguousarray(sa[i].imag), eb[i],
                              np.ascontiguousarray(sbi.real), np.ascontiguousarray(sbi.imag), 1.0)
            out[start + i] = 0.25 + total / m_ab
        if progress is not None:
            progress(stop, n_dir)
    return out


def yields(system, field_uT, directions, *,
           progress: Callable[[int, int], None] | None = None,
           max_bytes: int | None = None) -> np.ndarray:
    """The system's reported yield for each field direction, by the separable-radicals method.

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        No exchange or dipolar coupling, equal rates, no relaxation (else :class:`InputError`).
        ``system.initial_state`` and ``system.reported_yield`` select among the four yields
        derived in the module docstring.
    field_uT : float
        Field strength in microtesla.
    directions : array_like (N, 3)
        Unit field directions in the molecular frame.
    progress : callable(done, total), optional
        Called after each batch of directions.
    max_bytes : int, optional
        Working-memory budget for one batch of directions (default 64 MiB).

    Returns
    -------
    ndarray (N,)
        The reported yield (dimensionless, in [0, 1]).

    Raises
    ------
    InputError
        System outside the method's scope, or malformed ``field_uT`` / ``directions``.
    """
    phi_ss = singlet_start_singlet_yield(system, field_uT, directions, progress=progress,
                                         max_bytes=max_bytes)
    return equal_rate_reported_yield(system, phi_ss)
