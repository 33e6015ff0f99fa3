"""Files shipped inside the package: the demo scenario, its radical pair and the annotated example
pair, read through :mod:`importlib.resources`, so ``retina demo`` works from an installed wheel as
well as from a source checkout.

The source of these files is the top-level ``assets/`` folder of the repository; the copies here
are kept byte-identical to it (``tests/test_packaging.py`` checks).  Every value in them is
invented.
"""

from __future__ import annotations

import atexit
import contextlib
from importlib import resources
from pathlib import Path

from retina.errors import InputError

__all__ = ["BUNDLED", "bundled_path", "demo_scenario_path"]

BUNDLED: tuple[str, ...] = ("demo_scenario.toml", "demo_pair.toml", "example_pair.toml")
"""The names of the bundled files (all in ``assets/`` of the source tree)."""

_folder: Path | None = None


def _data_folder() -> Path:
    """A real folder holding the bundled files (extracted once if the package is zipped), so that
    the scenario's relative reference to its pair resolves."""
    global _folder
    if _folder is None:
        root = resources.files(__name__)
        if isinstance(root, Path):
            _folder = root
        else:  # a zipped install: copy the files out once, for the life of the process
            stack = contextlib.ExitStack()
            atexit.register(stack.close)
            tmp = Path(stack.enter_context(__import__("tempfile").TemporaryDirectory(prefix="retina-data-")))
            for name in BUNDLED:
                (tmp / name).write_bytes((root / name).read_bytes())
            _folder = tmp
    return _folder


def bundled_path(name: str) -> Path:
    """The path of a bundled file.

    Parameters
    ----------
    name : str
        One of :data:`BUNDLED`.

    Returns
    -------
    Path
        A real file (extracted once when the package is zipped).

    Raises
    ------
    InputError
        When ``name`` is not a bundled file, or the installation lacks it.
    """
    if name not in BUNDLED:
        raise InputError(f"expected one of {', '.join(BUNDLED)}, got {name!r}", key="bundled file")
    path = _data_folder() / name
    if not path.is_file():
        raise InputError("the bundled file is missing from this installation; reinstall retina-compass",
                         source=path)
    return path


def demo_scenario_path() -> Path:
    """The bundled demo scenario.

    Returns
    -------
    Path
        ``demo_scenario.toml``, beside the ``demo_pair.toml`` it uses.
    """
    return bundled_path("demo_scenario.toml")
