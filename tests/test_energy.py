"""Energy-based SOC, rest energy, usable energy at a load, pack scaling, ``socfuse energy``."""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad
from scipy.optimize import brentq

from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.filters.energy import (EnergyError, EnergyTable, PackConfig, energy_table, parse_pack,
                              remaining_energy_wh, rest_energy_wh, soc_c_to_e, soc_e_to_c, usable_energy)
from socfuse.models.modelfile import save_model
from socfuse.models.ocv import OcvCurve
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CellModel, RcPair

# An NMC-type curve from 4.2 V full to 2.5 V empty; invented shape for demo cell C48.
NMC_SOC = np.linspace(0.0, 1.0, 11)
NMC_V = np.array([2.50, 3.30, 3.48, 3.58, 3.64, 3.70, 3.78, 3.87, 3.97, 4.08, 4.20])


def nmc_model(r0=0.030, rc=((0.015, 30.0),), capacity_ah=4.8, v_min_v=2.5) -> CellModel:
    pairs = tuple(RcPair(ParamTable.constant(r, "r_ohm"), ParamTable.constant(t, "tau_s")) for r, t in rc)
    return CellModel(capacity_ah, OcvCurve(NMC_SOC, NMC_V), ParamTable.constant(r0, "r0_ohm"), pairs,
                     v_min_v=v_min_v, name="demo cell C48 (test)")


def linear_model(a=3.0, b=1.2, r0=0.05, rc=(), capacity_ah=4.8, v_min_v=3.1) -> CellModel:
    s = np.linspace(0.0, 1.0, 6)
    pairs = tuple(RcPair(ParamTable.constant(r, "r_ohm"), ParamTable.constant(t, "tau_s")) for r, t in rc)
    return CellModel(capacity_ah, OcvCurve(s, a + b * s), ParamTable.constant(r0, "r0_ohm"), pairs,
                     v_min_v=v_min_v, v_max_v=a + b + 0.1)


# ----------------------------------------------------------------------------- rest energy
def test_constant_ocv_gives_soc_e_equal_soc_c():
    # analytic: E(z) = Q c z, so SOC_E = z (a constant is not an OcvCurve, so the table is built directly)
    tab = EnergyTable.from_points([0.0, 0.5, 1.0], [3.6, 3.6, 3.6], 4.8)
    z = np.linspace(0.0, 1.0, 101)
    np.testing.assert_allclose(tab.soc_e(z), z, rtol=0, atol=1e-15)
    assert tab.full_energy_wh() == pytest.approx(4.8 * 3.6, rel=1e-15)


@pytest.mark.parametrize("lo,hi", [(0.0, 1.0), (0.1, 0.9)])
def test_linear_ocv_matches_closed_form(lo, hi):
    # analytic: OCV = a + b s  ->  E(z) = Q (a z + b z^2 / 2); breakpoints inside [0, 1] test the
    # linear extrapolation of OcvCurve, which continues the same line
    a, b, q = 3.1, 1.1, 4.8
    s = np.linspace(lo, hi, 7)
    m = CellModel(q, OcvCurve(s, a + b * s), ParamTable.constant(0.03))
    z = np.linspace(0.0, 1.0, 21)
    np.testing.assert_allclose(remaining_energy_wh(m, z), q * (a * z + 0.5 * b * z ** 2), rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(soc_c_to_e(m, z), (a * z + 0.5 * b * z ** 2) / (a + 0.5 * b), rtol=1e-13, atol=1e-15)


def test_integral_matches_scipy_quad_with_temperature_rows():
    # reference: scipy.integrate.quad of the model's own OcvCurve.voltage (exactness of the interpolant
    # integral, including the linear end pieces and the linear mix in temperature)
    s = np.array([0.02, 0.1, 0.3, 0.5, 0.7, 0.9, 0.98])
    rows = np.array([[3.0, 3.4, 3.6, 3.7, 3.85, 4.05, 4.15],
                     [3.1, 3.45, 3.62, 3.72, 3.88, 4.07, 4.17]])
    m = CellModel(4.8, OcvCurve(s, rows, temperature_c=[5.0, 25.0]), ParamTable.constant(0.03))
    for t in (0.0, 12.0, 25.0, 40.0):
        for z in (0.01, 0.37, 0.99, 1.0):
            ref = 4.8 * quad(lambda x: float(m.ocv.voltage(x, t)), 0.0, z, points=list(s[s < z]),
                             epsabs=1e-13, epsrel=1e-13)[0]
            assert remaining_energy_wh(m, z, t) == pytest.approx(ref, rel=1e-10)
    # vectorised over per-sample temperatures equals the scalar calls
    z = np.array([0.2, 0.5, 0.8])
    t = np.array([5.0, 15.0, 25.0])
    vec = soc_c_to_e(m, z, t)
    np.testing.assert_allclose(vec, [soc_c_to_e(m, zi, ti) for zi, ti in zip(z, t)], rtol=1e-14)


def test_soc_outside_range_clips_and_rest_energy_default_full():
    m = nmc_model()
    assert soc_c_to_e(m, -0.2) == 0.0 and soc_c_to_e(m, 1.3) == 1.0
    assert rest_energy_wh(m) == pytest.approx(remaining_energy_wh(m, 1.0), rel=1e-15)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.001, 0.5), min_size=3, max_size=12), st.floats(2.0, 3.5),
       st.floats(0.0, 1.0))
