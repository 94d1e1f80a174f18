"""Identification from the bundled demo lab tests against the truth simulator's parameters.

The demo data is invented (models/truth.py, demo cell C48): these checks are a round trip of
identification against the parameters that generated the data, not a validation on a real cell.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from socfuse.models.identify.pipeline import identify
from socfuse.models.identify.refine import refine_model
from socfuse.models.identify.validate import validate
from socfuse.models.loaders import load_recording
from socfuse.models.modelfile import load_model, save_model
from socfuse.estimator.demo.truth import C48_TRUTH, truth_cell_model


@pytest.fixture(scope="module")
def demo(repo):
    d = repo / "datasets"
    if not (d / "c48_c20_25degC.csv").exists():
        pytest.skip("demo data not generated (python datasets/generate.py)")
    c20 = load_recording(d / "c48_c20_25degC.csv")
    pulses = [load_recording(d / "c48_pulse_25degC.csv"), load_recording(d / "c48_pulse_05degC.csv")]
    res = identify(c20, pulses, name="demo cell C48")
    return d, res


def test_capacity_and_ocv_round_trip(demo):
    _, res = demo
    m = res.model
    # invented truth: 4.8 Ah at 25 degC (socfuse.estimator.demo.truth.C48_TRUTH); within 0.5 %
    assert m.capacity_ah == pytest.approx(C48_TRUTH.capacity_ah, rel=0.005)
    assert m.coulombic_efficiency == pytest.approx(C48_TRUTH.coulombic_efficiency, abs=1e-3)
    truth = truth_cell_model(25.0)
    g = np.linspace(0.1, 0.9, 161)
    # OCV within 5 mV over 10-90 % SOC (the low-rate average; the truth has 8 mV hysteresis)
    assert res.ocv_source == "average"
    assert np.max(np.abs(m.ocv.voltage(g) - truth.ocv.voltage(g))) < 0.005


def test_resistances_and_time_constants_round_trip(demo):
    _, res = demo
    m = res.model
    assert res.n_rc == 2, res.n_rc_reason  # the truth has two RC pairs
    assert m.r0_ohm.temperature_c is not None and m.r0_ohm.temperature_c.size == 2
    for t_row, t_true in zip(m.r0_ohm.temperature_c, (5.0, 25.0)):
        truth = truth_cell_model(t_true)
        s = m.r0_ohm.soc
        r0_err = m.r0_ohm.at(s, t_row) / truth.r0_ohm.at(s, t_true) - 1
        assert np.max(np.abs(r0_err)) < 0.03, (t_true, r0_err)
        tau_err = m.rc[0].tau_s.at(s, t_row) / truth.rc[0].tau_s.at(s, t_true) - 1
        assert np.max(np.abs(tau_err)) < 0.10, (t_true, tau_err)


def test_model_file_keeps_the_provenance(demo, tmp_path):
    _, res = demo
    path = save_model(res.model, tmp_path / "c48.json")
    d = json.loads(path.read_text())
    prov = d["provenance"]
    for key in ("capacity", "ocv", "r0_ohm", "rc_pairs"):
        assert "file" in prov[key] and "test" in prov[key], key
    assert "c48_c20_25degC" in str(prov["capacity"]["file"])
    assert prov["ocv"]["test"] == "average"
    assert prov["rc_pairs"]["residual_v"] < 0.002  # median relaxation-fit RMS, V
    back = load_model(path)
    assert back.n_rc == res.model.n_rc
    np.testing.assert_allclose(back.r0_ohm.values, res.model.r0_ohm.values)


def test_validation_and_refinement_on_delivery_days(demo):
    d, res = demo
    lunch = load_recording(d / "c48_day_lunch.csv")
    long_day = load_recording(d / "c48_day_long.csv")
    v = validate(res.model, lunch)
    assert v.rms_v < 0.010  # open-loop over a whole invented delivery day
    r = refine_model(res.model, long_day, stride=5, max_nfev=20)
    assert r.rms_after_v <= r.rms_before_v
    v2 = validate(r.model, lunch)  # refined on another day, checked on this one
    assert v2.rms_v < 0.010


def test_the_estimator_accepts_the_model(demo):
    run = pytest.importorskip("socfuse.estimator.filters.run")
    d, res = demo
    rec = load_recording(d / "c48_day_lunch.csv")
    tr = run.estimate(res.model, rec.slice(0, 3000), method="ekf")
    assert np.all(np.isfinite(tr.soc))
    assert abs(tr.soc[-1] - rec.soc_ref[2999]) < 0.05


def test_result_table_is_the_models_tables(demo):
    # IdentifyResult.to_frame(): one row per R0 breakpoint; at a breakpoint the table's own value
    # comes back exactly (round trip of the data structure, no outside reference needed)
    _, res = demo
    f = res.to_frame()
    m = res.model
    t = m.r0_ohm.temperature_c
    assert len(f) == m.r0_ohm.soc.size * (1 if t is None else t.size)
    assert {"temperature_c", "soc", "ocv_v", "r0_ohm", "r1_ohm", "tau1_s"} <= set(f.columns)
    vals = np.asarray(m.r0_ohm.values, dtype=float).reshape(-1)
    assert np.allclose(np.sort(f["r0_ohm"].to_numpy()), np.sort(vals), rtol=1e-12)
