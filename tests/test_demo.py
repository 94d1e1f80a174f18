"""``socfuse demo`` end to end, run once per test session (``--quick``: one day, four scenarios).

Outside reference: coulomb counting integrates a current-sensor offset without bound (drift
``b t / (3600 Q)``, common practice, no source) while an EKF that reads the terminal voltage keeps
the SOC error bounded (Plett, J. Power Sources 134, 2004, part 3): under the offset scenario the
EKF's RMSE must be below the baseline's.
"""
from __future__ import annotations

import importlib.util
import io
import json
from contextlib import redirect_stdout

import pandas as pd
import pytest

from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.demo.workflow import DEMO_MARKER, DemoError, demo_data_dir, run_demo


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    buf = io.StringIO()
    with redirect_stdout(buf):
        rc = main(["demo", "--out", str(out), "--quick", "--quiet"])
    return out, rc, buf.getvalue()


def test_demo_writes_the_contract_files(demo):
    out, rc, text = demo
    assert rc == 0
    # DESIGN.md section 4: report.html, summary.csv, model.json, filter.json and c/
    for name in ("report.html", "summary.csv", "model.json", "filter.json"):
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    assert json.loads((out / "model.json").read_text())["schema"] == "socfuse.cell-model/1"
    assert json.loads((out / "filter.json").read_text())["schema"] == "socfuse.filter/1"
    if importlib.util.find_spec("socfuse.estimator.outputs.export_c") is not None:
        assert (out / "c").is_dir() and any((out / "c").iterdir())
    assert "RMSE %" in text and SAFETY_NOTE in text
    assert (out / DEMO_MARKER).is_file()


def test_ekf_beats_the_baseline_under_a_current_offset(demo):
    out, _, _ = demo
    s = pd.read_csv(out / "summary.csv")
    assert list(s.columns[:7]) == ["recording", "scenario", "method", "rmse_pct", "max_abs_pct",
                                   "final_abs_pct", "converge_s"]
    off = s[s.scenario == "offset"].set_index("method")
    assert off.loc["ekf", "rmse_pct"] < off.loc["coulomb", "rmse_pct"]
    both = s[s.scenario == "combined"].set_index("method")
    assert both.loc["ekf", "rmse_pct"] < both.loc["coulomb", "rmse_pct"]


def test_demo_refuses_a_foreign_folder(tmp_path):
    (tmp_path / "mine.txt").write_text("user file")
    with pytest.raises(DemoError, match="not empty"):
        run_demo(tmp_path, quick=True, quiet=True, log=lambda s: None)
    assert (tmp_path / "mine.txt").read_text() == "user file"


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