def test_soc_e_never_above_soc_c_for_increasing_ocv(steps, v0, z):
    # mean of an increasing function over [0, z] <= its mean over [0, 1] (calculus), hence SOC_E <= SOC_C
    v = v0 + np.cumsum(steps)
    s = np.linspace(0.0, 1.0, v.size)
    m = CellModel(4.8, OcvCurve(s, v), ParamTable.constant(0.03))
    assert soc_c_to_e(m, z) <= z + 1e-12


def test_nmc_soc_e_several_points_below_mid_range():
    # fact of the trade (common practice, no source): on a 4.2 V .. 2.5 V NMC-type curve the energy-based
    # SOC is several points below the capacity-based SOC mid-range
    m = nmc_model()
    gap = 100 * (np.array([0.3, 0.5, 0.7]) - soc_c_to_e(m, [0.3, 0.5, 0.7]))
    assert np.all(gap > 2.0) and np.all(gap < 8.0), gap
    # the same numbers, computed once: 50 % SOC_C is about 46.9 % SOC_E on this curve
    assert 100 * soc_c_to_e(m, 0.5) == pytest.approx(46.9, abs=0.3)


def test_round_trip_both_ways():
    # identity check of the inverse: soc_c_to_e(soc_e_to_c(x)) == x and the other way round
    m = nmc_model()
    x = np.linspace(0.0, 1.0, 201)
    np.testing.assert_allclose(soc_c_to_e(m, soc_e_to_c(m, x)), x, rtol=0, atol=1e-12)
    np.testing.assert_allclose(soc_e_to_c(m, soc_c_to_e(m, x)), x, rtol=0, atol=1e-12)
    assert soc_e_to_c(m, 0.5) > 0.5  # more charge than half is needed for half the energy


def test_energy_table_is_reused_and_has_a_default_temperature():
    m = nmc_model()
    assert energy_table(m) is energy_table(m)
    tab = energy_table(m, temperature_c=10.0)
    assert tab.default_temperature_c == 10.0 and tab is not energy_table(m)


def test_bad_table_refused():
    with pytest.raises(EnergyError, match="positive"):
        EnergyTable.from_points([0.0, 1.0], [3.0, -1.0], 4.8)
    with pytest.raises(EnergyError, match="capacity"):
        EnergyTable.from_points([0.0, 1.0], [3.0, 4.0], 0.0)


# ----------------------------------------------------------------------------- at a load
def test_zero_load_equals_rest_energy_and_energy_falls_with_load():
    m = nmc_model()
    for soc0 in (1.0, 0.6):
        rest = float(remaining_energy_wh(m, soc0))
        r0 = usable_energy(m, current_a=0.0, soc0=soc0)
        assert r0.energy_wh == pytest.approx(rest, rel=1e-15) and r0.runtime_s == math.inf
        energies = [usable_energy(m, current_a=i, soc0=soc0).energy_wh for i in (0.05, 1.0, 4.8, 9.6, 14.4)]
        assert energies[0] == pytest.approx(rest, rel=2e-3)  # a tiny load is nearly the rest energy
        assert np.all(np.diff(energies) < 0) and energies[0] < rest
    powers = [usable_energy(m, power_w=p).energy_wh for p in (0.0, 2.0, 10.0, 30.0)]
    assert np.all(np.diff(powers) < 0)


