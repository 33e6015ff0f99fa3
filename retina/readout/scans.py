"""Head scans: pattern change per degree of head turn and heading information accumulated over a scan.

Conventions (owned here)
------------------------
- A scan is a ``retina.eye.pose.HeadScan`` (absolute yaw, pitch and roll per pose).  The unknown is
  the heading ``psi``: every pose's yaw is ``psi`` plus its known offset, so derivatives are taken
  with respect to a common yaw shift (``SignalModel.expected_and_derivative_at``).
- Photon budget: ``budget`` is the mean number of pairs formed per receptor over the *whole* scan
  (same units as ``SignalModel.photons``), split equally over the ``P`` poses
  (``budget / P`` per pose), so a scan and a static look of the same duration get the same light.
- Nuisances over a scan (``lam_pi = g mu_pi``-type unknown gains; Schur complements of the Poisson
  Fisher matrix, :mod:`retina.readout.fisher`):

  ``"none"``: ``I = sum_pi dlam_pi^2 / lam_pi``;
  ``"global_gain"`` (one unknown light level for the whole scan):
  ``I - (sum_pi dlam_pi)^2 / sum_pi lam_pi``;
  ``"pose_gain"`` (the light level changes unknown from pose to pose):
  ``I - sum_p (sum_i dlam_pi)^2 / sum_i lam_pi``;
  ``"receptor_gain"`` (an unknown head-fixed texture: every receptor has its own unknown
  sensitivity, fixed during the scan): ``I - sum_i (sum_p dlam_pi)^2 / sum_p lam_pi``.
  With one pose the last one is exactly zero (each receptor's count is explained by its own gain);
  only a scan, which moves the field across fixed receptors, recovers heading information.
- Pattern change per degree: the root mean square over receptors of the relative yield change
  ``(d Phi_i / d psi) / Phi_i`` for one degree of head turn (dimensionless, per degree).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from retina.errors import InputError
from retina.readout.fisher import cramer_rao_deg

__all__ = ["SCAN_NUISANCES", "uniform_sweep", "timed_sweep", "scan_information_arrays", "scan_information_grid",
           "scan_information", "pattern_change_per_degree", "ScanOptimum", "best_scan_amplitude"]

SCAN_NUISANCES = ("none", "global_gain", "pose_gain", "receptor_gain")


def uniform_sweep(heading_deg: float, amplitude_deg: float, steps: int, *, pitch_deg: float = 0.0,
                  roll_deg: float = 0.0):
    """Poses with yaw evenly spaced over ``heading +/- amplitude``.

    A sweep sampled at constant angular speed, one visit per yaw; ``amplitude_deg = 0`` is a
    static look.

    Parameters
    ----------
    heading_deg : float
        Centre yaw, degrees.
    amplitude_deg : float
        Half-width of the sweep, degrees in ``[0, 180]``.
    steps : int
        Number of poses, ``>= 1``.
    pitch_deg, roll_deg : float
        Fixed head pitch and roll, degrees.

    Returns
    -------
    retina.eye.pose.HeadScan
        ``steps`` poses.

    Raises
    ------
    InputError
        Keys ``scan.steps`` or ``scan.amplitude_deg``.
    """
    from retina.eye.pose import poses_from_arrays

    if int(steps) != steps or steps < 1:
        raise InputError(f"expected a positive number of scan steps, got {steps!r}", key="scan.steps")
    if not (np.isfinite(amplitude_deg) and 0.0 <= amplitude_deg <= 180.0):
        raise InputError(f"expected an amplitude in [0, 180] degrees, got {amplitude_deg!r}",
                         key="scan.amplitude_deg")
    off = np.linspace(-amplitude_deg, amplitude_deg, int(steps)) if steps > 1 else np.zeros(1)
    return poses_from_arrays(heading_deg + off, pitch_deg, roll_deg)


def timed_sweep(heading_deg: float, amplitude_deg: float, *, count: int = 1, speed_deg_s: float = 90.0,
                rate_hz: float = 100.0, pitch_deg=0.0, roll_deg=0.0):
    """Triangular yaw sweeps sampled in time (``retina.eye.pose.yaw_sweep``).

    Parameters
    ----------
    heading_deg : float
        Centre yaw, degrees.
    amplitude_deg : float
        Half-width of the sweep, degrees.
    count : int
        Number of sweeps.
    speed_deg_s : float
        Angular speed of the head, degrees per second.
    rate_hz : float
        Sampling rate, Hz.
    pitch_deg, roll_deg : float
        Fixed head pitch and roll, degrees.

    Returns
    -------
    retina.eye.pose.HeadScan
        One pose per sample.
    """
    from retina.eye.pose import yaw_sweep

    return yaw_sweep(heading_deg, amplitude_deg, count=count, speed_deg_s=speed_deg_s,
                     rate_hz=rate_hz, pitch_deg=pitch_deg, roll_deg=roll_deg)


def _check(nuisance: str) -> str:
    if nuisance not in SCAN_NUISANCES:
        raise InputError(f"expected nuisance one of {SCAN_NUISANCES}, got {nuisance!r}",
                         key="scan.nuisance")
    return nuisance


def _ratio(num, den):
    out = np.zeros(np.broadcast(num, den).shape)
    np.divide(num, den, out=out, where=den > 0)
    return out


def scan_information_arrays(lam, dlam, nuisance: str = "none") -> float:
    """Heading information of a scan from its expected counts and their derivatives.

    Parameters
    ----------
    lam, dlam : array_like, shape (P, N)
        Expected counts of ``N`` receptors at ``P`` poses and their derivative with respect to
        heading (per radian).
    nuisance : {"none", "global_gain", "pose_gain", "receptor_gain"}
        Unknown gains profiled out (:data:`SCAN_NUISANCES`, module docstring).

    Returns
    -------
    float
        rad^-2 (clipped at 0).

    Raises
    ------
    InputError
        Key ``scan``, when the shapes differ or are not two-dimensional.
    """
    _check(nuisance)
    lam = np.asarray(lam, dtype=float)
    dlam = np.asarray(dlam, dtype=float)
    if lam.ndim != 2 or lam.shape != dlam.shape:
        raise InputError(f"expected lam and dlam of the same shape (P, N), got {lam.shape}, {dlam.shape}",
                         key="scan")
    full = float(_ratio(dlam * dlam, lam).sum())
    if nuisance == "none":
        return full
    if nuisance == "global_gain":
        corr = float(_ratio(dlam.sum() ** 2, lam.sum()))
    elif nuisance == "pose_gain":
        corr = float(_ratio(dlam.sum(axis=1) ** 2, lam.sum(axis=1)).sum())
    else:
        corr = float(_ratio(dlam.sum(axis=0) ** 2, lam.sum(axis=0)).sum())
    # The Schur complement is >= 0; rounding can leave a tiny negative remainder at exactly zero.
    return max(full - corr, 0.0)


def scan_information_grid(lam, dlam, shifts, nuisance: str = "none") -> np.ndarray:
    """:func:`scan_information_arrays` for a scan started at every heading of a circular grid.

    The scan started at grid heading ``r`` visits rows ``(r + shifts[p]) mod G`` of ``lam`` and
    ``dlam``, with the budget split over its ``P`` poses (each row divided by ``P``).  Every term
    of the information is a sum over poses of a per-row quantity (a row sum, or a receptor's
    value), so it is formed once per row and summed along the shifted rows: the same sums as
    calling :func:`scan_information_arrays` once per heading, in another order (equal up to
    rounding; one pose with ``"receptor_gain"`` still gives exactly zero).

    Parameters
    ----------
    lam, dlam : array_like, shape (G, N)
        Expected counts and heading derivatives (per radian) at one photon per receptor, at the
        ``G`` grid headings.
    shifts : array_like of int, shape (P,)
        The scan's pose offsets in grid steps.
    nuisance : {"none", "global_gain", "pose_gain", "receptor_gain"}
        As in :func:`scan_information_arrays`.

    Returns
    -------
    ndarray, shape (G,)
        rad^-2 per unit budget, clipped at 0.
    """
    _check(nuisance)
    lam = np.asarray(lam, dtype=float)
    dlam = np.asarray(dlam, dtype=float)
    if lam.ndim != 2 or lam.shape != dlam.shape:
        raise InputError(f"expected lam and dlam of the same shape (G, N), got {lam.shape}, {dlam.shape}",
                         key="scan")
    sh = np.asarray(shifts, dtype=int).reshape(-1)
    G, P = lam.shape[0], sh.size
    lp, dp = lam / P, dlam / P
    rows = (np.arange(G)[:, None] + sh[None, :]) % G                     # (G, P)

    def along(per_row):                                                # (G, ...) -> sums over the scan
        return per_row[rows].sum(axis=1)

    full = along(_ratio(dp * dp, lp).sum(axis=1))
    if nuisance == "none":
        return np.maximum(full, 0.0)
    if nuisance == "global_gain":
        corr = _ratio(along(dp.sum(axis=1)) ** 2, along(lp.sum(axis=1)))
    elif nuisance == "pose_gain":
        corr = along(_ratio(dp.sum(axis=1) ** 2, lp.sum(axis=1)))
    else:
        sd, sl = np.roll(dp, -sh[0], axis=0), np.roll(lp, -sh[0], axis=0)
        for k in sh[1:]:
            sd += np.roll(dp, -k, axis=0)
            sl += np.roll(lp, -k, axis=0)
        corr = _ratio(sd * sd, sl).sum(axis=1)
    return np.maximum(full - corr, 0.0)


def scan_information(signal, scan, budget: float, *, nuisance: str = "none") -> float:
    """Heading information accumulated over a scan with a photon budget split over poses.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        Its ``photons`` is ignored (``budget`` replaces it); its pitch and roll are replaced by
        the scan's.
    scan : retina.eye.pose.HeadScan
        The poses.
    budget : float
        Mean pairs formed per receptor over the whole scan (``> 0``).
    nuisance : {"none", "global_gain", "pose_gain", "receptor_gain"}
        Unknown gains profiled out (:data:`SCAN_NUISANCES`, module docstring).

    Returns
    -------
    float
        rad^-2.

    Raises
    ------
    InputError
        Key ``scan.budget``, for a budget that is not positive.
    """
    if not (np.isfinite(budget) and budget > 0):
        raise InputError(f"expected a positive photon budget, got {budget!r}", key="scan.budget")
    P = len(scan)
    s = dataclasses.replace(signal, photons=float(budget) / P)
    lam, dlam = s.expected_and_derivative_at(scan.rotations, wrt="heading")
    return scan_information_arrays(lam, dlam, nuisance)


def pattern_change_per_degree(signal, headings_deg) -> np.ndarray:
    """RMS relative yield change per degree of head turn at each heading.

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        The model.
    headings_deg : array_like, shape (P,)
        Headings, degrees.

    Returns
    -------
    ndarray, shape (P,)
        ``sqrt(mean_i (dlam_i / lam_i)^2)`` per degree (dimensionless per degree).
    """
    lam, dlam = signal.expected_and_derivative(headings_deg, wrt="heading")
    rel = _ratio(dlam, lam)
    return np.sqrt(np.mean(rel * rel, axis=1)) * np.pi / 180.0


@dataclass(frozen=True)
class ScanOptimum:
    """Information over scan amplitudes.

    Attributes
    ----------
    amplitudes_deg : ndarray, shape (A,)
    information : ndarray, shape (A,) or (A, H)
        Heading information (rad^-2); per heading when several are given.
    bound_deg : ndarray
        Cramer-Rao bound from the (heading-averaged) information, shape (A,).
    best_amplitude_deg : float
        Smallest amplitude with the largest (heading-averaged) information (within 1e-9).
    nuisance : str
    budget : float
    steps : int
    """

    amplitudes_deg: np.ndarray
    information: np.ndarray
    bound_deg: np.ndarray
    best_amplitude_deg: float
    nuisance: str
    budget: float
    steps: int


def best_scan_amplitude(signal, headings_deg, amplitudes_deg, budget: float, *, steps: int = 9,
                        nuisance: str = "none", progress=None) -> ScanOptimum:
    """Scan amplitude that maximises the heading information for a photon budget.

    The information is averaged over ``headings_deg`` (one or several headings: a bird does not
    know its heading before it scans).

    Parameters
    ----------
    signal : retina.signal.noise.SignalModel
        The model (its pitch and roll are kept).
    headings_deg : float or array_like, shape (H,)
        Centre headings, degrees.
    amplitudes_deg : array_like, shape (A,)
        Candidate amplitudes, degrees (0: a static look).
    budget : float
        Photon budget per receptor for the whole scan.
    steps : int
        Poses per scan (one for amplitude 0).
    nuisance : {"none", "global_gain", "pose_gain", "receptor_gain"}
        Unknown gains profiled out (:data:`SCAN_NUISANCES`, module docstring).
    progress : callable(done, total), optional
        Called after each amplitude.

    Returns
    -------
    ScanOptimum
        Information per amplitude (and heading), bounds and the best amplitude.
    """
    _check(nuisance)
    amps = np.atleast_1d(np.asarray(amplitudes_deg, dtype=float))
    heads = np.atleast_1d(np.asarray(headings_deg, dtype=float))
    info = np.empty((amps.size, heads.size))
    for a, amp in enumerate(amps):
        for k, h in enumerate(heads):
            scan = uniform_sweep(h, amp, steps if amp > 0 else 1, pitch_deg=signal.pitch_deg,
                                 roll_deg=signal.roll_deg)
            info[a, k] = scan_information(signal, scan, budget, nuisance=nuisance)
        if progress is not None:
            progress(a + 1, amps.size)
    mean = info.mean(axis=1)
    # The smallest amplitude within rounding of the maximum (flat curves do not pick noise).
    best = float(amps[int(np.flatnonzero(mean >= mean.max() * (1.0 - 1e-9))[0])])
    return ScanOptimum(amps, info if heads.size > 1 else info[:, 0], cramer_rao_deg(mean), best,
                       nuisance, float(budget), int(steps))
