"""``retina report``: rebuild the figures and the report from a results file."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from retina.commands._types import whole
from retina.errors import InputError

_EXAMPLES = """\
examples:
  retina report retina-demo/results.h5 -o demo-figures-pdf --formats png,pdf
  retina report out/results.h5 -o out --force      redraw in place

Reads a results.h5 written by demo, patterns, scan, precision or trials and draws every figure its
groups allow, then writes OUT/index.html and OUT/report.md.  Nothing is recomputed.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def register(subparsers) -> None:
    """Add the ``retina report`` parser to the sub-parser collection.

    Options: the results file, the output folder, ``--force``, formats.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "report", help="draw the figures and write the HTML/Markdown report from a results file",
        description="Redraw the figures and rewrite the report from a results HDF5 file, without "
                    "recomputing anything.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("results", metavar="RESULTS.h5", help="a results file")
    p.add_argument("-o", "--output", metavar="DIR", required=True, help="output folder")
    p.add_argument("--force", action="store_true", help="write into an existing, non-empty folder")
    p.add_argument("--formats", default="png,svg", metavar="LIST",
                   help="figure formats among png,svg,pdf (default: png,svg)")
    p.add_argument("--dpi", type=whole("a resolution in dots per inch", low=50, high=1200), default=300, help="PNG resolution (default: 300)")
    p.add_argument("--no-animation", action="store_true", help="skip the head-scan GIF")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bars")


def run(args) -> int:
    """Run ``retina report`` with parsed options.

    Rebuilds the figures and the report from a results file, without computing.

    Parameters
    ----------
    args : argparse.Namespace
        The options of its parser.

    Returns
    -------
    int
        Exit status: 0 done.  Bad input and refusals raise :class:`~retina.errors.InputError` or
        :class:`~retina.errors.ResourceError`, which :func:`retina.cli.main` turns into exit 2.
    """
    from retina.outputs import write_outputs
    from retina.outputs.text import summary_text
    from retina.progress import ProgressBars
    from retina.results import load_results

    t0 = time.perf_counter()
    formats = [f.strip() for f in args.formats.split(",") if f.strip()]
    for f in formats:
        if f not in ("png", "svg", "pdf"):
            raise InputError(f"expected formats among png, svg, pdf, got {f!r}", source="command line",
                             key="--formats")
    if not 50 <= args.dpi <= 1200:
        raise InputError(f"expected a dpi between 50 and 1200, got {args.dpi}", source="command line", key="--dpi")
    src = Path(args.results)
    res = load_results(src)
    out = Path(args.output)
    if out.exists() and (not out.is_dir() or any(out.iterdir())) and not args.force:
        raise InputError("output folder exists and is not empty; pass --force to overwrite it", source=out)
    if not out.parent.exists():
        raise InputError(f"folder {out.parent} does not exist", source=out)
    from retina.io.atomic import check_folder_writable

    check_folder_writable(out.parent)
    same = out.exists() and (out / "results.h5").exists() and (out / "results.h5").resolve() == src.resolve()
    bars = ProgressBars(enabled=not args.quiet)
    try:
        paths = write_outputs(res, out, force=args.force or False, formats=formats, dpi=args.dpi,
                              animation=not args.no_animation, progress_factory=bars,
                              save_results=not same)
    finally:
        bars.close()
    print(summary_text(res, paths, time.perf_counter() - t0))
    return 0
