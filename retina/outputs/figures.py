"""Figures of a :class:`retina.results.Results`: every figure its groups allow, drawn with the
builders of :mod:`retina.figures`, with captions carrying units and parameters.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from retina.outputs.text import COMPARE_SHORT, light_levels, params_text
from retina.results import Results

__all__ = ["make_figures"]


def make_figures(res: Results, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True, progress=None) -> list:
    """Draw every figure the results allow into ``folder``.

    Parameters
    ----------
    res : Results
    folder : str or Path
        Created when missing.
    formats : sequence of str
        Formats among "png", "svg", "pdf".
    dpi : int
        PNG resolution (the GIF uses at most 100).
    animation : bool
        Also write the head-scan GIF.
    progress : callable(done, total), optional
        After each figure.

    Returns
    -------
    list of retina.outputs.report.FigureEntry
        The report entries, in drawing order.
    """
    from retina import figures as F
    from retina.outputs.report import FigureEntry
    from retina.yieldfn import YieldFunction

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    g = res.groups
    params = params_text(res)
    entries = []
    formats = tuple(formats)
    plan = [k for k in ("yield", "patterns", "scan", "gif", "precision", "disorder", "order", "trials", "rf",
                        "rf_sweep")]
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
        light = dict(zip(*light_levels(res)))
        bounds = {"single pose": q["bound_single_deg"], f"head scan ({n_scan} poses)": q["bound_scan_deg"]}
        cmp_n = q.get("compare_nuisance")
        if cmp_n:
            short = COMPARE_SHORT.get(cmp_n, cmp_n)
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
        names, _ = light_levels(res)
        fig = F.disorder_tolerance(d["kappas"], d["depth"],
                                   {f"{nm} ({ph:g})": d["bound_deg"][i] for i, (nm, ph) in
                                    enumerate(zip(names, d["light_photons"]))},
                                   marked_kappa=d.get("scenario_kappa"),
                                   params=params + "; single pose, heading-averaged information; model swept: "
                                   + str(d.get("model", "cone")),
                                   path=folder / "disorder_tolerance", formats=formats, dpi=dpi)
        add(fig, "disorder_tolerance")
    if "order" in g:
        o = g["order"]
        names, _ = light_levels(res)
        i = len(o["light_photons"]) - 1
        light_label = f"{names[i] if i < len(names) else 'light'} ({o['light_photons'][i]:g} photons)"
        classes = {k: (o["classes"][k]["label"], o["classes"][k]["depth"],
                       float(np.atleast_1d(o["classes"][k]["bound_deg"])[i]))
                   for k in str(o["class_order"]).split(",")}
        curves = {k: (o["curves"][k]["label"], o["curves"][k]["kappas"], o["curves"][k]["depth"],
                      np.asarray(o["curves"][k]["bound_deg"])[i]) for k in str(o["curve_order"]).split(",")}
        fig = F.order_study(classes, curves, light_label=light_label,
                            params=params + f"; bounds at {light_label}, single pose, heading-averaged information",
                            path=folder / "order_study", formats=formats, dpi=dpi)
        add(fig, "order_study")
    if "trials" in g:
        t = g["trials"]
        data = {f"{nm} light ({lv['photons']:g} photons)": lv["chosen_deg"] for nm, lv in t["levels"].items()}
        fig = F.trial_histograms(data, t["goal_deg"], params=params + f"; head scan of "
                                 f"{len(t['scan_offsets_deg'])} poses per trial",
                                 path=folder / "trial_histograms", formats=formats, dpi=dpi)
        add(fig, "trial_histograms")
    if "rf" in g:
        from retina.outputs.text import RF_CAUTION

        q = g["rf"]
        conds = [q["conditions"][f"c{i}"] for i in range(len(json.loads(q["names"])))]
        fig = F.rf_conditions([c["name"] for c in conds], np.array([c["bound_single_deg"] for c in conds]),
                              np.array([c["trial_r"] for c in conds]), json.loads(q["light_names"]),
                              params=params + f"; RF yield functions at degree {int(q['degree'])}. " + RF_CAUTION,
                              path=folder / "rf_conditions", formats=formats, dpi=dpi)
        add(fig, "rf_conditions")
    if "rf_sweep" in g:
        from retina.outputs.text import RF_CAUTION
        from retina.spin.broadband import WEAK_LIMIT
        from retina.spin.operators import GAMMA_E

        w = g["rf_sweep"]
        weak_nT = WEAK_LIMIT * 1e6 / np.asarray(w["lifetimes_us"], float) / GAMMA_E * 1e9
        fig = F.rf_sweep(w["curve_MHz"], w["lifetimes_us"], w["perp_rise"], w["par_rise"], w["perp_threshold_nT"],
                         w["par_threshold_nT"], amplitude_nT=float(w["amplitude_nT"]), rise=float(w["onset_rise"]),
                         weak_nT=weak_nT, onset_MHz=w["onset_MHz"],
                         params=params + f"; degree {int(w['degree'])}; weak-field parameter gamma_e B1 / k at "
                         f"{float(w['amplitude_nT']):g} nT = " + ", ".join(f"{e:.2g}" for e in w["eta"])
                         + f"; {len(w['curve_MHz'])} frequencies. " + RF_CAUTION,
                         path=folder / "rf_sweep", formats=formats, dpi=dpi)
        add(fig, "rf_sweep")
    return entries


def _compare_caption(cmp_n) -> str:
    if cmp_n == "receptor_gain":
        return ("; 'unknown texture': every receptor's sensitivity is also unknown (a head-fixed texture), so a "
                "single pose carries no heading information (not drawn) and only the head scan recovers it")
    if cmp_n == "pose_gain":
        return "; 'unknown light per pose': the light level of every pose of the scan is also unknown"
    return ""
