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


# ----------------------------------------------------------------------------- output folders
# exclusive advisory locks: flock(2) locks held through different open file descriptions conflict
# (Linux flock(2) manual page); write-then-rename as above.
import json  # noqa: E402

from socfuse.models.fileio import (LOCK_NAME, MARKER_NAME, OutputPathError, check_output_file,  # noqa: E402
                                   output_folder, read_json, JsonFileError)


def _names(d):
    return sorted(p.name for p in d.iterdir())


def test_output_folder_moves_outputs_in_only_on_success(tmp_path):
    out = tmp_path / "run"
    with output_folder(out, "bench") as stage:
        (stage / "report.html").write_text("r1")
        (stage / "sub").mkdir()
        (stage / "sub" / "a.c").write_text("c")
        # while the run writes, the marker says incomplete and nothing is in place yet
        assert json.loads((out / MARKER_NAME).read_text())["complete"] is False
        assert not (out / "report.html").exists()
    assert _names(out) == sorted([LOCK_NAME, MARKER_NAME, "report.html", "sub"])
    marker = json.loads((out / MARKER_NAME).read_text())
    assert marker["complete"] is True and marker["files"] == ["report.html", "sub"]
    # a failing run leaves the earlier outputs and marker as they were
    with pytest.raises(RuntimeError):
        with output_folder(out, "bench", force=True) as stage:
            (stage / "report.html").write_text("half")
            raise RuntimeError("killed")
    assert (out / "report.html").read_text() == "r1" and json.loads((out / MARKER_NAME).read_text()) == marker
    assert not [n for n in _names(out) if n.startswith(".socfuse-staging")]


def test_rerun_replaces_its_own_outputs_and_removes_stale_ones(tmp_path):
    out = tmp_path / "c"
    with output_folder(out, "export-c") as stage:
        (stage / "a.png").write_text("1")
        (stage / "b.png").write_text("1")
    with output_folder(out, "export-c") as stage:
        (stage / "a.png").write_text("2")
    assert _names(out) == sorted([LOCK_NAME, MARKER_NAME, "a.png"]) and (out / "a.png").read_text() == "2"
    # bench (rerun=False) refuses a folder with an earlier report unless --force
    with output_folder(tmp_path / "b", "bench", rerun=False) as stage:
        (stage / "summary.csv").write_text("x")
    with pytest.raises(OutputPathError, match="earlier bench run"):
        with output_folder(tmp_path / "b", "bench", rerun=False):
            pass


def test_foreign_files_are_refused_unless_force_and_never_touched(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    with pytest.raises(OutputPathError, match=r"did not write \(notes.txt\)"):
        with output_folder(out, "bench"):
            pass
    assert _names(out) == ["notes.txt"]  # not even a lock file left behind
    with output_folder(out, "bench", force=True) as stage:
        (stage / "summary.csv").write_text("x")
    assert (out / "notes.txt").read_text() == "mine"
    with output_folder(out, "bench", force=True) as stage:  # the user's file is still not ours
        pass
    assert (out / "notes.txt").read_text() == "mine"


def test_a_killed_run_is_marked_incomplete_and_cleared_by_the_next(tmp_path):
    out = tmp_path / "k"
    with output_folder(out, "demo") as stage:
        (stage / "model.json").write_text("{}")
    # a run killed mid-way: marker incomplete, a staging folder left behind
    (out / ".socfuse-staging-dead").mkdir()
    (out / ".socfuse-staging-dead" / "report.html").write_text("half")
    m = json.loads((out / MARKER_NAME).read_text())
    (out / MARKER_NAME).write_text(json.dumps({**m, "complete": False}))
    with output_folder(out, "demo") as stage:
        (stage / "model.json").write_text("{\"new\": 1}")
    assert _names(out) == sorted([LOCK_NAME, MARKER_NAME, "model.json"])
    assert json.loads((out / MARKER_NAME).read_text())["complete"] is True


def test_locked_folder_is_refused(tmp_path):
    import fcntl

    out = tmp_path / "busy"
    with output_folder(out, "bench") as stage:
        fd = os.open(out / LOCK_NAME, os.O_RDWR)
        try:
            with pytest.raises(BlockingIOError):
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            with pytest.raises(OutputPathError, match="another socfuse run"):
                with output_folder(out, "bench"):
                    pass
        finally:
            os.close(fd)
        (stage / "x").write_text("1")
    assert (out / "x").read_text() == "1"


def test_output_file_checks_name_the_folder(tmp_path):
    with pytest.raises(OutputPathError, match=f"folder {tmp_path / 'missing'} does not exist"):
        check_output_file(tmp_path / "missing" / "t.csv")
    (tmp_path / "t.csv").write_text("keep")
    with pytest.raises(OutputPathError, match="exists; not overwritten"):
        check_output_file(tmp_path / "t.csv")
    with pytest.raises(OutputPathError, match="does not exist"):
        write_text_replacing(tmp_path / "missing" / "t.csv", "x")


@pytest.mark.parametrize("raw, says", [
    (b'{"a": "\xe9"}', "not UTF-8"),
    (b'{"a": ' + b"9" * 400 + b"}", "400 digits"),
    (b'{"a": {"b": [1e300]}}', "a.b[0] is 1e+300"),
    (b'{"a": NaN}', "NaN is not a number"),
    (b'{"a": 1e999}', "beyond the floating-point range"),
    (b"[" * 100 + b"]" * 100, "nested deeper than 64"),
    (b"[" * 100000 + b"]" * 100000, "nested deeper than 64"),
    (b'{"a": ', "not valid JSON"),
])
def test_read_json_refuses_naming_the_file(tmp_path, raw, says):
    p = tmp_path / "x.json"
    p.write_bytes(raw)
    with pytest.raises(JsonFileError) as e:
        read_json(p)
    assert str(p) in str(e.value) and says in str(e.value)
