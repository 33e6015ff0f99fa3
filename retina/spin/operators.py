"""Spin operators, pair-space embedding, Hamiltonians, projectors and Liouville superoperators.

Conventions (owned here)
------------------------
The Hamiltonian, reaction and relaxation terms themselves are those of :mod:`retina.spin.system`.

- Single-spin basis: eigenstates of ``S_z`` ordered ``m = s, s-1, ..., -s`` (so for an electron
  index 0 is "up", 1 is "down"); ``S_y`` is imaginary; hbar = 1 in the spin matrices.
- Pair space: Kronecker product in the order electron A, the nuclei of radical A (in their listed
  order), electron B, the nuclei of radical B.  :class:`PairSpace` records the factor dimensions.
- Hamiltonians are angular frequencies (rad s^-1) and are split as
  ``H(B) = H0 + sum_k B_k H_k`` with ``B`` in tesla in the molecular frame (``k = x, y, z``), so a
  batch of fields costs one ``einsum``.
- Singlet projector ``P_S = 1/4 - S_A . S_B`` (times the nuclear identity), ``P_T = 1 - P_S``.
- Liouville space uses row-major vectorisation: ``vec(rho)[i * d + j] = rho[i, j]``, i.e.
  ``rho.reshape(-1)``.  Then ``vec(A rho B) = (A kron B^T) vec(rho)``, the commutator superoperator
  is ``H kron 1 - 1 kron H^T`` and ``Tr(P rho) = vec(P^T) . vec(rho)``.
- Random-field relaxation of electron ``r`` at rate ``k_r``:
  ``(k_r / 2) sum_{a=x,y,z} (2 S_a rho S_a - {S_a S_a, rho})``, normalised so that the expectation
  of every component of that electron's spin decays as ``exp(-k_r t)`` (tested).  Singlet-triplet
  dephasing at rate ``k_STD``: ``k_STD (P_S rho P_S - {P_S, rho} / 2)``, so singlet-triplet
  coherences decay as ``exp(-k_STD t / 2)`` and populations are untouched.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.constants as sc
import scipy.sparse as sp

from retina.errors import InputError

__all__ = [
    "MU_B_OVER_HBAR",
    "GAMMA_E",
    "PairSpace",
    "HamiltonianParts",
    "spin_matrices",
    "pair_space",
    "embed",
    "electron_operators",
    "hamiltonian_parts",
    "hamiltonians",
    "singlet_projector",
    "triplet_projector",
    "initial_density",
    "commutator_superoperator",
    "anticommutator_superoperator",
    "sandwich_superoperator",
    "haberkorn_superoperator",
    "relaxation_superoperator",
    "liouvillian_parts",
]

#: Bohr magneton over hbar, rad s^-1 T^-1 (CODATA through scipy.constants).
MU_B_OVER_HBAR = sc.physical_constants["Bohr magneton"][0] / sc.hbar
#: Free-electron gyromagnetic ratio ``|g_e| mu_B / hbar``, rad s^-1 T^-1.
GAMMA_E = abs(sc.physical_constants["electron g factor"][0]) * MU_B_OVER_HBAR
_MT = 1e-3  # tesla per millitesla


def _check_spin(s) -> float:
    try:
        s = float(s)
    except (TypeError, ValueError):
        raise InputError(f"expected a spin quantum number (0.5, 1, 1.5, ...), got {s!r}", key="spin")
    two_s = 2.0 * s
    if not np.isfinite(s) or s <= 0 or abs(two_s - round(two_s)) > 1e-9:
        raise InputError(f"expected a positive half-integer or integer spin, got {s!r}", key="spin")
    return round(two_s) / 2.0


def spin_matrices(s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Spin matrices ``(S_x, S_y, S_z)`` for spin quantum number ``s`` (dimensionless, hbar = 1).

    Parameters
    ----------
    s : float
        Spin quantum number: 0.5, 1, 1.5, ...

    Returns
    -------
    Sx, Sy, Sz : ndarray, shape (2s+1, 2s+1), complex128
        In the basis ``m = s, s-1, ..., -s``.

    Raises
    ------
    InputError
        When ``s`` is not a positive multiple of 1/2.
    """
    s = _check_spin(s)
    n = int(round(2 * s)) + 1
    m = s - np.arange(n)
    # <m+1| S_+ |m> = sqrt(s(s+1) - m(m+1)); the row of m+1 is one above the row of m.
    plus = np.zeros((n, n), dtype=complex)
    plus[np.arange(n - 1), np.arange(1, n)] = np.sqrt(s * (s + 1) - m[1:] * (m[1:] + 1))
    minus = plus.conj().T
    sx = (plus + minus) / 2.0
    sy = (plus - minus) / 2.0j
    sz = np.diag(m).astype(complex)
    return sx, sy, sz


