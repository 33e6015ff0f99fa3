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
    if path.exists() and path.is_dir():
        raise InputError("is a folder; expected a file name", source=path)
    check_folder_writable(path.parent)
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


# ------------------------------------------------------------------------------ whole folders

_STAGE_SUFFIX = ".partial"
_OLD_SUFFIX = ".old"
_OWNER = ".owner-pid"


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def clean_stale_folders(outdir: str | Path) -> list[Path]:
    """Remove what a killed run left beside ``outdir``: hidden staging folders
    (``.NAME.*.partial``) and superseded folders (``.NAME.*.old``) whose owning process is gone.

    A superseded folder whose replacement never arrived (the run was killed between its two
    renames, so ``outdir`` is missing) is renamed back to ``outdir``.  Returns the paths removed.
    """
    import shutil

    outdir = Path(outdir)
    parent = outdir.parent if outdir.parent.exists() else None
    removed: list[Path] = []
    if parent is None:
        return removed
    for p in sorted(parent.glob(f".{outdir.name}.*")):
        if not p.is_dir() or not (p.name.endswith(_STAGE_SUFFIX) or p.name.endswith(_OLD_SUFFIX)):
            continue
        try:
            pid = int((p / _OWNER).read_text().strip())
        except (OSError, ValueError):
            pid = -1
        if pid > 0 and pid != os.getpid() and _pid_alive(pid):
            continue  # another run is working there
        if p.name.endswith(_OLD_SUFFIX) and not outdir.exists():
            (p / _OWNER).unlink(missing_ok=True)
            os.rename(p, outdir)
            continue
        shutil.rmtree(p, ignore_errors=True)
        removed.append(p)
    return removed


def make_stage_folder(outdir: str | Path) -> Path:
    """A new hidden folder beside ``outdir`` in which a whole output folder is built."""
    outdir = Path(outdir)
    stage = Path(tempfile.mkdtemp(prefix=f".{outdir.name}.", suffix=_STAGE_SUFFIX, dir=outdir.parent))
    (stage / _OWNER).write_text(str(os.getpid()))
    return stage


def publish_folder(stage: str | Path, outdir: str | Path) -> Path:
    """Make the complete folder ``stage`` appear as ``outdir`` in one rename.

    Files of an existing ``outdir`` that ``stage`` does not hold are hard-linked (or copied) into
    ``stage`` first, so they are kept.  Then an existing ``outdir`` is renamed aside
    (``.NAME.*.old``), ``stage`` is renamed to ``outdir`` and the old folder removed: a reader sees
    either the old folder or the new one, never a mixture.  A kill between the two renames leaves the
    old folder aside, which :func:`clean_stale_folders` puts back on the next run.
    """
    import shutil

    stage, outdir = Path(stage), Path(outdir)
    (stage / _OWNER).unlink(missing_ok=True)
    umask = os.umask(0)
    os.umask(umask)
    for p in stage.rglob("*"):  # staging files are private (mkstemp); an output folder is for reading
        os.chmod(p, (0o777 if p.is_dir() else 0o666) & ~umask)
    os.chmod(stage, 0o777 & ~umask)
    if not outdir.exists():
        os.rename(stage, outdir)
        return outdir
    for src in sorted(outdir.rglob("*")):
        rel = src.relative_to(outdir)
        dst = stage / rel
        if src.is_dir():
            dst.mkdir(parents=True, exist_ok=True)
        elif not dst.exists():
            dst.parent.mkdir(parents=True, exist_ok=True)
            try:
                os.link(src, dst)
            except OSError:
                shutil.copy2(src, dst)
    aside = Path(tempfile.mkdtemp(prefix=f".{outdir.name}.", suffix=_OLD_SUFFIX, dir=outdir.parent))
    os.rmdir(aside)
    os.rename(outdir, aside)
    (aside / _OWNER).write_text(str(os.getpid()))
    os.rename(stage, outdir)
    shutil.rmtree(aside, ignore_errors=True)
    return outdir


def check_folder_writable(folder: str | Path) -> None:
    """Refuse early (:class:`InputError`) when files cannot be created in ``folder``: a real test
    (create and remove a temporary file), not a look at permission bits."""
    folder = Path(folder)
    try:
        fd, tmp = tempfile.mkstemp(prefix=".retina-write-test.", dir=folder)
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror}); expected a writable folder", source=folder) from None
    os.close(fd)
    os.unlink(tmp)
