"""Plausibility of a recording against a cell model (models.plausibility): unit, pack, sign, soc_ref and spike
mistakes are found, and clean recordings nobody tuned the checks on (demo days, the real Panasonic 18650PF
files at 25, 10 and 0 degC) give no error.

Outside references named beside the checks:
- SI prefixes: 1 mA = 1e-3 A, 1 mV = 1e-3 V (common practice, no source).
- Cells in series add their voltages (Kirchhoff's voltage law), cells in parallel share the current
  (Kirchhoff's current law); a 4s pack of 3.43 V cells reads 13.7 V.
- The terminal voltage of a cell drops when the discharge current steps up, dV = -R0 dI (Thevenin model;
  Hu, Li and Peng, J. Power Sources 198 (2012)); the OCV falls as charge is drawn (common practice, no source).
- A cell cannot deliver much more than its capacity in one discharge (definition of capacity, common practice,
  no source); 1 Ah = 3600 C.
- Real data: Kollmeyer, Panasonic 18650PF Li-ion Battery Data, Mendeley Data 2018, doi:10.17632/wykht8y7tg.1
  (discharge logged negative, 2.9 Ah nominal capacity, data sheet value from the dataset's SOURCE.md).
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import tiny_model
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate
from socfuse.models.checks import summarise
from socfuse.models.loaders import load_recording
from socfuse.models.plausibility import (ImplausibleInputError, check_against_model, require_plausible,
                                         spike_samples)


def _errors(rec, model=None):
    return [f.code for f in check_against_model(rec, model) if f.severity == "error"]


@pytest.fixture(scope="module")
def day():
    """An invented 4.8 Ah cell on 2 h of stop-and-go at 1 s with a soc_ref (Thevenin simulation)."""
    m = tiny_model(n_rc=1)
    t = np.arange(0.0, 7200.0)
    rng = np.random.default_rng(3)
    i = np.where((t % 240) < 150, 3.0, -1.0) + 0.1 * rng.standard_normal(t.size)
    i[3000:3900] = 0.0
    sim = simulate(m, t, i, 25.0, soc0=0.9)
    v = sim.voltage_v + 0.002 * rng.standard_normal(t.size)
    return m, Recording(t, i, v, np.full(t.size, 25.0), sim.soc, name="day")


def test_clean_recording_has_no_finding(day):
    m, rec = day
    assert check_against_model(rec, m) == []
    assert check_against_model(rec, None) == []  # against a generic lithium-ion cell too


@pytest.mark.parametrize("mistake, code, fix", [
    ("mA read as A", "current-ma", "--current-unit mA"),             # 1 mA = 1e-3 A
    ("mV read as V", "voltage-mv", "--voltage-unit mV"),             # 1 mV = 1e-3 V
    ("pack 4s", "voltage-pack", "--series-cells 4"),                 # series voltages add (KVL)
    ("pack 3p", "charge-throughput", "--parallel-cells"),            # parallel currents add (KCL)
    ("flipped sign", "sign-inverted", "--discharge-negative"),       # dV = -R0 dI (Hu et al. 2012)
    ("soc_ref percent", "soc-ref-percent", "--soc-ref-unit percent"),
    ("three 1e6 A spikes", "spikes", "--drop-spikes"),
])
def test_mistake_is_found_with_the_option_that_fixes_it(day, mistake, code, fix):
    m, rec = day
    i, v, s = rec.current_a, rec.voltage_v, rec.soc_ref
    spiky = i.copy()
    spiky[[500, 2500, 6000]] = 1e6
    bad = {"mA read as A": rec.with_(current_a=i * 1000), "mV read as V": rec.with_(voltage_v=v * 1000),
           "pack 4s": rec.with_(voltage_v=v * 4), "pack 3p": rec.with_(current_a=i * 3),
           "flipped sign": rec.with_(current_a=-i), "soc_ref percent": rec.with_(soc_ref=s * 100),
           "three 1e6 A spikes": rec.with_(current_a=spiky)}[mistake]
    errors = [f for f in check_against_model(bad, m) if f.severity == "error"]
    assert errors and errors[0].code == code, [f.code for f in errors]
    assert fix in errors[0].fix
    with pytest.raises(ImplausibleInputError, match="--trust-input"):
        require_plausible(bad, m, source="day.csv")
    assert [f.code for f in require_plausible(bad, m, trust=True)][0] == code


def test_pack_13v7_against_a_cell_model():
    # four 3.43 V cells in series read 13.7 V (KVL); the finding names 4 cells
    m = tiny_model(n_rc=1)
    t = np.arange(0.0, 600.0)
    i = np.where((t % 60) < 30, 2.0, 0.0)
    sim = simulate(m, t, i, 25.0, soc0=0.35)
    v = 4 * sim.voltage_v
    assert 13.0 < np.median(v) < 14.2
    (f,) = [f for f in check_against_model(Recording(t, i, v), m) if f.severity == "error"]
    assert f.code == "voltage-pack" and "--series-cells 4" in f.fix


def test_spikes_do_not_pass_for_a_sign_error(day):
    m, rec = day
    spiky = rec.current_a.copy()
    spiky[[500, 2500, 6000]] = 1e6
    bad = rec.with_(current_a=spiky)
    assert spike_samples(bad, m).sum() == 3
    codes = _errors(bad, m)
    assert "spikes" in codes and "sign-inverted" not in codes
    s = summarise(bad)
    assert not s.sign_inverted and s.sign_slope_ohm < 0  # dV = -R0 dI with the spikes left out


def test_missing_voltage_is_a_warning_only(day):
    m, rec = day
    v = rec.voltage_v.copy()
    v[[10, 11, 400]] = np.nan
    fs = check_against_model(rec.with_(voltage_v=v), m)
    assert [(f.code, f.severity) for f in fs] == [("voltage-missing", "warning")] and "3 of 7200" in fs[0].seen


def test_a_log_with_gaps_is_not_a_throughput_error(day):
    # across a logging gap the cell may have been charged unseen: no charge is counted over it
    m, rec = day
    t = rec.time_s.copy()
    n = t.size // 3
    parts = [rec.slice(0, n), rec.slice(0, n), rec.slice(0, n)]
    tt = np.concatenate([p.time_s + k * 20000.0 for k, p in enumerate(parts)])
    ii = np.concatenate([p.current_a for p in parts])
    vv = np.concatenate([p.voltage_v for p in parts])
    assert _errors(Recording(tt, ii, vv), m) == []


# ----------------------------------------------------------------------------- real data
def _crude_panasonic():
    # crude model of the 2.9 Ah Panasonic NCR18650PF (data sheet capacity; OCV a rough NCA-like line, from memory)
    soc = np.linspace(0, 1, 6)
    return CellModel(2.9, OcvCurve(soc, [3.0, 3.45, 3.62, 3.8, 3.98, 4.18]), ParamTable.constant(0.03, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.015), ParamTable.constant(20.0)),), 0.99, v_min_v=2.5,
                     v_max_v=4.2)


REAL = ["drive_cycles/03-20-17_01.43 25degC_US06_Pan18650PF.mat",
        "cold/10degC/drive_cycles/03-27-17_09.06 10degC_HWFET_Pan18650PF.mat",
        "cold/0degC/drive_cycles/06-02-17_04.58 0degC_US06_Pan18650PF.mat",
        "cold/0degC/hppc/05-20-17_12.07 3619_dis5_10p.mat",
        "c20_ocv_and_1c_start_of_tests/03-09-17_21.03 3349_Dis1C_Rp.mat"]


@pytest.mark.parametrize("rel", REAL, ids=[r.split("/")[-1][:30] for r in REAL])
def test_real_recordings_are_plausible_and_their_mistakes_are_found(realdata, rel):
    path = realdata / rel
    if not path.is_file():
        pytest.skip(f"{rel} not in this copy of the dataset")
    rec = load_recording(path, preset="panasonic-18650pf")
    m = _crude_panasonic()
    assert _errors(rec, m) == [] and _errors(rec, None) == []
    # the file logs discharge as negative (dataset SOURCE.md): read without the flip it is found inverted
    raw = load_recording(path, preset="panasonic-18650pf", discharge_negative=False)
    assert _errors(raw, m)[:1] == ["sign-inverted"]
    assert "--discharge-negative" in next(f.fix for f in check_against_model(raw, m) if f.severity == "error")
    assert _errors(rec.with_(current_a=rec.current_a * 1000), m)[:1] == ["current-ma"]
    assert _errors(rec.with_(voltage_v=rec.voltage_v * 1000), m)[:1] == ["voltage-mv"]


def test_current_scale_without_a_model_from_the_apparent_resistance():
    """Identification inputs have no model yet: mA read as A shows as a resistance 1000 times too small
    (|dV/dI| = R0 at a current step, Hu et al. 2012; 1 mA = 1e-3 A)."""
    m = tiny_model(n_rc=1)  # R0 15..20 mOhm
    t = np.arange(0.0, 3000.0)
    i = np.where((t % 300) < 60, 4.8, 0.0)
    sim = simulate(m, t, i, 25.0, soc0=0.8)
    rec = Recording(t, i, sim.voltage_v)
    assert _errors(rec, None) == []
    (f,) = [f for f in check_against_model(rec.with_(current_a=i * 1000), None) if f.severity == "error"]
    assert f.code == "current-scale" and "far too large" in f.seen and "--current-unit mA" in f.fix
    (f,) = [f for f in check_against_model(rec.with_(current_a=i / 1000), None) if f.severity == "error"]
    assert f.code == "current-scale" and "far too small" in f.seen


def test_temperature_in_kelvin_or_out_of_range(day):
    # 25 degC = 298.15 K (SI definition of the Celsius scale)
    m, rec = day
    (f,) = [f for f in check_against_model(rec.with_(temperature_c=rec.temperature_c + 273.15), m)
            if f.severity == "error"]
    assert f.code == "temperature-kelvin" and "--temperature-unit K" in f.fix
    hot = rec.temperature_c.copy()
    hot[100] = 900.0
    assert _errors(rec.with_(temperature_c=hot), m) == ["temperature-range"]


def test_drop_spikes_gives_back_the_clean_recording(day):
    from socfuse.models.plausibility import drop_spikes

    m, rec = day
    spiky = rec.current_a.copy()
    spiky[[500, 2500, 6000]] = 1e6
    cleaned, n = drop_spikes(rec.with_(current_a=spiky), m)
    assert n == 3 and cleaned.n == rec.n - 3 and cleaned.metadata["spikes_dropped"] == [500.0, 2500.0, 6000.0]
    assert check_against_model(cleaned, m) == []
    np.testing.assert_array_equal(np.delete(rec.current_a, [500, 2500, 6000]), cleaned.current_a)