def test_constant_current_with_rc_pair_matches_analytic_step_response():
    # analytic: linear OCV a + b z, constant R0, one RC pair from rest under a current step,
    # v(t) = a + b z(t) - R0 I - R1 I (1 - exp(-t / tau)), z(t) = 1 - I t / (3600 Q);
    # cut-off by scipy.optimize.brentq on v(t) = v_min, energy = I * integral of v dt in closed form
    a, b, r0, r1, tau, q, vmin, i = 3.0, 1.2, 0.05, 0.03, 120.0, 4.8, 3.1, 4.8
    m = linear_model(a, b, r0, ((r1, tau),), q, vmin)
    k = i / (3600 * q)
    v = lambda t: a + b * (1 - k * t) - r0 * i - r1 * i * (1 - math.exp(-t / tau))
    t_cut = brentq(lambda t: v(t) - vmin, 1.0, 1 / k, xtol=1e-9)
    integral = ((a + b - r0 * i - r1 * i) * t_cut - 0.5 * b * k * t_cut ** 2
                + r1 * i * tau * (1 - math.exp(-t_cut / tau)))
    res = usable_energy(m, current_a=i, n_steps=4000)
    assert res.cutoff_reason == "voltage"
    assert res.runtime_s == pytest.approx(t_cut, rel=1e-4)
    assert res.cutoff_soc == pytest.approx(1 - k * t_cut, abs=1e-4)
    assert res.energy_wh == pytest.approx(i * integral / 3600, rel=1e-5)


def test_constant_power_matches_analytic_resistive_load():
    # analytic: (nearly) flat OCV E0 behind R0: P = (E0 - R I) I gives I = (E0 - sqrt(E0^2 - 4 R P)) / (2 R);
    # the cell empties (SOC 0) after 3600 Q / I seconds and delivers P * t
    e0, r, q, p = 3.7, 0.05, 4.8, 20.0
    s = np.linspace(0.0, 1.0, 3)
    m = CellModel(q, OcvCurve(s, e0 + 1e-9 * s), ParamTable.constant(r), v_min_v=2.5)
    i = (e0 - math.sqrt(e0 ** 2 - 4 * r * p)) / (2 * r)
    res = usable_energy(m, power_w=p)
    assert res.cutoff_reason == "empty"
    assert res.runtime_s == pytest.approx(3600 * q / i, rel=1e-6)
    assert res.energy_wh == pytest.approx(p * q / i, rel=1e-6)
    assert res.mean_current_a == pytest.approx(i, rel=1e-6)


def test_peak_current_brings_the_cut_off_forward():
    # analytic: linear OCV a + b z behind R0 only, steady current I with peaks of I_pk: the cut-off
    # arrives where a + b z - R0 I_pk = v_min, and the energy is I * Q * integral of (a + b z - R0 I) dz
    # from that z to 1 (closed form)
    a, b, r0, q, vmin, i, i_pk = 3.0, 1.2, 0.05, 4.8, 3.1, 2.4, 12.0
    m = linear_model(a, b, r0, (), q, vmin)
    z_cut = (vmin - a + r0 * i_pk) / b
    energy = q * ((a - r0 * i) * (1 - z_cut) + 0.5 * b * (1 - z_cut ** 2))
    res = usable_energy(m, current_a=i, peak_current_a=i_pk, n_steps=4000)
    assert res.cutoff_soc == pytest.approx(z_cut, abs=1e-6)
    assert res.energy_wh == pytest.approx(energy, rel=1e-6)
    plain = usable_energy(m, current_a=i)
    assert plain.energy_wh > res.energy_wh
    # an RC pair adds R1 (1 - exp(-d / tau)) to the peak's drop (first-order RC step response)
    r1, tau, d = 0.03, 20.0, 10.0
    m_rc = linear_model(a, b, r0, ((r1, tau),), q, vmin)
    res_rc = usable_energy(m_rc, current_a=i, peak_current_a=i_pk, peak_duration_s=d, n_steps=4000)
    # by then the RC pair is in steady state at the running current: v = a + b z - (R0 + R1) I
    z_cut_rc = (vmin - a + r0 * i_pk + r1 * i + r1 * (1 - math.exp(-d / tau)) * (i_pk - i)) / b
    assert res_rc.cutoff_soc == pytest.approx(z_cut_rc, abs=1e-5)


