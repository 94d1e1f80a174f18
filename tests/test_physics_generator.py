"""The PyBaMM physics reference cells (datasets/physics.py), short mode.

Outside references: PyBaMM (Sulzer et al., J. Open Res. Softw. 9, 14, 2021) with its bundled parameter
sets Chen2020 (Chen et al., J. Electrochem. Soc. 167, 080534, 2020) and Prada2013 (Prada et al.,
J. Electrochem. Soc. 160, A616, 2013); scipy.integrate.cumulative_trapezoid for the charge counter.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import cumulative_trapezoid

pytest.importorskip("pybamm")

from socfuse.datasets import physics  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402


@pytest.fixture(scope="module", params=sorted(physics.CELLS))
def case(request):
    return physics.generate(request.param, short=True)


def test_capacity_matches_the_published_cell(case):
    # Chen et al. 2020 (LG M50): nominal 5.0 Ah; Prada et al. 2013 (A123 ANR26650M1): 2.3 Ah (both
    # from the papers' cell descriptions, quoted from memory).  The C/20 capacity from full to the
    # cut-off lies within 5 % of the rated value.
    rated = {"chen2020_nmc": 5.0, "prada2013_lfp": 2.3}[case.cell]
    assert case.c20_capacity_ah == pytest.approx(rated, rel=0.05)
    assert case.nominal_capacity_ah == rated


def test_soc_ref_is_the_charge_counter_over_the_c20_capacity(case):
    # scipy cumulative_trapezoid of the true current (undo the documented sensor offset and gain;
    # the noise averages out over a day) against soc_ref: both count the same charge.
    rec = load_recording(case.path("c20"))
    s = case.manifest["sensors"]
    i_true = (rec.current_a - s["offset_a"]) / (1.0 + s["gain_error"])
    q = cumulative_trapezoid(i_true, rec.time_s, initial=0.0) / 3600.0
    dsoc = rec.soc_ref[0] - rec.soc_ref
    # 1 mA quantum and 0.3 %-of-1C white noise over ~16 000 samples: far below 0.2 % of capacity
    assert np.max(np.abs(q / case.c20_capacity_ah - dsoc)) < 2e-3
    assert rec.soc_ref.max() == pytest.approx(1.0, abs=1e-9)
    assert rec.soc_ref.min() == pytest.approx(0.0, abs=1e-6)


def test_rest_current_shows_the_sensor_offset(case):
    # DESIGN.md section 7: offset 0.5 % of 1C; the first 10 min of the C/20 test are a rest.
    rec = load_recording(case.path("c20"))
    rest = rec.time_s < 590.0
    expected = (0.005 if case.cell == "chen2020_nmc" else -0.005) * case.nominal_capacity_ah
    noise = 0.003 * case.nominal_capacity_ah
    assert np.mean(rec.current_a[rest]) == pytest.approx(expected, abs=4 * noise / np.sqrt(rest.sum()) + 5e-4)
    # voltage noise 1.5 mV on a 1 mV grid (quantised)
    v = rec.voltage_v[rest]
    assert np.allclose(np.round(v * 1000.0), v * 1000.0, atol=1e-6)
    assert 0.8e-3 < np.std(v) < 2.5e-3


def test_equilibrium_voltage_is_chemistry_shaped(case):
    # Facts of the trade (common practice, no source): an NMC/graphite cell rests near 3.6-3.8 V at
    # half charge and spans several hundred mV over 20-80 %; LFP/graphite sits on a flat plateau
    # around 3.2-3.35 V (well under 150 mV change over 20-80 % SOC).
    mid = float(case.equilibrium_voltage(0.5))
    span = float(case.equilibrium_voltage(0.8) - case.equilibrium_voltage(0.2))
    if case.cell == "chen2020_nmc":
        assert 3.55 < mid < 3.85 and span > 0.3
    else:
        assert 3.2 < mid < 3.35 and 0.0 < span < 0.15
    # "full" is the lab's standard charge (constant voltage until C/50, then a rest): its relaxed
    # voltage lies a little below the upper cut-off, within 30 mV (common practice, no source)
    top = float(case.equilibrium_voltage(1.0))
    assert case.manifest["v_max"] - 0.03 < top < case.manifest["v_max"]


def test_pulse_protocol_and_drives(case):
    man = case.manifest["files"]
    p = man["pulse"]["pulses"]
    assert (p["discharge_pulses"], p["charge_pulses"], p["soc_steps"]) == (10, 10, 9)
    # at 100 % the 0.75C charge pulse meets the upper cut-off at once: a constant-voltage pulse
    assert 0 in p["cv_limited_levels"]
    rec = load_recording(case.path("pulse"))
    one_c = case.nominal_capacity_ah
    # ten 1C discharge pulses: count rising edges of the measured current through 0.5C (noise is
    # 0.3 % of 1C, so no flicker at this level)
    hi = rec.current_a > 0.5 * one_c
    starts = np.flatnonzero(hi[1:] & ~hi[:-1]) + 1
    assert starts.size == 10 + 9  # pulses plus SOC steps (both about 1C)
    for name in ("drive_1", "drive_2", "drive_3"):
        d = load_recording(case.path(name))
        assert np.allclose(np.diff(d.time_s), 0.1, atol=1e-6)  # native 10 Hz
        assert d.current_a.min() < -0.25 * one_c and d.current_a.max() > 0.9 * one_c  # regen and peaks
        assert case.manifest["v_min"] < d.voltage_v.min() and d.voltage_v.max() < case.manifest["v_max"] + 0.01
