"""The one atomic writer behind tables, sessions, demo files, batch records and CLI output."""

import os
import stat

import pytest

from zline.physics._atomic import atomic_path


def test_publishes_with_ordinary_permissions(tmp_path):
    target = tmp_path / "out.txt"
    with atomic_path(target) as tmp, open(tmp, "w") as fh:
        fh.write("hello")
    assert target.read_text() == "hello"
    mask = os.umask(0)
    os.umask(mask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~mask  # not the temp file's 0600
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_existing_file_kept_unless_overwrite(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("mine")
    with pytest.raises(FileExistsError, match="keep it"):
        with atomic_path(target, exists_message="out.txt is there: keep it") as tmp, open(tmp, "w") as fh:
            fh.write("new")
    assert target.read_text() == "mine"
    with atomic_path(target, overwrite=True, fsync=True) as tmp, open(tmp, "w") as fh:
        fh.write("new")
    assert target.read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_failed_write_leaves_nothing(tmp_path):
    target = tmp_path / "out.txt"
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp, open(tmp, "w") as fh:
            fh.write("half")
            raise RuntimeError("disk on fire")
    assert list(tmp_path.iterdir()) == []
