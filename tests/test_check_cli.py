"""``socfuse check`` and models.checks.summarise on small files written here.

Outside references named beside the checks: scipy.integrate.cumulative_trapezoid (net charge);
the ohmic drop of a Thevenin cell, dV = -R0 dI for current positive on discharge (Hu, Li and Peng,
J. Power Sources 198 (2012)); 1 Ah = 3600 C (common practice, no source).
"""
from __future__ import annotations

import argparse

import numpy as np
import pytest
from scipy.integrate import cumulative_trapezoid

from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.cli.common import add_mapping_options, load_from_args, mapping_from_args
from socfuse.models.checks import format_summary, sign_check, summarise
from socfuse.models.loaders import load_recording
from socfuse.models.recording import Recording

R0_OHM = 0.05


def _profile():
    """Steps of discharge and charge with a 20 min rest; V = 3.7 - R0 * I (ohmic cell)."""
    t = np.arange(0.0, 3600.0, 1.0)
    i = np.zeros(t.size)
    i[100:900] = 2.0
    i[901:1201] = -1.0  # i[900] = 0: no interval changes sign
    i[2400:3000] = 4.0
    v = 3.7 - R0_OHM * i - 1e-5 * np.cumsum(i)
    return t, i, v


def _write(path, t, i, v, sign=1.0):
    lines = ["time_s,current_a,voltage_v,temperature_c"]
    lines += [f"{a:.1f},{sign * b:.4f},{c:.6f},{25 + a / 3600:.3f}" for a, b, c in zip(t, i, v)]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_summary_figures():
    t, i, v = _profile()
    s = summarise(Recording(t, i, v, name="p"))
    # net charge: scipy.integrate.cumulative_trapezoid(i, t) / 3600 (1 Ah = 3600 C, common practice)
    assert s.net_ah == pytest.approx(cumulative_trapezoid(i, t)[-1] / 3600.0, rel=1e-12)
    # throughput: trapezoid of |i| agrees here because no interval changes sign
    assert s.total_ah == pytest.approx(cumulative_trapezoid(np.abs(i), t)[-1] / 3600.0, rel=1e-12)
    assert s.charged_ah == pytest.approx(300.0 / 3600.0, rel=1e-3)
    assert s.duration_s == 3599.0 and s.dt_median_s == 1.0 and s.dt_max_s == 1.0
    # rests: 0..99 s (too short), 1201..2399 s (1198 s), 3000..3599 s (599 s < 600)
    assert (s.n_rests, s.longest_rest_s) == (1, 1198.0)
    assert (s.current_min_a, s.current_max_a) == (-1.0, 4.0)
    # ohmic step: dV = -R0 dI (Thevenin model, Hu et al. 2012); the drift term adds 1e-5 V per A
    assert s.sign_slope_ohm == pytest.approx(-R0_OHM, abs=2e-5)
    assert not s.sign_inverted and s.warnings == ()
    text = format_summary(s)
    assert "duration                3599 s (0 h 59 min 59.0 s)" in text
    assert "sign check              ok" in text


def test_sign_check_flags_inverted_file():
    t, i, v = _profile()
    slope, n = sign_check(-i, v)
    assert slope == pytest.approx(R0_OHM, abs=2e-5) and n == 6  # six current steps in _profile
    s = summarise(Recording(t, -i, v))
    assert s.sign_inverted and "sign looks inverted" in s.warnings[0]
    assert sign_check(np.ones(10), np.ones(10)) == (None, 0)


def test_check_good_csv_exits_0_and_prints_duration(tmp_path, capsys):
    t, i, v = _profile()
    p = _write(tmp_path / "day.csv", t, i, v)
    assert main(["check", str(p)]) == 0
    cap = capsys.readouterr()
    out = cap.out
    assert "duration                3599 s" in out
    assert "temperature             25 .. 26 degC" in out
    assert "duplicates dropped      0" in out
    # the caution goes to stderr: stdout carries the results only
    assert SAFETY_NOTE not in out and SAFETY_NOTE in cap.err


def test_check_inverted_sign_warns_and_option_fixes_it(tmp_path, capsys):
    t, i, v = _profile()
    p = _write(tmp_path / "neg.csv", t, i, v, sign=-1.0)
    # a likely sign mistake is not usable as declared: exit 2, one line naming the option that fixes it
    assert main(["check", str(p)]) == 2
    cap = capsys.readouterr()
    assert "WARNING: sign looks inverted" in cap.out
    last = cap.err.strip().splitlines()[-1]
    assert "current_a" in last and "--discharge-negative" in last
    assert main(["check", str(p), "--trust-input"]) == 0
    assert main(["check", str(p), "--trust-input", "--strict"]) == 2
    assert "sign looks inverted" in capsys.readouterr().err
    assert main(["check", str(p), "--discharge-negative", "--strict"]) == 0
    assert "sign check              ok" in capsys.readouterr().out


