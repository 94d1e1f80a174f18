"""``socfuse identify`` on small synthetic CSV files (invented cell, simulated with models.simulate)."""
from __future__ import annotations

import json

import numpy as np
import pytest

from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, load_model, simulate
from socfuse.models.identify.synthetic import hppc_profile, low_rate_profile

SOC = np.linspace(0.0, 1.0, 11)
OCV = OcvCurve(SOC, 3.0 + 1.2 * SOC - 0.3 * np.sin(np.pi * SOC) + 0.15 * SOC ** 3)  # invented


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("identify_cli")
    m = CellModel(1.0, OCV, ParamTable(SOC, 0.05 + 0 * SOC),
                  (RcPair(ParamTable(SOC, 0.02 + 0 * SOC), ParamTable(SOC, 20.0 + 0 * SOC)),))
    t, i = low_rate_profile(1.0, rate_c=0.05, dt_s=120.0, rest_s=1800.0)
    Recording(t, i, simulate(m, t, i).voltage_v, temperature_c=np.full(t.size, 24.0)).to_csv(d / "c20.csv")
    t, i = hppc_profile(1.0, pulse_currents_a=(1.0,), rest_s=600.0, levels=(0.8, 0.5, 0.2))
    sim = simulate(m, t, i)
    Recording(t, i, sim.voltage_v, soc_ref=sim.soc).to_csv(d / "pulse.csv", float_format="%.8g")
    rng = np.random.default_rng(2)
    t = np.arange(0.0, 3600.0, 1.0)
    i = np.repeat(rng.normal(0.5, 1.0, 360), 10)
    sim = simulate(m, t, i, soc0=0.9)
    Recording(t, i, sim.voltage_v, soc_ref=sim.soc).to_csv(d / "drive.csv", float_format="%.8g")
    return d, m


def test_identify_writes_a_model_the_loader_accepts(files, capsys):
    d, truth = files
    out = d / "model.json"
    code = main(["identify", "--ocv-test", str(d / "c20.csv"), "--pulse-test", str(d / "pulse.csv"),
                 "--rc-pairs", "1", "--validate", str(d / "drive.csv"), "--plots", str(d / "plots"),
                 "--power-table", str(d / "power.csv"), "-o", str(out)])
    cap = capsys.readouterr()
    text = cap.out
    assert code == 0
    assert SAFETY_NOTE in cap.err and SAFETY_NOTE not in text  # cautions on stderr, results on stdout
    assert "open-loop voltage RMS" in text
    m = load_model(out)
    assert m.capacity_ah == pytest.approx(1.0, rel=1e-3)  # the profile removes exactly 1 Ah
    assert m.n_rc == 1
    assert m.r0_ohm.at(0.5) == pytest.approx(0.05, rel=0.01)  # simulated with 50 mOhm (round trip)
    prov = json.loads(out.read_text())["provenance"]
    assert "c20.csv" in prov["capacity"]["file"]
    assert prov["validation"][0]["rms_v"] < 0.005
    assert (d / "plots" / "ocv.png").stat().st_size > 1000
    assert (d / "plots" / "parameters.png").exists()
    assert "pulse_resistance_ohm" in (d / "power.csv").read_text().splitlines()[0]


def test_identify_refuses_to_overwrite_and_bad_input(files, capsys):
    d, _ = files
    out = d / "exists.json"
    out.write_text("{}")
    code = main(["identify", "--ocv-test", str(d / "c20.csv"), "--pulse-test", str(d / "pulse.csv"),
                 "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and "not overwritten" in err and len(err.strip().splitlines()) == 1
    assert out.read_text() == "{}"
    bad = d / "bad.csv"
    bad.write_text("time_s,current_a,voltage_v\n0,0,3.7\n1,oops,3.7\n")
    code = main(["identify", "--ocv-test", str(bad), "--pulse-test", str(d / "pulse.csv"),
                 "-o", str(d / "m2.json")])
    err = capsys.readouterr().err
    assert code == 2 and "bad.csv" in err and len(err.strip().splitlines()) == 1
    assert not (d / "m2.json").exists()


def test_identify_help_exits_zero(capsys):
    with pytest.raises(SystemExit) as e:
        main(["identify", "--help"])
    assert e.value.code == 0
    assert "--ocv-source" in capsys.readouterr().out
