"""Tests of the exact spin methods (retina.spin.operators, hilbert, liouville).

Every check names its source.  Independent references used here: closed forms derived in the
comments, QuTiP (``qutip.jmat``, ``qutip.tensor``, ``qutip.spre``/``spost``,
``qutip.lindblad_dissipator``) to rebuild Hamiltonians and Liouvillians without the package's
operators, ``numpy.linalg.solve`` on the dense Liouvillian, and ``scipy.linalg.expm`` time stepping.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import qutip
import scipy.constants as sc
import scipy.linalg as sla
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from retina.errors import InputError
from retina.spin import hilbert, liouville
from retina.spin import operators as ops
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem

# Constants recomputed here from scipy.constants (not imported from the package).
MU_B_OVER_HBAR = sc.physical_constants["Bohr magneton"][0] / sc.hbar
GAMMA_E = abs(sc.physical_constants["electron g factor"][0]) * MU_B_OVER_HBAR
G_E = abs(sc.physical_constants["electron g factor"][0])

RNG_SEED = 20261201


def sym(rng, scale=0.4, iso=0.5):
    """A random symmetric (3, 3) tensor in mT."""
    a = rng.normal(size=(3, 3)) * scale
    return (a + a.T) / 2 + np.eye(3) * iso


def random_system(rng, spins_a=(0.5,), spins_b=(1.0,), *, exchange=0.05, dipolar=True, k_s=2e6, k_t=2e6,
                  relaxation=Relaxation(), anisotropic_g=False, **kw):
    ra = Radical("A", g=G_E, nuclei=tuple(Nucleus(f"a{i}", s, sym(rng)) for i, s in enumerate(spins_a)),
                 g_tensor=(G_E * np.eye(3) + sym(rng, 0.002, 0.0)) if anisotropic_g else None)
    rb = Radical("B", g=G_E, nuclei=tuple(Nucleus(f"b{i}", s, sym(rng)) for i, s in enumerate(spins_b)))
    return SpinSystem("random", (ra, rb), exchange_mT=exchange, dipolar_mT=sym(rng, 0.05, 0.0) if dipolar else None,
                      k_singlet=k_s, k_triplet=k_t, relaxation=relaxation, **kw)


def random_dirs(rng, n):
    d = rng.normal(size=(n, 3))
    return d / np.linalg.norm(d, axis=1)[:, None]


# --------------------------------------------------------------------------------------------
# Independent rebuild with QuTiP (ordering electron A, nuclei A, electron B, nuclei B as documented
# in retina.spin.operators; the Hamiltonian terms as written in the retina.spin.system docstring).
# --------------------------------------------------------------------------------------------

def qutip_pair(system):
    spins = [0.5] + [n.spin for n in system.radicals[0].nuclei] + [0.5] + [n.spin for n in system.radicals[1].nuclei]
    ea, eb = 0, 1 + len(system.radicals[0].nuclei)

    def op(pos, axis):
        return qutip.tensor([qutip.jmat(s, axis) if i == pos else qutip.qeye(int(2 * s + 1)) for i, s in enumerate(spins)])

    axes = "xyz"
    sa = [op(ea, a) for a in axes]
    sb = [op(eb, a) for a in axes]
    h0 = 0 * sa[0]
    for r, (rad, s_e, first) in enumerate(zip(system.radicals, (sa, sb), (ea + 1, eb + 1))):
        for i, n in enumerate(rad.nuclei):
            si = [op(first + i, a) for a in axes]
            a_t = n.hyperfine_mT * 1e-3
            h0 += GAMMA_E * sum(a_t[p, q] * s_e[p] * si[q] for p in range(3) for q in range(3))
    j = system.exchange_mT * 1e-3
    s1s2 = sum(sa[p] * sb[p] for p in range(3))
    ident = qutip.qeye(s1s2.dims[0])
    h0 += -GAMMA_E * j * (2 * s1s2 + 0.5 * ident)
    if system.dipolar_mT is not None:
        dd = system.dipolar_mT * 1e-3
        h0 += GAMMA_E * sum(dd[p, q] * sa[p] * sb[q] for p in range(3) for q in range(3))
    hz = []
    for k in range(3):
        hz.append(MU_B_OVER_HBAR * sum(rad.g_matrix[k, q] * s_e[q] for rad, s_e in zip(system.radicals, (sa, sb))
                                       for q in range(3)))
    ps = 0.25 * ident - s1s2
    return h0, hz, ps, sa, sb, ident


def qutip_liouvillian(system, b_tesla):
    """Dense Liouvillian in QuTiP's column-stacking convention, and the dense rho0 and projectors."""
    h0, hz, ps, sa, sb, ident = qutip_pair(system)
    h = h0 + sum(b_tesla[k] * hz[k] for k in range(3))
    pt = ident - ps
    g = h - 0.5j * (system.k_singlet * ps + system.k_triplet * pt)  # non-Hermitian effective Hamiltonian
    lv = -1j * (qutip.spre(g) - qutip.spost(g.dag()))
    rel = system.relaxation
    for rate, s_e in zip(rel.random_field, (sa, sb)):
        for s_a in s_e:
            if rate:
                lv += qutip.lindblad_dissipator(np.sqrt(rate) * s_a)
    if rel.st_dephasing:
        lv += qutip.lindblad_dissipator(np.sqrt(rel.st_dephasing) * ps)
    m = system.nuclear_dimension
    rho0 = ps / m if system.initial_state == "singlet" else pt / (3 * m)
    return lv.full(), rho0.full(), ps.full(), pt.full()


