"""``retina demo``: the whole job on the bundled, invented scenario, into a report folder.

The bundled scenario (``demo_scenario.toml`` in :mod:`retina.data`, source ``assets/``) computes
the yield function of an invented radical pair (``demo_pair.toml``), builds two eyes with partially
ordered receptors, and runs the patterns, a head scan, precision curves at bright and dim light, a
disorder sweep, the order study (how much molecular order the compass needs) and simulated
orientation trials.  README.md, section "The demo", says how to read the output.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from retina.commands import _common

DEFAULT_OUTPUT = "retina-demo"

_EXAMPLES = """\
examples:
  retina demo                      the full demo into ./retina-demo (under a minute on 2 cores)
  retina demo -o /tmp/demo --force write elsewhere, replacing an earlier run
  retina demo --quick              a reduced run (smaller grids, fewer receptors and trials)
  retina demo --scenario my.toml   the same job on your own scenario

Open retina-demo/index.html in a browser (figures are the files in retina-demo/figures/),
or read retina-demo/report.md.  All data are in retina-demo/results.h5.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def bundled_scenario() -> Path:
    """Path of the bundled demo scenario (:func:`retina.data.demo_scenario_path`).

    Returns
    -------
    Path
        The installed copy of ``assets/demo_scenario.toml``.
    """
    from retina.data import demo_scenario_path

    return demo_scenario_path()


def register(subparsers) -> None:
    """Add the ``retina demo`` parser to the sub-parser collection.

    The scenario options are those of :func:`retina.commands._common.add_common_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "demo", help="run the whole job on the bundled invented scenario and write a report folder",
        description="Run every stage (yield function, patterns, head scan, precision, disorder sweep, "
                    "order study, trials, RF conditions and RF frequency sweep) on the bundled invented scenario and write "
                    "results.h5, figures and an HTML + Markdown report.  RF exposure: the RF results describe a "
                    "model; work with RF transmitters follows the usual cautions and local regulations, and "
                    "animal experiments need ethics approval.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--scenario", metavar="SCENARIO.toml", default=None,
                   help="run this scenario instead of the bundled one")
    _common.add_common_arguments(p, default_output=DEFAULT_OUTPUT)


def run(args) -> int:
    """Run ``retina demo`` with parsed options.

    Every stage on the bundled scenario (:func:`bundled_scenario`), or a scenario given, into a report folder.

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
    path = Path(args.scenario) if args.scenario else bundled_scenario()
    return _common.run_command(args, ("patterns", "scan", "precision", "disorder", "order", "trials", "rf",
                                      "rf_sweep"),
                               scenario_path=path)
