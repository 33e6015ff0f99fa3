"""Spin operators, pair-space embedding, Hamiltonians, projectors and Liouville superoperators.

Conventions (owned here)
------------------------
- Single-spin basis: eigenstates of ``S_z`` ordered ``m = s, s-1, ..., -s``; ``S_+`` has the
  elements ``sqrt(s(s+1) - m(m+1))`` above the diagonal; ``S_y`` is imaginary.
"""

from __future__ import annotations

import numpy as np

from retina.errors import InputError

__all__ = ["spin_matrices"]


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
    # <m+1| S_+ |m> = sqrt(s(s+1) - m(m+1)); row index of m+1 is one less than that of m.
    plus = np.zeros((n, n), dtype=complex)
    plus[np.arange(n - 1), np.arange(1, n)] = np.sqrt(s * (s + 1) - m[1:] * (m[1:] + 1))
    minus = plus.conj().T
    sx = (plus + minus) / 2.0
    sy = (plus - minus) / 2.0j
    sz = np.diag(m).astype(complex)
    return sx, sy, sz
