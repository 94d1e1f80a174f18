"""The kernel tables keep every identified temperature breakpoint exactly (Python and exported C).

A model identified at -9.71, 0.56, 10.77 and 25.83 degC (the case temperatures of the Panasonic
18650PF pulse tests, Kollmeyer 2018) must give its identified R2 table back at 0.56 degC, not a
value interpolated between rows of a uniform grid (which put rows at -9.71, 2.14, 13.98, 25.83).
The reference is the model's own table: a piecewise-linear look-up reproduces its nodes exactly
(definition of linear interpolation; common practice, no source).
"""
from __future__ import annotations

import subprocess

import numpy as np
import pytest

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import run_ekf, setup
from socfuse.estimator.filters.settings import default_settings
from socfuse.estimator.filters.tables import KernelTables
from socfuse.estimator.outputs.export_c import CFLAGS, find_c_compiler, render_sources
from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CellModel, RcPair

TEMPS = np.array([-9.71, 0.56, 10.77, 25.83])
SOC = np.linspace(0.0, 1.0, 11)


def cold_model() -> CellModel:
    """An invented 2.9 Ah cell whose R0/RC tables are identified at the four case temperatures."""
    ocv = 3.0 + 1.0 * SOC + 0.2 * SOC ** 2
    r0 = np.stack([0.060 - 0.01 * SOC, 0.035 - 0.006 * SOC, 0.028 - 0.004 * SOC, 0.022 - 0.003 * SOC])
    # R2 with a kink at 0.56 degC (not collinear across the rows): a uniform grid cannot keep it
    r2 = np.stack([0.090 - 0.02 * SOC, 0.030 + 0.01 * SOC, 0.025 - 0.002 * SOC, 0.012 + 0.001 * SOC])
    pairs = (RcPair(ParamTable(SOC, np.stack([0.02, 0.012, 0.009, 0.007])[:, None] + 0 * SOC, TEMPS, "r1_ohm"),
                    ParamTable.constant(20.0, "tau1_s")),
             RcPair(ParamTable(SOC, r2, TEMPS, "r2_ohm"), ParamTable(SOC, np.full((4, 11), 300.0), TEMPS, "tau2_s")))
    return CellModel(2.9, OcvCurve(SOC, ocv), ParamTable(SOC, r0, TEMPS, "r0_ohm"), pairs, 0.99, None,
                     name="cold test cell (invented)")


def test_axis_is_the_breakpoints_and_r2_is_exact_at_0p56():
    m = cold_model()
    tab = KernelTables.from_model(m, 401)
    assert tab.temp_grid.tolist() == TEMPS.tolist()
    assert tab.packed.shape == (5 + 2 * 2, 4, 401)   # the rows and the temperature-axis row
    row_r2 = 4 + 1
    ident = m.rc[1].r_ohm.values[1]                  # the identified R2 row at 0.56 degC
    got = np.array([K.table_value(tab.packed, row_r2, z, 0.56, tab.t_min, tab.t_step) for z in SOC])
    np.testing.assert_allclose(got, ident, rtol=0, atol=1e-15)
    np.testing.assert_allclose(tab.lookup(row_r2, SOC, 0.56), ident, rtol=0, atol=1e-15)
    # between breakpoints: linear in temperature between the two identified rows (the model's own rule)
    for t in (-3.0, 5.0, 20.0):
        np.testing.assert_allclose(tab.lookup(row_r2, SOC, t), m.rc[1].r_ohm.at(SOC, t), rtol=0, atol=1e-14)
    # clamped outside the axis, NaN read as 25 degC (kernels.DEFAULT_TEMP_C)
    assert K.table_value(tab.packed, row_r2, 0.5, -40.0, 0.0, 1.0) == pytest.approx(m.rc[1].r_ohm.at(0.5, -9.71))
    assert K.table_value(tab.packed, row_r2, 0.5, np.nan, 0.0, 1.0) == pytest.approx(m.rc[1].r_ohm.at(0.5, 25.0))


def test_envelope_follows_the_axis():
    su = setup(cold_model())
    # the operating envelope is the axis plus the margin (kernels.ENVELOPE_MARGIN_C)
    assert su.prm[K.P_TENV_LO] == pytest.approx(-9.71 - K.ENVELOPE_MARGIN_C)
    assert su.prm[K.P_TENV_HI] == pytest.approx(25.83 + K.ENVELOPE_MARGIN_C)


_DRIVER = r"""
#include <stdio.h>
#include "socfuse_ekf.c"
int main(void) {
    int it0, it1, is0;
    float wt, ws;
    int k;
    sfx_temp_index(0.56f, &it0, &it1, &wt);
    printf("%d %d %.9g\n", it0, it1, (double)wt);
    for (k = 0; k <= 10; k++) {
        sfx_soc_index((float)k / 10.0f, &is0, &ws);
        printf("%.9g\n", (double)sfx_bil(5, it0, it1, wt, is0, ws));
    }
    return 0;
}
"""


def test_exported_c_keeps_the_breakpoints(tmp_path):
    cc = find_c_compiler()
    if cc is None:
        pytest.skip("no C compiler (cc, gcc, clang) on PATH")
    m = cold_model()
    for name, text in render_sources(m).items():
        (tmp_path / name).write_text(text)
    (tmp_path / "axis_driver.c").write_text(_DRIVER)
    exe = tmp_path / "axis_driver"
    subprocess.run([cc, *CFLAGS, "-Wno-unused-function", "-o", str(exe), str(tmp_path / "axis_driver.c"), "-lm"],
                   check=True, cwd=tmp_path, capture_output=True)
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split("\n")
    it0, it1, wt = out[0].split()
    assert (int(it0), int(it1), float(wt)) == (1, 2, 0.0)   # exactly the 0.56 degC row
    got = np.array([float(v) for v in out[1:12]])
    # float32 tables (the C export's precision): within one float32 rounding of the identified row
    np.testing.assert_allclose(got, m.rc[1].r_ohm.values[1].astype(np.float32), rtol=2e-7, atol=0)


