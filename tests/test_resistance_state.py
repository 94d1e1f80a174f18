"""The series-resistance scale state: a cell whose R0 is not the model's.

Reference: the simulator's own truth (models.simulate, itself checked against scipy's solve_ivp in
tests/test_thevenin.py) for a cell whose series resistance is 1.4 times the model's, the situation
of a cold cell whose core runs warmer than its sensor, or of an aged one.  The filter with the state
must find the resistance (r near 0.4) and keep SOC closer to the truth than the same filter without
it; the joint estimation of a parameter in the state vector follows Plett, J. Power Sources 134
(2004) 277-292, part 3 (cited from memory).  The filterpy comparison of every step with the state on
is tests/test_ekf_filterpy.py (default settings).
"""
from __future__ import annotations

import numpy as np

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters.run import estimate
from socfuse.estimator.filters.settings import default_settings
from socfuse.models import ParamTable


def _cells():
    model = tiny_model(n_rc=2)
    truth = model.with_(r0_ohm=ParamTable(model.r0_ohm.soc, 1.4 * np.asarray(model.r0_ohm.values), None, "r0_ohm"))
    rec, _ = simulated_recording(truth, n=3600, soc0=0.8, seed=11)
    return model, rec


def test_resistance_scale_found_and_soc_kept():
    model, rec = _cells()
    s = default_settings(model)
    assert s.estimate_resistance and s.p0_resistance == 0.1
    on = estimate(model, rec, "ekf", s, soc0=0.8)
    off = estimate(model, rec, "ekf", s.with_(estimate_resistance=False), soc0=0.8)
    k = on.state_names.index("r0_scale")
    # the true scale is 1.4: the state settles within 0.1 of r = 0.4 over the last half hour
    assert abs(np.median(on.states[1800:, k]) - 0.4) < 0.1, np.median(on.states[1800:, k])
    rmse_on = float(np.sqrt(np.mean(on.soc_error ** 2)))
    rmse_off = float(np.sqrt(np.mean(off.soc_error ** 2)))
    assert rmse_on < rmse_off, (rmse_on, rmse_off)
    assert rmse_on < 0.01, rmse_on
    # its sigma covers its error (true SOC inside +-3 sigma)
    assert np.mean(np.abs(on.soc_error) <= 3 * on.soc_sigma) >= 0.95


def test_resistance_scale_stays_near_zero_on_a_matching_cell():
    model = tiny_model(n_rc=2)
    rec, _ = simulated_recording(model, n=3600, soc0=0.8, seed=12)
    tr = estimate(model, rec, "ekf", default_settings(model), soc0=0.8)
    k = tr.state_names.index("r0_scale")
    assert abs(np.median(tr.states[1800:, k])) < 0.05
