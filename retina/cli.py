"""The ``retina`` command line: a thin shell over the core.

Subcommands live one per module in :mod:`retina.commands` (see its docstring).  Exit statuses
(owned here): 0 done, 1 failed (an unexpected error; ``--traceback`` shows it), 2 bad input
(:class:`~retina.errors.InputError`, printed as one line on stderr, or a
:class:`~retina.errors.ResourceError` refusal, printed with its advice) and 130 interrupted
(Ctrl-C; outputs are written atomically, so no partial file is left).

Diagnostics (owned here): the core logs through the ``retina`` logger; the command line shows
warnings on stderr by default, ``-v`` adds the steps and their timings (INFO), ``-vv`` debug
detail, and ``--quiet`` shows errors only (and turns the progress bars off).  Python warnings are
routed through the same handler.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys

from retina.errors import Cancelled, InputError, ResourceError

__all__ = ["main", "build_parser", "EXIT_OK", "EXIT_FAILED", "EXIT_INPUT", "EXIT_INTERRUPTED"]

EXIT_OK, EXIT_FAILED, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130

_EPILOG = """\
examples:
  retina demo
      the whole job on the bundled invented scenario, into ./retina-demo
  retina yields assets/example_pair.toml -o pair.h5
      the yield function of the example pair at 50 uT, degree 16
  retina yields my_pair.toml -o my_pair.h5 --field-uT 47 --degree 24 --method liouville
  retina -v demo --quick
      the same with the steps and their timings on stderr
  retina COMMAND --help
      everything about one command

exit status: 0 done, 1 failed, 2 bad input, 130 interrupted
"""


def _one_line(text: str) -> str:
    return " ".join(part.strip() for part in str(text).splitlines() if part.strip())


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line on stderr (exit 2), like every other
    refusal of bad input; ``retina COMMAND --help`` shows the usage."""

    def error(self, message: str):  # noqa: D102 - argparse API
        self.exit(EXIT_INPUT, f"{self.prog}: error: {_one_line(message)} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    """The full parser, with every subcommand of :data:`retina.commands.COMMANDS` registered.

    Returns
    -------
    argparse.ArgumentParser
        Global options (``-v``, ``--quiet``, ``--traceback``, ``--version``) and one sub-parser per
        command.
    """
    import retina
    from retina.commands import COMMANDS

    parser = _Parser(
        prog="retina",
        description="retina-compass: from a radical-pair yield function to the magnetic modulation "
                    "pattern over a bird's retinas, and the heading information it carries.",
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"retina-compass {retina.__version__}")
    parser.add_argument("--traceback", action="store_true",
                        help="on an unexpected failure, print the full Python traceback")
    parser.add_argument("-v", "--verbose", action="count", default=0, dest="verbosity",
                        help="more diagnostics on stderr: -v the steps and their timings, -vv debug detail")
    parser.add_argument("-q", "--quiet", action="store_true", dest="log_quiet",
                        help="errors only on stderr: no warnings, no diagnostics, no progress bars")
    subparsers = parser.add_subparsers(title="commands", metavar="COMMAND", dest="command")
    for name in COMMANDS:
        module = importlib.import_module(f"retina.commands.{name}")
        before = set(subparsers.choices)
        module.register(subparsers)
        for added in set(subparsers.choices) - before:
            subparsers.choices[added].set_defaults(_run=module.run)
    return parser


class _Logging:
    """Route the ``retina`` logger and Python warnings to stderr at the chosen level, for one run."""

    def __init__(self, verbosity: int = 0, quiet: bool = False):
        if quiet:
            self.level = logging.ERROR
        else:
            self.level = (logging.WARNING, logging.INFO, logging.DEBUG)[min(max(int(verbosity), 0), 2)]
        self.handler = logging.StreamHandler(sys.stderr)
        self.handler.setFormatter(logging.Formatter("retina: %(levelname)s: %(message)s"))
        self.loggers = (logging.getLogger("retina"), logging.getLogger("py.warnings"))
        self.saved = []

    def __enter__(self):
        for lg in self.loggers:
            self.saved.append((lg.level, lg.propagate))
            lg.addHandler(self.handler)
            lg.setLevel(self.level)
            lg.propagate = False
        logging.captureWarnings(True)
        return self

    def __exit__(self, *exc):
        logging.captureWarnings(False)
        for lg, (level, propagate) in zip(self.loggers, self.saved):
            lg.removeHandler(self.handler)
            lg.setLevel(level)
            lg.propagate = propagate
        return False


def main(argv: list[str] | None = None) -> int:
    """Run the command line.

    Never raises (except ``SystemExit`` from Python itself): errors become one line on stderr.

    Parameters
    ----------
    argv : list of str, optional
        Arguments (default ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status: 0 done, 1 failed, 2 bad input or a refusal, 130 interrupted.
    """
    argv = sys.argv[1:] if argv is None else list(argv)
    show_traceback = "--traceback" in argv
    try:
        parser = build_parser()
        try:
            args = parser.parse_args(argv)
        except SystemExit as exc:  # --help, --version, or a usage error (argparse printed it)
            return int(exc.code) if isinstance(exc.code, int) else (EXIT_INPUT if exc.code else EXIT_OK)
        run = getattr(args, "_run", None)
        if run is None:
            parser.print_help(sys.stderr)
            return EXIT_INPUT
        if args.log_quiet and hasattr(args, "quiet"):
            args.quiet = True
        with _Logging(args.verbosity, args.log_quiet):
            return int(run(args))
    except InputError as exc:
        print(f"retina: error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_INPUT
    except ResourceError as exc:
        print(f"retina: refused: {_one_line(exc)}", file=sys.stderr)
        return EXIT_INPUT
    except (KeyboardInterrupt, Cancelled):
        print("retina: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except Exception as exc:  # noqa: BLE001 - the last line of defence of a command-line tool
        if show_traceback:
            import traceback

            traceback.print_exc()
        print(f"retina: failed: {type(exc).__name__}: {_one_line(exc)}"
              + ("" if show_traceback else " (run again with --traceback for details)"), file=sys.stderr)
        return EXIT_FAILED
