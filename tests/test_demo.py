"""``socfuse demo`` end to end, run once per test session (``--quick``: one day, four scenarios).

Outside reference: coulomb counting integrates a current-sensor offset without bound (drift
``b t / (3600 Q)``, common practice, no source) while an EKF that reads the terminal voltage keeps
the SOC error bounded (Plett, J. Power Sources 134, 2004, part 3): under the offset scenario the
EKF's RMSE must be below the baseline's.
"""
from __future__ import annotations

import io
import json
from contextlib import redirect_stderr, redirect_stdout

import pandas as pd
import pytest

from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.demo.workflow import DEMO_MARKER, demo_data_dir, run_demo


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    buf, err = io.StringIO(), io.StringIO()
    with redirect_stdout(buf), redirect_stderr(err):
        rc = main(["demo", "--out", str(out), "--quick", "--quiet"])
    return out, rc, buf.getvalue(), err.getvalue()


def test_demo_writes_the_contract_files(demo):
    out, rc, text, err = demo
    assert rc == 0
    # DESIGN.md section 4: report.html, summary.csv, model.json, filter.json and c/
    for name in ("report.html", "summary.csv", "model.json", "filter.json"):
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    assert json.loads((out / "model.json").read_text())["schema"] == "socfuse.cell-model/1"
    assert json.loads((out / "filter.json").read_text())["schema"] == "socfuse.filter/1"
    assert (out / "c").is_dir() and any((out / "c").iterdir())
    # results on stdout, the caution and the step log on stderr
    assert "RMSE %" in text and SAFETY_NOTE not in text and SAFETY_NOTE in err
    assert (out / DEMO_MARKER).is_file()
    # every step ran; none is "skipped"
    assert "skipped" not in err and err.count(": done") == 8
    # no staging folder left behind; the completion marker says complete
    assert [p.name for p in out.parent.iterdir()] == ["out"]
    assert not [p for p in out.iterdir() if "staging" in p.name]
    assert json.loads((out / ".socfuse-run.json").read_text())["complete"] is True


def test_ekf_beats_the_baseline_under_a_current_offset(demo):
    out = demo[0]
    s = pd.read_csv(out / "summary.csv")
    assert list(s.columns[:7]) == ["recording", "scenario", "method", "rmse_pct", "max_abs_pct",
                                   "final_abs_pct", "converge_s"]
    off = s[s.scenario == "offset"].set_index("method")
    assert off.loc["ekf", "rmse_pct"] < off.loc["coulomb", "rmse_pct"]
    both = s[s.scenario == "combined"].set_index("method")
    assert both.loc["ekf", "rmse_pct"] < both.loc["coulomb", "rmse_pct"]


def test_demo_refuses_a_foreign_folder(tmp_path):
    (tmp_path / "mine.txt").write_text("user file")
    with pytest.raises(ValueError, match="did not write"):
        run_demo(tmp_path, quick=True, quiet=True, log=lambda s: None)
    assert (tmp_path / "mine.txt").read_text() == "user file"


def test_a_failing_step_stops_the_demo_and_leaves_nothing(tmp_path, monkeypatch):
    # identification that fails must stop the demo with one line naming the step: no stand-in
    # (such as the truth parameters), no half-written output folder
    from socfuse.models.identify import pipeline

    def broken(*args, **kwargs):
        raise pipeline.IdentifyError("no pulses found in c48_pulse_25degC")

    monkeypatch.setattr(pipeline, "identify", broken)
    out = tmp_path / "out"
    err = io.StringIO()
    with redirect_stderr(err):
        rc = main(["demo", "--out", str(out), "--quick", "--quiet"])
    assert rc == 2
    lines = [ln for ln in err.getvalue().splitlines() if ln.startswith("socfuse demo:")]
    assert lines == ["socfuse demo: step 'identify the cell model from the C/20 and pulse tests' failed: "
                     "no pulses found in c48_pulse_25degC"]
    assert not (out / "report.html").exists() and not (out / "model.json").exists()


def test_a_bug_in_a_step_is_not_turned_into_bad_input(tmp_path, monkeypatch):
    from socfuse.models.identify import pipeline

    def buggy(*args, **kwargs):
        raise TypeError("identify() got an unexpected keyword argument")

    monkeypatch.setattr(pipeline, "identify", buggy)
    with pytest.raises(TypeError):
        run_demo(tmp_path / "out", quick=True, quiet=True, log=lambda s: None)
    assert not (tmp_path / "out" / "model.json").exists()


def test_demo_data_found_in_a_checkout(repo):
    assert demo_data_dir() == repo / "datasets"


def test_installed_data_folder_is_found(tmp_path, monkeypatch):
    # the installed data folder socfuse/datasets has no __init__.py: a namespace package (PEP 420)
    import importlib
    import sys

    import socfuse
    from socfuse.estimator.demo.workflow import _package_data_dirs

    (tmp_path / "datasets").mkdir()
    monkeypatch.setattr(socfuse, "__path__", [str(tmp_path)])
    monkeypatch.delitem(sys.modules, "socfuse.datasets", raising=False)
    importlib.invalidate_caches()
    assert tmp_path / "datasets" in _package_data_dirs()
