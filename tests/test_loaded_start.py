"""Start from a first sample taken under load (issue 13, item 6): estimator.filters.run.loaded_start.

Known answers from the Thevenin terminal-voltage equation ``v = OCV(z) - R0 i - sum_j v_j``
(Hu, Li, Peng, J. Power Sources 198 (2012) 359-367, the equivalent-circuit model): a load that has
just begun leaves the RC voltages at 0, so ``OCV = v + R0 i``; a load held for many time constants
brings them to ``R_j i``, so ``OCV = v + (R0 + sum R_j) i``.  The true SOC must lie inside the read
interval and inside +-3 sigma of the start either way.  On real data: the Panasonic 18650PF 0 degC
drive cycles (Kollmeyer, Mendeley Data 2018, doi:10.17632/wykht8y7tg.1, CC BY 4.0) start from a
relaxed full cell with the first sample already under load (cold/SOURCE.md).
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import tiny_model
from socfuse.estimator.filters.run import estimate, loaded_start
from socfuse.models import Recording
from socfuse.models.thevenin import simulate


def _loaded(model, z_true, hold_s, current_a=9.6, n=200):
    """A constant discharge of ``current_a`` from rest at ``z_true`` + the charge it takes; the
    recording starts ``hold_s`` after the load began (0 = at the load step)."""
    t = np.arange(0.0, hold_s + n, 1.0)
    i = np.full(t.size, current_a)
    q0 = z_true + current_a * hold_s / (3600.0 * model.capacity_ah)  # SOC before the load
    sim = simulate(model, t, i, 25.0, soc0=q0)
    k = int(hold_s)
    return Recording(t[k:] - t[k], i[k:], sim.voltage_v[k:], np.full(t.size - k, 25.0), sim.soc[k:], name="loaded")


@pytest.mark.parametrize("hold_s", [0.0, 4000.0, 60.0])
def test_true_soc_inside_the_start_interval(hold_s):
    m = tiny_model(n_rc=2)
    rec = _loaded(m, 0.55, hold_s)
    z, sig = loaded_start(m, rec)
    # RC voltages 0 (hold 0), at steady state (4000 s = 10 tau of the slow 400 s pair) or between
    # (60 s): the start is the middle of the read interval, which holds the true SOC
    half_width = 3.0 ** 0.5 * sig
    assert abs(z - rec.soc_ref[0]) <= half_width + 1e-3
    assert abs(z - rec.soc_ref[0]) <= 3.0 * sig
    # width: (R1 + R2) * I / slope = 0.025 ohm * 9.6 A / ~1.27 V per unit SOC at 55 % = ~0.19
    assert 0.03 < sig < 0.12


def test_rested_first_sample_keeps_the_ocv_rule():
    m = tiny_model(n_rc=2)
    rec = _loaded(m, 0.55, 0.0)
    rested = rec.with_(current_a=np.where(np.arange(rec.n) == 0, 0.0, rec.current_a))
    assert loaded_start(m, rested) is None  # |i| <= rest_current_a: the filters' own rule


def test_full_cell_under_load_starts_full_with_a_small_sigma():
    # a relaxed full cell whose first sample already carries the load: v + R0 i is above the OCV at
    # SOC 1, so both ends of the interval clip to 1 and only the voltage part of the sigma is left
    m = tiny_model(n_rc=2)
    v_full = float(m.ocv.voltage(1.0))
    t = np.arange(0.0, 100.0)
    rec = Recording(t, np.full(t.size, 4.8), np.full(t.size, v_full), None, None, name="full")
    z, sig = loaded_start(m, rec)
    assert z == pytest.approx(1.0)
    assert sig < 0.03


def _cold_like_model():
    """tiny_model with the series resistance of a cold cell (R0 80 mOhm) and small RC pairs."""
    from dataclasses import replace

    from socfuse.models import ParamTable, RcPair

    m = tiny_model(n_rc=2)
    pairs = (RcPair(ParamTable.constant(0.010, "r1_ohm"), ParamTable.constant(30.0, "tau1_s")),
             RcPair(ParamTable.constant(0.005, "r2_ohm"), ParamTable.constant(400.0, "tau2_s")))
    return replace(m, r0_ohm=ParamTable.constant(0.08, "r0_ohm"), rc=pairs)


def test_wrong_handover_under_load_is_caught_by_the_loaded_read():
    # a hand-over 30 points off, first sample under a 7.5 A load after a long hold: the loaded
    # read (R0 i known up to the resistance error, RC voltages in [0, sum R_j i]) disagrees beyond
    # the combined spread, so the start sigma is widened and the start moves towards the read
    # (covariance matching, Mehra 1972, from memory); a hand-over that agrees is left as given;
    # the baseline keeps counting from the given SOC (it is not a filter)
    from socfuse.estimator.filters.run import prepare

    m = _cold_like_model()
    rec = _loaded(m, 0.55, 4000.0, current_a=7.5)
    truth = float(rec.soc_ref[0])
    _, s, z, _ = prepare(m, rec, None, truth + 0.30)
    assert s.p0_soc > 0.2 and abs(z - truth) < 0.25
    _, s_ok, z_ok, _ = prepare(m, rec, None, truth)
    assert z_ok == truth and s_ok.p0_soc == pytest.approx(0.02)
    _, s_base, z_base, _ = prepare(m, rec, None, truth + 0.30, check_handover=False)
    assert z_base == truth + 0.30 and s_base.p0_soc == pytest.approx(0.02)
    ekf = estimate(m, rec, "ekf", soc0=truth + 0.30)
    assert np.all(np.abs(ekf.soc - rec.soc_ref) <= 3.0 * ekf.soc_sigma)
    base = estimate(m, rec, "coulomb", soc0=truth + 0.30)
    assert base.soc[0] == pytest.approx(truth + 0.30, abs=1e-2)


# ---------------------------------------------------------------------------- real data, 0 degC
@pytest.fixture(scope="module")
def cold_model(realdata):
    from socfuse.models.identify.pipeline import identify
    from socfuse.models.loaders import load_recording

    pre = "panasonic-18650pf"
    c20 = load_recording(realdata / "c20_ocv_and_1c_start_of_tests" / "05-08-17_13.26 C20 OCV Test_C20_25dC.mat",
                         preset=pre)
    p25 = load_recording(realdata / "hppc" / "03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat", preset=pre)
    p0 = load_recording(sorted((realdata / "cold" / "0degC" / "hppc").glob("*HPPC*.mat"))[0], preset=pre)
    return identify(c20, [p25, p0]).model


def test_cold_drive_cycle_start_does_not_jump(realdata, cold_model):
    from socfuse.models.loaders import load_recording

    f = sorted((realdata / "cold" / "0degC" / "drive_cycles").glob("*Cycle_2*.mat"))[0]
    rec = load_recording(f, preset="panasonic-18650pf", ref_soc0=1.0, ref_capacity_ah=cold_model.capacity_ah)
    assert rec.current_a[0] > 1.0  # the dataset's first sample is under load (about 2.7 A)
    early = rec.time_s - rec.time_s[0] <= 600.0
    for method in ("ekf", "coulomb"):
        tr = estimate(cold_model, rec, method)
        err = tr.soc[early] - rec.soc_ref[early]
        # before item 6 the EKF fell to 0.78 within 2 s (22 points) and was still 9 points low at 200 s
        assert np.max(np.abs(err)) < 0.03, method
        assert abs(tr.soc[0] - 1.0) <= 3.0 * tr.soc_sigma[0] and tr.soc_sigma[0] < 0.05


def test_cold_drive_cycle_below_the_identified_range_counts_charge(realdata, cold_model):
    # the 0 degC pulse test stops at about 17.5 % SOC (its last level; the cell reaches 2.5 V in the
    # next pulses), the 25 degC one near 7.6 % (the dataset); on the 0 degC Cycle_2 the voltage
    # collapses from about 25 % SOC on the 25 degC scale (reference: the cycler's Ah counter over the
    # 25 degC C/20 capacity, cold/SOURCE.md).  Leaving those voltages out keeps the end of the
    # cycle within a few points; before, the EKF ended 11-13 points low with a sigma of 0.1 point.
    from socfuse.estimator.filters.kernels import ST_ENVELOPE
    from socfuse.models.loaders import load_recording

    rng = cold_model.provenance["pulse_soc_range"]
    lo = dict(zip([round(t) for t in rng["temperatures_c"]], rng["soc_min"]))
    assert lo[1] > lo[26] + 0.05
    f = sorted((realdata / "cold" / "0degC" / "drive_cycles").glob("*Cycle_2*.mat"))[0]
    rec = load_recording(f, preset="panasonic-18650pf", ref_soc0=1.0, ref_capacity_ah=cold_model.capacity_ah)
    tr = estimate(cold_model, rec, "ekf")
    err = tr.soc - rec.soc_ref
    tail = rec.time_s >= rec.time_s[-1] - 600.0
    print("0 degC Cycle_2 EKF RMSE %.2f %%, last 600 s max %.2f, coverage %.2f, envelope %.1f %%" % (
        100 * np.sqrt(np.mean(err ** 2)), 100 * np.max(np.abs(err[tail])), np.mean(np.abs(err) <= 3 * tr.soc_sigma),
        100 * np.mean((tr.status & ST_ENVELOPE) != 0)))
    assert np.any(tr.status[tail] & ST_ENVELOPE)
    assert np.max(np.abs(err[tail])) < 0.03
    assert np.sqrt(np.mean(err ** 2)) < 0.025


def test_cold_wrong_handover_under_load_recovers_faster(realdata, cold_model):
    # the benchmark's wrong start (benchmarks/generalisation.py): the 0 degC US06 cut at the first
    # sample under load (|I| >= C/5) after 40 % of its duration, handed over 30 points low.  Checked
    # against the loaded read the hand-over's sigma is widened at once; with the filters' own read
    # (R0-corrected, half the RC steady state as sigma) the 0.02 prior stands and the filter needs
    # most of the drive to walk back (measured 2026-12-02: RMSE from 600 s after the hand-over
    # 8.9 -> 5.3 points with the 25/10/0 degC model of the benchmark)
    from socfuse.estimator.filters.ekf import run_ekf
    from socfuse.estimator.filters.run import prepare
    from socfuse.models.loaders import load_recording

    f = sorted((realdata / "cold" / "0degC" / "drive_cycles").glob("*US06*.mat"))[0]
    rec = load_recording(f, preset="panasonic-18650pf", ref_soc0=1.0, ref_capacity_ah=cold_model.capacity_ah)
    t = rec.time_s - rec.time_s[0]
    k = int(np.flatnonzero((t >= 0.4 * t[-1]) & (np.abs(rec.current_a) >= cold_model.capacity_ah / 5))[0])
    cut = rec.slice(k, rec.n)
    wrong = float(cut.soc_ref[0]) - 0.30
    late = cut.time_s >= cut.time_s[0] + 600.0

    def rmse(tr):
        return 100 * float(np.sqrt(np.mean((tr.soc[late] - cut.soc_ref[late]) ** 2)))

    new = estimate(cold_model, cut, "ekf", soc0=wrong)
    r, s_old, z_old, _ = prepare(cold_model, cut, None, wrong, check_handover=False)
    old = run_ekf(cold_model, r, s_old, z_old, monitor=True)
    print(f"0 degC US06 wrong hand-over: RMSE after 600 s {rmse(old):.2f} -> {rmse(new):.2f} points, "
          f"start sigma {old.soc_sigma[0]:.3f} -> {new.soc_sigma[0]:.3f}")
    assert abs(new.soc[0] - cut.soc_ref[0]) <= 3.0 * new.soc_sigma[0]
    assert rmse(new) < rmse(old) - 1.0
