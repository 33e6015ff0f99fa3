"""Brute-force time-domain references (tests/_dynamics.py) and the exact spin methods against them.

First the references are checked against closed forms derived below (so they are trusted), then
the package's exact methods (retina.spin.hilbert, retina.spin.liouville, retina.spin.separable)
are compared with them.  Accuracy: each brute-force result carries an error estimate (Simpson
Richardson estimate + rigorous tail bound, plus the ODE-tolerance spread for QuTiP); a check
passes when the difference is within that estimate (plus 1e-12 rounding), and every estimate must
itself be below 1e-6 so that the comparison means something.
"""

from __future__ import annotations

import numpy as np
import pytest

import _dynamics as dyn
from retina.spin.system import Nucleus, Radical, Relaxation, SpinSystem

MAX_EST = 1e-6


def _sym(rng, scale):
    a = rng.normal(size=(3, 3)) * scale
    return (a + a.T) / 2


def _close(exact, est):
    assert est.error < MAX_EST, f"brute-force estimate too loose: {est.error:.1e}"
    assert abs(exact - est.value) <= est.error + 1e-12, (exact, est)


def _dg_pair(k_s, k_t, k_std=0.0, g_a=2.0031, g_b=2.0012):
    return SpinSystem("delta-g pair", (Radical("A", g=g_a), Radical("B", g=g_b)),
                      k_singlet=k_s, k_triplet=k_t, relaxation=Relaxation(st_dephasing=k_std))


def delta_g_singlet_yield(dw, k_s, k_t, k_std=0.0):
    """Phi_S for a bare pair (no nuclei), isotropic g_A != g_B, singlet start.

    Derived: along the field, S couples only to T0, with matrix element delta = dw/2,
    dw = (g_A - g_B) mu_B B / hbar; T+- are never populated.  In the {S, T0} block with
    s = rho_SS, t = rho_T0T0, y = Im rho_ST:
        s' = -2 delta y - k_S s,   t' = 2 delta y - k_T t,   y' = -delta (t - s) - gamma y,
    gamma = (k_S + k_T)/2 + k_STD/2 (dephasing Lindblad P_S damps coherences at k_STD/2 and leaves
    populations).  Integrating from s = 1 to infinity (integrals S, T, Y) gives 1 = 2 delta Y +
    k_S S, k_T T = 2 delta Y, gamma Y = delta (S - T), so with u = 2 delta Y
        u = 2 delta^2 k_T / (gamma k_S k_T + 2 delta^2 (k_S + k_T)),   Phi_S = k_S S = 1 - u.
    Equal rates and k_STD = 0 give 1/2 + (1/2) k^2 / (k^2 + dw^2).
    """
    delta = dw / 2
    gamma = (k_s + k_t + k_std) / 2
    return 1 - 2 * delta**2 * k_t / (gamma * k_s * k_t + 2 * delta**2 * (k_s + k_t))


def test_delta_g_formula_reduces_to_equal_rate_form():
    # Derived: the general formula at k_S = k_T = k, k_STD = 0.
    k, dw = 3e6, 5e6
    assert abs(delta_g_singlet_yield(dw, k, k) - (0.5 + 0.5 * k * k / (k * k + dw * dw))) < 1e-15


CASES = [(1e7, 1e7, 0.0), (2e7, 4e6, 0.0), (5e6, 2e7, 3e6)]


@pytest.mark.parametrize("k_s, k_t, k_std", CASES)
def test_references_reproduce_delta_g_closed_form(k_s, k_t, k_std):
    # Derived: delta_g_singlet_yield above.  Field 2 mT so that dw ~ k.
    system = _dg_pair(k_s, k_t, k_std)
    field = 2000.0
    dw = (2.0031 - 2.0012) * dyn.MU_B_OVER_HBAR * field * 1e-6
    want = delta_g_singlet_yield(dw, k_s, k_t, k_std)
    b = np.array([[0.2, -0.5, 0.8]])
    assert abs(dyn.liouville_solve_yields(system, field, b)[0] - want) < 1e-12
    _close(want, dyn.expm_propagation_yield(system, field, b[0]))


def test_qutip_reproduces_delta_g_closed_form():
    # Derived: delta_g_singlet_yield; Reference: qutip.mesolve.
    k_s, k_t, k_std = 2e7, 4e6, 1e6
    system = _dg_pair(k_s, k_t, k_std)
    field = 2000.0
    dw = (2.0031 - 2.0012) * dyn.MU_B_OVER_HBAR * field * 1e-6
    _close(delta_g_singlet_yield(dw, k_s, k_t, k_std),
           dyn.qutip_mesolve_yield(system, field, [0.0, 0.0, 1.0], lifetimes=30.0))


