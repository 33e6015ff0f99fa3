"""Figures of a :class:`retina.results.Results`: every figure its groups allow, drawn with the
builders of :mod:`retina.figures`, with captions carrying units and parameters.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from retina.outputs.text import COMPARE_SHORT, light_levels, params_text
from retina.results import Results

__all__ = ["make_figures", "FigurePool", "figure_tasks", "draw_task"]


# Relative drawing costs (CPU seconds on the demo, PNG at 300 dpi and SVG, measured once): the
# parallel path hands out the figures longest first so that both workers finish at about the same time.
_COST = {"scan_filmstrip": 2.5, "yield_sphere": 2.0, "scan_animation": 1.8, "rf_sweep": 1.8,
         "modulation_fields": 1.75, "order_study": 1.2, "precision_curves": 1.1, "disorder_tolerance": 1.1,
         "rf_conditions": 1.0, "trial_histograms": 0.85}


def make_figures(res: Results, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True, progress=None, jobs: int = 1) -> list:
    """Draw every figure the results allow into ``folder``.

    Every figure is an independent task (:func:`figure_tasks`); with ``jobs > 1`` they are drawn
    on that many worker processes (:class:`FigurePool`), longest first.  The files are the same
    either way: each figure is drawn by the same code from the same arrays (PNG files are
    identical byte for byte; SVG files differ only in matplotlib's random element ids and the
    date, as between any two runs).

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
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    tasks = figure_tasks(res, folder, formats=formats, dpi=dpi, animation=animation)
    jobs = max(1, min(int(jobs), len(tasks)))
    if jobs > 1:
        pool = FigurePool(folder, formats=formats, dpi=dpi, animation=animation, jobs=jobs)
        try:
            entries = pool.collect(res, progress=progress)
        except BaseException:
            pool.cancel()
            raise
        pool.close()
        return entries
    got = []
    for t in tasks:
        got.append(draw_task(t))
        if progress:
            progress(len(got), len(tasks))
    return _entries(folder, tasks, got)


def _entries(folder: Path, tasks: list, got: list) -> list:
    from retina.outputs.report import FigureEntry

    return [FigureEntry(f"{folder.name}/{t['stem']}", title, caption,
                        () if t["animated"] else tuple(t["formats"]), t["animated"])
            for t, (title, caption) in zip(tasks, got)]


#: Niceness added to the figure workers: while stages still run in the main process, the
#: scheduler gives it about 1.6 times a worker's share of a busy core (weights of the Linux
#: scheduler, 1024 at nice 0 against 655 at nice 2), so drawing fills the idle time with little
#: delay to the stages.  Measured on the shared machine (load average 9-11): at nice 5 the
#: workers were starved by other users' processes and 16.5 s of drawing was left after the
#: stages; at nice 2, 1.2-3.2 s.
WORKER_NICE = 2

#: Thread-count variables set to 1 in the figure workers (drawing needs no BLAS or numba threads;
#: the cores are shared with the main process).
_ONE_THREAD_ENV = {k: "1" for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                                    "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS", "NUMBA_NUM_THREADS")}


def _worker_init(nice: int) -> None:
    import os

    if nice:
        try:
            os.nice(nice)
        except OSError:           # not permitted: draw at normal priority
            pass