def dense_solve_yield(system, b_tesla):
    """Reference: numpy.linalg.solve of the dense QuTiP Liouvillian, L x = -rho0 (column stacking)."""
    lv, rho0, ps, pt = qutip_liouvillian(system, b_tesla)
    d = rho0.shape[0]
    x = np.linalg.solve(lv, -rho0.reshape(-1, order="F")).reshape(d, d, order="F")
    if system.reported_yield == "singlet":
        return system.k_singlet * np.trace(ps @ x).real
    return system.k_triplet * np.trace(pt @ x).real


def expm_stepping_yield(system, b_tesla, dt, t_end):
    """Reference: scipy.linalg.expm time stepping, with the exact integral over each step.

    The augmented matrix exp([[L dt, dt 1], [0, 0]]) has exp(L dt) in its top-left block and
    int_0^dt exp(L s) ds in its top-right block (Van Loan's block formula), so the accumulated
    integral has no quadrature error; the only error is the tail beyond t_end.
    """
    lv, rho0, ps, pt = qutip_liouvillian(system, b_tesla)
    dd = lv.shape[0]
    aug = np.zeros((2 * dd, 2 * dd), dtype=complex)
    aug[:dd, :dd] = lv * dt
    aug[:dd, dd:] = np.eye(dd) * dt
    e = sla.expm(aug)
    prop, integ = e[:dd, :dd], e[:dd, dd:]
    r = rho0.reshape(-1, order="F")
    acc = np.zeros_like(r)
    for _ in range(int(round(t_end / dt))):
        acc += integ @ r
        r = prop @ r
    d = rho0.shape[0]
    x = acc.reshape(d, d, order="F")
    p = ps if system.reported_yield == "singlet" else pt
    k = system.k_singlet if system.reported_yield == "singlet" else system.k_triplet
    return k * np.trace(p @ x).real, np.trace(r.reshape(d, d, order="F")).real


# --------------------------------------------------------------------------------------------
# Operators
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("s", [0.5, 1.0, 1.5, 2.0, 2.5])
def test_spin_matrices_against_qutip_and_algebra(s):
    sx, sy, sz = ops.spin_matrices(s)
    # Reference: qutip.jmat (same m = s..-s ordering).
    for mine, axis in zip((sx, sy, sz), "xyz"):
        np.testing.assert_allclose(mine, qutip.jmat(s, axis).full(), atol=1e-14)
    # Derived: angular-momentum algebra [Sx, Sy] = i Sz and S^2 = s(s+1).
    np.testing.assert_allclose(sx @ sy - sy @ sx, 1j * sz, atol=1e-13)
    np.testing.assert_allclose(sx @ sx + sy @ sy + sz @ sz, s * (s + 1) * np.eye(len(sz)), atol=1e-13)


def test_spin_matrices_reject_bad_spin():
    # common practice, no source: spin quantum numbers are positive multiples of 1/2.
    for bad in (0.7, 0, -1, "x"):
        with pytest.raises(InputError, match="spin"):
            ops.spin_matrices(bad)


def test_gamma_e_matches_reference_value():
    # Reference: CODATA through scipy.constants, "electron gyromag. ratio" (1.7609e11 rad s^-1 T^-1);
    # the package builds it from the g factor and the Bohr magneton, so agreement is to rounding.
    assert ops.GAMMA_E == pytest.approx(sc.physical_constants["electron gyromag. ratio"][0], rel=1e-9)


