"""``retina patterns``: modulation patterns over both retinas for the scenario's list of headings."""

from __future__ import annotations

import argparse

from retina.commands import _common

_EXAMPLES = """\
examples:
  retina patterns assets/demo_scenario.toml -o patterns-out
  retina patterns my_scenario.toml -o out --headings 0,30,60,90 --force

Writes OUT/results.h5 (yield function, receptors, patterns with provenance), OUT/figures/
(yield_sphere, modulation_fields as PNG and SVG) and OUT/index.html + OUT/report.md.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def register(subparsers) -> None:
    """Add the ``retina patterns`` parser to the sub-parser collection.

    The scenario options are those of :func:`retina.commands._common.add_common_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "patterns", help="render the modulation pattern over both retinas for a list of headings",
        description="Build the scenario's yield function and retina, compute the yield and relative "
                    "modulation at every receptor for each heading in [pose] headings_deg (or --headings), "
                    "and write results, figures and a report.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", metavar="SCENARIO.toml", help="the scenario file")
    p.add_argument("--headings", default=None, metavar="LIST",
                   help="comma-separated headings in degrees, replacing [pose] headings_deg")
    _common.add_common_arguments(p)


def run(args) -> int:
    """Run ``retina patterns`` with parsed options.

    Stage ``patterns`` of the scenario (:func:`retina.commands._common.run_command`): results, figures and report written together.

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
    return _common.run_command(args, ("patterns",), title=None)
