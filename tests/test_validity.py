"""The identified range of a model (socfuse.models.validity) and the settings' temperature axis.

Known answers by construction on the invented test cell of ``ekf_cases.tiny_model`` (OCV and R0
tables given, so the floor voltage is computed by hand from the Thevenin terminal-voltage equation
``v = OCV - R0 i - sum v_j``; Hu, Li, Peng, J. Power Sources 198 (2012) 359-367).
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import tiny_model
from socfuse.estimator.filters.settings import at_temperature, default_settings, settings_from_dict, settings_to_dict
from socfuse.models.validity import identified_soc_floor, outside_identified_range


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
