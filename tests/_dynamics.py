"""Brute-force reference dynamics for the spin tests, built only from numpy, scipy and QuTiP.

Nothing here imports ``retina.spin.operators`` or the engine methods: the pair Hamiltonian, the
projectors and the Liouvillian are rebuilt from ``numpy.kron`` so that the references are
independent of the code they check.  The physics conventions are those written in
:mod:`retina.spin.system` (Hamiltonian in rad s^-1, Haberkorn recombination, yields
``Phi_X = k_X int_0^inf Tr(P_X rho) dt``); the relaxation conventions are those of
:mod:`retina.spin.operators` (random-field: ``k_r sum_a (S_a rho S_a - {S_a^2, rho}/2)``;
singlet-triplet dephasing: ``k_STD (P_S rho P_S - {P_S, rho}/2)``), restated here from the text,
not imported.

Space ordering here (deliberately different from the package's): electron A, electron B, then
the nuclei of A, then the nuclei of B.  Traces do not depend on the ordering.

References provided
-------------------
- :func:`dense_eigen_yields`: the closed Laplace-transform sum in the eigenbasis of the full
  ``(d, d)`` pair Hamiltonian (equal rates only); exact to rounding.
- :func:`liouville_solve_yields`: ``Phi_X = k_X Tr(P_X (-L)^{-1} rho0)`` by a dense linear solve
  (any rates, relaxation); exact to rounding.
- :func:`expm_propagation_yield`: time propagation with ``scipy.linalg.expm`` of the Liouvillian
  over a uniform grid to many lifetimes, composite Simpson quadrature, Richardson error estimate
  and a rigorous bound on the truncated tail.
- :func:`qutip_mesolve_yield`: the same integral from ``qutip.mesolve`` driven by a Liouvillian
  superoperator assembled with QuTiP's own ``liouvillian``/``spre``/``spost``; error estimate from
  the quadrature (Richardson), the tail bound and the ODE tolerance (two runs).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.constants as sc
import scipy.linalg as sla

MU_B_OVER_HBAR = sc.physical_constants["Bohr magneton"][0] / sc.hbar
GAMMA_E = abs(sc.physical_constants["electron g factor"][0]) * MU_B_OVER_HBAR


def spin_ops(s: float) -> list[np.ndarray]:
    """``[S_x, S_y, S_z]`` for spin ``s`` built from the ladder operator (basis m = -s..s).

    Ascending m on purpose (the package uses descending m): traces are basis-independent.
    """
    n = int(round(2 * s)) + 1
    m = -s + np.arange(n)
    sp = np.zeros((n, n), dtype=complex)
    for i in range(n - 1):  # S_+ |m_i> = sqrt(s(s+1) - m_i(m_i+1)) |m_{i+1}>
        sp[i + 1, i] = np.sqrt(s * (s + 1) - m[i] * (m[i] + 1))
    return [(sp + sp.conj().T) / 2, (sp - sp.conj().T) / 2j, np.diag(m).astype(complex)]


@dataclass
class PairOps:
    """Dense pair-space operators: electron spins, Hamiltonian parts, projectors."""

    sa: list          # [S_Ax, S_Ay, S_Az], each (d, d)
    sb: list
    h0: np.ndarray    # field-independent part, rad s^-1
    hb: np.ndarray    # (3, d, d) rad s^-1 per tesla
    ps: np.ndarray    # singlet projector
    m: int            # nuclear dimension

    @property
    def d(self) -> int:
        return self.h0.shape[0]


def pair_ops(system) -> PairOps:
    """Dense operators of ``system`` (a :class:`retina.spin.system.SpinSystem`)."""
    ra, rb = system.radicals
    spins = [0.5, 0.5] + [n.spin for n in ra.nuclei] + [n.spin for n in rb.nuclei]
    dims = [int(round(2 * s)) + 1 for s in spins]

    def site(i):
        out = []
        for op in spin_ops(spins[i]):
            full = np.ones((1, 1), dtype=complex)
            for j, dj in enumerate(dims):
                full = np.kron(full, op if j == i else np.eye(dj))
            out.append(full)
        return out

    sa, sb = site(0), site(1)
    d = int(np.prod(dims))
    h0 = np.zeros((d, d), dtype=complex)
    hb = np.zeros((3, d, d), dtype=complex)
    idx = 2
    for se, rad in ((sa, ra), (sb, rb)):
        g = np.asarray(rad.g_matrix, dtype=float)
        for i in range(3):
            for j in range(3):
                hb[i] += MU_B_OVER_HBAR * g[i, j] * se[j]
        for nuc in rad.nuclei:
            si = site(idx)
            idx += 1
            a = np.asarray(nuc.hyperfine_mT, dtype=float) * 1e-3 * GAMMA_E
            for i in range(3):
                for j in range(3):
                    h0 += a[i, j] * se[i] @ si[j]
    sasb = sum(sa[i] @ sb[i] for i in range(3))
    if system.exchange_mT:
        h0 += -GAMMA_E * system.exchange_mT * 1e-3 * (2 * sasb + 0.5 * np.eye(d))
    if system.dipolar_mT is not None:
        dd = np.asarray(system.dipolar_mT, dtype=float) * 1e-3 * GAMMA_E
        for i in range(3):
            for j in range(3):
                h0 += dd[i, j] * sa[i] @ sb[j]
    ps = 0.25 * np.eye(d) - sasb
    m = ra.nuclear_dimension * rb.nuclear_dimension
    return PairOps(sa=sa, sb=sb, h0=h0, hb=hb, ps=ps, m=m)


def hamiltonian(ops: PairOps, b_tesla) -> np.ndarray:
    """``H = h0 + sum_k B_k hb[k]`` for one field vector (tesla), rad s^-1."""
    b = np.asarray(b_tesla, dtype=float)
    return ops.h0 + np.einsum("k,kij->ij", b, ops.hb)


def initial_rho(system, ops: PairOps) -> np.ndarray:
    if system.initial_state == "singlet":
        return ops.ps / ops.m
    return (np.eye(ops.d) - ops.ps) / (3 * ops.m)


def _unit(directions):
    dirs = np.atleast_2d(np.asarray(directions, dtype=float))
    return dirs / np.linalg.norm(dirs, axis=1)[:, None]


def dense_eigen_yields(system, field_uT, directions) -> np.ndarray:
    """Reported yield by the full-space eigen sum (equal rates, no relaxation), shape (N,).

    ``Phi_S(singlet start) = (1/M) sum_mn |<m|P_S|n>|^2 k^2/(k^2 + (w_m - w_n)^2)``: the Laplace
    transform of ``Tr(P_S U P_S U^+) e^{-kt}`` term by term in the eigenbasis.
    """
    assert system.equal_rates and not system.relaxation.any
    ops = pair_ops(system)
    k = system.k_singlet
    out = []
    for b in _unit(directions) * field_uT * 1e-6:
        w, v = np.linalg.eigh(hamiltonian(ops, b))
        p = v.conj().T @ ops.ps @ v
        dw = (w[:, None] - w[None, :]) / k
        phi_ss = float(np.sum(np.abs(p) ** 2 / (1 + dw * dw)).real) / ops.m
        phi_s = phi_ss if system.initial_state == "singlet" else (1 - phi_ss) / 3
        out.append(phi_s if system.reported_yield == "singlet" else 1 - phi_s)
    return np.array(out)


def liouvillian(system, ops: PairOps, b_tesla) -> np.ndarray:
    """Dense Liouvillian (column-stacking ``vec``: ``vec(A X B) = (B^T kron A) vec X``), s^-1."""
    d = ops.d
    one = np.eye(d)
    h = hamiltonian(ops, b_tesla)
    pt = one - ops.ps
    k = system.k_singlet * ops.ps + system.k_triplet * pt
    lv = -1j * (np.kron(one, h) - np.kron(h.T, one))
    lv += -0.5 * (np.kron(one, k) + np.kron(k.T, one))

    def lindblad(c, rate):
        cdc = c.conj().T @ c
        return rate * (np.kron(c.conj(), c) - 0.5 * np.kron(one, cdc) - 0.5 * np.kron(cdc.T, one))

    rel = system.relaxation
    for rate, se in zip(rel.random_field, (ops.sa, ops.sb)):
        if rate:
            for s in se:
                lv += lindblad(s, rate)
    if rel.st_dephasing:
        lv += lindblad(ops.ps, rel.st_dephasing)
    return lv


def _vec(x):
    return np.asarray(x).reshape(-1, order="F")


def _reported(system, ops):
    if system.reported_yield == "singlet":
        return system.k_singlet, ops.ps
    return system.k_triplet, np.eye(ops.d) - ops.ps


def liouville_solve_yields(system, field_uT, directions) -> np.ndarray:
    """Reported yield ``k_X Tr(P_X int rho dt) = k_X Tr(P_X (-L)^{-1} rho0)``, shape (N,)."""
    ops = pair_ops(system)
    kx, px = _reported(system, ops)
    r0 = _vec(initial_rho(system, ops))
    out = []
    for b in _unit(directions) * field_uT * 1e-6:
        x = np.linalg.solve(-liouvillian(system, ops, b), r0)
        out.append(float((kx * _vec(px.T) @ x).real))
    return np.array(out)


@dataclass(frozen=True)
class Estimate:
    """A yield with an error estimate (absolute)."""

    value: float
    error: float


def _simpson(f, h):
    return h / 3 * (f[0] + f[-1] + 4 * f[1:-1:2].sum() + 2 * f[2:-1:2].sum())


def _quadrature(f, h, tail):
    """Simpson on ``f`` (length 4n+1) and on every second point; Richardson-extrapolated value.

    Error estimate: ``|S_h - S_2h| / 15`` (Simpson's h^4 error, common practice, no source) plus
    the tail bound.
    """
    s1 = _simpson(f, h)
    s2 = _simpson(f[::2], 2 * h)
    return Estimate(s1 + (s1 - s2) / 15, abs(s1 - s2) / 15 + tail)


def _time_grid(system, ops, b, points_per_period, lifetimes):
    """Step ``h`` resolving the fastest Bohr frequency, end time ``lifetimes / k_min``."""
    w = np.linalg.eigvalsh(hamiltonian(ops, b))
    w_max = max(w[-1] - w[0], 1.0)
    k_min = min(system.k_singlet, system.k_triplet)
    t_end = lifetimes / k_min
    h_max = 2 * np.pi / w_max / points_per_period
    n = int(np.ceil(t_end / h_max / 4)) * 4
    return t_end / n, n, k_min, t_end


def expm_propagation_yield(system, field_uT, direction, *, points_per_period=48,
                           lifetimes=40.0) -> Estimate:
    """Reported yield by explicit propagation ``rho(t + h) = expm(L h) rho(t)`` and quadrature.

    The integrand ``k_X Tr(P_X rho(t))`` is sampled on a uniform grid to ``lifetimes / k_min``.
    Tail bound: ``d Tr(rho)/dt <= -k_min Tr(rho)``, so the neglected part is at most
    ``(k_X / k_min) exp(-k_min T)`` (derived from the Haberkorn equation).
    """
    ops = pair_ops(system)
    b = _unit(direction)[0] * field_uT * 1e-6
    h, n, k_min, t_end = _time_grid(system, ops, b, points_per_period, lifetimes)
    lv = liouvillian(system, ops, b)
    step = sla.expm(lv * h)
    kx, px = _reported(system, ops)
    # Blocked propagation (same grid, fewer Python steps): with P = expm(L h) and a block of B
    # steps, f(t_{sB + j}) = (obs P^j) . r_s and r_{s+1} = P^B r_s.  The rows obs P^j are built by
    # B vector-matrix products, P^B by expm(L h B) (equal to P^B up to rounding).
    block = 64
    rows = np.empty((block, lv.shape[0]), dtype=complex)
    rows[0] = kx * _vec(px.T)
    for j in range(1, block):
        rows[j] = rows[j - 1] @ step
    jump = sla.expm(lv * (h * block))
    r = _vec(initial_rho(system, ops)).astype(complex)
    f = np.empty(n + 1)
    for start in range(0, n + 1, block):
        stop = min(n + 1, start + block)
        f[start:stop] = (rows[: stop - start] @ r).real
        r = jump @ r
    return _quadrature(f, h, kx / k_min * np.exp(-k_min * t_end))


def qutip_mesolve_yield(system, field_uT, direction, *, points_per_period=24, lifetimes=40.0,
                        rtol=1e-10, atol=1e-13) -> Estimate:
    """Reported yield from ``qutip.mesolve`` with a Liouvillian superoperator built in QuTiP.

    ``L = liouvillian(H, c_ops) - (1/2)(spre(K) + spost(K))``, ``K = k_S P_S + k_T P_T``; mesolve
    returns ``Tr(P_X rho(t))`` on the grid.  The ODE error is estimated from a second run with
    tolerances 100 times looser (its difference from the first run bounds the first run's error
    when the solver converges, common practice, no source).
    """
    import qutip

    ops = pair_ops(system)
    b = _unit(direction)[0] * field_uT * 1e-6
    h, n, k_min, t_end = _time_grid(system, ops, b, points_per_period, lifetimes)
    d = ops.d
    dims = [[d], [d]]
    q = lambda x: qutip.Qobj(x, dims=dims)  # noqa: E731
    kmat = system.k_singlet * ops.ps + system.k_triplet * (np.eye(d) - ops.ps)
    c_ops = []
    rel = system.relaxation
    for rate, se in zip(rel.random_field, (ops.sa, ops.sb)):
        if rate:
            c_ops += [np.sqrt(rate) * q(s) for s in se]
    if rel.st_dephasing:
        c_ops.append(np.sqrt(rel.st_dephasing) * q(ops.ps))
    lv = qutip.liouvillian(q(hamiltonian(ops, b)), c_ops) - 0.5 * (qutip.spre(q(kmat)) + qutip.spost(q(kmat)))
    lv = lv.to("dense")  # small systems: dense products are faster than CSR
    kx, px = _reported(system, ops)
    tlist = np.linspace(0.0, t_end, n + 1)
    runs = []
    for tol in (1.0, 100.0):
        res = qutip.mesolve(lv, q(initial_rho(system, ops)), tlist, e_ops=[q(px)],
                            options={"rtol": rtol * tol, "atol": atol * tol, "nsteps": 10**7,
                                     "method": "lsoda", "progress_bar": False,
                                     "normalize_output": False})
        f = kx * np.real(np.asarray(res.expect[0]))
        runs.append(_quadrature(f, h, kx / k_min * np.exp(-k_min * t_end)))
    best, loose = runs
    return Estimate(best.value, best.error + abs(best.value - loose.value))