def test_hamiltonian_against_qutip_rebuild():
    rng = np.random.default_rng(RNG_SEED)
    system = random_system(rng, (0.5, 1.0), (0.5,), anisotropic_g=True)
    parts = ops.hamiltonian_parts(system)
    b = random_dirs(rng, 4) * 47e-6
    h = ops.hamiltonians(parts, b)
    h0, hz, ps, *_ = qutip_pair(system)
    # Reference: qutip.tensor / qutip.jmat rebuild of the system.py Hamiltonian.
    for i in range(4):
        ref = (h0 + sum(b[i, k] * hz[k] for k in range(3))).full()
        np.testing.assert_allclose(h[i], ref, atol=1e-9 * np.abs(ref).max())
    np.testing.assert_allclose(ops.singlet_projector(parts.space), ps.full(), atol=1e-14)


def test_hamiltonian_sparse_assembly_against_qutip_rebuild():
    rng = np.random.default_rng(RNG_SEED + 7)
    system = random_system(rng, (0.5, 0.5, 0.5), (1.0,))  # d = 96: the sparse assembly path
    assert system.dimension > ops.DENSE_ASSEMBLY_UP_TO
    parts = ops.hamiltonian_parts(system)
    b = random_dirs(rng, 1) * 50e-6
    h0, hz, *_ = qutip_pair(system)
    ref = (h0 + sum(b[0, k] * hz[k] for k in range(3))).full()
    # Reference: qutip.tensor / qutip.jmat rebuild of the system.py Hamiltonian.
    np.testing.assert_allclose(ops.hamiltonians(parts, b)[0], ref, atol=1e-9 * np.abs(ref).max())


def test_singlet_projector_is_the_singlet_state():
    space = ops.pair_space(random_system(np.random.default_rng(1), (1.0,), ()))
    ps = ops.singlet_projector(space)
    # Derived: P_S = |S><S| x 1_M with |S> = (|ud> - |du>)/sqrt 2, so P_S^2 = P_S and Tr P_S = M.
    np.testing.assert_allclose(ps @ ps, ps, atol=1e-14)
    assert np.trace(ps).real == pytest.approx(space.nuclear_dimension)
    i_ud, i_du = space.singlet_indices()
    v = np.zeros(space.dimension, complex)
    v[i_ud[1]], v[i_du[1]] = 2**-0.5, -(2**-0.5)
    np.testing.assert_allclose(ps @ v, v, atol=1e-14)


def test_superoperators_match_matrix_products():
    rng = np.random.default_rng(3)
    d = 6
    a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    b = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    rho = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    v = rho.reshape(-1)
    # Derived: row-major vec(A rho B) = (A kron B^T) vec(rho) (stated in the operators docstring).
    np.testing.assert_allclose(ops.commutator_superoperator(a) @ v, (a @ rho - rho @ a).reshape(-1), atol=1e-12)
    np.testing.assert_allclose(ops.anticommutator_superoperator(a) @ v, (a @ rho + rho @ a).reshape(-1), atol=1e-12)
    np.testing.assert_allclose(ops.sandwich_superoperator(a, b) @ v, (a @ rho @ b).reshape(-1), atol=1e-12)


def test_random_field_relaxation_rate_convention():
    # Derived: for S = sigma/2, sum_a S_a S_z S_a = -S_z/4 and {sum_a S_a^2, S_z}/2 = 3 S_z/4, so
    # k sum_a (S_a rho S_a - {S_a^2, rho}/2) sends S_z to -k S_z: every component decays at k.
    k = 3.0e5
    system = SpinSystem("bare", (Radical("A"), Radical("B")), relaxation=Relaxation((k, 0.0), 0.0))
    space = ops.pair_space(system)
    rsup = ops.relaxation_superoperator(system, space)
    sa, sb = ops.electron_operators(space)
    for comp in range(3):
        rho = (np.eye(4) + 0.4 * sa[comp].toarray()) / 4
        drho = (rsup @ rho.reshape(-1)).reshape(4, 4)
        for c2 in range(3):
            expect = -k * np.trace(sa[c2].toarray() @ rho).real
            assert np.trace(sa[c2].toarray() @ drho).real == pytest.approx(expect, abs=1e-9 * k)
        # electron B is untouched (rate 0): its spin does not change
        assert abs(np.trace(sb[comp].toarray() @ drho)) < 1e-9


