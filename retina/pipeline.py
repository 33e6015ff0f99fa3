"""The end-to-end job: scenario -> yield function -> retina model -> patterns, scan, precision,
disorder sweep, trials -> results HDF5 + figures + report.

Every step is a public function that takes the validated :class:`retina.scenario.Scenario` (and
what earlier steps made) and returns plain arrays, so the CLI subcommands, the demo and notebooks
share them.  :func:`run` chains the steps into a :class:`Results` object; :func:`save_results` and
:func:`load_results` round-trip it through HDF5; :func:`make_figures` and :func:`write_outputs`
turn it into figures and a report.

Conventions (owned here)
------------------------
- Randomness: every stage draws from its own generator
  ``numpy.random.default_rng(SeedSequence([seed, crc32(stage name)]))`` (:func:`stage_rng`), so a
  stage's numbers do not depend on which other stages ran; the same scenario and seed give
  identical arrays.
- Headings are yaw angles in degrees clockwise from geographic north (the world x axis,
  :mod:`retina.eye.pose`); the field's declination turns magnetic north away from it.
- Modulation depth of a pattern: ``(max - min) / mean`` of the receptor yields over both eyes
  (dimensionless; reported in %).
- A head scan is a sweep of ``scan.steps`` yaw angles, evenly spaced over
  ``heading +/- amplitude`` (offsets rounded to the one-degree decoder grid).  A light level is a
  photon budget per receptor for the whole look: a scan splits it equally over its poses
  (:mod:`retina.readout.scans`), so a scan and a single pose get the same light.  With
  ``readout.nuisance = "gain"`` one overall light level, common to all poses of a scan, is unknown
  (Schur complement, "global_gain"; the decoder profiles the same gain out).
- Simulated orientation trials (:func:`retina.readout.trials.simulate_trials`): each bird starts at
  a uniformly random true heading ``psi``, makes a head scan of ``trials.scan_steps`` poses over
  ``psi +/- scan.amplitude_deg`` with the light level's budget, decodes its heading by maximum
  likelihood from the counts of all poses and turns by ``goal - psi_hat``.
- Precision curves: the Cramer-Rao bound on the rms heading error over uniformly distributed true
  headings, ``sqrt(mean_h 1 / I(h))`` over 360 grid headings, single pose and head scan; decoding error: rms of the wrapped decoding errors at
  ``readout.decode_repeats`` uniformly random true headings per photon level.  The disorder sweep
  uses the bound from the heading-averaged information, ``1 / sqrt(mean_h I(h))``.  Bounds above
  ``retina.readout.fisher.INFORMATIVE_BOUND_DEG`` are reported in words as not informative (the
  numbers stay in the results file).  With ``readout.compare_nuisance`` the bounds of one pose and
  of the scan are also computed with that further unknown (``precision/bound_*_compare_deg``).
- Why a scan alone does not help when only the overall light level is unknown: the scan splits
  the same photon budget over its poses, and Fisher information adds over poses, so the scan's
  information is about the average of the single-pose information over the headings it visits
  (a shared gain is pinned down slightly better, :mod:`retina.readout.scans`).  A scan
  helps when it averages out an unknown that a single look cannot separate from the heading, such
  as a head-fixed texture of unknown receptor sensitivities (``compare_nuisance =
  "receptor_gain"``).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import json
import os
import platform
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from retina.errors import InputError
from retina.scenario import Scenario

__all__ = [
    "Results", "stage_rng", "quick_scenario", "build_field", "build_eyes", "build_ordering",
    "build_yield_function", "build_retina", "build_sky", "compute_patterns", "compute_scan", "compute_precision",
    "compute_disorder", "compute_trials", "run", "save_results", "load_results", "make_figures",
    "key_numbers", "write_outputs", "RESULTS_FORMAT",
]

RESULTS_FORMAT = "retina-compass results"
RESULTS_VERSION = 1

ProgressFactory = Callable[[str, int], Callable[[int, int], None]]


def _noprog(desc: str, total: int):
    return None


def stage_rng(seed: int, stage: str) -> np.random.Generator:
    """The generator of one stage (module docstring, "Randomness")."""
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(stage.encode())]))


# ------------------------------------------------------------------------------------------------
# building blocks


def quick_scenario(sc: Scenario) -> Scenario:
    """A reduced copy for smoke tests and ``--quick``: degree <= 8, <= 120 receptors per eye,
    <= 4 photon levels, few repeats, trials and sweep points, PNG at 100 dpi."""
    eyes = [dict(e, n_receptors=min(e["n_receptors"], 120)) for e in sc["eyes"]]
    ro = sc["readout"]
    ph = ro["photons"]
    if len(ph) > 4:
        ph = [ph[i] for i in np.unique(np.round(np.linspace(0, len(ph) - 1, 4)).astype(int))]
    kap = sc["ordering"]["disorder_kappas"]
    if len(kap) > 3:
        kap = [kap[0], kap[len(kap) // 2], kap[-1]]
    return sc.replace(
        **{"yield": {"degree": min(sc["yield"]["degree"], 8)},
           "eyes": eyes,
           "ordering": {"disorder_kappas": kap, "n_molecules": min(sc["ordering"]["n_molecules"], 50)},
           "readout": {"photons": ph, "decode_repeats": min(ro["decode_repeats"], 40)},
           "scan": {"steps": min(sc["scan"]["steps"], 9)},
           "trials": {"n_trials": min(sc["trials"]["n_trials"], 20),
                      "scan_steps": min(sc["trials"]["scan_steps"], 5)},
           "pose": {"headings_deg": sc["pose"]["headings_deg"][:2]},
           "output": {"dpi": 100}})


def build_field(sc: Scenario):
    """The :class:`retina.eye.field.Field` of the scenario (given components or IGRF at a place)."""
    from retina.eye.field import Field, field_at

    f = sc["field"]
    if sc.field_uses_location:
        return field_at(f["latitude_deg"], f["longitude_deg"], f["altitude_km"], f["date"])
    return Field(f["intensity_uT"], f["inclination_deg"], f["declination_deg"], source="scenario")


def build_eyes(sc: Scenario):
    """The :class:`retina.eye.geometry.Eye` objects of the scenario (in file order)."""
    from retina.eye.geometry import Eye

    out = []
    for i, e in enumerate(sc["eyes"]):
        try:
            out.append(Eye(**e))
        except InputError as exc:
            raise InputError(exc.detail, source=sc.source, key=f"eyes[{i}].{(exc.key or '').split('.')[-1]}") from None
    return out


def build_ordering(sc: Scenario, kappa: float | None = None):
    """The ordering model of the scenario (``kappa`` overrides the cone concentration)."""
    from scipy.spatial.transform import Rotation

    from retina.eye import ordering as om

    o = sc["ordering"]
    a, b, c = o["orientation_deg"]
    base = Rotation.from_euler("ZYZ", [a, b, c], degrees=True)
    model = o["model"] if kappa is None else "cone"
    if model == "aligned":
        return om.Aligned(base)
    if model == "axial":
        return om.FreeRotation(tilt_deg=b, twist_deg=c)
    if model == "isotropic":
        return om.Isotropic()
    cone = om.Cone(kappa=float(o["kappa"] if kappa is None else kappa))
    if np.allclose(base.as_matrix(), np.eye(3)):
        return cone
    return om.Composite(om.Aligned(base), cone)


def _field_uT(sc: Scenario) -> float:
    if sc["yield"]["field_uT"] is not None:
        return float(sc["yield"]["field_uT"])
    return float(build_field(sc).F_uT)


def build_yield_function(sc: Scenario, *, progress=None):
    """Compute, load or import the scenario's yield function (:class:`retina.yieldfn.YieldFunction`)."""
    from retina.yieldfn import YieldFunction

    kind, path = sc.yield_source
    degree = sc["yield"]["degree"]
    if kind == "system":
        from retina.spin.io import load_system

        system = load_system(path)
        return YieldFunction.from_system(system, _field_uT(sc), degree=degree, method=sc["yield"]["method"],
                                         progress=progress)
    if kind == "file":
        return YieldFunction.load(path)
    from retina.io.importers import import_table

    return import_table(path, degree)


