"""Metrics on a tiny trace against values computed by hand, and the chi-square bands against scipy."""
from __future__ import annotations

import math
import statistics
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from socfuse.estimator.analysis.metrics import converge_time_s, error_metrics, excursions, trace_metrics

T = np.array([0.0, 10.0, 20.0, 30.0, 40.0])
SOC = np.array([0.50, 0.515, 0.49, 0.505, 0.51])
REF = np.array([0.45, 0.50, 0.50, 0.50, 0.50])
# errors e = [0.05, 0.015, -0.01, 0.005, 0.01]
SIGMA = np.array([0.01, 0.01, 0.01, 0.01, 0.001])


def test_error_metrics_by_hand():
    m = error_metrics(T, SOC, REF, SIGMA)
    # RMSE by hand: e^2 = 0.0025, 0.000225, 0.0001, 0.000025, 0.0001; sum 0.00295; /5 = 0.00059;
    # sqrt(0.00059) = 0.0242899 -> 2.42899 %
    assert m["rmse_pct"] == pytest.approx(2.428992, abs=1e-5)
    # MAE by hand: (0.05 + 0.015 + 0.01 + 0.005 + 0.01) / 5 = 0.018 -> 1.8 %
    assert m["mae_pct"] == pytest.approx(1.8, abs=1e-9)
    assert m["max_abs_pct"] == pytest.approx(5.0, abs=1e-9)
    assert m["final_abs_pct"] == pytest.approx(1.0, abs=1e-9)
    # only the first sample is outside +-2 points: inside from t = 10 s on
    assert m["converge_s"] == pytest.approx(10.0)
    # |e| <= 3 sigma: 0.05 > 0.03 no, 0.015/0.01/0.005 <= 0.03 yes, 0.01 > 0.003 no -> 3/5
    assert m["inside_3sigma"] == pytest.approx(0.6)


def test_converge_edge_cases():
    assert converge_time_s(T, [0.0, 0.01, -0.01, 0.0, 0.019]) == 0.0      # never outside
    assert converge_time_s(T, [0.0, 0.0, 0.0, 0.0, 0.03]) is None        # outside at the end: never
    assert converge_time_s(T, [0.1, 0.0, 0.05, 0.0, 0.0]) == pytest.approx(30.0)
    assert converge_time_s(T, [np.nan, 0.0, 0.0, 0.0, 0.0]) == pytest.approx(10.0)  # NaN counts as outside


def test_reference_gaps_are_left_out_and_bad_estimates_refused():
    ref = REF.copy()
    ref[0] = np.nan
    m = error_metrics(T, SOC, ref)
    # errors 0.015, -0.01, 0.005, 0.01: sqrt((2.25e-4 + 1e-4 + 2.5e-5 + 1e-4) / 4) = sqrt(1.125e-4) = 0.0106066
    assert m["rmse_pct"] == pytest.approx(1.06066, abs=1e-5)
    assert math.isnan(m["inside_3sigma"])
    with pytest.raises(ValueError, match="not finite at sample 1"):
        error_metrics(T, [0.5, np.nan, 0.5, 0.5, 0.5], REF)


def test_trace_metrics_nis_band_from_scipy():
    innov = np.array([0.01, -0.02, 0.0, 0.01, np.nan])
    tr = SimpleNamespace(time_s=T, soc=SOC, soc_sigma=SIGMA, soc_ref=REF, innovation_v=innov,
                         innovation_var_v2=np.full(5, 1e-4), n_gated=2, reseeds=((5.0, 0.4, 0.5),),
                         method="ekf", name="tiny")
    m = trace_metrics(tr, soc_true=REF)
    # NIS = nu^2 / S = 1, 4, 0, 1 (the NaN step is predict-only): mean 1.5 over 4 samples
    assert m.nis_mean == pytest.approx(1.5)
    # band of the mean of N chi2(1) samples: chi2.ppf(0.025, N) / N .. chi2.ppf(0.975, N) / N
    # (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4), values from scipy.stats.chi2
    assert m.nis_lo == pytest.approx(stats.chi2.ppf(0.025, 4) / 4)
    assert m.nis_hi == pytest.approx(stats.chi2.ppf(0.975, 4) / 4)
    assert m.nis_verdict == "consistent"
    # NEES = e^2 / sigma^2 = 25, 2.25, 1, 0.25, 100 -> mean 25.7
    assert m.nees_mean == pytest.approx(25.7)
    assert (m.n_gated, m.n_reseeds, m.n_samples, m.duration_s) == (2, 1, 5, 40.0)
    assert m.rmse_pct == pytest.approx(2.428992, abs=1e-5)
    row = m.as_row()
    assert list(row)[:4] == ["rmse_pct", "max_abs_pct", "final_abs_pct", "converge_s"]


