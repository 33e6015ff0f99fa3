"""How much memory the spin engines may use: the one reading of the machine's free memory that the
engine's cost model, the Liouville solvers and the RF solver share.

It sits below :mod:`retina.spin.engine` and the solvers and imports none of them.
"""

from __future__ import annotations

__all__ = ["available_bytes"]

_GIB = 2**30


def available_bytes() -> int:
    """The memory available to a new allocation.

    Returns
    -------
    int
        ``MemAvailable`` from /proc/meminfo in bytes (8 GiB when it cannot be read).
    """
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return 8 * _GIB
