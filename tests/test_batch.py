"""Cross-cell batch EKF (estimator.filters.batch) against the single-stream kernel and filterpy."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters.batch import run_ekf_cells
from socfuse.estimator.filters.ekf import initial_soc, run_ekf, run_ekf_batch_raw, run_ekf_store, setup
from socfuse.estimator.filters.settings import default_settings
from socfuse.models.loaders import load_recording

REPO = Path(__file__).resolve().parents[1]


def _recordings():
    """Three short recordings of different kinds: a demo day, the cold day, and one with missing
    voltages, outliers the gate refuses, a start at full charge that hits the SOC limit
    (projection), a 10 min logging gap and samples outside the model's temperature envelope."""
    day = load_recording(REPO / "datasets" / "c48_day_lunch.csv").slice(0, 1500)
    cold = load_recording(REPO / "datasets" / "c48_day_cold.csv").slice(300, 1300)
    bad = load_recording(REPO / "datasets" / "c48_day_long.csv").slice(0, 900)
    v = bad.voltage_v.copy()
    v[[10, 11, 400]] = np.nan
    v[200:203] += 0.4          # three outliers in a row: gated, then released
    i = bad.current_a.copy()
    i[:60] = -4.0              # charging from full: SOC above 1 -> projection
    t = bad.time_s.copy()
    t[600:] += 600.0           # a logging gap
    temp = np.array(bad.temperature_c, dtype=float)
    temp[700:720] = 90.0       # far outside the tables: predict only
    return [day, cold, bad.with_(voltage_v=v, current_a=i, time_s=t, temperature_c=temp)]


def _check_cell(res, c, tr):
    n = tr.n
    # the single-stream kernel is the reference (itself checked against filterpy, tests/test_ekf_filterpy.py)
    np.testing.assert_allclose(res.states[:n, c], tr.states, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.soc_sigma[:n, c], tr.soc_sigma, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.voltage_pred_v[:n, c], tr.voltage_pred_v, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.innovation_v[:n, c], tr.innovation_v, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res.innovation_var_v2[:n, c], tr.innovation_var_v2, rtol=1e-12, atol=0)
    assert res.n_gated[c] == tr.n_gated
    assert np.all(np.isnan(res.soc[n:, c]))


@pytest.mark.parametrize("bias", [True, False])
def test_cells_equal_single_stream(bias):
    from socfuse.estimator.demo.truth import truth_cell_model

    model = truth_cell_model()
    s = default_settings(model).with_(estimate_bias=bias, model_error_adapt_s=120.0 if bias else 0.0)
    recs = _recordings()
    cells = [recs[0], recs[1], recs[2], recs[0], recs[2]]
    soc0s = [None, 0.6, 1.0, 0.9, None]
    res = run_ekf_cells(model, cells, s, soc0s, keep="all", block=2)   # blocks of 2: a partial last block
    for c in range(3):
        _check_cell(res, c, run_ekf(model, cells[c], s, soc0s[c]))
    assert res.n_gated[2] > 0                      # the outliers were gated ...
    assert np.nanmax(res.soc[:, 2]) <= s.soc_max   # ... and the SOC limit held (projection)
    # the gap handling ran (without it the state after the gap differs)
    no_gap = run_ekf(model, cells[2], s.with_(gap_s=0.0), soc0s[2])
    assert s.gap_s > 0 and abs(no_gap.soc_sigma[600] - res.soc_sigma[600, 2]) > 1e-4
    # capacity scales: the same as the recording-parallel kernel with the same scales
    scales = np.array([1.0, 0.97, 1.04, 1.02, 0.95])
    res2 = run_ekf_cells(model, cells, s, soc0s, scales, keep="all", block=3)
    raw = run_ekf_batch_raw(model, cells, s, soc0s, scales)
    off = raw["offsets"]
    for c in range(len(cells)):
        a, b = off[c], off[c + 1]
        np.testing.assert_allclose(res2.states[:b - a, c], raw["states"][a:b], rtol=0, atol=1e-12)
        np.testing.assert_allclose(res2.soc_sigma[:b - a, c], raw["soc_sigma"][a:b], rtol=0, atol=1e-12)
        np.testing.assert_allclose(res2.final_state[c], raw["states"][b - 1], rtol=0, atol=1e-12)
        assert res2.n_gated[c] == raw["n_gated"][c]
    # keep="final" gives the same end state
    res3 = run_ekf_cells(model, cells, s, soc0s, scales, keep="final")
    np.testing.assert_allclose(res3.final_state, res2.final_state, rtol=0, atol=1e-12)
    np.testing.assert_allclose(res3.final_covariance, res2.final_covariance, rtol=1e-12, atol=1e-18)
    assert res3.soc is None


