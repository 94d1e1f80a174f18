"""The drive-cycle refinement changes a model only where the recording speaks for it.

A 0 degC drive cannot say anything about a model's 25 degC resistance, a drive that never goes
below 50 % SOC says nothing about the low-SOC end, and near the discharge cut-off an
equivalent-circuit model misses the diffusion-limited collapse (common practice, no source).
Before, ``refine_model`` scaled every temperature row and every SOC breakpoint by the same
multipliers and fitted the samples next to the cut-off; on the Panasonic 18650PF cold drives that
moved the 25 degC tables and inflated R0 over the whole low-SOC end.

The references: a model with known parameters simulated by ``models.simulate`` (the closed-form
sampling rule of the Thevenin model) gives the recordings, so the fitted multipliers can be checked
against the known truth (method of manufactured solutions); the fit itself is scipy's
``least_squares`` (Levenberg-Marquardt, MINPACK).
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import drive_profile
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate
from socfuse.models.identify.refine import refine_model

SOC = np.linspace(0.0, 1.0, 11)
TEMPS = np.array([0.0, 25.0])


def two_temperature_model(r0_scale_0c: float = 1.0) -> CellModel:
    """An invented 2.9 Ah cell with 0 and 25 degC rows; ``r0_scale_0c`` multiplies its 0 degC R0."""
    ocv = OcvCurve(SOC, np.tile(3.0 + 1.0 * SOC + 0.2 * SOC ** 2, (2, 1)), TEMPS)
    r0 = np.vstack([(0.080 - 0.02 * SOC) * r0_scale_0c, 0.040 - 0.01 * SOC])
    pairs = (RcPair(ParamTable(SOC, np.vstack([0.03 + 0 * SOC, 0.015 + 0 * SOC]), TEMPS, "r1_ohm"),
                    ParamTable(SOC, np.vstack([30.0 + 0 * SOC, 20.0 + 0 * SOC]), TEMPS, "tau1_s")),)
    return CellModel(2.9, ocv, ParamTable(SOC, r0, TEMPS, "r0_ohm"), pairs, 1.0, None, v_min_v=2.8,
                     name="two-temperature cell (invented)")


def cold_drive(truth: CellModel, n: int = 3600, soc0: float = 0.95, scale: float = 0.6, seed: int = 5):
    t, i = drive_profile(n, seed=seed)
    i = scale * i
    sim = simulate(truth, t, i, temperature_c=np.zeros(n), soc0=soc0)
    v = sim.voltage_v + np.random.default_rng(seed).normal(0.0, 0.001, n)
    return Recording(t, i, v, np.zeros(n), sim.soc, name="0 degC drive (simulated)")


def test_a_cold_drive_scales_the_cold_row_only_and_recovers_it():
    start = two_temperature_model(1.0)
    truth = two_temperature_model(1.4)               # the cold R0 is 40 % higher than the pulse test said
    rec = cold_drive(truth)
    r = refine_model(start, rec, soc0=0.95)
    assert r.rms_after_v < 0.5 * r.rms_before_v
    assert r.fit_rms_after_v < 0.5 * r.rms_before_v and r.as_dict()["fit_rms_after_v"] == r.fit_rms_after_v
    # the 25 degC rows are the pulse test's, bit for bit: the drive never ran there
    for new, old in ((r.model.r0_ohm, start.r0_ohm), (r.model.rc[0].r_ohm, start.rc[0].r_ohm),
                     (r.model.rc[0].tau_s, start.rc[0].tau_s)):
        np.testing.assert_array_equal(new.values[1], old.values[1])
    assert r.temperature_rows["r0_ohm"] == [0.0]
    # where the drive spent its time the cold R0 comes back near the truth (manufactured solution)
    soc = rec.soc_ref
    visited = (SOC > soc.min() + 0.1) & (SOC < soc.max() - 0.1)
    assert visited.sum() >= 2
    ratio = r.model.r0_ohm.values[0, visited] / start.r0_ohm.values[0, visited]
    np.testing.assert_allclose(ratio, 1.4, rtol=0.10)


def test_unvisited_breakpoints_keep_their_values_and_multipliers_are_bounded():
    start = two_temperature_model(1.0)
    truth = two_temperature_model(4.0)               # far beyond the clip: the fit may not follow
    rec = cold_drive(truth, n=2400, soc0=0.95, scale=0.3)
    r = refine_model(start, rec, soc0=0.95)
    lo = rec.soc_ref.min()
    for key, m in r.multipliers.items():
        m = np.asarray(m)
        assert np.all(m <= np.e * (1 + 1e-12)) and np.all(m >= np.exp(-1.0) * (1 - 1e-12)), key
        # breakpoints more than one grid step below the lowest SOC visited get no weight at all
        far = SOC < lo - 0.1
        assert far.any()
        np.testing.assert_array_equal(m[far], 1.0)
    np.testing.assert_array_equal(r.model.r0_ohm.values[0, SOC < lo - 0.1], start.r0_ohm.values[0, SOC < lo - 0.1])


def test_the_samples_near_the_cut_off_are_not_fitted():
    start = two_temperature_model(1.0)
    truth = two_temperature_model(1.3)
    # a long, heavier drive from 60 % SOC runs down to the cut-off margin
    rec = cold_drive(truth, n=5400, soc0=0.6, scale=0.8, seed=7)
    r = refine_model(start, rec, soc0=0.6)
    low = (rec.soc_ref < 0.10) | (rec.voltage_v < start.v_min_v + 0.10)
    assert low.any()
    assert r.fitted_share == pytest.approx(1.0 - low.mean(), abs=1e-12)
    # a recording with nothing left to fit is refused with its name, not fitted on noise
    flat = Recording(rec.time_s[:50], rec.current_a[:50], np.full(50, 2.85), np.zeros(50), name="at the cut-off")
    with pytest.raises(ValueError, match="at the cut-off"):
        refine_model(start, flat, soc0=0.05)


def test_a_model_that_already_explains_the_drive_comes_back_unchanged():
    # the truth itself refined on its own (1 mV noise) drive: nothing to fit, the tables are kept
    truth = two_temperature_model(1.0)
    rec = cold_drive(truth)
    r = refine_model(truth, rec, soc0=0.95)
    assert not r.refined and r.model is truth
    assert "not refined" in r.message and r.as_dict()["refined"] is False
    assert r.rms_after_v == r.rms_before_v < 0.002
    # the same drive with the threshold off is fitted (and stays near the truth)
    r2 = refine_model(truth, rec, soc0=0.95, min_rms_v=0.0)
    assert r2.refined
    np.testing.assert_allclose(r2.model.r0_ohm.values[0], truth.r0_ohm.values[0], rtol=0.10)
