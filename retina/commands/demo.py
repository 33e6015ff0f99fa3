"""``retina demo``: the whole job on the bundled, invented scenario, into a report folder.

The bundled scenario (``assets/demo_scenario.toml``) computes the yield function of an invented
radical pair (``assets/demo_pair.toml``), builds two eyes with partially ordered receptors, and
runs the patterns, a head scan, precision curves at bright and dim light, a disorder sweep and
simulated orientation trials.  README.md, section "The demo", says how to read the output.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from retina.commands import _common
from retina.errors import InputError

DEFAULT_OUTPUT = "retina-demo"

_EXAMPLES = """\
examples:
  retina demo                      the full demo into ./retina-demo (about two minutes on 2 cores)
  retina demo -o /tmp/demo --force write elsewhere, replacing an earlier run
  retina demo --quick              a reduced run (smaller grids, fewer receptors and trials)
  retina demo --scenario my.toml   the same job on your own scenario

Open retina-demo/index.html in a browser (figures are the files in retina-demo/figures/),
or read retina-demo/report.md.  All data are in retina-demo/results.h5.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def bundled_scenario() -> Path:
    """Path of the bundled demo scenario (``assets/demo_scenario.toml`` of the source tree)."""
    import retina

    path = Path(retina.__file__).resolve().parent.parent / "assets" / "demo_scenario.toml"
    if not path.is_file():
        raise InputError("the bundled demo scenario is missing (expected in the source checkout's assets/ "
                         "folder); pass --scenario FILE", source=path)
    return path


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "demo", help="run the whole job on the bundled invented scenario and write a report folder",
        description="Run every stage (yield function, patterns, head scan, precision, disorder sweep, "
                    "trials, RF conditions and RF frequency sweep) on the bundled invented scenario and write "
                    "results.h5, figures and an HTML + Markdown report.  RF exposure: the RF results describe a "
                    "model; work with RF transmitters follows the usual cautions and local regulations, and "
                    "animal experiments need ethics approval.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--scenario", metavar="SCENARIO.toml", default=None,
                   help="run this scenario instead of the bundled one")
    _common.add_common_arguments(p, default_output=DEFAULT_OUTPUT)


def run(args) -> int:
    path = Path(args.scenario) if args.scenario else bundled_scenario()
    return _common.run_command(args, ("patterns", "scan", "precision", "disorder", "trials", "rf", "rf_sweep"),
                               scenario_path=path)
