"""Samples outside the model's operating envelope are flagged and not extrapolated (issue 16, item 2).

Before: a -40 degC recording against tables over 5-25 degC ended 37 points wrong with a sigma of
0.23 points.  A voltage measured more than ``ENVELOPE_MARGIN_C`` outside the model's temperature
tables is now not used (predict only, ``ST_ENVELOPE``): the filter counts and its sigma grows.
Truth: a cell whose resistance is four times and whose OCV is 60 mV below the model's (as a cold
cell's is), simulated by models.simulate (the closed-form truth of this check).
"""
from __future__ import annotations

import numpy as np

from ekf_cases import drive_profile, tiny_model
from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.run import estimate
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate


def _cold_truth(m):
    soc = np.linspace(0.0, 1.0, 11)
    return CellModel(m.capacity_ah, OcvCurve(soc, m.ocv.voltage(soc, 25.0) - 0.06),
                     ParamTable(soc, 4 * m.r0_ohm.at(soc, 25.0), None, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.06, "r1"), ParamTable.constant(30.0, "t1")),), 0.99, None,
                     name="cold truth")


def test_far_outside_the_temperature_tables_the_filter_counts():
    m = tiny_model(n_rc=1, temperature=True)            # tables over 5..45 degC
    t, i = drive_profile(3000, seed=5)
    sim = simulate(_cold_truth(m), t, i, soc0=0.8)
    v = sim.voltage_v + np.random.default_rng(3).normal(0, 0.002, t.size)
    cold = Recording(t, i, v, np.full(t.size, -40.0), sim.soc, name="-40 degC")
    tr = estimate(m, cold, "ekf", soc0=0.8)
    assert np.all(tr.status[1:] & K.ST_ENVELOPE)        # every sample with a voltage is flagged
    e = np.abs(tr.soc - cold.soc_ref)
    assert e.max() < 0.01                               # counting from a right start stays right
    assert np.all(e <= 3 * tr.soc_sigma)
    # the same log labelled 15 degC (inside the tables): the filter believes the voltage of a cell
    # it does not describe and ends far off - what the envelope rule prevents
    warm = cold.with_(temperature_c=np.full(t.size, 15.0))
    tw = estimate(m, warm, "ekf", soc0=0.8)
    assert not np.any(tw.status & K.ST_ENVELOPE)
    assert np.abs(tw.soc - warm.soc_ref).max() > 0.05
