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
    return _common.run_command(args, ("patterns",), title=None)
