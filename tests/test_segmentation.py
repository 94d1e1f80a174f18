"""Robust segmentation of lab recordings (models/segment.py) under BMS-grade sensor errors.

Sensor figures: DESIGN.md section 7 (offset 0.5 % of 1C, gain 0.4 %, white noise 0.3 % of 1C,
voltage noise 1.5 mV with 1 mV steps).  Test layout: the HPPC pattern of the US DOE/INL battery
test manuals (10 s 1C discharge, 40 s rest, 10 s 0.75C charge); the demo truth parameters are our
invented cell C48 (datasets/manifest.json).
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.models import Recording, find_rests
from socfuse.models.identify.pulse import detect_pulses, identify_pulse_test
from socfuse.models.loaders import load_recording
from socfuse.models.segment import noise_floor, segment_recording
from socfuse.estimator.demo.truth import truth_cell_model

ONE_C = 5.0  # A, an invented 5 Ah cell


def _sensor(i, seed, offset=0.005 * ONE_C, gain=1.004, noise=0.003 * ONE_C, quant=0.001):
    rng = np.random.default_rng(seed)
    return quant * np.round((gain * i + offset + rng.normal(0, noise, i.shape)) / quant) + 0.0


def _hppc_current(dt=0.1, levels=10, rest_s=600.0):
    """Current of an HPPC-style test (A, + discharge) at ``dt`` sampling, and its step count."""
    seg = [(300.0, 0.0)]
    for k in range(levels):
        seg += [(10.0, ONE_C), (40.0, 0.0), (10.0, -0.75 * ONE_C), (40.0, 0.0)]
        if k < levels - 1:
            seg += [(360.0, ONE_C), (rest_s, 0.0)]
    i = np.concatenate([np.full(int(round(d / dt)), c) for d, c in seg])
    return np.arange(i.size) * dt, i, 2 * levels + (levels - 1)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_sensor_noise_never_splits_a_step(seed):
    t, i, n_steps = _hppc_current()
    im = _sensor(i, seed)
    # the old fixed threshold (1 % of the largest current, 50 mA) sits inside this sensor's band
    assert np.count_nonzero(np.diff((np.abs(im) > 0.01 * np.max(np.abs(im))).astype(int)) == 1) > 100
    seg = segment_recording(t, im)
    steps = seg.steps()
    assert len(steps) == n_steps
    assert [s.kind for s in steps[:2]] == ["discharge", "charge"]
    # the offset from the rests: within 4 standard errors of the truth (25 mA)
    assert seg.offset_a == pytest.approx(0.005 * ONE_C, abs=4 * seg.offset_sigma_a)
    # noise floor: the sensor's 15 mA white noise within 10 %
    assert seg.noise_a == pytest.approx(0.015, rel=0.1)


def test_offset_corrected_charge_matches_scipy():
    # scipy.integrate.cumulative_trapezoid of the true current against the segments' charge
    from scipy.integrate import trapezoid

    t, i, _ = _hppc_current(dt=1.0)
    im = _sensor(i, 5, gain=1.0)
    seg = segment_recording(t, im)
    big = max(seg.steps(), key=lambda s: s.charge_ah)
    lo, hi = big.start - 1, big.stop
    truth = trapezoid(i[lo:hi + 1], t[lo:hi + 1]) / 3600.0
    assert big.charge_ah == pytest.approx(truth, rel=2e-3)


def test_find_rests_sees_a_30_minute_rest_under_noise():
    # the "rests 0" case: a 30 min rest between two 1C drives, BMS sensor
    t = np.arange(0.0, 7200.0, 1.0)
    i = np.where((t >= 2400) & (t < 4200), 0.0, ONE_C * (0.6 + 0.3 * np.sin(t / 30.0)))
    im = _sensor(i, 3)
    assert find_rests(t, im, 0.05, 600.0) == []  # fixed 50 mA threshold: the offset + noise hide it
    rests = find_rests(t, im, min_duration_s=600.0)
    assert len(rests) == 1
    s, e = rests[0]
    assert abs(t[s] - 2400) <= 2 and abs(t[e] - 4199) <= 2


def test_constant_voltage_step_is_marked():
    # a charge pulse that meets the upper limit at once and is held there (current decays)
    t = np.arange(0.0, 200.0, 0.1)
    i = np.zeros(t.size)
    v = np.full(t.size, 4.15)
    on = (t >= 100) & (t < 110)
    i[on] = -0.75 * ONE_C * np.exp(-(t[on] - 100) / 4.0)
    v[on] = 4.2
    rng = np.random.default_rng(4)
    vm = 0.001 * np.round((v + rng.normal(0, 0.0015, t.size)) / 0.001)
    seg = segment_recording(t, _sensor(i, 4), vm)
    steps = seg.steps()
    assert len(steps) == 1 and steps[0].kind == "charge" and steps[0].limited == "upper"


def test_noise_floor_of_quantised_white_noise():
    # numpy normal noise 2 mA on a 1 mA grid: sigma of the quantised signal sqrt(2^2 + 1/12) mA
    rng = np.random.default_rng(0)
    x = 0.001 * np.round(rng.normal(0.0, 0.002, 20000) / 0.001)
    assert noise_floor(x, quantile=0.5) == pytest.approx(np.sqrt(0.002 ** 2 + 0.001 ** 2 / 12), rel=0.05)


def test_pulse_at_the_end_of_the_file_does_not_raise():
    # a relaxation (or a pulse) that runs to the end of the file: no IndexError, a usable result
    t, i, _ = _hppc_current(dt=1.0, levels=3)
    cut = int(np.flatnonzero(i < 0)[-1]) + 1  # file ends at the last charge pulse's last sample
    m = truth_cell_model(25.0)
    from socfuse.models import simulate

    sim = simulate(m, t[:cut], i[:cut] * 0.96, soc0=1.0)
    rec = Recording(t[:cut], i[:cut] * 0.96, sim.voltage_v, name="cut short")
    res = identify_pulse_test(rec, m.capacity_ah)
    assert sum(p.pulse.kind == "pulse" for p in res.pulses) == 6


def test_demo_pulse_test_with_bms_sensor_errors(repo):
    # the bundled demo pulse test (lab channel) with the BMS sensor of DESIGN.md section 7 added:
    # the same pulses are found, and R0 at mid SOC stays within 5 % of the demo truth
    rec = load_recording(repo / "datasets" / "c48_pulse_25degC.csv")
    clean = [p for p in detect_pulses(rec) if p.kind == "pulse"]
    one_c = 4.8
    rng = np.random.default_rng(11)
    im = 0.001 * np.round((1.004 * rec.current_a + 0.005 * one_c + rng.normal(0, 0.003 * one_c, rec.n)) / 0.001)
    vm = 0.001 * np.round((rec.voltage_v + rng.normal(0, 0.0015, rec.n)) / 0.001)
    noisy = rec.with_(current_a=im, voltage_v=vm)
    pulses = [p for p in detect_pulses(noisy) if p.kind == "pulse"]
    assert len(pulses) == len(clean) == 25  # manifest: 10 + 3 discharge, 9 + 3 regen pulses
    assert [p.start for p in pulses] == [p.start for p in clean]
    res = identify_pulse_test(noisy, 4.8)
    r0_mid = np.median([p.r0_ohm[1] for p in res.pulses if p.pulse.kind == "pulse" and 0.4 < p.soc < 0.6
                        and 1 in p.r0_ohm])
    truth = float(truth_cell_model(25.0).r0_ohm.at(0.5, 25.0))
    assert r0_mid == pytest.approx(truth, rel=0.05)
    assert res.offset_a == pytest.approx(0.005 * one_c, abs=4 * res.offset_sigma_a + 1e-4)