@dataclass(frozen=True)
class PairSpace:
    """Factor layout of the pair Hilbert space.

    Attributes
    ----------
    dims : tuple of int
        Factor dimensions in Kronecker order (electron A, nuclei of A, electron B, nuclei of B).
    spins : tuple of float
        The spin quantum number of each factor.
    electron_a, electron_b : int
        Factor positions of the two electrons.
    nuclear_a, nuclear_b : int
        Nuclear dimensions of the two radicals (``M = nuclear_a * nuclear_b``).
    """

    dims: tuple[int, ...]
    spins: tuple[float, ...]
    electron_a: int
    electron_b: int
    nuclear_a: int
    nuclear_b: int

    @property
    def dimension(self) -> int:
        """Dimension of the pair Hilbert space, the product of :attr:`dims`."""
        return int(np.prod(self.dims))

    @property
    def nuclear_dimension(self) -> int:
        """Dimension ``M = nuclear_a * nuclear_b`` of the nuclear space of both radicals."""
        return self.nuclear_a * self.nuclear_b

    def singlet_indices(self) -> tuple[np.ndarray, np.ndarray]:
        """Flat indices of ``|up, a, down, b>`` and ``|down, a, up, b>``, each shape (M,).

        Ordered by nuclear state ``(a, b)`` row-major, so that the singlet basis vector of nuclear
        state ``nu`` is ``(e[i_ud[nu]] - e[i_du[nu]]) / sqrt(2)``.

        Returns
        -------
        i_ud, i_du : ndarray of int, each shape (M,)
            Flat indices into the pair space (length :attr:`dimension`) of the states with electron
            A up and B down, and with A down and B up, for each nuclear state.
        """
        idx = np.arange(self.dimension).reshape(2, self.nuclear_a, 2, self.nuclear_b)
        return idx[0, :, 1, :].reshape(-1), idx[1, :, 0, :].reshape(-1)


def pair_space(system) -> PairSpace:
    """The :class:`PairSpace` of a :class:`~retina.spin.system.SpinSystem`.

    Electron A, A's nuclei, electron B, B's nuclei, in that order of the tensor product.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Returns
    -------
    PairSpace
        Factor dimensions, spins, electron positions and nuclear dimensions.

    Raises
    ------
    InputError
        For a nuclear spin that is not a positive multiple of 1/2.
    """
    ra, rb = system.radicals
    spins = [0.5] + [_check_spin(n.spin) for n in ra.nuclei] + [0.5] + [_check_spin(n.spin) for n in rb.nuclei]
    dims = tuple(int(round(2 * s)) + 1 for s in spins)
    return PairSpace(
        dims=dims,
        spins=tuple(spins),
        electron_a=0,
        electron_b=1 + len(ra.nuclei),
        nuclear_a=ra.nuclear_dimension,
        nuclear_b=rb.nuclear_dimension,
    )


def embed(op, position: int, dims) -> sp.csr_matrix:
    """Embed a single-factor operator in the product space.

    Parameters
    ----------
    op : array_like, shape (dims[position], dims[position])
    position : int
        Factor index.
    dims : sequence of int
        Factor dimensions.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (prod(dims), prod(dims)), complex128
        ``1 x ... x op x ... x 1``.
    """
    left = int(np.prod(dims[:position])) if position > 0 else 1
    right = int(np.prod(dims[position + 1 :])) if position + 1 < len(dims) else 1
    out = sp.kron(sp.identity(left, dtype=complex, format="csr"), sp.csr_matrix(np.asarray(op, dtype=complex)))
    return sp.kron(out, sp.identity(right, dtype=complex, format="csr"), format="csr")


def _vector_operators(position: int, space: PairSpace) -> list[sp.csr_matrix]:
    return [embed(m, position, space.dims) for m in spin_matrices(space.spins[position])]


