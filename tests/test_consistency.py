"""NIS / NEES consistency tests (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4)."""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from filterpy.kalman import KalmanFilter
from scipy import stats

from socfuse.estimator.analysis.consistency import (ConsistencyError, chi2_band, innovation_autocorrelation, nees_ensemble,
                                   nees_soc, nis_summary, nis_test, pooled_nis)


def test_band_matches_scipy_chi2():
    # scipy.stats.chi2 directly: N * mean ~ chi2(N * m), two-sided 95 %
    lo, hi = chi2_band(100, 1, 0.95)
    assert lo == pytest.approx(stats.chi2.ppf(0.025, 100) / 100, rel=1e-12)
    assert hi == pytest.approx(stats.chi2.ppf(0.975, 100) / 100, rel=1e-12)
    assert (lo, hi) == pytest.approx((0.7422, 1.2956), abs=1e-4)  # chi2 table values, 100 dof
    # Bar-Shalom et al. (2001) worked example (from memory): 50 runs of a 2-D NEES give the
    # 95 % band [1.5, 2.6] for the average
    lo2, hi2 = chi2_band(50, 2, 0.95)
    assert lo2 == pytest.approx(1.5, abs=0.02) and hi2 == pytest.approx(2.6, abs=0.02)


def test_band_rejects_bad_arguments():
    with pytest.raises(ConsistencyError):
        chi2_band(0)
    with pytest.raises(ConsistencyError):
        chi2_band(10, 1, 1.5)
    with pytest.raises(ConsistencyError):
        nis_test([np.nan, np.nan], [1.0, 1.0])
    with pytest.raises(ConsistencyError):
        nis_test([1.0, 2.0], [1.0])


def _random_walk_run(r_filter_scale: float, n: int = 4000, seed: int = 3):
    """Scalar random walk seen in white noise, filtered by filterpy's KalmanFilter.

    The filter's measurement variance is ``r_filter_scale`` times the true one.
    """
    rng = np.random.default_rng(seed)
    q, r = 1e-4, 4e-2
    x = np.cumsum(rng.normal(0, np.sqrt(q), n))
    z = x + rng.normal(0, np.sqrt(r), n)
    kf = KalmanFilter(dim_x=1, dim_z=1)
    kf.x = np.array([[0.0]])
    kf.P = np.array([[1.0]])
    kf.F = np.array([[1.0]])
    kf.H = np.array([[1.0]])
    kf.Q = np.array([[q]])
    kf.R = np.array([[r * r_filter_scale]])
    nu, s, est, var = (np.empty(n) for _ in range(4))
    for k in range(n):
        kf.predict()
        kf.update(np.array([[z[k]]]))
        nu[k], s[k] = kf.y[0, 0], kf.S[0, 0]
        est[k], var[k] = kf.x[0, 0], kf.P[0, 0]
    t = np.arange(n, dtype=float)
    return SimpleNamespace(time_s=t, innovation_v=nu, innovation_var_v2=s, soc=est,
                           soc_sigma=np.sqrt(var), soc_ref=x)


def test_matched_filter_passes_and_overconfident_fails():
    # reference filter: filterpy.kalman.KalmanFilter on a linear-Gaussian random walk
    good = nis_summary(_random_walk_run(1.0), skip_s=50)
    assert good.passed and good.verdict == "consistent"
    assert good.mean == pytest.approx(1.0, abs=0.06)
    # 3-sigma coverage of a Gaussian is 99.73 % (standard normal table)
    assert good.inside_3sigma == pytest.approx(0.9973, abs=0.003)
    # one run: SOC-like errors are correlated in time, so only a loose check of the average
    nees = nees_soc(_random_walk_run(1.0), skip_s=50)
    assert nees.mean == pytest.approx(1.0, abs=0.15)
    # filter believes the sensor is 4x less noisy (variance): innovations look ~4x too big
    bad_run = _random_walk_run(0.25)
    bad = nis_summary(bad_run, skip_s=50)
    assert not bad.passed and bad.verdict == "overconfident"
    assert bad.mean > 2.5
    assert not nees_soc(bad_run, skip_s=50).passed
    # filter believes the sensor is 4x noisier: pessimistic
    timid = nis_summary(_random_walk_run(4.0), skip_s=50)
    assert timid.verdict == "pessimistic" and timid.mean < 0.5


