"""``retina rf``: the yield function of a radical pair under a radio-frequency field.

Steps: read and validate the TOML system and the RF options, check the output can be written and the
Floquet space fits in memory, compute the static yield function and the phase-averaged RF one
(:func:`retina.spin.rf.rf_yield_function`, progress bar on stderr), write the RF one atomically with
its provenance, print the changes in words on stdout; ``--spectrum`` adds a table of the yield change
against RF frequency at the direction of the largest static yield.
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np

from retina.commands._spin_args import format_seconds
from retina.commands._types import MAX_MEMORY_GB, real, whole
from retina.errors import InputError

_EXAMPLES = """\
examples:
  retina rf pair.toml --rf-MHz 1.4 --rf-nT 50 -o pair_rf.h5
  retina rf pair.toml --rf-MHz 1.32 --rf-nT 15 --field-uT 47 --direction parallel -o par.h5
  retina rf pair.toml --rf-MHz 1.4 --rf-nT 50 -o pair_rf.h5 --spectrum 0.1:10:50 --force

The RF field is B1 cos(2 pi f t + theta) along the chosen direction, averaged over the phase theta at
which the pair is born; "perpendicular" also averages over the azimuth of the RF field about the
static field.  The methods (exact: separable RF when the pair allows it, else whole-pair Floquet)
are described in retina/spin/rf_separable.py and retina/spin/rf.py.