def test_st_dephasing_convention():
    # Derived: k (P rho P - {P, rho}/2) leaves P_S and P_T populations alone and multiplies the
    # S-T0 coherence by -k/2: for rho = |S><T0|, P rho P = 0 and {P_S, rho}/2 = rho/2.
    k = 1e6
    system = SpinSystem("bare", (Radical("A"), Radical("B")), relaxation=Relaxation((0.0, 0.0), k))
    space = ops.pair_space(system)
    rsup = ops.relaxation_superoperator(system, space)
    s = np.array([0, 1, -1, 0]) / np.sqrt(2)
    t0 = np.array([0, 1, 1, 0]) / np.sqrt(2)
    coh = np.outer(s, t0)
    np.testing.assert_allclose((rsup @ coh.reshape(-1)).reshape(4, 4), -k / 2 * coh, atol=1e-6)
    pop = np.outer(s, s)
    np.testing.assert_allclose(rsup @ pop.reshape(-1), 0, atol=1e-6)


# --------------------------------------------------------------------------------------------
# One spin-1/2 nucleus with isotropic coupling a on radical A, radical B bare, equal rates k.
# --------------------------------------------------------------------------------------------

def one_nucleus(a_mT, k, initial="singlet", reported="singlet"):
    nuc = Nucleus("H1", 0.5, np.eye(3) * a_mT)
    return SpinSystem("one", (Radical("A", g=G_E, nuclei=(nuc,)), Radical("B", g=G_E)), k_singlet=k, k_triplet=k,
                      initial_state=initial, reported_yield=reported)


def breit_rabi_singlet_yield(a_mT, k, field_T):
    """Phi_S (singlet start) from hand-diagonalised eigenstates (Breit-Rabi), no package code.

    Derived: radical A (electron S + proton I, H_A = w S_z + a S.I, w = g_e mu_B B / hbar) has
      |1> = |up,Up>,   e = w/2 + a/4;        |2> = |dn,Dn>,  e = -w/2 + a/4;
      |3> = c|up,Dn> + s|dn,Up>, e = -a/4 + R/2;  |4> = -s|up,Dn> + c|dn,Up>, e = -a/4 - R/2,
    with R = sqrt(w^2 + a^2), tan(2 theta) = a / w, c = cos theta, s = sin theta.  Electron B:
    |up>, +w/2 and |dn>, -w/2.  Singlet with nuclear state nu:
      <S nu|alpha beta> = (<alpha|up nu><beta|dn> - <alpha|dn nu><beta|up>) / sqrt 2,
    and Phi_S = (1/M) sum_{mn} |sum_nu conj(u_nu m) u_nu n|^2 k^2/(k^2 + (E_m - E_n)^2), M = 2.
    """
    w = G_E * MU_B_OVER_HBAR * field_T
    a = GAMMA_E * a_mT * 1e-3
    r = np.hypot(w, a)
    th = 0.5 * np.arctan2(a, w)
    c, s = np.cos(th), np.sin(th)
    # amplitudes <m_S m_I | alpha> for alpha = 1..4, keys (m_S, m_I) with +1 = up
    amp = [{(1, 1): 1.0}, {(-1, -1): 1.0}, {(1, -1): c, (-1, 1): s}, {(1, -1): -s, (-1, 1): c}]
    ea = [w / 2 + a / 4, -w / 2 + a / 4, -a / 4 + r / 2, -a / 4 - r / 2]
    eb = {1: w / 2, -1: -w / 2}
    states, energies = [], []
    for al in range(4):
        for mb in (1, -1):
            states.append((al, mb))
            energies.append(ea[al] + eb[mb])
    u = np.zeros((2, 8))
    for col, (al, mb) in enumerate(states):
        for row, nu in enumerate((1, -1)):
            # electron A up with B down minus A down with B up
            u[row, col] = (amp[al].get((1, nu), 0.0) * (mb == -1) - amp[al].get((-1, nu), 0.0) * (mb == 1)) / np.sqrt(2)
    q = u.T @ u
    e = np.array(energies)
    lor = k * k / (k * k + (e[:, None] - e[None, :]) ** 2)
    return float(np.sum(q**2 * lor) / 2)


@pytest.mark.parametrize("ratio", [0.1, 1.0, 5.0])
def test_one_nucleus_zero_field_closed_form(ratio):
    a_mT = 0.8
    a = GAMMA_E * a_mT * 1e-3
    k = ratio * a
    # Derived: with H = a S_A.I, S_A(t) = F/2 + (S_A - I) cos(a t)/2 + (S_A x I) sin(a t), so
    # Tr[S_Az S_Az(t)] = (1 + cos at)/2 over the 4-dim space of A; with B bare,
    # Tr[P_S P_S(t)]/M = 1/4 + (1/4) sum_a Tr_A[S_Aa S_Aa(t)] = 5/8 + (3/8) cos(a t), and the
    # Laplace weight k int e^{-kt} cos(at) dt = k^2/(k^2 + a^2) gives
    expect = 5 / 8 + 3 / 8 * k * k / (k * k + a * a)
    sys_ = one_nucleus(a_mT, k)
    dirs = random_dirs(np.random.default_rng(5), 3)
    np.testing.assert_allclose(hilbert.yields(sys_, 0.0, dirs), expect, rtol=1e-12)
    np.testing.assert_allclose(liouville.yields(dataclasses.replace(sys_, k_triplet=k * (1 + 1e-15)), 0.0, dirs,
                                                solver="sparse"), expect, rtol=1e-10)


