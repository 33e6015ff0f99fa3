"""What the spin commands (``yields``, ``rf``) share: checking the common options and a progress bar."""

from __future__ import annotations

import sys
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


class ProgressBar:
    """A tqdm bar on stderr driven by ``progress(done, total)`` callbacks; silent when disabled.

    Use as a context manager; the callback is the instance itself.
    """

    def __init__(self, enabled: bool, desc: str, total: int | None = None):
        self.bar = None
        if enabled:
            from tqdm import tqdm

            self.bar = tqdm(total=total, file=sys.stderr, unit="dir", desc=desc, leave=False,
                            dynamic_ncols=True)

    def __call__(self, done: int, total: int) -> None:
        if self.bar is None:
            return
        if self.bar.total != total:
            self.bar.total = total
        self.bar.update(done - self.bar.n)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.close()
        return False
