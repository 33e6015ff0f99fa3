"""Atomic file writes: a temporary file in the target folder, then ``os.replace``.

An interrupted or failed write never leaves a partial file and never damages an existing one.
The temporary file is created with ``os.open(..., 0o666)``, so the kernel applies the process
umask exactly as a plain ``open()`` would; the umask is never read or changed (changing it is not
thread-safe, and the viewer writes from a worker thread).
"""

from __future__ import annotations

import contextlib
import os
import secrets
from pathlib import Path
from typing import Iterator

from retina.errors import InputError


def check_writable(path: str | Path, *, force: bool = False) -> Path:
    """Refuse to overwrite an existing file unless ``force``; return the path."""
    path = Path(path)
    if path.exists() and not force:
        raise InputError("exists already; pass --force (force=True) to overwrite it", source=path)
    if not path.parent.exists():
        raise InputError(f"folder {path.parent} does not exist", source=path)
    return path


def _new_temp(folder: Path, prefix: str, suffix: str) -> Path:
    """Create a new empty file ``folder/prefix<random>suffix`` with mode ``0o666 & ~umask``."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0)
    for _ in range(100):
        tmp = folder / f"{prefix}{secrets.token_hex(6)}{suffix}"
        try:
            fd = os.open(tmp, flags, 0o666)
        except FileExistsError:
            continue
        os.close(fd)
        return tmp
    raise FileExistsError(f"no free temporary name in {folder}")


@contextlib.contextmanager
def atomic_path(path: str | Path, *, force: bool = False, suffix: str = ".part") -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path``, on error it is removed.

    Parameters
    ----------
    path : str or Path
        The file to write.
    force : bool
        Replace an existing file.
    suffix : str
        Ending of the temporary name (a writer that picks its format from the name, such as
        Pillow's, needs the real extension, e.g. ``".gif"``).

    Examples
    --------
    >>> with atomic_path("out.h5") as tmp:          # doctest: +SKIP
    ...     write_everything(tmp)
    """
    path = check_writable(path, force=force)
    tmp = _new_temp(path.parent, f".{path.name}.", suffix)
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
        raise


def atomic_write_bytes(path: str | Path, data: bytes, *, force: bool = False) -> Path:
    with atomic_path(path, force=force) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def atomic_write_text(path: str | Path, text: str, *, force: bool = False) -> Path:
    return atomic_write_bytes(path, text.encode("utf-8"), force=force)
