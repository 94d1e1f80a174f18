"""Plausibility checks of identified models (models/identify/plausible.py) and their CLI refusal.

Bounds are facts of the trade for lithium-ion cells (common practice, no source; from memory): a
C/20 test lasts about 20 h, capacities lie between coin cells (mAh) and storage prismatics (hundreds
of Ah), R0 is positive.  Data: the bundled demo tests of our invented cell C48.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from socfuse.estimator.cli.main import main
from socfuse.models import ParamTable, RcPair
from socfuse.models.identify.pipeline import identify
from socfuse.models.identify.plausible import check_model
from socfuse.models.loaders import load_recording


@pytest.fixture(scope="module")
def demo_result(repo):
    d = repo / "datasets"
    return identify(load_recording(d / "c48_c20_25degC.csv"), [load_recording(d / "c48_pulse_25degC.csv")])


def test_demo_model_is_plausible(demo_result):
    assert check_model(demo_result.model, demo_result.ocv_test, demo_result.pulse_tests) == []
    assert demo_result.model.provenance["plausibility"]["problems"] == []


def test_bad_tables_are_named_with_table_and_soc(demo_result):
    m = demo_result.model
    # a negative R0 cannot even be built (the table refuses it, naming the breakpoint)
    vals = np.array(m.r0_ohm.values, dtype=float)
    vals.flat[3] = -0.001
    with pytest.raises(ValueError, match="r0_ohm: must be positive.*SOC breakpoint 3"):
        ParamTable(m.r0_ohm.soc, vals.reshape(np.shape(m.r0_ohm.values)), m.r0_ohm.temperature_c, name="r0_ohm")
    # a time constant far beyond the pulse test's relaxation windows (a time-unit slip in a fit)
    pair = m.rc[0]
    tv = np.array(pair.tau_s.values, dtype=float)
    tv.flat[2] = 1e6
    bad = m.with_(rc=(RcPair(pair.r_ohm, ParamTable(pair.tau_s.soc, tv.reshape(np.shape(pair.tau_s.values)),
                                                   pair.tau_s.temperature_c, name="tau1_s")),) + tuple(m.rc[1:]))
    probs = check_model(bad, demo_result.ocv_test, demo_result.pulse_tests)
    soc = 100 * float(np.asarray(pair.tau_s.soc)[2])
    assert any(p.startswith(f"table tau1_s at SOC {soc:.0f} %") and "time scales" in p for p in probs), probs


def test_time_unit_error_is_refused_with_exit_2_and_accepted_on_request(repo, tmp_path, capsys):
    # the low-rate test's time column in minutes read as seconds x 60: a "C/20" test of 50 days
    d = repo / "datasets"
    c20 = pd.read_csv(d / "c48_c20_25degC.csv")
    c20["time_s"] *= 60.0
    c20.to_csv(tmp_path / "c20_slow.csv", index=False)
    out = tmp_path / "m.json"
    args = ["identify", "--ocv-test", str(tmp_path / "c20_slow.csv"), "--pulse-test", str(d / "c48_pulse_25degC.csv"),
            "-o", str(out)]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert "refused as implausible" in err and "low-rate test at" in err and "Traceback" not in err
    assert len(err.strip().splitlines()) == 1
    assert not out.exists()
    assert main(args + ["--accept-implausible"]) == 0
    prov = json.loads(out.read_text())["provenance"]["plausibility"]
    assert prov["accepted_by_user"] is True and any("low-rate test at" in p for p in prov["problems"])


def test_identify_prints_tables_offset_and_hysteresis(repo, tmp_path, capsys):
    d = repo / "datasets"
    assert main(["identify", "--ocv-test", str(d / "c48_c20_25degC.csv"), "--pulse-test",
                 str(d / "c48_pulse_25degC.csv"), "-o", str(tmp_path / "m.json")]) == 0
    text = capsys.readouterr().out
    assert "r0_ohm: 25 pulses" in text
    assert "relaxation fits; median fit RMS" in text
    assert "current-sensor offset" in text and "hysteresis:" in text
    prov = json.loads((tmp_path / "m.json").read_text())["provenance"]
    assert prov["current_offset"]["used_a"][0] == pytest.approx(prov["current_offset"]["pooled_a"])


def test_demo_hysteresis_matches_the_truth(demo_result):
    # demo truth (datasets/manifest.json, invented): Plett hysteresis M = 8 mV, gamma = 30
    h = demo_result.model.hysteresis
    assert h is not None
    assert h.max_v == pytest.approx(0.008, abs=0.001)
    assert h.gamma == pytest.approx(30.0, rel=0.5)
    # its centre line is the branch average
    assert demo_result.ocv_source == "average"


def test_ocv_over_temperature_from_the_pulse_test_rests(repo):
    # demo truth (invented, datasets/manifest.json): the OCV moves with temperature; the 5 degC row
    # built from the 5 degC pulse test's rests is closer to the truth at 5 degC than the 25 degC curve
    from socfuse.estimator.demo.truth import truth_ocv_curve

    d = repo / "datasets"
    res = identify(load_recording(d / "c48_c20_25degC.csv"),
                   [load_recording(d / "c48_pulse_25degC.csv"), load_recording(d / "c48_pulse_05degC.csv")])
    ocv = res.model.ocv
    assert ocv.temperature_c is not None and len(ocv.temperature_c) == 2
    truth = truth_ocv_curve()
    z = np.linspace(0.1, 0.9, 81)
    t_cold = float(ocv.temperature_c[0])
    with_rows = np.sqrt(np.mean((ocv.voltage(z, t_cold) - truth.voltage(z, t_cold)) ** 2))
    flat = np.sqrt(np.mean((ocv.voltage(z, float(ocv.temperature_c[-1])) - truth.voltage(z, t_cold)) ** 2))
    assert with_rows < 0.7 * flat
    assert res.model.provenance["ocv_temperature"]["rows"] == 2


def test_flat_hysteretic_cell_gets_two_branches():
    # an invented LFP-like cell (flat plateau, Plett hysteresis M = 15 mV, gamma = 25) simulated with
    # models.simulate: identification puts the hysteresis in the model (two branches around the
    # average) instead of averaging it away; no chemistry voltage is assumed anywhere
    from socfuse.models import CellModel, Hysteresis, OcvCurve, RcPair, Recording, simulate
    from socfuse.models.identify.synthetic import hppc_profile, low_rate_profile

    soc = np.linspace(0.0, 1.0, 21)
    ocv_v = 3.2 + 0.12 * soc + 0.35 * np.exp(-soc / 0.03) * -1 + 0.3 * np.exp(-(1 - soc) / 0.03)
    truth = CellModel(2.3, OcvCurve(soc, ocv_v), ParamTable(soc, 0.02 + 0 * soc),
                      (RcPair(ParamTable(soc, 0.01 + 0 * soc), ParamTable(soc, 30.0 + 0 * soc)),),
                      hysteresis=Hysteresis(25.0, 0.015), v_min_v=2.8, v_max_v=3.55)
    t, i = low_rate_profile(2.3, rate_c=0.05, dt_s=60.0)
    c20 = Recording(t, i, simulate(truth, t, i, soc0=1.0, h0=1.0).voltage_v, name="flat c20")
    t, i = hppc_profile(2.3, pulse_currents_a=(2.3,), rest_s=1800.0, levels=(0.9, 0.7, 0.5, 0.3, 0.1))
    sim = simulate(truth, t, i, soc0=1.0, h0=1.0)
    pulse = Recording(t, i, sim.voltage_v, soc_ref=sim.soc, name="flat hppc")
    res = identify(c20, [pulse], rc_pairs=1)
    h = res.model.hysteresis
    assert h is not None, res.model.provenance["hysteresis"]["reason"]
    assert h.max_v == pytest.approx(0.015, abs=0.002)
    z = np.linspace(0.2, 0.8, 25)
    assert np.max(np.abs(res.model.ocv.voltage(z) - truth.ocv.voltage(z))) < 0.003