def test_usable_energy_refuses_bad_loads():
    m = nmc_model()
    with pytest.raises(EnergyError, match="exactly one"):
        usable_energy(m)
    with pytest.raises(EnergyError, match="exactly one"):
        usable_energy(m, current_a=1.0, power_w=1.0)
    with pytest.raises(EnergyError, match=">= 0"):
        usable_energy(m, current_a=-1.0)
    with pytest.raises(EnergyError, match="peak"):
        usable_energy(m, current_a=1.0, peak_current_a=5.0, peak_duration_s=0.0)


# ----------------------------------------------------------------------------- pack
def test_parse_pack():
    assert parse_pack("14s4p") == PackConfig(14, 4)
    assert parse_pack(" 14S4P ") == PackConfig(14, 4)
    assert parse_pack(None) == PackConfig(1, 1)
    assert parse_pack("14s4p").n_cells == 56
    for bad in ("14x4", "s4p", "14s", "0s4p", "14s4p2", "-1s2p"):
        with pytest.raises(EnergyError):
            parse_pack(bad)


def test_pack_scaling():
    # series multiplies voltage, parallel multiplies capacity and current (common practice, no source):
    # a 14s4p pack at 4 I delivers 56 times the energy of one cell at I over the same runtime
    m = nmc_model()
    cell = usable_energy(m, current_a=2.4)
    pack = usable_energy(m, current_a=9.6, pack="14s4p")
    assert pack.energy_wh == pytest.approx(56 * cell.energy_wh, rel=1e-12)
    assert pack.runtime_s == pytest.approx(cell.runtime_s, rel=1e-12)
    assert pack.mean_voltage_v == pytest.approx(14 * cell.mean_voltage_v, rel=1e-12)
    cell_p = usable_energy(m, power_w=8.0)
    pack_p = usable_energy(m, power_w=8.0 * 56, pack=PackConfig(14, 4))
    assert pack_p.energy_wh == pytest.approx(56 * cell_p.energy_wh, rel=1e-9)


# ----------------------------------------------------------------------------- CLI
def test_cli_energy_table(tmp_path, capsys):
    path = tmp_path / "c48.json"
    save_model(nmc_model(), path)
    assert main(["energy", "--model", str(path), "--load-a", "9.6", "--pack", "14s4p"]) == 0
    cap = capsys.readouterr()
    out = cap.out
    assert SAFETY_NOTE in cap.err and SAFETY_NOTE not in out  # results on stdout, the caution on stderr
    row50 = next(line for line in out.splitlines() if line.split()[:1] == ["50"])
    assert float(row50.split()[1]) == pytest.approx(100 * float(soc_c_to_e(nmc_model(), 0.5)), abs=0.006)
    assert "runtime" in out and "cut-off at SOC_C" in out and "14s4p" in out
    # usable capacity (issue 13, item 2): the charge to the cut-off at this load, (1 - z_cut) Q M Ah from full
    # (definition of the usable capacity at a load: remaining charge above the cut-off SOC, DESIGN.md section 2)
    full = usable_energy(nmc_model(), current_a=9.6, pack="14s4p", n_steps=1000)
    q_pack = 4 * nmc_model().capacity_ah
    assert f"usable capacity at 9.6 A, 25.0 degC: {(1.0 - full.cutoff_soc) * q_pack:.3f} Ah from full" in out
    row100 = next(line for line in out.splitlines() if line.split()[:1] == ["100"])
    assert float(row100.split()[-1]) == pytest.approx(100.0)  # usable SOC of a full cell
    assert float(row100.split()[-2]) == pytest.approx((1.0 - full.cutoff_soc) * q_pack, abs=1e-3)
    assert main(["energy", "--model", str(path), "--load-w", "300", "--peak-a", "40", "--pack", "14s4p"]) == 0
    out = capsys.readouterr().out
    expected = usable_energy(nmc_model(), power_w=300.0, peak_current_a=40.0, pack="14s4p", n_steps=1000)
    assert f"usable energy at 300 W with 40 A peaks: {expected.energy_wh:.2f} Wh" in out
    assert main(["energy", "--model", str(path), "--pack", "14x4p"]) == 2
    assert "NsMp" in capsys.readouterr().err
