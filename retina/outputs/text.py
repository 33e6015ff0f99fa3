"""Key numbers and summary text of a :class:`retina.results.Results`: the report's tables
(:class:`retina.outputs.report.Section`) and the few lines the command line prints.

Every number a reader sees carries its unit; bounds above
:data:`retina.readout.fisher.INFORMATIVE_BOUND_DEG` are shown in words as not informative.
"""

from __future__ import annotations

import numpy as np

from retina.results import Results

__all__ = ["key_numbers", "summary_text", "light_levels", "bound_text", "params_text", "sweep_summary", "RF_CAUTION"]

#: Shown beside every RF result.
RF_CAUTION = ("RF exposure: these numbers describe a model. Work with RF transmitters follows the usual cautions "
              "(exposure limits for people, licensed frequencies and shielding) and local regulations, and "
              "experiments with animals need the approval of the responsible ethics committee.")


def params_text(res: Results) -> str:
    """One line of the run's main parameters, for figure captions.

    Parameters
    ----------
    res : Results

    Returns
    -------
    str
        Field, ordering, sky, receptor count and seed.
    """
    p = res.provenance
    f = res.groups["field"]
    n = res.groups["receptors"]["eye_index"].size
    return (f"Field {f['F_uT']:.1f} uT, inclination {f['I_deg']:.1f} deg, declination {f['D_deg']:.1f} deg; "
            f"ordering {p.get('ordering', '?')}; {p.get('sky', 'uniform')} sky; {n} receptors; "
            f"seed {p.get('seed', '?')}")


def light_levels(res: Results):
    """The light levels of a run (the trial levels when present, else the scenario's ``[light]``).

    Parameters
    ----------
    res : Results

    Returns
    -------
    names : list of str
    photons : list of float
        Photons per receptor per look, one per name.
    """
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
COMPARE_SHORT = {"receptor_gain": "unknown texture", "pose_gain": "unknown light per pose"}
_COMPARE_TEXT = {"receptor_gain": "a head-fixed texture (every receptor's sensitivity)",
                 "pose_gain": "the light level of every pose"}


def bound_text(bound_deg: float) -> str:
    """A bound as report text.

    Parameters
    ----------
    bound_deg : float
        Cramer-Rao bound in degrees.

    Returns
    -------
    str
        The number to three digits, "not informative" above
        :data:`retina.readout.fisher.INFORMATIVE_BOUND_DEG`, or "no information" when infinite.
    """
    from retina.readout.fisher import bound_is_informative

    if not np.isfinite(bound_deg):
        return "no information"
    return f"{bound_deg:.3g}" if bool(bound_is_informative(bound_deg)) else "not informative"


def _typical_tilt_deg(kappa: float) -> float:
    """arccos<cos theta> of a von Mises-Fisher cone, ``<cos theta> = coth kappa - 1 / kappa``."""
    k = min(max(float(kappa), 1e-6), 1e6)
    return float(np.degrees(np.arccos(1.0 / np.tanh(k) - 1.0 / k)))


def key_numbers(res: Results) -> list:
    """The report's tables of key numbers.

    Parameters
    ----------
    res : Results

    Returns
    -------
    list of retina.outputs.report.Section
        One table per group present (yield function, field and retina, and one per stage).
    """
    from retina.outputs.report import Section

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
                         f"{bound_text(q['bound_single_deg'][i])}, {bound_text(q['bound_scan_deg'][i])} | "
                         f"{q['decoded_single_rms_deg'][i]:.3g}, {q['decoded_scan_rms_deg'][i]:.3g}", "deg"))
        if cmp_n:
            for i, ph in enumerate(q["photons"]):
                rows.append((f"{ph:g} photons/receptor, {COMPARE_SHORT.get(cmp_n, cmp_n)}: bound single pose, scan",
                             f"{bound_text(q['bound_single_compare_deg'][i])}, "
                             f"{bound_text(q['bound_scan_compare_deg'][i])}", "deg"))
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

        names, _ = light_levels(res)
        rows = []
        for j, (k, dp) in enumerate(zip(d["kappas"], d["depth"])):
            tilt = _typical_tilt_deg(k)
            rows.append((f"kappa = {k:g} (<P2> = {order_parameter_from_kappa(k):.3f}, typical tilt "
                         f"{tilt:.0f} deg): modulation depth", f"{100 * dp:.3f}", "%"))
            for i, ph in enumerate(d["light_photons"]):
                nm = names[i] if i < len(names) else f"{ph:g} photons"
                rows.append((f"kappa = {k:g}: bound, {nm} ({ph:g} photons)", bound_text(d["bound_deg"][i][j]),
                             "deg"))
        secs.append(Section("Disorder tolerance", rows, note=(
            f"Model swept: {d.get('model', 'cone')}. The restrained molecular direction lies in a von Mises-Fisher "
            "cone of concentration kappa about each receptor axis; <P2> = <(3 cos^2 theta - 1) / 2> is its order "
            "parameter (1 perfect order, 0 none) and the typical tilt is arccos<cos theta>. Modulation depth as "
            "above, averaged over the scenario's headings; bound from the heading-averaged information of a single "
            f"pose. {_UNINFORMATIVE_NOTE}")))
    if "order" in g:
        secs.append(_order_section(res))
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
            "against the goal, p exact for the sample size (the distribution tabulated in Zar 2010, "
            "Appendix Table B.35; ch. 27).")))
    secs += _rf_sections(g)
    return secs


