"""Tests of the Thevenin model, OCV curve, parameter tables and model files against outside references.

References used (named again beside each check):
- first-order RC step and relaxation response, closed form (any linear-circuits text);
- scipy.signal.cont2discrete(method="zoh") for the exact discretisation;
- scipy.integrate.solve_ivp on the model ODE (Hu, Li and Peng, J. Power Sources 198, 2012, for
  the equivalent circuit; Plett, J. Power Sources 134, 2004, part 2, for the hysteresis ODE).
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.signal import cont2discrete

import socfuse.models as models
from socfuse.models import (CellModel, Hysteresis, ModelFileError, OcvCurve, ParamTable, RcPair, discretise_rc,
                    load_model, model_from_dict, model_to_dict, save_model, simulate)
from socfuse.estimator.demo.truth import truth_cell_model

OCV_SOC = np.array([0.0, 0.1, 0.3, 0.5, 0.7, 0.9, 1.0])
OCV_V = np.array([3.00, 3.45, 3.62, 3.70, 3.84, 4.03, 4.18])


def _model(n_rc=1, hysteresis=None, eta=1.0, r=(0.012, 0.016), tau=(30.0, 600.0), r0=0.025):
    rc = tuple(RcPair(ParamTable.constant(r[j], f"r{j + 1}_ohm"), ParamTable.constant(tau[j], f"tau{j + 1}_s"))
               for j in range(n_rc))
    return CellModel(capacity_ah=4.8, ocv=OcvCurve(OCV_SOC, OCV_V), r0_ohm=ParamTable.constant(r0, "r0_ohm"),
                     rc=rc, coulombic_efficiency=eta, hysteresis=hysteresis)


def test_rc_step_response_matches_closed_form():
    # Analytic first-order RC step response: v(t) = R i (1 - exp(-t / tau)).
    r, tau, i = 0.012, 30.0, 4.8
    m = _model(1, r=(r,), tau=(tau,))
    t = np.concatenate([[0.0], np.cumsum(np.linspace(0.3, 7.0, 40))])
    sim = simulate(m, t, np.full(t.size, i), 25.0, soc0=0.8)
    expected = r * i * (1.0 - np.exp(-t / tau))
    np.testing.assert_allclose(sim.v_rc[:, 0], expected, rtol=0, atol=1e-12)
    # terminal voltage: OCV(z) - R0 i - v_rc with z falling by i t / (3600 Q) (1 Ah = 3600 C,
    # common practice, no source)
    z = 0.8 - i * t / (3600.0 * 4.8)
    np.testing.assert_allclose(sim.voltage_v, m.ocv.voltage(z) - 0.025 * i - expected, rtol=0, atol=1e-12)


def test_rc_relaxation_matches_closed_form():
    # Analytic relaxation of a charged RC pair: v(t) = v0 exp(-t / tau).
    tau, v0 = 600.0, 0.037
    m = _model(1, r=(0.016,), tau=(tau,))
    t = np.array([0.0, 1.0, 10.0, 60.0, 600.0, 1800.0, 3600.0])
    sim = simulate(m, t, np.zeros(t.size), 25.0, soc0=0.5, v_rc0=[v0])
    np.testing.assert_allclose(sim.v_rc[:, 0], v0 * np.exp(-t / tau), rtol=1e-13, atol=0)
    assert sim.v_rc[4, 0] == pytest.approx(v0 / np.e, rel=1e-12)  # one time constant: 1/e


@pytest.mark.parametrize("dt", [0.1, 1.0, 7.3, 250.0])
def test_discretise_rc_equals_scipy_zoh(dt):
    # scipy.signal.cont2discrete(method="zoh") of dv/dt = -v/tau + i/C, C = tau / R.
    r, tau = 0.016, 640.0
    ad, bd, _, _, _ = cont2discrete((np.array([[-1.0 / tau]]), np.array([[r / tau]]), np.eye(1), np.zeros((1, 1))),
                                    dt, method="zoh")
    a, b = discretise_rc(tau, r, dt)
    assert a == pytest.approx(ad[0, 0], rel=1e-13)
    assert b == pytest.approx(bd[0, 0], rel=1e-11)


def test_simulate_matches_solve_ivp_on_uneven_piecewise_constant_profile():
    # scipy.integrate.solve_ivp on the model ODE (Hu et al. 2012 circuit, Plett 2004 hysteresis),
    # with the interval-mean current u_k = (i_k + i_k+1)/2 held over each interval (the sampling
    # rule of models/thevenin.py).  Parameters are constant in SOC: the sampling rule evaluates
    # them at the start of each interval, which an ODE solver would not, so SOC-dependent tables
    # would differ by design, not by error.  The OCV stays nonlinear (it only enters the output).
    rng = np.random.default_rng(7)
    n = 150
    dt = rng.uniform(0.2, 40.0, n - 1)
    t = np.concatenate([[0.0], np.cumsum(dt)])
    i = rng.choice([-2.4, -1.0, 0.0, 0.5, 2.0, 4.8, 9.6], n)
    r, tau, eta, q_as = (0.011, 0.017), (25.0, 700.0), 0.998, 4.8 * 3600.0
    hy = Hysteresis(gamma=30.0, max_v=0.008)
    m = _model(2, hysteresis=hy, eta=eta, r=r, tau=tau)
    sim = simulate(m, t, i, 25.0, soc0=0.7, h0=0.3)
    u = 0.5 * (i[:-1] + i[1:])
    x = np.array([0.7, 0.0, 0.0, 0.3])
    states = [x]
    for k in range(n - 1):
        uk = u[k]
        e = 1.0 if uk >= 0 else eta

        def f(_t, y, uk=uk, e=e):
            return [-e * uk / q_as, -y[1] / tau[0] + r[0] * uk / tau[0], -y[2] / tau[1] + r[1] * uk / tau[1],
                    -abs(e * uk * hy.gamma / q_as) * (y[3] + np.sign(uk))]

        sol = solve_ivp(f, (t[k], t[k + 1]), x, method="DOP853", rtol=1e-12, atol=1e-14)
        x = sol.y[:, -1]
        states.append(x)
    s = np.array(states)
    v_ref = m.ocv.voltage(s[:, 0]) + hy.max_v * s[:, 3] - s[:, 1] - s[:, 2] - 0.025 * i
    np.testing.assert_allclose(sim.soc, s[:, 0], rtol=0, atol=1e-10)
    np.testing.assert_allclose(sim.h, s[:, 3], rtol=0, atol=1e-9)
    assert np.max(np.abs(sim.voltage_v - v_ref)) < 1e-6  # the agreement asked for: 1e-6 V
    assert np.ptp(sim.voltage_v) > 0.3  # the profile really exercised the model


def test_ocv_refuses_non_monotone_table():
    # A non-monotone OCV table is refused, never sorted (the OCV of a Li-ion cell rises with SOC:
    # common practice, no source).
    with pytest.raises(ValueError, match="not strictly increasing"):
        OcvCurve([0.0, 0.5, 1.0], [3.0, 3.9, 3.8])
    with pytest.raises(ValueError, match="not strictly increasing"):
        OcvCurve([0.0, 0.5, 0.5, 1.0], [3.0, 3.6, 3.7, 4.1])


def test_ocv_inverse_round_trip_and_pchip_through_breakpoints():
    curve = truth_cell_model().ocv
    z = np.linspace(0.05, 0.95, 91)
    for temp in (5.0, 25.0, 37.5):
        v = curve.voltage(z, temp)
        np.testing.assert_allclose(curve.soc_at(v, temp), z, rtol=0, atol=1e-9)
    # PCHIP interpolates its data (Fritsch-Carlson, scipy.interpolate.PchipInterpolator)
    c = OcvCurve(OCV_SOC, OCV_V)
    np.testing.assert_allclose(c.voltage(OCV_SOC), OCV_V, atol=1e-12)
    assert np.all(c.slope(np.linspace(0, 1, 201)) > 0)


def test_param_table_refuses_negative_and_interpolates_linearly():
    with pytest.raises(ValueError, match="must be positive"):
        ParamTable([0.0, 0.5, 1.0], [0.02, -0.01, 0.02], name="r0_ohm")
    t = ParamTable([0.0, 1.0], [[0.02, 0.04], [0.01, 0.03]], temperature_c=[0.0, 20.0])
    # bilinear: midpoint of the four corners
    assert t.at(0.5, 10.0) == pytest.approx(0.025, rel=1e-12)
    assert t.at(2.0, 50.0) == pytest.approx(0.03, rel=1e-12)  # clamped, never extrapolated


def test_model_json_round_trip(tmp_path):
    m = truth_cell_model()  # two RC pairs, hysteresis, tables over SOC x temperature
    p = save_model(m, tmp_path / "c48.json")
    back = load_model(p)
    assert back.capacity_ah == m.capacity_ah and back.n_rc == 2
    assert back.hysteresis.max_v == m.hysteresis.max_v
    np.testing.assert_array_equal(back.r0_ohm.values, m.r0_ohm.values)
    np.testing.assert_array_equal(back.rc[1].tau_s.temperature_c, m.rc[1].tau_s.temperature_c)
    t = np.arange(0.0, 600.0, 1.0)
    i = np.where(t % 120 < 60, 4.8, -1.2)
    a = simulate(m, t, i, 5.0, soc0=0.6)
    b = simulate(back, t, i, 5.0, soc0=0.6)
    np.testing.assert_array_equal(a.voltage_v, b.voltage_v)


def test_model_file_refuses_unknown_key_listing_valid_ones(tmp_path):
    d = model_to_dict(truth_cell_model())
    d["r0_ohms"] = d.pop("r0_ohm")
    path = tmp_path / "typo.json"
    path.write_text(json.dumps(d))
    with pytest.raises(ModelFileError) as e:
        load_model(path)
    msg = str(e.value)
    assert "r0_ohms" in msg and "valid keys are" in msg and "capacity_ah" in msg and str(path) in msg


def test_model_file_refuses_negative_resistance():
    d = model_to_dict(truth_cell_model())
    vals = np.array(d["rc_pairs"][0]["r_ohm"]["values"])
    vals[3, 2] = -0.01
    d["rc_pairs"][0]["r_ohm"]["values"] = vals.tolist()
    with pytest.raises(ModelFileError, match=r"rc_pairs\[0\]\.r_ohm.*must be positive"):
        model_from_dict(d, where="bad.json")


def test_models_package_exports_simulate():
    assert models.simulate is simulate
