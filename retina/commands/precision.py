"""``retina precision``: heading precision against light level, and its tolerance to disorder."""

from __future__ import annotations

import argparse

from retina.commands import _common

_EXAMPLES = """\
examples:
  retina precision assets/demo_scenario.toml -o precision-out
  retina precision my_scenario.toml -o out --seed 7 --force

Photon levels come from [readout] photons, the disorder sweep from [ordering] disorder_kappas,
the order study's concentrations from [ordering] study_kappas, the named light levels from
[light].  Writes OUT/results.h5, OUT/figures/ (precision_curves, disorder_tolerance,
order_study) and OUT/index.html + OUT/report.md.

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def register(subparsers) -> None:
    """Add the ``retina precision`` parser to the sub-parser collection.

    The scenario options are those of :func:`retina.commands._common.add_common_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "precision", help="Cramer-Rao bounds and decoding errors against photons; the disorder sweep",
        description="Compute the Fisher information on heading from Poisson receptor counts, its "
                    "Cramer-Rao bound and the error of a maximum-likelihood decoder at every photon level, "
                    "for one pose and for the head scan, sweep the molecular disorder and compare restraint "
                    "classes (how much order the compass needs).",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", metavar="SCENARIO.toml", help="the scenario file")
    _common.add_common_arguments(p)


def run(args) -> int:
    """Run ``retina precision`` with parsed options.

    Stages ``scan``, ``precision``, ``disorder`` and ``order`` of the scenario (:func:`retina.commands._common.run_command`).

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
    return _common.run_command(args, ("scan", "precision", "disorder", "order"))
