"""Real data: identify, tune and benchmark on the Panasonic 18650PF dataset at 25 degC.

Data: P. Kollmeyer, "Panasonic 18650PF Li-ion Battery Data", Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1 (CC BY 4.0); skipped when absent (tests/conftest.py::realdata).

- model: identified from the C/20 OCV test and the 5-pulse HPPC file (pulses placed by the
  cycler's Ah counter), R0/RC tables refined on Cycle_1;
- tuning: noise on Cycle_1 (SOC-error objective with the NIS constraint); benchmark on the
  unseen Cycle_2, US06 and HWFTa;
- reference: ``soc_ref = 1 + (Ah - Ah_0) / Q`` from the cycler's Ah counter (each drive cycle starts
  right after a full charge; the counter and a trapezoid count agree within 0.1 %, SOURCE.md), with
  ``Q`` the identified C/20 capacity so the reference and the filter use the same SOC scale;
- to keep the test short the 10 Hz drive cycles are subsampled to 1 Hz here: every tenth row, with
  the current replaced by the mean over the ten rows around it (so the charge is kept).

Published context: EKF SOC errors on such lab drive cycles are typically reported at 0.5-2 % RMSE,
and a recurrent network reached 0.573 % MAE on this dataset at fixed temperature (Chemali et al.,
IEEE Trans. Ind. Electron. 65, 2018).  The test asserts the EKF stays below 2 % RMSE and beats the
coulomb baseline under a current-sensor offset.
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.models.loaders import load_recording
from socfuse.models.recording import Recording

PRESET = "panasonic-18650pf"
CYCLES = {"Cycle_1": "03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat",
          "Cycle_2": "03-19-17_03.25 25degC_Cycle_2_Pan18650PF.mat",
          "US06": "03-20-17_01.43 25degC_US06_Pan18650PF.mat",
          "HWFTa": "03-20-17_05.56 25degC_HWFTa_Pan18650PF.mat"}


def to_1hz(rec: Recording, name: str) -> Recording:
    """Every tenth row; current = mean of the 10 rows centred on it; soc_ref, voltage, temperature sampled."""
    n = rec.n - rec.n % 10
    idx = np.arange(0, n, 10)
    cur = np.convolve(rec.current_a, np.ones(10) / 10, mode="same")[idx]
    opt = lambda a: None if a is None else a[idx]  # noqa: E731
    return Recording(rec.time_s[idx], cur, rec.voltage_v[idx], opt(rec.temperature_c), opt(rec.soc_ref), name,
                     rec.metadata)


@pytest.fixture(scope="module")
def realcase(realdata):
    from socfuse.models.identify.ocvtest import identify_ocv_test
    from socfuse.models.identify.pipeline import identify

    c20 = load_recording(realdata / "c20_ocv_and_1c_start_of_tests" / "05-08-17_13.26 C20 OCV Test_C20_25dC.mat",
                         preset=PRESET)
    hppc = load_recording(realdata / "hppc" / "03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat", preset=PRESET)
    capacity_ah = identify_ocv_test(c20).capacity_ah
    cycles = {k: to_1hz(load_recording(realdata / "drive_cycles" / f, preset=PRESET,
                                       ref_capacity_ah=capacity_ah, ref_soc0=1.0), k)
              for k, f in CYCLES.items()}
    # R0/RC tables refined on the tuning cycle (Cycle_1); the other three cycles are unseen
    model = identify(c20, [hppc], name="Panasonic NCR18650PF", pulse_temperatures_c=[25.0],
                     refine=cycles["Cycle_1"], refine_soc0=1.0).model
    return model, cycles


@pytest.fixture(scope="module")
def tuned(realcase):
    from socfuse.estimator.analysis.tuning import tune

    model, cycles = realcase
    # innovation-likelihood tuning on Cycle_1 only.  Not the SOC-error objective: the reference here is
    # the cycler's Ah counter, so minimising the error against it rewards a filter that ignores the
    # voltage and only counts charge (p0_soc and q_soc tuned to ~0), which is no test of the EKF.
    res = tune(model, [cycles["Cycle_1"]], objective="likelihood", soc0s=1.0)
    # a BMS restoring a remembered SOC after an unknown rest should not trust it to better than
    # 30 points (the demo's policy, estimator/demo.py); it matters only for the soc0 scenario
    settings = res.settings.with_(p0_soc=max(res.settings.p0_soc, 0.30))
    return settings, "model refined and noise tuned (innovation likelihood) on Cycle_1"


@pytest.fixture(scope="module")
def bench(realcase, tuned):
    from socfuse.estimator.analysis.bench import run_bench

    model, cycles = realcase
    settings, _ = tuned
    recs = [cycles[k] for k in ("Cycle_2", "US06", "HWFTa")]
    # current offset 0.5 % of a 25 A full scale (a sensor range that covers the 20.8 A peaks of US06,
    # SOURCE.md; 0.5 % of full scale is common practice for a Hall sensor, no source)
    return run_bench(model, recs, ["nominal", "offset=0.125", "soc0"], ["ekf", "coulomb"], settings, quiet=True,
                     keep_traces="none")


def test_reference_from_the_ah_counter(realcase):
    model, cycles = realcase
    # SOURCE.md: each drive cycle discharges about 2.59-2.71 Ah to 2.5 V from a full charge
    for k, r in cycles.items():
        assert r.soc_ref[0] == pytest.approx(1.0)
        assert 2.5 / model.capacity_ah < 1 - r.soc_ref[-1] < 2.75 / model.capacity_ah, k
    # the identified C/20 capacity: SOURCE.md reports 2.995 Ah delivered by the C/20 discharge
    assert model.capacity_ah == pytest.approx(2.995, rel=0.01)


def test_ekf_on_the_drive_cycles(bench, tuned, capsys):
    s = bench.summary.set_index(["recording", "scenario", "method"])
    assert not bench.errors
    with capsys.disabled():
        print(f"\nPanasonic 18650PF, 25 degC, 1 Hz, {tuned[1]}:")
        for (r, sc, m), row in s.iterrows():
            print(f"  {r:8s} {sc:12s} {m:8s} RMSE {row.rmse_pct:5.2f} %  MAE {row.mae_pct:5.2f} %  "
                  f"max {row.max_abs_pct:5.2f} %")
    for r in ("Cycle_2", "US06", "HWFTa"):
        # published context: EKF on lab drive cycles 0.5-2 % RMSE (issue 5 / Chemali et al. 2018 discussion)
        assert s.loc[(r, "nominal", "ekf"), "rmse_pct"] < 2.0
        # a current offset makes coulomb counting drift; the EKF corrects through the voltage
        assert s.loc[(r, "offset=0.125", "ekf"), "rmse_pct"] < s.loc[(r, "offset=0.125", "coulomb"), "rmse_pct"]
        # a 20-point initial error is forgotten: the run's RMSE is within half a point of the nominal run
        # (the 2-point "converge_s" band is not used here: near the 2.5 V cut-off the model's error
        # alone exceeds 2 points on these cycles, see README)
        assert s.loc[(r, "soc0", "ekf"), "rmse_pct"] < s.loc[(r, "nominal", "ekf"), "rmse_pct"] + 0.5
    # MAE over the three unseen cycles, beside the 0.573 % of Chemali et al. (2018) (printed above)
    mae = [s.loc[(r, "nominal", "ekf"), "mae_pct"] for r in ("Cycle_2", "US06", "HWFTa")]
    assert np.mean(mae) < 1.0