def build_retina(sc: Scenario, yf, receptors=None, *, kappa: float | None = None, progress=None):
    """The :class:`retina.eye.pattern.RetinaModel` of the scenario."""
    from retina.eye.geometry import build_receptors
    from retina.eye.pattern import RetinaModel

    if receptors is None:
        receptors = build_receptors(build_eyes(sc))
    o = sc["ordering"]
    mode = o["mode"] if kappa is None else "ensemble"
    return RetinaModel(yf, receptors, build_ordering(sc, kappa), mode=mode, n_molecules=o["n_molecules"],
                       seed=stage_rng(sc.seed, "molecules"), progress=progress)


def build_sky(sc: Scenario):
    """The sky model of ``[light]`` (:mod:`retina.signal.light`)."""
    from retina.signal.light import HorizonSky, UniformSky

    li = sc["light"]
    if li["sky"] == "horizon":
        return HorizonSky(horizon_deg=li["horizon_deg"], softness_deg=li["softness_deg"],
                          ground_ratio=li["ground_ratio"])
    return UniformSky()


def _signal(sc: Scenario, model, fld, *, pitch: float | None = None, photons: float = 1.0):
    from retina.signal.noise import SignalModel

    return SignalModel(model, inclination_deg=fld.I_deg, declination_deg=fld.D_deg, photons=photons,
                       sky=build_sky(sc),
                       pitch_deg=sc["pose"]["pitch_deg"] if pitch is None else pitch,
                       roll_deg=sc["pose"]["roll_deg"] if pitch is None else 0.0)


def _depth(yields: np.ndarray) -> np.ndarray:
    y = np.atleast_2d(yields)
    return (y.max(axis=1) - y.min(axis=1)) / y.mean(axis=1)


def _scan_yaws(sc: Scenario, steps: int | None = None) -> np.ndarray:
    s = sc["scan"]
    n = s["steps"] if steps is None else steps
    return s["heading_deg"] + np.linspace(-s["amplitude_deg"], s["amplitude_deg"], n)


# ------------------------------------------------------------------------------------------------
# stages


def compute_patterns(sc: Scenario, model, fld) -> dict:
    """Patterns at the scenario's headings: ``headings_deg (H,)``, ``b_head (H, 3)``,
    ``yields (H, N)``, ``modulation (H, N)``, ``depth (H,)``."""
    from retina.eye.pose import Pose

    p = sc["pose"]
    pats = [model.pattern(Pose(h, p["pitch_deg"], p["roll_deg"]), fld) for h in p["headings_deg"]]
    y = np.array([q.yields for q in pats])
    return {"headings_deg": np.asarray(p["headings_deg"], float), "b_head": np.array([q.b_head for q in pats]),
            "yields": y, "modulation": np.array([q.modulation for q in pats]), "depth": _depth(y)}


def compute_scan(sc: Scenario, model, fld) -> dict:
    """The head scan: ``yaw_deg (F,)``, ``b_head (F, 3)``, ``yields``/``modulation (F, N)``,
    ``depth (F,)`` and ``change_per_degree (F,)``, the rms over receptors of the relative yield
    change per degree of head turn (:func:`retina.readout.scans.pattern_change_per_degree`)."""
    from retina.eye.pattern import modulation
    from retina.eye.pose import head_field, pose_rotation
    from retina.readout.scans import pattern_change_per_degree

    yaw = _scan_yaws(sc)
    rot = pose_rotation(yaw, sc["scan"]["pitch_deg"], 0.0)
    b = head_field(rot, fld.vector)
    y = model.yields(b)
    change = pattern_change_per_degree(_signal(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), yaw)
    return {"yaw_deg": yaw, "b_head": b, "yields": y, "modulation": modulation(y, model.receptors),
            "depth": _depth(y), "change_per_degree": np.asarray(change, float)}


def _per_photon_info(signal, degree: int, nuisance: str, headings) -> np.ndarray:
    from retina.readout.fisher import heading_information

    return heading_information(signal, headings, nuisance=nuisance, degree=degree).per_photon


_GRID = 360  # decoder grid: one-degree steps, so integer-degree scan offsets are grid shifts


