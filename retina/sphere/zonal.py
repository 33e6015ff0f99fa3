"""Axially symmetric operations: Funk-Hecke convolution, von Mises-Fisher moments, zonal parts.

A kernel that depends only on the angle to an axis acts on each degree-``l`` block of a
coefficient vector as one number, its Legendre moment (the Funk-Hecke theorem); the moments of
the von Mises-Fisher cone are computed here for every concentration.
"""

from __future__ import annotations

import math

import numpy as np

from retina.sphere.harmonics import degree_from_n, lm_index

__all__ = ["funk_hecke", "VMF_CLOSED_FORM_FROM", "vmf_moments", "axial_average", "zonal_to_legendre"]


def funk_hecke(coeffs, moments) -> np.ndarray:
    """Convolve with an axially symmetric kernel: multiply each degree-l block by ``moments[l]``.

    For a kernel density ``k(t)`` normalised to one over the sphere,
    ``moments[l] = 2 pi int_{-1}^{1} k(t) P_l(t) dt`` (Funk-Hecke).

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients of degree ``L``.
    moments : array_like, shape (..., >= L + 1)
        Kernel moments indexed by degree (broadcast against the leading axes of ``coeffs``).

    Returns
    -------
    ndarray, shape (..., K)
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    lam = np.asarray(moments, dtype=float)
    if lam.shape[-1] < L + 1:
        raise ValueError(f"need kernel moments up to degree {L}, got {lam.shape[-1] - 1}")
    l, _ = lm_index(L)
    return c * lam[..., l]


#: Above this concentration the vMF moments use their closed form in ``1 / kappa`` (scipy's scaled
#: Bessel functions return NaN beyond about 1e10); below it, the Bessel ratio.
VMF_CLOSED_FORM_FROM = 1e8


def vmf_moments(kappa: float, L: int) -> np.ndarray:
    """Legendre moments of the von Mises-Fisher density on the sphere.

    ``lambda_l = I_{l+1/2}(kappa) / I_{1/2}(kappa)`` is the mean of ``P_l(t)`` under the density
    ``C(kappa) exp(kappa t)`` (``t`` the cosine to the mean axis); ``lambda_1 = coth(kappa) -
    1 / kappa`` is the mean cosine.  Stable for every ``kappa`` from 0 to inf:

    - ``kappa = 0``: uniform (only ``lambda_0 = 1``); ``kappa < 1e-3``: the series
      ``kappa^l / (2l + 1)!!`` (from ``I_nu(x) ~ (x/2)^nu / Gamma(nu + 1)``);
    - up to :data:`VMF_CLOSED_FORM_FROM`: the ratio of scaled Bessel functions (``scipy.special.ive``);
    - above it: the half-integer Bessel functions in closed form (the spherical Bessel functions),
      ``I_{l+1/2}(k) sqrt(pi k / 2) = [e^k sum_j (-1)^j a_j - (-1)^l e^-k sum_j a_j] / 2`` with
      ``a_j = (l + j)! / (j! (l - j)! (2k)^j)``, ``j = 0..l``, and ``I_{1/2}(k) sqrt(pi k / 2) =
      sinh k``, so ``lambda_l = sum_j (-1)^j a_j`` up to terms of order ``e^-2k`` (nil there:
      below ``10^-86,000,000``): ``1 - 1/k`` for l = 1, ``1 - 3/k + 3/k^2`` for l = 2;
    - ``kappa = inf``: a delta (all ones).

    Parameters
    ----------
    kappa : float
        Concentration, ``>= 0`` (``inf`` allowed).
    L : int
        Largest degree.

    Returns
    -------
    ndarray, shape (L + 1,)
        ``lambda_0 .. lambda_L`` (``lambda_0 = 1``), each in ``[0, 1]``.

    Raises
    ------
    ValueError
        For a negative or NaN ``kappa``.
    """
    from scipy.special import ive

    if kappa < 0 or np.isnan(kappa):
        raise ValueError(f"kappa must be >= 0, got {kappa}")
    l = np.arange(L + 1)
    if np.isinf(kappa):
        return np.ones(L + 1)
    if kappa == 0:
        out = np.zeros(L + 1)
        out[0] = 1.0
        return out
    if kappa < 1e-3:
        # series: lambda_l ~ kappa^l / (2l+1)!!  (from I_nu(x) ~ (x/2)^nu / Gamma(nu+1))
        from scipy.special import factorial2

        return kappa ** l / factorial2(2 * l + 1)
    if kappa > VMF_CLOSED_FORM_FROM:
        out = np.empty(L + 1)
        for ll in range(L + 1):
            term, total = 1.0, 1.0
            for j in range(ll):  # a_{j+1} / a_j = -(l + j + 1)(l - j) / ((j + 1) 2k), signs included
                term *= -(ll + j + 1) * (ll - j) / ((j + 1) * 2.0 * kappa)
                total += term
            out[ll] = total
        return out
    return ive(l + 0.5, kappa) / ive(0.5, kappa)


def axial_average(coeffs) -> np.ndarray:
    """Average over rotations about the z axis: keep the m = 0 terms.

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients.

    Returns
    -------
    ndarray, shape (..., K)
        A copy with every ``m != 0`` coefficient set to 0.
    """
    c = np.array(coeffs, dtype=float, copy=True)
    L = degree_from_n(c.shape[-1])
    _, m = lm_index(L)
    c[..., m != 0] = 0.0
    return c


def zonal_to_legendre(coeffs) -> np.ndarray:
    """For an axially symmetric function ``f(b) = g(b_z)``, the Legendre series of ``g``.

    Parameters
    ----------
    coeffs : array_like, shape (..., K)
        Even-degree coefficients; the ``m != 0`` terms are ignored.

    Returns
    -------
    ndarray, shape (..., L + 1)
        ``a`` with ``g(t) = sum_l a_l P_l(t)`` (odd entries zero).
    """
    c = np.asarray(coeffs, dtype=float)
    L = degree_from_n(c.shape[-1])
    a = np.zeros(c.shape[:-1] + (L + 1,))
    for l in range(0, L + 1, 2):
        a[..., l] = c[..., l * (l - 1) // 2 + l] * math.sqrt((2 * l + 1) / (4 * math.pi))
    return a
