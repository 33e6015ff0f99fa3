"""What the spin commands (``yields``, ``rf``) share: checking the common options.

Their progress bar is :class:`retina.progress.ProgressBar`.
"""

from __future__ import annotations

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