def test_one_nucleus_high_field_limit():
    a_mT = 0.5
    a = GAMMA_E * a_mT * 1e-3
    k = 0.7 * a
    # Derived: for B >> a only the secular a S_Az I_z survives; for each nuclear state the two
    # electrons precess at frequencies differing by a/2, so |S> <-> |T0> oscillates with
    # P_S(t) = cos^2(a t / 4) = (1 + cos(a t / 2)) / 2, giving Phi_S = 1/2 + (1/2) k^2 / (k^2 + a^2/4).
    # At 1 T the neglected mixing is of order (a / w)^2 ~ 1e-6.
    expect = 0.5 + 0.5 * k * k / (k * k + a * a / 4)
    got = hilbert.yields(one_nucleus(a_mT, k), 1e6, [[0, 0, 1], [1, 1, 0]])
    np.testing.assert_allclose(got, expect, atol=2e-5)


@pytest.mark.parametrize("field_uT", [0.5, 20.0, 50.0, 300.0, 5000.0])
@pytest.mark.parametrize("k", [1e5, 1e6, 2e7])
def test_one_nucleus_any_field_breit_rabi(field_uT, k):
    a_mT = 1.2
    expect = breit_rabi_singlet_yield(a_mT, k, field_uT * 1e-6)
    # Derived (Breit-Rabi, above); the coupling is isotropic so the direction is irrelevant.
    got = hilbert.yields(one_nucleus(a_mT, k), field_uT, random_dirs(np.random.default_rng(7), 2))
    np.testing.assert_allclose(got, expect, rtol=1e-10)


def test_one_nucleus_variants_triplet_start_and_yield():
    a_mT, k, f = 1.0, 3e6, 50.0
    phi_ss = breit_rabi_singlet_yield(a_mT, k, f * 1e-6)
    # Derived (hilbert docstring): triplet start rho0 = (1 - P_S)/(3M) gives Phi_S = (1 - Phi_SS)/3.
    got = hilbert.yields(one_nucleus(a_mT, k, "triplet", "singlet"), f, [[0, 0, 1]])
    assert got[0] == pytest.approx((1 - phi_ss) / 3, rel=1e-10)
    # ... cross-checked by the Liouville sparse solve, which computes Phi_T from k_T Tr(P_T x).
    sysl = one_nucleus(a_mT, k, "triplet", "triplet")
    ref = liouville.yields(sysl, f, [[0, 0, 1]], solver="sparse")
    assert ref[0] == pytest.approx(1 - (1 - phi_ss) / 3, rel=1e-10)


# --------------------------------------------------------------------------------------------
# General properties
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("solver", ["sparse", "eig"])
def test_yields_sum_to_one_for_equal_rates(solver):
    # Derived: with k_S = k_T = k, d Tr(rho)/dt = -k Tr(rho), so Phi_S + Phi_T = k int e^{-kt} dt = 1.
    # The Liouville solvers compute Phi_T as k_T Tr(P_T x) on its own, so this can fail.
    rng = np.random.default_rng(11)
    system = random_system(rng, (0.5,), (1.0,))
    dirs = random_dirs(rng, 4)
    for start in ("singlet", "triplet"):
        s_ = dataclasses.replace(system, initial_state=start, reported_yield="singlet")
        t_ = dataclasses.replace(system, initial_state=start, reported_yield="triplet")
        total = liouville.yields(s_, 50.0, dirs, solver=solver) + liouville.yields(t_, 50.0, dirs, solver=solver)
        np.testing.assert_allclose(total, 1.0, atol=1e-11)


def test_no_hyperfine_equal_g_stays_singlet():
    # Derived: without nuclei and with equal g, H = w (S_Az + S_Bz) - 2J S_A.S_B commutes with P_S
    # (total spin is conserved), so a singlet pair recombines only as singlet: Phi_S = 1 at any
    # field and rates.
    system = SpinSystem("bare", (Radical("A", g=2.003), Radical("B", g=2.003)), exchange_mT=0.1, k_singlet=1e6,
                        k_triplet=1e6)
    dirs = random_dirs(np.random.default_rng(2), 5)
    np.testing.assert_allclose(hilbert.yields(system, 50.0, dirs), 1.0, atol=1e-13)
    unequal = dataclasses.replace(system, k_triplet=4e6)
    np.testing.assert_allclose(liouville.yields(unequal, 50.0, dirs), 1.0, atol=1e-12)


