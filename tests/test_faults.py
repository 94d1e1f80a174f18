"""Fault scenarios: each fault changes what it should and nothing else.

References: the fault definitions are plain arithmetic on the measured signals (current offset
adds a constant, gain multiplies, a temperature-sensor offset adds a constant); the default
magnitudes are common practice for automotive BMS sensors, no source.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from socfuse.estimator.analysis.faults import (DEFAULT_SCENARIOS, Case, FaultError, apply_scenario, fault_help,
                              parse_scenarios, scenario_from_spec)
from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CellModel, RcPair


def _model(capacity_ah=4.8):
    soc = np.linspace(0, 1, 11)
    ocv = OcvCurve(soc, 3.0 + 1.2 * soc - 0.1 * (1 - soc) ** 3)
    return CellModel(capacity_ah, ocv, ParamTable.constant(0.02, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.01), ParamTable.constant(30.0)),))


def _case(n=4000, temperature=True):
    rng = np.random.default_rng(1)
    t = np.arange(n, dtype=float)
    i = 2.0 + rng.normal(0, 1.0, n)
    v = 3.8 - 0.0001 * t + rng.normal(0, 0.001, n)
    temp = 20.0 + 0.001 * t if temperature else None
    ref = 0.9 - i.cumsum() / (3600 * 4.8)
    return Case(Recording(t, i, v, temp, ref, name="day"), _model(), None)


def _same(a, b):
    return (a is None and b is None) or np.array_equal(np.asarray(a), np.asarray(b), equal_nan=True)


def _assert_untouched(c0, c1, except_=()):
    r0, r1 = c0.recording, c1.recording
    for name in ("time_s", "current_a", "voltage_v", "temperature_c", "soc_ref"):
        if name not in except_:
            assert _same(getattr(r0, name), getattr(r1, name)), name
    if "model" not in except_:
        assert c1.model is c0.model
    if "soc0" not in except_:
        assert c1.soc0 == c0.soc0


def test_offset_shifts_the_mean_current_exactly():
    c = _case()
    out = apply_scenario(c, scenario_from_spec("offset=0.05"))
    # additive offset: mean(i + b) = mean(i) + b exactly (to rounding)
    assert np.mean(out.recording.current_a) - np.mean(c.recording.current_a) == pytest.approx(0.05, abs=1e-12)
    np.testing.assert_allclose(out.recording.current_a - c.recording.current_a, 0.05, atol=1e-12)
    _assert_untouched(c, out, except_=("current_a",))


def test_offset_default_is_half_a_percent_of_a_5c_full_scale():
    # 0.5 % of a 5C full scale (common practice for a Hall sensor, no source): 0.025 C = 0.12 A at 4.8 Ah
    c = _case()
    out = apply_scenario(c, scenario_from_spec("offset"))
    np.testing.assert_allclose(out.recording.current_a - c.recording.current_a, 0.12, atol=1e-12)


def test_gain_scales_current_only():
    c = _case()
    out = apply_scenario(c, scenario_from_spec("gain=0.01"))
    np.testing.assert_allclose(out.recording.current_a, 1.01 * c.recording.current_a, rtol=1e-14)
    _assert_untouched(c, out, except_=("current_a",))


def test_gain_then_offset_order():
    c = _case(50)
    out = apply_scenario(c, scenario_from_spec("gain=0.02+offset=0.1"))
    np.testing.assert_allclose(out.recording.current_a, 1.02 * c.recording.current_a + 0.1, rtol=1e-13)


def test_voltage_noise_has_the_stated_sigma_and_is_reproducible():
    c = _case(20000)
    sc = scenario_from_spec("vnoise=0.004+seed=3")
    out = apply_scenario(c, sc)
    d = out.recording.voltage_v - c.recording.voltage_v
    # sample variance of N Gaussian draws: (N-1) s^2 / sigma^2 ~ chi2(N-1) (scipy.stats.chi2), 99.9 % band
    n = d.size
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], n - 1) / (n - 1)
    assert lo <= np.var(d, ddof=1) / 0.004 ** 2 <= hi
    assert abs(np.mean(d)) < 4 * 0.004 / np.sqrt(n)
    _assert_untouched(c, out, except_=("voltage_v",))
    again = apply_scenario(c, sc)
    np.testing.assert_array_equal(again.recording.voltage_v, out.recording.voltage_v)
    other = apply_scenario(c, scenario_from_spec("vnoise=0.004+seed=4"))
    assert not np.array_equal(other.recording.voltage_v, out.recording.voltage_v)
    # the draws do not depend on the position of the fault in the spec
    both = apply_scenario(c, scenario_from_spec("gain=0.01+vnoise=0.004+seed=3"))
    np.testing.assert_array_equal(both.recording.voltage_v, out.recording.voltage_v)


def test_capacity_fade_inflates_the_filter_capacity():
    c = _case()
    out = apply_scenario(c, scenario_from_spec("fade=0.2"))
    # filter capacity Q / (1 - fade): a cell with 0.8 Q seen by a filter that keeps Q
    assert out.model.capacity_ah == pytest.approx(4.8 / 0.8, rel=1e-14)
    assert out.model.ocv is c.model.ocv and out.model.r0_ohm is c.model.r0_ohm
    _assert_untouched(c, out, except_=("model",))


def test_temperature_offset():
    c = _case()
    out = apply_scenario(c, scenario_from_spec("toffset=2"))
    np.testing.assert_allclose(out.recording.temperature_c, c.recording.temperature_c + 2.0, atol=1e-12)
    _assert_untouched(c, out, except_=("temperature_c",))
    c2 = _case(temperature=False)
    out2 = apply_scenario(c2, scenario_from_spec("toffset=-3"))
    np.testing.assert_allclose(out2.recording.temperature_c, 22.0)  # 25 degC assumed, minus 3


def test_voltage_dropouts():
    c = _case(20000)
    out = apply_scenario(c, scenario_from_spec("vdrop=0.05"))
    lost = np.isnan(out.recording.voltage_v)
    assert not lost[0]
    # binomial count (scipy.stats.binom), 99.9 % interval around 5 % of 20000
    lo, hi = stats.binom.ppf([0.0005, 0.9995], 20000, 0.05)
    assert lo <= lost.sum() <= hi
    np.testing.assert_array_equal(out.recording.voltage_v[~lost], c.recording.voltage_v[~lost])
    _assert_untouched(c, out, except_=("voltage_v",))


def test_row_drop_keeps_a_subset_and_the_ends():
    c = _case(5000)
    out = apply_scenario(c, scenario_from_spec("rowdrop=0.1"))
    r0, r1 = c.recording, out.recording
    assert r1.time_s[0] == r0.time_s[0] and r1.time_s[-1] == r0.time_s[-1]
    idx = np.searchsorted(r0.time_s, r1.time_s)
    for name in ("current_a", "voltage_v", "temperature_c", "soc_ref"):
        np.testing.assert_array_equal(getattr(r1, name), getattr(r0, name)[idx])
    lo, hi = stats.binom.ppf([0.0005, 0.9995], 5000, 0.9)
    assert lo <= r1.n <= hi + 2


def test_ocv_table_errors():
    c = _case()
    z = np.linspace(0, 1, 101)
    o = apply_scenario(c, scenario_from_spec("ocv_offset=0.01"))
    np.testing.assert_allclose(o.model.ocv.voltage(z) - c.model.ocv.voltage(z), 0.01, atol=1e-12)
    s = apply_scenario(c, scenario_from_spec("ocv_scale=0.005"))
    np.testing.assert_allclose(s.model.ocv.voltage(z), 1.005 * c.model.ocv.voltage(z), rtol=1e-12)
    assert s.model.capacity_ah == c.model.capacity_ah
    _assert_untouched(c, o, except_=("model",))


def test_initial_soc_error_and_mirror():
    c = _case()
    z0 = float(c.recording.soc_ref[0])  # 0.9 minus the first sample
    out = apply_scenario(c, scenario_from_spec("soc0=-0.2"))
    assert out.soc0 == pytest.approx(z0 - 0.2)
    up = apply_scenario(c, scenario_from_spec("soc0=0.2"))  # 0.9 + 0.2 leaves 0..1: mirrored
    assert up.soc0 == pytest.approx(z0 - 0.2)
    _assert_untouched(c, out, except_=("soc0",))


def test_spec_parser():
    s = scenario_from_spec("offset=0.05+soc0=-0.2")
    assert s.name == "offset=0.05+soc0=-0.2" and [f.name for f in s.faults] == ["offset", "soc0"]
    assert scenario_from_spec(s.spec).faults == s.faults
    lab = scenario_from_spec("worn:fade+gain=0.02+seed=5")
    assert lab.name == "worn" and lab.seed == 5 and lab.spec == "fade+gain=0.02+seed=5"
    assert scenario_from_spec("nominal").faults == ()
    assert [x.name for x in parse_scenarios("nominal, offset gain")] == ["nominal", "offset", "gain"]
    assert len(parse_scenarios(list(DEFAULT_SCENARIOS))) == len(DEFAULT_SCENARIOS)
    for bad in ("wobble=1", "offset=abc", "offset+offset", "fade=1.5", "seed=-1", "a b:offset", "offset++gain"):
        with pytest.raises(FaultError):
            scenario_from_spec(bad)
    with pytest.raises(FaultError):
        parse_scenarios(["offset", "offset"])
    assert "0.025 C" in fault_help() and "common practice" in fault_help()