def test_ekf_at_a_breakpoint_temperature_uses_only_that_row():
    # a 0.56 degC recording uses only the 0.56 degC row: the result is the same as for a model that
    # has only that row (one temperature), to rounding
    m = cold_model()
    n = 600
    t = np.arange(n, dtype=float)
    i = 1.5 + 1.0 * np.sin(t / 30.0)
    rec0 = Recording(t, i, np.full(n, 3.7), np.full(n, 0.56), None, "flat")
    row = [ParamTable(SOC, p.values[1], None, p.name) for p in (m.r0_ohm, m.rc[0].r_ohm, m.rc[1].r_ohm)]
    m1 = m.with_(r0_ohm=row[0], rc=(RcPair(row[1], m.rc[0].tau_s), RcPair(row[2], ParamTable.constant(300.0, "tau2_s"))))
    # the resistance error's temperature axis off: the one-row model has no 25 degC row to scale from
    s = default_settings(m).with_(resistance_error_r0_exponent=0.0)
    a = run_ekf(m, rec0, s, soc0=0.6)
    b = run_ekf(m1, rec0.with_(temperature_c=None), s, soc0=0.6)
    np.testing.assert_allclose(a.states, b.states, rtol=0, atol=1e-12)


_RERR_DRIVER = r"""
#include <stdio.h>
#include "socfuse_ekf.c"
int main(void) {
    const float temps[4] = {-9.71f, 0.56f, 5.0f, 25.83f};
    int it0, it1, k;
    float wt;
    for (k = 0; k < 4; k++) {
        sfx_temp_index(temps[k], &it0, &it1, &wt);
        printf("%.9g\n", (double)sfx_rerr(it0, it1, wt));
    }
    return 0;
}
"""


def test_resistance_error_follows_r0_over_temperature_in_python_and_c(tmp_path):
    # kernels.resistance_sigma: sigma_R(T) = resistance_error_ohm * R0(50 %, T) / R0(50 %, 25 degC).
    # Reference: the model's own R0 rows (linear interpolation reproduces them; common practice, no
    # source); 25 degC lies between the 10.77 and 25.83 rows.
    m = cold_model()
    s = default_settings(m)
    su = setup(m, s)
    r0_25 = m.r0_ohm.at(0.5, 25.0)
    assert su.prm[K.P_R0REF] == pytest.approx(r0_25, rel=1e-12)
    want = [s.resistance_error_ohm * m.r0_ohm.at(0.5, t) / r0_25 for t in (-9.71, 0.56, 5.0, 25.83)]
    got = [K.resistance_sigma_at(su.tables.packed, su.prm, t) for t in (-9.71, 0.56, 5.0, 25.83)]
    np.testing.assert_allclose(got, want, rtol=1e-12)
    assert got[0] / got[3] == pytest.approx(0.055 / 0.0205, rel=1e-12)  # R0 rows at 50 %: 55 and 20.5 mOhm
    cc = find_c_compiler()
    if cc is None:
        pytest.skip("no C compiler (cc, gcc, clang) on PATH")
    for name, text in render_sources(m, s).items():
        (tmp_path / name).write_text(text)
    (tmp_path / "rerr_driver.c").write_text(_RERR_DRIVER)
    exe = tmp_path / "rerr_driver"
    subprocess.run([cc, *CFLAGS, "-Wno-unused-function", "-o", str(exe), str(tmp_path / "rerr_driver.c"), "-lm"],
                   check=True, cwd=tmp_path, capture_output=True)
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split()
    np.testing.assert_allclose([float(v) for v in out], want, rtol=1e-6)   # float32 arithmetic


@pytest.mark.skipif(find_c_compiler() is None, reason="no C compiler (cc, gcc, clang) on PATH")
def test_exported_c_follows_python_on_a_cell_warming_from_0_degc(tmp_path):
    # a cold soak then a drive on which the case warms 0.6 -> 14 degC (as the Panasonic 0 degC US06):
    # the float32 C step stays within 1e-4 SOC of Python (issue 11 speed-and-scope rule), and the
    # resistance error's temperature axis matters on it (the answer differs with the axis off)
    from socfuse.estimator.outputs.export_c import export_c
    from socfuse.models import simulate

    m = cold_model()
    n = 3000
    t = np.arange(n, dtype=float)
    i = 1.0 + 4.0 * (np.sin(t / 23.0) > 0.2) - 2.0 * (np.sin(t / 61.0) > 0.9)   # A, mean about 2.4 A
    temp = np.linspace(0.6, 14.0, n)
    sim = simulate(m, t, i, soc0=0.95, temperature_c=temp)
    rng = np.random.default_rng(5)
    rec = Recording(t, i, sim.voltage_v + rng.normal(0.0, 0.002, n), temp, sim.soc, "warming drive (simulated)")
    s = default_settings(m)
    res = export_c(m, s, tmp_path / "c", rec)
    assert res.harness_exit == 0 and res.max_soc_diff is not None and res.max_soc_diff < 1e-4
    on = run_ekf(m, rec, s, soc0=0.8)
    off = run_ekf(m, rec, s.with_(resistance_error_r0_exponent=0.0), soc0=0.8)
    assert np.max(np.abs(on.soc - off.soc)) > 5e-4   # 1.3e-3 when written
