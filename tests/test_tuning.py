"""Noise tuning by innovation likelihood and by SOC error under a NIS constraint."""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy import stats

from ekf_cases import drive_profile
from socfuse.estimator.filters.settings import FilterSettings, default_settings
from socfuse.estimator.analysis.tuning import TuningError, innovation_nll, tune
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate

SIGMA_V = 0.005  # true voltage-sensor noise, V
# the filter's model is the simulator's: no model-error state, no capacity or resistance error terms
# and white sensor noise (no correlation time)
EXACT_MODEL = {k: 0.0 for k in ("model_error_v", "capacity_error_frac", "resistance_error_ohm", "noise_corr_s",
                                "model_error_adapt_s", "rc_error_frac")
               if k in {f.name for f in dataclasses.fields(FilterSettings)}}
SIGMA_I = 0.2    # true current-sensor noise, A


def _model():
    # invented NMC-like cell for the test: R0 10 mohm, one RC pair 40 mohm / 30 s
    soc = np.linspace(0.0, 1.0, 11)
    return CellModel(4.8, OcvCurve(soc, 3.0 + 1.0 * soc + 0.25 * soc ** 2), ParamTable.constant(0.01, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.04, "r1_ohm"), ParamTable.constant(30.0, "tau1_s")),), 1.0,
                     name="tuning test cell")


@pytest.fixture(scope="module")
def data():
    model = _model()
    recs = []
    for seed in (0, 1):
        t, i = drive_profile(20000, seed)
        i = i - i.mean() + 0.4  # net C/12 discharge: stays inside 0..1 SOC over 5.5 h
        sim = simulate(model, t, i, soc0=0.95)
        rng = np.random.default_rng(10 + seed)
        recs.append(Recording(t, i + rng.normal(0.0, SIGMA_I, t.size), sim.voltage_v + rng.normal(0.0, SIGMA_V, t.size),
                              soc_ref=sim.soc, name=f"sim{seed}"))
    start = default_settings(model).with_(q_soc_per_s=1e-16, q_rc_v2_per_s=1e-16, gate_sigma=0.0,
                                          voltage_noise_v=0.02, current_noise_a=0.02, **EXACT_MODEL)
    return model, recs, start


def test_likelihood_recovers_known_noise(data):
    model, recs, start = data
    res = tune(model, recs, start, params=("voltage_noise_v", "current_noise_a"), soc0s=[0.95, 0.95],
               max_evaluations=80)
    v, i = res.settings.voltage_noise_v, res.settings.current_noise_a
    # maximum-likelihood estimates of the noise levels of simulated data (prediction-error
    # decomposition, Schweppe 1965): within a factor of 1.5 of the simulated sigmas.  The filter
    # lumps the current noise seen through R0 (10 mohm x 0.2 A = 2 mV) into its voltage noise, so the
    # voltage estimate sits near sqrt(5^2 + 2^2) = 5.4 mV.
    assert SIGMA_V / 1.5 < v < SIGMA_V * 1.5
    assert v == pytest.approx(np.hypot(SIGMA_V, 0.01 * SIGMA_I), rel=0.1)
    assert SIGMA_I / 1.5 < i < SIGMA_I * 1.5
    # the tuned filter is consistent: mean NIS inside the 95 % chi-square band (scipy.stats.chi2,
    # Bar-Shalom et al. 2001 ch. 5)
    n = res.nis_after.n_samples
    assert res.nis_after.band_hi == pytest.approx(stats.chi2.ppf(0.975, n) / n, rel=1e-12)
    assert res.nis_after.passed
    # the start (20 mV, 0.02 A) is pessimistic and fails the same test
    assert res.nis_before.verdict == "pessimistic"
    assert res.nll_after < res.nll_before
    assert res.objective_after == pytest.approx(res.nll_after)
    assert res.evaluations <= 80 and set(res.values()) == {"voltage_noise_v", "current_noise_a"}
    df = res.to_frame()
    assert list(df["setting"]) == ["voltage_noise_v", "current_noise_a"]
    assert "voltage_noise_v" in res.describe()


def test_innovation_nll_matches_scipy_norm():
    # log N(nu; 0, S) summed: scipy.stats.norm.logpdf as the reference
    rng = np.random.default_rng(5)
    s = rng.uniform(1e-6, 1e-4, 50)
    nu = rng.normal(0, np.sqrt(s))
    nu[3] = np.nan
    total, n = innovation_nll(nu, s)
    ok = np.isfinite(nu)
    assert n == 49
    assert total == pytest.approx(-np.sum(stats.norm.logpdf(nu[ok], scale=np.sqrt(s[ok]))), rel=1e-12)


