"""Benchmark harness on a short simulated slice of the demo data.

Outside references: coulomb counting with a constant current-sensor offset ``b`` drifts by
``b t / (3600 Q)`` in SOC (1 Ah = 3600 C, common practice, no source); RMSE / max error are the
plain sample statistics recomputed here with numpy.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from socfuse.estimator.analysis.bench import format_summary, run_bench, summary_columns, write_summary_csv
from socfuse.models.loaders import load_recording
from socfuse.estimator.demo.truth import truth_cell_model

DESIGN_COLUMNS = ["recording", "scenario", "method", "rmse_pct", "max_abs_pct", "final_abs_pct", "converge_s"]


@pytest.fixture(scope="module")
def small(repo):
    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 3600)
    # coulombic efficiency 1, so a constant offset drifts the count by exactly b t / (3600 Q)
    model = truth_cell_model(25.0).with_(coulombic_efficiency=1.0)
    res = run_bench(model, [rec], ["nominal", "offset=0.1", "drift:soc0=-0.2"], ["ekf", "coulomb"],
                    soc0=float(rec.soc_ref[0]), quiet=True)
    return rec, model, res


def test_summary_has_the_design_columns(small):
    rec, model, res = small
    s = res.summary
    # DESIGN.md section 4: summary.csv columns, exact names, in this order first
    assert list(s.columns[:7]) == DESIGN_COLUMNS
    assert list(s.columns) == summary_columns()
    assert len(s) == 6 and not res.errors
    assert set(s["scenario"]) == {"nominal", "offset=0.1", "drift"}
    assert set(res.traces) == {(rec.name, sc, m) for sc in ("nominal", "offset=0.1", "drift") for m in ("ekf", "coulomb")}


def test_metrics_match_the_traces(small):
    rec, model, res = small
    for (_r, sc, m), tr in res.traces.items():
        row = res.summary[(res.summary.scenario == sc) & (res.summary.method == m)].iloc[0]
        e = np.asarray(tr.soc) - np.asarray(tr.soc_ref)
        assert row.rmse_pct == pytest.approx(100 * np.sqrt(np.mean(e ** 2)), rel=1e-12)
        assert row.max_abs_pct == pytest.approx(100 * np.max(np.abs(e)), rel=1e-12)
        assert row.final_abs_pct == pytest.approx(100 * abs(e[-1]), rel=1e-12, abs=1e-12)


def test_coulomb_drift_under_a_current_offset(small):
    rec, model, res = small
    nom = res.traces[(rec.name, "nominal", "coulomb")]
    off = res.traces[(rec.name, "offset=0.1", "coulomb")]
    # drift of coulomb counting with offset b over T seconds: b T / (3600 Q) (common practice, no source);
    # the 1 h slice has no rest long enough for an OCV reseed
    assert not off.reseeds
    drift = 0.1 * rec.duration_s / (3600.0 * model.capacity_ah)
    assert nom.soc[-1] - off.soc[-1] == pytest.approx(drift, rel=1e-9)


def test_the_ekf_corrects_a_wrong_start(small):
    rec, model, res = small
    s = res.summary.set_index(["scenario", "method"])
    # a 20-point initial error: the coulomb baseline keeps it, the EKF pulls it in through the voltage
    assert s.loc[("drift", "coulomb"), "final_abs_pct"] == pytest.approx(20.0, abs=1.0)
    assert s.loc[("drift", "ekf"), "final_abs_pct"] < 5.0
    assert s.loc[("drift", "ekf"), "converge_s"] < rec.duration_s


def test_summary_csv_round_trip(small, tmp_path):
    _, _, res = small
    p = tmp_path / "summary.csv"
    write_summary_csv(res.summary, p)
    back = pd.read_csv(p)
    assert list(back.columns) == summary_columns()
    assert back["converge_s"].isna().sum() == res.summary["converge_s"].isna().sum()
    text = format_summary(res.summary)
    assert "RMSE %" in text and "offset=0.1" in text and len(text.splitlines()) == 8


def test_bad_input(small):
    rec, model, _ = small
    with pytest.raises(ValueError, match="no soc_ref"):
        run_bench(model, [rec.with_(soc_ref=None)], ["nominal"], ["coulomb"], quiet=True)


def test_bench_command(repo, tmp_path, capsys):
    from socfuse.estimator.cli.main import SAFETY_NOTE, main
    from socfuse.models.modelfile import save_model

    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 1200)
    rec.to_csv(tmp_path / "day.csv")
    save_model(truth_cell_model(25.0), tmp_path / "model.json")
    out = tmp_path / "bench"
    # the recording may come after --scenarios: a value with a recording suffix is a recording
    argv = ["bench", "--model", str(tmp_path / "model.json"), "--out", str(out),
            "--scenarios", "nominal", "offset=0.1", str(tmp_path / "day.csv"), "--quiet"]
    assert main(argv) == 0
    cap = capsys.readouterr()
    text = cap.out
    assert SAFETY_NOTE in cap.err and SAFETY_NOTE not in text and "offset=0.1" in text
    s = pd.read_csv(out / "summary.csv")
    assert list(s.columns[:7]) == DESIGN_COLUMNS and len(s) == 4
    assert (out / "report.html").is_file()
    assert not [p.name for p in out.iterdir() if p.name.startswith(".socfuse-staging")]
    # DESIGN.md section 4: bad input exits 2 with one line; existing results are never overwritten
    before = (out / "summary.csv").read_bytes()
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "earlier bench run" in err[0] and "--force" in err[0]
    assert (out / "summary.csv").read_bytes() == before
    bad = [a if a != str(out) else str(tmp_path / "other") for a in argv[:-2]] + ["wobble=1", argv[-2]]
    assert main(bad) == 2
    assert "unknown fault 'wobble'" in capsys.readouterr().err
    assert not (tmp_path / "other").exists()
    # a folder holding the user's own files is refused unless --force; the user's file survives
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "rmse_by_scenario.png").write_bytes(b"my own figure")
    argv2 = [a if a != str(out) else str(mine) for a in argv]
    assert main(argv2) == 2
    assert "did not write (rmse_by_scenario.png)" in capsys.readouterr().err
    assert (mine / "rmse_by_scenario.png").read_bytes() == b"my own figure" and len(list(mine.iterdir())) == 1
    # a failure inside the run (no SOC reference) leaves no partial output and no new folder
    rec.with_(soc_ref=None).to_csv(tmp_path / "noref.csv")
    argv3 = [a if a != str(out) else str(tmp_path / "fresh") for a in argv[:-2]] + [str(tmp_path / "noref.csv")]
    assert main(argv3) == 2
    assert "no SOC reference" in capsys.readouterr().err and not (tmp_path / "fresh").exists()
    # --methods with an unknown method, --ukf-only with an unknown recording: one line each
    assert main(argv[:-2] + ["--methods", "ekf", "kalman", argv[-2]]) == 2
    assert "unknown method(s) kalman" in capsys.readouterr().err
    assert main([a if a != str(out) else str(tmp_path / "u") for a in argv] + ["--ukf-only", "nope"]) == 2
    assert "--ukf-only: no recording named nope" in capsys.readouterr().err


def test_second_bench_into_a_locked_folder_is_refused(repo, tmp_path, capsys):
    import fcntl
    import os

    from socfuse.estimator.cli.main import main
    from socfuse.models.fileio import LOCK_NAME
    from socfuse.models.modelfile import save_model

    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 300)
    rec.to_csv(tmp_path / "day.csv")
    save_model(truth_cell_model(25.0), tmp_path / "model.json")
    out = tmp_path / "busy"
    out.mkdir()
    fd = os.open(out / LOCK_NAME, os.O_CREAT | os.O_RDWR)
    fcntl.flock(fd, fcntl.LOCK_EX)  # a first run holding the folder (flock(2) conflicts between open files)
    try:
        assert main(["bench", "--model", str(tmp_path / "model.json"), str(tmp_path / "day.csv"), "--out", str(out),
                     "--scenarios", "nominal", "--methods", "coulomb", "--quiet"]) == 2
    finally:
        os.close(fd)
    assert "another socfuse run is writing into this folder" in capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == [LOCK_NAME]


def test_progress_is_quiet_off_a_terminal(monkeypatch):
    from socfuse.estimator.analysis.progress import show_progress

    monkeypatch.delenv("SOCFUSE_PROGRESS", raising=False)
    assert show_progress(quiet=True) is False
    assert show_progress() is False          # pytest captures output: not a terminal
    monkeypatch.setenv("SOCFUSE_PROGRESS", "1")
    assert show_progress() is True and show_progress(quiet=True) is False


def test_summary_counts_gaps_and_the_envelope(small, tmp_path):
    # issue 16: the report's runs table (summary.csv) counts the samples the filter step flagged;
    # the baseline carries no status, so its counts are blank
    from socfuse.models.recording import Recording

    rec, model, _ = small
    keep = np.ones(rec.n, bool)
    keep[1000:1600] = False  # a 10 min logging gap while riding
    temp = np.where(np.arange(rec.n) >= 3000, -45.0, 25.0)  # far below the model's tables at the end
    gapped = Recording(rec.time_s[keep], rec.current_a[keep], rec.voltage_v[keep], temp[keep], rec.soc_ref[keep],
                       "gapped")
    res = run_bench(model, [gapped], ["nominal"], ["ekf", "coulomb"], soc0=float(rec.soc_ref[0]), quiet=True)
    s = res.summary.set_index("method")
    assert s.loc["ekf", "n_gap"] >= 1 and s.loc["ekf", "n_envelope"] >= 500
    assert pd.isna(s.loc["coulomb", "n_gap"])
    # ... and the report's per-recording runs table shows them
    from socfuse.estimator.outputs.report import write_report

    rep = write_report(tmp_path / "rep", res, model)
    html = rep.html.read_text()
    assert "in or after a logging gap (samples)" in html and "outside the temperature envelope (samples)" in html
