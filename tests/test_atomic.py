"""Atomic writes (retina/io/atomic.py): nothing partial, nothing overwritten unasked."""

import os
import stat

import pytest

from retina.errors import InputError
from retina.io.atomic import atomic_path, atomic_write_text


def test_failed_write_leaves_no_file_and_keeps_the_old_one(tmp_path):
    # Common practice, no source: write to a temporary file beside the target, then rename.
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_path(target, force=True) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_refuses_to_overwrite_without_force(tmp_path):
    target = tmp_path / "out.txt"
    atomic_write_text(target, "first")
    with pytest.raises(InputError, match="exists already"):
        atomic_write_text(target, "second")
    atomic_write_text(target, "second", force=True)
    assert target.read_text() == "second"


def test_missing_folder_is_a_clear_error(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        atomic_write_text(tmp_path / "nope" / "out.txt", "x")


def test_permissions_follow_the_umask(tmp_path):
    # Common practice, no source: a new file gets 0666 & ~umask, as open() would give it.
    old = os.umask(0o022)
    try:
        path = atomic_write_text(tmp_path / "p.txt", "x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o644


def test_never_touches_the_umask_and_honours_it(tmp_path, monkeypatch):
    # Common practice, no source: os.umask is process-wide and setting it is not thread-safe (the
    # viewer writes from a worker thread), so the writer must let the kernel apply it (os.open with
    # 0666) instead of reading it by setting it.
    old = os.umask(0o027)
    try:
        def forbidden(mask):
            raise AssertionError("os.umask called during a write")

        monkeypatch.setattr(os, "umask", forbidden)
        path = atomic_write_text(tmp_path / "q.txt", "x")
        with atomic_path(tmp_path / "anim.gif", suffix=".gif") as tmp:
            assert tmp.name.endswith(".gif") and tmp.parent == tmp_path
            tmp.write_bytes(b"GIF89a")
        monkeypatch.undo()
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o640
    assert stat.S_IMODE((tmp_path / "anim.gif").stat().st_mode) == 0o640
