"""Random nuclear vectors for the sampling method (private helpers of :mod:`retina.spin.sampling`,
whose docstring derives why the basis of the phases matters): independent entries of unit modulus
and uniformly random phase, drawn in the laboratory product basis or with each nucleus quantised
along its dominant hyperfine axis (:func:`spin_rotation`, :func:`dominant_axis`).  Re-exported by
:mod:`retina.spin._propagation`, which propagates them.
"""

from __future__ import annotations

import math

import numpy as np

from retina.spin.equivalence import pseudo_nuclei


#: Bases in which the random phases are drawn (:func:`random_vectors`; the sampling module's
#: docstring derives why the basis matters).
BASES = ("lab", "nucleus-axis")


def spin_rotation(j: float, axis) -> np.ndarray:
    """The spin-``j`` rotation ``D`` taking ``z`` to the unit vector ``axis``:
    ``D J_z D^+ = axis . J`` (derived: ``D = exp(-i theta u . J)`` with ``u = z x n / |z x n|`` and
    ``theta = arccos n_z`` rotates the vector operator ``J`` by the rotation ``R`` taking ``z`` to
    ``n``, so ``D J_z D^+ = (R z) . J``).

    Parameters
    ----------
    j : float
        Spin quantum number (0.5, 1, ...).
    axis : array_like (3,)
        Target direction (normalised here).

    Returns
    -------
    ndarray (2j + 1, 2j + 1) complex
        Unitary; its column ``m`` is the eigenvector of ``axis . J`` with eigenvalue ``j - m``.
    """
    import scipy.linalg

    from retina.spin.operators import spin_matrices

    n = np.asarray(axis, dtype=float)
    n = n / np.linalg.norm(n)
    u = np.cross([0.0, 0.0, 1.0], n)
    s = float(np.linalg.norm(u))
    theta = math.atan2(s, n[2])
    if s < 1e-15:
        u = np.array([1.0, 0.0, 0.0])
    else:
        u = u / s
    jm = np.asarray(spin_matrices(j))
    return scipy.linalg.expm(-1j * theta * np.einsum("a,aij->ij", u, jm))


def dominant_axis(a_mT) -> np.ndarray:
    """The principal axis of the largest principal value in modulus of a hyperfine tensor's
    symmetric part (the axis along which that nucleus is quantised by ``"nucleus-axis"``).

    Parameters
    ----------
    a_mT : array_like (3, 3)

    Returns
    -------
    ndarray (3,)
        Unit vector (sign arbitrary: both signs give the same quantisation).
    """
    a = np.asarray(a_mT, dtype=float)
    w, v = np.linalg.eigh(0.5 * (a + a.T))
    return v[:, int(np.argmax(np.abs(w)))]


def basis_rotations(radical, pb, basis: str) -> list:
    """Per nuclear factor of block ``pb`` the unitary whose columns are the sampling basis
    (:data:`BASES`): identities for ``"lab"``; for ``"nucleus-axis"`` the spin rotation taking ``z``
    to the factor's dominant hyperfine axis (:func:`dominant_axis`, :func:`spin_rotation`).

    Parameters
    ----------
    radical : retina.spin.system.Radical
    pb : PreparedBlock
    basis : str

    Returns
    -------
    list of ndarray (2J + 1, 2J + 1)
        One per pseudo-nucleus of non-zero total spin, in the block's factor order.
    """
    out = []
    for j, a_mT in pseudo_nuclei(radical, pb.block):
        if j <= 0:
            continue
        dim = int(round(2 * j)) + 1
        out.append(np.eye(dim, dtype=complex) if basis == "lab" else spin_rotation(j, dominant_axis(a_mT)))
    return out


def rotate_factors(vectors: np.ndarray, rotations) -> np.ndarray:
    """``(kron_k D_k) v`` for a block of vectors ``v (n, R)`` without forming the Kronecker product.

    Parameters
    ----------
    vectors : ndarray (n, R)
        ``n = prod_k dim D_k``.
    rotations : list of ndarray
        One square matrix per factor, the first factor the slowest index.

    Returns
    -------
    ndarray (n, R) complex
    """
    dims = [d.shape[0] for d in rotations]
    r = vectors.shape[1]
    x = np.asarray(vectors, dtype=complex).reshape(dims + [r])
    for k, d in enumerate(rotations):
        x = np.moveaxis(np.tensordot(d, x, axes=([1], [k])), 0, k)
    return x.reshape(vectors.shape)


def random_vectors(prepared, n_states, rng, *, radical=None, basis: str = "lab"):
    """Nuclear random vectors ``xi (n, R)`` per block: independent entries of unit modulus and
    uniformly random phase in the sampling basis (``E[xi xi^+] = 1`` in every basis, since the
    basis change is unitary).

    Parameters
    ----------
    prepared : list of PreparedBlock
        The radical's blocks.
    n_states : int
        Random vectors ``R`` per block.
    rng : numpy.random.Generator
        Source of the phases.
    radical : retina.spin.system.Radical, optional
        The radical (needed for ``basis="nucleus-axis"``).
    basis : {"lab", "nucleus-axis"}
        The basis of the phases (:data:`BASES`): the product basis of ``I_z`` eigenstates, or each
        nucleus quantised along its own dominant hyperfine axis.  The phases drawn from ``rng`` are
        the same for both, so the two bases can be compared on the same draws.

    Returns
    -------
    list of ndarray (n, R) complex
    """
    out = []
    for pb in prepared:
        z = np.exp(2j * np.pi * rng.random((pb.nuclear_dimension, n_states)))
        if basis != "lab":
            z = rotate_factors(z, basis_rotations(radical, pb, basis))
        out.append(z)
    return out