def test_fast_recombination_limit():
    # Derived: Phi_SS = (1/M) sum |P_mn|^2 k^2/(k^2 + w_mn^2) = 1 - O(w^2/k^2); for
    # w ~ 1e8 rad/s and k = 1e13 s^-1 the deficit is below 1e-9.
    rng = np.random.default_rng(13)
    system = random_system(rng, (0.5,), (0.5,), k_s=1e13, k_t=1e13)
    got = hilbert.yields(system, 50.0, random_dirs(rng, 3))
    np.testing.assert_allclose(got, 1.0, atol=1e-8)
    assert np.all(got <= 1.0 + 1e-12)


def test_inversion_symmetry():
    # Derived: the time-reversal operator T (all spins flipped, antiunitary) maps H(B) to H(-B)
    # (the Zeeman term is odd, the bilinear couplings even) and leaves P_S invariant, so the
    # spectrum and |<m|P_S|n>|^2 are the same at B and -B: Phi(b) = Phi(-b).
    rng = np.random.default_rng(17)
    system = random_system(rng, (0.5, 1.0), (0.5,), anisotropic_g=True)
    dirs = random_dirs(rng, 6)
    np.testing.assert_allclose(hilbert.yields(system, 50.0, dirs), hilbert.yields(system, 50.0, -dirs), atol=1e-12)
    # The same argument holds with unequal rates for the singlet yield from a singlet start
    # (T conj(G) T^-1 with G = H - iK/2 is G(-B)^+ and the trace Tr(P U P U^+) is symmetric).
    uneq = dataclasses.replace(system, k_triplet=5e5)
    np.testing.assert_allclose(liouville.yields(uneq, 50.0, dirs), liouville.yields(uneq, 50.0, -dirs), atol=1e-12)


def test_relaxation_closed_form():
    # Derived: no nuclei, equal g, equal rates k, random-field relaxation k_r on both electrons.
    # Each S_Aa S_Ba product decays at 2 k_r (each factor at k_r, module convention) and the common
    # Zeeman precession leaves S_A.S_B invariant, so Tr(P_S rho) = e^{-kt}(1/4 + (3/4) e^{-2 k_r t})
    # and Phi_S = 1/4 + (3/4) k / (k + 2 k_r).
    k, kr = 1e6, 4e5
    system = SpinSystem("bare", (Radical("A"), Radical("B")), k_singlet=k, k_triplet=k,
                        relaxation=Relaxation((kr, kr), 0.0))
    got = liouville.yields(system, 50.0, random_dirs(np.random.default_rng(4), 3))
    np.testing.assert_allclose(got, 0.25 + 0.75 * k / (k + 2 * kr), rtol=1e-12)


# --------------------------------------------------------------------------------------------
# Cross-checks between methods and against brute-force references
# --------------------------------------------------------------------------------------------

def test_hilbert_vs_liouville_fixed():
    rng = np.random.default_rng(RNG_SEED + 1)
    system = random_system(rng, (1.0,), (0.5,), anisotropic_g=True)  # d = 24
    dirs = random_dirs(rng, 8)
    for start in ("singlet", "triplet"):
        for rep in ("singlet", "triplet"):
            s_ = dataclasses.replace(system, initial_state=start, reported_yield=rep)
            h = hilbert.yields(s_, 47.0, dirs)
            # Reference: the two independent Liouville solvers (sparse LU, effective Hamiltonian).
            np.testing.assert_allclose(liouville.yields(s_, 47.0, dirs, solver="sparse"), h, atol=1e-10)
            np.testing.assert_allclose(liouville.yields(s_, 47.0, dirs, solver="eig"), h, atol=1e-10)


# Nuclear configurations (radical A, radical B) with pair dimension <= 36, so that the sparse LU of
# the (d^2, d^2) Liouvillian (fill-in ~ 0.7 d^4) stays small.
_configs = st.sampled_from([((), ()), ((0.5,), ()), ((1.0,), ()), ((0.5,), (0.5,)), ((1.0,), (0.5,)),
                            ((0.5, 0.5), (0.5,)), ((1.0,), (1.0,)), ((0.5, 1.0), ()), ((1.0, 1.0), ())])


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), config=_configs,
       exchange=st.floats(-0.5, 0.5), field=st.floats(0.0, 200.0), log_k=st.floats(4.5, 7.5),
       start=st.sampled_from(["singlet", "triplet"]))
