"""``retina yields``: compute a spin system's yield function and write it to a native HDF5 file.

Steps: read and validate the TOML system, check the output can be written, print the engine's time
and memory estimate, compute (progress bar on stderr), fit and measure the truncation error, write
atomically, print a summary in words on stdout.
"""

from __future__ import annotations

import argparse
import math
import sys
import time

import numpy as np

from retina.commands._spin_args import format_seconds
from retina.commands._types import MAX_MEMORY_GB, real, whole
from retina.errors import InputError

METHODS = ("auto", "hilbert", "liouville", "separable", "fast-separable", "sampled")
MAX_CHECK_POINTS = 100_000
"""More check directions than this add nothing to the truncation-error estimate and were not counted
by the engine's memory estimate."""

_EXAMPLES = """\
examples:
  retina yields assets/example_pair.toml -o pair.h5
  retina yields pair.toml -o pair47.h5 --field-uT 47 --degree 24
  retina yields pair.toml -o pair.h5 --method liouville --max-memory-gb 2 --force

The result is cached by content (spin system, field, degree, method, version) in $RETINA_CACHE,
else $XDG_CACHE_HOME/retina-compass, else ~/.cache/retina-compass; --no-cache always recomputes.
Load it in Python with retina.yieldfn.YieldFunction.load("pair.h5").
"""