class _Model:
    """Expected counts per photon on the decoder grid for one signal model, with decoders and
    Poisson draws for a single look or a head scan (photon budget split over the poses,
    :mod:`retina.readout.scans`)."""

    def __init__(self, signal, degree: int, gain: str):
        self.signal = signal
        self.degree = int(degree)
        self.gain = gain
        self.grid = np.arange(_GRID) * 360.0 / _GRID
        lam, dlam = signal.expected_and_derivative_fourier(self.grid, degree)
        self.lam1 = np.maximum(lam, 0.0)     # (G, N) at photons = 1
        self.dlam1 = dlam

    def decoder(self, photons: float):
        from retina.readout.decode import HeadingDecoder

        return HeadingDecoder(self.grid, photons * self.lam1, photons * self.dlam1, gain=self.gain)

    def truth(self, photons: float):
        return dataclasses.replace(self.signal, photons=float(photons))

    def expected(self, headings_deg, photons: float) -> np.ndarray:
        """Expected counts ``(P, N)`` at any headings: exact trigonometric interpolation of the model
        from ``2 L + 1`` headings (``SignalModel.expected_and_derivative_fourier``), far cheaper than
        evaluating every receptor's harmonics at thousands of random headings."""
        lam = self.truth(photons).expected_and_derivative_fourier(np.asarray(headings_deg, float), self.degree)[0]
        return np.maximum(lam, 0.0)

    def scan_information(self, offsets_deg: np.ndarray, nuisance: str) -> np.ndarray:
        """Heading information per unit budget over the scan, at every grid heading ``(G,)``."""
        from retina.readout.scans import scan_information_arrays

        sh = np.round(np.asarray(offsets_deg) * _GRID / 360.0).astype(int)
        P = sh.size
        idx = (np.arange(_GRID)[:, None] + sh[None, :]) % _GRID
        return np.array([scan_information_arrays(self.lam1[r] / P, self.dlam1[r] / P, nuisance) for r in idx])


def _grid_offsets(offsets_deg) -> np.ndarray:
    step = 360.0 / _GRID
    return np.round(np.asarray(offsets_deg, float) / step) * step


def _decode_errors(m: _Model, photons: float, n: int, rng, offsets=None) -> np.ndarray:
    """Signed decoding errors (deg) at ``n`` uniformly random true headings."""
    from retina.readout.circstats import circular_difference
    from retina.signal.noise import sample_counts

    true = rng.uniform(0.0, 360.0, n)
    dec = m.decoder(photons)
    if offsets is None:
        est = dec.decode(sample_counts(m.expected(true, photons), rng))
    else:
        lam = m.expected((true[:, None] + offsets[None, :]).ravel(), photons).reshape(n, offsets.size, -1)
        est = dec.decode_scan(sample_counts(lam / offsets.size, rng), offsets)
    return circular_difference(est.heading_deg, true)


def _rms_bound(photons: np.ndarray, info_per_photon: np.ndarray) -> np.ndarray:
    """``sqrt(mean_h CRB(h)^2)`` in degrees for each photon level: the bound on the rms error over
    uniformly distributed true headings (what the decoding error measures); inf if any heading
    carries no information."""
    from retina.readout.fisher import cramer_rao_deg

    crb = cramer_rao_deg(np.asarray(photons, float)[:, None] * np.asarray(info_per_photon, float)[None, :])
    return np.sqrt(np.mean(crb ** 2, axis=1))


def compute_precision(sc: Scenario, model, fld, *, progress=None) -> dict:
    """Bounds and decoding errors against photons per receptor (module docstring).

    Bounds and decoders use the same expected counts (360 grid headings, exact trigonometric
    interpolation of the model), so the decoding error can be compared with the bound directly.
    """
    from retina.readout.decode import error_summary
    from retina.readout.fisher import gain_schur, poisson_information

    ro = sc["readout"]
    L = model.degree
    photons = np.asarray(ro["photons"], float)
    gain = "free" if ro["nuisance"] == "gain" else "known"
    offsets = _grid_offsets(_scan_yaws(sc) - sc["scan"]["heading_deg"])
    m1 = _Model(_signal(sc, model, fld), L, gain)
    mk = _Model(_signal(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), L, gain)
    info1 = (gain_schur if gain == "free" else poisson_information)(m1.lam1, m1.dlam1)
    infok = mk.scan_information(offsets, "global_gain" if gain == "free" else "none")
    out = {"photons": photons, "info_headings_deg": m1.grid,
           "info_per_photon_single": info1, "info_per_photon_scan": infok,
           "bound_single_deg": _rms_bound(photons, info1), "bound_scan_deg": _rms_bound(photons, infok),
           "scan_offsets_deg": offsets}
    rng = stage_rng(sc.seed, "precision")
    dec1, deck = [], []
    for i, ph in enumerate(photons):
        dec1.append(error_summary(_decode_errors(m1, ph, ro["decode_repeats"], rng))["rms_deg"])
        deck.append(error_summary(_decode_errors(mk, ph, ro["decode_repeats"], rng, offsets))["rms_deg"])
        if progress:
            progress(i + 1, photons.size)
    cmp_n = ro.get("compare_nuisance", "none")
    if cmp_n != "none":
        zero = np.zeros(1)
        out["compare_nuisance"] = cmp_n
        out["info_per_photon_single_compare"] = mk.scan_information(zero, cmp_n)
        out["info_per_photon_scan_compare"] = mk.scan_information(offsets, cmp_n)
        out["bound_single_compare_deg"] = _rms_bound(photons, out["info_per_photon_single_compare"])
        out["bound_scan_compare_deg"] = _rms_bound(photons, out["info_per_photon_scan_compare"])
    out["decoded_single_rms_deg"] = np.array(dec1)
    out["decoded_scan_rms_deg"] = np.array(deck)
    return out


def compute_disorder(sc: Scenario, yf, receptors, fld, *, progress=None) -> dict:
    """Modulation depth and bounds over the cone concentrations ``ordering.disorder_kappas``."""
    from retina.eye.pose import head_field, pose_rotation
    from retina.readout.fisher import cramer_rao_deg

    kap = np.asarray(sc["ordering"]["disorder_kappas"], float)
    light = np.asarray(sc["light"]["photons"], float)
    p = sc["pose"]
    b = head_field(pose_rotation(np.asarray(p["headings_deg"], float), p["pitch_deg"], p["roll_deg"]),
                   fld.vector)
    hs = np.arange(0.0, 360.0, 10.0)
    depth, info = [], []
    for i, k in enumerate(kap):
        m = build_retina(sc, yf, receptors, kappa=float(k))
        depth.append(float(np.mean(_depth(m.yields(b)))))
        info.append(float(np.mean(_per_photon_info(_signal(sc, m, fld), m.degree, sc["readout"]["nuisance"], hs))))
        if progress:
            progress(i + 1, kap.size)
    info = np.array(info)
    own = float(sc["ordering"]["kappa"]) if sc["ordering"]["model"] == "cone" else None
    return {"kappas": kap, "depth": np.array(depth), "info_per_photon": info, **({"scenario_kappa": own} if own else {}),
            "light_photons": light, "bound_deg": cramer_rao_deg(light[:, None] * info[None, :])}


