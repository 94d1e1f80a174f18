"""RTS smoother over a stored EKF run, against filterpy's rts_smoother and the filtered estimate."""
from __future__ import annotations

import numpy as np
from filterpy.kalman import KalmanFilter

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters.ekf import run_ekf_store
from socfuse.estimator.filters.settings import default_settings
from socfuse.estimator.filters.smoother import rts_pass, rts_smooth
from socfuse.models import Recording, simulate


def test_rts_pass_matches_filterpy_on_a_rest():
    # At zero current the model is linear with no input, where filterpy's KalmanFilter.rts_smoother
    # (Rauch, Tung, Striebel 1965) applies directly: relaxation of an RC voltage after a load.
    m = tiny_model(n_rc=2, linear=True)
    s = default_settings(m).with_(gate_sigma=0.0, q_rc_v2_per_s=1e-6, soc_min=-1.0, soc_max=2.0, voltage_noise_v=0.01,
                                  model_error_v=0.0, resistance_error_ohm=0.0, capacity_error_frac=0.0, estimate_bias=False,
                                  noise_corr_s=0.0, estimate_resistance=False)
    t = np.arange(600.0)
    i = np.zeros(t.size)
    sim = simulate(m, t, i, soc0=0.5, v_rc0=[0.05, 0.03])
    rng = np.random.default_rng(3)
    rec = Recording(t, i, sim.voltage_v + rng.normal(0, 0.003, t.size))
    tr, (p_post, p_prior, f) = run_ekf_store(m, rec, s, soc0=0.5)
    a = np.exp(-1.0 / np.array([30.0, 400.0]))
    g = np.array([-1.0 / (4.8 * 3600), 0.015 * (1 - a[0]), 0.01 * (1 - a[1])])  # input Jacobian at u >= 0
    q1 = np.outer(g, g) * s.current_noise_a ** 2 + np.diag([s.q_soc_per_s, s.q_rc_v2_per_s, s.q_rc_v2_per_s])
    q = np.array([q1] * t.size)
    kf = KalmanFilter(dim_x=3, dim_z=1)
    xs_ref, ps_ref, _, _ = kf.rts_smoother(tr.states, p_post, f, q)
    xs, ps = rts_pass(tr.states, p_post, np.concatenate([tr.states[:1], np.einsum("kij,kj->ki", f[1:], tr.states[:-1])]),
                      p_prior, f)
    np.testing.assert_allclose(xs, xs_ref, atol=1e-12)
    # atol 1e-15 against entries of order 1e-4: 1e-11 of the scale (entries crossing zero have no rtol)
    np.testing.assert_allclose(ps, ps_ref, rtol=1e-9, atol=1e-15)


def test_smoothed_soc_beats_filtered():
    m = tiny_model(n_rc=2)
    rec, _ = simulated_recording(m, n=1500, soc0=0.7, seed=8)
    s = default_settings(m).with_(voltage_noise_v=0.01, model_error_v=0.0, resistance_error_ohm=0.0, capacity_error_frac=0.0, estimate_bias=False,
                                  noise_corr_s=0.0)
    rec = rec.with_(voltage_v=np.concatenate([[np.nan], rec.voltage_v[1:]]))  # no hand-over check: keep the wrong start
    f = run_ekf_store(m, rec, s, soc0=0.6)[0]
    r = rts_smooth(m, rec, s, soc0=0.6)
    assert r.method == "rts"
    rms = lambda e: np.sqrt(np.mean(e ** 2))  # noqa: E731
    # the smoother uses all data: the start error (10 points, 5 prior sigmas) shrinks at the smoothed
    # start, and the overall error falls (a property of the fixed-interval smoother; RTS 1965)
    assert abs(r.soc_error[0]) < 0.5 * abs(f.soc_error[0])
    assert rms(r.soc_error) < 0.5 * rms(f.soc_error)
    assert np.all(r.soc_sigma <= f.soc_sigma + 1e-12)
