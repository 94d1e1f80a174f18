"""The identified range of a model (socfuse.models.validity) and the settings' temperature axis.

Known answers by construction on the invented test cell of ``ekf_cases.tiny_model`` (OCV and R0
tables given, so the floor voltage is computed by hand from the Thevenin terminal-voltage equation
``v = OCV - R0 i - sum v_j``; Hu, Li, Peng, J. Power Sources 198 (2012) 359-367).
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import tiny_model
from socfuse.estimator.filters.ekf import run_ekf, setup
from socfuse.estimator.filters.kernels import resistance_sigma_at, voltage_outside_envelope
from socfuse.estimator.filters.settings import at_temperature, default_settings, settings_from_dict, settings_to_dict
from socfuse.models import Recording, simulate
from socfuse.estimator.filters.kernels import ST_ENVELOPE
from socfuse.estimator.filters.run import estimate
from socfuse.models.validity import CUTOFF_MARGIN_V, identified_soc_floor, outside_identified_range


def _with_range(model, temps, lows):
    prov = dict(model.provenance)
    prov["pulse_soc_range"] = {"temperatures_c": list(temps), "soc_min": list(lows), "soc_max": [1.0] * len(temps)}
    return model.with_(provenance=prov)


def test_floor_interpolates_over_temperature():
    m = _with_range(tiny_model(temperature=True), [5.0, 25.0], [0.2, 0.05])
    assert identified_soc_floor(m, [5.0, 15.0, 25.0, 40.0]) == pytest.approx([0.2, 0.125, 0.05, 0.05])
    assert identified_soc_floor(tiny_model(), 25.0) is None  # no recorded range: no rule
    assert not outside_identified_range(tiny_model(), [0.0], [2.0]).any()


def test_voltage_below_the_floor_is_outside_only_where_the_floor_is_higher():
    m = _with_range(tiny_model(temperature=True), [5.0, 25.0], [0.2, 0.05])
    # at rest, a voltage that reads SOC 0.1 is below the 5 degC floor (0.2) but inside at 25 degC (0.05)
    v5, v25 = float(m.ocv.voltage(0.1, 5.0)), float(m.ocv.voltage(0.1, 25.0))
    out = outside_identified_range(m, [0.0, 0.0], [v5, v25], [5.0, 25.0])
    assert out.tolist() == [True, False]
    # under a 9.6 A discharge: exactly the floor OCV less the ohmic drop R0(0.2, 5 degC) i is inside,
    # 5 mV lower is outside; with 10 mV of RC polarisation put back it is inside again
    i = 9.6
    edge = float(m.ocv.voltage(0.2, 5.0)) - float(m.r0_ohm.at(0.2, 5.0)) * i
    out = outside_identified_range(m, [i, i], [edge + 1e-9, edge - 0.005], [5.0, 5.0])
    assert out.tolist() == [False, True]
    assert not outside_identified_range(m, [i], [edge - 0.005], [5.0], polarisation_v=[0.01]).any()
    # a charging current raises the voltage: nothing is put back for it
    assert outside_identified_range(m, [-i], [v5], [5.0]).all()


def test_voltages_next_to_the_cut_off_are_left_out_by_the_estimators():
    # near the lower voltage limit an equivalent circuit misses the diffusion-limited collapse, and a
    # cycler or BMS may hold the voltage at the limit (common practice, no source): 0.1 V margin
    m = tiny_model().with_(v_min_v=3.0)
    assert CUTOFF_MARGIN_V == 0.10
    prm = setup(m).prm
    assert [voltage_outside_envelope(prm, v, 25.0) for v in (3.05, 3.0999, 3.1, 3.5, np.nan)] == \
        [True, True, False, False, False]
    assert not voltage_outside_envelope(setup(m.with_(v_min_v=2.5)).prm, 3.05, 25.0)
    # a 1C discharge from 60 % SOC into the cut-off: the filter does not update on the last samples
    t = np.arange(0.0, 1800.0)
    i = np.full(t.size, 4.8)
    sim = simulate(m, t, i, soc0=0.6)
    rec = Recording(t, i, sim.voltage_v, None, sim.soc, name="into the cut-off (simulated)")
    near = sim.voltage_v < 3.1
    assert 50 < near.sum() < t.size - 200
    # the filter step's own rule: estimate, the bare monitored EKF and the UKF alike
    for tr in (estimate(m, rec, "ekf", soc0=0.6), run_ekf(m, rec, soc0=0.6, monitor=True),
               estimate(m, rec.slice(1000, 1800), "ukf", soc0=float(sim.soc[1000]))):
        nr = near[-tr.time_s.size:]
        assert np.all(tr.status[nr] & ST_ENVELOPE) and not np.any(tr.status[~nr] & ST_ENVELOPE)
        assert np.all(np.isnan(tr.innovation_v[nr])) and np.all(np.isfinite(tr.innovation_v[~nr]))


def test_settings_temperature_axis_scales_the_model_error_with_r0():
    m = tiny_model(temperature=True)  # R0 at 50 %: 35 mOhm at 5 degC, 17.5 mOhm at 25 degC
    s = default_settings(m).with_(model_error_r0_exponent=1.0)
    assert default_settings(m).model_error_r0_exponent == 0.0  # off by default (see default_settings)
    cold = at_temperature(s, m, 5.0)
    assert cold.model_error_v == pytest.approx(2.0 * s.model_error_v)
    assert at_temperature(s, m, 25.0) is s and at_temperature(s, m, None) is s
    assert at_temperature(s.with_(model_error_r0_exponent=0.0), m, 5.0).model_error_v == s.model_error_v
    assert at_temperature(s.with_(model_error_r0_exponent=0.5), m, 5.0).model_error_v == pytest.approx(
        np.sqrt(2.0) * s.model_error_v)
    # the setting round-trips through the filter file
    assert settings_from_dict(settings_to_dict(cold)).model_error_r0_exponent == 1.0


def test_resistance_error_stays_a_fraction_of_r0_at_every_sample_temperature():
    m = tiny_model(temperature=True)  # R0 at 50 %: 35 mOhm at 5 degC, 17.5 mOhm at 25 degC
    s = default_settings(m)
    assert s.resistance_error_r0_exponent == 1.0 and s.model_error_r0_exponent == 0.0
    # default resistance error 0.35 R0(50 %, 25 degC) (common practice, no source: pulse-fit scatter)
    assert s.resistance_error_ohm == pytest.approx(0.35 * 0.0175)
    su = setup(m, s)
    tab = su.tables.packed
    assert resistance_sigma_at(tab, su.prm, 25.0) == pytest.approx(0.35 * 0.0175, rel=1e-12)
    assert resistance_sigma_at(tab, su.prm, 5.0) == pytest.approx(0.35 * 0.035, rel=1e-12)  # still 35 % of R0
    assert resistance_sigma_at(tab, su.prm, np.nan) == pytest.approx(0.35 * 0.0175, rel=1e-12)  # missing: 25 degC
    off = setup(m, s.with_(resistance_error_r0_exponent=0.0))
    assert resistance_sigma_at(tab, off.prm, 5.0) == s.resistance_error_ohm
    # not a per-recording scale: at_temperature leaves it to the filters' per-sample rule
    assert at_temperature(s, m, 5.0).resistance_error_ohm == s.resistance_error_ohm
    # a filter file written before the setting existed loads with it off (its old meaning)
    d = settings_to_dict(s)
    del d["resistance_error_r0_exponent"]
    assert settings_from_dict(d).resistance_error_r0_exponent == 0.0
