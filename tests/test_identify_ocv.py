"""Low-rate OCV test: step finding, capacity, branch average, efficiency, monotone fit, breakpoints."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator
from scipy.optimize import lsq_linear

from socfuse.models import CellModel, Hysteresis, OcvCurve, ParamTable, RcPair, Recording, simulate
from socfuse.models.identify.curves import greedy_breakpoints, isotonic_increasing
from socfuse.models.identify.ocvtest import find_steps, identify_ocv_test
from socfuse.models.identify.synthetic import low_rate_profile

SOC = np.linspace(0.0, 1.0, 21)
OCV = OcvCurve(SOC, 3.0 + 1.2 * SOC - 0.3 * np.sin(np.pi * SOC) + 0.15 * SOC ** 3)  # invented, monotone


def _model(eta=1.0, hyst=None):
    return CellModel(2.0, OCV, ParamTable(SOC, 0.03 + 0 * SOC),
                     (RcPair(ParamTable(SOC, 0.01 + 0 * SOC), ParamTable(SOC, 40.0 + 0 * SOC)),),
                     coulombic_efficiency=eta, hysteresis=hyst)


def test_isotonic_fit_is_the_least_squares_projection():
    # Reference: scipy.optimize.lsq_linear on y = c + cumsum(d), d >= 0 (the same convex problem:
    # least squares over non-decreasing sequences).
    rng = np.random.default_rng(5)
    y = np.linspace(0, 1, 60) + rng.normal(0, 0.08, 60)
    n = y.size
    a = np.tril(np.ones((n, n)))  # column 0 = level, columns 1.. = non-negative increments
    sol = lsq_linear(a, y, bounds=(np.r_[-np.inf, np.zeros(n - 1)], np.full(n, np.inf)), tol=1e-12)
    np.testing.assert_allclose(isotonic_increasing(y), a @ sol.x, atol=1e-6)


def test_greedy_breakpoints_find_the_bend():
    # A curve that is straight except for a sharp knee at 0.3: the first inserted breakpoint is the knee.
    g = np.linspace(0, 1, 401)
    v = np.where(g < 0.3, 3.0 + 2.0 * g, 3.6 + 0.5 * (g - 0.3))
    idx = greedy_breakpoints(g, v, 3)
    assert abs(g[idx[1]] - 0.3) <= 0.005
    # and more breakpoints make the PCHIP of the breakpoints closer (monotone error decrease)
    errs = []
    for n in (4, 8, 16):
        k = greedy_breakpoints(g, v, n)
        errs.append(np.max(np.abs(PchipInterpolator(g[k], v[k])(g) - v)))
    assert errs[0] > errs[1] > errs[2]


@pytest.fixture(scope="module")
def both_branches():
    m = _model(hyst=Hysteresis(gamma=50.0, max_v=0.01))
    t, i = low_rate_profile(2.0, rate_c=0.05, dt_s=60.0)
    sim = simulate(m, t, i, soc0=1.0, h0=1.0)
    return m, Recording(t, i, sim.voltage_v, name="c20 synthetic")


def test_steps_capacity_and_average_curve(both_branches):
    # Invented cell simulated with models.simulate (a round trip).  The profile removes exactly
    # 2.0 Ah between full and empty; 1 Ah = 3600 C (common practice, no source).
    m, rec = both_branches
    kinds = [s.kind for s in find_steps(rec)]
    assert kinds == ["rest", "discharge", "rest", "charge", "rest"]
    res = identify_ocv_test(rec, n_breakpoints=25)
    assert res.capacity_ah == pytest.approx(2.0, rel=1e-9)
    g = np.linspace(0.1, 0.9, 81)
    # the mean of the branches cancels the resistive drop (R0 + R1 at C/20 = 4 mV here) and the
    # symmetric hysteresis (10 mV) to within 1 mV
    assert np.max(np.abs(res.ocv.voltage(g) - OCV.voltage(g))) < 1e-3
    # the half-gap is the hysteresis plus the resistive drop: 10 mV + 0.1 A x 40 mOhm
    assert res.hysteresis_v == pytest.approx(0.010 + 0.1 * 0.04, abs=1e-3)
    # the charge is constant-current only: no taper, so the efficiency is not estimated
    assert res.coulombic_efficiency is None
    assert any("coulombic efficiency not estimated" in n for n in res.notes)


def test_coulombic_efficiency_from_a_charge_with_taper():
    m = _model(eta=0.99)
    t, i = low_rate_profile(2.0, rate_c=0.05, dt_s=60.0, charge=False)
    # charge back 2.0 / 0.99 Ah: CC for 95 %, then a linear taper to 0 (a constant-voltage phase)
    q = 2.0 / 0.99
    i_c = 0.1
    n_cc = int(round(0.95 * q * 3600 / i_c / 60.0))
    q_cc = i_c * n_cc * 60.0 / 3600  # sampling rule: n intervals at the CC current
    n_tp = 60
    # taper samples i_c (1 - k / n_tp); the interval length is chosen so the charge adds up to q
    taper = i_c * (1 - np.arange(1, n_tp + 1) / n_tp)
    u = 0.5 * (np.r_[i_c, taper[:-1]] + taper)
    dt_tp = (q - q_cc + i_c * 60.0 / 2 / 3600) * 3600 / np.sum(u)
    tt = list(t)
    cc = list(i)
    for _ in range(n_cc):
        tt.append(tt[-1] + 60.0)
        cc.append(-i_c)
    for k in range(n_tp):
        tt.append(tt[-1] + dt_tp)
        cc.append(-taper[k])
    for _ in range(30):
        tt.append(tt[-1] + 60.0)
        cc.append(0.0)
    tt, cc = np.array(tt), np.array(cc)
    sim = simulate(m, tt, cc, soc0=1.0)
    res = identify_ocv_test(Recording(tt, cc, sim.voltage_v, name="c20 with taper"))
    # efficiency = discharged / charged; the taper's last samples below the rest threshold
    # (5 % of the test current) are not counted, a few ppm of the charge here
    assert res.coulombic_efficiency == pytest.approx(0.99, abs=2e-4)


def test_discharge_only_says_what_it_cannot_estimate():
    m = _model()
    t, i = low_rate_profile(2.0, rate_c=0.05, dt_s=60.0, charge=False)
    sim = simulate(m, t, i)
    res = identify_ocv_test(Recording(t, i, sim.voltage_v, name="discharge only"))
    assert res.capacity_ah == pytest.approx(2.0, rel=1e-9)
    assert res.hysteresis_v is None and res.coulombic_efficiency is None
    assert any("no low-rate charge step" in n for n in res.notes)
    g = np.linspace(0.1, 0.9, 81)
    # the discharge branch sits below the OCV by the resistive drop 0.1 A x (30 + 10) mOhm = 4 mV
    np.testing.assert_allclose(res.ocv.voltage(g) - OCV.voltage(g), -0.004, atol=5e-4)
    assert np.all(np.diff(res.ocv.ocv_v[0]) > 0)


def test_no_step_is_a_clear_error():
    t = np.arange(0.0, 100.0)
    with pytest.raises(ValueError, match="no low-rate discharge or charge step"):
        identify_ocv_test(Recording(t, np.zeros(t.size), np.full(t.size, 3.7), name="flat.csv"))