def compute_trials(sc: Scenario, model, fld, *, progress=None) -> dict:
    """Simulated orientation trials at every light level (:func:`retina.readout.trials.simulate_trials`)."""
    from retina.readout.trials import simulate_trials

    tr = sc["trials"]
    amp = sc["scan"]["amplitude_deg"]
    offsets = _grid_offsets(np.linspace(-amp, amp, tr["scan_steps"]) if tr["scan_steps"] > 1 else np.zeros(1))
    gain = "free" if sc["readout"]["nuisance"] == "gain" else "known"
    m = _Model(_signal(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), model.degree, gain)
    out = {"goal_deg": float(tr["goal_deg"]), "scan_offsets_deg": offsets, "levels": {}}
    names, photons = sc["light"]["names"], sc["light"]["photons"]
    for i, (name, ph) in enumerate(zip(names, photons)):
        r = simulate_trials(m.truth(ph), m.decoder(ph), tr["n_trials"], goal_deg=tr["goal_deg"],
                            scan_offsets_deg=offsets, rng=stage_rng(sc.seed, f"trials/{name}"))
        from retina.readout.circstats import circular_difference

        out["levels"][name] = {
            "photons": float(ph), "start_deg": r.start_deg, "decoded_deg": r.decoded_deg,
            "ambiguous": r.ambiguous.astype(np.int8),
            "error_deg": circular_difference(r.decoded_deg, r.start_deg),
            "chosen_deg": np.asarray(r.chosen_deg, float), "mean_deg": float(r.rayleigh.mean_deg),
            "r": float(r.rayleigh.r), "rayleigh_p": float(r.rayleigh.p), "v_u": float(r.v_test.u),
            "v_p": float(r.v_test.p), "r_axial": float(r.rayleigh_axial.r),
            "rayleigh_p_axial": float(r.rayleigh_axial.p), "preferred_analysis": r.preferred_analysis}
        if progress:
            progress(i + 1, len(names))
    return out


# ------------------------------------------------------------------------------------------------
# the whole run


@dataclass
class Results:
    """Everything a run computed.

    Attributes
    ----------
    groups : dict
        ``{"yield_function": {...}, "receptors": {...}, "patterns": {...}, "scan": {...},
        "precision": {...}, "disorder": {...}, "trials": {...}}``: arrays and scalars (nested dicts
        for the trial light levels), the layout of the results HDF5 file.
    provenance : dict
        ``scenario_toml`` (the scenario text), ``scenario_source``, ``versions``, ``date_utc``,
        ``seed``, ``quick``, ``yield_provenance`` (JSON text), ``field`` (text), ``python``.
    """

    groups: dict = field(default_factory=dict)
    provenance: dict = field(default_factory=dict)


def run(sc: Scenario, *, quick: bool = False, stages=("patterns", "scan", "precision", "disorder", "trials"),
        progress_factory: ProgressFactory | None = None, yield_function=None) -> Results:
    """Run the scenario's stages and collect their results.

    Parameters
    ----------
    sc : Scenario
    quick : bool
        Apply :func:`quick_scenario` first.
    stages : sequence of str
        Any of "patterns", "scan", "precision", "disorder", "trials" (the yield function and the
        retina are always built).
    progress_factory : callable(description, total) -> progress(done, total), optional
        Makes a progress callback for each long step (the CLI passes tqdm bars).
    yield_function : YieldFunction, optional
        Use this instead of computing/loading the scenario's.

    Returns
    -------
    Results
    """
    from retina.yieldfn import package_versions

    bad = set(stages) - {"patterns", "scan", "precision", "disorder", "trials"}
    if bad:
        raise InputError(f"unknown stage(s) {sorted(bad)}", key="stages")
    if quick:
        sc = quick_scenario(sc)
    pf = progress_factory or _noprog
    fld = build_field(sc)
    yf = yield_function if yield_function is not None else build_yield_function(sc, progress=pf("yield function", 0))
    an = yf.anisotropy()
    from retina.eye.geometry import build_receptors

    receptors = build_receptors(build_eyes(sc))
    model = build_retina(sc, yf, receptors, progress=pf("molecules", 0))
    g: dict = {}
    g["yield_function"] = {"coeffs": np.asarray(yf.coeffs), "degree": int(yf.degree), "max": an.max,
                           "min": an.min, "mean": an.mean, "relative": an.relative,
                           "argmax": np.asarray(an.argmax), "argmin": np.asarray(an.argmin),
                           "fit_error": np.nan if yf.fit_error is None else float(yf.fit_error)}
    g["receptors"] = {"visual_dirs": receptors.visual_dirs, "axes": receptors.axes,
                      "solid_angle": receptors.solid_angle, "eye_index": receptors.eye_index}
    g["field"] = {"F_uT": float(fld.F_uT), "I_deg": float(fld.I_deg), "D_deg": float(fld.D_deg)}
    if "patterns" in stages:
        g["patterns"] = compute_patterns(sc, model, fld)
    if "scan" in stages:
        g["scan"] = compute_scan(sc, model, fld)
    if "precision" in stages:
        g["precision"] = compute_precision(sc, model, fld, progress=pf("precision", len(sc["readout"]["photons"])))
    if "disorder" in stages:
        g["disorder"] = compute_disorder(sc, yf, receptors, fld,
                                         progress=pf("disorder sweep", len(sc["ordering"]["disorder_kappas"])))
    if "trials" in stages:
        g["trials"] = compute_trials(sc, model, fld, progress=pf("trials", len(sc["light"]["names"])))
    prov = {"scenario_toml": sc.text, "scenario_source": str(sc.source or ""), "scenario_name": sc.name,
            "versions": package_versions(), "python": platform.python_version(),
            "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "seed": int(sc.seed), "quick": bool(quick),
            "yield_provenance": json.dumps(_jsonable(yf.provenance), sort_keys=True),
            "field": f"F = {fld.F_uT:.3f} uT, I = {fld.I_deg:.3f} deg, D = {fld.D_deg:.3f} deg ({fld.source})",
            "ordering": _ordering_text(sc), "stages": ",".join(stages),
            "sky": (f"horizon (ground {sc['light']['ground_ratio']:g} of the sky, horizon "
                    f"{sc['light']['horizon_deg']:g} deg, softness {sc['light']['softness_deg']:g} deg)"
                    if sc["light"]["sky"] == "horizon" else "uniform")}
    res = Results(g, prov)
    res.scenario = sc  # the (possibly reduced) scenario actually run
    return res


def _jsonable(d):
    if isinstance(d, dict):
        return {str(k): _jsonable(v) for k, v in d.items()}
    if isinstance(d, (list, tuple)):
        return [_jsonable(v) for v in d]
    if isinstance(d, (np.generic,)):
        return d.item()
    if isinstance(d, np.ndarray):
        return d.tolist()
    return d if isinstance(d, (str, int, float, bool)) or d is None else str(d)