def test_soc_error_objective_keeps_consistency(data):
    model, recs, start = data
    # start far too confident in the voltage (1 mV): good RMSE is not allowed to come from that
    s0 = start.with_(voltage_noise_v=0.001, current_noise_a=0.2)
    res = tune(model, recs, s0, objective="soc-error", params=("voltage_noise_v", "current_noise_a"),
               soc0s=[0.95, 0.95], max_evaluations=40)
    assert res.rmse_after is not None and res.rmse_after <= res.rmse_before * 1.0001
    assert res.objective_after < res.objective_before
    # the NIS penalty pulls the overconfident start (mean NIS >> 1) to within a few percent of 1
    assert res.nis_before.verdict == "overconfident"
    assert abs(np.log(res.nis_after.mean)) < 0.05
    assert res.settings.voltage_noise_v > 0.004


def test_bad_tuning_input(data):
    model, recs, start = data
    with pytest.raises(TuningError, match="cannot tune"):
        tune(model, recs, start, params=("wobble",))
    with pytest.raises(TuningError, match="objective"):
        tune(model, recs, start, objective="vibes")
    no_ref = [r.with_(soc_ref=None) for r in recs]
    with pytest.raises(TuningError, match="soc_ref"):
        tune(model, no_ref, start, objective="soc-error")


def test_autocovariance_least_squares_recovers_linear_noise():
    # Odelson, Rajamani, Rawlings (2006): noise covariances from the innovations of a suboptimal
    # fixed-gain filter; reference gain from scipy.linalg.solve_discrete_are for wrong guesses
    from scipy.linalg import solve_discrete_are

    from socfuse.estimator.analysis.tuning import als_noise, fixed_gain_innovations

    A = np.array([[1.0, 0.0], [0.0, 0.9]])
    C = np.array([1.0, -1.0])
    q_true, r_true = np.array([1e-4, 4e-3]), 1e-2
    rng = np.random.default_rng(11)
    n = 60000
    x = np.zeros(2)
    y = np.empty(n)
    for k in range(n):
        y[k] = C @ x + rng.normal(0, np.sqrt(r_true))
        x = A @ x + rng.normal(0, np.sqrt(q_true))
    # gain of a filter designed for 10x wrong noise (deliberately suboptimal)
    p = solve_discrete_are(A.T, C[:, None], np.diag(q_true * 10), np.array([[r_true / 10]]))
    L = p @ C / (C @ p @ C + r_true / 10)
    nu = fixed_gain_innovations(A, C, L, y)
    res = als_noise(A, C, L, nu, [np.diag([1.0, 0.0]), np.diag([0.0, 1.0])], n_lags=20, skip=100)
    # the random-walk weight has the largest sampling spread (three seeds gave 0.74..1.36 x)
    assert res.r == pytest.approx(r_true, rel=0.05)
    assert res.q_weights[1] == pytest.approx(q_true[1], rel=0.1)
    assert res.q_weights[0] == pytest.approx(q_true[0], rel=0.4)
    with pytest.raises(TuningError, match="stable"):
        als_noise(A, C, np.zeros(2), nu, [np.eye(2)])  # L = 0 leaves the random walk unstable


def test_whitened_nll_is_the_ar1_conditional_likelihood():
    # reference: the Gaussian AR(1) likelihood written with scipy.stats.norm.logpdf: the first sample
    # N(0, S_0), each later one N(rho e_{k-1}, 1 - rho^2) in the normalised scale, plus the Jacobian
    # log sqrt(S_k) of the normalisation (Cochrane and Orcutt 1949, cited from memory)
    from socfuse.estimator.analysis.tuning import whitened_nll

    rng = np.random.default_rng(7)
    n, a = 4000, 0.7
    s = rng.uniform(1e-6, 4e-6, n)
    e = np.empty(n)
    e[0] = rng.normal()
    for k in range(1, n):
        e[k] = a * e[k - 1] + np.sqrt(1 - a * a) * rng.normal()
    nu = e * np.sqrt(s)
    total, count, rho = whitened_nll(nu, s)
    pairs = np.sum(e[1:] * e[:-1]) / np.sum(e[:-1] ** 2)
    assert rho == pytest.approx(pairs, rel=1e-12) and count == n
    ref = -(stats.norm.logpdf(e[0]) + np.sum(stats.norm.logpdf(e[1:], loc=rho * e[:-1], scale=np.sqrt(1 - rho ** 2)))
            - 0.5 * np.sum(np.log(s)))
    assert total == pytest.approx(ref, rel=1e-10)
    # white sequences: the whitened form reduces to the textbook one (rho near 0)
    w = rng.normal(size=n) * np.sqrt(s)
    assert whitened_nll(w, s)[0] == pytest.approx(innovation_nll(w, s)[0], rel=2e-3)


