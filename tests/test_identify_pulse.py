"""Pulse-test identification: relaxation fits, detection, SOC placement, R0, DOE/INL power formulas."""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate
from socfuse.models import simulation as models_simulation
from socfuse.models.identify.fastsim import simulate_fast, unit_rc_response
from socfuse.models.identify.pulse import (
    choose_rc_pairs, detect_pulses, discharge_power_w, fit_relaxation, identify_pulse_test, pulse_power_table,
    pulse_resistance, pulse_tables, rc_from_rectangular_pulse, regen_power_w,
)
from socfuse.models.identify.synthetic import hppc_profile

SOC = np.linspace(0.0, 1.0, 11)
OCV = OcvCurve(SOC, 3.0 + 1.2 * SOC - 0.3 * np.sin(np.pi * SOC) + 0.15 * SOC ** 3)  # invented, monotone


def _model(n_rc=2):
    r0 = ParamTable(SOC, 0.025 + 0.01 * (1 - SOC) ** 2, name="r0_ohm")
    pairs = [RcPair(ParamTable(SOC, 0.010 + 0.004 * (1 - SOC)), ParamTable(SOC, 30.0 + 0 * SOC)),
             RcPair(ParamTable(SOC, 0.015 + 0 * SOC), ParamTable(SOC, 700.0 + 0 * SOC))]
    return CellModel(4.8, OCV, r0, tuple(pairs[:n_rc]))


# ------------------------------------------------------------------ analytic RC responses
@pytest.mark.parametrize("n_rc", [1, 2])
def test_relaxation_fit_recovers_analytic_rc_response(n_rc):
    # Reference: first-order RC step response v_j(T) = R_j I (1 - exp(-T/tau_j)) and its free
    # relaxation v_j(T) exp(-(t - T)/tau_j) (analytic result; DESIGN.md section 6).
    i_a, dur = 5.0, 10.0
    r = (0.012, 0.020)[:n_rc]
    tau = (25.0, 400.0)[:n_rc]
    v_inf = 3.712
    t = np.concatenate([np.arange(0.0, 10.0, 0.1), np.arange(10.0, 1800.0, 1.0)])  # uneven
    v = np.full(t.size, v_inf)
    for rj, tj in zip(r, tau):
        v -= rj * i_a * (1 - np.exp(-dur / tj)) * np.exp(-t / tj)
    f = fit_relaxation(t, v, n_rc, tau_min_s=0.05)
    assert f.ok
    np.testing.assert_allclose(f.tau_s, tau, rtol=1e-6)
    np.testing.assert_allclose(rc_from_rectangular_pulse(f.amplitude_v, f.tau_s, i_a, dur), r, rtol=1e-6)
    assert f.v_inf_v == pytest.approx(v_inf, abs=1e-9)
    assert f.rms_v < 1e-8


def test_unit_rc_response_is_the_analytic_step_response():
    # Reference: first-order step response R I (1 - exp(-t/tau)) (analytic); the current is held
    # at I on both ends of every interval, so the interval mean is exactly I.
    t = np.cumsum(np.r_[0.0, np.random.default_rng(3).uniform(0.05, 2.0, 400)])  # uneven
    i = np.full(t.size, 2.0)
    g = unit_rc_response(t, i, 17.0, 0, t.size - 1)
    np.testing.assert_allclose(g, 2.0 * (1 - np.exp(-t / 17.0)), rtol=1e-12, atol=1e-15)


def _plain_loop(model, t, i, soc0):
    """The sampling rule of models/thevenin.py written out sample by sample (the specification)."""
    n = t.size
    soc = np.empty(n)
    v_rc = np.zeros((n, model.n_rc))
    soc[0] = soc0
    for k in range(n - 1):
        dt = t[k + 1] - t[k]
        u = 0.5 * (i[k] + i[k + 1])
        eta = 1.0 if u >= 0 else model.coulombic_efficiency
        soc[k + 1] = soc[k] - eta * u * dt / (model.capacity_ah * 3600.0)
        for j, pair in enumerate(model.rc):
            a = np.exp(-dt / float(pair.tau_s.at(soc[k], 25.0)))
            v_rc[k + 1, j] = a * v_rc[k, j] + float(pair.r_ohm.at(soc[k], 25.0)) * (1 - a) * u
    v = model.ocv.voltage(soc, 25.0) - model.r0_ohm.at(soc, 25.0) * i - v_rc.sum(axis=1)
    return soc, v