def _ordering_text(sc: Scenario) -> str:
    o = sc["ordering"]
    s = f"{o['model']}"
    if o["model"] == "cone":
        s += f" (kappa = {o['kappa']:g})"
    s += f", {o['mode']}"
    if o["mode"] == "molecules":
        s += f" ({o['n_molecules']} molecules per receptor)"
    return s


# ------------------------------------------------------------------------------------------------
# HDF5


def _write_group(grp, d: dict):
    for k, v in d.items():
        if isinstance(v, dict):
            _write_group(grp.create_group(k), v)
        elif isinstance(v, str):
            grp.attrs[k] = v
        elif np.isscalar(v) or isinstance(v, (bool, np.bool_)):
            grp.attrs[k] = v
        else:
            grp.create_dataset(k, data=np.asarray(v))


def _read_group(grp) -> dict:
    import h5py

    out = {}
    for k, v in grp.attrs.items():
        out[k] = v.item() if isinstance(v, np.generic) else v
    for k, v in grp.items():
        out[k] = _read_group(v) if isinstance(v, h5py.Group) else v[()]
    return out


def save_results(results: Results, path: str | Path, *, force: bool = False) -> Path:
    """Write results to HDF5 atomically: one group per stage, provenance as root attributes."""
    return _save(results, path, force=force)


def _save(results: Results, path: str | Path, *, force: bool = False) -> Path:
    import h5py

    from retina.io.atomic import atomic_path

    with atomic_path(path, force=force) as tmp:
        with h5py.File(tmp, "w") as h:
            h.attrs["format"] = RESULTS_FORMAT
            h.attrs["format_version"] = RESULTS_VERSION
            pg = h.create_group("provenance")
            for k, v in results.provenance.items():
                pg.attrs[k] = json.dumps(v, sort_keys=True) if isinstance(v, dict) else v
            _write_group(h, results.groups)
    return Path(path)


def load_results(path: str | Path) -> Results:
    """Read a results file written by :func:`save_results`."""
    import h5py

    path = Path(path)
    if not path.is_file():
        raise InputError("results file not found", source=path)
    try:
        with h5py.File(path, "r") as h:
            if h.attrs.get("format") != RESULTS_FORMAT:
                raise InputError(f"not a {RESULTS_FORMAT} file (format attribute "
                                 f"{h.attrs.get('format')!r})", source=path, key="format")
            prov = dict(h["provenance"].attrs)
            groups = {k: _read_group(v) for k, v in h.items() if k != "provenance"}
    except OSError as exc:
        raise InputError(f"cannot read HDF5 ({exc})", source=path) from None
    if "versions" in prov and isinstance(prov["versions"], str):
        prov["versions"] = json.loads(prov["versions"])
    res = Results(groups, prov)
    return res


# ------------------------------------------------------------------------------------------------
# figures, key numbers, report


def _params(res: Results) -> str:
    p = res.provenance
    f = res.groups["field"]
    n = res.groups["receptors"]["eye_index"].size
    return (f"Field {f['F_uT']:.1f} uT, inclination {f['I_deg']:.1f} deg, declination {f['D_deg']:.1f} deg; "
            f"ordering {p.get('ordering', '?')}; {p.get('sky', 'uniform')} sky; {n} receptors; "
            f"seed {p.get('seed', '?')}")


def make_figures(res: Results, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True, progress=None) -> list:
    """Draw every figure the results allow into ``folder`` and return their report entries."""
    from retina import figures as F
    from retina.report import FigureEntry
    from retina.yieldfn import YieldFunction

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    g = res.groups
    params = _params(res)
    entries = []
    formats = tuple(formats)
    plan = [k for k in ("yield", "patterns", "scan", "gif", "precision", "disorder", "trials")]
    done = 0

    def add(fig, stem, anim=False, fmts=formats):
        nonlocal done
        entries.append(FigureEntry(f"{folder.name}/{stem}", fig.retina_title, fig.retina_caption,
                                   tuple(fmts), anim))
        done += 1
        if progress:
            progress(done, len(plan))

    yfg = g["yield_function"]
    yf = YieldFunction(yfg["coeffs"], int(yfg["degree"]))
    fig = F.yield_sphere(yf, argmax=yfg["argmax"], argmin=yfg["argmin"],
                         params=f"Spherical-harmonic degree {int(yfg['degree'])}; relative anisotropy "
                                f"{100 * yfg['relative']:.3g} %; field {g['field']['F_uT']:.1f} uT",
                         path=folder / "yield_sphere", formats=formats, dpi=dpi)
    add(fig, "yield_sphere")
    rec = g["receptors"]
    if "patterns" in g:
        p = g["patterns"]
        fig = F.modulation_fields(rec["visual_dirs"], rec["eye_index"], p["modulation"], p["headings_deg"],
                                  p["b_head"], params=params, path=folder / "modulation_fields",
                                  formats=formats, dpi=dpi)
        add(fig, "modulation_fields")
    if "scan" in g:
        s = g["scan"]
        fig = F.scan_filmstrip(rec["visual_dirs"], rec["eye_index"], s["modulation"], s["yaw_deg"], s["b_head"],
                               params=params, path=folder / "scan_filmstrip", formats=formats, dpi=dpi)
        add(fig, "scan_filmstrip")
        if animation:
            F.scan_animation(rec["visual_dirs"], rec["eye_index"], s["modulation"], s["yaw_deg"], s["b_head"],
                             folder / "scan_animation.gif", params=params, dpi=min(dpi, 100))
            entries.append(FigureEntry(f"{folder.name}/scan_animation", "Head scan animation",
                                       "The modulation pattern through the head scan, one frame per pose "
                                       f"(GIF). {params}.", (), True))
    if "precision" in g:
        q = g["precision"]
        n_scan = len(q["scan_offsets_deg"])
        light = dict(zip(*_light(res)))
        bounds = {"single pose": q["bound_single_deg"], f"head scan ({n_scan} poses)": q["bound_scan_deg"]}
        cmp_n = q.get("compare_nuisance")
        if cmp_n:
            short = _COMPARE_SHORT.get(cmp_n, cmp_n)
            for lab, key in (("single pose", "bound_single_compare_deg"), ("head scan", "bound_scan_compare_deg")):
                if np.isfinite(q[key]).any():
                    bounds[f"{lab}, {short}"] = q[key]
        fig = F.precision_curves(q["photons"], bounds,
                                 decoded_deg={"single pose": q["decoded_single_rms_deg"],
                                              f"head scan ({n_scan} poses)": q["decoded_scan_rms_deg"]},
                                 light_levels=light, params=params + _compare_caption(cmp_n),
                                 path=folder / "precision_curves",
                                 formats=formats, dpi=dpi)
        add(fig, "precision_curves")
    if "disorder" in g:
        d = g["disorder"]
        names, _ = _light(res)
        fig = F.disorder_tolerance(d["kappas"], d["depth"],
                                   {f"{nm} ({ph:g})": d["bound_deg"][i] for i, (nm, ph) in
                                    enumerate(zip(names, d["light_photons"]))},
                                   marked_kappa=d.get("scenario_kappa"),
                                   params=params + "; single pose, heading-averaged information",
                                   path=folder / "disorder_tolerance", formats=formats, dpi=dpi)
        add(fig, "disorder_tolerance")
    if "trials" in g:
        t = g["trials"]
        data = {f"{nm} light ({lv['photons']:g} photons)": lv["chosen_deg"] for nm, lv in t["levels"].items()}
        fig = F.trial_histograms(data, t["goal_deg"], params=params + f"; head scan of "
                                 f"{len(t['scan_offsets_deg'])} poses per trial",
                                 path=folder / "trial_histograms", formats=formats, dpi=dpi)
        add(fig, "trial_histograms")
    return entries