@functools.lru_cache(maxsize=16)
def _electron_operators_cached(space: PairSpace):
    return tuple(_vector_operators(space.electron_a, space)), tuple(_vector_operators(space.electron_b, space))


def electron_operators(space: PairSpace) -> tuple[list[sp.csr_matrix], list[sp.csr_matrix]]:
    """The electron spin operators embedded in the pair space.

    Cached per layout: treat the returned matrices as read-only.

    Parameters
    ----------
    space : PairSpace
        The pair's space.

    Returns
    -------
    tuple of two lists of scipy.sparse.csr_matrix, each shape (d, d)
        ``([S_Ax, S_Ay, S_Az], [S_Bx, S_By, S_Bz])`` (units of hbar).
    """
    a, b = _electron_operators_cached(space)
    return list(a), list(b)


def _bilinear(u, tensor, v) -> sp.csr_matrix:
    """``sum_ij u_i T_ij v_j`` for operator lists u, v and a (3, 3) tensor."""
    out = None
    for i in range(3):
        for j in range(3):
            if tensor[i, j] != 0.0:
                term = tensor[i, j] * (u[i] @ v[j])
                out = term if out is None else out + term
    if out is None:
        out = sp.csr_matrix(u[0].shape, dtype=complex)
    return out.tocsr()


@dataclass(frozen=True)
class HamiltonianParts:
    """``H(B) = h0 + sum_k B_k hb[k]`` in rad s^-1 with ``B`` in tesla.

    Attributes
    ----------
    h0 : ndarray, shape (d, d), complex128
        Field-independent part (hyperfine, exchange, dipolar).
    hb : ndarray, shape (3, d, d), complex128
        Zeeman parts per tesla of field along molecular x, y, z.
    space : PairSpace
    """

    h0: np.ndarray
    hb: np.ndarray
    space: PairSpace


#: Up to this pair dimension :func:`hamiltonian_parts` assembles with dense numpy products
#: (cheaper than sparse bookkeeping for small matrices); above it, with scipy.sparse.
DENSE_ASSEMBLY_UP_TO = 64


def _embed_dense(op, position: int, dims) -> np.ndarray:
    left = int(np.prod(dims[:position])) if position > 0 else 1
    right = int(np.prod(dims[position + 1 :])) if position + 1 < len(dims) else 1
    return np.kron(np.kron(np.eye(left), op), np.eye(right))


def hamiltonian_parts(system, *, sparse: bool = False):
    """Split the Hamiltonian of ``system`` into its field-independent part and Zeeman parts.

    Parameters
    ----------
    system : SpinSystem
    sparse : bool
        If True return ``(h0, [hx, hy, hz], space)`` as scipy.sparse CSR matrices instead of a
        :class:`HamiltonianParts` of dense arrays.

    Returns
    -------
    HamiltonianParts
        Angular frequencies, rad s^-1 (Zeeman parts per tesla).
    """
    space = pair_space(system)
    d = space.dimension
    if d <= DENSE_ASSEMBLY_UP_TO:
        def vec_ops(pos):
            return [_embed_dense(m, pos, space.dims) for m in spin_matrices(space.spins[pos])]

        zero = np.zeros((d, d), dtype=complex)
        ident = np.eye(d, dtype=complex)
    else:
        def vec_ops(pos):
            return _vector_operators(pos, space)

        zero = sp.csr_matrix((d, d), dtype=complex)
        ident = sp.identity(d, dtype=complex, format="csr")

    def bilinear(u, tensor, v):
        out = zero
        for i in range(3):
            for j in range(3):
                if tensor[i, j] != 0.0:
                    out = out + tensor[i, j] * (u[i] @ v[j])
        return out

    sa, sb = vec_ops(space.electron_a), vec_ops(space.electron_b)
    h0 = zero
    hb = [zero, zero, zero]
    offsets = (1, space.electron_b + 1)
    for r, (radical, s_e) in enumerate(zip(system.radicals, (sa, sb))):
        g = np.asarray(radical.g_matrix, dtype=float)
        for i in range(3):  # (mu_B / hbar) B . g . S = sum_i B_i sum_j g_ij S_j
            hb[i] = hb[i] + MU_B_OVER_HBAR * sum(g[i, j] * s_e[j] for j in range(3))
        for n_i, nucleus in enumerate(radical.nuclei):
            s_n = vec_ops(offsets[r] + n_i)
            a = np.asarray(nucleus.hyperfine_mT, dtype=float) * _MT
            h0 = h0 + GAMMA_E * bilinear(s_e, a, s_n)
    if system.exchange_mT:
        j = float(system.exchange_mT) * _MT
        h0 = h0 - GAMMA_E * j * (2.0 * bilinear(sa, np.eye(3), sb) + 0.5 * ident)
    if system.dipolar_mT is not None:
        h0 = h0 + GAMMA_E * bilinear(sa, np.asarray(system.dipolar_mT, dtype=float) * _MT, sb)
    if sparse:
        return sp.csr_matrix(h0), [sp.csr_matrix(h) for h in hb], space
    dense = (lambda x: np.array(x, dtype=complex)) if d <= DENSE_ASSEMBLY_UP_TO else (lambda x: x.toarray())
    return HamiltonianParts(h0=dense(h0), hb=np.stack([dense(h) for h in hb]), space=space)


