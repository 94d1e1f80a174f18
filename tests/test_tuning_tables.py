"""``tune`` builds the kernel tables once for all its evaluations, with results identical to rebuilding them."""
from __future__ import annotations

import numpy as np

from ekf_cases import drive_profile
from socfuse.estimator.analysis import tuning
from socfuse.estimator.filters.settings import default_settings
from socfuse.estimator.filters.tables import KernelTables
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate


def _case():
    # invented cell for the test: R0 10 mohm, one RC pair 40 mohm / 30 s, a curved OCV
    soc = np.linspace(0.0, 1.0, 11)
    model = CellModel(4.8, OcvCurve(soc, 3.0 + 1.0 * soc + 0.25 * soc ** 2), ParamTable.constant(0.01, "r0_ohm"),
                      (RcPair(ParamTable.constant(0.04, "r1_ohm"), ParamTable.constant(30.0, "tau1_s")),), 1.0,
                      name="tables test cell")
    t, i = drive_profile(4000, 3)
    i = i - i.mean() + 0.4
    sim = simulate(model, t, i, soc0=0.9)
    rng = np.random.default_rng(4)
    rec = Recording(t, i + rng.normal(0.0, 0.1, t.size), sim.voltage_v + rng.normal(0.0, 0.004, t.size),
                    soc_ref=sim.soc, name="sim")
    return model, rec


def _run(model, rec):
    return tuning.tune(model, rec, default_settings(model), params=("voltage_noise_v", "q_soc_per_s"),
                       max_evaluations=25)


def test_tune_builds_tables_once_and_results_are_identical(monkeypatch):
    model, rec = _case()
    built = []
    orig = KernelTables.from_model.__func__

    def counting(cls, m, n_soc=401):
        built.append(n_soc)
        return orig(cls, m, n_soc)

    monkeypatch.setattr(KernelTables, "from_model", classmethod(counting))
    reused = _run(model, rec)
    n_reused = len(built)
    # the same search with the tables rebuilt by every evaluation (what tune did before)
    plain = tuning.ekf_raw
    monkeypatch.setattr(tuning, "ekf_raw", lambda *a, tables=None, **k: plain(*a, **k))
    built.clear()
    rebuilt = _run(model, rec)
    assert n_reused == 1
    assert len(built) >= len(rebuilt.history) > 1      # one build per new setting (the setup cache misses)
    assert reused.settings == rebuilt.settings
    assert reused.history == rebuilt.history           # every objective value bit for bit
    assert reused.holdout_before == rebuilt.holdout_before and reused.holdout_after == rebuilt.holdout_after
    assert reused.transfer == rebuilt.transfer
