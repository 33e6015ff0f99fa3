"""``retina export RESULTS.h5 --csv FILE --json FILE``: the key numbers of a run for spreadsheets and
scripts (:mod:`retina.outputs.export`)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from retina.errors import InputError

_EXAMPLES = """\
examples:
  retina export retina-demo/results.h5 --csv key.csv
  retina export retina-demo/results.h5 --json key.json --csv key.csv
  retina export retina-demo/results.h5 --csv -          to standard output

One row per number: group, name, value, units and up to two coordinates (photon level, heading,
concentration, light level).  The full arrays stay in results.h5 (xarray.open_dataset(path,
group="precision", engine="h5netcdf") reads a group with its dimensions and units).

exit status: 0 done, 1 failed, 2 bad input
"""


def register(subparsers) -> None:
    """Add the ``retina export`` parser to the sub-parser collection.

    Options: the results file, ``--csv``, ``--json``, ``--force``.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser("export", help="write the key numbers of a results file as CSV or JSON",
                              description="Write the key numbers of a results.h5 as CSV and/or JSON.",
                              epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("results", metavar="RESULTS.h5", help="a results file")
    p.add_argument("--csv", metavar="FILE", default=None, help="CSV file ('-' for standard output)")
    p.add_argument("--json", metavar="FILE", default=None, help="JSON file ('-' for standard output)")
    p.add_argument("--force", action="store_true", help="overwrite existing files")


def run(args) -> int:
    """Run ``retina export`` with parsed options.

    Writes the key numbers of a results file as CSV and/or JSON rows with units.

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
    from retina.io.atomic import atomic_write_text
    from retina.outputs.export import key_number_rows, rows_to_csv, rows_to_json
    from retina.results import load_results

    if not args.csv and not args.json:
        raise InputError("expected --csv FILE and/or --json FILE", source="command line", key="--csv/--json")
    res = load_results(Path(args.results))
    rows = key_number_rows(res)
    for target, text in ((args.csv, rows_to_csv), (args.json, None)):
        if not target:
            continue
        body = text(rows) if text else rows_to_json(rows, res.provenance)
        if target == "-":
            sys.stdout.write(body)
        else:
            atomic_write_text(target, body, force=args.force)
            print(f"{len(rows)} key numbers written to {target}", file=sys.stderr)
    return 0
