"""Energy on the real Panasonic 18650PF drive cycles (Kollmeyer, Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1, CC BY 4.0).  Skips when the dataset is absent.

Run with ``-s`` to see the remaining-energy figures quoted in the README.
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.estimator.filters.energy import remaining_energy_wh, usable_energy
from socfuse.models.identify.pipeline import identify
from socfuse.models.loaders import load_recording

C20 = "c20_ocv_and_1c_start_of_tests/05-08-17_13.26 C20 OCV Test_C20_25dC.mat"
HPPC = "hppc/03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat"
CYCLES = ("drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat",
          "drive_cycles/03-20-17_01.43 25degC_US06_Pan18650PF.mat",
          "drive_cycles/03-20-17_05.56 25degC_HWFTa_Pan18650PF.mat")


def _load(root, rel):
    # loader preset: discharge current negative in the files, converted to positive; repeated
    # timestamps dropped; the cycler's Wh counter kept in metadata["extras"]
    return load_recording(root / rel, preset="panasonic-18650pf")


def _cumulative(time_s, y):
    return np.concatenate([[0.0], np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(time_s))])


@pytest.fixture(scope="module")
def cycles(realdata):
    return [_load(realdata, rel) for rel in CYCLES]


@pytest.fixture(scope="module")
def model(realdata):
    # identified from the C/20 test and the HPPC test only (no drive cycle), so the drive cycles are
    # independent of the model
    return identify(_load(realdata, C20), [_load(realdata, HPPC)]).model


def test_trapezoid_energy_matches_the_cycler_wh_counter(cycles):
    # reference: the cycler's own watt-hour counter (Digatron, field Wh, negative on discharge;
    # SOURCE.md of the dataset) against the trapezoid of v * i over the deduplicated samples
    for rec in cycles:
        e_wh = _cumulative(rec.time_s, rec.voltage_v * rec.current_a)[-1] / 3600.0
        wh = rec.metadata["extras"]["Wh"]
        counter_wh = float(wh[0] - wh[-1])
        assert counter_wh > 8.0, rec.name  # a full drive cycle of a 2.9 Ah cell delivers about 9 Wh
        assert e_wh == pytest.approx(counter_wh, rel=0.005), rec.name


def test_remaining_energy_at_the_midpoint_of_a_drive_cycle(cycles, model):
    # At the midpoint (in time) of each drive cycle, predict the energy left down to the 2.5 V cut-off
    # at the cycle's average power so far, from the coulomb-counted SOC (each cycle starts from a full
    # charge to 4.2 V with a 50 mA end current, SOURCE.md), and compare it with the energy the cell
    # actually delivered until its voltage first reached 2.5 V (the cycler stops there, SOURCE.md).
    rows = []
    for rec in cycles:
        t, i, v = rec.time_s, rec.current_a, rec.voltage_v
        k_cut = int(np.argmax(v <= model.v_min_v)) if np.any(v <= model.v_min_v) else int(np.argmin(v))
        k_mid = int(np.searchsorted(t, 0.5 * t[k_cut]))
        e_ws = _cumulative(t, v * i)
        ah = _cumulative(t, i) / 3600.0
        p_avg = e_ws[k_mid] / t[k_mid]
        soc_mid = 1.0 - ah[k_mid] / model.capacity_ah
        temp = float(np.nanmean(rec.temperature_c[:k_mid])) if rec.temperature_c is not None else None
        pred = usable_energy(model, power_w=p_avg, soc0=soc_mid, temperature_c=temp)
        # the same, with the cut-off judged under the largest current peak seen so far (10 s step)
        peaky = usable_energy(model, power_w=p_avg, soc0=soc_mid, temperature_c=temp,
                              peak_current_a=float(np.max(i[:k_mid])), peak_duration_s=10.0)
        actual_wh = (e_ws[k_cut] - e_ws[k_mid]) / 3600.0
        rest_wh = float(remaining_energy_wh(model, soc_mid, temp))
        err = (pred.energy_wh - actual_wh) / actual_wh
        err_peak = (peaky.energy_wh - actual_wh) / actual_wh
        rows.append((rec.name, p_avg, soc_mid, actual_wh, pred.energy_wh, rest_wh, peaky.energy_wh, err_peak, err))
        # The prediction sits between the delivered energy and the rest energy: a steady load at the
        # average power reaches the cut-off later than the real, peaky load does (the voltage under a
        # peak sets the cut-off), and never beyond the rest energy (common practice, no source).
        assert actual_wh < pred.energy_wh < rest_wh, rec.name
        assert peaky.energy_wh < pred.energy_wh, rec.name
    print("\nmidpoint remaining-energy prediction (average power so far) vs delivered to 2.5 V:")
    for name, p, z, a, e, r, ep, errp, err in rows:
        print(f"  {name}: P_avg {p:.2f} W, SOC_C {100 * z:.1f} %, delivered {a:.3f} Wh, "
              f"predicted {e:.3f} Wh ({100 * err:+.1f} %), with the peak {ep:.3f} Wh ({100 * errp:+.1f} %), "
              f"rest {r:.3f} Wh")
    errs = np.array([r[-1] for r in rows])
    errs_peak = np.array([r[-2] for r in rows])
    # measured with the model identified from C/20 + HPPC: +18 % (HWFTa) to +30 % (US06) at the mean
    # power, less with the peak; the bounds catch a regression in the at-load simulation or the model
    assert np.all(errs < 0.40)
    assert np.all(np.abs(errs_peak) < np.abs(errs))
