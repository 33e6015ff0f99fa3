"""Planning and running a sweep: on all local cores (joblib, process backend) or on a Dask cluster.

How the work is split
---------------------
1. :func:`plan_sweep` expands the sweep file into points (:func:`retina.sweep.points.expand`) and
   groups them by their *yield function*: points whose scenarios name the same spin system (its
   canonical text), field strength, degree and engine method share one yield function (the key
   of :func:`retina.cache.cache_key`); a loaded or imported yield function is keyed by the file's
   content and the degree.
2. Each distinct yield function is computed once: looked up in the content-hash cache
   (:mod:`retina.cache`, ``$RETINA_CACHE``) by the client, and only the missing ones are computed,
   one task each, in parallel, then stored in the cache by the client.
3. The points that share a yield function run in batches (one task per batch, through
   :func:`retina.pipeline.run` with that yield function and only the stages the outputs need).
   Tasks return their numbers to the client, which writes one small file per point; nothing
   depends on the workers sharing a file system.

Numbers that do not depend on the workers
-----------------------------------------
Every point has its own seed (:func:`retina.sweep.points.point_seed`: the point's child of the
sweep's ``SeedSequence``), and every task runs with one BLAS thread and one numba thread
(:func:`single_threaded`), in the client as in the workers, so the summation order of matrix
products is the same everywhere.  One worker, two workers and a Dask cluster therefore give the
same numbers bit for bit, whatever the order in which points finish.

Resuming and failures
---------------------
The output folder keeps ``points/`` (one ``.npz`` per finished point, written atomically by the
client, named by a digest of the point's values, its seed and its yield function's key, so a
changed pair file is not mistaken for a finished point) and ``plan.json`` (the sweep's
fingerprint).  Running the same sweep into the same folder
computes only the points without a file; a folder of a different sweep is refused unless
``force``.  A point that raises is recorded in ``points/*.failed.json`` with its parameters and
message; the other points go on, the dataset holds NaN there and ``failed`` marks it.  Ctrl-C (or
a killed worker) stops the run; the finished points stay.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from retina.errors import InputError
from retina.sweep.outputs import OUTPUTS, extract, output_coords, stages_for
from retina.sweep.points import Point, expand
from retina.sweep.schema import SweepSpec

__all__ = ["Plan", "plan_sweep", "run_sweep", "SweepOutcome", "single_threaded", "yield_key",
           "evaluate_batch", "compute_yield"]

POINTS_DIR = "points"
PLAN_FILE = "plan.json"


# ----------------------------------------------------------------------------------------------
# thread limits

_limit_lock = threading.Lock()
_limit_depth = 0
_limit_ctx = None


@contextlib.contextmanager
def single_threaded():
    """One BLAS/OpenMP thread (threadpoolctl) and one numba thread while inside.

    Re-entrant and safe when several threads of one process (a threaded Dask worker) enter it: the
    limits are set by the first and restored by the last.
    """
    global _limit_depth, _limit_ctx
    from threadpoolctl import threadpool_limits

    with _limit_lock:
        if _limit_depth == 0:
            _limit_ctx = threadpool_limits(limits=1)
        _limit_depth += 1
    try:
        import numba

        old = numba.get_num_threads()
        numba.set_num_threads(1)   # thread-local in numba
        try:
            yield
        finally:
            numba.set_num_threads(old)
    finally:
        with _limit_lock:
            _limit_depth -= 1
            if _limit_depth == 0 and _limit_ctx is not None:
                _limit_ctx.restore_original_limits()
                _limit_ctx = None


# ----------------------------------------------------------------------------------------------
# planning


def yield_key(sc) -> tuple[str, dict]:
    """The key of a scenario's yield function and what is needed to compute it.

    Parameters
    ----------
    sc : Scenario

    Returns
    -------
    key : str
        sha256 hex digest: :func:`retina.cache.cache_key` for a computed yield function (spin
        system, field, degree, method), else a digest of the file's bytes, the kind and the degree.
    job : dict
        ``{"kind", "path", "degree", ...}``; for a computed one also ``field_uT`` and ``method``.
    """
    from retina.build import field_uT

    kind, path = sc.yield_source
    degree = int(sc["yield"]["degree"])
    if kind == "system":
        from retina.cache import cache_key
        from retina.spin import engine
        from retina.spin.io import load_system
        from retina.yieldfn import default_check_points

        system = load_system(path)
        method = sc["yield"]["method"]
        resolved = engine.choose_method(system) if method == "auto" else method
        f = field_uT(sc)
        key = cache_key(system, f, degree, resolved, check_points=default_check_points(degree))
        return key, {"kind": kind, "path": str(path), "degree": degree, "field_uT": f, "method": resolved,
                     "system": system}
    digest = hashlib.sha256(Path(path).read_bytes()).hexdigest()
    key = hashlib.sha256(f"{kind}\n{digest}\n{degree}".encode()).hexdigest()
    return key, {"kind": kind, "path": str(path), "degree": degree}


@dataclass
class Plan:
    """A sweep expanded and grouped.

    Attributes
    ----------
    spec : SweepSpec
    points : list of Point
        Every point, in flat order.
    groups : dict
        Yield-function key -> flat indices of the points that use it.
    jobs : dict
        Yield-function key -> what computes it (:func:`yield_key`).
    stages : tuple of str
        The stages the outputs need.
    coords : dict
        The outputs' own coordinates (``readout_photons``, ``light_level``, ``disorder_kappa``), equal at every point.
    """

    spec: SweepSpec
    points: list
    groups: dict
    jobs: dict
    stages: tuple
    coords: dict


def plan_sweep(spec: SweepSpec, work_dir: str | Path | None = None) -> Plan:
    """Expand ``spec`` and group its points by yield function (module docstring).

    Parameters
    ----------
    spec : SweepSpec
    work_dir : str or Path, optional
        The output folder (changed spin systems are written to its ``systems/``).

    Returns
    -------
    Plan

    Raises
    ------
    InputError
        A point is invalid, or an output's own coordinates (photon levels, light names,
        concentrations) differ between points.
    """
    points = expand(spec, work_dir)
    groups: dict[str, list[int]] = {}
    jobs: dict[str, dict] = {}
    memo: dict[tuple, tuple] = {}
    for p in points:
        sc = p.scenario
        kind, path = sc.yield_source
        mk = (kind, str(path), sc["yield"]["degree"], sc["yield"]["method"], sc["yield"]["field_uT"],
              json.dumps(sc["field"], default=str, sort_keys=True))
        if mk not in memo:
            memo[mk] = yield_key(sc)
        key, job = memo[mk]
        groups.setdefault(key, []).append(p.index)
        jobs.setdefault(key, job)
    needed = {d for o in spec.outputs for d in OUTPUTS[o].dims}
    coords = output_coords(points[0].scenario)
    for p in points[1:]:
        c = output_coords(p.scenario)
        for d in needed:
            if c[d].shape != coords[d].shape or not np.array_equal(c[d], coords[d]):
                raise InputError(f"the outputs' {d!r} coordinates differ between points ({p.label()}); sweep "
                                 f"them through an axis or keep them equal", source=spec.source, key="sweep.outputs")
    return Plan(spec, points, groups, jobs, stages_for(spec.outputs), {d: coords[d] for d in needed})


# ----------------------------------------------------------------------------------------------
# tasks (run in the workers; plain functions so that joblib and Dask can ship them)


def compute_yield(job: dict):
    """Compute or load one yield function (a task), with one BLAS and one numba thread.

    Parameters
    ----------
    job : dict
        From :func:`yield_key`.

    Returns
    -------
    retina.yieldfn.YieldFunction
    """
    from retina.yieldfn import YieldFunction

    with single_threaded():
        if job["kind"] == "system":
            return YieldFunction.from_system(job["system"], job["field_uT"], degree=job["degree"],
                                             method=job["method"], cache=False)
        if job["kind"] == "file":
            return YieldFunction.load(job["path"])
        from retina.io.importers import import_table

        return import_table(job["path"], job["degree"])


def _try_yield(job: dict):
    """:func:`compute_yield`, returning the one-line error message instead of raising."""
    try:
        return compute_yield(job)
    except Exception as exc:  # noqa: BLE001 - reported with the points that needed it
        return " ".join(f"{type(exc).__name__}: {exc}".split())


def evaluate_batch(points: list, yf, stages: tuple, outputs: tuple) -> list[dict]:
    """Run points that share the yield function ``yf`` (a task).

    Parameters
    ----------
    points : list of Point
    yf : YieldFunction
        Their yield function.
    stages : tuple of str
        The stages to run.
    outputs : tuple of str
        The outputs to collect.

    Returns
    -------
    list of dict
        Per point: ``index``, ``ok``, ``values`` (output name -> ndarray) or ``error`` (one line),
        ``seconds``.
    """
    from retina.pipeline import run

    out = []
    with single_threaded():
        for p in points:
            t0 = time.perf_counter()
            try:
                res = run(p.scenario, stages=stages, yield_function=yf)
                vals = extract(res.groups, outputs)
                out.append({"index": p.index, "ok": True, "values": vals, "seconds": time.perf_counter() - t0})
            except Exception as exc:  # noqa: BLE001 - a failing point must not sink the others
                msg = " ".join(f"{type(exc).__name__}: {exc}".split())
                out.append({"index": p.index, "ok": False, "error": msg, "seconds": time.perf_counter() - t0})
    return out


# ----------------------------------------------------------------------------------------------
# executors: joblib (local processes) or Dask (a scheduler address or a Client)


class _Executor:
    """Map a function over argument tuples, yielding results as they finish (any order)."""

    def __init__(self, jobs: int | None = None, scheduler=None):
        self.scheduler = scheduler
        self.jobs = jobs
        self._client = None
        self._own_client = False
        if scheduler is not None:
            try:
                from distributed import Client
            except ImportError:
                raise InputError("--scheduler needs dask.distributed (pip install 'retina-compass[cluster]')",
                                 source=str(scheduler), key="--scheduler") from None

            if isinstance(scheduler, str):
                try:
                    self._client = Client(scheduler, timeout="10s")
                except (OSError, TimeoutError) as exc:
                    raise InputError(f"cannot reach the Dask scheduler ({exc})", source=scheduler,
                                     key="--scheduler") from None
                self._own_client = True
            else:
                self._client = scheduler
            self.workers = max(1, sum(self._client.nthreads().values()))
        else:
            n = jobs if jobs is not None else (os.cpu_count() or 1)
            if n < 1:
                raise InputError(f"expected --jobs >= 1, got {n}", key="--jobs")
            self.workers = int(n)

    def map_unordered(self, fn: Callable, arglist: list):
        """Start every task now and return an iterator over their results in finishing order.

        Local workers and Dask start working at once (the caller may do other work meanwhile);
        with one worker the tasks run in this process as the iterator is consumed.  Closing the
        iterator (or an exception while consuming it) cancels the tasks not yet finished.
        """
        if not arglist:
            return iter(())
        if self._client is not None:
            from distributed import as_completed

            futures = [self._client.submit(fn, *a, pure=False) for a in arglist]

            def results():
                try:
                    for fut in as_completed(futures):
                        yield fut.result()
                finally:
                    for f in futures:
                        if not f.done():
                            f.cancel()
            return results()
        if self.workers == 1:
            return (fn(*a) for a in arglist)
        from joblib import Parallel, delayed, parallel_config

        with parallel_config(backend="loky", inner_max_num_threads=1):
            par = Parallel(n_jobs=self.workers, return_as="generator_unordered")
            return par(delayed(fn)(*a) for a in arglist)

    def close(self):
        if self._own_client and self._client is not None:
            self._client.close()


# ----------------------------------------------------------------------------------------------
# the point files


def _point_file(work: Path, p: Point, key: str) -> Path:
    return work / f"p{p.index:07d}-{p.digest(key)}.npz"


def _failed_file(work: Path, p: Point, key: str) -> Path:
    return work / f"p{p.index:07d}-{p.digest(key)}.failed.json"


def _save_point(work: Path, p: Point, key: str, rec: dict) -> None:
    import io

    from retina.io.atomic import atomic_write_bytes, atomic_write_text

    if rec["ok"]:
        buf = io.BytesIO()
        np.savez(buf, __seconds=np.float64(rec["seconds"]), **rec["values"])
        atomic_write_bytes(_point_file(work, p, key), buf.getvalue(), force=True)
        _failed_file(work, p, key).unlink(missing_ok=True)
    else:
        atomic_write_text(_failed_file(work, p, key), json.dumps(
            {"index": p.index, "params": {k: (v if not isinstance(v, Path) else str(v)) for k, v in p.params.items()},
             "error": rec["error"]}, indent=1), force=True)


def _load_point(work: Path, p: Point, key: str, outputs) -> dict | None:
    f = _point_file(work, p, key)
    if not f.is_file():
        return None
    try:
        with np.load(f) as z:
            vals = {n: np.array(z[n]) for n in outputs}
            secs = float(z["__seconds"])
    except (OSError, KeyError, ValueError):
        return None   # damaged or from other outputs: recompute
    return {"values": vals, "seconds": secs}


# ----------------------------------------------------------------------------------------------
# running


@dataclass
class SweepOutcome:
    """What :func:`run_sweep` did.

    Attributes
    ----------
    dataset : xarray.Dataset
        Every output over the sweep's dimensions (:mod:`retina.sweep.store`).
    path : Path or None
        The netCDF file written.
    computed, reused : int
        Points computed in this run and points found finished in the work folder.
    failures : list of (Point, str)
    yield_functions : int
        Distinct yield functions; ``yield_computed`` of them were computed (the rest from the cache).
    yield_computed : int
    seconds : float
    estimate : str
        The estimate printed before the work started.
    """

    dataset: object
    path: Path | None
    computed: int
    reused: int
    failures: list = field(default_factory=list)
    yield_functions: int = 0
    yield_computed: int = 0
    seconds: float = 0.0
    estimate: str = ""


def _prepare_folder(out: Path, spec: SweepSpec, force: bool) -> Path:
    import shutil

    from retina.io.atomic import atomic_write_text

    fp = spec.fingerprint()
    plan_file = out / PLAN_FILE
    if out.exists():
        if not out.is_dir():
            raise InputError("exists and is not a folder", source=out)
        if any(out.iterdir()):
            same = False
            if plan_file.is_file():
                try:
                    same = json.loads(plan_file.read_text()).get("fingerprint") == fp
                except (OSError, ValueError):
                    same = False
            if not same and not force:
                raise InputError("output folder holds something other than this sweep's work; pass --force to "
                                 "replace it (or use another folder)", source=out)
            if not same or force:
                # only remove what a sweep writes
                shutil.rmtree(out / POINTS_DIR, ignore_errors=True)
                shutil.rmtree(out / "systems", ignore_errors=True)
    else:
        if not out.parent.exists():
            raise InputError(f"folder {out.parent} does not exist", source=out)
        out.mkdir()
    (out / POINTS_DIR).mkdir(exist_ok=True)
    atomic_write_text(plan_file, json.dumps({"fingerprint": fp, "name": spec.name,
                                             "sweep_source": str(spec.source or "")}, indent=1), force=True)
    return out / POINTS_DIR


def _batches(indices: list[int], n_total: int, workers: int) -> list[list[int]]:
    """Split one group's points into batches: about eight tasks per worker over the whole sweep.

    Small enough that the workers finish together (a sweep of 16 points on 2 workers runs one point
    per task, so no worker waits idle through the last batch), large enough that a sweep of
    thousands of points does not pay a task's overhead per point."""
    target = max(1, 8 * workers)
    per = max(1, math.ceil(n_total / target))
    return [indices[i:i + per] for i in range(0, len(indices), per)]