def test_cell_matches_filterpy():
    from test_ekf_filterpy import _filterpy_run

    m = tiny_model(n_rc=2)
    s = default_settings(m).with_(gate_sigma=0.0, soc_min=-1.0, soc_max=2.0, estimate_bias=True,
                                  q_rc_v2_per_s=1e-6, model_error_adapt_s=0.0, gap_s=0.0)
    rec, _ = simulated_recording(m, n=400, soc0=0.7, uneven=True, seed=4)
    su = setup(m, s)
    _, (_, p_prior, _) = run_ekf_store(m, rec, s, soc0=0.65)
    x0 = np.zeros(su.n_x)
    x0[0] = initial_soc(su, rec, 0.65)[0]
    xs, ps = _filterpy_run(m, su, rec, x0, p_prior[0])
    res = run_ekf_cells(m, [rec, rec], s, 0.65, keep="all")
    # filterpy 2.0 ExtendedKalmanFilter (Joseph form) as the outside reference, 1e-9 as in test_ekf_filterpy
    np.testing.assert_allclose(res.states[:, 1], xs, rtol=0, atol=1e-9)
    np.testing.assert_allclose(res.final_covariance[1], ps[-1], rtol=1e-9, atol=1e-15)


def test_bad_arguments():
    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=50)
    with pytest.raises(ValueError, match="keep"):
        run_ekf_cells(m, [rec], keep="everything")
    with pytest.raises(ValueError, match="capacity_scales"):
        run_ekf_cells(m, [rec, rec], capacity_scales=[1.0, -1.0])
    with pytest.raises(ValueError, match="soc0"):
        run_ekf_cells(m, [rec, rec], soc0s=[0.5])


_NOJIT = r"""
import numpy as np, sys
sys.path.insert(0, sys.argv[1])
from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters.batch import run_ekf_cells
from socfuse.estimator.filters.ekf import run_ekf
from socfuse.estimator.filters.settings import default_settings
m = tiny_model(n_rc=2, hysteresis=True)
s = default_settings(m)
a, _ = simulated_recording(m, n=120, soc0=0.7, seed=1)
b, _ = simulated_recording(m, n=90, soc0=0.4, seed=2)
res = run_ekf_cells(m, [a, b, a], s, [None, 0.5, 0.72], keep="all", block=2)
err = 0.0
for c, (r, z) in enumerate([(a, None), (b, 0.5), (a, 0.72)]):
    tr = run_ekf(m, r, s, z)
    err = max(err, float(np.max(np.abs(res.states[:r.n, c] - tr.states))))
print(err)
"""


def test_pure_python_run():
    # the same code as plain Python (NUMBA_DISABLE_JIT=1): equal to the single-stream kernel run the same way
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    out = subprocess.run([sys.executable, "-c", _NOJIT, str(REPO / "tests")], env=env, capture_output=True,
                         text=True, cwd=REPO, timeout=300)
    assert out.returncode == 0, out.stderr[-2000:]
    assert float(out.stdout.strip().splitlines()[-1]) <= 1e-12
