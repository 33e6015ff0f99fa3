"""The validated, immutable description of a radical pair (`SpinSystem`).

Conventions (owned here; the engine modules follow them)
-----------------------------------------------------------
Units as stored: hyperfine, exchange and dipolar couplings in millitesla (field-equivalent, i.e.
multiplied by the free-electron gyromagnetic ratio ``gamma_e = g_e mu_B / hbar`` to become angular
frequencies); rates in s^-1; g values dimensionless. All tensors are in the molecular frame.

Spin Hamiltonian, in angular-frequency units (``H / hbar``), for a static field ``B`` (tesla)::

    H = sum_r (mu_B / hbar) B . g_r . S_r                       (electron Zeeman; g_r = g * 1 if isotropic)
      + gamma_e * sum_r sum_i S_r . A_ri . I_ri                 (hyperfine, A in tesla)
      - gamma_e * J * (2 S_1 . S_2 + 1/2)                       (exchange, J in tesla)
      + gamma_e * S_1 . D . S_2                                 (dipolar, D in tesla)

Nuclear Zeeman terms are neglected (common practice, no source: they are ~1/660 of the electron term
or smaller).  The point-dipole tensor from a distance r and unit direction n is
``D = (mu_0 / 4 pi) (g_e mu_B / r^3) (I - 3 n n^T)`` (tesla), from the classical dipole-dipole
energy divided by ``g_e mu_B``.

Reaction: Haberkorn recombination, ``d rho / dt = -i [H, rho] - (k_S/2){P_S, rho} - (k_T/2){P_T, rho}
+ relaxation``; the singlet yield is ``Phi_S = k_S int_0^inf Tr(P_S rho(t)) dt`` and
``Phi_T = k_T int Tr(P_T rho) dt``.  Initial state ``P_S / M`` (singlet) or ``P_T / (3 M)``
(triplet), ``M`` the nuclear-spin dimension.

Relaxation (optional), as Lindblad dissipators added to the equation above:

- random-field relaxation of electron r at rate ``k_r``:
  ``k_r sum_{a=x,y,z} (S_a rho S_a - {S_a S_a, rho} / 2)``, so each component of that electron's
  spin decays at rate ``k_r``;
- singlet-triplet dephasing at rate ``k_STD``: ``k_STD (P_S rho P_S - {P_S, rho} / 2)``, so
  singlet-triplet coherences decay as ``exp(-k_STD t / 2)`` and populations are untouched.

``retina.spin.operators`` builds these superoperators; its tests check both decay rates.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import math

import numpy as np


@dataclass(frozen=True, eq=False)
class Nucleus:
    """One magnetic nucleus: label, spin quantum number I (1/2, 1, 3/2, ...) and hyperfine tensor.

    ``hyperfine_mT`` is a (3, 3) float array in mT in the molecular frame (read-only).
    """

    label: str
    spin: float
    hyperfine_mT: np.ndarray

    @property
    def multiplicity(self) -> int:
        """2I + 1."""
        return int(round(2 * self.spin)) + 1

    @property
    def is_isotropic(self) -> bool:
        a = self.hyperfine_mT
        return bool(np.allclose(a, np.eye(3) * np.trace(a) / 3.0, atol=1e-14, rtol=0.0))


@dataclass(frozen=True, eq=False)
class Radical:
    """One radical: label, g (isotropic value or a (3, 3) tensor) and its nuclei."""

    label: str
    g: float = 2.0023193043625635
    g_tensor: np.ndarray | None = None
    nuclei: tuple[Nucleus, ...] = ()

    @property
    def g_matrix(self) -> np.ndarray:
        """The (3, 3) g tensor (``g * I`` when only an isotropic g was given)."""
        return self.g_tensor if self.g_tensor is not None else self.g * np.eye(3)

    @property
    def nuclear_dimension(self) -> int:
        # exact Python integers: a numpy product wraps in 64 bits (64 spin-1/2 nuclei would give 0)
        return math.prod(n.multiplicity for n in self.nuclei)

    @property
    def dimension(self) -> int:
        """Hilbert dimension of this radical (electron x its nuclei)."""
        return 2 * self.nuclear_dimension


@dataclass(frozen=True)
class Relaxation:
    """Optional relaxation rates in s^-1 (zero means absent)."""

    random_field: tuple[float, float] = (0.0, 0.0)  # per electron (radical A, radical B)
    st_dephasing: float = 0.0

    @property
    def any(self) -> bool:
        return bool(self.random_field[0] or self.random_field[1] or self.st_dephasing)


@dataclass(frozen=True, eq=False)
class SpinSystem:
    """A validated radical pair.  Build it with :func:`retina.spin.io.load_system` or directly.

    ``==`` is identity (the tensors are arrays); compare physics with
    :func:`retina.spin.io.systems_equal`.

    Attributes
    ----------
    name : str
    radicals : (Radical, Radical)
    exchange_mT : float
        J in mT, with the term ``-J (2 S1.S2 + 1/2)`` (singlet-triplet gap 2J).
    dipolar_mT : ndarray (3, 3) or None
        D in mT, with the term ``S1 . D . S2``; None means no dipolar coupling.
    k_singlet, k_triplet : float
        Haberkorn recombination rates, s^-1 (both > 0 unless the yield channel is unused).
    relaxation : Relaxation
    initial_state : "singlet" or "triplet"
    reported_yield : "singlet" or "triplet"
    source : str or None
        The file it was read from (for messages and provenance).
    document : dict
        The parsed file content, kept verbatim for provenance (hashing, HDF5 attributes).
    """

    name: str
    radicals: tuple[Radical, Radical]
    exchange_mT: float = 0.0
    dipolar_mT: np.ndarray | None = None
    k_singlet: float = 1e6
    k_triplet: float = 1e6
    relaxation: Relaxation = field(default_factory=Relaxation)
    initial_state: Literal["singlet", "triplet"] = "singlet"
    reported_yield: Literal["singlet", "triplet"] = "singlet"
    source: str | None = None
    document: dict = field(default_factory=dict, compare=False, repr=False)

    @property
    def dimension(self) -> int:
        """Hilbert dimension of the pair: 4 x product of nuclear multiplicities."""
        return self.radicals[0].dimension * self.radicals[1].dimension

    @property
    def nuclear_dimension(self) -> int:
        return self.radicals[0].nuclear_dimension * self.radicals[1].nuclear_dimension

    @property
    def equal_rates(self) -> bool:
        return bool(np.isclose(self.k_singlet, self.k_triplet, rtol=1e-12, atol=0.0))

    @property
    def electron_coupled(self) -> bool:
        """True when exchange or dipolar coupling links the two electrons."""
        d = self.dipolar_mT
        return bool(self.exchange_mT != 0.0 or (d is not None and np.any(d != 0.0)))


def equal_rate_reported_yield(system: SpinSystem, phi_ss):
    """The reported yield from the singlet-start singlet yield, for equal rates and no relaxation.

    The scope of the eigen and separable methods.  Derived: with ``k_S = k_T`` every state decays
    at the same rate, so the maximally mixed start ``1 / (4 M)`` gives ``Phi_S = 1/4``; writing it
    as ``(1/4) Phi_S(singlet) + (3/4) Phi_S(triplet)`` gives ``Phi_S(triplet start) =
    (1 - phi_ss) / 3``, and ``Phi_T = 1 - Phi_S`` for either start.

    Parameters
    ----------
    system : SpinSystem
        Its ``initial_state`` and ``reported_yield`` choose the formula.
    phi_ss : ndarray
        Singlet yield from a singlet start, any shape.

    Returns
    -------
    ndarray
        The reported yield, same shape.
    """
    from retina.errors import InputError

    if system.initial_state == "singlet":
        phi_s = phi_ss
    elif system.initial_state == "triplet":
        phi_s = (1.0 - phi_ss) / 3.0
    else:
        raise InputError(f"expected initial_state 'singlet' or 'triplet', got {system.initial_state!r}",
                         source=system.source, key="initial_state")
    if system.reported_yield == "singlet":
        return phi_s
    if system.reported_yield == "triplet":
        return 1.0 - phi_s
    raise InputError(f"expected reported_yield 'singlet' or 'triplet', got {system.reported_yield!r}",
                     source=system.source, key="reported_yield")
