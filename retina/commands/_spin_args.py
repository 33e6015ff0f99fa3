"""What the spin commands (``yields``, ``rf``) share: checking the common options.

Their progress bar is :class:`retina.progress.ProgressBar`.
"""

from __future__ import annotations

from pathlib import Path

from retina.errors import InputError


def common_inputs(args):
    """Load the spin system and check ``--field-uT``, ``--degree``, ``--max-memory-gb`` and the output.

    Returns ``(system, field_uT, degree, max_bytes)``; raises :class:`InputError` naming the option.
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