def _rf_text(rec: dict) -> str:
    """A condition record (:func:`retina.stages.rf.condition_record`) in words."""
    if rec["kind"] == "off":
        return "no RF (control)"
    d = rec["direction"]
    if d == "coil":
        where = f"coil along {rec['coil']} (north-east-down), {rec['angle_deg']:.0f} deg to the field"
    elif d == "angle":
        where = f"{rec['angle_deg']:g} deg to the field"
    else:
        where = f"{d} to the field"
    if rec["kind"] == "tone":
        return f"{rec['frequency_MHz']:g} MHz, {rec['amplitude_nT']:g} nT, {where}"
    dens = (f"{rec['asd_nT_per_rtHz']:g} nT/sqrt(Hz)" if rec.get("asd_nT_per_rtHz") is not None
            else f"{rec['rms_nT']:g} nT rms")
    return f"band {rec['band_MHz'][0]:g}-{rec['band_MHz'][1]:g} MHz, {dens}, {where}"


def _rf_sections(g) -> list:
    import json

    from retina.outputs.report import Section

    secs = []
    if "rf" in g:
        q = g["rf"]
        names = json.loads(q["names"])
        lights = json.loads(q["light_names"])
        rows = []
        for i, nm in enumerate(names):
            c = q["conditions"][f"c{i}"]
            rec = json.loads(c["record"])
            rows.append((f"{nm}: {_rf_text(rec)}; relative anisotropy", f"{100 * c['relative_anisotropy']:.4f}", "%"))
            for j, ln in enumerate(lights):
                rows.append((f"{nm}, {ln} light: bound single pose, scan | trial r",
                             f"{bound_text(c['bound_single_deg'][j])}, {bound_text(c['bound_scan_deg'][j])} | "
                             f"{c['trial_r'][j]:.3f}", "deg | "))
            if "eta" in c:
                rows.append((f"{nm}: weak-field parameter gamma_e b_rms / k (second order holds for << 1)",
                             f"{c['eta']:.3g}" + ("" if c["weak_valid"] else " (too strong: not valid)"), ""))
        secs.append(Section("Radio-frequency conditions", rows, note=(
            f"Every condition at spherical-harmonic degree {int(q['degree'])}, the control included (same grid). "
            "Tones: exact (separable RF method or whole-pair Floquet), averaged over the RF phase and the azimuth "
            "about the static field; bands: second order in the amplitude (incoherent sum of the frequency "
            "components). Trials use the same random numbers for every condition. " + RF_CAUTION)))
    if "rf_sweep" in g:
        secs.append(_rf_sweep_section(g["rf_sweep"], RF_CAUTION))
    return secs


