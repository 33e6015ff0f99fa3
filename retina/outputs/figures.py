"""Figures of a :class:`retina.results.Results`: every figure its groups allow, drawn with the
builders of :mod:`retina.figures`, with captions carrying units and parameters.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from retina.outputs.text import COMPARE_SHORT, light_levels, params_text
from retina.results import Results

__all__ = ["make_figures", "figure_tasks", "draw_task"]


# Relative drawing costs (CPU seconds on the demo, PNG at 300 dpi and SVG, measured once): the
# parallel path hands out the figures longest first so that both workers finish at about the same time.
_COST = {"scan_filmstrip": 2.5, "yield_sphere": 2.0, "scan_animation": 1.8, "rf_sweep": 1.8,
         "modulation_fields": 1.75, "order_study": 1.2, "precision_curves": 1.1, "disorder_tolerance": 1.1,
         "rf_conditions": 1.0, "trial_histograms": 0.85}


def make_figures(res: Results, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True, progress=None, jobs: int = 1) -> list:
    """Draw every figure the results allow into ``folder``.

    Every figure is an independent task (:func:`figure_tasks`); with ``jobs > 1`` they are drawn
    on that many worker processes (joblib's process backend, each worker building its own Agg
    figures), longest first.  The files are the same either way: each figure is drawn by the same
    code from the same arrays (PNG files are identical byte for byte; SVG files differ only in
    matplotlib's random element ids and the date, as between any two runs).

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
    jobs : int
        Worker processes (1: draw in this process, one after the other).

    Returns
    -------
    list of retina.outputs.report.FigureEntry
        The report entries, in the order of :func:`figure_tasks`.
    """
    from retina.outputs.report import FigureEntry

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tasks = figure_tasks(res, folder, formats=formats, dpi=dpi, animation=animation)
    got: dict[int, tuple] = {}

    def done(i, tc):
        got[i] = tc
        if progress:
            progress(len(got), len(tasks))

    jobs = max(1, min(int(jobs), len(tasks)))
    if jobs == 1:
        for i, t in enumerate(tasks):
            done(i, draw_task(t))
    else:
        from joblib import Parallel, delayed, parallel_config

        order = sorted(range(len(tasks)), key=lambda i: -_COST.get(tasks[i]["builder"], 1.0))
        with parallel_config(backend="loky", inner_max_num_threads=1):
            par = Parallel(n_jobs=jobs, return_as="generator_unordered", batch_size=1, pre_dispatch="all")
            for i, tc in par(delayed(_indexed)(i, tasks[i]) for i in order):
                done(i, tc)
    entries = []
    for i, t in enumerate(tasks):
        title, caption = got[i]
        entries.append(FigureEntry(f"{folder.name}/{t['stem']}", title, caption,
                                   () if t["animated"] else tuple(t["formats"]), t["animated"]))
    return entries


def _indexed(i: int, task: dict):
    return i, draw_task(task)


def draw_task(task: dict) -> tuple[str, str]:
    """Draw and save one figure task of :func:`figure_tasks`.

    Parameters
    ----------
    task : dict
        ``builder`` (a name in :mod:`retina.figures`), ``args``, ``kwargs``, ``stem``,
        ``formats``, ``animated`` and, for the animation, ``title`` and ``caption``.

    Returns
    -------
    (str, str)
        The figure's title and caption.
    """
    from retina import figures as F

    out = getattr(F, task["builder"])(*task["args"], **task["kwargs"])
    if task["animated"]:
        return task["title"], task["caption"]
    return out.retina_title, out.retina_caption


def figure_tasks(res: Results, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True) -> list[dict]:
    """One drawing task per figure the results allow (see :func:`draw_task`), in report order.

    Parameters
    ----------
    res : Results
    folder : str or Path
    formats, dpi, animation
        As in :func:`make_figures`.

    Returns
    -------
    list of dict
        Plain data (arrays, strings), so a task can be drawn in another process.
    """
    from retina.yieldfn import YieldFunction

    folder = Path(folder)
    g = res.groups
    params = params_text(res)
    formats = tuple(formats)
    tasks: list[dict] = []

    def add(builder, stem, *args, animated=False, **kwargs):
        if animated:
            kwargs.update(dpi=min(dpi, 100))
        else:
            kwargs.update(path=folder / stem, formats=formats, dpi=dpi)
        tasks.append({"builder": builder, "stem": stem, "args": args, "kwargs": kwargs, "formats": formats,
                      "animated": animated})

    yfg = g["yield_function"]
    yf = YieldFunction(yfg["coeffs"], int(yfg["degree"]))
    add("yield_sphere", "yield_sphere", yf, argmax=yfg["argmax"], argmin=yfg["argmin"],
        params=f"Spherical-harmonic degree {int(yfg['degree'])}; relative anisotropy "
               f"{100 * yfg['relative']:.3g} %; field {g['field']['F_uT']:.1f} uT")
    rec = g["receptors"]
    if "patterns" in g:
        p = g["patterns"]
        add("modulation_fields", "modulation_fields", rec["visual_dirs"], rec["eye_index"], p["modulation"],
            p["headings_deg"], p["b_head"], params=params)
    if "scan" in g:
        s = g["scan"]
        add("scan_filmstrip", "scan_filmstrip", rec["visual_dirs"], rec["eye_index"], s["modulation"],
            s["yaw_deg"], s["b_head"], params=params)
        if animation:
            add("scan_animation", "scan_animation", rec["visual_dirs"], rec["eye_index"], s["modulation"],
                s["yaw_deg"], s["b_head"], folder / "scan_animation.gif", animated=True, params=params)
            tasks[-1].update(title="Head scan animation",
                             caption="The modulation pattern through the head scan, one frame per pose "
                                     f"(GIF). {params}.")
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
        add("precision_curves", "precision_curves", q["photons"], bounds,
            decoded_deg={"single pose": q["decoded_single_rms_deg"],
                         f"head scan ({n_scan} poses)": q["decoded_scan_rms_deg"]},
            light_levels=light, params=params + _compare_caption(cmp_n))
    if "disorder" in g:
        d = g["disorder"]
        names, _ = light_levels(res)
        add("disorder_tolerance", "disorder_tolerance", d["kappas"], d["depth"],
            {f"{nm} ({ph:g})": d["bound_deg"][i] for i, (nm, ph) in enumerate(zip(names, d["light_photons"]))},
            marked_kappa=d.get("scenario_kappa"),
            params=params + "; single pose, heading-averaged information; model swept: "
            + str(d.get("model", "cone")))
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
        add("order_study", "order_study", classes, curves, light_label=light_label,
            params=params + f"; bounds at {light_label}, single pose, heading-averaged information")
    if "trials" in g:
        t = g["trials"]
        data = {f"{nm} light ({lv['photons']:g} photons)": lv["chosen_deg"] for nm, lv in t["levels"].items()}
        add("trial_histograms", "trial_histograms", data, t["goal_deg"],
            params=params + f"; head scan of {len(t['scan_offsets_deg'])} poses per trial")
    if "rf" in g:
        from retina.outputs.text import RF_CAUTION

        q = g["rf"]
        conds = [q["conditions"][f"c{i}"] for i in range(len(json.loads(q["names"])))]
        add("rf_conditions", "rf_conditions", [c["name"] for c in conds],
            np.array([c["bound_single_deg"] for c in conds]), np.array([c["trial_r"] for c in conds]),
            json.loads(q["light_names"]),
            params=params + f"; RF yield functions at degree {int(q['degree'])}. " + RF_CAUTION)
    if "rf_sweep" in g:
        from retina.outputs.text import RF_CAUTION
        from retina.spin.broadband import WEAK_LIMIT
        from retina.spin.operators import GAMMA_E

        w = g["rf_sweep"]
        weak_nT = WEAK_LIMIT * 1e6 / np.asarray(w["lifetimes_us"], float) / GAMMA_E * 1e9
        add("rf_sweep", "rf_sweep", w["curve_MHz"], w["lifetimes_us"], w["perp_rise"], w["par_rise"],
            w["perp_threshold_nT"], w["par_threshold_nT"], amplitude_nT=float(w["amplitude_nT"]),
            rise=float(w["onset_rise"]), weak_nT=weak_nT, onset_MHz=w["onset_MHz"],
            params=params + f"; degree {int(w['degree'])}; weak-field parameter gamma_e B1 / k at "
            f"{float(w['amplitude_nT']):g} nT = " + ", ".join(f"{e:.2g}" for e in w["eta"])
            + f"; {len(w['curve_MHz'])} frequencies. " + RF_CAUTION)
    return tasks


def _compare_caption(cmp_n) -> str:
    if cmp_n == "receptor_gain":
        return ("; 'unknown texture': every receptor's sensitivity is also unknown (a head-fixed texture), so a "
                "single pose carries no heading information (not drawn) and only the head scan recovers it")
    if cmp_n == "pose_gain":
        return "; 'unknown light per pose': the light level of every pose of the scan is also unknown"
    return ""
