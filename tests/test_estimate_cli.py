"""``socfuse estimate`` end to end (DESIGN.md section 4) and a light real-data run."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.filters.run import estimate
from socfuse.estimator.filters.settings import default_settings, save_settings
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, save_model

DRIVE = "drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat"


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("est")
    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=400, soc0=0.7, seed=1, temperature_c=25.0)
    rec.to_csv(d / "rec.csv", float_format="%.9g")
    save_model(m, d / "model.json")
    save_settings(default_settings(m).with_(gate_sigma=4.0), d / "filter.json")
    return d, m, rec


@pytest.mark.parametrize("method", ["ekf", "coulomb", "ukf"])
def test_estimate_writes_trace(files, method, capsys):
    d, m, rec = files
    out = d / f"trace_{method}.csv"
    rc = main(["estimate", "--model", str(d / "model.json"), "--filter", str(d / "filter.json"),
               "--method", method, "--soc0", "0.7", str(d / "rec.csv"), "-o", str(out)])
    assert rc == 0
    cap = capsys.readouterr()
    assert SAFETY_NOTE in cap.err and SAFETY_NOTE not in cap.out  # the caution on stderr, results on stdout
    df = pd.read_csv(out)
    # DESIGN.md section 3 trace columns
    for c in ("time_s", "soc", "soc_sigma", "voltage_pred_v", "innovation_v", "soc_e", "soc_ref", "soc_error"):
        assert c in df.columns
    assert len(df) == rec.n
    ref = estimate(m, rec, method, default_settings(m).with_(gate_sigma=4.0), soc0=0.7)
    np.testing.assert_allclose(df["soc"], ref.soc, atol=1e-7)  # CSV written with 8 significant digits
    assert np.sqrt(np.mean(df["soc_error"] ** 2)) < 0.01


def test_summary_without_output_and_bad_input(files, capsys):
    d, m, rec = files
    assert main(["estimate", "--model", str(d / "model.json"), str(d / "rec.csv"), "--method", "coulomb"]) == 0
    cap = capsys.readouterr()
    out = cap.out
    assert "final SOC" in out and "RMSE vs ref" in out and "OCV reseeds" in out and SAFETY_NOTE in cap.err
    # existing output is not overwritten; a bad filter key and a bad soc0 exit 2 with one line
    (d / "exists.csv").write_text("keep me\n")
    assert main(["estimate", "--model", str(d / "model.json"), str(d / "rec.csv"), "-o", str(d / "exists.csv")]) == 2
    assert (d / "exists.csv").read_text() == "keep me\n"
    (d / "bad.json").write_text(json.dumps({"schema": "socfuse.filter/1", "voltage_noise": 0.01}))
    assert main(["estimate", "--model", str(d / "model.json"), "--filter", str(d / "bad.json"), str(d / "rec.csv")]) == 2
    err = capsys.readouterr().err
    assert "voltage_noise" in err and "valid keys" in err and len(err.strip().splitlines()) == 2
    assert main(["estimate", "--model", str(d / "model.json"), "--soc0", "1.5", str(d / "rec.csv")]) == 2


def test_real_drive_cycle_runs(realdata, tmp_path):
    from socfuse.models.loaders import load_recording

    rec = load_recording(realdata / DRIVE, preset="panasonic-18650pf")
    rec = rec.slice(0, 20000)
    # crude model of the 2.9 Ah Panasonic NCR18650PF (data sheet capacity; OCV a rough NCA-like line)
    soc = np.linspace(0, 1, 6)
    m = CellModel(2.9, OcvCurve(soc, [3.0, 3.45, 3.62, 3.8, 3.98, 4.18]), ParamTable.constant(0.03, "r0_ohm"),
                  (RcPair(ParamTable.constant(0.015), ParamTable.constant(20.0)),), 0.99)
    for method in ("ekf", "coulomb"):
        tr = estimate(m, rec, method)
        assert np.all(np.isfinite(tr.soc)) and np.all((tr.soc >= 0) & (tr.soc <= 1))
        # the drive starts near full charge (the file's first voltage is about 4.15 V)
        assert tr.soc[0] > 0.8
    save_model(m, tmp_path / "m.json")
    assert main(["estimate", "--model", str(tmp_path / "m.json"), "--preset", "panasonic-18650pf",
                 str(realdata / DRIVE), "-o", str(tmp_path / "t.csv")]) == 0
    assert len(pd.read_csv(tmp_path / "t.csv")) > 100000


def test_estimate_reports_gaps_and_the_operating_envelope(tmp_path, capsys):
    # issue 16: a logging gap and samples far outside the model's temperature tables are counted
    # and reported by `estimate` (stderr), and the trace carries the per-sample status column
    from socfuse.estimator.filters import kernels as K

    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=1200, soc0=0.7, seed=4, temperature_c=25.0)
    keep = np.ones(rec.n, bool)
    keep[500:800] = False  # a 5 min gap while the current flows
    temp = np.full(rec.n, 25.0)
    temp[900:1000] = -40.0  # far outside the tables (tiny_model: one temperature row)
    rec = rec.with_(temperature_c=temp)
    rec = Recording(rec.time_s[keep], rec.current_a[keep], rec.voltage_v[keep], rec.temperature_c[keep],
                    rec.soc_ref[keep], rec.name)
    rec.to_csv(tmp_path / "r.csv", float_format="%.9g")
    save_model(m, tmp_path / "m.json")
    rc = main(["estimate", "--model", str(tmp_path / "m.json"), str(tmp_path / "r.csv"), "-o", str(tmp_path / "t.csv"),
               "--trust-input"])
    assert rc == 0
    err = capsys.readouterr().err
    assert "samples flagged gap" in err and "samples flagged envelope" in err
    st = pd.read_csv(tmp_path / "t.csv")["status"].to_numpy()
    assert np.count_nonzero(st & K.ST_ENVELOPE) >= 90
    assert np.count_nonzero(st & K.ST_GAP) >= 1