class FigurePool:
    """Figures drawn on worker processes as soon as the groups they show exist.

    :meth:`submit` hands every figure the (partial) results allow and that is not handed out yet
    to the workers, longest first; :func:`retina.pipeline.run` calls it after each stage
    (``on_group``), so the figures of early stages are drawn while later stages compute.
    :meth:`collect` checks every figure of the final results against the task it was drawn from
    (the same builder, arrays and options, compared as pickled bytes) and redraws any that
    differ or are missing, so the files are exactly those :func:`make_figures` draws from the
    final results.  The workers are loky processes (a private ``loky.ProcessPoolExecutor``, as
    joblib uses), one BLAS/numba thread each, niced by :data:`WORKER_NICE`; :meth:`close` or
    :meth:`cancel` stops them.

    Parameters
    ----------
    folder : str or Path
        Where the figures go (created when missing).
    formats, dpi, animation
        As in :func:`make_figures`.
    jobs : int
        Worker processes.
    nice : int
        Niceness added to the workers (0: none).
    """

    def __init__(self, folder: str | Path, *, formats=("png", "svg"), dpi: int = 300, animation: bool = True,
                 jobs: int = 2, nice: int = WORKER_NICE):
        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self.formats = tuple(formats)
        self.dpi = int(dpi)
        self.animation = bool(animation)
        self.jobs = max(1, int(jobs))
        self.nice = int(nice)
        self._ex = None
        self._sent: dict[str, tuple[bytes, object]] = {}

    def _executor(self):
        if self._ex is None:
            # a private loky executor: joblib's reusable one is shared with its own Parallel calls,
            # which expect their own set-up of it
            from joblib.externals.loky import ProcessPoolExecutor

            self._ex = ProcessPoolExecutor(max_workers=self.jobs, env=_ONE_THREAD_ENV, initializer=_worker_init,
                                           initargs=(self.nice,))
        return self._ex

    def _tasks(self, res: Results) -> list[dict]:
        return figure_tasks(res, self.folder, formats=self.formats, dpi=self.dpi, animation=self.animation)

    def submit(self, res: Results) -> int:
        """Hand out the figures ``res`` allows that are not handed out yet.

        Parameters
        ----------
        res : Results
            The results so far (``yield_function``, ``receptors`` and ``field`` at least).

        Returns
        -------
        int
            Figures handed out by this call.
        """
        new = [t for t in self._tasks(res) if t["stem"] not in self._sent]
        for t in sorted(new, key=lambda t: -_COST.get(t["builder"], 1.0)):
            self._sent[t["stem"]] = (_task_key(t), self._executor().submit(draw_task, t))
        return len(new)

    def collect(self, res: Results, *, progress=None) -> list:
        """Wait for every figure of the final results, redrawing those handed out from other data.

        Parameters
        ----------
        res : Results
            The final results.
        progress : callable(done, total), optional
            After each figure.

        Returns
        -------
        list of retina.outputs.report.FigureEntry
            In the order of :func:`figure_tasks`.
        """
        from concurrent.futures import FIRST_COMPLETED, wait

        tasks = self._tasks(res)
        stems = {t["stem"] for t in tasks}
        for stem in [s for s in self._sent if s not in stems]:      # a figure the final results lack
            self._sent.pop(stem)[1].result()
        todo = []
        for t in tasks:
            sent = self._sent.get(t["stem"])
            if sent is not None and sent[0] != _task_key(t):
                sent[1].result()                # the stale drawing writes the same files: let it end first
                sent = None
            if sent is None:
                todo.append(t)
        for t in sorted(todo, key=lambda t: -_COST.get(t["builder"], 1.0)):
            self._sent[t["stem"]] = (_task_key(t), self._executor().submit(draw_task, t))
        futures = {self._sent[t["stem"]][1]: i for i, t in enumerate(tasks)}
        got: dict[int, tuple] = {}
        pending = set(futures)
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for f in done:
                got[futures[f]] = f.result()
                if progress:
                    progress(len(got), len(tasks))
        return _entries(self.folder, tasks, [got[i] for i in range(len(tasks))])

    def cancel(self) -> None:
        """Cancel what is not drawn yet and stop the workers (after an error or Ctrl-C)."""
        for _, f in self._sent.values():
            f.cancel()
        if self._ex is not None:
            self._ex.shutdown(wait=True, kill_workers=True)
            self._ex = None

    def close(self) -> None:
        """Stop the workers once every figure is collected (they are idle then)."""
        if self._ex is not None:
            self._ex.shutdown(wait=True)
            self._ex = None


def _task_key(task: dict) -> bytes:
    import pickle

    return pickle.dumps((task["builder"], task["args"], task["kwargs"], task.get("title"), task.get("caption")),
                        protocol=pickle.HIGHEST_PROTOCOL)


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
