"""``retina trials``: simulated orientation trials at every light level, with circular statistics."""

from __future__ import annotations

import argparse

from retina.commands import _common

_EXAMPLES = """\
examples:
  retina trials assets/demo_scenario.toml -o trials-out
  retina trials my_scenario.toml -o out --seed 3 --force

Each trial: a random true heading, a head scan of [trials] scan_steps poses, a maximum-likelihood
heading estimate from the photon counts, a turn towards [trials] goal_deg.  Writes OUT/results.h5,
OUT/figures/trial_histograms and OUT/index.html + OUT/report.md (mean direction, r, Rayleigh and
V tests).

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def register(subparsers) -> None:
    """Add the ``retina trials`` parser to the sub-parser collection.

    The scenario options are those of :func:`retina.commands._common.add_common_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "trials", help="simulate orientation trials and test their directions (Rayleigh, V test)",
        description="Simulate orientation trials of a bird that reads its heading from the magnetic "
                    "modulation pattern under photon noise, at each light level of the scenario.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("scenario", metavar="SCENARIO.toml", help="the scenario file")
    _common.add_common_arguments(p)


def run(args) -> int:
    """Run ``retina trials`` with parsed options.

    Stage ``trials`` of the scenario (:func:`retina.commands._common.run_command`).

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
    return _common.run_command(args, ("trials",))