def sweep_summary(w: dict, t: int) -> dict:
    """Key numbers of one lifetime of the RF sweep group ``w`` (:mod:`retina.stages.rf`).

    Parameters
    ----------
    w : dict
        The ``rf_sweep`` group of a :class:`retina.results.Results`.
    t : int
        Index of the lifetime.

    Returns
    -------
    dict
        ``onset_MHz`` (NaN: none), ``min_threshold_nT`` and ``min_threshold_MHz`` (perpendicular),
        ``min_threshold_eta``, ``par_min_threshold_nT``, ``largest_rise`` and ``largest_rise_MHz``
        (perpendicular, at the sweep amplitude, on the curve), ``departure_MHz``.
    """
    thr = np.asarray(w["perp_threshold_nT"][t], float)
    out = {"onset_MHz": float(w["onset_MHz"][t]), "departure_MHz": float(w["departure_MHz"][t])}
    if np.any(np.isfinite(thr)):
        i = int(np.nanargmin(thr))
        out.update(min_threshold_nT=float(thr[i]), min_threshold_MHz=float(w["curve_MHz"][i]),
                   min_threshold_eta=float(w["threshold_eta"][t, i]))
    else:
        out.update(min_threshold_nT=float("nan"), min_threshold_MHz=float("nan"), min_threshold_eta=float("nan"))
    pt = np.asarray(w["par_threshold_nT"][t], float)
    out["par_min_threshold_nT"] = float(np.nanmin(pt)) if np.any(np.isfinite(pt)) else float("nan")
    rise = np.asarray(w["perp_rise"][t], float)
    j = int(np.argmax(rise))
    out.update(largest_rise=float(rise[j]), largest_rise_MHz=float(w["curve_MHz"][j]))
    return out


def _rf_sweep_section(w: dict, caution: str):
    import json

    from retina.outputs.report import Section
    from retina.spin.broadband import WEAK_LIMIT

    li = json.loads(w["light_names"]).index(w["sweep_light"])
    methods = json.loads(w["method"])
    q = float(w["onset_rise"])
    rows = []

    def mhz(x):
        return "none in the sweep" if not np.isfinite(x) else f"{x:.3g}"

    for t, tau in enumerate(w["lifetimes_us"]):
        k = sweep_summary(w, t)
        eta_t = k["min_threshold_eta"]
        flag = "" if not np.isfinite(eta_t) or eta_t <= WEAK_LIMIT else " (beyond second order: indicative only)"
        relp = w["par_bound_deg"][t, :, li] / w["control_bound_deg"][t, li] - 1.0
        rows += [
            (f"lifetime {tau:g} us: onset of disorientation at {w['amplitude_nT']:g} nT (bound + {100 * q:g} %)",
             mhz(k["onset_MHz"]), "MHz"),
            (f"lifetime {tau:g} us: largest bound rise at {w['amplitude_nT']:g} nT, perpendicular (at MHz) | "
             "parallel (swept frequencies)",
             f"{100 * k['largest_rise']:+.3g} (at {k['largest_rise_MHz']:.3g}) | "
             f"{100 * relp[np.argmax(np.abs(relp))]:+.3g}", "%"),
            (f"lifetime {tau:g} us: lowest amplitude for a {100 * q:g} % rise, perpendicular (at MHz; eta there) | "
             "parallel",
             ("never" if not np.isfinite(k["min_threshold_nT"]) else
              f"{k['min_threshold_nT']:.3g} (at {k['min_threshold_MHz']:.3g}; eta {eta_t:.2g}){flag} | "
              + ("never" if not np.isfinite(k["par_min_threshold_nT"]) else f"{k['par_min_threshold_nT']:.3g}")),
             "nT"),
            (f"lifetime {tau:g} us: the parallel response leaves its quasi-static value (moves as 1 / lifetime "
             "when the line spacings are much larger than 1 / lifetime)",
             mhz(k["departure_MHz"]), "MHz"),
            (f"lifetime {tau:g} us: trial r without RF | perpendicular RF at {w['trial_MHz'][t]:g} MHz",
             f"{w['control_r'][t]:.3f} | {w['trial_perp_r'][t]:.3f}", ""),
            (f"lifetime {tau:g} us: weak-field parameter gamma_e B1 / k at {w['amplitude_nT']:g} nT; method; "
             "linearisation check", f"{w['eta'][t]:.3g}; {methods[t]}; {w['linearisation_error'][t]:.1e}", "")]
    note = (f"Single-pose bound at the '{w['sweep_light']}' light level relative to the bound without RF (the ratio "
            f"does not depend on the light level). Onset of disorientation: the lowest frequency at which the "
            f"perpendicular field of {w['amplitude_nT']:g} nT raises the bound by {100 * q:g} % (log-linear "
            f"interpolation between {len(w['curve_MHz'])} frequencies from {w['curve_MHz'][0]:g} to "
            f"{w['curve_MHz'][-1]:g} MHz; resonances narrower than the spacing can fall between them). Threshold "
            "amplitude: the amplitude giving that rise at second order in the amplitude (the bound's square rises "
            "as b^2 s(f)); where gamma_e b / k exceeds "
            f"{WEAK_LIMIT:g} the second-order result is an extrapolation: check it with an exact tone. "
            "Linearisation check: the largest difference between the curve's rise and the bound computed from the "
            "swept frequencies' yield functions. " + caution)
    return Section(f"RF frequency sweep ({w['amplitude_nT']:g} nT; threshold amplitudes)", rows, note=note)


