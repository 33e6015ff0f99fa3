"""What the stages share: the per-stage generator, the signal model of a pose, the one-degree
decoder grid and its expected counts, decoding errors and the rms bound.

Conventions (owned here)
------------------------
- Randomness: :func:`stage_rng` (defined in :mod:`retina.build`, module docstring "Randomness").
- Headings are yaw angles in degrees clockwise from geographic north (the world x axis,
  :mod:`retina.eye.pose`); the field's declination turns magnetic north away from it.
- Modulation depth of a pattern: ``(max - min) / mean`` of the receptor yields over both eyes
  (dimensionless; reported in %), :func:`depth`.
- A head scan is a sweep of ``scan.steps`` yaw angles, evenly spaced over
  ``heading +/- amplitude`` (offsets rounded to the one-degree decoder grid, :func:`grid_offsets`).
  A light level is a photon budget per receptor for the whole look: a scan splits it equally over
  its poses (:mod:`retina.readout.scans`), so a scan and a single pose get the same light.  With
  ``readout.nuisance = "gain"`` one overall light level, common to all poses of a scan, is unknown
  (Schur complement, "global_gain"; the decoder profiles the same gain out).
- Bounds: :func:`rms_bound` is the Cramer-Rao bound on the rms heading error over uniformly
  distributed true headings, ``sqrt(mean_h 1 / I(h))`` over the 360 grid headings.  The disorder
  and order studies compare models by one number each (:func:`study_probe`): the depth averaged
  over the scenario's poses and the information per photon averaged over the headings
  :data:`STUDY_HEADINGS_DEG`; their bound at each light level is :func:`bounds_over_light`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from retina.build import build_sky, stage_rng
from retina.scenario import Scenario

__all__ = ["Stage", "stage_rng", "signal_model", "depth", "scan_yaws", "per_photon_info", "GRID", "GridModel",
           "grid_offsets", "decode_errors", "rms_bound", "STUDY_HEADINGS_DEG", "study_probe", "study_probe_many", "bounds_over_light"]

@dataclass(frozen=True)
class Stage:
    """One stage of a run, as listed in the registry (:data:`retina.stages.STAGES`).

    Attributes
    ----------
    name : str
        The stage name and the name of its group in the results file.
    compute : callable(built, progress) -> dict
        Computes the stage from a :class:`retina.build.Built`; ``progress(done, total)`` or None.
        Returns the group: arrays, scalars, strings and nested dicts.
    label : str
        Progress-bar description; empty for a stage too quick to show one.
    steps : callable(scenario) -> int
        The progress total for a scenario (0 when unknown).
    """

    name: str
    compute: Callable
    label: str = ""
    steps: Callable = lambda sc: 0


GRID = 360
"""Decoder grid size: one-degree steps, so integer-degree scan offsets are grid shifts."""


def signal_model(sc: Scenario, model, fld, *, pitch: float | None = None, photons: float = 1.0,
                 receptors=None):
    """The :class:`retina.signal.noise.SignalModel` of ``model`` in the scenario's sky and field.

    Parameters
    ----------
    sc : Scenario
    model : RetinaModel
    fld : Field
    pitch : float, optional
        Head pitch in degrees (then roll 0); default the scenario's ``[pose]`` pitch and roll.
    photons : float
        Photon budget per receptor.
    receptors : Receptors, optional
        Overrides ``model.receptors`` (``model`` may then be None: catch and geometry only).

    Returns
    -------
    retina.signal.noise.SignalModel
    """
    from retina.signal.noise import SignalModel

    return SignalModel(model, inclination_deg=fld.I_deg, declination_deg=fld.D_deg, photons=photons,
                       sky=build_sky(sc),
                       pitch_deg=sc["pose"]["pitch_deg"] if pitch is None else pitch,
                       roll_deg=sc["pose"]["roll_deg"] if pitch is None else 0.0, receptors=receptors)


def depth(yields: np.ndarray) -> np.ndarray:
    """Modulation depth ``(max - min) / mean`` over receptors.

    Parameters
    ----------
    yields : ndarray (H, N) or (N,)

    Returns
    -------
    ndarray (H,)
        Dimensionless (H = 1 for one pattern).
    """
    y = np.atleast_2d(yields)
    return (y.max(axis=1) - y.min(axis=1)) / y.mean(axis=1)


def scan_yaws(sc: Scenario, steps: int | None = None) -> np.ndarray:
    """The yaw angles of the scenario's head scan.

    Parameters
    ----------
    sc : Scenario
    steps : int, optional
        Overrides ``scan.steps``.

    Returns
    -------
    ndarray (F,)
        Degrees, evenly spaced over ``heading +/- amplitude``.
    """
    s = sc["scan"]
    n = s["steps"] if steps is None else steps
    return s["heading_deg"] + np.linspace(-s["amplitude_deg"], s["amplitude_deg"], n)


def per_photon_info(signal, degree: int, nuisance: str, headings) -> np.ndarray:
    """Heading Fisher information per photon (:func:`retina.readout.fisher.heading_information`).

    Parameters
    ----------
    signal : SignalModel
    degree : int
        Harmonic degree of the yield function.
    nuisance : str
        ``readout.nuisance`` ("none" or "gain").
    headings : ndarray (H,)
        Degrees.

    Returns
    -------
    ndarray (H,)
        rad^-2 per photon per receptor.
    """
    from retina.readout.fisher import heading_information

    return heading_information(signal, headings, nuisance=nuisance, degree=degree).per_photon


class GridModel:
    """Expected counts per photon on the decoder grid for one signal model, with decoders and
    Poisson draws for a single look or a head scan (photon budget split over the poses,
    :mod:`retina.readout.scans`).

    Parameters
    ----------
    signal : SignalModel
    degree : int
        Harmonic degree ``L`` of the yield function (the model is a trigonometric polynomial of
        degree ``L`` in the heading).
    gain : {"known", "free"}
        Whether the decoder profiles out one overall light level.

    Attributes
    ----------
    grid : ndarray (G,)
        Grid headings in degrees (``G = GRID``).
    lam1, dlam1 : ndarray (G, N)
        Expected counts and their heading derivative (per radian) at one photon per receptor.
    """

    def __init__(self, signal, degree: int, gain: str):
        self.signal = signal
        self.degree = int(degree)
        self.gain = gain
        self.grid = np.arange(GRID) * 360.0 / GRID
        lam, dlam = signal.expected_and_derivative_fourier(self.grid, degree)
        self.lam1 = np.maximum(lam, 0.0)     # (G, N) at photons = 1
        self.dlam1 = dlam
        self._decoder1 = None                # the decoder at photons = 1, scaled for each light level
        self._nodes1 = None                  # the model at its 2 L + 1 Fourier nodes, photons = 1

    def decoder(self, photons: float):
        """The maximum-likelihood decoder on the grid at a light level (the decoder at one photon,
        built once, scaled: :meth:`retina.readout.decode.HeadingDecoder.scaled`).

        Parameters
        ----------
        photons : float
            Photons expected per receptor (the whole budget, for a scan split over its poses).

        Returns
        -------
        retina.readout.decode.HeadingDecoder
            On the ``G`` grid headings, with this model's gain setting.
        """
        from retina.readout.decode import HeadingDecoder

        if not (np.isfinite(photons) and photons > 0):
            return HeadingDecoder(self.grid, photons * self.lam1, photons * self.dlam1, gain=self.gain)
        if self._decoder1 is None:
            self._decoder1 = HeadingDecoder(self.grid, self.lam1, self.dlam1, gain=self.gain)
        return self._decoder1.scaled(photons)

    def truth(self, photons: float):
        """The signal model that draws the counts at a light level.

        Parameters
        ----------
        photons : float
            Photons expected per receptor.

        Returns
        -------
        retina.signal.noise.SignalModel
            A copy of ``signal`` with ``photons`` replaced.
        """
        return self.signal.replace(photons=float(photons))

    def expected(self, headings_deg, photons: float) -> np.ndarray:
        """Expected counts ``(P, N)`` at any headings: exact trigonometric interpolation of the model
        from ``2 L + 1`` headings (``SignalModel.expected_and_derivative_fourier``), far cheaper than
        evaluating every receptor's harmonics at thousands of random headings.  The model at the
        nodes is evaluated once, at one photon per receptor, and scaled (expected counts are
        proportional to the photon budget).

        Parameters
        ----------
        headings_deg : float or array_like (P,)
            Headings, degrees.
        photons : float
            Photons expected per receptor.

        Returns
        -------
        ndarray (P, N)
            Expected counts of the ``N`` receptors, clipped at 0.
        """
        from retina.signal.noise import trig_interp_matrix

        if self._nodes1 is None:                 # expected counts are proportional to the photons
            self._nodes1 = self.truth(1.0).fourier_nodes(self.degree)[:2]   # the derivative is not needed
        nodes, lam_n = self._nodes1
        h = np.deg2rad(np.atleast_1d(np.asarray(headings_deg, float)))
        out = trig_interp_matrix(np.deg2rad(nodes), h, self.degree) @ lam_n
        out *= float(photons)
        return np.maximum(out, 0.0, out=out)

    def scan_information(self, offsets_deg: np.ndarray, nuisance: str) -> np.ndarray:
        """Heading information per unit budget over a scan, at every grid heading.

        Parameters
        ----------
        offsets_deg : ndarray (P,)
            Yaw offsets of the scan's poses from the heading, degrees (rounded to the grid); the
            budget of one photon per receptor is split equally over the ``P`` poses.
        nuisance : {"none", "global_gain", "pose_gain", "receptor_gain"}
            Unknown gains profiled out (:func:`retina.readout.scans.scan_information_grid`).

        Returns
        -------
        ndarray (G,)
            rad^-2 per photon, at each grid heading the scan is centred on.
        """
        from retina.readout.scans import scan_information_grid

        sh = np.round(np.asarray(offsets_deg) * GRID / 360.0).astype(int)
        return scan_information_grid(self.lam1, self.dlam1, sh, nuisance)


def grid_offsets(offsets_deg) -> np.ndarray:
    """Scan offsets rounded to the decoder grid.

    Parameters
    ----------
    offsets_deg : array_like (P,)

    Returns
    -------
    ndarray (P,)
        Degrees, multiples of ``360 / GRID``.
    """
    step = 360.0 / GRID
    return np.round(np.asarray(offsets_deg, float) / step) * step


def decode_errors(m: GridModel, photons: float, n: int, rng, offsets=None) -> np.ndarray:
    """Signed decoding errors at uniformly random true headings.

    Counts are drawn by :func:`retina.signal.poisson.sample_counts_split` (the Poisson law, drawn
    faster in dim light, on as many threads as numba may use; the numbers do not depend on the
    thread count).

    Parameters
    ----------
    m : GridModel
    photons : float
        Photon budget per receptor (split over the poses of a scan).
    n : int
        Number of true headings.
    rng : numpy.random.Generator
    offsets : ndarray (P,), optional
        Scan offsets in degrees; None for a single pose.

    Returns
    -------
    ndarray (n,)
        Degrees, in (-180, 180].
    """
    from retina.readout.circstats import circular_difference
    from retina.signal.poisson import sample_counts_split

    import numba

    threads = numba.get_num_threads()     # 1 inside a sweep's task (retina.sweep.run.single_threaded)
    true = rng.uniform(0.0, 360.0, n)
    dec = m.decoder(photons)
    if offsets is None:
        est = dec.decode(sample_counts_split(m.expected(true, photons), rng, threads=threads))
    else:
        lam = m.expected((true[:, None] + offsets[None, :]).ravel(), photons).reshape(n, offsets.size, -1)
        est = dec.decode_scan(sample_counts_split(lam / offsets.size, rng, threads=threads), offsets)
    return circular_difference(est.heading_deg, true)


def rms_bound(photons: np.ndarray, info_per_photon: np.ndarray) -> np.ndarray:
    """The bound on the rms heading error over uniformly distributed true headings.

    Parameters
    ----------
    photons : ndarray (M,)
    info_per_photon : ndarray (G,)
        Heading information per photon at the grid headings.

    Returns
    -------
    ndarray (M,)
        ``sqrt(mean_h CRB(h)^2)`` in degrees (what the decoding error measures); inf if any
        heading carries no information.
    """
    from retina.readout.fisher import cramer_rao_deg

    crb = cramer_rao_deg(np.asarray(photons, float)[:, None] * np.asarray(info_per_photon, float)[None, :])
    return np.sqrt(np.mean(crb ** 2, axis=1))


#: Headings (degrees) over which the disorder and order studies average the information of one pose.
STUDY_HEADINGS_DEG = np.arange(0.0, 360.0, 10.0)


def study_probe(sc: Scenario, fld) -> Callable[[object], tuple[float, float]]:
    """The two numbers by which the disorder and order studies compare retina models.

    Parameters
    ----------
    sc : Scenario
        Its ``pose`` (headings, pitch, roll) places the head; ``readout.nuisance`` sets the
        information.
    fld : Field
        The world field.

    Returns
    -------
    callable(RetinaModel) -> (float, float)
        For a model: the modulation depth (:func:`depth`) averaged over the scenario's poses, and
        the heading information per photon (rad^-2 per photon per receptor) averaged over
        :data:`STUDY_HEADINGS_DEG` at the scenario's pitch and roll.
    """
    from retina.eye.pose import head_field, pose_rotation

    p = sc["pose"]
    b = head_field(pose_rotation(np.asarray(p["headings_deg"], float), p["pitch_deg"], p["roll_deg"]),
                   fld.vector)
    nuisance = sc["readout"]["nuisance"]
    base = []          # the first model's signal model: the others share its photon catch

    def probe(m) -> tuple[float, float]:
        dp = float(np.mean(depth(m.yields(b))))
        if not base or base[0].receptors is not m.receptors:
            base[:] = [signal_model(sc, m, fld)]
        info = float(np.mean(per_photon_info(base[0].replace(retina=m), m.degree, nuisance, STUDY_HEADINGS_DEG)))
        return dp, info

    return probe


def study_probe_many(sc: Scenario, fld, receptors, responses, *, progress=None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`study_probe` of many ensemble models of the same receptors at once.

    The same two numbers, from the receptor-frame responses alone: the harmonics at every
    receptor's view of the probe's field directions are shared by all models
    (:func:`retina.signal.noise.responses_at`), and so is the photon catch.  Each model's yields
    are evaluated at the ``M = 2 L + 1`` Fourier-node headings of :meth:`SignalModel.fourier_nodes`
    (the scenario's pitch and roll) and at the scenario's poses; the heading derivative at the
    nodes is the exact derivative of the trigonometric polynomial through them
    (:func:`retina.signal.noise.trig_derivative_matrix`: a yield function of degree ``L`` is one of
    degree ``L`` in the heading), and the information at :data:`STUDY_HEADINGS_DEG` follows as in
    :func:`retina.readout.fisher.heading_information` (interpolated from the nodes, as
    :func:`retina.readout.fisher.poisson_information` or :func:`~retina.readout.fisher.gain_schur`),
    for all models at once over blocks of receptors (bounded memory).  Equal to :func:`study_probe` of
    ``RetinaModel(response, receptors)`` up to rounding; a constant response keeps depth and
    information exactly 0.

    Parameters
    ----------
    sc : Scenario
    fld : Field
    receptors : Receptors
    responses : array_like, shape (R, K)
        Receptor-frame responses (``ordering.ensemble(yield coefficients)``) of ``R`` models.
    progress : callable(done, total), optional
        After each block of receptors, in models' worth of work (``total = R``; the last call is
        ``(R, R)``).

    Returns
    -------
    depth : ndarray (R,)
        Modulation depth averaged over the scenario's poses.
    info : ndarray (R,)
        Heading information per photon (rad^-2 per photon per receptor) averaged over
        :data:`STUDY_HEADINGS_DEG`.
    """
    from retina import sphere
    from retina.eye.pose import head_field, pose_rotation
    from retina.signal.noise import responses_at, trig_derivative_matrix, trig_interp_matrix

    r = np.atleast_2d(np.asarray(responses, float))
    R, L = r.shape[0], sphere.degree_from_n(r.shape[1])
    M = 2 * L + 1
    p = sc["pose"]
    sig = signal_model(sc, None, fld, receptors=receptors)
    nodes = np.arange(M) * 360.0 / M
    b = np.concatenate([head_field(sig.rotations(nodes), sig.b_world),
                        head_field(pose_rotation(np.asarray(p["headings_deg"], float), p["pitch_deg"],
                                                 p["roll_deg"]), fld.vector)])
    H = b.shape[0] - M
    catch = sig.catch([0.0])[0]                                                # (N,), one photon
    T = trig_derivative_matrix(M)
    W = trig_interp_matrix(np.deg2rad(nodes), np.deg2rad(STUDY_HEADINGS_DEG), L)
    S = W.shape[0]
    # sums over the receptors, accumulated block by block: sum dlam^2 / lam, sum dlam, sum lam at
    # every study heading, and the extremes and solid-angle-free mean of the yields at every pose
    full, sd, sl = (np.zeros((S, R)) for _ in range(3))
    hi, lo, tot = np.full((R, H), -np.inf), np.full((R, H), np.inf), np.zeros((R, H))
    N = catch.size
    per = max(1, int(_PROBE_BYTES // (8 * R * (b.shape[0] + 4 * M + 6 * S))))
    for s in range(0, N, per):
        e = min(N, s + per)
        phi = responses_at(receptors.frames[s:e], r, b)                       # (R, M + H, n)
        hi = np.maximum(hi, phi[:, M:].max(axis=2))
        lo = np.minimum(lo, phi[:, M:].min(axis=2))
        tot += phi[:, M:].sum(axis=2)
        lam_n = (catch[s:e] * phi[:, :M]).transpose(1, 0, 2).reshape(M, -1)   # nodes x (model, receptor)
        dlam_n = T @ (lam_n - lam_n[0])               # exactly 0 for a constant response
        lam = np.maximum((W @ lam_n).reshape(S, R, e - s), 0.0)
        dlam = (W @ dlam_n).reshape(S, R, e - s)
        ratio = np.zeros_like(lam)
        np.divide(dlam * dlam, lam, out=ratio, where=lam > 0)
        full += ratio.sum(axis=2)
        sd += dlam.sum(axis=2)
        sl += lam.sum(axis=2)
        if progress:
            progress(R * e // N, R)
    dep = ((hi - lo) / (tot / N)).mean(axis=1)                                # depth (max - min) / mean
    if sc["readout"]["nuisance"] == "gain":                                   # gain_schur
        corr = np.zeros_like(full)
        np.divide(sd * sd, sl, out=corr, where=sl > 0)
        full = np.maximum(full - corr, 0.0)
    return dep, full.mean(axis=0)


#: Bytes of working arrays per block of receptors in :func:`study_probe_many`.
_PROBE_BYTES = 64 * 2**20


def bounds_over_light(photons, info_per_photon) -> np.ndarray:
    """Cramer-Rao bounds (degrees) for every light level and every model.

    Parameters
    ----------
    photons : array_like, shape (M,)
        Photon budgets per receptor (the light levels).
    info_per_photon : float or array_like, shape (K,)
        Heading information per photon of each model, rad^-2.

    Returns
    -------
    ndarray, shape (M,) or (M, K)
        ``1 / sqrt(photons info)`` in degrees (inf where the information is 0).
    """
    from retina.readout.fisher import cramer_rao_deg

    info = np.asarray(info_per_photon, float)
    light = np.asarray(photons, float).reshape((-1,) + (1,) * info.ndim)
    return cramer_rao_deg(light * info)
