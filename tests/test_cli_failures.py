"""Clean failures of the command line (DESIGN.md section 4): exit 2 with one line for bad usage or input,
exit 1 with one line for a bug, no traceback unless SOCFUSE_DEBUG=1, output paths checked before any
work, no partial output, quiet end on a closed pipe, results on stdout and cautions on stderr.

Outside facts: a process whose reader closes the pipe gets SIGPIPE/EPIPE and shells report signal
exits as 128 + signal number, SIGPIPE = 13 (POSIX signal.h, common practice, no source); argparse
leaves '%%' unexpanded in description and epilog texts (Python argparse documentation: only help
strings are %-formatted).
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from socfuse.estimator.cli.main import COMMANDS, SAFETY_NOTE, build_parser, main

CORPUS = Path(__file__).resolve().parent / "corpus"
REPO = Path(__file__).resolve().parents[1]


def _lines(err: str) -> list:
    return [ln for ln in err.strip().splitlines() if ln]


def test_usage_error_is_one_line_plus_the_usage_line(capsys):
    assert main(["bench", "--model", "m.json"]) == 2
    err = _lines(capsys.readouterr().err)
    assert len(err) == 2, err
    assert err[0].startswith("socfuse bench: error:") and "--out" in err[0]
    assert err[1].startswith("usage: socfuse bench [options] REC [REC ...]") and "--help" in err[1]
    assert main(["estimate", "--model", "m.json", "x.csv", "--method", "kalman"]) == 2
    err = _lines(capsys.readouterr().err)
    assert len(err) == 2 and "invalid choice: 'kalman'" in err[0]
    assert main(["nosuchcommand"]) == 2
    assert len(_lines(capsys.readouterr().err)) == 2


def test_no_double_percent_in_any_help_text(capsys):
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, p in sub.choices.items():
        text = p.format_help()
        assert "%%" not in text, name
    assert set(sub.choices) == set(COMMANDS)


def test_a_bug_exits_1_with_one_line_and_debug_shows_the_traceback(monkeypatch, capsys):
    import socfuse.estimator.cli.cmd_energy as cmd

    def broken(args):
        raise KeyError("oops")

    monkeypatch.setattr(cmd, "run", broken)
    argv = ["energy", "--model", str(CORPUS / "model.json")]
    monkeypatch.delenv("SOCFUSE_DEBUG", raising=False)
    # register() binds run at parser build time: patch before main builds the parser
    assert main(argv) == 1
    err = _lines(capsys.readouterr().err)
    assert len(err) == 1 and "internal error: KeyError" in err[0] and "SOCFUSE_DEBUG=1" in err[0]
    monkeypatch.setenv("SOCFUSE_DEBUG", "1")
    with pytest.raises(KeyError):
        main(argv)


def test_output_into_a_missing_folder_names_the_folder_before_any_work(tmp_path, capsys):
    out = tmp_path / "nope" / "trace.csv"
    assert main(["estimate", "--model", str(CORPUS / "model.json"), str(CORPUS / "good.csv"), "-o", str(out)]) == 2
    err = _lines(capsys.readouterr().err)
    assert len(err) == 1 and f"folder {tmp_path / 'nope'} does not exist" in err[0] and ".tmp" not in err[0]
    # an output path that is a folder
    assert main(["estimate", "--model", str(CORPUS / "model.json"), str(CORPUS / "good.csv"), "-o", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err


def test_estimate_failure_leaves_no_partial_output(tmp_path, capsys):
    out = tmp_path / "trace.csv"
    # an implausible recording stops before the trace is written, and nothing is left behind
    assert main(["estimate", "--model", str(CORPUS / "model.json"), str(CORPUS / "current_ma_as_a.csv"),
                 "-o", str(out)]) == 2
    assert list(tmp_path.iterdir()) == []
    assert "--current-unit mA" in capsys.readouterr().err


def test_identify_plots_into_a_file_fails_before_writing(tmp_path, capsys):
    bad = tmp_path / "plots_are_here.txt"
    bad.write_text("a file, not a folder")
    model = tmp_path / "m.json"
    code = main(["identify", "--ocv-test", str(REPO / "datasets" / "c48_c20_25degC.csv"), "--pulse-test",
                 str(REPO / "datasets" / "c48_pulse_25degC.csv"), "-o", str(model), "--plots", str(bad)])
    assert code == 2 and not model.exists()
    err = _lines(capsys.readouterr().err)
    assert len(err) == 1 and "--plots" in err[0] and "not a folder" in err[0]


def test_caution_on_stderr_and_results_on_stdout(capsys):
    assert main(["check", str(CORPUS / "good.csv")]) == 0
    cap = capsys.readouterr()
    assert SAFETY_NOTE in cap.err and SAFETY_NOTE not in cap.out and "samples" in cap.out


def test_closed_pipe_ends_quietly(tmp_path):
    # `socfuse check F | head -1`: the reader goes away after one line
    code = ("import sys; from socfuse.estimator.cli.main import main; sys.exit(main(sys.argv[1:]))")
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    p = subprocess.Popen([sys.executable, "-c", code, "check", str(CORPUS / "good.csv")], stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, env=env)
    p.stdout.readline()
    p.stdout.close()  # the reader closes early, as head does
    err = p.stderr.read().decode()
    rc = p.wait()
    assert "Traceback" not in err and "BrokenPipeError" not in err and "Exception ignored" not in err, err
    assert rc in (0, 141)  # 0 when every line fit in the pipe buffer before it closed


def test_export_c_without_the_bundled_day_requires_golden(tmp_path, monkeypatch, capsys):
    import socfuse.models.loaders as loaders

    monkeypatch.setattr(loaders, "bundled_recording_path", lambda name: None)  # as after an install without data
    out = tmp_path / "c"
    assert main(["export-c", "--model", str(CORPUS / "model.json"), "--out", str(out), "--no-build"]) == 2
    err = _lines(capsys.readouterr().err)
    assert len(err) == 1 and "--golden" in err[0] and "not installed" in err[0] and not out.exists()
    assert main(["export-c", "--model", str(CORPUS / "model.json"), "--out", str(out), "--no-build",
                 "--golden", str(CORPUS / "good.csv")]) == 0
    assert (out / "golden.csv").is_file() and "good" in capsys.readouterr().out


def test_bundled_day_is_found_as_package_data():
    from socfuse.models.loaders import bundled_recording_path

    p = bundled_recording_path("c48_day_lunch.csv")
    assert p is not None and p.is_file() and p.name == "c48_day_lunch.csv"
    assert bundled_recording_path("no_such_day.csv") is None
