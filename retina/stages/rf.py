"""Stages ``rf`` and ``rf_sweep``: radio-frequency conditions side by side with the control, and a
frequency sweep at a fixed amplitude for one or more pair lifetimes.

Conventions (owned here)
------------------------
- Every RF yield function is computed at ``[rf] degree``, and so is the control ("off"): the
  static yield function fitted on the same Lebedev grid (:meth:`YieldFunction.from_system`), so
  conditions and control share the same truncation and differ only by the RF.
- A tone is computed exactly: the separable RF method (:mod:`retina.spin.rf_separable`) when the
  pair is in its scope, else the whole-pair Floquet solver (:mod:`retina.spin.rf`), averaged over
  the RF phase and over the azimuth of the RF direction about the static field.
- A band is computed at second order in the amplitude (:mod:`retina.spin.broadband`); its
  weak-field parameter ``eta = gamma_e b_rms / k`` is stored and flagged above
  :data:`retina.spin.broadband.WEAK_LIMIT`.
- A coil (``direction = "coil"``) is a direction fixed in the world frame (north-east-down).  The
  static field is fixed in the world too, so the angle ``a`` between them is fixed, and the
  condition is computed with the RF direction at angle ``a`` to the static field, averaged over its
  azimuth about it.  This is exact when the molecules' azimuths about the field are spread
  uniformly, and an approximation otherwise (a molecule's yield then depends on where the coil's
  azimuth falls in its own frame, which a yield function of the field direction alone cannot hold).
- Metrics per condition, with the definitions of :mod:`retina.stages.precision` and
  :mod:`retina.stages.trials`: modulation depth at the scenario's headings, the Cramer-Rao bound
  (rms over headings) of one pose and of the head scan at every light level, and simulated trials
  at every light level.  Every condition draws the same random numbers (the generator of
  ``"rf/<light level>"``), so differences between conditions are the RF's, not sampling noise.
- Sweep: for each lifetime (``k_S = k_T = k = 1 / lifetime``) one second-order response
  (:func:`retina.spin.broadband.response`) per direction of the degree's hemisphere grid gives the
  static yield function and the yield change per nT^2 at every frequency, perpendicular
  (azimuth-averaged) and parallel (:func:`sweep_spectra`, cached by content); a tone of amplitude
  ``b`` gives the yield function ``c0 + b^2 D(f)``.  The single-pose bound is computed from the
  coefficients through :class:`BoundModel` (the counts are linear in the coefficients, so one
  evaluation per basis function serves every frequency and amplitude).  At the swept frequencies
  ``sweep_MHz`` the bound is computed from the yield function itself; when the weak-field parameter
  ``eta = gamma_e b / k`` at ``sweep_nT`` exceeds :data:`retina.spin.broadband.WEAK_LIMIT`, those
  yield functions come from the exact tone method instead (slower).  On the curve (``sweep_points``
  log-spaced frequencies) the bound's response is linearised in ``b^2``:
  ``(B / B0)^2 = 1 + b^2 s(f)`` with ``s = g . D(f)`` and ``g`` the exact gradient of ``(B / B0)^2``
  with respect to the coefficients at the control.  ``linearisation_error`` compares the two at the
  swept frequencies.  Trials (``trials.n_trials``, scan of ``trials.scan_steps`` poses, at
  ``sweep_light``) run for the control and at the swept frequency with the largest perpendicular
  bound.
- Onset of disorientation (per lifetime): the lowest curve frequency at which the perpendicular
  field of ``sweep_nT`` raises the single-pose bound by ``onset_rise`` (0.1 = 10 %) over the
  control's, interpolated linearly in log frequency (:func:`first_crossing`); NaN when no curve
  frequency reaches it.  The ratio of bounds does not depend on the light level.
- Threshold amplitude (per lifetime, frequency and polarisation): the amplitude giving that rise,
  ``b_q = sqrt(((1 + q)^2 - 1) / s(f))`` (:func:`threshold_amplitude`; NaN where the field does not
  raise the bound), with ``eta`` at that amplitude.  It is the planning curve "amplitude needed to
  disorient against frequency"; where ``eta > WEAK_LIMIT`` it is an extrapolation of second order.
  The onset at any amplitude ``b`` is the lowest frequency at which ``b_q(f) <= b``.

Two frequency scales (why the onset moves with the lifetime)
-------------------------------------------------------------
In the eigenbasis of the static Hamiltonian the response is a sum over lines ``ij`` of
``Re[W_ij (1 / (G_ij + i w) + 1 / (G_ij - i w))]`` with ``G_ij = -k - i (E_i - E_j)``
(:mod:`retina.spin.broadband`).  Lines with ``E_i = E_j`` (populations, degenerate levels) give
``-2 k W / (k^2 + w^2)``: a Lorentzian of half-width ``k`` centred at zero frequency.  Lines at
``|E_i - E_j| >> w`` are flat in ``w``.  So for frequencies below the pair's line spacings
``R(w) = C + A / (1 + (w / k)^2)``.  ``A`` comes from paths through a population: a coherence of
``rho0`` (``~ 1 / delta``) turned into a population by the RF, kept for ``1 / (k +/- i w)`` and turned
back (``~ 1 / delta``), times the prefactor ``k``: ``A ~ V^2 / delta^2``, independent of ``k``.  It is
the energy modulation: a field much slower than the recombination rate acts like a slowly changing
static field (quasi-static), and the part of its effect that comes from shifting the energy levels
averages out once the field changes within the lifetime, ``w > k``; the part from turning the
eigenstates (``C``) follows the field adiabatically up to the line spacings.  When ``A`` and ``C``
do not depend on ``k`` (line spacings much larger than ``k``; the tests check it) the response
leaves its quasi-static value ``R(0) = A + C`` by a fixed fraction ``e`` at
``w = k sqrt(e |R(0)| / (|A| - e |R(0)|))``: a fixed multiple of ``k``, so that frequency scales as
1 / lifetime (:func:`departure_frequency` with ``e = 0.5``, stored as ``departure_MHz``).  A field
parallel to the static one modulates only its strength, so its response is dominated by ``A``:
``departure_MHz`` is taken from the parallel response.  The second scale is the pair's own
transition frequencies (hyperfine and Larmor, about 0.1-50 MHz), which do not depend on the
lifetime: there the response has resonant lines of width ``k`` whose height grows with the
lifetime (as ``eta^2``), so a longer-lived pair needs a weaker field at resonance, and the
threshold curve shows both scales.  A rise of the bound by 10 % needs the RF to turn an electron
spin by a sizeable angle within a lifetime (``eta`` of order 1 for the demo pair), outside second
order: there the threshold curve is indicative and an exact tone (``[[rf.conditions]]``,
``retina rf``) checks it.

RF exposure: the numbers describe a model.  Experiments with RF transmitters follow the usual
cautions and local regulations and need the ethics approval of the place where they are done.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import GridModel, Stage, depth, grid_offsets, rms_bound, signal_model, stage_rng

__all__ = ["compute_rf", "compute_rf_sweep", "rf_yield_function_for", "condition_record", "sweep_spectra",
           "BoundModel", "relative_anisotropy", "threshold_amplitude", "first_crossing", "departure_frequency",
           "curve_frequencies", "condition_yield_function", "STAGE", "SWEEP_STAGE"]


def _system(sc: Scenario):
    from retina.errors import InputError
    from retina.spin.io import load_system

    kind, path = sc.yield_source
    if kind != "system":
        raise InputError(f"RF conditions and sweeps need the spin system (yield.system), but the yield function "
                         f"comes from yield.{kind}; remove [rf] conditions and sweep_MHz or name the system",
                         source=sc.source, key="rf")
    return load_system(path)


def _field_uT(sc: Scenario, fld) -> float:
    return float(sc["yield"]["field_uT"]) if sc["yield"]["field_uT"] is not None else float(fld.F_uT)


def condition_record(cond: dict, fld) -> dict:
    """What determines a condition's yield function (plain values; for the cache key and the results).

    A coil becomes its angle to the static field (module docstring).
    """
    from retina.eye.field import field_vector

    rec = {"kind": cond["kind"], "direction": cond["direction"]}
    if cond["kind"] == "off":
        return rec
    if cond["direction"] == "angle":
        rec["angle_deg"] = float(cond["angle_deg"])
    elif cond["direction"] == "coil":
        b = np.asarray(field_vector(fld.F_uT, fld.I_deg, fld.D_deg), float)
        c = np.asarray(cond["coil"], float)
        cosang = abs(float(b @ c) / (np.linalg.norm(b) * np.linalg.norm(c)))   # n and -n are one RF field
        rec["angle_deg"] = float(np.degrees(np.arccos(min(1.0, cosang))))
        rec["coil"] = [float(x) for x in c]
    if cond["kind"] == "tone":
        rec.update(frequency_MHz=float(cond["frequency_MHz"]), amplitude_nT=float(cond["amplitude_nT"]))
    else:
        rec.update(band_MHz=[float(x) for x in cond["band_MHz"]],
                   asd_nT_per_rtHz=None if cond["asd_nT_per_rtHz"] is None else float(cond["asd_nT_per_rtHz"]),
                   rms_nT=None if cond["rms_nT"] is None else float(cond["rms_nT"]))
    return rec


def _angle(rec) -> float:
    return {"perpendicular": 90.0, "parallel": 0.0}.get(rec["direction"], rec.get("angle_deg", 90.0))


def _key(system, field_uT, degree, check_points, rec, tol) -> str:
    import retina
    from retina.spin.io import dump_system

    record = {"system": dump_system(system), "field_uT": repr(float(field_uT)), "degree": int(degree),
              "check_points": int(check_points), "rf": rec, "tol": repr(float(tol)), "retina": retina.__version__,
              "what": "rf yield function"}
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode("utf-8")).hexdigest()


def rf_yield_function_for(system, field_uT, rec: dict, *, degree: int, check_points: int = 6, tol: float = 1e-8,
                          cache: bool = True, progress=None):
    """The RF yield function of one condition record (:func:`condition_record`), cached by content.

    Returns
    -------
    YieldFunction
        Provenance of :func:`retina.spin.rf.rf_yield_function` (tones) or ``kind = "rf_band"`` with
        ``eta``, ``b_rms_nT`` (bands); ``input_hash`` is the cache key.
    """
    import datetime as _dt

    from retina import sphere
    from retina.spin import broadband as bb
    from retina.spin import rf
    from retina.yieldfn import YieldFunction, content_hash

    store = key = None
    if cache:
        from retina.cache import YieldCache

        store = YieldCache()
        key = _key(system, field_uT, degree, check_points, rec, tol)
        hit = store.get(key)
        if hit is not None:
            yf = YieldFunction.from_record(hit)
            yf.from_cache = True
            return yf
    ang = _angle(rec)
    if rec["kind"] == "tone":
        if rec["direction"] == "parallel":
            kw = dict(rf_direction="parallel")
        else:
            kw = dict(rf_direction="perpendicular", angle_deg=ang)
        yf = rf.rf_yield_function(system, field_uT, rf_MHz=rec["frequency_MHz"], rf_nT=rec["amplitude_nT"],
                                  degree=degree, check_points=check_points, tol=tol, progress=progress, **kw)
        prov = dict(yf.provenance)
    else:
        grid = sphere.grid_for_degree(degree)
        half, full = grid.hemisphere()
        check = sphere.fibonacci(int(check_points), hemisphere=True)
        dirs = np.concatenate([grid.points[half], -check.points])
        kind = "angle" if rec["direction"] in ("angle", "coil") else rec["direction"]
        vals, info = bb.band_yields(system, field_uT, dirs, rec["band_MHz"], rf_direction=kind, angle_deg=ang,
                                    asd_nT_per_rtHz=rec["asd_nT_per_rtHz"], rms_nT=rec["rms_nT"], progress=progress)
        h = half.size
        coeffs = sphere.fit_even(vals[:h][full], grid, degree)
        err = float(np.max(np.abs(sphere.evaluate(coeffs, -check.points) - vals[h:])))
        prov = {"kind": "rf_band", "system_name": system.name, "field_uT": float(field_uT), "method": "broadband",
                "rf_band_MHz": " ".join(f"{x:g}" for x in rec["band_MHz"]), "rf_b_rms_nT": info["b_rms_nT"],
                "rf_eta": info["eta"], "rf_weak_valid": bool(info["valid"]), "rf_direction": rec["direction"],
                "rf_angle_deg": ang, "degree": degree, "grid": grid.name, "computed_points": int(h),
                "check_points": len(check), "truncation_error_max": err,
                "date_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                "content_hash": content_hash(coeffs, degree)}
        yf = YieldFunction(coeffs, degree, prov, err)
    if store is not None:
        prov["input_hash"] = key
        yf = YieldFunction(yf.coeffs, yf.degree, prov, yf.fit_error)
        try:
            store.put(key, yf)
        except OSError as exc:  # the result stands; only the cache entry is lost
            import warnings

            warnings.warn(f"could not write the RF cache entry: {exc}", stacklevel=2)
    return yf


def _metrics(sc: Scenario, built, yf, *, trials_at=None, scan=True) -> dict:
    """Depth, bounds and trials of a retina whose molecules have yield function ``yf``."""
    from retina.build import build_retina
    from retina.eye.pose import Pose
    from retina.readout.fisher import gain_schur, poisson_information
    from retina.readout.trials import simulate_trials
    from retina.stages._common import scan_yaws

    model = build_retina(sc, yf, built.receptors)
    fld = built.field
    ro = sc["readout"]
    gain = "free" if ro["nuisance"] == "gain" else "known"
    names, photons = sc["light"]["names"], np.asarray(sc["light"]["photons"], float)
    out: dict = {}
    p = sc["pose"]
    out["depth"] = depth(np.array([model.pattern(Pose(h, p["pitch_deg"], p["roll_deg"]), fld).yields
                                   for h in p["headings_deg"]]))
    m1 = GridModel(signal_model(sc, model, fld), model.degree, gain)
    info1 = (gain_schur if gain == "free" else poisson_information)(m1.lam1, m1.dlam1)
    out["bound_single_deg"] = rms_bound(photons, info1)
    tr = sc["trials"]
    amp = sc["scan"]["amplitude_deg"]
    offs = grid_offsets(np.linspace(-amp, amp, tr["scan_steps"]) if tr["scan_steps"] > 1 else np.zeros(1))
    mk = GridModel(signal_model(sc, model, fld, pitch=sc["scan"]["pitch_deg"]), model.degree, gain)
    if scan:
        sc_offs = grid_offsets(scan_yaws(sc) - sc["scan"]["heading_deg"])
        infok = mk.scan_information(sc_offs, "global_gain" if gain == "free" else "none")
        out["bound_scan_deg"] = rms_bound(photons, infok)
    levels = list(zip(names, photons)) if trials_at is None else [(trials_at, photons[names.index(trials_at)])]
    for key in ("trial_r", "trial_mean_deg", "rayleigh_p", "v_p"):
        out[key] = np.empty(len(levels))
    for i, (nm, ph) in enumerate(levels):
        r = simulate_trials(mk.truth(ph), mk.decoder(ph), tr["n_trials"], goal_deg=tr["goal_deg"],
                            scan_offsets_deg=offs, rng=stage_rng(sc.seed, f"rf/{nm}"))
        out["trial_r"][i] = r.rayleigh.r
        out["trial_mean_deg"][i] = r.rayleigh.mean_deg
        out["rayleigh_p"][i] = r.rayleigh.p
        out["v_p"][i] = r.v_test.p
    return out


def compute_rf(built, progress=None) -> dict | None:
    """Every RF condition of ``[rf]`` beside the control (module docstring); None without conditions.

    Returns
    -------
    dict
        ``names`` (JSON list of the C condition names, the control "off" first unless the scenario
        lists its own), ``light_names`` (JSON list), ``light_photons (V,)``, ``degree``, and per
        condition ``i`` a sub-group ``conditions/c<i>`` with ``name``, ``record`` (JSON text),
        ``coeffs``, ``relative_anisotropy``,
        ``mean_yield``, ``fit_error``, ``depth (H,)``, ``bound_single_deg (V,)``,
        ``bound_scan_deg (V,)``, ``trial_r``, ``trial_mean_deg``, ``rayleigh_p``, ``v_p`` (V,),
        ``method`` and, for bands, ``eta`` and ``weak_valid``.
    """
    sc = built.scenario
    rfc = sc["rf"]
    conds = list(rfc["conditions"])
    if not conds:
        return None
    if not any(c["kind"] == "off" for c in conds):
        conds.insert(0, {"name": "off", "kind": "off", "direction": "perpendicular"})
    system = _system(sc)
    field = _field_uT(sc, built.field)
    L = int(rfc["degree"])
    out = {"names": json.dumps([c["name"] for c in conds]), "light_names": json.dumps(list(sc["light"]["names"])),
           "light_photons": np.asarray(sc["light"]["photons"], float), "degree": L, "conditions": {}}
    for i, c in enumerate(conds):
        rec = condition_record(c, built.field)
        if c["kind"] == "off":
            from retina.yieldfn import YieldFunction

            yf = YieldFunction.from_system(system, field, L, check_points=rfc["check_points"])
            method = "static (control, same grid)"
        else:
            yf = rf_yield_function_for(system, field, rec, degree=L, check_points=rfc["check_points"],
                                       tol=rfc["tol"], cache=rfc["cache"])
            method = str(yf.provenance.get("method", ""))
        an = yf.anisotropy()
        grp = {"name": c["name"], "record": json.dumps(rec, sort_keys=True), "coeffs": np.asarray(yf.coeffs),
               "relative_anisotropy": float(an.relative), "mean_yield": float(an.mean),
               "fit_error": float(yf.fit_error) if yf.fit_error is not None else float("nan"), "method": method}
        if c["kind"] == "band":
            grp["eta"] = float(yf.provenance["rf_eta"])
            grp["weak_valid"] = int(bool(yf.provenance["rf_weak_valid"]))
            grp["b_rms_nT"] = float(yf.provenance["rf_b_rms_nT"])
        grp.update(_metrics(sc, built, yf))
        out["conditions"][f"c{i}"] = grp
        if progress:
            progress(i + 1, len(conds))
    return out


def _with_lifetime(system, lifetime_us):
    import dataclasses

    k = 1e6 / float(lifetime_us)
    return dataclasses.replace(system, k_singlet=k, k_triplet=k)


def curve_frequencies(freqs_MHz, points: int) -> np.ndarray:
    """The sweep's curve frequencies: ``points`` log-spaced between the lowest and highest of
    ``freqs_MHz``, joined with ``freqs_MHz`` itself (sorted, duplicates removed), MHz."""
    f = np.asarray(freqs_MHz, float)
    if points >= 2 and f.max() > f.min():
        f = np.concatenate([np.geomspace(f.min(), f.max(), int(points)), f])
    return np.unique(f)


def _spectra_key(system, field_uT, degree, curve) -> str:
    import retina
    from retina.spin.io import dump_system

    record = {"system": dump_system(system), "field_uT": repr(float(field_uT)), "degree": int(degree),
              "curve_MHz": [repr(float(x)) for x in curve], "retina": retina.__version__,
              "what": "rf sweep response spectra"}
    return hashlib.sha256(json.dumps(record, sort_keys=True).encode("utf-8")).hexdigest()


def sweep_spectra(system, field_uT, degree: int, curve_MHz, *, cache: bool = True):
    """The control's coefficients and the coefficients of the yield change per nT^2 of a weak tone.

    One second-order response (:func:`retina.spin.broadband.response`) per direction of the
    degree's hemisphere grid serves every frequency and amplitude (module docstring, "Sweep").
    Cached by content (``rf-spectra/<sha256>.npz`` in the cache folder, :mod:`retina.cache`).

    Parameters
    ----------
    system : SpinSystem
        Equal rates, no relaxation.
    field_uT : float
    degree : int
        Even harmonic degree ``L``.
    curve_MHz : array_like (Y,)
        Frequencies, MHz.
    cache : bool

    Returns
    -------
    static : ndarray (K,)
        Coefficients of the yield function without RF (``K = (L + 1)(L + 2) / 2``).
    change : ndarray (2, Y, K)
        Coefficients of the yield change per nT^2 of amplitude squared, perpendicular
        (azimuth-averaged) and parallel.
    """
    from retina import sphere
    from retina.cache import default_cache_dir
    from retina.spin import broadband as bb

    curve = np.asarray(curve_MHz, float)
    path = None
    if cache:
        path = default_cache_dir() / "rf-spectra" / (_spectra_key(system, field_uT, degree, curve) + ".npz")
        try:
            with np.load(path) as z:
                static, change = np.array(z["static"]), np.array(z["change"])
            if change.shape == (2, curve.size, static.size):
                return static, change
        except (OSError, KeyError, ValueError):
            pass
    grid = sphere.grid_for_degree(degree)
    half, full = grid.hemisphere()
    vals = np.empty(half.size)
    dvals = np.empty((2, curve.size, half.size))
    for j, d in enumerate(grid.points[half]):
        r = bb.response(system, field_uT, d)
        vals[j] = r.static
        dvals[:, :, j] = r.tones(curve, [bb.polarisation_tensor(r.direction, k) for k in ("perpendicular",
                                                                                           "parallel")])
    static = sphere.fit_even(vals[full], grid, degree)
    change = sphere.fit_even(dvals[..., full], grid, degree)
    if path is not None:
        import io
        import warnings

        from retina.io.atomic import atomic_write_bytes

        buf = io.BytesIO()
        np.savez(buf, static=static, change=change)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            atomic_write_bytes(path, buf.getvalue(), force=True)
        except OSError as exc:   # the result stands; only the cache entry is lost
            warnings.warn(f"could not write the RF spectra cache entry: {exc}", stacklevel=2)
    return static, change


class BoundModel:
    """The single-pose heading information as a function of the yield-function coefficients.

    The expected counts and their heading derivative are linear in the coefficients (ordering
    average, pattern and photon catch are all linear maps of the yield function), so they are
    computed once for each basis coefficient vector and then combined for any yield function of
    the same degree; the information (:func:`retina.readout.fisher.gain_schur` or
    :func:`~retina.readout.fisher.poisson_information`) and the rms bound follow as in
    :mod:`retina.stages.precision`.

    Parameters
    ----------
    sc : Scenario
    built : Built
    degree : int
    """

    def __init__(self, sc, built, degree: int):
        from retina import sphere
        from retina.build import build_retina
        from retina.signal.noise import trig_interp_matrix
        from retina.stages._common import GRID
        from retina.yieldfn import YieldFunction

        K = sphere.n_coeffs(degree)
        self.gain = sc["readout"]["nuisance"] == "gain"
        grid = np.arange(GRID) * 360.0 / GRID
        lam, dlam = [], []
        for k in range(K):
            model = build_retina(sc, YieldFunction(np.eye(K)[k], degree), built.receptors)
            nodes, a, b = signal_model(sc, model, built.field).fourier_nodes(degree)
            lam.append(a)
            dlam.append(b)
        # the model is a trigonometric polynomial of degree L in the heading: 2 L + 1 nodes hold it
        # exactly (SignalModel.expected_and_derivative_fourier), interpolated to the grid by W
        self.w = trig_interp_matrix(np.deg2rad(nodes), np.deg2rad(grid), int(degree))     # (G, M)
        self.lam = np.stack(lam)      # (K, M, N) at one photon per receptor
        self.dlam = np.stack(dlam)

    def _counts(self, coeffs):
        c = np.asarray(coeffs, float)
        return self.w @ np.tensordot(c, self.lam, axes=1), self.w @ np.tensordot(c, self.dlam, axes=1)

    def info(self, coeffs) -> np.ndarray:
        """Heading information per photon at the grid headings, ``(G,)``, for coefficients ``(K,)``."""
        from retina.readout.fisher import gain_schur, poisson_information

        lam, dlam = self._counts(coeffs)
        return (gain_schur if self.gain else poisson_information)(np.maximum(lam, 0.0), dlam)

    def bound(self, coeffs, photons) -> np.ndarray:
        """The rms bound (degrees) at each photon level, ``(V,)`` (:func:`rms_bound`)."""
        return rms_bound(np.asarray(photons, float), self.info(coeffs))

    def power_gradient(self, coeffs) -> np.ndarray:
        """``d(B^2 / B0^2) / dc`` at ``coeffs`` (B the bound, B0 its value there), ``(K,)``: exact.

        ``B^2`` is proportional to ``mean_h 1 / I_h``, so the gradient is
        ``-mean_h(I_h^-2 dI_h/dc) / mean_h(1 / I_h)``, with ``dI/dc_k`` of
        ``I = sum dlam^2 / lam [- (sum dlam)^2 / sum lam]`` taken term by term.
        """
        lam, dlam = self._counts(coeffs)
        r = dlam / lam
        info = np.sum(dlam * r, axis=-1)
        s, sd = lam.sum(-1), dlam.sum(-1)
        if self.gain:
            info = info - sd**2 / s
        inv = 1.0 / info
        grad = np.empty(self.lam.shape[0])
        for k in range(grad.size):
            lk, dk = self.w @ self.lam[k], self.w @ self.dlam[k]
            di = np.sum(2.0 * r * dk - r * r * lk, axis=-1)
            if self.gain:
                di -= 2.0 * sd / s * dk.sum(-1) - (sd / s) ** 2 * lk.sum(-1)
            grad[k] = -np.mean(di * inv**2) / np.mean(inv)
        return grad


def threshold_amplitude(sensitivity, rise: float) -> np.ndarray:
    """The amplitude whose bound is ``1 + rise`` times the control's, at second order (nT).

    Derived: at second order the yield change is ``b^2 D(f)``, so the bound's square changes as
    ``B^2 / B0^2 = 1 + b^2 s(f)`` to first order in ``b^2`` with ``s = g . D`` (``g`` the
    gradient of ``B^2 / B0^2`` with respect to the coefficients, :meth:`BoundModel.power_gradient`);
    ``B / B0 = 1 + rise`` then needs ``b^2 = ((1 + rise)^2 - 1) / s``.  NaN where ``s <= 0`` (the
    field does not raise the bound at second order).

    Parameters
    ----------
    sensitivity : array_like
        ``s(f)`` in nT^-2.
    rise : float
        Relative rise of the bound, > 0.

    Returns
    -------
    ndarray
        Amplitudes in nT, the shape of ``sensitivity``.
    """
    s = np.asarray(sensitivity, float)
    need = (1.0 + float(rise)) ** 2 - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(s > 0, np.sqrt(need / np.where(s > 0, s, 1.0)), np.nan)


def first_crossing(freqs_MHz, values, level: float) -> float:
    """The lowest frequency at which ``values`` reaches ``level``, linear in log frequency.

    Parameters
    ----------
    freqs_MHz : array_like (F,)
        Increasing, > 0.
    values : array_like (F,)
    level : float

    Returns
    -------
    float
        MHz: the first point itself when it already reaches ``level``, else the log-linear
        interpolation between the last point below and the first at or above it; NaN when no point
        reaches it.
    """
    f = np.asarray(freqs_MHz, float)
    v = np.asarray(values, float)
    hit = np.flatnonzero(v >= level)
    if hit.size == 0:
        return float("nan")
    i = int(hit[0])
    if i == 0:
        return float(f[0])
    x0, x1 = np.log(f[i - 1]), np.log(f[i])
    t = (level - v[i - 1]) / (v[i] - v[i - 1])
    return float(np.exp(x0 + t * (x1 - x0)))


def departure_frequency(freqs_MHz, response, fraction: float = 0.5) -> float:
    """Where a response leaves its quasi-static value: the lowest frequency at which
    ``|R(f) - R(f_0)| >= fraction |R(f_0)|``, ``f_0`` the lowest frequency (MHz; NaN if never).

    Derived (module docstring, "Two frequency scales"): below the pair's line spacings the
    response is ``C + A / (1 + (2 pi f / k)^2)`` with ``A`` and ``C`` set by the level structure,
    so this frequency is a fixed multiple of ``k / (2 pi)`` and moves as 1 / lifetime.
    """
    r = np.asarray(response, float)
    if r[0] == 0:
        return float("nan")
    return first_crossing(freqs_MHz, np.abs(r - r[0]) / abs(r[0]), fraction)


def relative_anisotropy(coeffs, degree: int) -> float:
    """``(max - min) / mean`` of a yield function over the sphere.

    Degree 2 exactly: an even function of degree <= 2 on the unit sphere is a quadratic form
    ``b^T M b`` (``M`` from its values at the axes and the axis bisectors), whose extremes are the
    eigenvalues of ``M``; higher degrees through :meth:`retina.yieldfn.YieldFunction.anisotropy`.
    """
    from retina import sphere
    from retina.yieldfn import YieldFunction

    yf = YieldFunction(coeffs, degree)
    if degree != 2:
        return float(yf.anisotropy().relative)
    e = np.eye(3)
    pairs = [(0, 1), (0, 2), (1, 2)]
    pts = np.concatenate([e, [(e[i] + e[j]) / np.sqrt(2.0) for i, j in pairs]])
    v = sphere.evaluate(np.asarray(coeffs, float), pts)
    m = np.diag(v[:3])
    for n, (i, j) in enumerate(pairs):
        m[i, j] = m[j, i] = v[3 + n] - 0.5 * (v[i] + v[j])
    w = np.linalg.eigvalsh(m)
    return float((w[-1] - w[0]) / yf.mean)


def _trial_r(sc, built, coeffs, degree: int, light: str) -> float:
    """Mean vector length of the simulated trials at one light level (as :func:`_metrics`)."""
    from retina.build import build_retina
    from retina.readout.trials import simulate_trials
    from retina.yieldfn import YieldFunction

    model = build_retina(sc, YieldFunction(coeffs, degree), built.receptors)
    gain = "free" if sc["readout"]["nuisance"] == "gain" else "known"
    tr = sc["trials"]
    amp = sc["scan"]["amplitude_deg"]
    offs = grid_offsets(np.linspace(-amp, amp, tr["scan_steps"]) if tr["scan_steps"] > 1 else np.zeros(1))
    mk = GridModel(signal_model(sc, model, built.field, pitch=sc["scan"]["pitch_deg"]), model.degree, gain)
    ph = float(sc["light"]["photons"][list(sc["light"]["names"]).index(light)])
    r = simulate_trials(mk.truth(ph), mk.decoder(ph), tr["n_trials"], goal_deg=tr["goal_deg"],
                        scan_offsets_deg=offs, rng=stage_rng(sc.seed, f"rf/{light}"))
    return float(r.rayleigh.r)


def compute_rf_sweep(built, progress=None) -> dict | None:
    """The frequency sweep of ``[rf]`` (module docstring, "Sweep"); None without ``sweep_MHz``.

    Returns
    -------
    dict
        At the swept frequencies ``freqs_MHz (F,)`` and amplitude ``amplitude_nT``:
        ``perp_bound_deg``/``par_bound_deg (T, F, V)`` (bounds from the second-order yield
        functions), ``perp_anisotropy``/``par_anisotropy (T, F)``; per lifetime
        ``lifetimes_us (T,)``: ``eta (T,)`` at the sweep amplitude, ``control_bound_deg (T, V)``,
        ``control_anisotropy (T,)``, trials (``control_r``, and ``trial_MHz``, ``trial_perp_r (T,)``
        at the swept frequency of the largest perpendicular bound); on the curve
        ``curve_MHz (Y,)``: ``perp_sensitivity``/``par_sensitivity (T, Y)`` (``s(f)``, nT^-2),
        ``perp_rise``/``par_rise (T, Y)`` (bound / control - 1 at the sweep amplitude),
        ``perp_threshold_nT``/``par_threshold_nT (T, Y)`` (NaN: never) and ``threshold_eta (T, Y)``
        (perpendicular); ``onset_MHz (T,)`` (NaN: none in the sweep), ``departure_MHz (T,)``,
        ``linearisation_error (T,)``; ``onset_rise``, ``light_names``, ``light_photons (V,)``,
        ``sweep_light``, ``method``, ``degree``.
    """
    from retina.spin import broadband as bb
    from retina.spin.operators import GAMMA_E
    from retina.yieldfn import YieldFunction

    sc = built.scenario
    rfc = sc["rf"]
    freqs = np.asarray(rfc["sweep_MHz"], float)
    if freqs.size == 0:
        return None
    system0 = _system(sc)
    field = _field_uT(sc, built.field)
    L = int(rfc["degree"])
    amp = float(rfc["sweep_nT"])
    q = float(rfc["onset_rise"])
    curve = curve_frequencies(freqs, rfc["sweep_points"])
    at = np.searchsorted(curve, freqs)             # the swept frequencies on the curve
    lifetimes = list(rfc["sweep_lifetimes_us"]) or [1e6 / float(system0.k_singlet)]
    names = list(sc["light"]["names"])
    photons = np.asarray(sc["light"]["photons"], float)
    light = rfc["sweep_light"] or names[-1]
    T, F, Y, nv = len(lifetimes), freqs.size, curve.size, len(names)
    out = {k: np.full((T, F, nv), np.nan) for k in ("perp_bound_deg", "par_bound_deg")}
    out.update({k: np.full((T, F), np.nan) for k in ("perp_anisotropy", "par_anisotropy")})
    out.update({k: np.full((T, Y), np.nan) for k in ("perp_sensitivity", "par_sensitivity", "perp_rise",
                                                       "par_rise", "perp_threshold_nT", "par_threshold_nT",
                                                       "threshold_eta")})
    out.update({k: np.full(T, np.nan) for k in ("control_r", "control_anisotropy", "trial_MHz", "trial_perp_r",
                                                 "onset_MHz", "departure_MHz",
                                                 "linearisation_error", "eta")})
    out["control_bound_deg"] = np.full((T, nv), np.nan)
    total = T + 1
    methods = []
    li = names.index(light)
    bm = BoundModel(sc, built, L)
    if progress:
        progress(1, total)
    for t, tau in enumerate(lifetimes):
        system = _with_lifetime(system0, tau)
        k = float(system.k_singlet)
        out["eta"][t] = bb.weak_parameter(amp, k)
        static, change = sweep_spectra(system, field, L, curve, cache=rfc["cache"])
        out["control_bound_deg"][t] = bm.bound(static, photons)
        out["control_anisotropy"][t] = relative_anisotropy(static, L)
        grad = bm.power_gradient(static)
        weak = out["eta"][t] <= bb.WEAK_LIMIT
        methods.append("second-order response" if weak else
                       "exact tones (separable RF or Floquet) at the swept frequencies, second order on the curve")
        exact_control = None if weak else YieldFunction.from_system(system, field, L,
                                                                    check_points=rfc["check_points"]).coeffs
        swept = {"perp": {}, "par": {}}
        for p, kind in enumerate(("perp", "par")):
            s = change[p] @ grad                                         # (Y,) per nT^2
            out[f"{kind}_sensitivity"][t] = s
            out[f"{kind}_rise"][t] = np.sqrt(np.maximum(1.0 + amp**2 * s, 0.0)) - 1.0
            out[f"{kind}_threshold_nT"][t] = threshold_amplitude(s, q)
            for f in range(F):
                c = static + amp**2 * change[p, at[f]]
                if not weak:      # outside second order: the exact tone at the swept frequencies
                    rec = {"kind": "tone", "direction": "perpendicular" if kind == "perp" else "parallel",
                           "frequency_MHz": float(freqs[f]), "amplitude_nT": amp}
                    c = rf_yield_function_for(system, field, rec, degree=L, check_points=rfc["check_points"],
                                              tol=rfc["tol"], cache=rfc["cache"]).coeffs
                    c = static + (np.asarray(c) - exact_control)
                swept[kind][f] = c
                out[f"{kind}_bound_deg"][t, f] = bm.bound(c, photons)
        out["threshold_eta"][t] = GAMMA_E * out["perp_threshold_nT"][t] * 1e-9 / k
        exact_rise = np.concatenate([out[f"{kd}_bound_deg"][t, :, li] / out["control_bound_deg"][t, li] - 1.0
                                     for kd in ("perp", "par")])
        lin_rise = np.concatenate([out[f"{kd}_rise"][t, at] for kd in ("perp", "par")])
        out["linearisation_error"][t] = float(np.max(np.abs(lin_rise - exact_rise)))
        out["onset_MHz"][t] = first_crossing(curve, out["perp_rise"][t], q)
        out["departure_MHz"][t] = departure_frequency(curve, out["par_sensitivity"][t])
        # anisotropy at the swept frequencies; trials for the control and at the largest rise
        for kind in ("perp", "par"):
            for f in range(F):
                out[f"{kind}_anisotropy"][t, f] = relative_anisotropy(swept[kind][f], L)
        fbest = int(np.argmax(out["perp_bound_deg"][t, :, li]))
        out["trial_MHz"][t] = freqs[fbest]
        for key, c in (("control_r", static), ("trial_perp_r", swept["perp"][fbest])):
            out[key][t] = _trial_r(sc, built, c, L, light)
        if progress:
            progress(t + 2, total)
    out.update({"freqs_MHz": freqs, "curve_MHz": curve, "amplitude_nT": amp, "onset_rise": q,
                "lifetimes_us": np.asarray(lifetimes, float), "light_names": json.dumps(names),
                "light_photons": photons, "sweep_light": light, "degree": L,
                "method": json.dumps(methods)})
    return out


def _steps(sc):
    c = sc["rf"]["conditions"]
    return 0 if not c else len(c) + (0 if any(x["kind"] == "off" for x in c) else 1)


def _sweep_steps(sc):
    if not sc["rf"]["sweep_MHz"]:
        return 0
    return max(1, len(sc["rf"]["sweep_lifetimes_us"])) + 1


STAGE = Stage("rf", lambda b, progress: compute_rf(b, progress), label="RF conditions", steps=_steps)
SWEEP_STAGE = Stage("rf_sweep", lambda b, progress: compute_rf_sweep(b, progress), label="RF sweep",
                    steps=_sweep_steps)


def condition_yield_function(sc: Scenario, cond: dict, fld, *, progress=None):
    """The yield function of one ``[rf]`` condition of ``sc`` in the field ``fld``, as the ``rf`` stage
    computes it (module docstring): at ``[rf] degree``, with the scenario's ``check_points``, ``tol`` and
    ``cache``; the control ("off") is the static yield function fitted on the same grid.

    Parameters
    ----------
    sc : Scenario
        Its yield function must come from a spin system (``yield.system``); InputError otherwise.
    cond : dict
        One condition in the form of ``[[rf.conditions]]`` (``kind``, ``direction`` and the keys of
        its kind; ``name`` is not needed).
    fld : retina.eye.field.Field
        The static field; its intensity is used unless ``yield.field_uT`` fixes it.
    progress : callable(done, total), optional
        Called while the engine works (it may raise :class:`retina.errors.Cancelled` to stop).

    Returns
    -------
    YieldFunction
    """
    from retina.yieldfn import YieldFunction

    rfc = sc["rf"]
    system = _system(sc)
    field = _field_uT(sc, fld)
    L = int(rfc["degree"])
    if cond["kind"] == "off":
        return YieldFunction.from_system(system, field, L, check_points=rfc["check_points"], progress=progress)
    return rf_yield_function_for(system, field, condition_record(cond, fld), degree=L,
                                 check_points=rfc["check_points"], tol=rfc["tol"], cache=rfc["cache"],
                                 progress=progress)