def test_trace_without_innovations_has_no_nis():
    tr = SimpleNamespace(time_s=T, soc=SOC, soc_sigma=np.full(5, np.nan), soc_ref=REF,
                         innovation_v=np.full(5, np.nan), innovation_var_v2=np.full(5, np.nan),
                         n_gated=0, reseeds=(), method="coulomb", name="tiny")
    m = trace_metrics(tr)
    assert math.isnan(m.nis_mean) and m.nis_verdict == "" and math.isnan(m.inside_3sigma)
    assert m.max_abs_pct == pytest.approx(5.0)


# --- convergence with isolated excursions (definition: DESIGN.md section 4 "time after which the
# error stays within 2 points, apart from isolated excursions"; values below worked by hand)
T1 = np.arange(0.0, 10_000.0, 1.0)  # 1 Hz, 10,000 s


def _error_with(excursion_at: int, excursion_len: int, start_len: int = 30):
    e = np.full(T1.size, 0.005)
    e[:start_len] = 0.20                                       # initial transient, 30 s outside
    e[excursion_at:excursion_at + excursion_len] = -0.035      # one excursion below -2 points
    return e


def test_isolated_excursion_is_forgiven_and_counted():
    e = _error_with(6000, 20)
    # by hand: from t = 30 s, 20 s of 9,969 s outside = 0.2 % <= 1 % -> converged at 30 s
    assert converge_time_s(T1, e) == pytest.approx(30.0)
    # the strict definition (hold = 1) waits for the end of the excursion: sample 6020
    assert converge_time_s(T1, e, hold=1.0) == pytest.approx(6020.0)
    exc = excursions(T1, e, after_s=30.0)
    assert len(exc) == 1
    assert (exc[0].start_s, exc[0].end_s, exc[0].duration_s) == (6000.0, 6020.0, 20.0)
    assert exc[0].peak_pct == pytest.approx(3.5)
    m = error_metrics(T1, 0.5 + e, np.full(T1.size, 0.5))
    assert (m["converge_s"], m["n_excursions"], m["excursion_s"]) == (pytest.approx(30.0), 1, pytest.approx(20.0))


def test_long_excursion_is_not_isolated():
    # 300 s outside: from t = 30 s that is 3.0 % of the rest (> 1 %); the first sample j with at most
    # 1 % of [t_j, 9,999] outside after it is past the excursion (t_j = 6300 s: nothing outside after)
    e = _error_with(6000, 300)
    assert converge_time_s(T1, e) == pytest.approx(6300.0)
    m = error_metrics(T1, 0.5 + e, np.full(T1.size, 0.5))
    assert m["n_excursions"] == 0 and m["excursion_s"] == 0.0


def test_error_outside_at_the_end_never_converges():
    e = _error_with(6000, 20)
    e[-5:] = 0.05  # still outside at the last sample: not an isolated excursion
    assert converge_time_s(T1, e) is None
    m = error_metrics(T1, 0.5 + e, np.full(T1.size, 0.5))
    assert m["converge_s"] is None and m["n_excursions"] is None and m["excursion_s"] is None
    with pytest.raises(ValueError, match="hold"):
        converge_time_s(T1, e, hold=0.0)


def test_p95_matches_the_standard_library():
    # outside reference: Python's statistics.quantiles(method="inclusive") uses the same linear
    # interpolation between order statistics as numpy's default percentile (Hyndman & Fan type 7)
    rng = np.random.default_rng(3)
    err = rng.normal(0.0, 0.01, 2001)
    m = error_metrics(np.arange(err.size, dtype=float), 0.5 + err, np.full(err.size, 0.5))
    ref = statistics.quantiles(np.abs(err).tolist(), n=20, method="inclusive")[18]
    assert m["p95_abs_pct"] == pytest.approx(100.0 * ref, rel=1e-9)
    # by hand on 0, 1, ..., 100 hundredths of a point: the 95th percentile is 95 (sample 95 of 101)
    e = np.arange(101) * 1e-4
    m = error_metrics(np.arange(101, dtype=float), e, np.zeros(101))
    assert m["p95_abs_pct"] == pytest.approx(0.95)


def test_baseline_gets_no_coverage_nis_or_nees_even_with_a_finite_sigma():
    # the coulomb baseline's sigma is a growth law, not a filter posterior: coverage must be blank,
    # not the flattering 100 % a wide sigma gives (issue 17)
    tr = SimpleNamespace(time_s=T, soc=SOC, soc_sigma=np.full(5, 0.5), soc_ref=REF,
                         innovation_v=np.full(5, 0.001), innovation_var_v2=np.full(5, 1e-4),
                         n_gated=0, reseeds=(), method="coulomb", name="tiny")
    m = trace_metrics(tr, soc_true=REF)
    assert math.isnan(m.inside_3sigma) and math.isnan(m.nis_mean) and math.isnan(m.nees_mean)
    tr_ekf = SimpleNamespace(**{**vars(tr), "method": "ekf"})
    assert trace_metrics(tr_ekf).inside_3sigma == 1.0  # same arrays as a filter: 3 x 0.5 covers all
