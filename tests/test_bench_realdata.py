"""Real data at the native 10 Hz: the documented CLI path on the Panasonic 18650PF at 25 degC.

Data: P. Kollmeyer, "Panasonic 18650PF Li-ion Battery Data", Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1 (CC BY 4.0); skipped when absent (tests/conftest.py::realdata).

Through ``benchmarks/generalisation.py`` (``socfuse identify`` from the C/20 and HPPC files, refined
on Cycle_1 -> ``socfuse tune`` on Cycle_1 -> ``socfuse estimate``, default options, no resampling) on the unseen
Cycle_2 and US06 at 10 Hz.  Reference: ``soc_ref = 1 + (Ah - Ah_0) / Q`` from the cycler's Ah counter
(each cycle starts after a full charge, SOURCE.md) with ``Q`` the identified C/20 capacity.  That
reference is itself a charge count of the same current the baseline counts, so the baseline is
nearly perfect on the nominal run by construction; the EKF is compared with it under a current-sensor
offset, and a wrong SOC handed over mid-drive must be corrected.

Targets (issue 11): EKF RMSE below 2 points (published context: EKF errors on lab drive cycles are
reported at 0.5-2 % RMSE, and a recurrent network reached 0.573 % MAE on this dataset at 25 degC,
Chemali et al., IEEE Trans. Ind. Electron. 65, 2018); true SOC inside +-3 sigma on at least 90 % of
samples; with a current offset of 0.025 C (0.5 % of a 5C full scale, the default offset fault) the
EKF beats the baseline; a 30-point wrong start mid-drive corrected to under 1.5 points RMSE after 600 s.
"""
from __future__ import annotations

import pytest

from generalisation_cases import load_benchmark


_MODEL: dict = {}


def rows_model_json():
    return _MODEL["json"]


@pytest.fixture(scope="module")
def rows(realdata, tmp_path_factory):
    bench = load_benchmark()
    case = bench.pan_case(realdata, "25", None)
    cache = tmp_path_factory.mktemp("pan25")
    out = bench.run_case(case, cache, quick=False, verbose=False,
                         scenarios=("wrong_start", "offset"), only=("Cycle_2", "US06"))
    _MODEL["json"] = cache / case.name / "model.json"
    return {(r["recording"], r["rate"], r["method"]): r for r in out}


def test_identified_capacity(rows):
    import json

    for r in rows.values():
        assert "rmse_pct" in r, r  # identify, tune or estimate failed: the note says why
    # SOURCE.md: the C/20 discharge delivers 2.995 Ah to 2.5 V
    assert json.loads(rows_model_json().read_text())["capacity_ah"] == pytest.approx(2.995, rel=0.01)


@pytest.mark.parametrize("rec", ["Cycle_2", "US06"])
def test_ekf_at_10_hz(rows, rec, capsys):
    ekf, base = rows[(rec, "10 Hz", "ekf")], rows[(rec, "10 Hz", "coulomb")]
    with capsys.disabled():
        for r in (ekf, base):
            print(f"\n  Panasonic 25 degC {rec} 10 Hz {r['method']}: RMSE {r['rmse_pct']:.2f} %, max "
                  f"{r['max_pct']:.2f} %, coverage {r.get('coverage_pct', float('nan')):.1f} %, wrong start "
                  f"{r.get('wrong_start_rmse_pct', float('nan')):.2f} %, +offset {r.get('offset_rmse_pct', float('nan')):.2f} %",
                  end="")
    assert ekf["rmse_pct"] < 2.0
    assert ekf["coverage_pct"] >= 90.0
    assert ekf["offset_rmse_pct"] < base["offset_rmse_pct"]
    assert ekf["wrong_start_rmse_pct"] < 1.5
