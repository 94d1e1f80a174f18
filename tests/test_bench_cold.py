"""Real data in the cold at the native 10 Hz: the documented CLI path on the Panasonic 18650PF at 10 and 0 degC.

Data: P. Kollmeyer, "Panasonic 18650PF Li-ion Battery Data", Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1 (CC BY 4.0), the 10 and 0 degC folders (cold/SOURCE.md); skipped when
absent (tests/conftest.py::realdata).

Through ``benchmarks/generalisation.py``: ``socfuse identify`` from the 25 degC C/20 test and the 25,
10 and 0 degC pulse tests, refined on that temperature's Cycle_1 -> ``socfuse tune`` on Cycle_1 ->
``socfuse estimate`` on the unseen Cycle_2, US06 and HWFET, default options, no resampling.
Reference: ``soc_ref = 1 + (Ah - Ah_0) / Q`` from the cycler's Ah counter (each drive starts after a
full charge, SOURCE.md) over the identified 25 degC C/20 capacity ``Q``.

Targets (issue 13): EKF SOC RMSE <= 1.5 points at 10 and 0 degC; a 30-point wrong SOC handed over
mid-drive corrected to <= 2 points RMSE after 600 s.  Published context: a recurrent network reached
about 1.6 % MAE across temperatures on this dataset (Chemali et al., IEEE Trans. Ind. Electron. 65(8),
2018, as we recall it).  Where a target is not met yet the test is an expected failure with the
measured figure, and ``test_cold_achieved`` guards what is reached.
"""
from __future__ import annotations

import pytest

from generalisation_cases import load_benchmark

RECS = ("Cycle_2", "US06", "HWFET")


def _rows(realdata, tmp_path_factory, temp):
    bench = load_benchmark()
    case = bench.pan_case(realdata, temp, None)
    out = bench.run_case(case, tmp_path_factory.mktemp(f"pan{temp}"), quick=False, verbose=False,
                         scenarios=("wrong_start", "offset"), only=RECS)
    return {(r["recording"], r["method"]): r for r in out if r["rate"] == "10 Hz"}


@pytest.fixture(scope="module")
def cold(realdata, tmp_path_factory):
    return {t: _rows(realdata, tmp_path_factory, t) for t in ("10", "0")}


# measured 2026-12-05 (benchmarks/generalisation.py): every RMSE target met since the resistance-scale
# state (estimator.filters.kernels); 0 degC US06 1.59 -> 1.33 points, wrong start after 600 s at 0 degC
# 0.57 / 1.20 / 1.23 points
RMSE_NOT_MET: set = set()
WRONG_START_NOT_MET: set = set()


def _cases(not_met, what):
    return [pytest.param(t, r, marks=pytest.mark.xfail(strict=False, reason=f"issue 13 {what} target not met "
                                                                             f"yet at {t} degC on {r}"))
            if (t, r) in not_met else (t, r) for t in ("10", "0") for r in RECS]


@pytest.mark.parametrize("temp,rec", _cases(RMSE_NOT_MET, "RMSE"))
def test_cold_rmse_target(cold, temp, rec):
    assert cold[temp][(rec, "ekf")]["rmse_pct"] <= 1.5


@pytest.mark.parametrize("temp,rec", _cases(WRONG_START_NOT_MET, "wrong-start"))
def test_cold_wrong_start_target(cold, temp, rec):
    assert cold[temp][(rec, "ekf")]["wrong_start_rmse_pct"] <= 2.0


@pytest.mark.parametrize("temp", ["10", "0"])
def test_cold_achieved(cold, temp, capsys):
    with capsys.disabled():
        for rec in RECS:
            e = cold[temp][(rec, "ekf")]
            print(f"\n  Panasonic {temp} degC {rec} 10 Hz ekf: RMSE {e['rmse_pct']:.2f} %, coverage "
                  f"{e['coverage_pct']:.1f} %, wrong start {e['wrong_start_rmse_pct']:.2f} %, +offset "
                  f"{e['offset_rmse_pct']:.2f} %", end="")
    for rec in RECS:
        ekf, base = cold[temp][(rec, "ekf")], cold[temp][(rec, "coulomb")]
        assert ekf["rmse_pct"] < 2.0, rec
        # with a current-sensor offset of 0.025 C the voltage feedback must beat plain counting
        # (closest on the 0 degC US06: measured 1.35 against 1.48 points)
        assert ekf["offset_rmse_pct"] < base["offset_rmse_pct"], rec
        assert ekf["wrong_start_rmse_pct"] < 7.0, rec
        # the filter's sigma covers its error most of the time (99.7 % for a consistent filter; issue 11
        # asks for 95 %, measured 95.1-100 % on these six drives)
        assert ekf["coverage_pct"] >= 95.0, rec