def test_hilbert_vs_liouville_random(seed, config, exchange, field, log_k, start):
    spins_a, spins_b = config
    rng = np.random.default_rng(seed)
    k = 10.0**log_k
    system = random_system(rng, tuple(spins_a), tuple(spins_b), exchange=exchange, k_s=k, k_t=k, initial_state=start)
    dirs = random_dirs(rng, 3)
    h = hilbert.yields(system, field, dirs)
    # Reference: the Liouville sparse LU solve of the same system (different algorithm and space).
    np.testing.assert_allclose(liouville.yields(system, field, dirs, solver="sparse"), h, atol=1e-10)


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), config=_configs, log_ks=st.floats(5.0, 7.0),
       log_kt=st.floats(5.0, 7.0), start=st.sampled_from(["singlet", "triplet"]),
       rep=st.sampled_from(["singlet", "triplet"]))
def test_liouville_solvers_agree_unequal_rates(seed, config, log_ks, log_kt, start, rep):
    rng = np.random.default_rng(seed)
    system = random_system(rng, config[0], config[1], k_s=10.0**log_ks, k_t=10.0**log_kt,
                           initial_state=start, reported_yield=rep)
    dirs = random_dirs(rng, 2)
    a = liouville.yields(system, 50.0, dirs, solver="sparse")
    b = liouville.yields(system, 50.0, dirs, solver="eig")
    # Reference: the two solvers share only the Hamiltonian; they agree to rounding.
    np.testing.assert_allclose(a, b, atol=1e-10)


@pytest.mark.parametrize("relax", [Relaxation(), Relaxation((2e5, 5e5), 3e5)])
@pytest.mark.parametrize("start,rep", [("singlet", "singlet"), ("triplet", "singlet"), ("singlet", "triplet")])
def test_liouville_vs_dense_qutip_solve(relax, start, rep):
    rng = np.random.default_rng(23)
    system = random_system(rng, (1.0,), (0.5,), k_s=3e6, k_t=7e5, relaxation=relax, initial_state=start,
                           reported_yield=rep)
    dirs = random_dirs(rng, 3)
    # Reference: numpy.linalg.solve of the dense Liouvillian assembled with QuTiP (column stacking).
    ref = [dense_solve_yield(system, 50e-6 * d) for d in dirs]
    for solver in ("sparse", "eig" if not relax.any else "krylov"):
        np.testing.assert_allclose(liouville.yields(system, 50.0, dirs, solver=solver), ref, atol=1e-11)


def test_liouville_vs_expm_time_stepping():
    rng = np.random.default_rng(29)
    system = random_system(rng, (0.5,), (), k_s=2e6, k_t=5e5, relaxation=Relaxation((1e5, 2e5), 1e5))
    b_dir = random_dirs(rng, 1)[0]
    kmin = 5e5  # every state decays at least at min(k_S, k_T)
    t_end = 40.0 / kmin  # the remaining trace is then about e^-40 (checked below)
    ref, tail = expm_stepping_yield(system, 50e-6 * b_dir, dt=1.0 / 4e6, t_end=t_end)
    assert tail < 1e-12
    # Reference: scipy.linalg.expm stepping with exact per-step integrals (Van Loan block matrix);
    # error sources are rounding over 320 steps and the tail, both far below 1e-9.
    for solver in ("sparse", "krylov"):
        got = liouville.yields(system, 50.0, b_dir[None, :], solver=solver)[0]
        assert got == pytest.approx(ref, abs=1e-9)


def test_hilbert_numpy_kernel_matches_numba_kernel():
    if not hilbert._HAVE_NUMBA:
        pytest.skip("numba missing")
    rng = np.random.default_rng(31)
    d = 9
    q = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    q = q + q.conj().T
    w = rng.normal(size=d)
    # Reference: direct double sum over all (i, j) in numpy.
    dw = w[:, None] - w[None, :]
    direct = np.sum(np.abs(q) ** 2 * 0.49 / (0.49 + dw**2))
    assert hilbert._lorentz_sum(np.asfortranarray(q), w, 0.7) == pytest.approx(direct, rel=1e-13)
    assert hilbert._lorentz_sum_numpy(q, w, 0.7) == pytest.approx(direct, rel=1e-13)


def test_hilbert_chunking_and_progress():
    rng = np.random.default_rng(37)
    system = random_system(rng, (0.5,), (0.5,))
    dirs = random_dirs(rng, 13)
    calls = []
    small = hilbert.yields(system, 50.0, dirs, max_bytes=1, progress=lambda d, t: calls.append((d, t)))
    # common practice, no source: batching must not change results; progress ends at (N, N).
    np.testing.assert_allclose(small, hilbert.yields(system, 50.0, dirs), atol=1e-14)
    assert calls[-1] == (13, 13) and len(calls) == 13


