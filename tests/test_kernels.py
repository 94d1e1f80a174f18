"""Kernel tables, settings files and the compiled EKF basics (outside references named per check)."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import numpy as np
import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.coulomb import run_coulomb
from socfuse.estimator.filters.ekf import run_ekf, run_ekf_batch, setup
from socfuse.estimator.filters.run import estimate
from socfuse.estimator.filters.settings import (FilterSettings, SettingsError, default_settings, load_settings,
                                save_settings)
from socfuse.estimator.filters.tables import KernelTables


def test_settings_round_trip_and_unknown_keys(tmp_path):
    m = tiny_model()
    s = default_settings(m)
    # 1 % SOC per hour random walk: 0.01^2 / 3600 (common practice, no source)
    assert s.q_soc_per_s == pytest.approx(0.01 ** 2 / 3600)
    assert s.rest_min_s == 3600.0  # US DOE / INL HPPC practice: one hour's rest before an OCV reading
    assert s.current_noise_a == pytest.approx(0.048)
    p = save_settings(s.with_(gate_sigma=3.0), tmp_path / "f.json")
    d = json.loads(p.read_text())
    assert d["schema"] == "socfuse.filter/1"
    assert load_settings(p) == s.with_(gate_sigma=3.0)
    d["gate_sigmaa"] = 1
    p.write_text(json.dumps(d))
    with pytest.raises(SettingsError, match="gate_sigmaa.*valid keys are.*gate_sigma"):
        load_settings(p)
    with pytest.raises(SettingsError, match="voltage_noise_v"):
        FilterSettings(voltage_noise_v=-1.0)


def test_tables_match_model_functions():
    m = tiny_model(temperature=True)
    tab = KernelTables.from_model(m, 401)
    assert tab.temp_grid.tolist() == [5.0, 25.0, 45.0]
    z = np.linspace(0.01, 0.99, 37)
    # PCHIP curve (scipy PchipInterpolator inside OcvCurve) vs the 401-point linear table:
    # the linear-interpolation error bound h^2/8 max|f''| is far below 1 mV here.
    for temp in (5.0, 12.0, 25.0, 40.0):
        ocv = tab.lookup(0, z, temp)
        assert np.max(np.abs(ocv - m.ocv.voltage(z, temp))) < 1e-5
        r0 = tab.lookup(2, z, temp)
        assert np.max(np.abs(r0 - m.r0_ohm.at(z, temp))) < 1e-9  # linear tables are reproduced exactly
    inv = np.array([K.ocv_inverse(tab.packed, v, 25.0, tab.t_min, tab.t_step) for v in tab.lookup(0, z, 25.0)])
    np.testing.assert_allclose(inv, z, atol=1e-12)


def test_ekf_tracks_simulation_and_batch_equals_single():
    m = tiny_model(n_rc=2)
    rec, sim = simulated_recording(m, n=1500, soc0=0.75, uneven=True)
    tr = estimate(m, rec, "ekf")  # default settings: starts from the OCV inverse at the first sample
    assert abs(tr.soc[0] - 0.75) < 0.05
    assert np.sqrt(np.mean(tr.soc_error[300:] ** 2)) < 0.02
    assert np.all(np.abs(tr.soc_error) <= 3 * tr.soc_sigma)  # the reported sigma covers the error
    # the simulation has no model error and 5 mV white noise: with settings that say so the filter
    # must track it to a point
    exact = default_settings(m).with_(model_error_v=0.0, voltage_noise_v=0.005, estimate_bias=False)
    tr = estimate(m, rec, "ekf", exact)
    assert np.sqrt(np.mean(tr.soc_error[300:] ** 2)) < 0.01
    assert np.all(np.isfinite(tr.states)) and tr.n_gated == 0
    recs = [rec, rec.slice(0, 700), rec.slice(100, 1400)]
    batch = run_ekf_batch(m, recs, None, [0.7, None, 0.6])
    for r, z, b in zip(recs, [0.7, None, 0.6], batch):
        one = run_ekf(m, r, None, z)
        np.testing.assert_array_equal(one.states, b.states)
        np.testing.assert_array_equal(one.soc_sigma, b.soc_sigma)


def test_linearise_matches_finite_differences():
    m = tiny_model(n_rc=2, hysteresis=True)
    su = setup(m, default_settings(m).with_(estimate_bias=True, model_error_v=0.0))
    assert su.names == ("soc", "v_rc_1_v", "v_rc_2_v", "bias_a", "hyst", "r0_scale")
    x = np.array([0.6, 0.01, 0.02, 0.1, 0.3, 0.15])
    xp, f, g, q, h, y = su.linearise(x, 2.0, 3.0, 1.5)
    # central differences (textbook numerical Jacobian) of the same transition
    eps = 1e-6
    for j in range(1, 6):  # soc column omitted: F ignores the SOC dependence of the RC parameters
        dx = np.zeros(6)
        dx[j] = eps
        fd = (su.linearise(x + dx, 2.0, 3.0, 1.5)[0] - su.linearise(x - dx, 2.0, 3.0, 1.5)[0]) / (2 * eps)
        np.testing.assert_allclose(f[:, j], fd, atol=1e-8)
    for j in range(1, 6):
        dx = np.zeros(6)
        dx[j] = eps
        fd = (su.measure(xp + dx, 3.0)[0] - su.measure(xp - dx, 3.0)[0]) / (2 * eps)
        assert h[j] == pytest.approx(fd, abs=1e-6)
    # SOC column: the PCHIP slope (scipy PchipInterpolator derivative) only; the -i dR0/dSOC term of
    # the exact derivative is left out by design (kernels docstring, "Jacobian choice"): here
    # R0 = 0.02 - 0.005 soc, so the exact derivative would be larger by 0.005 * (1 + r) (i - bias)
    assert h[0] == pytest.approx(float(m.ocv.slope(xp[0])), abs=1e-4)
    fd0 = (su.measure(xp + [eps, 0, 0, 0, 0, 0], 3.0)[0] - su.measure(xp - [eps, 0, 0, 0, 0, 0], 3.0)[0]) / (2 * eps)
    assert fd0 - h[0] == pytest.approx(0.005 * (1 + xp[5]) * (3.0 - xp[3]), abs=1e-3)  # table vs PCHIP slope


def test_model_error_state_exact_discretisation():
    m = tiny_model(n_rc=1)
    s = default_settings(m).with_(model_error_v=0.01, model_error_tau_s=50.0, estimate_bias=False,
                                  capacity_error_frac=0.0, estimate_resistance=False)
    su = setup(m, s)
    assert su.n_x == 3 and su.i_e == 2 and su.names[-1] == "model_error_v"
    x = np.array([0.5, 0.01, 0.004])
    xp, f, g, q, h, y = su.linearise(x, 1.0, 1.0, 7.0)
    # first-order Gauss-Markov process, exact discretisation (Gelb 1974, Table 4.4-1, from memory):
    # a = exp(-dt/tau), q = sigma^2 (1 - a^2), so the stationary variance stays sigma^2 for any dt
    a = np.exp(-7.0 / 50.0)
    assert xp[2] == pytest.approx(a * 0.004, rel=1e-12) and f[2, 2] == pytest.approx(a, rel=1e-12)
    assert q[2, 2] == pytest.approx(0.01 ** 2 * (1 - a * a), rel=1e-12)
    assert h[2] == 1.0 and y == pytest.approx(su.measure(xp, 1.0)[0])
    assert y - su.measure(np.array([xp[0], xp[1], 0.0]), 1.0)[0] == pytest.approx(xp[2], abs=1e-15)
    # capacity uncertainty: SOC variance grows by capacity_error^2 |dSOC| per interval
    s2 = s.with_(capacity_error_frac=0.03)
    q2 = setup(m, s2).linearise(x, 2.0, 2.0, 10.0)[3]
    q1 = su.linearise(x, 2.0, 2.0, 10.0)[3]
    assert q2[0, 0] - q1[0, 0] == pytest.approx(0.03 ** 2 * 2.0 * 10.0 / (4.8 * 3600), rel=1e-9)


def test_pure_python_equals_compiled(tmp_path):
    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=150, uneven=True)
    tr = run_ekf(m, rec)
    cc = run_coulomb(m, rec, default_settings(m).with_(rest_current_a=3.0, rest_min_s=5.0), soc0=0.7)
    assert len(cc.reseeds) > 0
    np.save(tmp_path / "ref.npy", np.column_stack([tr.states, tr.soc_sigma, tr.voltage_pred_v, cc.soc, cc.soc_sigma]))
    code = f"""
