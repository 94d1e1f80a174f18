"""The compiled EKF against outside references: filterpy, scipy DARE, chi-square NIS band."""
from __future__ import annotations

import numpy as np
import pytest
from filterpy.kalman import ExtendedKalmanFilter
from scipy.linalg import solve_discrete_are
from scipy.stats import chi2

from ekf_cases import drive_profile, simulated_recording, tiny_model
from socfuse.estimator.filters.ekf import initial_soc, run_ekf, run_ekf_store, setup
from socfuse.estimator.filters.settings import default_settings
from socfuse.models import Recording, simulate

CAP_AS = 4.8 * 3600.0
TAUS = (30.0, 400.0)
RS = (0.015, 0.01)


def _filterpy_run(m, su, rec, x0, p0):
    """filterpy 2.0.0 ExtendedKalmanFilter (Joseph-form update) driven step by step.

    F, B and Q are built here from the model constants (constant RC tables, so a = exp(-dt/tau)
    and b = R (1 - a) exactly); Hx and HJacobian are the model's measurement through
    ``EkfSetup.measure`` (the same tabulated OCV curve).  The model-error state, when on, is a
    first-order Gauss-Markov process (F = exp(-dt/tau), Q = sigma^2 (1 - F^2)); the resistance-scale
    state, when on, a random walk (F = 1, Q = q_r dt) whose H entry ``-R0 i`` the measurement gives; the capacity
    term adds ``c^2 |dSOC|`` to Q[0, 0]; R of sample k is ``sigma_v^2 + (sigma_R max(|i_k|, |i_k-1|))^2 +
    (sigma_P sum_j |v_j|)^2`` (``v_j`` the predicted RC voltages); both white
    sensor variances are multiplied by ``max(1, noise_corr_s / dt)``.
    """
    s = su.settings
    nx = su.n_x
    kf = ExtendedKalmanFilter(dim_x=nx, dim_z=1)
    kf.x = x0.reshape(nx, 1).copy()
    kf.P = p0.copy()
    xs, ps = [], []
    t, i, v = rec.time_s, rec.current_a, rec.voltage_v
    for k in range(rec.n):
        if k > 0:
            dt = t[k] - t[k - 1]
            u = 0.5 * (i[k - 1] + i[k])
            b = kf.x[su.i_b, 0] if su.i_b >= 0 else 0.0
            eta = 1.0 if u - b >= 0 else m.coulombic_efficiency
            f = np.eye(nx)
            g = np.zeros(nx)
            g[0] = -eta * dt / CAP_AS
            for j in range(m.n_rc):
                a = np.exp(-dt / TAUS[j])
                f[1 + j, 1 + j] = a
                g[1 + j] = RS[j] * (1 - a)
            qd = np.zeros(nx)
            qd[0] = s.q_soc_per_s
            qd[1:1 + m.n_rc] = s.q_rc_v2_per_s
            if su.i_b >= 0:
                f[:, su.i_b] -= g
                f[su.i_b, su.i_b] = 1.0
                qd[su.i_b] = s.q_bias_a2_per_s
            wf = max(1.0, s.noise_corr_s / dt)  # band-limited sensor noise (kernels docstring)
            qm = np.outer(g, g) * s.current_noise_a ** 2 * wf + np.diag(qd) * dt
            qm[0, 0] += s.capacity_error_frac ** 2 * abs(g[0] * (u - b))
            if su.i_r >= 0:  # resistance scale: a random walk (its H entry -R0 i comes from measure)
                qm[su.i_r, su.i_r] += s.q_resistance_per_s * dt
            if su.i_e >= 0:
                ae = np.exp(-dt / s.model_error_tau_s)
                f[su.i_e, su.i_e] = ae
                qm[su.i_e, su.i_e] = s.model_error_v ** 2 * (1 - ae ** 2)
            kf.F = f
            kf.B = g.reshape(nx, 1)
            kf.Q = qm
            kf.predict(u=np.array([[u]]))
        if np.isfinite(v[k]):
            ik, tk = i[k], np.nan
            # the RC polarisation term: (rc_error_frac * sum |v_j|)^2 at the predicted state, with the
            # resistance part's band limit
            pv = (s.rc_error_frac * np.sum(np.abs(kf.x[1:1 + su.n_rc, 0]))) ** 2
            kf.update(np.array([[v[k]]]), HJacobian=lambda x: su.measure(x[:, 0], ik, tk)[1].reshape(1, -1),
                      Hx=lambda x: np.array([[su.measure(x[:, 0], ik, tk)[0]]]),
                      R=np.array([[s.voltage_noise_v ** 2 * (max(1.0, s.noise_corr_s / (t[k] - t[k - 1])) if k else 1.0)
                                   + (s.resistance_error_ohm * (max(abs(ik), abs(i[k - 1])) if k else ik)) ** 2
                                   * (max(1.0, s.resistance_error_corr_s / (t[k] - t[k - 1])) if k else 1.0)
                                   + pv * (max(1.0, s.resistance_error_corr_s / (t[k] - t[k - 1])) if k else 1.0)]]))
        xs.append(kf.x[:, 0].copy())
        ps.append(kf.P.copy())
    return np.array(xs), np.array(ps)