def test_check_bad_file_exits_2_naming_the_row(tmp_path, capsys):
    p = tmp_path / "bad.csv"
    p.write_text("# export\ntime_s;current_a;voltage_v\n0;1;3.7\n1;1;3.6\n2;x;3.6\n")
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "socfuse check:" in err and "'current_a'" in err and "data row 3 (file line 5)" in err


def test_check_mapping_options_and_missing_column(tmp_path, capsys):
    p = tmp_path / "mapped.csv"
    p.write_text("ms,mA,mV\n0,1000,3700\n500,1000,3650\n1000,0,3700\n")
    args = ["check", str(p), "--time-col", "ms", "--time-unit", "ms", "--current-col", "mA",
            "--current-unit", "mA", "--voltage-col", "mV", "--voltage-unit", "mV"]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "current                 0 .. 1 A" in out and "voltage                 3.65 .. 3.7 V" in out
    assert main(["check", str(p)]) == 2
    err = capsys.readouterr().err
    assert "'time_s', 'current_a', 'voltage_v' not found" in err and "'ms', 'mA', 'mV'" in err


def test_load_from_args_matches_load_recording(tmp_path):
    p = tmp_path / "ah.csv"
    # 100 Ah pack with 30 Ah drawn is at 70 % SOC (common practice, no source)
    p.write_text("t,i,v,ah\n0,-30,3.7,0\n3600,-30,3.6,-30\n")
    parser = add_mapping_options(argparse.ArgumentParser())
    args = parser.parse_args(["--time-col", "t", "--current-col", "i", "--voltage-col", "v", "--ah-col", "ah",
                              "--discharge-negative", "--ref-capacity-ah", "100", "--ref-soc0", "1"])
    m = mapping_from_args(args)
    assert (m.time, m.ah_counter, m.discharge_negative, m.ref_capacity_ah) == ("t", "ah", True, 100.0)
    rec = load_from_args(args, p)
    np.testing.assert_allclose(rec.soc_ref, [1.0, 0.7], atol=1e-12)
    np.testing.assert_allclose(rec.current_a, [30.0, 30.0])
    ref = load_recording(p, m)
    np.testing.assert_array_equal(ref.soc_ref, rec.soc_ref)
    # preset values stay unless overridden
    m2 = mapping_from_args(parser.parse_args(["--preset", "panasonic-18650pf", "--discharge-positive"]))
    assert (m2.current, m2.discharge_negative) == ("Current", False)


def test_check_against_a_model_names_the_unit_option(tmp_path, capsys):
    from ekf_cases import tiny_model
    from socfuse.models import save_model

    t, i, v = _profile()
    save_model(tiny_model(n_rc=1), tmp_path / "m.json")  # a 4.8 Ah cell
    p = _write(tmp_path / "ma.csv", t, i * 1000, v)  # 1 mA = 1e-3 A (common practice, no source)
    assert main(["check", str(p), "--model", str(tmp_path / "m.json")]) == 2
    cap = capsys.readouterr()
    assert "IMPLAUSIBLE: current_a" in cap.out and "--current-unit mA" in cap.err.strip().splitlines()[-1]
    assert main(["check", str(p), "--model", str(tmp_path / "m.json"), "--current-unit", "mA"]) == 0


def test_check_finds_a_rest_under_ordinary_sensor_noise():
    # issue 12: a 30-minute rest logged by an ordinary current sensor (offset 0.5 % of 1C, noise
    # 0.3 % of 1C for a 5 Ah cell: 25 mA and 15 mA) was reported as "rests 0" by the fixed 0.05 A
    # threshold.  The rest is where the true current is zero (by construction).
    rng = np.random.default_rng(5)
    t = np.arange(0.0, 3 * 3600.0, 1.0)
    true_i = np.where((t >= 3600) & (t < 5400), 0.0, 2.5)  # C/2 discharge, 30 min rest, C/2 again
    i = true_i + 0.025 + rng.normal(0.0, 0.015, t.size)
    v = 3.9 - 0.00002 * np.cumsum(true_i) - 0.03 * true_i + rng.normal(0.0, 0.0015, t.size)
    s = summarise(Recording(t, i, v, name="noisy rest"))
    assert s.n_rests == 1
    assert s.longest_rest_s == pytest.approx(1800.0, abs=120.0)
    assert s.current_offset_a == pytest.approx(0.025, abs=0.003)