Modelling only; RF transmitters are regulated: follow local rules on licensing and exposure.
"""


def register(subparsers) -> None:
    """Add the ``retina rf`` parser to the sub-parser collection.

    Options: the spin system, field, degree, RF frequency, amplitude and direction, tolerance, spectrum.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``ArgumentParser.add_subparsers`` in :func:`retina.cli.build_parser`.
    """
    p = subparsers.add_parser(
        "rf",
        help="the yield function under a radio-frequency field (exact RF methods) into an HDF5 file",
        description="Compute a radical pair's phase-averaged yield function under a static field plus a "
                    "linearly polarised radio-frequency field, compare it with the static yield function, "
                    "and write the RF one with its provenance to HDF5.",
        epilog=_EXAMPLES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("system", metavar="SYSTEM.toml", help="the spin-system file (see assets/example_pair.toml)")
    p.add_argument("-o", "--output", metavar="OUT.h5", required=True, help="the HDF5 file to write (RF yield function)")
    p.add_argument("--rf-MHz", type=real("a frequency in MHz", low=0.0, low_open=True, high=1e6), required=True, metavar="F", help="RF frequency in MHz")
    p.add_argument("--rf-nT", type=real("an amplitude in nT", low=0.0, low_open=True, high=1e9), required=True, metavar="B1", help="RF amplitude in nanotesla")
    p.add_argument("--field-uT", type=real("a field in microtesla", low=0.0, low_open=True, high=1e7), default=50.0, metavar="B",
                   help="static field strength in microtesla (default: 50)")
    p.add_argument("--direction", choices=("perpendicular", "parallel"), default="perpendicular",
                   help="RF field relative to the static field (default: perpendicular, averaged over azimuth)")
    p.add_argument("--degree", type=whole("an even degree", low=2, high=1000), default=8, metavar="L",
                   help="largest (even) spherical-harmonic degree of the fits (default: 8)")
    p.add_argument("--tol", type=real("a tolerance", low=0.0, low_open=True, high=0.1), default=1e-10, metavar="T",
                   help="convergence tolerance of the Floquet and azimuth expansions, yield units (default: 1e-10)")
    p.add_argument("--spectrum", metavar="START:STOP:COUNT", default=None,
                   help="also print the yield change against frequency, COUNT log-spaced values in MHz")
    p.add_argument("--max-memory-gb", type=MAX_MEMORY_GB, default=None, metavar="GB",
                   help="refuse to start when the memory estimate exceeds this")
    p.add_argument("--force", action="store_true", help="overwrite OUT.h5 if it exists")
    p.add_argument("-q", "--quiet", action="store_true", help="no progress bar, summary only")


def parse_spectrum(text: str) -> np.ndarray:
    """Parse the ``--spectrum`` option into RF frequencies.

    Parameters
    ----------
    text : str
        ``START:STOP:COUNT``: ``COUNT`` (1 to 10,000) frequencies from ``START`` to ``STOP`` MHz
        (``0 < START <= STOP``), spaced geometrically.

    Returns
    -------
    ndarray, shape (COUNT,)
        MHz.

    Raises
    ------
    InputError
        Key ``--spectrum``.
    """
    parts = str(text).split(":")
    try:
        if len(parts) != 3:
            raise ValueError
        start, stop, count = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError:
        raise InputError(f"expected START:STOP:COUNT (MHz, MHz, whole number), got {text!r}",
                         key="--spectrum") from None
    if not (np.isfinite(start) and np.isfinite(stop) and 0 < start <= stop) or not 1 <= count <= 10000:
        raise InputError(f"expected 0 < START <= STOP (MHz) and 1 <= COUNT <= 10000, got {text!r}",
                         key="--spectrum")
    return np.geomspace(start, stop, count)


def _direction_words(v) -> str:
    v = np.where(np.abs(v) < 5e-4, 0.0, np.asarray(v, dtype=float))
    return f"({v[0]:+.3f}, {v[1]:+.3f}, {v[2]:+.3f})"


def summary(static, rfyf, output, wall_seconds: float, n_compare: int = 2000) -> str:
    """The lines printed after ``retina rf``: the RF effect beside the static yield function.

    Parameters
    ----------
    static : YieldFunction
        The yield function without RF.
    rfyf : YieldFunction
        The RF yield function (its provenance gives the RF settings and convergence).
    output : str or Path
        The file written.
    wall_seconds : float
        Wall time of the command.
    n_compare : int
        Fibonacci directions on which the two are compared.

    Returns
    -------
    str
    """
    from retina import sphere

    p = rfyf.provenance
    a0, a1 = static.anisotropy(), rfyf.anisotropy()
    pts = sphere.fibonacci(n_compare, hemisphere=True).points
    diff = rfyf(pts) - static(pts)
    k = int(np.argmax(np.abs(diff)))
    where = "perpendicular to the static field (averaged over azimuth)" if p["rf_direction"] == "perpendicular" \
        else ("along the static field" if p["rf_direction"] == "parallel" else f"along {p['rf_direction']}")
    lines = [
        f"{p.get('reported_yield', 'reported')} yield of {p.get('system_name', '?')!r} at {p['field_uT']:g} uT "
        f"with an RF field of {p['rf_nT']:g} nT at {p['rf_MHz']:g} MHz {where}, averaged over the RF phase",
        f"  mean yield {a0.mean:.8g} without RF, {a1.mean:.8g} with RF: change {a1.mean - a0.mean:+.3e}",
        f"  relative anisotropy {100 * a0.relative:.4f} % without RF, {100 * a1.relative:.4f} % with RF: "
        f"change {100 * (a1.relative - a0.relative):+.3g} percentage points",
        f"  largest change of the yield over directions {diff[k]:+.3e} with the field along "
        f"{_direction_words(pts[k])} (molecular frame; the two degree-{rfyf.degree} fits compared at {n_compare} "
        f"directions)",
        f"  Floquet harmonics used up to {p['rf_harmonics_max']}, azimuths up to {p['rf_azimuths_max']}, "
        f"tolerance {p['rf_tol']:g}; degree {rfyf.degree}, truncation error max {p['truncation_error_max']:.2g}",
        f"  wall time {format_seconds(wall_seconds)}; RF yield function written to {output}",
    ]
    return "\n".join(lines)


def spectrum_table(spec) -> str:
    """The spectrum as a text table: frequency, yield change and Floquet order.

    Parameters
    ----------
    spec : RFSpectrum
        From :func:`retina.spin.rf.rf_spectrum`.

    Returns
    -------
    str
        One line per frequency under a header.
    """
    lines = [f"  {'f (MHz)':>10}  {'yield change':>13}  {'harmonics':>9}"]
    for f, d, h in zip(spec.freqs_MHz, spec.delta, spec.harmonics):
        lines.append(f"  {f:10.4g}  {d:+13.4e}  {int(h):9d}")
    return "\n".join(lines)


def run(args) -> int:
    """Run ``retina rf`` with parsed options.

    Computes the static and the RF yield functions of a spin system and writes the RF one atomically; optionally a spectrum against frequency.

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
    from retina.commands._spin_args import common_inputs
    from retina.progress import ProgressBar
    from retina.spin import rf
    from retina.yieldfn import YieldFunction

    t0 = time.perf_counter()
    system, field, degree, max_bytes = common_inputs(args)
    try:
        rf.check_rf(args.rf_MHz, args.rf_nT, args.direction)
        tol = rf.check_tol(args.tol)
    except InputError as exc:
        key = {"rf_MHz": "--rf-MHz", "rf_nT": "--rf-nT", "rf_direction": "--direction", "tol": "--tol"}[exc.key]
        raise InputError(exc.detail, key=key) from None
    freqs = parse_spectrum(args.spectrum) if args.spectrum is not None else None
    rf.check_memory(system, 4, "auto", max_bytes)

    with ProgressBar(not args.quiet, "rf yields", unit="dir") as progress:
        static = YieldFunction.from_system(system, field, degree)
        rfyf = rf.rf_yield_function(system, field, rf_MHz=args.rf_MHz, rf_nT=args.rf_nT,
                                    rf_direction=args.direction, degree=degree, progress=progress, tol=tol,
                                    max_bytes=max_bytes)
    spec = None
    if freqs is not None:
        spec = rf.rf_spectrum(system, field, static.anisotropy().argmax, freqs, args.rf_nT,
                              rf_direction=args.direction, tol=tol, max_bytes=max_bytes)
    rfyf.save(args.output, force=args.force)
    print(summary(static, rfyf, args.output, time.perf_counter() - t0))
    if spec is not None:
        print(f"yield change against RF frequency ({args.rf_nT:g} nT, {args.direction}) with the static field "
              f"along {_direction_words(static.anisotropy().argmax)} (largest static yield {spec.static:.8g}):")
        print(spectrum_table(spec))
    return 0
