"""Monte Carlo tolerance study: reproducibility, percentiles, offset sweep."""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.analysis.montecarlo import (MonteCarloError, Tolerances, run_tolerance, sweep, tolerance_figure,
                                  tolerance_study)
from socfuse.estimator.filters.settings import default_settings


@pytest.fixture(scope="module")
def case():
    model = tiny_model(n_rc=1)
    rec, _ = simulated_recording(model, n=2400, soc0=0.8, noise_v=0.002)
    settings = default_settings(model).with_(reseed=False)
    return model, rec, settings


def test_reproducible_and_percentiles(case):
    model, rec, s = case
    a = run_tolerance(model, rec, s, n_runs=50, seed=7, skip_s=300)
    b = run_tolerance(model, rec, s, n_runs=50, seed=7, skip_s=300, chunk=16)  # chunking must not matter
    c = run_tolerance(model, rec, s, n_runs=50, seed=8, skip_s=300)
    d = run_tolerance(model, rec, s, n_runs=50, seed=7, skip_s=300)
    for m in ("ekf", "coulomb"):
        np.testing.assert_array_equal(a.max_abs_error[m], d.max_abs_error[m])
        np.testing.assert_allclose(a.max_abs_error[m], b.max_abs_error[m], rtol=0, atol=0)
        assert not np.allclose(a.max_abs_error[m], c.max_abs_error[m])
        assert a.percentile(m, 95) >= a.percentile(m, 50) > 0
    # draws lie in the tolerance ranges
    tol = Tolerances()
    assert np.all(np.abs(a.offset_a) <= tol.current_offset_a) and np.all(np.abs(a.gain) <= tol.current_gain)
    assert np.all(np.abs(a.capacity_scale - 1) <= tol.capacity)
    df = a.to_frame()
    assert len(df) == 50 and {"max_abs_pct_ekf", "max_abs_pct_coulomb"} <= set(df.columns)


def test_coulomb_offset_sweep_matches_charge_arithmetic():
    model = tiny_model(n_rc=1, eta=1.0)  # unit coulombic efficiency: the drift is pure offset arithmetic
    rec, _ = simulated_recording(model, n=2400, soc0=0.8, noise_v=0.002)
    s = default_settings(model).with_(reseed=False)
    only_offset = Tolerances(current_offset_a=0.0, current_gain=0.0, voltage_noise_v=0.0, initial_soc_error=0.0,
                             capacity=0.0)
    grid = np.array([0.0, 0.05, 0.1, 0.2])
    res = sweep(model, rec, "current_offset_a", grid, s, only_offset, n_runs=50, seed=3, methods=("coulomb",),
                budget=0.005, skip_s=0.0)
    p95 = res.p95["coulomb"]
    assert np.all(np.diff(p95) > 0)  # a larger offset gives a larger P95 (monotone sanity)
    # coulomb counting with a constant offset o drifts by o * T / (3600 Q) (1 Ah = 3600 C, common
    # practice, no source); with o uniform in +-x the P95 of |o| is 0.95 x (uniform distribution)
    drift = rec.duration_s / (3600.0 * model.capacity_ah)
    u95 = np.percentile(np.abs(np.random.default_rng(3).uniform(-1, 1, (4, 50))[0]), 95)
    np.testing.assert_allclose(p95, grid * drift * u95, rtol=1e-6, atol=1e-9)
    assert res.p95["coulomb"][0] == pytest.approx(0.0, abs=1e-12)
    lim = res.limit["coulomb"]
    assert res.limit_reached["coulomb"] and lim == pytest.approx(0.005 / (drift * u95), rel=1e-6)
    assert len(res.to_frame()) == 4


def test_study_summary_and_errors(case):
    model, rec, s = case
    st = tolerance_study(model, rec, s, n_runs=50, seed=1, offset_grid=[0.0, 0.1], gain_grid=[], sweep_runs=20,
                         skip_s=300)
    assert [sw.knob for sw in st.sweeps] == ["current_offset_a"]
    df = st.to_frame()
    assert list(df["method"]) == ["ekf", "coulomb"] and (df["p95_pct"] >= df["p50_pct"]).all()
    assert "P95" in st.describe()
    fig = tolerance_figure(st)
    assert len(fig.axes) == 2
    with pytest.raises(MonteCarloError, match="soc_ref"):
        run_tolerance(model, rec.with_(soc_ref=None), s, n_runs=2)
    with pytest.raises(MonteCarloError):
        Tolerances(current_offset_a=-1.0)
    with pytest.raises(MonteCarloError, match="method"):
        run_tolerance(model, rec, s, n_runs=2, methods=("psychic",))
