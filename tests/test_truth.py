"""Tests of the truth simulator behind the demo data (socfuse.estimator.demo.truth)."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

import socfuse.models as models
from socfuse.estimator.demo.scenario import FLEET_SENSORS, c20_test_profile, pulse_test_profile, simulate_profile
from socfuse.estimator.demo.truth import C48_TRUTH, arrhenius_factor, simulate_truth, truth_cell_model
from socfuse.models.sensors import SensorErrors

ONE_RC = replace(C48_TRUTH, r2_ohm=(), tau2_s=(), hysteresis_max_v=0.0)


def _profile(seed=3, n=400):
    rng = np.random.default_rng(seed)
    t = np.concatenate([[0.0], np.cumsum(rng.uniform(0.5, 20.0, n - 1))])
    i = rng.choice([-2.4, -0.5, 0.0, 1.0, 4.8, 9.6], n)
    return t, i


@pytest.mark.parametrize("params,temperature_c", [(ONE_RC, 25.0), (C48_TRUTH, 25.0), (C48_TRUTH, 5.0)])
def test_truth_without_errors_equals_models_simulate(params, temperature_c):
    # Consistency with the sampling rule of models/thevenin.py: one sub-step per interval, no
    # sensor errors, a constant temperature on a table row -> the same numbers as models.simulate.
    t, i = _profile()
    rec, tr = simulate_truth(t, i, temperature_c, soc0=0.9, params=params, internal_dt_s=np.inf, h0=0.5)
    sim = models.simulate(truth_cell_model(temperature_c, params), t, i, temperature_c, soc0=0.9, h0=0.5)
    np.testing.assert_allclose(tr.soc, sim.soc, rtol=0, atol=1e-13)
    np.testing.assert_allclose(tr.voltage_true, sim.voltage_v, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(rec.voltage_v, tr.voltage_true)  # ideal instrument
    np.testing.assert_array_equal(rec.soc_ref, tr.soc)  # soc_ref is the true SOC


def test_substeps_follow_the_analytic_ramp_response():
    # Analytic response of a first-order RC to a current ramp i = alpha t (linear-systems result):
    # v(t) = R alpha (t - tau (1 - exp(-t / tau))).  The truth's 0.1 s sub-steps must approach it;
    # one step over the whole ramp (the estimator's sampling rule) must not.
    flat = replace(ONE_RC, res_soc=(0.0, 1.0), r0_ohm=(0.025, 0.025), r1_ohm=(0.01, 0.01), tau1_s=(30.0, 30.0))
    alpha, t_end = 4.8 / 100.0, 100.0
    exact = 0.01 * alpha * (t_end - 30.0 * (1.0 - np.exp(-t_end / 30.0)))
    _, fine = simulate_truth([0.0, t_end], [0.0, alpha * t_end], 25.0, 0.8, params=flat, internal_dt_s=0.1)
    _, coarse = simulate_truth([0.0, t_end], [0.0, alpha * t_end], 25.0, 0.8, params=flat, internal_dt_s=np.inf)
    assert fine.v_rc[-1, 0] == pytest.approx(exact, rel=1e-5)
    assert abs(coarse.v_rc[-1, 0] - exact) > 100 * abs(fine.v_rc[-1, 0] - exact)
    # the charge of a ramp is exact either way: alpha t^2 / 2 (trapezoid of a straight line)
    dz = alpha * t_end ** 2 / 2 / (3600.0 * 4.8)
    assert fine.soc[-1] == pytest.approx(0.8 - dz, abs=1e-13)


def test_sensor_errors_applied_as_documented():
    s = SensorErrors(offset_a=0.05, gain_error=0.01, current_noise_a=0.01, current_quant_a=0.001,
                     voltage_offset_v=0.002, voltage_noise_v=0.002, voltage_quant_v=0.001,
                     temperature_offset_c=1.5, temperature_noise_c=0.1, temperature_quant_c=0.1)
    t = np.arange(0.0, 4000.0, 1.0)
    i = np.where(t < 2000, 0.0, 2.0)
    rec, tr = simulate_truth(t, i, 20.0, soc0=0.6, sensors=s, seed=11)
    rest, load = slice(100, 1999), slice(2100, None)
    n_rest = 1899
    # offset visible as the mean of the measured current in a rest (3-sigma bound of the mean)
    assert abs(rec.current_a[rest].mean() - 0.05) < 3 * 0.0101 / np.sqrt(n_rest)
    # gain error on load: mean = (1 + gain_error) * i + offset
    assert abs(rec.current_a[load].mean() - (1.01 * 2.0 + 0.05)) < 3 * 0.0101 / np.sqrt(1900)
    # quantisation: every value is a multiple of the quantum
    assert np.allclose(np.round(rec.voltage_v / 0.001) * 0.001, rec.voltage_v, atol=1e-12, rtol=0)
    assert np.allclose(np.round(rec.current_a / 0.001) * 0.001, rec.current_a, atol=1e-12, rtol=0)
    # voltage error: offset, and spread sqrt(sigma^2 + q^2/12) (uniform quantisation noise,
    # Widrow's model; from memory)
    err = rec.voltage_v - tr.voltage_true
    assert abs(err.mean() - 0.002) < 3 * 0.0021 / np.sqrt(err.size)
    assert err.std() == pytest.approx(np.sqrt(0.002 ** 2 + 0.001 ** 2 / 12), rel=0.06)
    assert abs((rec.temperature_c - 20.0).mean() - 1.5) < 0.01
    np.testing.assert_array_equal(rec.soc_ref, tr.soc)


def test_determinism_by_seed():
    t, i = _profile(5, 300)
    a, _ = simulate_truth(t, i, 15.0, 0.7, sensors=FLEET_SENSORS, seed=42)
    b, _ = simulate_truth(t, i, 15.0, 0.7, sensors=FLEET_SENSORS, seed=42)
    c, _ = simulate_truth(t, i, 15.0, 0.7, sensors=FLEET_SENSORS, seed=43)
    np.testing.assert_array_equal(a.voltage_v, b.voltage_v)
    np.testing.assert_array_equal(a.current_a, b.current_a)
    assert np.any(a.voltage_v != c.voltage_v)


def test_truth_parameters_in_their_documented_ranges():
    m = truth_cell_model()
    # R0 20-30 mOhm at 25 degC mid SOC, rising at low SOC and at cold (Arrhenius-like)
    assert 0.020 <= m.r0_ohm.at(0.5, 25.0) <= 0.030
    assert m.r0_ohm.at(0.05, 25.0) > 1.3 * m.r0_ohm.at(0.5, 25.0)
    assert m.r0_ohm.at(0.5, 5.0) == pytest.approx(0.0245 * arrhenius_factor(5.0, 2000.0), rel=1e-12)
    assert m.r0_ohm.at(0.5, 0.0) > 1.5 * m.r0_ohm.at(0.5, 25.0)
    assert 20 <= m.rc[0].tau_s.at(0.5) <= 40 and 400 <= m.rc[1].tau_s.at(0.5) <= 1000
    # NMC facts (common practice, no source): about 4.2 V full, flat-ish 3.6-3.7 V in the middle
    assert 4.15 < m.ocv.voltage(1.0) < 4.2 and 3.6 < m.ocv.voltage(0.4) < 3.72
    assert truth_cell_model(5.0).capacity_ah < 4.8 == truth_cell_model(25.0).capacity_ah


def test_c20_profile_reaches_cutoff_near_empty_and_pulse_pattern():
    p = c20_test_profile()
    # C/20 of a 4.8 Ah cell is 0.24 A (definition of the C-rate; common practice, no source)
    assert np.max(p.current_a) == pytest.approx(0.24)
    assert p.info["discharged_ah"] == pytest.approx(C48_TRUTH.capacity_ah, rel=0.005)
    # constant-voltage phase: the terminal voltage is held at 4.2 V until the current is C/50
    _, tr = simulate_profile(p)
    cv = (tr.time_s >= p.info["cv_start_s"]) & (tr.time_s <= p.info["charge_end_s"])
    assert np.all(np.abs(tr.voltage_true[cv] - 4.2) < 1e-3) and cv.sum() > 5
    assert abs(tr.current_a[cv][-1]) == pytest.approx(4.8 / 50, rel=0.02)
    # coulombic efficiency = charge out / charge in over a full cycle (its definition): the truth's 0.998
    assert p.info["discharged_ah"] / p.info["charged_ah"] == pytest.approx(0.998, abs=2e-4)
    assert tr.soc[-1] == pytest.approx(1.0, abs=1e-3)
    hp = pulse_test_profile(25.0)
    starts = [q["start_s"] for q in hp.info["pulses"]]
    k = np.searchsorted(hp.time_s, starts[1])
    # DOE/INL HPPC profile: 10 s discharge pulse, 40 s rest, 10 s regen at 75 % of the current
    assert hp.current_a[k] == pytest.approx(4.8)
    assert hp.time_s[np.searchsorted(hp.time_s, starts[1] + 10.0)] == pytest.approx(starts[1] + 10.0)
    assert np.interp(starts[1] + 55.0, hp.time_s, hp.current_a) == pytest.approx(-0.75 * 4.8)
    assert np.interp(starts[1] + 30.0, hp.time_s, hp.current_a) == 0.0
