"""Atomic file writes: a temporary file in the target folder, then ``os.replace``.

An interrupted or failed write never leaves a partial file and never damages an existing one.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
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


@contextlib.contextmanager
def atomic_path(path: str | Path, *, force: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path``, on error it is removed.

    Example
    -------
    >>> with atomic_path("out.h5") as tmp:          # doctest: +SKIP
    ...     write_everything(tmp)
    """
    path = check_writable(path, force=force)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    tmp = Path(tmp)
    # mkstemp creates the file 0600; give it the permissions a plain open() would (0666 & ~umask)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
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
