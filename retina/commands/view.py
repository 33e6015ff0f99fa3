"""``retina view [SCENARIO.toml]``: open the desktop viewer (vispy + PyQt6).

The viewer lives in the ``retina_viewer`` package (folder ``gui/``) and needs the optional "viewer"
extra; this module imports it only inside :func:`run`, so the core and the rest of the command line
never load Qt or vispy.
Without the extra, or without a display, the command prints one line and exits with status 2.
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import sys

from retina.errors import InputError

__all__ = ["register", "add_arguments", "run", "main", "MISSING_EXTRA", "NO_DISPLAY"]

MISSING_EXTRA = "the viewer needs the viewer extra: pip install 'retina-compass[viewer]'"
NO_DISPLAY = ("the viewer needs a display: none found (DISPLAY and WAYLAND_DISPLAY are unset); "
              "on a machine without a screen run it under xvfb-run")

_EXAMPLES = """\
examples:
  retina view                              the bundled demo scenario, in quick settings
  retina view assets/demo_scenario.toml    a scenario as written (use --quick to reduce it)
  retina view my.toml --screenshot v.png   open, save the window once the pattern shows, quit

In the window: drag in the head view to turn the camera; the sliders (or, in a view, the arrow
keys and Page Up/Down) turn the head; Play scan plays a head scan; File > Export figure writes
the pattern as PNG/SVG/PDF, File > Save state as scenario a scenario file, File > Save screenshot
a PNG; Edit > Undo (Ctrl+Z) and Redo. Qt's offscreen platform cannot draw the views: use xvfb-run.

exit status: 0 done, 1 failed, 2 bad input or the viewer cannot start
"""


def add_arguments(p: argparse.ArgumentParser) -> None:
    """Add the viewer's options (scenario, ``--quick``/``--full``, ``--screenshot``, ``--force``) to a parser.

    Shared by ``retina view`` and ``python -m retina_viewer``.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The parser to extend.
    """
    p.add_argument("scenario", nargs="?", default=None, metavar="SCENARIO.toml",
                   help="the scenario file (default: the bundled demo scenario in quick settings)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--quick", dest="quick", action="store_true", default=None,
                   help="reduce the scenario (fewer receptors, lower degree) for a lighter viewer")
    g.add_argument("--full", dest="quick", action="store_false",
                   help="use the bundled scenario as written, not reduced")
    p.add_argument("--screenshot", metavar="FILE.png", default=None,
                   help="save the window as PNG once the first pattern is shown, then quit")
    p.add_argument("--force", action="store_true", help="replace an existing screenshot file")


def register(subparsers) -> None:
    """Add the ``retina view`` parser to the sub-parser collection.

    Options of :func:`add_arguments`.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "view", help="open the desktop viewer: rotate the head and the field live",
        description="Open the desktop viewer (needs the 'viewer' extra: vispy and PyQt6). The head "
                    "pose, the field, the light level and the receptor ordering are set with "
                    "sliders; the pattern over both retinas, its modulation depth and the "
                    "Cramer-Rao bound on heading update live.",
        epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_arguments(p)


def _has_display() -> bool:
    if sys.platform != "linux":
        return True
    if os.environ.get("QT_QPA_PLATFORM", "").split(":")[0] in ("offscreen", "minimal", "vnc", "eglfs",
                                                              "linuxfb"):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def run(args) -> int:
    """Run ``retina view`` with parsed options.

    Opens the desktop viewer on a scenario (the viewer is imported only here).

    Parameters
    ----------
    args : argparse.Namespace
        The options of its parser.

    Returns
    -------
    int
        Exit status: 0 when the window closed, 2 when the viewer's packages or a display are
        missing.  Bad input and refusals raise :class:`~retina.errors.InputError` or
        :class:`~retina.errors.ResourceError`, which :func:`retina.cli.main` turns into exit 2.
    """
    if importlib.util.find_spec("PyQt6") is None or importlib.util.find_spec("vispy") is None:
        print(f"retina: error: {MISSING_EXTRA}", file=sys.stderr)
        return 2
    if not _has_display():
        print(f"retina: error: {NO_DISPLAY}", file=sys.stderr)
        return 2
    try:
        from retina_viewer import window
    except ImportError as exc:  # e.g. a Qt library of the system is missing
        print(f"retina: error: {MISSING_EXTRA} ({' '.join(str(exc).split())})", file=sys.stderr)
        return 2
    return window.main(scenario=args.scenario, quick=args.quick, screenshot=args.screenshot,
                       force=args.force)


def main(argv=None) -> int:
    """``python -m retina_viewer``: the same program as ``retina view``.

    Parameters
    ----------
    argv : list of str, optional
        Arguments (default ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status (as :func:`run`; 2 for bad input).
    """
    p = argparse.ArgumentParser(prog="python -m retina_viewer", description="retina-compass viewer",
                                epilog=_EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_arguments(p)
    args = p.parse_args(argv)
    try:
        return run(args)
    except InputError as exc:
        print(f"retina: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
