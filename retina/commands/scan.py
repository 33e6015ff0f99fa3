"""``retina scan``: the modulation pattern through a head scan, and the heading information it adds."""

from __future__ import annotations

import argparse

from retina.commands import _common

_EXAMPLES = """\
examples:
  retina scan assets/demo_scenario.toml -o scan-out
  retina scan my_scenario.toml -o out --no-animation --formats png,pdf --force

The scan is [scan] steps yaw angles over heading_deg +/- amplitude_deg.  Writes OUT/results.h5,
OUT/figures/ (scan_filmstrip, scan_animation.gif, precision_curves with the single-pose and scan
bounds) and OUT/index.html + OUT/report.md.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def register(subparsers) -> None:
    """Add the ``retina scan`` parser to the sub-parser collection.

    The scenario options are those of :func:`retina.commands._common.add_common_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "scan", help="analyse a head scan: film strip, animation, single-pose versus scan precision",
        description="Sweep the head through the scenario's [scan] and record the pattern at every pose; "
                    "compare the Cramer-Rao bound and the decoding error of one pose with those of the "
                    "whole scan.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", metavar="SCENARIO.toml", help="the scenario file")
    _common.add_common_arguments(p)


def run(args) -> int:
    """Run ``retina scan`` with parsed options.

    Stages ``scan`` and ``precision`` of the scenario (:func:`retina.commands._common.run_command`).

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
    return _common.run_command(args, ("scan", "precision"))
