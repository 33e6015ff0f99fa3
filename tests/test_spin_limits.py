"""Many-nucleus limits of the zero-field singlet yield, computed exactly with the fast separable
method and the total-spin reduction of equivalent nuclei (retina.spin.fast_separable,
retina.spin.equivalence).

Source for the limits: K. Schulten and P. G. Wolynes, J. Chem. Phys. 68, 3292 (1978) (from
memory): in the semiclassical model of many nuclear spins as a static Gaussian hyperfine field,
each electron's spin correlation decays to 1/3 of its initial value, so at zero field, singlet
start and recombination slow compared with the hyperfine precession the singlet yield tends to
1/4 + (3/4)(1/3)(1/3) = 1/3 when both radicals carry many nuclei and to 1/4 + (3/4)(1/3) = 1/2 when
only one does.

Finite-n closed form (derived here), used to check the method exactly before taking the limit.
For n equivalent spin-1/2 nuclei with isotropic coupling a on one radical, the block of total
nuclear spin J (weight w_J = N_J (2J + 1) / 2^n, N_J from Clebsch-Gordan counting) has
H = a S.J with multiplets F = J +- 1/2 at energies a J / 2 and -a (J + 1) / 2.  By the projection
theorem S = g_F F inside a multiplet with g_F = +-1/(2J + 1), so the time average of the
normalised correlation <S_z S_z(t)> / <S_z S_z> is
p_J = (2/(3 (2J+1)^3)) [(J+1/2)(J+3/2)(2J+2) + (J-1/2)(J+1/2)(2J)] = 1/3 + 1/(6 (J + 1/2)^2),
and the rest, 1 - p_J, oscillates at Omega_J = a (J + 1/2) (p_0 = 1: a free electron).  At zero
field the couplings are isotropic, so C_ab = delta_ab C_zz and F(t) = 3 C^A_zz C^B_zz; the Laplace
transform of cos(Omega t) against k e^{-kt} is K(Omega) = k^2 / (k^2 + Omega^2).  Hence, with
c_J(t) = p_J + (1 - p_J) cos(Omega_J t),

  one radical:  Phi_S = 1/4 + (3/4) sum_J w_J [p_J + (1 - p_J) K(Omega_J)],
  two radicals: Phi_S = 1/4 + (3/4) sum_{J,J'} w_J w'_J' L[c_J c'_J'],
  L[c c'] = p p' + p (1 - p') K(Omega') + (1 - p) p' K(Omega)
            + (1 - p)(1 - p') [K(Omega + Omega') + K(Omega - Omega')] / 2.
As n grows the weights concentrate on J ~ sqrt(n), p_J -> 1/3, and the limits above follow.
"""

from __future__ import annotations

import numpy as np
import pytest

from retina.spin import fast_separable
from retina.spin.equivalence import multiplicities
from retina.spin.operators import GAMMA_E
from retina.spin.system import Nucleus, Radical, SpinSystem


def _radical(label, n, a_mT):
    return Radical(label, nuclei=tuple(Nucleus(f"H{i}", 0.5, a_mT * np.eye(3)) for i in range(n)))


def _terms(n, a_mT):
    """(w_J, p_J, Omega_J) arrays for n equivalent protons of coupling a_mT."""
    mult = multiplicities(0.5, n)
    j = np.array(sorted(mult))
    w = np.array([mult[x] * (2 * x + 1) for x in j]) / 2.0**n
    p = 1 / 3 + 1 / (6 * (j + 0.5) ** 2)
    return w, p, a_mT * 1e-3 * GAMMA_E * (j + 0.5)


def _one_radical_closed_form(n, a_mT, k):
    w, p, om = _terms(n, a_mT)
    return 0.25 + 0.75 * np.sum(w * (p + (1 - p) * k * k / (k * k + om**2)))


def _two_radical_closed_form(n_a, a_a, n_b, a_b, k):
    wa, pa, oa = _terms(n_a, a_a)
    wb, pb, ob = _terms(n_b, a_b)
    K = lambda x: k * k / (k * k + x**2)  # noqa: E731
    P, Q = np.meshgrid(pa, pb, indexing="ij")
    OA, OB = np.meshgrid(oa, ob, indexing="ij")
    L = P * Q + P * (1 - Q) * K(OB) + (1 - P) * Q * K(OA) + (1 - P) * (1 - Q) * (K(OA + OB) + K(OA - OB)) / 2
    return 0.25 + 0.75 * np.sum(np.outer(wa, wb) * L)


def _pair(ra, rb, k):
    return SpinSystem("invented equivalent-proton pair", (ra, rb), k_singlet=k, k_triplet=k)


@pytest.mark.parametrize("n", [1, 4, 9])
def test_one_radical_matches_the_finite_n_closed_form(n):
    # Derived: module docstring (n = 1 gives 5/8 + (3/8) K(a), the known one-nucleus result).
    k = 2e6
    system = _pair(_radical("A", n, 0.7), Radical("B"), k)
    got = fast_separable.singlet_start_singlet_yield(system, 0.0, [[0.0, 0.0, 1.0]])[0]
    assert got == pytest.approx(_one_radical_closed_form(n, 0.7, k), abs=1e-9)


def test_two_radicals_match_the_finite_n_closed_form():
    # Derived: module docstring.
    k = 3e6
    system = _pair(_radical("A", 6, 0.9), _radical("B", 5, 0.9 * 0.618), k)
    got = fast_separable.singlet_start_singlet_yield(system, 0.0, [[0.0, 0.0, 1.0]])[0]
    assert got == pytest.approx(_two_radical_closed_form(6, 0.9, 5, 0.9 * 0.618, k), abs=1e-9)


def test_many_nuclei_on_one_radical_tend_to_one_half():
    # Source: Schulten and Wolynes (1978), module docstring: Phi_S -> 1/2, slow recombination.
    # The exact yields (fast method, total-spin blocks: 2^40 states in blocks of size <= 42)
    # approach 1/2 as n grows; the derived correction (3/4) sum_J w_J / (6 (J + 1/2)^2) ~ 1/n.
    k = 3e5
    dev = []
    for n in (5, 10, 20, 40):
        system = _pair(_radical("A", n, 0.5), Radical("B"), k)
        phi = fast_separable.singlet_start_singlet_yield(system, 0.0, [[0.0, 0.0, 1.0]])[0]
        dev.append(phi - 0.5)
    assert all(d > 0 for d in dev) and dev == sorted(dev, reverse=True)
    assert dev[-1] < 0.02 and dev[-1] < 0.6 * dev[-2]


def test_many_nuclei_on_both_radicals_tend_to_one_third():
    # Source: Schulten and Wolynes (1978), module docstring: Phi_S -> 1/3, slow recombination,
    # incommensurate couplings (ratio 0.618...) so that no two precession frequencies coincide.
    k = 3e5
    dev = []
    for n in (4, 10, 24):
        system = _pair(_radical("A", n, 0.5), _radical("B", n, 0.5 * 0.6180339887), k)
        phi = fast_separable.singlet_start_singlet_yield(system, 0.0, [[0.0, 0.0, 1.0]])[0]
        dev.append(phi - 1 / 3)
        assert phi == pytest.approx(_two_radical_closed_form(n, 0.5, n, 0.5 * 0.6180339887, k), abs=1e-8)
    assert all(d > 0 for d in dev) and dev == sorted(dev, reverse=True)
    assert dev[-1] < 0.02
