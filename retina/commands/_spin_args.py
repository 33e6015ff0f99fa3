"""What the spin commands (``yields``, ``rf``) share: checking the common options, and the way
their summaries and estimates write a duration.

Their progress bar is :class:`retina.progress.ProgressBar`.
"""

from __future__ import annotations

import math
from pathlib import Path

from retina.errors import InputError


def common_inputs(args):
    """Load the spin system and check the options ``yields`` and ``rf`` share.

    Parameters
    ----------
    args : argparse.Namespace
        With ``system``, ``field_uT``, ``degree``, ``max_memory_gb``, ``output`` and ``force``.

    Returns
    -------
    system : SpinSystem
    field_uT : float
        Microtesla.
    degree : int
    max_bytes : int or None
        The memory limit in bytes.

    Raises
    ------
    InputError
        Naming the option (``--field-uT``, ``--degree``, the output file).
    """
    from retina.io.atomic import check_writable
    from retina.spin.io import load_system
    from retina.yieldfn import _check_degree, _check_field

    system = load_system(args.system)
    try:
        field = _check_field(args.field_uT)
        degree = _check_degree(args.degree)
    except InputError as exc:
        raise InputError(exc.detail, key=f"--{exc.key.replace('_', '-')}") from None
    max_bytes = None
    if args.max_memory_gb is not None:
        if not args.max_memory_gb > 0:
            raise InputError(f"expected a positive number of gigabytes, got {args.max_memory_gb}",
                             key="--max-memory-gb")
        max_bytes = int(args.max_memory_gb * 2**30)
    if Path(args.output).is_dir():
        raise InputError("is a folder; expected the name of the HDF5 file to write", source=args.output,
                         key="--output")
    check_writable(args.output, force=args.force)
    return system, field, degree, max_bytes


def format_seconds(s: float) -> str:
    """A duration for a person: milliseconds below 1 s, seconds below 2 min, minutes below 2 h, else
    hours.

    Parameters
    ----------
    s : float
        Seconds, >= 0 (an estimate may be infinite).

    Returns
    -------
    str
        ``"250 ms"``, ``"12.5 s"``, ``"3.0 min"``, ``"2.5 h"``; ``"forever"`` when not finite.
    """
    if not math.isfinite(s):
        return "forever"
    if s < 1:
        return f"{s * 1e3:.0f} ms"
    if s < 120:
        return f"{s:.1f} s"
    if s < 7200:
        return f"{s / 60:.1f} min"
    return f"{s / 3600:.1f} h"