def hamiltonians(parts: HamiltonianParts, b_tesla) -> np.ndarray:
    """Hamiltonians for a batch of field vectors.

    Parameters
    ----------
    parts : HamiltonianParts
    b_tesla : array_like, shape (N, 3)
        Field vectors in tesla, molecular frame.

    Returns
    -------
    ndarray, shape (N, d, d), complex128
        ``H0 + sum_k B_k H_k`` in rad s^-1.
    """
    b = np.asarray(b_tesla, dtype=float).reshape(-1, 3)
    out = np.einsum("nk,kij->nij", b.astype(complex), parts.hb)
    out += parts.h0
    return out


@functools.lru_cache(maxsize=16)
def _singlet_projector_cached(space: PairSpace) -> sp.csr_matrix:
    sa, sb = electron_operators(space)
    return (0.25 * sp.identity(space.dimension, dtype=complex, format="csr") - _bilinear(sa, np.eye(3), sb)).tocsr()


def singlet_projector(space: PairSpace, *, sparse: bool = False):
    """The singlet projector ``P_S = 1/4 - S_A . S_B``.

    The sparse form is cached per layout: treat it as read-only (the dense form is a new array).

    Parameters
    ----------
    space : PairSpace
        The pair's space.
    sparse : bool
        Return a sparse CSR matrix instead of a dense array.

    Returns
    -------
    ndarray or scipy.sparse.csr_matrix, shape (d, d)
        Complex.
    """
    p = _singlet_projector_cached(space)
    return p if sparse else p.toarray()


def triplet_projector(space: PairSpace, *, sparse: bool = False):
    """The triplet projector ``P_T = 1 - P_S``.

    Parameters
    ----------
    space : PairSpace
        The pair's space.
    sparse : bool
        Return a sparse CSR matrix instead of a dense array.

    Returns
    -------
    ndarray or scipy.sparse.csr_matrix, shape (d, d)
        Complex.
    """
    p = (sp.identity(space.dimension, dtype=complex, format="csr") - singlet_projector(space, sparse=True)).tocsr()
    return p if sparse else p.toarray()


def initial_density(system, space: PairSpace | None = None) -> np.ndarray:
    """Initial density matrix ``P_S / M`` (singlet start) or ``P_T / (3 M)`` (triplet start).

    ``M`` is the nuclear dimension (every nuclear state equally populated).

    Parameters
    ----------
    system : SpinSystem
        The pair.
    space : PairSpace, optional
        The pair's space (built from ``system`` when omitted).

    Returns
    -------
    ndarray, shape (d, d)
        Complex, Hermitian, trace 1.

    Raises
    ------
    InputError
        Key ``initial_state``, for a start other than "singlet" or "triplet".
    """
    space = space or pair_space(system)
    m = space.nuclear_dimension
    if system.initial_state == "singlet":
        return singlet_projector(space) / m
    if system.initial_state == "triplet":
        return triplet_projector(space) / (3 * m)
    raise InputError(f"expected 'singlet' or 'triplet', got {system.initial_state!r}",
                     source=system.source, key="initial_state")


def _ident(d):
    return sp.identity(d, dtype=complex, format="csr")