WHITE = dict(model_error_v=0.0, resistance_error_ohm=0.0, capacity_error_frac=0.0, voltage_noise_v=0.01,
             noise_corr_s=0.0, rc_error_frac=0.0, estimate_resistance=False)


@pytest.mark.parametrize("n_rc,bias,uneven,new", [(2, False, False, False), (1, True, True, False),
                                                  (2, True, True, True)])
def test_matches_filterpy_every_step(n_rc, bias, uneven, new):
    m = tiny_model(n_rc=n_rc)
    # no clipping, no gate: the reference has neither; ``new``: the default noise model (model-error
    # state, current-dependent R, capacity term; its adaptive magnitude is no part of the reference
    # filter and is off here), else white voltage noise only
    s = default_settings(m).with_(gate_sigma=0.0, soc_min=-1.0, soc_max=2.0, estimate_bias=bias,
                                  q_rc_v2_per_s=1e-6, model_error_adapt_s=0.0, gap_s=0.0, **({} if new else WHITE))
    assert (setup(m, s).i_e >= 0) == new
    rec, _ = simulated_recording(m, n=600, soc0=0.7, uneven=uneven, seed=4)
    if bias:  # a sensor offset and a few missing voltages (predict only)
        v = rec.voltage_v.copy()
        v[[50, 51, 300]] = np.nan
        rec = rec.with_(current_a=rec.current_a + 0.2, voltage_v=v)
    su = setup(m, s)
    tr, (p_post, p_prior, f) = run_ekf_store(m, rec, s, soc0=0.65)
    x0 = np.zeros(su.n_x)
    x0[0] = initial_soc(su, rec, 0.65)[0]  # 0.65 unless the hand-over check moved it
    xs, ps = _filterpy_run(m, su, rec, x0, p_prior[0])
    # filterpy.kalman.ExtendedKalmanFilter is the reference: agreement to 1e-9 at every step
    np.testing.assert_allclose(tr.states, xs, rtol=0, atol=1e-9)
    np.testing.assert_allclose(p_post, ps, rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(tr.soc_sigma, np.sqrt(ps[:, 0, 0]), rtol=1e-9)


def test_covariance_converges_to_dare():
    m = tiny_model(n_rc=1, linear=True)  # OCV 3.0 + 1.2 SOC, R0 20 mohm, one 30 s pair
    s = default_settings(m).with_(q_soc_per_s=1e-6, q_rc_v2_per_s=1e-6, gate_sigma=0.0, estimate_bias=False, **WHITE)
    n = 4000
    t = np.arange(n, dtype=float)
    i = np.full(n, 0.5)
    sim = simulate(m, t, i, soc0=0.8)
    rec = Recording(t, i, sim.voltage_v)
    _, (p_post, p_prior, f) = run_ekf_store(m, rec, s, soc0=0.8)
    a = np.exp(-1.0 / 30.0)
    fm = np.diag([1.0, a])
    g = np.array([-1.0 / CAP_AS, 0.015 * (1 - a)])
    q = np.outer(g, g) * s.current_noise_a ** 2 + np.diag([s.q_soc_per_s, s.q_rc_v2_per_s])
    h = np.array([[1.2, -1.0]])
    # scipy.linalg.solve_discrete_are of the dual (filter) problem gives the steady a-priori P
    p_dare = solve_discrete_are(fm.T, h.T, q, np.array([[s.voltage_noise_v ** 2]]))
    np.testing.assert_allclose(f[-1], fm, atol=1e-15)
    np.testing.assert_allclose(p_prior[-1], p_dare, rtol=1e-6)


def test_nis_inside_chi2_band():
    m = tiny_model(n_rc=2)
    sigma_v = 0.004
    s = default_settings(m).with_(voltage_noise_v=sigma_v, current_noise_a=1e-6, q_soc_per_s=1e-14,
                                  q_rc_v2_per_s=1e-14, p0_soc=0.02, p0_rc_v=1e-4, gate_sigma=0.0,
                                  estimate_bias=False, model_error_v=0.0, resistance_error_ohm=0.0,
                                  capacity_error_frac=0.0, noise_corr_s=0.0, rc_error_frac=0.0)
    n = 3000
    t, i = drive_profile(n, seed=7, uneven=True)
    sim = simulate(m, t, i, soc0=0.7)
    rng = np.random.default_rng(11)
    rec = Recording(t, i, sim.voltage_v + rng.normal(0, sigma_v, n))
    soc0 = 0.7 + rng.normal(0, 0.02)  # a start drawn from the stated prior
    tr = run_ekf(m, rec, s, soc0=soc0)
    nis = tr.innovation_v ** 2 / tr.innovation_var_v2
    # NIS test (Bar-Shalom, Li, Kirubarajan 2001, sec. 5.4): N * mean(NIS) ~ chi2(N) for a consistent filter
    lo, hi = chi2.ppf([0.025, 0.975], n) / n
    assert lo < nis.mean() < hi, (lo, nis.mean(), hi)