def _order_section(res: Results):
    """The order study's table: the restraint classes, then each curve's ends and middle."""
    from retina.outputs.report import Section

    o = res.groups["order"]
    names, _ = light_levels(res)
    light = list(o["light_photons"])
    lv = [names[i] if i < len(names) else f"{ph:g} photons" for i, ph in enumerate(light)]
    rows = []
    for key in str(o["class_order"]).split(","):
        c = o["classes"][key]
        rows.append((f"{c['label']}: modulation depth", f"{100 * c['depth']:.3f}", "%"))
        rows.append((f"{c['label']}: bound, " + ", ".join(f"{n} ({ph:g} photons)" for n, ph in zip(lv, light)),
                     ", ".join(bound_text(b) for b in np.atleast_1d(c["bound_deg"])), "deg"))
    for key in str(o["curve_order"]).split(","):
        c = o["curves"][key]
        ks = np.asarray(c["kappas"])
        rows.append((f"{c['label']}: depth at kappa = " + ", ".join(f"{k:g}" for k in ks),
                     ", ".join(f"{100 * d:.3g}" for d in c["depth"]), "%"))
        rows.append((f"{c['label']}: bound, {lv[-1]} ({light[-1]:g} photons), at the same kappas",
                     ", ".join(bound_text(b) for b in np.asarray(c["bound_deg"])[-1]), "deg"))
    return Section("How much order the compass needs", rows, note=(
        "Restraint classes count the rotation angles of a molecule that are fixed: aligned (all three); "
        "restrained in two and free in one (free rotation about the receptor axis); restrained in one and free "
        "in two (one molecular direction in the membrane plane normal to the receptor axis, free in azimuth and in "
        "twist about itself); isotropic (none). Each curve varies one von Mises-Fisher (cone), Watson girdle "
        "(plane) or von Mises (twist) concentration kappa between the classes named in its label (kappa = inf "
        "to kappa = 0). The cone without twist is shown for comparison: it keeps a pattern at kappa = 0 for a "
        "yield function that is not axially symmetric. Depth and bound as in the disorder table. "
        + _UNINFORMATIVE_NOTE))


def _informative() -> float:
    from retina.readout.fisher import INFORMATIVE_BOUND_DEG

    return INFORMATIVE_BOUND_DEG


def summary_text(res: Results, paths: dict, seconds: float) -> str:
    """A few lines in words for stdout.

    Parameters
    ----------
    res : Results
    paths : dict
        As returned by :func:`retina.outputs.write_outputs`.
    seconds : float
        Wall time of the run.

    Returns
    -------
    str
    """
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
    if "rf_sweep" in g:
        w = g["rf_sweep"]
        q = 100 * float(w["onset_rise"])
        lines.append(f"  RF sweep onset of disorientation (bound + {q:g} %): " + ", ".join(
            f"{tau:g} us: " + ("none" if not np.isfinite(o) else f"{o:.3g} MHz")
            for tau, o in zip(w["lifetimes_us"], w["onset_MHz"])) + f" (at {w['amplitude_nT']:g} nT)")
        parts = []
        for t, tau in enumerate(w["lifetimes_us"]):
            k = sweep_summary(w, t)
            parts.append(f"{tau:g} us: " + ("never" if not np.isfinite(k["min_threshold_nT"]) else
                                            f"{k['min_threshold_nT']:.3g} nT at {k['min_threshold_MHz']:.3g} MHz "
                                            f"(eta {k['min_threshold_eta']:.2g})"))
        lines.append(f"  RF amplitude needed for + {q:g} %: " + ", ".join(parts))
    if "rf" in g or "rf_sweep" in g:
        lines.append("  " + RF_CAUTION)
    lines.append(f"  report: {paths['html']}  (Markdown: {paths['markdown'].name}, data: {paths['results'].name})")
    return "\n".join(lines)
