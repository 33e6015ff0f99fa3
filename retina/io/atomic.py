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
    """Refuse to overwrite an existing file unless ``force``; check its folder is writable.

    Parameters
    ----------
    path : str or Path
        The file to be written.
    force : bool
        Allow overwriting an existing file.

    Returns
    -------
    Path
        ``path`` as a Path.

    Raises
    ------
    InputError
        When the file exists (without ``force``), is a folder, or its folder is missing or not
        writable.
    """
    path = Path(path)
    if path.exists() and not force:
        raise InputError("exists already; pass --force (force=True) to overwrite it", source=path)
    if not path.parent.exists():
        raise InputError(f"folder {path.parent} does not exist", source=path)
    if path.exists() and path.is_dir():
        raise InputError("is a folder; expected a file name", source=path)
    check_folder_writable(path.parent)
    return path


def _new_dir(folder: Path, prefix: str, suffix: str) -> Path:
    """Create a new empty folder ``folder/prefix<random>suffix`` with mode ``0o777 & ~umask``."""
    for _ in range(100):
        d = folder / f"{prefix}{secrets.token_hex(6)}{suffix}"
        try:
            os.mkdir(d, 0o777)
        except FileExistsError:
            continue
        return d
    raise FileExistsError(f"no free temporary name in {folder}")


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
    """Write bytes atomically: a temporary file in the same folder, then ``os.replace``.

    Parameters
    ----------
    path : str or Path
        The file to write.
    data : bytes
        Its whole content.
    force : bool
        Allow overwriting an existing file.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    InputError
        As :func:`check_writable`.
    """
    with atomic_path(path, force=force) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def atomic_write_text(path: str | Path, text: str, *, force: bool = False) -> Path:
    """Write UTF-8 text atomically (:func:`atomic_write_bytes`).

    Parameters
    ----------
    path : str or Path
        The file to write.
    text : str
        Its whole content.
    force : bool
        Allow overwriting an existing file.

    Returns
    -------
    Path
        ``path``.
    """
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
    """Remove what a killed run left beside ``outdir``.

    Hidden staging folders (``.NAME.*.partial``) and superseded folders (``.NAME.*.old``) whose
    owning process is gone are removed.  A superseded folder whose replacement never arrived (the
    run was killed between its two renames, so ``outdir`` is missing) is renamed back to ``outdir``.

    Parameters
    ----------
    outdir : str or Path
        The output folder a run publishes.

    Returns
    -------
    list of Path
        The folders removed.
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
    """A new hidden folder beside ``outdir`` in which a whole output folder is built.

    Parameters
    ----------
    outdir : str or Path
        The output folder to be published later (:func:`publish_folder`).

    Returns
    -------
    Path
        ``.NAME.*.partial`` in the same parent, holding this process's id (for
        :func:`clean_stale_folders`).
    """
    outdir = Path(outdir)
    stage = _new_dir(outdir.parent, f".{outdir.name}.", _STAGE_SUFFIX)
    (stage / _OWNER).write_text(str(os.getpid()))
    return stage


def publish_folder(stage: str | Path, outdir: str | Path) -> Path:
    """Make the complete folder ``stage`` appear as ``outdir`` in one rename.

    Files of an existing ``outdir`` that ``stage`` does not hold are hard-linked (or copied) into
    ``stage`` first, so they are kept.  Then an existing ``outdir`` is renamed aside
    (``.NAME.*.old``), ``stage`` is renamed to ``outdir`` and the old folder removed: a reader sees
    either the old folder or the new one, never a mixture.  A kill between the two renames leaves the
    old folder aside, which :func:`clean_stale_folders` puts back on the next run.

    Parameters
    ----------
    stage : str or Path
        The complete folder (from :func:`make_stage_folder`).
    outdir : str or Path
        Where it is published.

    Returns
    -------
    Path
        ``outdir``.
    """
    import shutil

    stage, outdir = Path(stage), Path(outdir)
    (stage / _OWNER).unlink(missing_ok=True)
    # Modes: the staging folder and the files in it were created with 0o777 / 0o666 and the
    # kernel applied the umask, so nothing is re-moded here and the umask is never changed.
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
    aside = _new_dir(outdir.parent, f".{outdir.name}.", _OLD_SUFFIX)
    os.rmdir(aside)
    os.rename(outdir, aside)
    (aside / _OWNER).write_text(str(os.getpid()))
    os.rename(stage, outdir)
    shutil.rmtree(aside, ignore_errors=True)
    return outdir


def check_folder_writable(folder: str | Path) -> None:
    """Refuse early when files cannot be created in ``folder``.

    A real test (create and remove a temporary file), not a look at permission bits.

    Parameters
    ----------
    folder : str or Path
        The folder.

    Raises
    ------
    InputError
        Naming the folder and the system's reason.
    """
    folder = Path(folder)
    try:
        tmp = _new_temp(folder, ".retina-write-test.", "")
    except OSError as exc:
        raise InputError(f"cannot write here ({exc.strerror}); expected a writable folder", source=folder) from None
    os.unlink(tmp)