def _compare_caption(cmp_n) -> str:
    if cmp_n == "receptor_gain":
        return ("; 'unknown texture': every receptor's sensitivity is also unknown (a head-fixed texture), so a "
                "single pose carries no heading information (not drawn) and only the head scan recovers it")
    if cmp_n == "pose_gain":
        return "; 'unknown light per pose': the light level of every pose of the scan is also unknown"
    return ""


def _light(res: Results):
    import tomllib

    try:
        light = tomllib.loads(res.provenance["scenario_toml"]).get("light", {})
        names = light.get("names", ["dim", "bright"])
        photons = light.get("photons", [100.0, 10000.0])
    except (tomllib.TOMLDecodeError, KeyError):
        names, photons = [], []
    if "trials" in res.groups:
        lv = res.groups["trials"]["levels"]
        names, photons = list(lv), [lv[n]["photons"] for n in lv]
    return list(names), [float(p) for p in photons]


def _uninformative_note() -> str:
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG, UNIFORM_RMS_DEG

    return (f"Bounds above {INFORMATIVE_BOUND_DEG:g} deg are shown as \"not informative\": the Cramer-Rao bound "
            "is a local Gaussian approximation and means nothing once it spans much of the circle, where the "
            f"decoding error saturates at the random-guess value {UNIFORM_RMS_DEG:.1f} deg instead (the numbers "
            "are kept in results.h5).")


_UNINFORMATIVE_NOTE = _uninformative_note()
_HEADING_NOTE = "Headings are degrees clockwise from geographic north."
_COMPARE_SHORT = {"receptor_gain": "unknown texture", "pose_gain": "unknown light per pose"}
_COMPARE_TEXT = {"receptor_gain": "a head-fixed texture (every receptor's sensitivity)",
                 "pose_gain": "the light level of every pose"}


def _bound_text(bound_deg: float) -> str:
    """A bound in degrees, or "not informative" (:func:`retina.readout.fisher.bound_is_informative`)."""
    from retina.readout.fisher import bound_is_informative

    if not np.isfinite(bound_deg):
        return "no information"
    return f"{bound_deg:.3g}" if bool(bound_is_informative(bound_deg)) else "not informative"


def _typical_tilt_deg(kappa: float) -> float:
    """arccos<cos theta> of a von Mises-Fisher cone, ``<cos theta> = coth kappa - 1 / kappa``."""
    k = min(max(float(kappa), 1e-6), 1e6)
    return float(np.degrees(np.arccos(1.0 / np.tanh(k) - 1.0 / k)))


