"""Hypothesis properties of the compiled EKF and baseline on random profiles, intervals and gaps."""
from __future__ import annotations

import numpy as np
from hypothesis import given, settings, strategies as st

from ekf_cases import tiny_model
from socfuse.estimator.filters.coulomb import run_coulomb
from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import run_ekf, setup, temperature_array
from socfuse.estimator.filters.settings import default_settings
from socfuse.models import Recording

MODELS = {"rc1": tiny_model(n_rc=1), "rc2_hyst": tiny_model(n_rc=2, hysteresis=True),
          "temp": tiny_model(n_rc=1, temperature=True)}


@st.composite
def profiles(draw):
    n = draw(st.integers(5, 120))
    seed = draw(st.integers(0, 2 ** 31 - 1))
    rng = np.random.default_rng(seed)
    dt = rng.choice([0.1, 1.0, 3.7, 60.0, 3600.0], size=n - 1, p=[0.3, 0.4, 0.2, 0.08, 0.02])
    t = np.concatenate([[0.0], np.cumsum(dt)])
    amp = draw(st.sampled_from([0.0, 1.0, 10.0, 30.0]))
    i = rng.normal(0.0, 1.0, n) * amp + draw(st.floats(-5.0, 10.0))
    v = rng.uniform(2.4, 4.4, n)  # voltages need not fit the model: the filter must stay sane
    v[rng.random(n) < 0.2] = np.nan
    temp = rng.uniform(-10, 55, n) if draw(st.booleans()) else None
    return Recording(t, i, v, temp)


@settings(max_examples=25, deadline=None)
@given(rec=profiles(), key=st.sampled_from(sorted(MODELS)), bias=st.booleans(),
       soc0=st.one_of(st.none(), st.floats(0.0, 1.0)), gate=st.sampled_from([0.0, 3.0]))
def test_ekf_stays_finite_spd_and_in_range(rec, key, bias, soc0, gate):
    m = MODELS[key]
    s = default_settings(m).with_(estimate_bias=bias, gate_sigma=gate)
    if np.all(np.isnan(rec.voltage_v)) and soc0 is None:
        soc0 = 0.5
    tr = run_ekf(m, rec, s, soc0, store_covariance=True)
    # no NaN leaves the filter (innovation is NaN only where the voltage is missing)
    assert np.all(np.isfinite(tr.states)) and np.all(np.isfinite(tr.soc_sigma))
    assert np.all(np.isfinite(tr.voltage_pred_v)) and np.all(np.isfinite(tr.innovation_var_v2))
    # (a voltage outside the operating envelope, kernels.ST_ENVELOPE: a temperature outside the
    # tables' margin, or within 0.1 V of the cut-off, is not used either)
    prm = setup(m, s).prm
    temp = temperature_array(rec)
    outside = ~((temp >= prm[K.P_TENV_LO]) & (temp <= prm[K.P_TENV_HI])) | (rec.voltage_v < m.v_min_v + 0.1)
    assert np.array_equal(np.isnan(tr.innovation_v), np.isnan(rec.voltage_v) | outside)
    assert np.all((tr.soc >= s.soc_min) & (tr.soc <= s.soc_max))
    p = tr.covariance
    assert np.array_equal(p, np.transpose(p, (0, 2, 1)))  # symmetrised after every update
    # positive definite (the zero-variance hysteresis row of a deterministic h excluded)
    keep = [j for j, nm in enumerate(tr.state_names) if nm != "hyst" or s.estimate_hysteresis]
    eig = np.linalg.eigvalsh(p[:, keep][:, :, keep])
    assert np.all(eig > 0)
    assert 0 <= tr.n_gated <= rec.n


@settings(max_examples=25, deadline=None)
@given(rec=profiles(), key=st.sampled_from(sorted(MODELS)))
def test_baseline_stays_finite_and_in_range(rec, key):
    m = MODELS[key]
    tr = run_coulomb(m, rec, default_settings(m).with_(rest_min_s=30.0), soc0=0.5)
    assert np.all(np.isfinite(tr.soc)) and np.all(np.isfinite(tr.soc_sigma))
    assert np.all((tr.soc >= 0.0) & (tr.soc <= 1.0))
    assert all(np.isfinite(r).all() and 0 <= r[2] <= 1 for r in tr.reseeds)
