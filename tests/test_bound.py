"""Posterior Cramer-Rao bound (Tichavsky, Muravchik, Nehorai, IEEE TSP 46, 1998)."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import solve_discrete_are

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.analysis.bound import pcrb_linear, pcrb_soc_sigma, truth_states
from socfuse.estimator.filters.ekf import run_ekf
from socfuse.estimator.filters.settings import default_settings


def _posterior_from_prior(p_pred, h, r):
    s = h @ p_pred @ h + r
    return p_pred - np.outer(p_pred @ h, h @ p_pred) / s


def test_linear_gaussian_steady_state_equals_dare():
    # SOC-like random walk + one RC state, voltage = 0.7 z - v_rc
    a = np.exp(-1.0 / 30.0)
    F = np.array([[1.0, 0.0], [0.0, a]])
    g = np.array([-1.0 / 17280.0, 0.015 * (1 - a)])
    Q = np.outer(g, g) * 0.05 ** 2 + np.diag([1e-9, 1e-8])
    H = np.array([0.7, -1.0])
    R = 0.005 ** 2
    P0 = np.diag([0.05 ** 2, 0.02 ** 2])
    out = pcrb_linear(F, Q, H, R, P0, has_measurement=np.ones(40000, bool))
    # reference: scipy.linalg.solve_discrete_are gives the steady-state prior covariance of the
    # Kalman filter (filter Riccati equation: a = F^T, b = H^T)
    p_pred = solve_discrete_are(F.T, H[:, None], Q, np.array([[R]]))
    p_post = _posterior_from_prior(p_pred, H, R)
    np.testing.assert_allclose(out[-1], p_post, rtol=1e-6, atol=1e-16)


def test_matches_the_information_recursion_of_the_paper():
    # Tichavsky et al. (1998), eqs. for additive Gaussian noise, written out literally:
    # J' = D22 - D21 (J + D11)^-1 D12, D11 = F^T Q^-1 F, D12 = -F^T Q^-1, D22 = Q^-1 + H^T R^-1 H
    rng = np.random.default_rng(4)
    n, nx = 60, 3
    F = np.eye(nx) + 0.1 * rng.normal(size=(n, nx, nx))
    A = rng.normal(size=(n, nx, nx))
    Q = np.einsum("kij,klj->kil", A, A) * 0.01 + 1e-3 * np.eye(nx)
    H = rng.normal(size=(n, nx))
    R = rng.uniform(0.01, 0.1, n)
    P0 = np.diag([0.5, 0.2, 0.1])
    hy = rng.uniform(size=n) > 0.2
    out = pcrb_linear(F, Q, H, R, P0, hy)
    J = np.linalg.inv(P0)
    for k in range(n):
        Qi = np.linalg.inv(Q[k])
        D11 = F[k].T @ Qi @ F[k]
        D12 = -F[k].T @ Qi
        D22 = Qi + (np.outer(H[k], H[k]) / R[k] if hy[k] else 0.0)
        J = D22 - D12.T @ np.linalg.solve(J + D11, D12)
        np.testing.assert_allclose(out[k], np.linalg.inv(J), rtol=1e-8, atol=1e-12)


def test_scalar_random_walk_analytic():
    # Kalman steady state of a scalar random walk (analytic): P- = (q + sqrt(q^2 + 4 q r)) / 2
    q, r = 1e-4, 1e-2
    out = pcrb_linear(np.ones((1, 1)), np.full((1, 1), q), np.ones(1), r, np.ones((1, 1)),
                      np.ones(5000, bool))
    p_pred = 0.5 * (q + np.sqrt(q * q + 4 * q * r))
    assert out[-1, 0, 0] == pytest.approx(p_pred * r / (p_pred + r), rel=1e-9)


def test_bound_on_the_cell_model_and_singular_q():
    model = tiny_model(n_rc=1)
    rec, sim = simulated_recording(model, n=1500, soc0=0.8, noise_v=0.005)
    s = default_settings(model).with_(voltage_noise_v=0.005, gate_sigma=0.0, model_error_v=0.0, resistance_error_ohm=0.0, capacity_error_frac=0.0, estimate_bias=False,
                                  noise_corr_s=0.0)
    res = pcrb_soc_sigma(model, rec, s, soc0=0.8)
    assert res.along == "reference" and res.soc_sigma.shape == (rec.n,)
    # the truth reconstruction reproduces the simulated RC voltage (same sampling rule)
    np.testing.assert_allclose(truth_states(model, rec, sim.soc, s)[:, 1], sim.v_rc[:, 0], atol=1e-12)
    # information only accumulates: the bound falls below the prior sigma (p0_soc) and the
    # EKF, run with the same noise model, is not better than the bound (PCRB property)
    assert res.soc_sigma[-1] < s.p0_soc
    tr = run_ekf(model, rec, s, soc0=0.8)
    assert np.all(res.soc_sigma[100:] <= tr.soc_sigma[100:] * 1.05)
    # along the truth the EKF's own covariance recursion is nearly the bound (same Jacobians
    # up to the linearisation point): within 10 % here
    assert res.soc_sigma[-1] == pytest.approx(tr.soc_sigma[-1], rel=0.1)
    # singular Q: no current noise and no random walks (Q = 0): still finite, non-increasing
    s0 = s.with_(current_noise_a=0.0, q_soc_per_s=0.0, q_rc_v2_per_s=0.0)
    r0 = pcrb_soc_sigma(model, rec, s0, soc0=0.8)
    assert np.all(np.isfinite(r0.state_sigma))
    assert np.all(np.diff(r0.soc_sigma) <= 1e-15)
    est = pcrb_soc_sigma(model, rec, s, soc0=0.8, use_reference=False)
    assert est.along == "estimate"
    assert est.soc_sigma[-1] == pytest.approx(res.soc_sigma[-1], rel=0.1)
