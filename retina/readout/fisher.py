"""Fisher information on heading (and inclination) from Poisson receptor counts; Cramer-Rao bounds.

Conventions (owned here)
------------------------
- Counts ``n_i`` are independent Poisson with means ``lam_i(theta)`` (``retina.signal.noise``).
  The Fisher information matrix is ``I_ab = sum_i (d lam_i / d theta_a)(d lam_i / d theta_b) / lam_i``
  (Poisson; e.g. Kay, *Fundamentals of Statistical Signal Processing: Estimation Theory*, 1993,
  ch. 3); receptors with ``lam_i = 0`` contribute nothing.  Angles are differentiated per radian,
  so information is in rad^-2; the Cramer-Rao bound on the standard deviation of an unbiased
  heading estimate is ``1 / sqrt(I)`` rad, reported in degrees.
- Nuisance parameters are handled by the Schur complement ``I_eff = I_psi - I_psi,nu I_nu,nu^-1
  I_nu,psi``.  For an unknown overall light gain ``g`` (``lam_i = g mu_i``, ``d lam_i / d g = mu_i``)
  this is ``I_eff = sum dlam^2 / lam - (sum dlam)^2 / sum lam`` (independent of ``g``).
  ``nuisance="gain"`` applies it per row (per pose); :mod:`retina.readout.scans` adds per-pose and
  per-receptor gains over head scans.
- With a fixed gain the information is proportional to the light level (``lam`` and ``dlam`` both
  scale with it), so curves over photon levels are computed once per photon and scaled.
- Where the bound is informative: the Cramer-Rao bound is a local (Gaussian) approximation around
  the true heading.  On a circle it stops describing any estimator once it reaches a sizeable
  fraction of the circle: the error of a real decoder then saturates at the rms error of a uniformly
  random guess, ``180 / sqrt(3) = 103.9`` deg (:data:`UNIFORM_RMS_DEG`).  Bounds above
  :data:`INFORMATIVE_BOUND_DEG` (60 deg; a reporting choice, common practice, no source: the
  decoding error of the demo departs from the bound between about 40 and 60 deg) are reported as
  "not informative"; the numbers themselves are kept in the results file.
- Derivatives come analytically from the harmonic gradients through
  ``SignalModel.expected_and_derivative`` (chain rule with ``d b_head / d yaw``), never from finite
  differences.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from retina.errors import InputError

__all__ = [
    "poisson_information",
    "poisson_fisher_matrix",
    "gain_schur",
    "schur_complement",
    "cramer_rao_deg",
    "InformationCurve",
    "heading_information",
    "inclination_information",
    "joint_information",
    "bound_vs_photons",
    "bound_vs_inclination",
    "bound_vs_parameter",
    "mean_bound_deg",
    "interpolated_information",
    "information_vs_cone_disorder",
    "bound_vs_cone_disorder",
    "bound_vs_anisotropy",
    "UNIFORM_RMS_DEG",
    "INFORMATIVE_BOUND_DEG",
    "bound_is_informative",
]

NUISANCES = ("none", "gain")

#: rms error of a uniformly random heading, ``180 / sqrt(3)`` degrees (no information at all).
UNIFORM_RMS_DEG = 180.0 / np.sqrt(3.0)
#: Bounds above this many degrees are not informative on a circle (module docstring).
INFORMATIVE_BOUND_DEG = 60.0


def bound_is_informative(bound_deg) -> np.ndarray:
    """Where a Cramer-Rao bound is finite and at most :data:`INFORMATIVE_BOUND_DEG` (module docstring).

    Parameters
    ----------
    bound_deg : array_like, any shape
        Bounds in degrees.

    Returns
    -------
    ndarray of bool
        Same shape as ``bound_deg``.
    """
    b = np.asarray(bound_deg, dtype=float)
    return np.isfinite(b) & (b <= INFORMATIVE_BOUND_DEG)


def _safe_ratio(num: np.ndarray, lam: np.ndarray) -> np.ndarray:
    out = np.zeros(np.broadcast(num, lam).shape)
    np.divide(num, lam, out=out, where=lam > 0)
    return out


def poisson_information(lam, dlam) -> np.ndarray:
    """Fisher information ``sum_i dlam_i^2 / lam_i`` over the last axis.

    Parameters
    ----------
    lam, dlam : array_like, shape (..., N)
        Expected counts and their derivative with respect to one parameter.

    Returns
    -------
    ndarray, shape (...)
    """
    lam = np.asarray(lam, dtype=float)
    dlam = np.asarray(dlam, dtype=float)
    if lam.shape != dlam.shape:
        raise InputError(f"lam {lam.shape} and dlam {dlam.shape} differ in shape", key="dlam")
    lo = lam.min(initial=np.inf)
    if lo < 0:
        raise InputError("expected non-negative expected counts", key="lam")
    if lo > 0:
        return np.einsum("...n,...n->...", dlam, dlam / lam)
    return _safe_ratio(dlam * dlam, lam).sum(axis=-1)


def poisson_fisher_matrix(lam, dlams) -> np.ndarray:
    """Fisher matrix ``I_ab = sum_i dlam_ia dlam_ib / lam_i``.

    Parameters
    ----------
    lam : array_like, shape (..., N)
    dlams : array_like, shape (..., N, M)
        Derivatives with respect to ``M`` parameters.

    Returns
    -------
    ndarray, shape (..., M, M)
    """
    lam = np.asarray(lam, dtype=float)
    d = np.asarray(dlams, dtype=float)
    inv = _safe_ratio(np.ones_like(lam), lam)
    return np.einsum("...na,...n,...nb->...ab", d, inv, d)


def gain_schur(lam, dlam) -> np.ndarray:
    """Heading information with an unknown overall gain: ``sum dlam^2/lam - (sum dlam)^2 / sum lam``.

    Parameters
    ----------
    lam, dlam : array_like, shape (..., N)
        Expected counts and their derivative with respect to heading (per radian).

    Returns
    -------
    ndarray, shape (...)
        rad^-2, clipped at 0; rows with ``sum lam = 0`` give 0.
    """
    lam = np.asarray(lam, dtype=float)
    dlam = np.asarray(dlam, dtype=float)
    full = poisson_information(lam, dlam)
    tot = lam.sum(axis=-1)
    corr = _safe_ratio(dlam.sum(axis=-1) ** 2, tot)
    return np.maximum(full - corr, 0.0)


def schur_complement(matrix, interest: int = 0) -> np.ndarray:
    """Effective information on one parameter of Fisher matrices, the others unknown.

    ``I_aa - I_a,rest I_rest,rest^+ I_rest,a`` (pseudo-inverse, so singular nuisance blocks are
    allowed).

    Parameters
    ----------
    matrix : array_like, shape (..., M, M)
        Symmetric Fisher matrices.
    interest : int
        Index of the parameter of interest.

    Returns
    -------
    ndarray, shape (...)
        Effective information, clipped at 0 (units of the parameter^-2).
    """
    F = np.asarray(matrix, dtype=float)
    M = F.shape[-1]
    rest = [k for k in range(M) if k != interest]
    if not rest:
        return F[..., interest, interest]
    a = F[..., interest, interest]
    b = F[..., interest, :][..., rest]
    C = F[..., rest, :][..., :, rest]
    x = np.einsum("...i,...ij,...j->...", b, np.linalg.pinv(C), b)
    return np.maximum(a - x, 0.0)


def cramer_rao_deg(information) -> np.ndarray:
    """Cramer-Rao bound on the standard deviation, in degrees.

    Parameters
    ----------
    information : array_like, any shape
        Fisher information, rad^-2.

    Returns
    -------
    ndarray
        Same shape: ``1 / sqrt(I)`` converted to degrees; inf where ``I <= 0``.
    """
    I = np.asarray(information, dtype=float)
    out = np.full(I.shape, np.inf)
    np.divide(1.0, np.sqrt(np.maximum(I, 0.0)), out=out, where=I > 0)
    return np.rad2deg(out)


@dataclass(frozen=True)
class InformationCurve:
    """Information and bound over headings.

    Attributes
    ----------
    headings_deg : ndarray, shape (P,)
    information : ndarray, shape (P,)
        Fisher information (rad^-2) at the signal model's light level.
    per_photon : ndarray, shape (P,)
        ``information / photons`` (valid because information is linear in the level).
    bound_deg : ndarray, shape (P,)
        Cramer-Rao bound, degrees.
    photons : float
    nuisance : str
    parameter : str
        "heading" or "inclination".
    """

    headings_deg: np.ndarray
    information: np.ndarray
    per_photon: np.ndarray
    bound_deg: np.ndarray
    photons: float
    nuisance: str
    parameter: str = "heading"

    def at_photons(self, photons) -> np.ndarray:
        """The bound at other light levels (the information is linear in the level).

        Parameters
        ----------
        photons : float or array_like (F,)
            Photons per receptor at each light level.

        Returns
        -------
        ndarray, shape (F, P)
            Cramer-Rao bound, degrees, per light level and heading (inf where there is no information).
        """
        ph = np.atleast_1d(np.asarray(photons, dtype=float))
        return cramer_rao_deg(ph[:, None] * self.per_photon[None, :])


def _check_nuisance(nuisance: str) -> str:
    if nuisance not in NUISANCES:
        raise InputError(f"expected nuisance one of {NUISANCES}, got {nuisance!r}", key="nuisance")
    return nuisance


def _info(lam, dlam, nuisance):
    return gain_schur(lam, dlam) if nuisance == "gain" else poisson_information(lam, dlam)


def _headings(headings_deg):
    if headings_deg is None:
        return np.arange(360, dtype=float)
    h = np.atleast_1d(np.asarray(headings_deg, dtype=float))
    if h.ndim != 1 or not np.all(np.isfinite(h)):
        raise InputError("expected a 1-D array of finite headings in degrees", key="headings_deg")
    return h


def heading_information(signal, headings_deg=None, *, nuisance: str = "none",
                        degree: int | None = None) -> InformationCurve:
    """Fisher information on heading over a set of headings.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        Expected counts of every receptor at a light level.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    degree : int, optional
        If given, use the exact trigonometric interpolation of
        ``SignalModel.expected_and_derivative_fourier`` (the model evaluated at ``2 degree + 1``
        headings only); otherwise every heading is evaluated directly.

    Returns
    -------
    InformationCurve
        Information (rad^-2), information per photon and bound (degrees) at each heading.
    """
    h = _headings(headings_deg)
    _check_nuisance(nuisance)
    if degree is None:
        lam, dlam = signal.expected_and_derivative(h, wrt="heading")
        I = _info(lam, dlam, nuisance)
    else:
        from retina.signal.noise import trig_interp_matrix

        nodes, lam_n, dlam_n = signal.fourier_nodes(degree)
        W = trig_interp_matrix(np.deg2rad(nodes), np.deg2rad(h), int(degree))
        I = interpolated_information(W, lam_n, dlam_n, nuisance)
    return InformationCurve(h, I, I / signal.photons, cramer_rao_deg(I), float(signal.photons),
                            nuisance, "heading")


def interpolated_information(W, lam_n, dlam_n, nuisance: str = "none") -> np.ndarray:
    """Information at ``P`` headings from node values: ``lam = W @ lam_n``, ``dlam = W @ dlam_n``.

    Parameters
    ----------
    W : ndarray, shape (P, M)
        Interpolation weights (``retina.signal.noise.trig_interp_matrix``).
    lam_n, dlam_n : ndarray, shape (M, N)
        Expected counts and heading derivatives at the nodes.
    nuisance : {"none", "gain"}

    Returns
    -------
    ndarray, shape (P,)
        As :func:`poisson_information` / :func:`gain_schur` of the interpolated arrays, computed
        without storing them (a compiled loop over headings, parallel over headings).
    """
    _check_nuisance(nuisance)
    W = np.ascontiguousarray(W, dtype=float)
    ln = np.ascontiguousarray(lam_n, dtype=float)
    dn = np.ascontiguousarray(dlam_n, dtype=float)
    if W.ndim != 2 or ln.shape != dn.shape or W.shape[1] != ln.shape[0]:
        raise InputError(f"expected W (P, M) and node arrays (M, N), got {W.shape}, {ln.shape}, "
                         f"{dn.shape}", key="nodes")
    full, sd, sl = _interp_info_kernel(W, ln, dn)
    if nuisance == "none":
        return full
    corr = np.zeros_like(full)
    np.divide(sd * sd, sl, out=corr, where=sl > 0)
    return np.maximum(full - corr, 0.0)


def _interp_info_kernel(W, ln, dn):
    global _KERNEL
    if _KERNEL is None:
        _KERNEL = _compile_kernel()
    return _KERNEL(W, ln, dn)


_KERNEL = None


def _compile_kernel():
    import numba

    @numba.njit(parallel=True, cache=True, fastmath=False)
    def kernel(W, ln, dn):
        P, M = W.shape
        N = ln.shape[1]
        full = np.zeros(P)
        sd = np.zeros(P)
        sl = np.zeros(P)
        for p in numba.prange(P):
            acc = 0.0
            a_d = 0.0
            a_l = 0.0
            for i in range(N):
                lam = 0.0
                dl = 0.0
                for m in range(M):
                    w = W[p, m]
                    lam += w * ln[m, i]
                    dl += w * dn[m, i]
                if lam > 0.0:
                    acc += dl * dl / lam
                a_d += dl
                a_l += lam
            full[p] = acc
            sd[p] = a_d
            sl[p] = a_l
        return full, sd, sl

    return kernel


def inclination_information(signal, headings_deg=None, *, nuisance: str = "none") -> InformationCurve:
    """Fisher information on the inclination at each heading, the heading known.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        Expected counts of every receptor at a light level.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).

    Returns
    -------
    InformationCurve
        ``parameter = "inclination"``; information in rad^-2, bound in degrees of inclination.
    """
    h = _headings(headings_deg)
    _check_nuisance(nuisance)
    lam, dlam = signal.expected_and_derivative(h, wrt="inclination")
    I = _info(lam, dlam, nuisance)
    return InformationCurve(h, I, I / signal.photons, cramer_rao_deg(I), float(signal.photons),
                            nuisance, "inclination")


def joint_information(signal, headings_deg=None, *, gain_unknown: bool = False) -> np.ndarray:
    """Fisher matrices over (heading, inclination[, gain]) at each heading.

    Use :func:`schur_complement` (``interest=0``) for the heading information when the
    inclination (and gain) are unknown too.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        Expected counts of every receptor at a light level.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    gain_unknown : bool
        Add the overall gain as a third parameter (its derivative is the expected count itself).

    Returns
    -------
    ndarray, shape (P, M, M)
        ``M = 2`` or 3; angles in radians, so the entries are in rad^-2 (rad^-1 for the gain terms).
    """
    h = _headings(headings_deg)
    lam, dpsi = signal.expected_and_derivative(h, wrt="heading")
    _, dinc = signal.expected_and_derivative(h, wrt="inclination")
    cols = [dpsi, dinc] + ([lam] if gain_unknown else [])
    return poisson_fisher_matrix(lam, np.stack(cols, axis=-1))


def bound_vs_photons(signal, photons, headings_deg=None, *, nuisance: str = "none",
                     degree: int | None = None) -> np.ndarray:
    """Cramer-Rao bound against light level and heading.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        The model at any light level (information is linear in the level).
    photons : array_like, shape (F,)
        Light levels (photons per receptor).
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    degree : int, optional
        As in :func:`heading_information`.

    Returns
    -------
    ndarray, shape (F, P)
        Degrees.
    """
    return heading_information(signal, headings_deg, nuisance=nuisance, degree=degree).at_photons(photons)


def bound_vs_inclination(signal, inclinations_deg, headings_deg=None, *, nuisance: str = "none",
                         degree: int | None = None) -> np.ndarray:
    """Cramer-Rao bound on heading against field inclination and heading.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        The model; its ``inclination_deg`` is replaced by each value in turn.
    inclinations_deg : array_like, shape (Q,)
        Inclinations, degrees.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    degree : int, optional
        As in :func:`heading_information`.

    Returns
    -------
    ndarray, shape (Q, P)
        Degrees.
    """
    out = []
    for inc in np.atleast_1d(np.asarray(inclinations_deg, dtype=float)):
        s = dataclasses.replace(signal, inclination_deg=float(inc))
        out.append(heading_information(s, headings_deg, nuisance=nuisance, degree=degree).bound_deg)
    return np.array(out)


def bound_vs_parameter(make_signal: Callable[[float], object], values: Sequence[float],
                       headings_deg=None, *, nuisance: str = "none", degree: int | None = None,
                       progress=None) -> np.ndarray:
    """Cramer-Rao bound on heading over any model parameter.

    Parameters
    ----------
    make_signal : callable(value) -> SignalModel
        Builds the model for each value (a disorder concentration, a lifetime, an anisotropy
        scale, ...).
    values : sequence of float, length V
        The parameter values.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    degree : int, optional
        As in :func:`heading_information`.
    progress : callable(done, total), optional
        Called after each value.

    Returns
    -------
    ndarray, shape (V, P)
        Degrees.
    """
    vals = list(values)
    out = []
    for k, v in enumerate(vals):
        out.append(heading_information(make_signal(v), headings_deg, nuisance=nuisance,
                                       degree=degree).bound_deg)
        if progress is not None:
            progress(k + 1, len(vals))
    return np.array(out)


def information_vs_cone_disorder(make_signal: Callable[[np.ndarray], object], response, kappas,
                                 headings_deg=None, *, nuisance: str = "none",
                                 progress=None) -> np.ndarray:
    """Information per photon (rad^-2) over cone-disorder levels and headings.

    Uses the Funk-Hecke form of von Mises-Fisher cone disorder: the disordered response is
    ``sum_l lambda_l(kappa) r_l`` with ``r_l`` the degree-``l`` block of ``response`` and
    ``lambda_l`` from ``retina.sphere.vmf_moments``.  Expected counts are linear in the response,
    so the model is evaluated once per degree block (at the ``2 L + 1`` Fourier nodes) and every
    disorder level is a weighted sum of those, interpolated to all headings.  Exact when the
    disorder acts as a Funk-Hecke convolution of the receptor response, e.g. an axially symmetric
    response (free rotation about the receptor axis) with vMF disorder of that axis
    (``retina.eye.ordering.Cone.ensemble_axial``).

    Parameters
    ----------
    make_signal : callable
        ``make_signal(coeffs (K,)) -> SignalModel`` built on ``RetinaModel(coeffs, receptors,
        None)`` (the response in the receptor frame) with a fixed light level.
    response : array_like, shape (K,)
        Undisordered receptor response (even degrees, ``retina.sphere`` layout).
    kappas : array_like, shape (V,)
        Cone concentrations (``inf``: no disorder, 0: isotropic).
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    progress : callable(done, total), optional
        Called after each concentration.

    Returns
    -------
    ndarray, shape (V, P)
        Information per photon per receptor, rad^-2.
    """
    from retina import sphere
    from retina.signal.noise import trig_interp_matrix

    _check_nuisance(nuisance)
    r = np.asarray(response, dtype=float)
    L = sphere.degree_from_n(r.shape[0])
    l_of, _ = sphere.lm_index(L)
    h = _headings(headings_deg)
    blocks = []
    photons = None
    for l in range(0, L + 1, 2):
        part = np.where(l_of == l, r, 0.0)
        sig = make_signal(part)
        photons = float(sig.photons)
        nodes, ln, dn = sig.fourier_nodes(L)
        blocks.append((l, ln, dn))
    W = trig_interp_matrix(np.deg2rad(nodes), np.deg2rad(h), L)
    ks = np.atleast_1d(np.asarray(kappas, dtype=float))
    out = np.empty((ks.size, h.size))
    for k, kappa in enumerate(ks):
        mom = sphere.vmf_moments(float(kappa), L)
        ln = sum(mom[l] * b_ln for l, b_ln, _ in blocks)
        dn = sum(mom[l] * b_dn for l, _, b_dn in blocks)
        out[k] = interpolated_information(W, ln, dn, nuisance) / photons
        if progress is not None:
            progress(k + 1, ks.size)
    return out


def bound_vs_cone_disorder(make_signal, response, kappas, photons, headings_deg=None, *,
                           nuisance: str = "none", progress=None) -> np.ndarray:
    """Cramer-Rao bound over cone concentrations, light levels and headings.

    Parameters
    ----------
    make_signal, response, kappas
        As in :func:`information_vs_cone_disorder`.
    photons : array_like, shape (F,)
        Light levels (photons per receptor).
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    progress : callable(done, total), optional
        Called after each concentration.

    Returns
    -------
    ndarray, shape (V, F, P)
        Degrees.
    """
    per = information_vs_cone_disorder(make_signal, response, kappas, headings_deg,
                                       nuisance=nuisance, progress=progress)
    ph = np.atleast_1d(np.asarray(photons, dtype=float))
    return cramer_rao_deg(ph[None, :, None] * per[:, None, :])


def bound_vs_anisotropy(make_signal, response, scales, headings_deg=None, *, nuisance: str = "none",
                        degree: int | None = None) -> np.ndarray:
    """Cramer-Rao bound when the anisotropic part of a receptor response is scaled.

    The degrees ``l > 0`` of ``response`` are multiplied by each scale (1 = as given); the mean
    (``l = 0``) is kept.

    Parameters
    ----------
    make_signal : callable
        ``make_signal(coeffs (K,)) -> SignalModel`` as in :func:`information_vs_cone_disorder`.
    response : array_like, shape (K,)
        Receptor response (even degrees).
    scales : array_like, shape (V,)
        Factors on the anisotropic part.
    headings_deg : array_like, shape (P,), optional
        Headings, degrees; default 0, 1, ..., 359.
    nuisance : {"none", "gain"}
        "gain": the overall light level is unknown (Schur complement).
    degree : int, optional
        As in :func:`heading_information`.

    Returns
    -------
    ndarray, shape (V, P)
        Degrees.
    """
    r = np.asarray(response, dtype=float)

    def scaled(s):
        c = r * float(s)
        c[0] = r[0]
        return make_signal(c)

    return bound_vs_parameter(scaled, list(np.atleast_1d(scales)), headings_deg, nuisance=nuisance,
                              degree=degree)


def mean_bound_deg(information) -> np.ndarray:
    """Bound from the heading-averaged information, ``1 / sqrt(mean_P I)`` in degrees.

    Parameters
    ----------
    information : array_like, shape (..., P)
        Information (rad^-2) over headings on the last axis.

    Returns
    -------
    ndarray, shape (...)
        Degrees (inf where the mean information is 0).
    """
    return cramer_rao_deg(np.mean(np.asarray(information, dtype=float), axis=-1))
