"""Real data at its native 10 Hz and averaged to 1 Hz: the same answer, recovery and bias (issue 11).

Data: P. Kollmeyer, "Panasonic 18650PF Li-ion Battery Data", Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1 (CC BY 4.0); skipped when absent (tests/conftest.py::realdata).  Model
identified from the C/20 and HPPC files as ``socfuse identify`` does by default; the recording is
Cycle_1 (the tuning cycle of the reference cases, so no test recording is looked at); reference
``soc_ref`` from the cycler's Ah counter over the identified C/20 capacity (SOURCE.md).  Default
settings and the monitored filter step, as ``socfuse estimate`` runs them.
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.estimator.filters.coulomb import run_coulomb
from socfuse.estimator.filters.run import estimate
from socfuse.models.loaders import load_recording
from socfuse.models.recording import Recording

PRESET = "panasonic-18650pf"


def _to_1hz(rec: Recording) -> Recording:
    """Every tenth row; current = mean of the ten rows around it (the charge is kept)."""
    n = rec.n - rec.n % 10
    idx = np.arange(0, n, 10)
    cur = np.convolve(rec.current_a, np.ones(10) / 10, mode="same")[idx]
    return Recording(rec.time_s[idx], cur, rec.voltage_v[idx], rec.temperature_c[idx], rec.soc_ref[idx],
                     rec.name + " 1 Hz")


@pytest.fixture(scope="module")
def case(realdata):
    from socfuse.models.identify.pipeline import identify

    c20 = load_recording(realdata / "c20_ocv_and_1c_start_of_tests" / "05-08-17_13.26 C20 OCV Test_C20_25dC.mat",
                         preset=PRESET)
    hppc = load_recording(realdata / "hppc" / "03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat", preset=PRESET)
    model = identify(c20, [hppc], name="Panasonic NCR18650PF", pulse_temperatures_c=[25.0]).model
    cyc = load_recording(realdata / "drive_cycles" / "03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat", preset=PRESET,
                         ref_capacity_ah=model.capacity_ah, ref_soc0=1.0)
    return model, cyc


def _stats(tr, ref, mask=None):
    e = tr.soc - ref
    m = np.ones(e.size, bool) if mask is None else mask
    return float(np.sqrt(np.mean(e[m] ** 2))), float(np.mean(np.abs(e[m]) <= 3 * tr.soc_sigma[m]))


def test_10hz_and_1hz_agree(case):
    model, cyc = case
    assert np.median(np.diff(cyc.time_s)) == pytest.approx(0.1, abs=1e-3)  # native 10 Hz (SOURCE.md)
    slow = _to_1hz(cyc)
    a, b = estimate(model, cyc, "ekf"), estimate(model, slow, "ekf")
    (ra, ca), (rb, cb) = _stats(a, cyc.soc_ref), _stats(b, slow.soc_ref)
    print(f"\nCycle_1 10 Hz: RMSE {100 * ra:.2f} %, coverage {100 * ca:.1f} %; 1 Hz: RMSE {100 * rb:.2f} %, "
          f"coverage {100 * cb:.1f} %; final sigma {100 * a.soc_sigma[-1]:.2f} / {100 * b.soc_sigma[-1]:.2f} %")
    # published context: EKF SOC errors on lab drive cycles are reported at 0.5-2 % RMSE (Plett 2004,
    # part 3, from memory); before the rate-invariant noise model this file gave 4.38 % at 10 Hz and
    # 1.54 % at 1 Hz (coverage 23 % and 56 %)
    assert ra < 0.015 and rb < 0.015
    # the 1 Hz file is averaged, not the same samples, so the 0.2-point target of the interpolated
    # simulation (test_rate_invariance) is not asked here: within 1 point, and the same final sigma
    assert abs(ra - rb) < 0.01
    assert a.soc_sigma[-1] / b.soc_sigma[-1] == pytest.approx(1.0, abs=0.2)
    assert ca > 0.9 and cb > 0.85


def test_wrong_start_mid_drive_is_corrected(case):
    model, cyc = case
    # handed over at the first sample under load (|I| >= C/5) after 40 % of the cycle, 30 points off
    t = cyc.time_s
    k0 = int(np.searchsorted(t, t[0] + 0.4 * (t[-1] - t[0])))
    while abs(cyc.current_a[k0]) < 0.2 * model.capacity_ah:
        k0 += 1
    sub = cyc.slice(k0)
    z = sub.soc_ref[0]
    tr = estimate(model, sub, "ekf", soc0=z - 0.3 if z > 0.5 else z + 0.3)
    after = sub.time_s >= sub.time_s[0] + 600.0
    rmse, _ = _stats(tr, sub.soc_ref, after)
    assert rmse < 0.015, rmse  # issue 11 target: RMSE after 600 s under 1.5 points


def test_current_offset_is_estimated(case):
    model, cyc = case
    # +0.5 % of a 5C full scale (0.025 C): a Hall-sensor offset (common practice, no source)
    off = cyc.with_(current_a=cyc.current_a + 0.025 * model.capacity_ah)
    ekf, cc = estimate(model, off, "ekf"), run_coulomb(model, off)
    r_ekf, _ = _stats(ekf, off.soc_ref)
    r_cc, _ = _stats(cc, off.soc_ref)
    assert r_ekf < 0.015 and r_ekf < r_cc
    b = ekf.states[:, ekf.state_names.index("bias_a")]
    # the bias state moves towards the offset (0.075 A) over the cycle
    assert 0.3 * 0.075 < np.median(b[b.size // 2:]) < 2.0 * 0.075