def test_scope_errors():
    rng = np.random.default_rng(41)
    system = random_system(rng, (0.5,), (), k_s=1e6, k_t=2e6)
    with pytest.raises(InputError, match="equal recombination rates"):
        hilbert.yields(system, 50.0, [[0, 0, 1]])
    relaxed = dataclasses.replace(system, k_triplet=1e6, relaxation=Relaxation((1e5, 0.0), 0.0))
    with pytest.raises(InputError, match="relaxation"):
        hilbert.yields(relaxed, 50.0, [[0, 0, 1]])
    with pytest.raises(InputError, match="solver"):
        liouville.yields(relaxed, 50.0, [[0, 0, 1]], solver="eig")
    with pytest.raises(InputError, match="Krylov"):
        liouville.yields(dataclasses.replace(relaxed, k_triplet=0.0), 50.0, [[0, 0, 1]], solver="krylov")
    with pytest.raises(InputError, match="both recombination rates are zero"):
        liouville.yields(dataclasses.replace(system, k_singlet=0.0, k_triplet=0.0), 50.0, [[0, 0, 1]])
    with pytest.raises(InputError, match="directions"):
        hilbert.yields(dataclasses.replace(system, k_triplet=1e6), 50.0, [[0, 0, 0]])
    with pytest.raises(InputError, match="shape"):
        liouville.yields(system, 50.0, np.ones((3, 2)))
    with pytest.raises(InputError, match="field"):
        liouville.yields(system, -1.0, [[0, 0, 1]])


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=st.integers(0, 2**31 - 1), log_kr=st.floats(4.0, 7.0), log_kd=st.floats(4.0, 7.0),
       log_kt=st.floats(5.0, 7.0), rep=st.sampled_from(["singlet", "triplet"]))
def test_krylov_matches_sparse_lu(seed, log_kr, log_kd, log_kt, rep):
    rng = np.random.default_rng(seed)
    relax = Relaxation((10.0**log_kr, 0.3 * 10.0**log_kr), 10.0**log_kd)
    system = random_system(rng, (0.5,), (0.5,), k_t=10.0**log_kt, relaxation=relax, reported_yield=rep)
    dirs = random_dirs(rng, 2)
    # Reference: the sparse LU solve of the same Liouvillian (a direct method).
    np.testing.assert_allclose(liouville.yields(system, 50.0, dirs, solver="krylov"),
                               liouville.yields(system, 50.0, dirs, solver="sparse"), atol=1e-10)


def test_directions_are_normalised():
    # common practice, no source: a direction is a direction; its length must not act as a field scale.
    rng = np.random.default_rng(47)
    system = random_system(rng, (0.5,), (0.5,))
    d = random_dirs(rng, 3)
    np.testing.assert_allclose(hilbert.yields(system, 50.0, 3.7 * d), hilbert.yields(system, 50.0, d), atol=1e-14)
    np.testing.assert_allclose(liouville.yields(system, 50.0, 0.2 * d), liouville.yields(system, 50.0, d), atol=1e-14)


def test_singular_liouvillian_is_reported():
    # Derived: with k_T = 0 and no hyperfine the pure triplet states never decay, so L is singular
    # and a triplet start has no finite yield integral.
    system = SpinSystem("bare", (Radical("A"), Radical("B")), k_singlet=1e6, k_triplet=0.0, initial_state="triplet")
    with pytest.raises(InputError, match="singular"):
        liouville.yields(system, 50.0, [[0, 0, 1]])


def test_hilbert_tridiagonal_path_matches_full_eigh_path():
    rng = np.random.default_rng(43)
    system = random_system(rng, (0.5, 1.0), (0.5,), anisotropic_g=True)  # d = 48
    parts = ops.hamiltonian_parts(system)
    b = random_dirs(rng, 5) * 50e-6
    full = hilbert.singlet_singlet(parts, b, system.k_singlet, path="eigh")
    tri = hilbert.singlet_singlet(parts, b, system.k_singlet, path="tridiagonal")
    # Reference: the batched numpy.linalg.eigh path (LAPACK zheevd with the full back-transformation).
    np.testing.assert_allclose(tri, full, atol=1e-12)
    # and the Liouville sparse solve (independent of both eigen paths)
    np.testing.assert_allclose(tri[:2], liouville.yields(system, 50.0, b[:2] / 50e-6, solver="eig"), atol=1e-10)
