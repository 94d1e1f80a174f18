"""Writing through a temporary file: the user's file is replaced whole or left as it was
(common practice, no source: write-then-rename, POSIX rename(2) is atomic within a file system)."""
import os

import pytest

from socfuse.models.fileio import replacing, write_text_replacing


def test_replaces_whole_file_and_leaves_no_temporary(tmp_path):
    p = tmp_path / "model.json"
    p.write_text("old")
    write_text_replacing(p, "new\n")
    assert p.read_text() == "new\n"
    assert os.listdir(tmp_path) == ["model.json"]
    assert (p.stat().st_mode & 0o777) == (0o644 & ~_umask())


def test_failure_keeps_the_old_file(tmp_path):
    p = tmp_path / "trace.csv"
    p.write_text("precious")
    with pytest.raises(RuntimeError):
        with replacing(p) as tmp:
            tmp.write_text("half")
            raise RuntimeError("writer failed")
    assert p.read_text() == "precious"
    assert os.listdir(tmp_path) == ["trace.csv"]


def _umask():
    m = os.umask(0)
    os.umask(m)
    return m