@pytest.mark.parametrize("rates", [(2e6, 0.0), (1e6, 3e6)])
def test_references_reproduce_random_field_closed_form(rates):
    # Derived: no nuclei, equal g, equal rates k.  The Zeeman term w(S_Az + S_Bz) commutes with
    # S_A.S_B; the random-field dissipator k_r sum_a (S_a X S_a - {S_a^2, X}/2) maps each component
    # S_b of its electron to -k_r S_b (sum_a S_a S_b S_a = -S_b/4), so
    # rho(t) = e^{-kt} (1/4 - e^{-(k_A + k_B) t} S_A.S_B) and
    # Phi_S = 1/4 + (3/4) k / (k + k_A + k_B).
    k = 1e7
    system = SpinSystem("relaxing pair", (Radical("A"), Radical("B")), k_singlet=k, k_triplet=k,
                        relaxation=Relaxation(random_field=rates))
    want = 0.25 + 0.75 * k / (k + sum(rates))
    b = np.array([[0.0, 0.6, 0.8]])
    assert abs(dyn.liouville_solve_yields(system, 50.0, b)[0] - want) < 1e-12
    _close(want, dyn.expm_propagation_yield(system, 50.0, b[0]))


def _rich_system(rng, **kw):
    """One nucleus on each radical, anisotropic hyperfine and g, exchange, dipolar (d = 16)."""
    ra = Radical("A", g_tensor=2.0023 * np.eye(3) + _sym(rng, 2e-3),
                 nuclei=(Nucleus("H1", 0.5, _sym(rng, 0.6)),))
    rb = Radical("B", nuclei=(Nucleus("H2", 0.5, _sym(rng, 0.6)),))
    return SpinSystem("rich pair", (ra, rb), **kw)


def test_expm_and_liouville_solve_agree_on_a_general_system():
    # Reference: scipy.linalg.expm stepping vs numpy.linalg.solve (same Liouvillian, different
    # mathematics: time integral vs resolvent).
    system = _rich_system(np.random.default_rng(1), exchange_mT=0.05,
                          dipolar_mT=np.diag([-0.1, -0.1, 0.2]), k_singlet=1e7, k_triplet=6e6,
                          relaxation=Relaxation(random_field=(1e6, 5e5), st_dephasing=2e6),
                          initial_state="triplet", reported_yield="singlet")
    b = np.array([0.3, -0.4, 0.87])
    _close(dyn.liouville_solve_yields(system, 300.0, b)[0],
           dyn.expm_propagation_yield(system, 300.0, b))


# --------------------------------------------------------------------------------------------
# The package's exact methods against the brute-force references
# --------------------------------------------------------------------------------------------

def test_hilbert_matches_time_propagation():
    # Reference: expm stepping + quadrature (tests/_dynamics.py).
    hilbert = pytest.importorskip("retina.spin.hilbert")
    system = _rich_system(np.random.default_rng(2), k_singlet=1e7, k_triplet=1e7)
    b = np.array([[0.6, 0.0, 0.8], [-0.1, 0.7, 0.3]])
    got = hilbert.yields(system, 500.0, b)
    for i in range(2):
        _close(got[i], dyn.expm_propagation_yield(system, 500.0, b[i]))


def test_separable_matches_time_propagation():
    # Reference: expm stepping + quadrature (tests/_dynamics.py).
    from retina.spin import separable

    system = _rich_system(np.random.default_rng(3), k_singlet=1e7, k_triplet=1e7,
                          initial_state="triplet", reported_yield="triplet")
    b = np.array([[0.0, 0.0, 1.0]])
    _close(separable.yields(system, 200.0, b)[0], dyn.expm_propagation_yield(system, 200.0, b[0]))


def test_liouville_matches_time_propagation():
    # Reference: expm stepping + quadrature (tests/_dynamics.py).
    liouville = pytest.importorskip("retina.spin.liouville")
    system = _rich_system(np.random.default_rng(4), exchange_mT=-0.03,
                          dipolar_mT=np.diag([0.08, 0.08, -0.16]), k_singlet=2e7, k_triplet=5e6,
                          relaxation=Relaxation(random_field=(2e6, 1e6), st_dephasing=1e6))
    b = np.array([[0.5, 0.5, 0.70710678]])
    for solver in ("auto", "sparse"):
        got = liouville.yields(system, 100.0, b, solver=solver)[0]
        _close(got, dyn.expm_propagation_yield(system, 100.0, b[0]))


def test_liouville_eig_solver_matches_time_propagation_without_relaxation():
    # Reference: expm stepping + quadrature (tests/_dynamics.py).
    liouville = pytest.importorskip("retina.spin.liouville")
    system = _rich_system(np.random.default_rng(5), exchange_mT=0.02, k_singlet=1.5e7,
                          k_triplet=4e6, initial_state="triplet", reported_yield="triplet")
    b = np.array([[0.1, 0.9, -0.4]])
    _close(liouville.yields(system, 80.0, b, solver="eig")[0],
           dyn.expm_propagation_yield(system, 80.0, b[0]))


def test_liouville_matches_qutip():
    # Reference: qutip.mesolve with a Liouvillian assembled by QuTiP (tests/_dynamics.py).
    liouville = pytest.importorskip("retina.spin.liouville")
    ra = Radical("A", nuclei=(Nucleus("H", 0.5, _sym(np.random.default_rng(6), 0.4)),))
    system = SpinSystem("small pair", (ra, Radical("B", g=2.0035)), exchange_mT=0.04,
                        k_singlet=2e7, k_triplet=8e6,
                        relaxation=Relaxation(random_field=(1e6, 0.0)))
    b = np.array([[0.0, 0.6, 0.8]])
    _close(liouville.yields(system, 200.0, b)[0],
           dyn.qutip_mesolve_yield(system, 200.0, b[0], lifetimes=30.0))
