"""Metrics on a tiny trace against values computed by hand, and the chi-square bands against scipy."""
from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from socfuse.estimator.analysis.metrics import converge_time_s, error_metrics, trace_metrics

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