def commutator_superoperator(h) -> sp.csr_matrix:
    """``[H, .]`` as ``H kron 1 - 1 kron H^T`` (row-major vectorisation).

    Parameters
    ----------
    h : array_like or sparse matrix, shape (d, d)
        The operator.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (d^2, d^2)
    """
    h = sp.csr_matrix(h)
    d = h.shape[0]
    return (sp.kron(h, _ident(d)) - sp.kron(_ident(d), h.T)).tocsr()


def anticommutator_superoperator(k) -> sp.csr_matrix:
    """``{K, .}`` as ``K kron 1 + 1 kron K^T`` (row-major vectorisation).

    Parameters
    ----------
    k : array_like or sparse matrix, shape (d, d)
        The operator.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (d^2, d^2)
    """
    k = sp.csr_matrix(k)
    d = k.shape[0]
    return (sp.kron(k, _ident(d)) + sp.kron(_ident(d), k.T)).tocsr()


def sandwich_superoperator(a, b) -> sp.csr_matrix:
    """``rho -> A rho B`` as ``A kron B^T`` (row-major vectorisation).

    Parameters
    ----------
    a, b : array_like or sparse matrix, shape (d, d)
        The left and right factors.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (d^2, d^2)
    """
    return sp.kron(sp.csr_matrix(a), sp.csr_matrix(b).T, format="csr")


def haberkorn_superoperator(system, space: PairSpace | None = None) -> sp.csr_matrix:
    """Haberkorn recombination ``-(k_S/2){P_S, .} - (k_T/2){P_T, .}``.

    Parameters
    ----------
    system : SpinSystem
        The pair.
    space : PairSpace, optional
        The pair's space (built from ``system`` when omitted).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (d^2, d^2)
        s^-1.
    """
    space = space or pair_space(system)
    ps = singlet_projector(space, sparse=True)
    pt = triplet_projector(space, sparse=True)
    k = float(system.k_singlet) * ps + float(system.k_triplet) * pt
    return (-0.5 * anticommutator_superoperator(k)).tocsr()


def _lindblad(op, rate) -> sp.csr_matrix:
    """``rate (L rho L^+ - {L^+ L, rho} / 2)``."""
    op = sp.csr_matrix(op)
    opd = op.conj().T.tocsr()
    return (rate * (sandwich_superoperator(op, opd) - 0.5 * anticommutator_superoperator(opd @ op))).tocsr()


def relaxation_superoperator(system, space: PairSpace | None = None) -> sp.csr_matrix:
    """Random-field relaxation plus singlet-triplet dephasing (module docstring).

    Parameters
    ----------
    system : SpinSystem
        The pair.
    space : PairSpace, optional
        The pair's space (built from ``system`` when omitted).

    Returns
    -------
    scipy.sparse.csr_matrix, shape (d^2, d^2)
        s^-1 (zero when the system has no relaxation).
    """
    space = space or pair_space(system)
    d = space.dimension
    out = sp.csr_matrix((d * d, d * d), dtype=complex)
    relax = system.relaxation
    for rate, s_e in zip(relax.random_field, electron_operators(space)):
        if rate:
            # (k/2) sum_a (2 S_a rho S_a - {S_a S_a, rho}) = k sum_a (S_a rho S_a - {S_a^2, rho}/2)
            for s_a in s_e:
                out = out + _lindblad(s_a, float(rate))
    if relax.st_dephasing:
        out = out + _lindblad(singlet_projector(space, sparse=True), float(relax.st_dephasing))
    return out.tocsr()


def liouvillian_parts(system):
    """The Liouvillian's parts: ``L(B) = L0 + sum_k B_k L_k``, ``d vec(rho)/dt = L vec(rho)``.

    Parameters
    ----------
    system : SpinSystem
        The pair.

    Returns
    -------
    L0 : scipy.sparse.csr_matrix, shape (d^2, d^2)
        ``-i [H0, .]`` + Haberkorn recombination + relaxation, s^-1.
    Lb : list of 3 scipy.sparse.csr_matrix, shape (d^2, d^2)
        ``-i [H_k, .]``, s^-1 per tesla of the field component ``B_k``.
    space : PairSpace
    """
    h0, hb, space = hamiltonian_parts(system, sparse=True)
    l0 = -1j * commutator_superoperator(h0) + haberkorn_superoperator(system, space)
    if system.relaxation.any:
        l0 = l0 + relaxation_superoperator(system, space)
    lb = [(-1j * commutator_superoperator(h)).tocsr() for h in hb]
    return l0.tocsr(), lb, space
