r"""Exact reduction by groups of magnetically equivalent nuclei (total-spin blocks).

Nuclei of one radical are *magnetically equivalent* here when they have the same spin quantum
number and the same hyperfine tensor (element by element; a methyl group's three protons with one
averaged tensor, say).  The TOML schema declares such a group with ``count = n`` on a nucleus entry
(:mod:`retina.spin.io`); groups are also found when the nuclei are listed one by one.

Derivation
----------
For a group ``g`` of ``n`` spins ``I`` with one tensor ``A_g`` the hyperfine term is
``S . A_g . (sum_i I_i) = S . A_g . J_g``: it sees only the group's total spin ``J_g``.  The group's
space splits into irreducible total-spin subspaces, ``(2I+1)^n = sum_J N_J (2J + 1)``, and ``J_g``
acts in each as the spin-``J`` matrices times the identity on the ``N_J`` copies.  With the electron
spin (the only operator the yield sees, :mod:`retina.spin.separable`) also acting on no nuclear
label, the radical's Hamiltonian and its electron spin are block diagonal over the choice of one
``J`` per group, and each block ``(J_1, J_2, ...)`` appears ``prod_g N_{J_g}`` times.  Hence every
trace over the radical becomes a multiplicity-weighted sum over the distinct blocks,

    Tr_r[S_a S_b(t)] = sum_blocks (prod_g N_{J_g}) Tr_block[S_a S_b(t)],

and the radical's cost follows the block dimensions ``2 prod_g (2 J_g + 1)``, not ``2 (2I+1)^n``.
Blocks with ``J_g = 0`` drop that group (its factor is one-dimensional and uncoupled).

Multiplicities (Clebsch-Gordan counting): the number of states of ``n`` spins ``I`` with total
projection ``M`` is the coefficient of ``x^M`` in ``(x^-I + ... + x^I)^n``; then
``N_J = c(M = J) - c(M = J + 1)`` (every multiplet ``J' >= J`` contributes one state at ``M = J``).
Check: ``sum_J N_J (2J + 1) = (2I + 1)^n`` (asserted when blocks are built).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from retina.spin.operators import GAMMA_E, MU_B_OVER_HBAR, spin_matrices

__all__ = ["groups", "multiplicities", "Block", "radical_blocks", "reduced_dimensions", "pseudo_nuclei"]


def groups(radical) -> list[list[int]]:
    """Indices of the radical's nuclei grouped by equal spin and equal hyperfine tensor, in order of
    first appearance.

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.

    Returns
    -------
    list of list of int
    """
    out: list[list[int]] = []
    keys: list[tuple[float, np.ndarray]] = []
    for i, nuc in enumerate(radical.nuclei):
        a = np.asarray(nuc.hyperfine_mT, dtype=float)
        for key, grp in zip(keys, out):
            if key[0] == nuc.spin and np.array_equal(key[1], a):
                grp.append(i)
                break
        else:
            keys.append((nuc.spin, a))
            out.append([i])
    return out


def multiplicities(spin: float, n: int) -> dict[float, int]:
    """``{J: N_J}`` for ``n`` spins of quantum number ``spin`` (Clebsch-Gordan counting, docstring).

    Parameters
    ----------
    spin : float
        Quantum number of each spin.
    n : int
        Number of spins.

    Returns
    -------
    dict
        Total spin ``J`` to its multiplicity ``N_J``.
    """
    twice = int(round(2 * spin))
    poly = np.ones(1, dtype=np.int64)
    for _ in range(n):
        poly = np.convolve(poly, np.ones(twice + 1, dtype=np.int64))
    # poly[k] counts states with 2M = k * 2 - n * twice ... in units of one step of M
    top = n * twice                                              # 2 M_max
    counts = {top - 2 * k: int(c) for k, c in enumerate(poly[::-1])}  # 2M -> count (symmetric)
    out: dict[float, int] = {}
    for two_j in range(top, -1, -2):
        above = counts.get(two_j + 2, 0)
        nj = counts[two_j] - above
        if nj:
            out[two_j / 2] = nj
    assert sum(m * (2 * j + 1) for j, m in out.items()) == (twice + 1) ** n
    return out


@dataclass(frozen=True)
class Block:
    """One total-spin block of a radical.

    Attributes
    ----------
    spins : tuple of float
        The total spin ``J_g`` of each group in this block (0 for groups left out).
    multiplicity : int
        How many times the block appears, ``prod_g N_{J_g}``.
    s_e : ndarray (3, d, d) complex
        Electron spin components on the block (electron first factor).
    h_hf : ndarray (d, d) complex
        Hyperfine Hamiltonian ``gamma_e sum_g S . A_g . J_g`` in rad s^-1.
    zeeman : ndarray (3, 3)
        ``(mu_B / hbar) g`` (as in :func:`retina.spin.separable.radical_operators`).
    """

    spins: tuple
    multiplicity: int
    s_e: np.ndarray
    h_hf: np.ndarray
    zeeman: np.ndarray

    @property
    def dimension(self) -> int:
        return int(self.h_hf.shape[0])


def _block_operators(pseudo, sparse: bool = False):
    """Operators for an electron and pseudo-nuclei ``[(J, A_mT)]`` (as in radical_operators);
    scipy.sparse CSR matrices (``s_e`` a list of three) when ``sparse``."""
    import scipy.sparse as sps

    kron = (lambda x, y: sps.kron(x, y, format="csr")) if sparse else np.kron
    eye = (lambda n: sps.identity(n, dtype=complex, format="csr")) if sparse else np.eye
    se = [sps.csr_matrix(x) for x in spin_matrices(0.5)] if sparse else spin_matrices(0.5)
    mults = [int(round(2 * j)) + 1 for j, _ in pseudo]
    d_nuc = int(np.prod(mults)) if mults else 1
    s_e = [kron(s, eye(d_nuc)) for s in se]
    if not sparse:
        s_e = np.stack(s_e)
    h_hf = (sps.csr_matrix((2 * d_nuc, 2 * d_nuc), dtype=complex) if sparse
            else np.zeros((2 * d_nuc, 2 * d_nuc), dtype=complex))
    for i, (j, a_mT) in enumerate(pseudo):
        before = int(np.prod(mults[:i])) if i else 1
        after = int(np.prod(mults[i + 1:])) if i + 1 < len(mults) else 1
        spins = [sps.csr_matrix(x) for x in spin_matrices(j)] if sparse else spin_matrices(j)
        jj = [kron(kron(eye(before), x), eye(after)) for x in spins]
        a = np.asarray(a_mT, dtype=float) * 1e-3 * GAMMA_E
        for p in range(3):
            for q in range(3):
                if a[p, q] != 0.0:
                    h_hf = h_hf + a[p, q] * kron(se[p], jj[q])
    return s_e, (h_hf.tocsr() if sparse else h_hf)


def radical_blocks(radical, *, sparse: bool = False) -> list[Block]:
    """The distinct total-spin blocks of ``radical`` with their multiplicities (module docstring).

    Without equivalent nuclei this is one block, the radical itself, of multiplicity 1.  With
    ``sparse`` the operators are scipy.sparse CSR matrices (``s_e`` a list of three).

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.
    sparse : bool
        Build sparse operators.

    Returns
    -------
    list of Block
    """
    grp = groups(radical)
    options = []
    for g in grp:
        nuc = radical.nuclei[g[0]]
        options.append(sorted(multiplicities(nuc.spin, len(g)).items(), reverse=True))
    zeeman = MU_B_OVER_HBAR * np.asarray(radical.g_matrix, dtype=float)
    blocks = []
    for choice in itertools.product(*options) if options else [()]:
        mult = int(np.prod([m for _, m in choice])) if choice else 1
        pseudo = [(j, radical.nuclei[g[0]].hyperfine_mT) for (j, _), g in zip(choice, grp) if j > 0]
        s_e, h_hf = _block_operators(pseudo, sparse)
        blocks.append(Block(tuple(j for j, _ in choice), mult, s_e, h_hf, zeeman))
    total = sum(b.multiplicity * b.dimension for b in blocks)
    assert total == radical.dimension, (total, radical.dimension)
    return blocks


def reduced_dimensions(radical) -> list[tuple[int, int]]:
    """``[(block dimension, multiplicity)]`` without building operators (for cost estimates).

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.

    Returns
    -------
    list of (int, int)
    """
    grp = groups(radical)
    options = [sorted(multiplicities(radical.nuclei[g[0]].spin, len(g)).items(), reverse=True) for g in grp]
    out = []
    for choice in itertools.product(*options) if options else [()]:
        dim = 2 * int(np.prod([int(round(2 * j)) + 1 for j, _ in choice])) if choice else 2
        out.append((dim, int(np.prod([m for _, m in choice])) if choice else 1))
    return out


def pseudo_nuclei(radical, block):
    """``[(J, A_mT), ...]``: one pseudo-nucleus per group of equivalent nuclei, with the block's
    total spin ``J`` of that group and the group's hyperfine tensor.

    Parameters
    ----------
    radical : retina.spin.system.Radical
        The radical.
    block : retina.spin.equivalence block
        One of its total-spin blocks (``block.spins``: one total spin per group).

    Returns
    -------
    list of (float, ndarray (3, 3))
        Total spin and hyperfine tensor (mT) per group.
    """
    return [(j, radical.nuclei[g[0]].hyperfine_mT) for j, g in zip(block.spins, groups(radical))]