def test_one_simulator_equals_the_plain_loop_of_the_sampling_rule():
    # one implementation (issue 10): simulate and simulate_fast are the same code ...
    assert simulate_fast is models_simulation.simulate_model
    # ... and it equals the rule written out as a plain loop, to rounding
    m = _model(2)
    rng = np.random.default_rng(0)
    t = np.cumsum(np.r_[0.0, rng.uniform(0.2, 3.0, 3000)])
    i = rng.normal(1.0, 5.0, t.size)
    soc, v = _plain_loop(m, t, i, 0.9)
    a = simulate(m, t, i, soc0=0.9)
    np.testing.assert_allclose(a.voltage_v, v, atol=1e-12)
    np.testing.assert_allclose(a.soc, soc, atol=1e-12)


# ------------------------------------------------------------------ round trips on simulated tests
@pytest.fixture(scope="module")
def hppc():
    m = _model(2)
    t, i = hppc_profile(4.8, pulse_currents_a=(4.8, 9.6), dt_s=1.0, fine_dt_s=0.1)
    sim = simulate(m, t, i)
    return m, Recording(t, i, sim.voltage_v, soc_ref=sim.soc, name="synthetic hppc")


def test_detects_every_pulse_at_uneven_sampling(hppc):
    _, rec = hppc
    ps = [p for p in detect_pulses(rec) if p.kind == "pulse"]
    # 5 levels x 2 currents x (discharge + regen), as built by hppc_profile
    assert len(ps) == 20
    assert [p.direction for p in ps[:4]] == [1, -1, 1, -1]
    np.testing.assert_allclose([p.duration_s for p in ps], 10.0, atol=1e-9)
    np.testing.assert_allclose([abs(p.current_a) for p in ps[:4]], [4.8, 3.6, 9.6, 7.2])


def test_pulse_identification_round_trip(hppc):
    m, rec = hppc  # invented parameters, simulated with models.simulate: a round trip
    res = identify_pulse_test(rec, 4.8, ocv=OCV)
    n, why = choose_rc_pairs([res])
    assert n == 2, why
    r0, rc, _ = pulse_tables([res], 2)
    s = r0.soc
    np.testing.assert_allclose(r0.at(s), m.r0_ohm.at(s), rtol=1e-3)
    for j in range(2):
        np.testing.assert_allclose(rc[j].r_ohm.at(s), m.rc[j].r_ohm.at(s), rtol=2e-3)
        np.testing.assert_allclose(rc[j].tau_s.at(s), m.rc[j].tau_s.at(s), rtol=2e-3)
    # levels of hppc_profile: 0.9 ... 0.1 (pulse SOC = mean before/after; moves at the level)
    np.testing.assert_allclose(np.sort(s), [0.1, 0.3, 0.5, 0.7, 0.9], atol=0.006)


def test_pulse_without_regen_and_raw_edge_step(hppc):
    m = _model(1)
    t, i = hppc_profile(4.8, pulse_currents_a=(2.4, 4.8, 9.6), regen_ratio=0.0, dt_s=1.0, rest_s=900.0)
    rec = Recording(t, i, simulate(m, t, i).voltage_v, name="no regen")
    res = identify_pulse_test(rec, 4.8, ocv=OCV, rc_pairs=1)
    assert sum(p.pulse.kind == "pulse" for p in res.pulses) == 15
    pf = [p for p in res.pulses if p.pulse.kind == "pulse"][0]
    # Raw edge step at dt = 1 s under the sampling rule: R0 + R1 (1 - exp(-dt/tau1)) / 2 at the
    # pulse start (analytic first-order response over one interval at half current)
    r1, tau1 = m.rc[0].r_ohm.at(pf.soc), 30.0
    on_edge = m.r0_ohm.at(pf.soc) + r1 * (1 - np.exp(-1.0 / tau1)) / 2
    assert pf.r0_edge_ohm == pytest.approx(on_edge, rel=0.02)
    assert pf.r0_ohm[1] == pytest.approx(m.r0_ohm.at(pf.soc), rel=2e-3)