def test_nees_over_monte_carlo_runs():
    # Bar-Shalom et al. (2001) ch. 5.4: NEES over M independent runs, band chi2(M)/M per step
    runs = [_random_walk_run(1.0, n=600, seed=s) for s in range(40)]
    err = np.array([r.soc - r.soc_ref for r in runs])[:, 20:]
    var = np.array([r.soc_sigma ** 2 for r in runs])[:, 20:]
    res = nees_ensemble(err, var)
    assert (res.band_lo, res.band_hi) == pytest.approx(
        (stats.chi2.ppf(0.025, 40) / 40, stats.chi2.ppf(0.975, 40) / 40), rel=1e-12)
    assert res.passed and res.fraction_in_band > 0.88
    # an overconfident filter (claims half the sigma it has) fails
    bad = nees_ensemble(err, var / 4)
    assert not bad.passed and bad.fraction_in_band < 0.2


def test_pooled_and_excluded_samples():
    a = _random_walk_run(1.0, n=500, seed=1)
    b = _random_walk_run(1.0, n=700, seed=2)
    res = pooled_nis([a, b])
    assert res.n_samples == 1200
    both = np.concatenate([a.innovation_v ** 2 / a.innovation_var_v2, b.innovation_v ** 2 / b.innovation_var_v2])
    assert res.mean == pytest.approx(both.mean(), rel=1e-12)
    nu = a.innovation_v.copy()
    nu[::10] = np.nan  # predict-only steps
    r = nis_test(nu, a.innovation_var_v2)
    assert r.n_excluded == 50 and r.n_samples == 450


def test_whiteness_detects_correlated_innovations():
    rng = np.random.default_rng(0)
    white = rng.normal(size=5000)
    _, rho, band = innovation_autocorrelation(white, np.ones(5000), 10)
    assert band == pytest.approx(1.96 / np.sqrt(5000), rel=1e-3)  # normal 97.5 % quantile
    assert np.mean(np.abs(rho) < band) >= 0.8
    # AR(1) with coefficient 0.8: lag-1 autocorrelation 0.8 (textbook AR(1) property)
    ar = np.empty(5000)
    ar[0] = 0.0
    for k in range(1, 5000):
        ar[k] = 0.8 * ar[k - 1] + white[k]
    _, rho_ar, _ = innovation_autocorrelation(ar, np.ones(5000), 3)
    assert rho_ar[0] == pytest.approx(0.8, abs=0.03)


def test_correlated_innovations_are_never_called_consistent():
    # A first-order autoregressive sequence with unit marginal variance: its NIS mean is about 1, so
    # the ordinary chi-square test alone would say "consistent"; the whiteness test of Bar-Shalom,
    # Li, Kirubarajan (2001, ch. 5.4: lag autocorrelation outside +-1.96/sqrt(N)) must flag it.
    from socfuse.estimator.analysis.consistency import chi2_band_effective

    rng = np.random.default_rng(4)
    n, a = 20000, 0.9
    w = rng.normal(size=n)
    e = np.empty(n)
    e[0] = w[0]
    for k in range(1, n):
        e[k] = a * e[k - 1] + np.sqrt(1.0 - a * a) * w[k]  # stationary variance 1 (textbook AR(1))
    res = nis_test(e, np.ones(n))
    assert res.mean == pytest.approx(1.0, abs=0.1)
    assert res.lag1_autocorr == pytest.approx(a, abs=0.02)
    assert res.white is False and not res.passed
    assert res.verdict == "correlated"
    assert "correlated" in res.describe()
    # effective sample count of the mean of squares of an AR(1) sequence: N (1 - a^2) / (1 + a^2)
    # (squares of a Gaussian AR(1) have lag-j correlation a^(2j); Bartlett 1946, from memory)
    assert res.n_effective == pytest.approx(n * (1 - a ** 2) / (1 + a ** 2), rel=0.05)
    lo, hi = chi2_band_effective(res.n_effective)
    # scipy.stats.chi2 with real degrees of freedom as the reference
    assert (lo, hi) == pytest.approx((stats.chi2.ppf(0.025, res.n_effective) / res.n_effective,
                                      stats.chi2.ppf(0.975, res.n_effective) / res.n_effective), rel=1e-12)
    assert (res.band_lo_eff, res.band_hi_eff) == pytest.approx((lo, hi), rel=1e-12)
    assert res.band_hi_eff > res.band_hi  # the band widens
    # the same sequence, overconfident by a factor 4 in variance, is still called overconfident
    assert nis_test(2.0 * e, np.ones(n)).verdict == "overconfident"
    # white samples of the same length pass (lag-1 inside the band)
    white = nis_test(w, np.ones(n))
    assert white.white is True and white.verdict == "consistent"