def test_settings_stay_inside_physical_bounds(data):
    from socfuse.estimator.analysis.tuning import physical_bounds

    model, recs, start = data
    bounds = physical_bounds(model)
    # current noise between 0.05 % and 5 % of 1C (4.8 A), voltage noise 1 .. 50 mV (a BMS front end has
    # 1-2 mV of noise and a 1 mV step: common practice, no source; physical_bounds docstring)
    assert bounds["current_noise_a"] == pytest.approx((4.8 / 2000, 4.8 / 20))
    assert bounds["voltage_noise_v"] == pytest.approx((1e-3, 0.05))
    # the model-error state is never tuned more optimistic than the model-derived default: the innovations
    # of a drive cannot tell a persistent voltage error from a SOC error (physical_bounds docstring)
    d = default_settings(model)
    assert bounds["model_error_v"][0] == pytest.approx(d.model_error_v)
    assert bounds["model_error_tau_s"] == pytest.approx((300.0, 3600.0))
    res = tune(model, recs, start.with_(voltage_noise_v=0.05), params=("voltage_noise_v", "current_noise_a",
                                                                       "q_soc_per_s"),
               soc0s=[0.95, 0.95], max_evaluations=40)
    for p, v in res.values().items():
        lo, hi = res.bounds[p]
        assert lo <= v <= hi, p


def test_worse_on_the_hold_out_is_refused(data):
    # tuned on a recording with 5 mV voltage noise, checked on one with 40 mV: the Gaussian likelihood
    # of the unseen recording is worse with the tuned (smaller) voltage noise than with the 20 mV start,
    # so the result must be refused with that reason
    model, recs, start = data
    noisy = recs[1].with_(voltage_v=np.asarray(recs[1].voltage_v)
                          + np.random.default_rng(3).normal(0.0, 0.04, recs[1].n))
    res = tune(model, [recs[0]], start, params=("voltage_noise_v",), soc0s=0.95, max_evaluations=30,
               holdout_recs=[noisy], holdout_fraction=0.0)
    assert res.settings.voltage_noise_v < 0.01
    assert res.refused and any("hold-out objective rose" in r for r in res.reasons)
    assert "REFUSED" in res.describe()
    unseen = [t for t in res.transfer if t["window"] == "unseen"]
    assert unseen and unseen[0]["nll_after"] > unseen[0]["nll_before"]
    # the same tuning checked on its own hold-out window is accepted
    ok = tune(model, [recs[0]], start, params=("voltage_noise_v",), soc0s=0.95, max_evaluations=30)
    assert not ok.refused and ok.holdout_after["objective"] < ok.holdout_before["objective"]


def test_soc_error_tuning_keeps_the_voltage_feedback(data):
    # with a perfect SOC reference the soc-error objective could be met by counting charge alone; the
    # mid-drive wrong start in the objective must keep the filter correcting a 30-point error
    # (project target: RMSE after 600 s under 1.5 points, issue 11 item 5)
    from socfuse.estimator.analysis.tuning import ekf_raw, handover_index, _slice

    model, recs, start = data
    s0 = start.with_(gate_sigma=5.0, p0_soc=0.3)
    res = tune(model, recs, s0, objective="soc-error", params=("voltage_noise_v", "current_noise_a", "q_soc_per_s"),
               soc0s=[0.95, 0.95], max_evaluations=40)
    assert res.holdout_after["wrong_start_rmse"] is not None
    for r in recs:
        k = handover_index(r.time_s, r.current_a, model.capacity_ah)
        part = _slice(r, k)
        raw = ekf_raw(model, [part], res.settings, [float(r.soc_ref[k]) - 0.30])
        t = np.asarray(part.time_s)
        late = t >= t[0] + 600.0
        rmse = np.sqrt(np.mean((raw["soc"][late] - np.asarray(part.soc_ref)[late]) ** 2))
        assert rmse < 0.015, r.name


def test_likelihood_result_is_checked_on_a_wrong_start(data):
    # with a reference in the recordings the likelihood result is also run from a 30-point wrong start
    # handed over mid-drive; on this exact-model simulation both settings recover (project target: RMSE
    # after 600 s under 1.5 points, issue 11 item 5), so nothing is refused for it
    model, recs, start = data
    res = tune(model, recs, start, params=("voltage_noise_v", "current_noise_a"), soc0s=[0.95, 0.95],
               max_evaluations=30)
    assert res.holdout_before["wrong_start_rmse"] is not None
    assert res.holdout_after["wrong_start_rmse"] < 0.015
    assert not any("wrong start" in r for r in res.reasons)