def register(subparsers) -> None:
    """Add the ``retina yields`` parser to the sub-parser collection.

    Options: the spin system, field, degree, method, output, cache.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "yields",
        help="compute a radical pair's yield function (spherical harmonics) into an HDF5 file",
        description="Compute the reported yield of a radical pair for every field direction, fit it "
                    "with even real spherical harmonics up to a degree, measure the truncation error on "
                    "independent directions, and write the result with its provenance to HDF5.",
        epilog=_EXAMPLES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("system", metavar="SYSTEM.toml", help="the spin-system file (see assets/example_pair.toml)")
    p.add_argument("-o", "--output", metavar="OUT.h5", required=True, help="the HDF5 file to write")
    p.add_argument("--field-uT", type=real("a field in microtesla", low=0.0, low_open=True, high=1e7), default=50.0, metavar="B",
                   help="field strength in microtesla (default: 50)")
    p.add_argument("--degree", type=whole("an even degree", low=2, high=1000), default=16, metavar="L",
                   help="largest (even) spherical-harmonic degree of the fit (default: 16)")
    p.add_argument("--method", choices=METHODS, default="auto",
                   help="spin-dynamics method; auto picks the cheapest exact one, or the sampled approximation "
                        "when --accuracy allows it and it is cheaper (default: auto)")
    p.add_argument("--accuracy", type=real("a standard error per yield", low=0.0, low_open=True, high=0.5),
                   default=None, metavar="SE",
                   help="standard error per yield you accept (for example 1e-4): lets auto choose the sampled "
                        "approximation when it is faster, and sizes its random states (default: exact only)")
    p.add_argument("--check-points", type=whole("a number of directions", low=1, high=MAX_CHECK_POINTS), default=None, metavar="N",
                   help="independent directions on which the truncation error is measured "
                        "(default: half the fit's directions, at least 16; 27 at degree 8, 108 at degree 16)")
    p.add_argument("--max-memory-gb", type=MAX_MEMORY_GB, default=None, metavar="GB",
                   help="refuse to start when the engine's memory estimate exceeds this")
    p.add_argument("--force", action="store_true", help="overwrite OUT.h5 if it exists")
    p.add_argument("--no-cache", action="store_true", help="neither read nor write the result cache")
    p.add_argument("--cache-dir", metavar="DIR", default=None,
                   help="cache folder (default: $RETINA_CACHE, else $XDG_CACHE_HOME/retina-compass, "
                        "else ~/.cache/retina-compass)")
    p.add_argument("-q", "--quiet", action="store_true", help="no estimate, no progress bar, summary only")


def _fmt_bytes(b: float) -> str:
    if b >= 2**40 * 1024:  # an exact integer may be beyond the float range
        return f"10^{int(math.log10(b)) - 9} GB"
    for unit, size in (("GB", 2**30), ("MB", 2**20), ("kB", 2**10)):
        if b >= size:
            return f"{b / size:.1f} {unit}"
    return f"{b:.0f} B"


def _direction_words(v) -> str:
    v = np.where(np.abs(v) < 5e-4, 0.0, np.asarray(v, dtype=float))  # no "-0.000"
    theta = np.degrees(np.arccos(np.clip(v[2], -1, 1)))
    if np.hypot(v[0], v[1]) < 1e-6:
        angles = f"polar {theta:.1f} deg"
    else:
        angles = f"polar {theta:.1f} deg, azimuth {np.degrees(np.arctan2(v[1], v[0])) % 360:.1f} deg"
    return f"({v[0]:+.3f}, {v[1]:+.3f}, {v[2]:+.3f}) ({angles})"


def summary(yf, output, wall_seconds: float) -> str:
    """The lines printed after ``retina yields``.

    Parameters
    ----------
    yf : YieldFunction
        The computed yield function (provenance: method, cost, truncation error, anisotropy).
    output : str or Path
        The file written.
    wall_seconds : float
        Wall time of the command.

    Returns
    -------
    str
    """
    p = yf.provenance
    an = yf.anisotropy()
    name = p.get("system_name", "?")
    lines = [
        f"{p.get('reported_yield', 'reported')} yield of {name!r} (from a {p.get('initial_state', '?')} start) "
        f"at {p.get('field_uT', float('nan')):g} uT",
        f"  anisotropy: max - min = {an.delta:.4g}, {100 * an.relative:.3g} % of the mean yield {an.mean:.4g}",
        f"  largest yield  {an.max:.6g} with the field along {_direction_words(an.argmax)}",
        f"  smallest yield {an.min:.6g} with the field along {_direction_words(an.argmin)}",
        "  (directions in the molecular frame; b and -b give the same yield)",
        f"  degree {yf.degree}; truncation error max {p.get('truncation_error_max', float('nan')):.2g}, "
        f"rms {p.get('truncation_error_rms', float('nan')):.2g} on {p.get('check_points', '?')} independent directions",
        f"  method {p.get('method', '?')}, {p.get('computed_points', '?')} grid directions "
        f"({p.get('grid', '?')}, one hemisphere), wall time {format_seconds(wall_seconds)}"
        + (" (taken from the cache)" if yf.from_cache else ""),
        f"  written to {output}",
    ]
    if p.get("method_error_bound_max") is not None:
        lines.insert(-1, f"  stated error bound of the method: {p['method_error_bound_max']:.1g} per direction")
    if p.get("approximation"):
        states = p.get('sampling_states', '?')
        if p.get('sampling_states_a') is not None and p.get('sampling_states_a') != p.get('sampling_states_b'):
            states = f"{p['sampling_states_a']} + {p['sampling_states_b']} (radicals A, B)"
        lines.insert(-1, f"  APPROXIMATION: {p['approximation']} with {states} random states; "
                         f"standard error up to {p.get('sampling_standard_error_max', float('nan')):.2g} per direction "
                         f"(errors shared across directions), deterministic bias <= "
                         f"{p.get('sampling_bias_bound', float('nan')):.1g}")
        if p.get("sampling_anisotropy_relative_error") is not None:
            lines.insert(-1, f"  standard error of the difference between the extreme computed directions: "
                             f"{100 * p['sampling_anisotropy_relative_error']:.2g} % of it"
                             + (f" (requested standard error per yield {p['sampling_accuracy_requested']:.2g}: "
                                f"{'met' if p.get('sampling_accuracy_met') else 'NOT met'})"
                                if p.get("sampling_accuracy_requested") is not None else ""))
    return "\n".join(lines)


def run(args) -> int:
    """Run ``retina yields`` with parsed options.

    Computes a spin system's yield function (method chosen by cost) and writes it atomically.

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
    from retina import sphere
    from retina.cache import YieldCache, cache_key
    from retina.commands._spin_args import common_inputs
    from retina.progress import ProgressBar
    from retina.spin import engine
    from retina.yieldfn import ANTIPODAL_POINTS, YieldFunction, default_check_points

    t0 = time.perf_counter()
    system, field, degree, max_bytes = common_inputs(args)
    if args.check_points is None:
        args.check_points = default_check_points(degree)
    if not 1 <= args.check_points <= MAX_CHECK_POINTS:
        raise InputError(f"expected 1 to {MAX_CHECK_POINTS:,} directions, got {args.check_points}",
                         key="--check-points")

    accuracy = args.accuracy
    if args.method != "auto":
        method = args.method
    else:
        method = engine.choose_method(system) if accuracy is None else engine.choose_method(system, accuracy=accuracy)
    if method != "sampled":
        accuracy = None                      # exact methods meet it; keeps the cache key of exact runs
    use_cache = not args.no_cache
    cached = None
    if use_cache:
        cached = YieldCache(args.cache_dir).get(
            cache_key(system, field, degree, method, check_points=args.check_points, accuracy=accuracy))
    n = len(sphere.grid_for_degree(degree)) // 2 + args.check_points + min(ANTIPODAL_POINTS, args.check_points)
    if not args.quiet and cached is None:
        cost = engine.estimate_cost(system, n, method)
        note = f"; {cost.note}" if getattr(cost, "note", "") else ""
        print(f"retina: {system.name!r}: Hilbert dimension {system.dimension}, method {cost.method}, "
              f"{n} directions: about {format_seconds(cost.seconds)} and {_fmt_bytes(cost.bytes)} of memory{note}",
              file=sys.stderr)

    with ProgressBar(not args.quiet and cached is None, "yields", n, unit="dir") as progress:
        yf = YieldFunction.from_system(system, field, degree, method=method, progress=progress,
                                       cache=use_cache, cache_dir=args.cache_dir,
                                       check_points=args.check_points, max_bytes=max_bytes, accuracy=accuracy)
    yf.save(args.output, force=args.force)
    print(summary(yf, args.output, time.perf_counter() - t0))
    return 0