import sys, numpy as np
sys.path[:0] = [{os.getcwd()!r}, {os.path.dirname(__file__)!r}]
from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters.ekf import run_ekf
from socfuse.estimator.filters.coulomb import run_coulomb
m = tiny_model(n_rc=1)
rec, _ = simulated_recording(m, n=150, uneven=True)
from socfuse.estimator.filters.settings import default_settings
tr = run_ekf(m, rec)
cc = run_coulomb(m, rec, default_settings(m).with_(rest_current_a=3.0, rest_min_s=5.0), soc0=0.7)
ref = np.load({str(tmp_path / 'ref.npy')!r})
out = np.column_stack([tr.states, tr.soc_sigma, tr.voltage_pred_v, cc.soc, cc.soc_sigma])
assert np.max(np.abs(out - ref)) <= 1e-12, np.max(np.abs(out - ref))
print("same")
"""
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    res = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    assert "same" in res.stdout


def test_temperature_model_tracks_cold_simulation():
    m = tiny_model(n_rc=1, temperature=True)
    rec, sim = simulated_recording(m, n=1500, soc0=0.8, temperature_c=12.0, seed=9)
    tr = run_ekf(m, rec, soc0=0.8)
    # the filter's model is the simulating model at 12 degC (between the 5 and 25 degC rows);
    # a 25 degC-only look-up would bias the voltage by the 10 mohm R0 difference at 4 A
    assert np.sqrt(np.mean(tr.soc_error ** 2)) < 0.005
    assert np.sqrt(np.mean(tr.innovation_v ** 2)) < 0.0075  # voltage noise 5 mV (ekf_cases)


def test_adaptive_model_error_widens_the_sigma():
    # the voltage carries a slow model error of 50 mV (first-order Gauss-Markov, 300 s), five times
    # the assumed 10 mV; covariance matching on the model-error state (Myers and Tapley 1976, from
    # memory) must notice and make the sigma cover more of the error than the fixed magnitude does
    from ekf_cases import drive_profile
    from socfuse.models import Recording, simulate

    m = tiny_model(n_rc=1)
    t, i = drive_profile(7200, seed=1)
    sim = simulate(m, t, i, soc0=0.9)
    rng = np.random.default_rng(1)
    a = np.exp(-1 / 300.0)
    e = np.zeros(t.size)
    for k in range(1, t.size):
        e[k] = a * e[k - 1] + 0.05 * np.sqrt(1 - a * a) * rng.standard_normal()
    rec = Recording(t, i, sim.voltage_v + e + rng.normal(0, 0.0015, t.size), None, sim.soc)
    # assumed error 10 mV over 60 s (fast against the true 300 s): the case the adaptive term is for
    s = default_settings(m).with_(model_error_v=0.01, model_error_tau_s=60.0)
    fixed = run_ekf(m, rec, s, soc0=0.9)
    adapt = run_ekf(m, rec, s.with_(model_error_adapt_s=600.0), soc0=0.9)
    cov = lambda tr: np.mean(np.abs(tr.soc_error) <= 3 * tr.soc_sigma)  # noqa: E731
    assert cov(adapt) > cov(fixed) + 0.3
    assert adapt.soc_sigma[-1] > 1.5 * fixed.soc_sigma[-1]
    assert np.sqrt(np.mean(adapt.soc_error ** 2)) <= np.sqrt(np.mean(fixed.soc_error ** 2))
