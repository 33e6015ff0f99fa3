"""``retina sweep SWEEP.toml``: run a parameter sweep on all local cores or a Dask cluster.

The sweep file's schema: :mod:`retina.sweep.schema`.  What the output folder holds: ``sweep.nc``
(the dataset, :mod:`retina.sweep.store`), ``figures/`` (:mod:`retina.sweep.figures`),
``plan.json`` and ``points/`` (the finished points; running the same command again computes only
the missing ones).
"""

from __future__ import annotations

import argparse
from pathlib import Path

from retina.errors import InputError

_EXAMPLES = """\
examples:
  retina sweep assets/example_sweep.toml               on every local core, into ./example_sweep
  retina sweep my_sweep.toml -o runs/s1 --jobs 2       two local worker processes
  retina sweep my_sweep.toml --scheduler tcp://head:8786
                                                       on a running dask.distributed scheduler
  retina sweep my_sweep.toml -o runs/s1                after Ctrl-C: computes only the missing points
  retina sweep --list-outputs                          what a sweep can collect

Read the result with retina.sweep.load("runs/s1/sweep.nc") or xarray.open_dataset(...).

exit status: 0 done, 1 some points failed (the others are in the dataset), 2 bad input,
130 interrupted (finished points are kept)
"""


def register(subparsers) -> None:
    """Add the ``retina sweep`` parser to the sub-parser collection.

    Options: the sweep file, workers or scheduler, ``--resume``, ``--force``.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "sweep", help="run a parameter sweep (a base scenario over axes) on all cores or a Dask cluster",
        description="Run every point of a sweep file (a base scenario, axes over any scenario or spin-system "
                    "key, outputs to collect), one yield function per group of points, and write one labelled "
                    "dataset (sweep.nc) with figures.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("sweep", metavar="SWEEP.toml", nargs="?", help="the sweep file")
    p.add_argument("-o", "--output", metavar="DIR", default=None,
                   help="output folder (default: the sweep file's name, in the current folder)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("-j", "--jobs", type=int, default=None,
                   help="local worker processes (default: every core; 1 runs in this process)")
    g.add_argument("--scheduler", metavar="ADDRESS", default=None,
                   help="address of a running dask.distributed scheduler (tcp://host:8786)")
    p.add_argument("--force", action="store_true",
                   help="start afresh in a folder that holds another (or this) sweep's work")
    p.add_argument("--formats", default="png,svg", metavar="LIST", help="figure formats (default png,svg)")
    p.add_argument("--dpi", type=int, default=200, help="PNG resolution (default 200)")
    p.add_argument("--no-figures", action="store_true", help="write the dataset only")
    p.add_argument("--list-outputs", action="store_true", help="print the collectable outputs and exit")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar or plan; print only the summary")


def _list_outputs() -> int:
    from retina.sweep.outputs import OUTPUTS

    for o in OUTPUTS.values():
        dims = f"({', '.join(o.dims)})" if o.dims else "()"
        print(f"{o.name:28s} {o.units:7s} {dims:34s} {o.long_name}  [stage: {o.stage or 'yield function'}]")
    return 0


def run(args) -> int:
    """Run ``retina sweep`` with parsed options.

    Runs a sweep file on local workers or a Dask cluster (or lists what a sweep can collect).

    Parameters
    ----------
    args : argparse.Namespace
        The options of its parser.

    Returns
    -------
    int
        Exit status: 0 done, 1 when some points failed.  Bad input and refusals raise
        :class:`~retina.errors.InputError` or :class:`~retina.errors.ResourceError`, which
        :func:`retina.cli.main` turns into exit 2.
    """
    import sys
    import time

    from retina.progress import ProgressBar
    from retina.sweep import load_sweep, run_sweep

    if args.list_outputs:
        return _list_outputs()
    if not args.sweep:
        raise InputError("expected a sweep file (retina sweep SWEEP.toml)", source="command line", key="SWEEP.toml")
    formats = [f.strip() for f in args.formats.split(",") if f.strip()]
    for f in formats:
        if f not in ("png", "svg", "pdf"):
            raise InputError(f"expected formats among png, svg, pdf, got {f!r}", source="command line",
                             key="--formats")
    if args.jobs is not None and args.jobs < 1:
        raise InputError(f"expected --jobs >= 1, got {args.jobs}", source="command line", key="--jobs")
    t0 = time.perf_counter()
    spec = load_sweep(args.sweep)
    out = Path(args.output) if args.output else Path.cwd() / Path(args.sweep).stem
    log = None if args.quiet else (lambda s: print(s, file=sys.stderr, flush=True))
    with ProgressBar(not args.quiet, "points", unit="pt") as bar:
        res = run_sweep(spec, out, jobs=args.jobs, scheduler=args.scheduler, force=args.force, progress=bar,
                        log=log)
    figs = []
    if not args.no_figures:
        from retina.sweep.figures import sweep_figures

        figs = sweep_figures(res.dataset, out / "figures", formats=formats, dpi=args.dpi)
    n = spec.n_points
    print(f"sweep {spec.name!r}: {n} point(s), {res.computed} computed, {res.reused} reused, "
          f"{len(res.failures)} failed; {res.yield_functions} yield function(s) ({res.yield_computed} computed) "
          f"in {time.perf_counter() - t0:.1f} s")
    for p, msg in res.failures:
        print(f"  failed: {p.label()}: {msg}")
    print(f"  dataset: {res.path}" + (f"  (figures: {out / 'figures'}, {len(figs)} files)" if figs else ""))
    return 1 if res.failures else 0