def key_numbers(res: Results) -> list:
    """The report's tables of key numbers (:class:`retina.report.Section`)."""
    from retina.report import Section

    g = res.groups
    y = g["yield_function"]
    secs = [Section("Yield function", [
        ("mean yield", f"{y['mean']:.5f}", "dimensionless"),
        ("largest yield", f"{y['max']:.5f}", "dimensionless"),
        ("smallest yield", f"{y['min']:.5f}", "dimensionless"),
        ("relative anisotropy (max - min) / mean", f"{100 * y['relative']:.3f}", "%"),
        ("harmonic degree", f"{int(y['degree'])}", ""),
        ("fit (truncation) error, max", "n/a" if not np.isfinite(y["fit_error"]) else f"{y['fit_error']:.2e}",
         "yield units"),
    ])]
    f = g["field"]
    secs.append(Section("Field and retina", [
        ("field intensity", f"{f['F_uT']:.2f}", "uT"), ("inclination", f"{f['I_deg']:.2f}", "deg"),
        ("declination", f"{f['D_deg']:.2f}", "deg"),
        ("receptors (both eyes)", f"{g['receptors']['eye_index'].size}", ""),
        ("ordering", res.provenance.get("ordering", "?"), ""),
    ]))
    if "patterns" in g:
        p = g["patterns"]
        rows = [(f"modulation depth at heading {h:g} deg", f"{100 * d:.3f}", "%")
                for h, d in zip(p["headings_deg"], p["depth"])]
        rows.append(("largest |relative modulation|", f"{100 * np.abs(p['modulation']).max():.3f}", "%"))
        secs.append(Section("Modulation pattern", rows, note=(
            "Modulation depth: (largest - smallest) / mean of the receptor yields, taken over the receptors "
            "of both eyes together. Relative modulation: each receptor's yield relative to the solid-angle-"
            f"weighted mean yield of its own eye. {_HEADING_NOTE}")))
    if "scan" in g:
        s = g["scan"]
        secs.append(Section("Head scan", [
            ("poses", f"{s['yaw_deg'].size}", ""),
            ("yaw range", f"{s['yaw_deg'].min():g} to {s['yaw_deg'].max():g}", "deg"),
            ("pattern change per degree of head turn (rms over receptors, mean over the scan)",
             f"{100 * np.mean(s['change_per_degree']):.3f}", "% per deg"),
            ("modulation depth over the scan, min-max",
             f"{100 * s['depth'].min():.2f}-{100 * s['depth'].max():.2f}", "%")]))
    if "precision" in g:
        q = g["precision"]
        rows = []
        n_scan = len(q["scan_offsets_deg"])
        cmp_n = q.get("compare_nuisance")
        for i, ph in enumerate(q["photons"]):
            rows.append((f"{ph:g} photons/receptor: bound single pose, scan | rms decoding error single pose, scan",
                         f"{_bound_text(q['bound_single_deg'][i])}, {_bound_text(q['bound_scan_deg'][i])} | "
                         f"{q['decoded_single_rms_deg'][i]:.3g}, {q['decoded_scan_rms_deg'][i]:.3g}", "deg"))
        if cmp_n:
            for i, ph in enumerate(q["photons"]):
                rows.append((f"{ph:g} photons/receptor, {_COMPARE_SHORT.get(cmp_n, cmp_n)}: bound single pose, scan",
                             f"{_bound_text(q['bound_single_compare_deg'][i])}, "
                             f"{_bound_text(q['bound_scan_compare_deg'][i])}", "deg"))
        note = ("Cramer-Rao bound on the heading standard deviation (rms over uniformly distributed headings) "
                "and the rms error of maximum-likelihood decoding at random headings, for one pose and for the "
                f"head scan ({n_scan} poses sharing the same light). {_UNINFORMATIVE_NOTE} "
                "With only the overall light level unknown, the scan's bound equals the single pose's: the scan "
                "splits the same photon budget over its poses and information adds over poses, so it only "
                "averages the single-pose information over the headings it visits (the small remaining gain comes "
                "from that average being taken before the bound is inverted, and from one light level being shared "
                "by all poses).")
        if cmp_n:
            note += (f" With {_COMPARE_TEXT.get(cmp_n, cmp_n)} also unknown (scenario key "
                     f"readout.compare_nuisance = \"{cmp_n}\"; bounds only), "
                     + ("a single pose carries no heading information at all (each receptor's count is explained "
                        "by its own sensitivity), while the scan, which moves the field across the fixed receptors, "
                        "recovers it: this is where scanning helps." if cmp_n == "receptor_gain" else
                        "each pose's count total is spent on its own light level."))
        secs.append(Section("Heading precision", rows, note=note))
    if "disorder" in g:
        d = g["disorder"]
        from retina.eye.ordering import order_parameter_from_kappa

        names, _ = _light(res)
        rows = []
        for j, (k, dp) in enumerate(zip(d["kappas"], d["depth"])):
            tilt = _typical_tilt_deg(k)
            rows.append((f"kappa = {k:g} (<P2> = {order_parameter_from_kappa(k):.3f}, typical tilt "
                         f"{tilt:.0f} deg): modulation depth", f"{100 * dp:.3f}", "%"))
            for i, ph in enumerate(d["light_photons"]):
                nm = names[i] if i < len(names) else f"{ph:g} photons"
                rows.append((f"kappa = {k:g}: bound, {nm} ({ph:g} photons)", _bound_text(d["bound_deg"][i][j]),
                             "deg"))
        secs.append(Section("Disorder tolerance", rows, note=(
            "Molecular z axes in a von Mises-Fisher cone of concentration kappa about each receptor axis; "
            "<P2> = <(3 cos^2 theta - 1) / 2> is the order parameter (1 perfect order, 0 none) and the typical "
            "tilt is arccos<cos theta>. Modulation depth as above, averaged over the scenario's headings; bound "
            f"from the heading-averaged information of a single pose. {_UNINFORMATIVE_NOTE}")))
    if "trials" in g:
        t = g["trials"]
        rows = []
        for nm, lv in t["levels"].items():
            rows += [(f"{nm} ({lv['photons']:g} photons): mean heading", f"{lv['mean_deg']:.1f}", "deg"),
                     (f"{nm}: mean vector length r", f"{lv['r']:.3f}", ""),
                     (f"{nm}: Rayleigh z = n r^2", f"{len(lv['chosen_deg']) * lv['r'] ** 2:.3g}", ""),
                     (f"{nm}: Rayleigh p", f"{lv['rayleigh_p']:.3g}", ""),
                     (f"{nm}: V-test u (goal {t['goal_deg']:g} deg)", f"{lv['v_u']:.2f} (p = {lv['v_p']:.2g})", ""),
                     (f"{nm}: ambiguous decodes", f"{100 * np.mean(lv['ambiguous']):.0f}", "%"),
                     (f"{nm}: rms decoding error", f"{np.sqrt(np.mean(np.asarray(lv['error_deg']) ** 2)):.2f}",
                      "deg"),
                     (f"{nm}: trials", f"{len(lv['chosen_deg'])}", "")]
        secs.append(Section("Simulated orientation trials", rows, note=(
            f"Chosen headings, their mean and the goal are in degrees clockwise from geographic north; magnetic "
            f"north lies {g['field']['D_deg']:g} deg east of it (declination). The simulated bird knows the field "
            "it reads, so it decodes geographic heading. A bird whose decode is ambiguous (two likelihood peaks, "
            "typically 180 deg apart) picks one at random, which is included in the rms decoding error. "
            "Rayleigh test p from Zar's approximation; V-test "
            "against the goal, p from the normal tail (Zar 2010, ch. 27).")))
    return secs


def write_outputs(res: Results, outdir: str | Path, *, force: bool = False, formats=("png", "svg"),
                  dpi: int = 300, animation: bool = True, title: str | None = None,
                  progress_factory: ProgressFactory | None = None, save_results: bool = True) -> dict:
    """Write ``results.h5``, ``figures/`` and the report (``index.html``, ``report.md``) into ``outdir``.

    ``outdir`` must not exist or be empty, unless ``force`` (then files of the same names are
    replaced and other files are kept).  Everything is first written into a hidden staging folder
    beside ``outdir`` and moved in only when complete, so an interrupted or failed run leaves
    ``outdir`` as it was.  Returns the paths written.
    """
    import shutil
    import tempfile

    from retina.report import write_report

    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise InputError("exists and is not a folder", source=outdir)
    if outdir.exists() and any(outdir.iterdir()) and not force:
        raise InputError("folder exists and is not empty; pass --force to overwrite it", source=outdir)
    if not outdir.parent.exists():
        raise InputError(f"folder {outdir.parent} does not exist", source=outdir)
    pf = progress_factory or _noprog
    stage = Path(tempfile.mkdtemp(prefix=f".{outdir.name}.", suffix=".partial", dir=outdir.parent))
    try:
        if save_results:
            _save(res, stage / "results.h5", force=True)
        entries = make_figures(res, stage / "figures", formats=formats, dpi=dpi, animation=animation,
                               progress=pf("figures", 7))
        name = res.provenance.get("scenario_name", "scenario")
        write_report(
            stage, title or f"retina-compass report: {name}", key_numbers(res), entries,
            intro=f"Scenario '{name}', seed {res.provenance.get('seed')}. Results in results.h5.",
            scenario_text=res.provenance.get("scenario_toml", ""),
            provenance={k: v for k, v in res.provenance.items() if k not in ("scenario_toml", "yield_provenance")},
            force=True)
        outdir.mkdir(exist_ok=True)
        for src in sorted(stage.rglob("*")):
            if src.is_file():
                dst = outdir / src.relative_to(stage)
                dst.parent.mkdir(parents=True, exist_ok=True)
                os.chmod(src, 0o644)  # staging files are private (mkstemp); a report is for reading
                os.replace(src, dst)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
    return {"results": outdir / "results.h5", "html": outdir / "index.html", "markdown": outdir / "report.md",
            "figures": outdir / "figures"}