def run_sweep(spec: SweepSpec, out_dir: str | Path, *, jobs: int | None = None, scheduler=None,
              force: bool = False, progress: Callable[[int, int], None] | None = None,
              log: Callable[[str], None] | None = None, write: bool = True) -> SweepOutcome:
    """Run every missing point of a sweep and write the dataset.

    Parameters
    ----------
    spec : SweepSpec
    out_dir : str or Path
        Output folder: ``sweep.nc``, ``plan.json`` and the work folder ``points/``.
    jobs : int, optional
        Local worker processes (default: every core); 1 runs in this process.
    scheduler : str or distributed.Client, optional
        A Dask scheduler address (``tcp://host:8786``) or a client; then ``jobs`` is ignored.
    force : bool
        Start afresh in a folder holding another sweep's (or this sweep's) work.
    progress : callable(done, total), optional
        Over points (finished points found in the folder count as done at the start).
    log : callable(str), optional
        Receives the plan and the estimate before the work starts, one line each.
    write : bool
        Write ``sweep.nc`` (atomically, replacing an earlier one of the same sweep).

    Returns
    -------
    SweepOutcome

    Raises
    ------
    InputError
        Bad sweep, unusable folder, unreachable scheduler.
    KeyboardInterrupt
        On Ctrl-C, after the finished points are safely on disk.
    """
    from retina.cache import YieldCache
    from retina.sweep.store import to_dataset, save_dataset

    t_start = time.perf_counter()
    say = log or (lambda s: None)
    out = Path(out_dir)
    work = _prepare_folder(out, spec, force)
    plan = plan_sweep(spec, out)
    pts = plan.points
    n = len(pts)
    key_of = {i: k for k, idx in plan.groups.items() for i in idx}
    done: dict[int, dict] = {}
    for p in pts:
        rec = _load_point(work, p, key_of[p.index], spec.outputs)
        if rec is not None:
            done[p.index] = rec
    reused = len(done)
    todo_groups = {k: [i for i in idx if i not in done] for k, idx in plan.groups.items()}
    todo_groups = {k: v for k, v in todo_groups.items() if v}
    n_todo = sum(len(v) for v in todo_groups.values())

    store = YieldCache()
    yfs: dict[str, object] = {}
    missing = []
    for key in todo_groups:
        job = plan.jobs[key]
        if job["kind"] == "system":
            rec = store.get(key)
            if rec is not None:
                from retina.yieldfn import YieldFunction

                yfs[key] = YieldFunction.from_record(rec)
                continue
        missing.append(key)

    n_yield_computed = len(missing)
    ex = _Executor(jobs, scheduler)
    failures: list = []
    computed = 0
    estimate = ""
    try:
        say(f"sweep {spec.name!r}: {n} point(s) over {' x '.join(str(s) for s in spec.shape)} "
            f"({', '.join(a.name for a in spec.axes)}); {len(plan.groups)} distinct yield function(s)")
        say(f"  {reused} point(s) finished earlier, {n_todo} to compute; yield functions: "
            f"{len(todo_groups) - len(missing)} from the cache, {len(missing)} to compute; "
            f"{ex.workers} worker(s)" + (" (Dask)" if scheduler is not None else ""))
        y_est = _yield_estimate([plan.jobs[k] for k in missing])
        if progress:
            progress(reused, n)
        # yield functions not in the cache: one task each, before the points that need them
        if missing:
            if y_est:
                say(f"estimate: {len(missing)} yield function(s), about {_duration(y_est / ex.workers)} "
                    f"on {ex.workers} worker(s) (the engine's cost model)")
            for key, got in zip(missing, _ordered(ex, _try_yield, [(plan.jobs[k],) for k in missing])):
                if isinstance(got, str):
                    # the yield function failed: its points fail with the message, the others go on
                    for i in todo_groups.pop(key):
                        computed += _collect(work, pts, key_of, {"index": i, "ok": False, "seconds": 0.0,
                                                                 "error": f"yield function: {got}"}, done, failures)
                    if progress:
                        progress(reused + computed + len(failures), n)
                else:
                    yfs[key] = _store_yield(store, key, plan.jobs[key], got)
            n_todo = sum(len(v) for v in todo_groups.values())
        if n_todo:
            # the first point runs here, timed, for the estimate (its result is kept like any other);
            # the workers start on the others meanwhile
            first_key = next(iter(todo_groups))
            i0 = todo_groups[first_key].pop(0)
            tasks = []
            for key, idx in todo_groups.items():
                for b in _batches(idx, n_todo - 1, ex.workers):
                    tasks.append(([pts[i] for i in b], yfs[key], plan.stages, spec.outputs))
            results = ex.map_unordered(evaluate_batch, tasks)
            try:
                (rec,) = evaluate_batch([pts[i0]], yfs[first_key], plan.stages, spec.outputs)
                computed += _collect(work, pts, key_of, rec, done, failures)
                if progress:
                    progress(reused + computed + len(failures), n)
                left = n_todo - 1
                estimate = (f"estimate: {left} more point(s) at about {rec['seconds']:.1f} s each (measured on the "
                            f"first" + (", while the workers started: on the high side" if ex.workers > 1 else "")
                            + f") on {ex.workers} worker(s): about {_duration(rec['seconds'] * left / ex.workers)}")
                say(estimate)
                for recs in results:
                    for rec in recs:
                        computed += _collect(work, pts, key_of, rec, done, failures)
                    if progress:
                        progress(reused + computed + len(failures), n)
            finally:
                close = getattr(results, "close", None)
                if close is not None:
                    close()
    finally:
        ex.close()
    failures.sort(key=lambda f: f[0].index)
    ds = to_dataset(plan, {i: r["values"] for i, r in done.items()}, {f[0].index: f[1] for f in failures})
    path = None
    if write:
        path = save_dataset(ds, out / "sweep.nc", force=True)
    return SweepOutcome(ds, path, computed, reused, failures, len(plan.groups), n_yield_computed,
                        time.perf_counter() - t_start, estimate)


