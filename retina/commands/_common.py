"""Command-line glue shared by the scenario subcommands (demo, patterns, scan, precision, trials):
the common options, the command-line overrides of a scenario and :func:`run_command`.
"""

from __future__ import annotations

from pathlib import Path

from retina.commands._types import MAX_MEMORY_GB, whole
from retina.errors import InputError
from retina.scenario import Scenario

__all__ = ["add_common_arguments", "apply_overrides", "run_command"]


def add_common_arguments(p, *, output_required: bool = False, default_output: str | None = None) -> None:
    """Add the options every scenario subcommand shares.

    Parameters
    ----------
    p : argparse.ArgumentParser
    output_required : bool
        ``-o`` must be given.
    default_output : str, optional
        Default of ``-o`` (else the scenario's ``[output] dir``).
    """
    p.add_argument("-o", "--output", metavar="DIR", required=output_required, default=default_output,
                   help="output folder (results.h5, figures/, index.html, report.md); default: the "
                        "scenario's [output] dir" if default_output is None else
                        f"output folder (default: {default_output})")
    p.add_argument("--force", action="store_true", help="write into an existing, non-empty output folder")
    p.add_argument("--quick", action="store_true",
                   help="reduced grids, receptors, repeats and trials (a smoke test, not a result)")
    p.add_argument("--seed", type=whole("a seed", low=0, high=2**63 - 1), default=None, help="override the scenario's [scenario] seed")
    p.add_argument("--formats", default=None, metavar="LIST",
                   help="figure formats, comma-separated among png,svg,pdf (default: the scenario's)")
    p.add_argument("--dpi", type=whole("a resolution in dots per inch", low=50, high=1200), default=None, help="PNG resolution (default: the scenario's, 300)")
    p.add_argument("--no-animation", action="store_true", help="skip the head-scan GIF")
    p.add_argument("--max-memory-gb", type=MAX_MEMORY_GB, default=None, metavar="GB",
                   help="refuse to start a stage whose memory estimate exceeds this (default: 60 %% of "
                        "the available memory)")
    p.add_argument("-j", "--jobs", type=whole("a number of processes", low=1, high=256), default=None,
                   metavar="N", help="processes drawing the figures (default: every core, at most one per figure)")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bars; print only the summary")


def apply_overrides(sc: Scenario, args) -> Scenario:
    """The scenario with the command-line options ``--seed``, ``--headings``, ``--formats``,
    ``--dpi`` and ``--no-animation`` applied.

    Parameters
    ----------
    sc : Scenario
    args : argparse.Namespace

    Returns
    -------
    Scenario

    Raises
    ------
    InputError
        Naming the option, for a bad value.
    """
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
    """Load the scenario, run ``stages``, write results, figures and report; print a summary.

    ``--quick`` reduces the scenario first and the command-line overrides (``--headings``,
    ``--seed``, ``--dpi``, ...) apply after it, so what the user typed is never cut back.

    Parameters
    ----------
    args : argparse.Namespace
        The parsed options of :func:`add_common_arguments` (and ``scenario``).
    stages : sequence of str
        Stage names (:data:`retina.stages.STAGES`).
    scenario_path : str or Path, optional
        Instead of ``args.scenario``.
    title : str, optional
        Report title.

    Returns
    -------
    int
        The exit status, 0.
    """
    import os
    import time

    from retina.build import quick_scenario
    from threadpoolctl import threadpool_limits

    from retina.outputs import OutputWriter
    from retina.outputs.text import summary_text
    from retina.pipeline import run
    from retina.progress import ProgressBars
    from retina.scenario import load_scenario

    t0 = time.perf_counter()
    sc = load_scenario(scenario_path or args.scenario)
    if args.quick:
        sc = quick_scenario(sc)
    sc = apply_overrides(sc, args)
    out = args.output
    if out is None:
        out = sc["output"]["dir"]
    out = Path(out)
    # Refuse early, before any computation, when the output would be overwritten.
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.force:
        raise InputError("output folder exists and is not empty; pass --force to overwrite it", source=out)
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist", source=out)
    from retina.io.atomic import check_folder_writable

    check_folder_writable(out.parent)  # before any computation
    bars = ProgressBars(enabled=not args.quiet)
    o = sc["output"]
    jobs = getattr(args, "jobs", None)
    try:
        max_bytes = None if args.max_memory_gb is None else int(args.max_memory_gb * 2**30)
        # Figures are drawn on worker processes while the later stages compute (OutputWriter); the
        # stages then use one BLAS thread, since the workers have the other cores (OpenBLAS's
        # threads spin while they wait, measured at 30-40 % more CPU for the same stages).
        with OutputWriter(out, force=args.force, formats=o["formats"], dpi=o["dpi"], animation=o["animation"],
                          jobs=(os.cpu_count() or 1) if jobs is None else jobs) as writer, \
                threadpool_limits(1 if writer.pool is not None else None, user_api="blas"):
            res = run(sc, stages=stages, progress_factory=bars, max_bytes=max_bytes,
                      on_group=writer.results_so_far)
            res.provenance["quick"] = bool(args.quick)
            paths = writer.finish(res, title=title, progress_factory=bars)
    finally:
        bars.close()
    print(summary_text(res, paths, time.perf_counter() - t0))
    return 0