# ------------------------------------------------------------------------------------------------
# shared by the subcommands in retina/commands/ (demo, patterns, scan, precision, trials, report)


class TqdmProgress:
    """A progress factory drawing one tqdm bar per step on stderr; ``close()`` ends them all."""

    def __init__(self, enabled: bool = True):
        self.enabled = enabled
        self._bars = []

    def __call__(self, desc: str, total: int):
        if not self.enabled:
            return None
        from tqdm import tqdm

        state = {"bar": None}

        def progress(done: int, tot: int):
            if state["bar"] is None:
                state["bar"] = tqdm(total=tot or total or None, desc=desc, unit="step", leave=False,
                                    file=__import__("sys").stderr, dynamic_ncols=True)
                self._bars.append(state["bar"])
            bar = state["bar"]
            if tot and bar.total != tot:
                bar.total = tot
            bar.n = done
            bar.refresh()
            if bar.total and done >= bar.total:
                bar.close()

        return progress

    def close(self):
        for b in self._bars:
            b.close()
        self._bars.clear()


def add_common_arguments(p, *, output_required: bool = False, default_output: str | None = None) -> None:
    """The options every scenario subcommand shares."""
    p.add_argument("-o", "--output", metavar="DIR", required=output_required, default=default_output,
                   help="output folder (results.h5, figures/, index.html, report.md); default: the "
                        "scenario's [output] dir" if default_output is None else
                        f"output folder (default: {default_output})")
    p.add_argument("--force", action="store_true", help="write into an existing, non-empty output folder")
    p.add_argument("--quick", action="store_true",
                   help="reduced grids, receptors, repeats and trials (a smoke test, not a result)")
    p.add_argument("--seed", type=int, default=None, help="override the scenario's [scenario] seed")
    p.add_argument("--formats", default=None, metavar="LIST",
                   help="figure formats, comma-separated among png,svg,pdf (default: the scenario's)")
    p.add_argument("--dpi", type=int, default=None, help="PNG resolution (default: the scenario's, 300)")
    p.add_argument("--no-animation", action="store_true", help="skip the head-scan GIF")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bars; print only the summary")


def _apply_overrides(sc: Scenario, args) -> Scenario:
    changes: dict = {}
    if getattr(args, "seed", None) is not None:
        if args.seed < 0:
            raise InputError(f"expected a seed >= 0, got {args.seed}", key="--seed")
        changes["scenario"] = {"seed": int(args.seed)}
    if getattr(args, "headings", None):
        try:
            hs = [float(x) for x in args.headings.split(",") if x.strip()]
        except ValueError:
            raise InputError(f"expected comma-separated numbers, got {args.headings!r}", source="command line",
                             key="--headings") from None
        changes["pose"] = {"headings_deg": hs}
    out = {}
    if getattr(args, "formats", None):
        out["formats"] = [f.strip() for f in args.formats.split(",") if f.strip()]
    if getattr(args, "dpi", None) is not None:
        out["dpi"] = int(args.dpi)
    if getattr(args, "no_animation", False):
        out["animation"] = False
    if out:
        changes["output"] = out
    if not changes:
        return sc
    try:
        return sc.replace(**changes)
    except InputError as exc:
        raise InputError(exc.detail, source="command line", key=exc.key) from None


def run_command(args, stages, *, scenario_path=None, title: str | None = None) -> int:
    """Load the scenario, run ``stages``, write results, figures and report; print a summary."""
    import time

    from retina.scenario import load_scenario

    t0 = time.perf_counter()
    sc = _apply_overrides(load_scenario(scenario_path or args.scenario), args)
    out = args.output
    if out is None:
        out = sc["output"]["dir"]
    out = Path(out)
    # Refuse early, before any computation, when the output would be overwritten.
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.force:
        raise InputError("output folder exists and is not empty; pass --force to overwrite it", source=out)
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist", source=out)
    bars = TqdmProgress(enabled=not args.quiet)
    try:
        res = run(sc, quick=args.quick, stages=stages, progress_factory=bars)
        o = res.scenario["output"]
        paths = write_outputs(res, out, force=args.force, formats=o["formats"], dpi=o["dpi"],
                              animation=o["animation"], title=title, progress_factory=bars)
    finally:
        bars.close()
    print(summary_text(res, paths, time.perf_counter() - t0))
    return 0


def _informative() -> float:
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG

    return INFORMATIVE_BOUND_DEG


def summary_text(res: Results, paths: dict, seconds: float) -> str:
    """A few lines in words for stdout."""
    g = res.groups
    y = g["yield_function"]
    lines = [f"scenario '{res.provenance.get('scenario_name')}' (seed {res.provenance.get('seed')}"
             + (", quick" if res.provenance.get("quick") else "") + f") done in {seconds:.1f} s",
             f"  yield function: mean {y['mean']:.4f}, relative anisotropy {100 * y['relative']:.2f} %"]
    if "patterns" in g:
        lines.append(f"  modulation depth {100 * g['patterns']['depth'].min():.2f}-"
                     f"{100 * g['patterns']['depth'].max():.2f} % over {g['patterns']['depth'].size} headings")
    if "precision" in g:
        q = g["precision"]
        lines.append("  heading bound (single pose): " + ", ".join(
            (f"{b:.3g} deg" if np.isfinite(b) and b <= _informative() else "not informative")
            + f" at {p:g} photons" for p, b in zip(q["photons"], q["bound_single_deg"])))
    if "trials" in g:
        for nm, lv in g["trials"]["levels"].items():
            lines.append(f"  trials, {nm} light: mean {lv['mean_deg']:.0f} deg, r = {lv['r']:.2f}, "
                         f"Rayleigh p = {lv['rayleigh_p']:.2g}")
    lines.append(f"  report: {paths['html']}  (Markdown: {paths['markdown'].name}, data: {paths['results'].name})")
    return "\n".join(lines)