def _ordered(ex: _Executor, fn, arglist):
    """Results of ``fn`` over ``arglist`` in argument order (the executor may finish them in any order)."""
    tagged = [(i,) + tuple(a) for i, a in enumerate(arglist)]
    res = dict(ex.map_unordered(_tagged, [(fn,) + t for t in tagged]))
    return [res[i] for i in range(len(arglist))]


def _tagged(fn, i, *args):
    return i, fn(*args)


def _store_yield(store, key: str, job: dict, yf):
    if job["kind"] == "system":
        try:
            yf.provenance["input_hash"] = key
            store.put(key, yf)
        except (OSError, InputError):  # the result stands; only the cache entry is lost
            pass
    return yf


def _collect(work: Path, pts: list, key_of: dict, rec: dict, done: dict, failures: list) -> int:
    p = pts[rec["index"]]
    _save_point(work, p, key_of[p.index], rec)
    if rec["ok"]:
        done[p.index] = rec
        return 1
    failures.append((p, rec["error"]))
    return 0


def _yield_estimate(jobs: list) -> float | None:
    """Seconds for the yield functions to compute, from the engine's cost model (None when unknown)."""
    if not jobs:
        return 0.0
    from retina import sphere
    from retina.spin import engine

    total = 0.0
    for j in jobs:
        if j["kind"] != "system":
            return None
        n_dirs = len(sphere.grid_for_degree(j["degree"]).points) // 2 + 200
        total += engine.estimate_cost(j["system"], n_dirs, j["method"]).seconds
    return total


def _duration(s: float) -> str:
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"
