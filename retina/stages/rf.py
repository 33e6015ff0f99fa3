"""Stage ``rf``: radio-frequency conditions side by side with the control.

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

The frequency sweep (stage ``rf_sweep``) lives in :mod:`retina.stages.rf_sweep`.

RF exposure: the numbers describe a model.  Experiments with RF transmitters follow the usual
cautions and local regulations and need the ethics approval of the place where they are done.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

from retina.scenario import Scenario
from retina.stages._common import GridModel, Stage, depth, grid_offsets, rms_bound, signal_model, stage_rng

__all__ = ["compute_rf", "rf_yield_function_for", "condition_record", "condition_yield_function",
           "pair_system", "spin_field_uT", "STAGE"]


def pair_system(sc: Scenario):
    """The scenario's spin system, which every RF computation needs.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    SpinSystem
        Read from ``yield.system``.

    Raises
    ------
    InputError
        When the yield function comes from a file or an imported table instead.
    """
    from retina.errors import InputError
    from retina.spin.io import load_system

    kind, path = sc.yield_source
    if kind != "system":
        raise InputError(f"RF conditions and sweeps need the spin system (yield.system), but the yield function "
                         f"comes from yield.{kind}; remove [rf] conditions and sweep_MHz or name the system",
                         source=sc.source, key="rf")
    return load_system(path)


def spin_field_uT(sc: Scenario, fld) -> float:
    """The static field strength of the spin computation, uT.

    Parameters
    ----------
    sc : Scenario
    fld : Field
        The scenario's built field.

    Returns
    -------
    float
        ``yield.field_uT`` when given, else the field's intensity.
    """
    return float(sc["yield"]["field_uT"]) if sc["yield"]["field_uT"] is not None else float(fld.F_uT)


def condition_record(cond: dict, fld) -> dict:
    """What determines a condition's yield function (plain values; for the cache key and the results).

    A coil becomes its angle to the static field (module docstring).

    Parameters
    ----------
    cond : dict
        One condition in the form of ``[[rf.conditions]]``: ``kind`` ("off", "tone" or "band"),
        ``direction`` ("perpendicular", "parallel", "angle" or "coil") and the keys of its kind and
        direction (``angle_deg``; ``coil`` (3,), world frame, any length; ``frequency_MHz``,
        ``amplitude_nT``; ``band_MHz`` (2,), ``asd_nT_per_rtHz`` or ``rms_nT``).
    fld : retina.eye.field.Field
        The static field, for a coil's angle to it.

    Returns
    -------
    dict
        ``kind`` and ``direction``; for an angle or a coil ``angle_deg`` in [0, 90] degrees (a coil
        and its reverse are one RF field) and the coil's ``coil`` (3,) list; for a tone
        ``frequency_MHz`` and ``amplitude_nT``; for a band ``band_MHz`` (2-list), ``asd_nT_per_rtHz``
        and ``rms_nT`` (one of them None).  Plain floats and lists, so ``json.dumps`` takes it.
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

    Parameters
    ----------
    system : retina.spin.system.SpinSystem
        The radical pair.
    field_uT : float
        Static field strength, microtesla.
    rec : dict
        A tone or band record from :func:`condition_record` (not "off").
    degree : int
        Even harmonic degree of the fit (the Lebedev grid of :func:`retina.sphere.grid_for_degree`).
    check_points : int
        Directions off the grid where the fit is checked (``fit_error``).
    tol : float
        Tolerance of the tone solvers (:func:`retina.spin.rf.rf_yield_function`); bands ignore it
        except in the cache key.
    cache : bool
        Look the result up in, and store it to, the content-hash cache (:class:`retina.cache.YieldCache`).
        A failed cache write is a warning; the result stands.
    progress : callable(done, total), optional
        Called while the engine works (it may raise :class:`retina.errors.Cancelled` to stop).

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
                            scan_offsets_deg=offs, rng=stage_rng(sc.seed, f"rf/{nm}"),
                            sampler="direct")   # common random numbers: every condition, one seed per light
        out["trial_r"][i] = r.rayleigh.r
        out["trial_mean_deg"][i] = r.rayleigh.mean_deg
        out["rayleigh_p"][i] = r.rayleigh.p
        out["v_p"][i] = r.v_test.p
    return out


def compute_rf(built, progress=None) -> dict | None:
    """Every RF condition of ``[rf]`` beside the control (module docstring); None without conditions.

    Parameters
    ----------
    built : retina.build.Built
        The scenario's built objects (scenario, field, receptors).
    progress : callable(done, total), optional
        Called after each condition, ``total`` the number of conditions C.

    Returns
    -------
    dict or None
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
    L = int(rfc["degree"])
    out = {"names": json.dumps([c["name"] for c in conds]), "light_names": json.dumps(list(sc["light"]["names"])),
           "light_photons": np.asarray(sc["light"]["photons"], float), "degree": L, "conditions": {}}
    for i, c in enumerate(conds):
        rec = condition_record(c, built.field)
        yf = condition_yield_function(sc, c, built.field)
        method = ("static (control, same grid)" if c["kind"] == "off"
                  else str(yf.provenance.get("method", "")))
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


def _steps(sc):
    c = sc["rf"]["conditions"]
    return 0 if not c else len(c) + (0 if any(x["kind"] == "off" for x in c) else 1)


STAGE = Stage("rf", lambda b, progress: compute_rf(b, progress), label="RF conditions", steps=_steps)


def condition_yield_function(sc: Scenario, cond: dict, fld, *, progress=None):
    """The yield function of one ``[rf]`` condition of ``sc`` in the field ``fld``, as the ``rf`` stage
    computes it (module docstring): at ``[rf] degree``, with the scenario's ``check_points``, ``tol`` and
    ``cache``; the control ("off") is the static yield function fitted on the same grid (also
    through the content-hash cache when ``[rf] cache``).

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
    system = pair_system(sc)
    field = spin_field_uT(sc, fld)
    L = int(rfc["degree"])
    if cond["kind"] == "off":
        # through the content-hash cache like every computed yield function (issue 13): a warm run
        # skips the engine's eigendecomposition of the static pair
        return YieldFunction.from_system(system, field, L, check_points=rfc["check_points"], progress=progress,
                                         cache=rfc["cache"])
    return rf_yield_function_for(system, field, condition_record(cond, fld), degree=L,
                                 check_points=rfc["check_points"], tol=rfc["tol"], cache=rfc["cache"],
                                 progress=progress)
