"""Atomic writes: all-or-nothing, no overwrite unless asked, ordinary permissions."""

import os

import pytest

from shapedesc.io.atomic import atomic_path, write_text_atomic


def test_atomic_write_and_permissions(tmp_path):
    p = tmp_path / "t.tsv"
    write_text_atomic(p, "a\tb\n")
    assert p.read_text() == "a\tb\n"
    umask = os.umask(0)
    os.umask(umask)
    # Same mode as open(..., "w") would give (POSIX: 0666 & ~umask).
    assert (p.stat().st_mode & 0o777) == (0o666 & ~umask)
    assert not [x for x in tmp_path.iterdir() if ".part" in x.name]


def test_failure_leaves_old_file_and_no_temporary(tmp_path):
    p = tmp_path / "t.txt"
    p.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_path(p) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert p.read_text() == "old"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["t.txt"]
    with pytest.raises(FileExistsError, match="--force"):
        with atomic_path(p, overwrite=False):
            pass