def test_soc_ref_places_pulses_when_the_moves_are_cut_out(hppc):
    # A lab file that keeps only the pulses (the moves between levels removed, time jumps):
    # counting charge inside the file is wrong; the soc_ref column is right.
    m, rec = hppc
    keep = np.ones(rec.n, dtype=bool)
    for p in detect_pulses(rec, include_moves=True):
        if p.kind == "move":
            keep[p.start:p.stop] = False
    cut = Recording(rec.time_s[keep], rec.current_a[keep], rec.voltage_v[keep], soc_ref=rec.soc_ref[keep],
                    name="cut")
    by_ref = identify_pulse_test(cut, 4.8, soc_mode="soc_ref", rc_pairs=1)
    by_count = identify_pulse_test(cut, 4.8, soc_mode="count", rc_pairs=1)
    lv_ref = sorted({round(p.soc, 2) for p in by_ref.pulses if p.pulse.direction > 0 and p.pulse.current_a < 5})
    lv_cnt = sorted({round(p.soc, 2) for p in by_count.pulses if p.pulse.direction > 0 and p.pulse.current_a < 5})
    np.testing.assert_allclose(lv_ref, [0.1, 0.3, 0.5, 0.7, 0.9], atol=0.01)
    assert min(lv_cnt) > 0.8  # only the pulses' own charge is counted


# ------------------------------------------------------------------ DOE/INL pulse resistance and power
def test_power_formulas_worked_example():
    # Worked example built from the definitions of the FreedomCAR Battery Test Manual for
    # Power-Assist HEVs (DOE/ID-11069, INEEL 2003), HPPC analysis, recalled from memory:
    # R = |dV/dI| from just before the pulse to its end; P_dis = V_min (OCV - V_min) / R_dis;
    # P_regen = V_max (V_max - OCV) / R_regen.  Numbers are ours: OCV 3.700 V, 4.8 A discharge
    # pulse ending at 3.580 V, 3.6 A regen pulse ending at 3.790 V, limits 2.5 / 4.2 V.
    r_dis = pulse_resistance(3.700, 0.0, 3.580, 4.8)
    r_reg = pulse_resistance(3.700, 0.0, 3.790, -3.6)
    assert r_dis == pytest.approx(0.025)
    assert r_reg == pytest.approx(0.025)
    assert discharge_power_w(3.700, r_dis, 2.5) == pytest.approx(2.5 * 1.2 / 0.025)  # 120 W
    assert regen_power_w(3.700, r_reg, 4.2) == pytest.approx(4.2 * 0.5 / 0.025)  # 84 W


def test_power_table_matches_the_definition_on_a_simulated_test():
    # A 10 s pulse on a one-RC cell: dV/dI over the pulse = R0 + R1 (1 - exp(-T/tau1)) + the OCV
    # drop per ampere, dOCV/dSOC * T / (3600 Q), to first order (analytic step response and
    # coulomb counting; the sampling rule's half-current edge intervals shift T by at most one
    # fine sample, 0.1 s here).
    m = _model(1)
    t, i = hppc_profile(4.8, pulse_currents_a=(4.8,), dt_s=1.0, fine_dt_s=0.1)
    sim = simulate(m, t, i)
    res = identify_pulse_test(Recording(t, i, sim.voltage_v, name="p"), 4.8, rc_pairs=1)
    rows = pulse_power_table([res], 2.5, 4.2)
    dis = [r for r in rows if r.direction == "discharge"]
    reg = [r for r in rows if r.direction == "regen"]
    assert len(dis) == 5 and len(reg) == 5
    for r in dis:
        expect = (m.r0_ohm.at(r.soc) + m.rc[0].r_ohm.at(r.soc) * (1 - np.exp(-10.0 / 30.0))
                  + OCV.slope(r.soc) * 10.0 / (3600.0 * 4.8))
        assert r.pulse_resistance_ohm == pytest.approx(expect, rel=0.01)
        assert r.power_w == pytest.approx(2.5 * (r.ocv_v - 2.5) / r.pulse_resistance_ohm)
    for r in reg:
        assert r.power_w == pytest.approx(4.2 * (4.2 - r.ocv_v) / r.pulse_resistance_ohm)
