"""Real data: the public Panasonic 18650PF dataset (Kollmeyer, Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1, CC BY 4.0), loaded with the "panasonic-18650pf" preset.

Outside reference: the cycler's own amp-hour counter (field ``Ah``, negative on discharge, per the
dataset's SOURCE.md) against the trapezoid integral of the loaded current (+ = discharge); they must
agree within 0.2 %.  The expected figures (2.995 Ah C/20 discharge, 153 duplicate HPPC rows, 13 gaps)
are the ones stated in the dataset folder's SOURCE.md.
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.estimator.cli.main import main
from socfuse.models.checks import summarise
from socfuse.models.loaders import load_recording
from socfuse.models.recording import charge_throughput_ah

C20 = "c20_ocv_and_1c_start_of_tests/05-08-17_13.26 C20 OCV Test_C20_25dC.mat"
CYCLE1 = "drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat"
HPPC = "hppc/03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat"


def _counter_change_ah(rec, k0=0, k1=-1):
    ah = rec.metadata["extras"]["Ah"]
    return -(ah[k1] - ah[k0])  # counter falls on discharge (SOURCE.md); + = discharge here


@pytest.mark.parametrize("rel", [CYCLE1, C20], ids=["drive-cycle-1", "c20"])
def test_net_ah_matches_cycler_counter(realdata, rel):
    rec = load_recording(realdata / rel, preset="panasonic-18650pf")
    net = charge_throughput_ah(rec.time_s, rec.current_a)[-1]
    counter = _counter_change_ah(rec)
    # cycler Ah counter vs trapezoid of the loaded current: within 0.2 % (issue 2 acceptance)
    assert net == pytest.approx(counter, rel=2e-3)
    assert rec.metadata["duplicates_dropped"] >= 1  # SOURCE.md: dt = 0 rows at step boundaries
    assert np.all(np.diff(rec.time_s) > 0)


def test_c20_discharge_segment(realdata):
    rec = load_recording(realdata / C20, preset="panasonic-18650pf")
    dis = rec.current_a > 0.1
    k0, k1 = np.flatnonzero(dis)[[0, -1]]
    k0, k1 = k0 - 1, k1 + 1  # from the last rest sample to the first after the discharge
    seg = charge_throughput_ah(rec.time_s[k0:k1 + 1], rec.current_a[k0:k1 + 1])[-1]
    # SOURCE.md: the C/20 discharge delivers 2.995 Ah (counter +0.0272 -> -2.9677) at 0.145 A
    assert seg == pytest.approx(_counter_change_ah(rec, k0, k1), rel=2e-3)
    assert seg == pytest.approx(2.995, rel=2e-3)
    assert np.median(rec.current_a[dis]) == pytest.approx(0.145, rel=0.01)
    s = summarise(rec)
    assert s.dt_median_s == pytest.approx(60.0, abs=0.01)  # SOURCE.md: 60 s sampling
    assert not s.sign_inverted  # the preset flips the negative discharge current


def test_hppc_duplicates_gaps_and_soc_from_counter(realdata):
    rec = load_recording(realdata / HPPC, preset="panasonic-18650pf", ref_capacity_ah=2.9, ref_soc0=1.0)
    # SOURCE.md: 153 duplicate rows; gaps of 2,000 to 3,700 s where the 0.3C discharges were cut out
    assert rec.metadata["duplicates_dropped"] == 153
    long_gaps = [g for g in rec.metadata["gaps"] if g[1] > 1000.0]
    assert len(long_gaps) == 13 and all(1900.0 < g[1] < 3800.0 for g in long_gaps)
    # SOURCE.md: the Ah counter ends at -2.77 Ah -> SOC 1 - 2.77/2.9 of the 2.9 Ah nominal
    assert rec.soc_ref[-1] == pytest.approx(1.0 - 2.77 / 2.9, abs=2e-3)
    # SOURCE.md: the integral over the file gives only 1.34 Ah (the pulses alone)
    assert charge_throughput_ah(rec.time_s, rec.current_a)[-1] == pytest.approx(1.34, abs=0.01)


def test_check_cli_on_real_mat(realdata, capsys):
    assert main(["check", str(realdata / CYCLE1), "--preset", "panasonic-18650pf"]) == 0
    out = capsys.readouterr().out
    assert "duration                10983.9 s" in out  # SOURCE.md: 10,984 s
    assert "sign check              ok" in out
    assert "duplicates dropped      4" in out


def test_check_cli_on_digatron_csv(realdata, capsys):
    # a Digatron export with a 29-line preamble, ';' separators and a units row (SOURCE.md: eis/ folder)
    path = realdata / "eis" / "3541_EIS00001.csv"
    args = ["check", str(path), "--time-col", "Prog Time", "--time-unit", "hms", "--current-col", "Current",
            "--voltage-col", "Voltage"]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "samples                 54" in out
    assert "current                 0 .. 0 A" in out
    assert "sign check              not possible" in out


def test_check_cli_real_mat_without_mapping_exits_2(realdata, capsys):
    assert main(["check", str(realdata / CYCLE1)]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1
    assert "'time_s', 'current_a', 'voltage_v' not found" in err and "'Battery_Temp_degC'" in err
    assert "preset 'panasonic-18650pf'" in err
