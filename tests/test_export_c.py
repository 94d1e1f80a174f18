"""C99 export: the exported filter is the same filter as the Python kernels, checked by compiling it.

References used beside the checks:
- The float64 Python kernels (estimator.kernels), themselves checked against filterpy elsewhere:
  the harness must stay within 1e-4 SOC of them at every row (issue 7 acceptance bound).
- scipy.integrate.cumulative_trapezoid: the coulomb count the C baseline must reproduce over a
  day of 10 Hz samples in single precision (the compensated sum at work).
- IEEE 754-2008, section 5.12.2: 9 significant decimal digits round-trip every binary32 value.
- The C99 standard (ISO/IEC 9899:1999): the sources must build with -std=c99 -pedantic.
"""
from __future__ import annotations

import json
import subprocess
from pathlib import Path

import numpy as np
import pytest

from socfuse.estimator.outputs.export_c import (CFLAGS, MARKER_NAME, ExportError, c_float, export_c, find_c_compiler,
                                parse_harness_output, safe_text)
from socfuse.estimator.filters.settings import default_settings
from socfuse.models.loaders import load_recording
from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CellModel, RcPair
from socfuse.estimator.demo.truth import truth_cell_model

CC = find_c_compiler()
needs_cc = pytest.mark.skipif(CC is None, reason="no C compiler (cc, gcc or clang) on PATH: cannot build the export")
PEDANTIC = ("-std=c99", "-pedantic", "-Wconversion", "-O2", "-Wall", "-Wextra", "-Werror")


def _build(folder: Path, flags=CFLAGS, extra=("harness.c",), out="harness") -> subprocess.CompletedProcess:
    return subprocess.run([CC, *flags, "-o", out, *extra, "socfuse_ekf.c", "-lm"], cwd=folder, capture_output=True,
                          text=True, timeout=120)


def _harness(folder: Path, golden: Path) -> tuple[subprocess.CompletedProcess, dict]:
    run = subprocess.run([str(folder / "harness"), str(golden)], capture_output=True, text=True, timeout=120)
    return run, parse_harness_output(run.stdout)


@pytest.fixture(scope="module")
def demo_day() -> Recording:
    repo = Path(__file__).resolve().parents[1]
    path = repo / "datasets" / "c48_day_lunch.csv"
    if not path.is_file():
        pytest.skip("bundled demo day datasets/c48_day_lunch.csv not present")
    return load_recording(path)


def _simple_model(name="simple cell") -> CellModel:
    """One RC pair, no temperature axis, no hysteresis, eta = 1 (the smallest configuration)."""
    truth = truth_cell_model()
    soc = truth.ocv.soc
    return CellModel(truth.capacity_ah, OcvCurve(soc, truth.ocv.voltage(soc, 25.0)), ParamTable.constant(0.02, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.012, "r1"), ParamTable.constant(40.0, "tau1")),), 1.0, None,
                     2.5, 4.2, name)


# ----------------------------------------------------------------------------- pure Python
def test_safe_text_keeps_comments_closed():
    # a model name trying to close the comment, start a trigraph or continue a line
    s = safe_text("cell */ int x; ??= \\ \n next")
    assert "*/" not in s and "??" not in s and "\\" not in s and "\n" not in s
    assert s.startswith("cell __ int x; __= _")
    assert len(safe_text("a" * 500)) == 80


def test_c_float_round_trips_binary32():
    # IEEE 754-2008 5.12.2: 9 significant digits recover every binary32 value exactly
    rng = np.random.default_rng(7)
    vals = np.concatenate([rng.standard_normal(200) * 10.0 ** rng.integers(-12, 6, 200), [1.0, 0.0, 17280.0]])
    for v in vals:
        lit = c_float(v)
        assert lit.endswith("f") and any(c in lit for c in ".e")
        assert np.float32(float(lit[:-1])) == np.float32(v)
    with pytest.raises(ExportError):
        c_float(float("nan"))


def test_refuses_a_foreign_folder(tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    model = _simple_model()
    rec = Recording(np.arange(5.0), np.ones(5), np.full(5, 3.9))
    with pytest.raises(ExportError, match="not written by socfuse export-c"):
        export_c(model, None, tmp_path, rec, measure=False)
    assert (tmp_path / "notes.txt").read_text() == "mine"
    # a folder written by export-c may be written again
    out = tmp_path / "c"
    res = export_c(model, None, out, rec, measure=False)
    assert json.loads((out / MARKER_NAME).read_text())["golden_rows"] == 5
    assert {p.name for p in res.files} >= {"socfuse_ekf.h", "socfuse_ekf.c", "harness.c", "golden.csv", "README.md"}
    export_c(model, None, out, rec, measure=False)
    readme = (out / "README.md").read_text()
    assert "regenerate, do not hand-edit".lower() in readme.lower() and "ISO 26262" in readme
    # 6 rows (4 + 2 n_rc) x 1 temperature x 401 SOC points, and the one-entry temperature axis
    assert res.footprint.table_bytes == 4 * (6 * 1 * 401 + 1)


# ----------------------------------------------------------------------------- compiled
@needs_cc
def test_demo_model_matches_python_reference(tmp_path, demo_day):
    # demo model = the truth model's tables (2 RC pairs, hysteresis, temperature axis); a bias state too.
    # Rows around the lunch rest with a 30 min reseed rule, so the baseline reseed path runs as well.
    model = truth_cell_model()
    settings = default_settings(model).with_(rest_min_s=1800.0, estimate_bias=True)
    rec = demo_day.slice(12000, 16500)
    res = export_c(model, settings, tmp_path / "c", rec)
    assert res.harness_exit == 0
    assert res.max_soc_diff is not None and res.max_soc_diff < 1e-4
    # build and run again exactly as the README says
    b = _build(tmp_path / "c")
    assert b.returncode == 0, b.stderr
    run, out = _harness(tmp_path / "c", tmp_path / "c" / "golden.csv")
    assert run.returncode == 0, run.stdout + run.stderr
    assert run.stdout.strip().splitlines()[-1].startswith("max_soc_diff=")
    assert out["max_soc_diff"] < 1e-4
    assert out["rows"] == 4500 and out["reseeds"] == 1 and out["base_rows_skipped"] == 1
    assert out["max_base_soc_diff"] < 1e-4
    assert out["state_bytes"] == res.footprint.state_bytes and out["table_bytes"] == res.footprint.table_bytes
    assert res.footprint.stack_bytes is not None and 0 < res.footprint.stack_bytes < 4096


@needs_cc
def test_compensated_coulomb_count_matches_scipy_over_a_day(tmp_path):
    # 10 Hz for 2.8 h (100k intervals of 0.1 s) of a discharge-only profile; the baseline column of the
    # golden file is replaced by scipy's trapezoid count.
    from scipy.integrate import cumulative_trapezoid

    model = _simple_model()
    n = 100_000
    t = np.arange(n) * 0.1
    rng = np.random.default_rng(3)
    i = 0.4 + 0.3 * np.abs(np.sin(t / 97.0)) + 0.01 * rng.random(n)     # A, always > rest threshold
    v = np.full(n, np.nan)
    v[0] = 4.1
    rec = Recording(t, i, v, None, None, name="flat")
    settings = default_settings(model).with_(reseed=False, soc_min=-1.0, soc_max=2.0)
    out = tmp_path / "c"
    export_c(model, settings, out, rec, measure=False)
    cols = (out / "golden.csv").read_text().split("\n", 1)[0].split(",")
    data = np.loadtxt(out / "golden.csv", delimiter=",", skiprows=1)
    tt, ii = data[:, cols.index("time_s")], data[:, cols.index("current_a")]
    z0 = data[0, cols.index("base_soc")]
    ref = z0 - cumulative_trapezoid(ii, tt, initial=0.0) / (model.capacity_ah * 3600.0)
    assert ref[-1] < z0 - 0.1  # a real amount of charge was counted
    data[:, cols.index("base_soc")] = ref
    np.savetxt(out / "scipy.csv", data, fmt="%.12g", delimiter=",", header=",".join(cols), comments="")
    assert _build(out).returncode == 0
    run, res = _harness(out, out / "scipy.csv")
    # each step adds about 3e-6 to a float32 near 0.8 (ulp 6e-8): plain summation could drift by
    # up to ~1e-3 over 1e5 steps; the compensated sum must stay within 1e-6
    assert res["max_base_soc_diff"] < 1e-6, run.stdout
    assert run.returncode == 0, run.stdout + run.stderr


@needs_cc
def test_corrupted_line_is_reported_not_crashed_on(tmp_path, demo_day):
    model = _simple_model()
    out = tmp_path / "c"
    export_c(model, None, out, demo_day.slice(0, 300), measure=False)
    lines = (out / "golden.csv").read_text().splitlines()
    lines[50] = lines[50].replace(",", ",abc", 1)        # file line 51: text in a number
    lines[120] = "12,3"                                    # file line 121: fields missing
    lines[200] = lines[200] + ",9,9"                       # file line 201: extra fields
    lines[250] = "x" * 5000                                # file line 251: far too long
    (out / "bad.csv").write_text("\n".join(lines) + "\n")
    assert _build(out).returncode == 0
    run, res = _harness(out, out / "bad.csv")
    assert run.returncode == 3, run.stdout + run.stderr
    for k in (51, 121, 201, 251):
        assert f"line {k}: corrupted" in run.stderr
    assert res["corrupted_lines"] == 4 and res["rows"] == 296
    assert run.stdout.strip().splitlines()[-1].startswith("max_soc_diff=")
    # the four skipped rows change the C filter's input sequence (a longer interval, and at a current
    # edge the previous current that the resistance-error term uses): a small bounded difference
    assert np.isfinite(res["max_soc_diff"]) and res["max_soc_diff"] < 3e-3
    # a missing file is a usage error, not a crash
    run2, _ = _harness(out, out / "missing.csv")
    assert run2.returncode == 2 and "cannot open" in run2.stderr


@needs_cc
@pytest.mark.parametrize("kind", ["truth_bias", "simple"])
def test_builds_pedantic_with_conversion_warnings_as_errors(tmp_path, kind):
    # C99 (ISO/IEC 9899:1999) with -pedantic; -Wconversion also catches every implicit double->float
    if kind == "truth_bias":
        model = truth_cell_model()
        settings = default_settings(model).with_(estimate_bias=True, estimate_hysteresis=False)
    else:
        model, settings = _simple_model("odd */ name ??="), None
    rec = Recording(np.arange(20.0), np.ones(20), np.full(20, 3.9))
    export_c(model, settings, tmp_path, rec, measure=False)
    b = _build(tmp_path, PEDANTIC)
    assert b.returncode == 0, b.stderr
    assert b.stderr.strip() == ""
    lib = (tmp_path / "socfuse_ekf.c").read_text()
    assert "malloc" not in lib and "#include <stdio.h>" not in lib
    assert [ln for ln in lib.splitlines() if ln.startswith("#include")] == ["#include <math.h>",
                                                                             '#include "socfuse_ekf.h"']


_CHECKS_C = r"""
#include <math.h>
#include <stdio.h>
#include "socfuse_ekf.h"
int main(void)
{
    sfx_state st;
    sfx_output out;
    unsigned int s;
    int k, fallback_seen = 0, healthy_again = 0;
    unsigned long rej_v0;
    sfx_init(&st, 0.8f);
    s = sfx_step(&st, 0.0f, 1.0f, 3.9f, 25.0f, &out);
    s = sfx_step(&st, 1.0f, (float)NAN, 3.9f, 25.0f, &out);
    if (!(s & SFX_ST_REJ_CURRENT)) return 10;
    s = sfx_step(&st, 1.0f, 1.0f, (float)INFINITY, 25.0f, &out);
    if (!(s & SFX_ST_REJ_VOLTAGE)) return 11;
    s = sfx_step(&st, 1.0f, 1.0f, 3.9f, 900.0f, &out);
    if (!(s & SFX_ST_REJ_TEMP)) return 12;
    s = sfx_step(&st, 0.0f, 1.0f, 3.9f, 25.0f, &out);
    if (!(s & SFX_ST_REJ_DT)) return 13;
    s = sfx_step(&st, (float)NAN, 1.0f, 3.9f, 25.0f, &out);
    if (!(s & SFX_ST_REJ_DT)) return 14;
    s = sfx_step(&st, 1.0f, 1.0e9f, -5.0f, (float)NAN, &out);
    if (!(s & SFX_ST_REJ_CURRENT) || !(s & SFX_ST_REJ_VOLTAGE)) return 15;
    if (!(out.ekf_soc == out.ekf_soc) || !(out.base_soc == out.base_soc)) return 16;
    rej_v0 = st.n_rej_voltage; /* the stuck sensor below may drive voltages out of range: not counted here */
    /* a voltage sensor stuck 0.4 V high: the filter must notice and fall back to coulomb counting */
    for (k = 0; k < 400; ++k) {
        s = sfx_step(&st, 1.0f, 1.0f, out.voltage_pred_v + 0.4f, 25.0f, &out);
        if (s & SFX_ST_FALLBACK) {
            fallback_seen = 1;
            if (out.soc != out.base_soc) return 17;
        }
    }
    /* sensor repaired: voltages consistent with the filter again, it recovers */
    for (k = 0; k < 2000; ++k) {
        s = sfx_step(&st, 1.0f, 1.0f, out.voltage_pred_v, 25.0f, &out);
        if (out.healthy && k > 10) healthy_again = 1;
    }
    printf("rej_i=%lu rej_v=%lu rej_t=%lu rej_dt=%lu gated=%lu fallback=%lu soc=%.6f sigma=%.6f\n",
           st.n_rej_current, rej_v0, st.n_rej_temp, st.n_rej_dt, st.n_gated, st.n_fallback,
           (double)out.soc, (double)out.soc_sigma);
    if (!fallback_seen) return 18;
    if (!healthy_again || (s & SFX_ST_FALLBACK)) return 19;
    if (st.p[0][1] != st.p[1][0] || !(st.p[0][0] > 0.0f)) return 20;
    return 0;
}
"""


@needs_cc
def test_input_checks_health_fallback_and_recovery(tmp_path):
    model = _simple_model()
    rec = Recording(np.arange(5.0), np.ones(5), np.full(5, 3.9))
    export_c(model, None, tmp_path, rec, measure=False)
    (tmp_path / "checks.c").write_text(_CHECKS_C)
    b = _build(tmp_path, CFLAGS, ("checks.c",), "checks")
    assert b.returncode == 0, b.stderr
    run = subprocess.run([str(tmp_path / "checks")], capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, f"check {run.returncode} failed: {run.stdout}"
    got = dict(tok.split("=") for tok in run.stdout.split())
    assert int(got["rej_i"]) == 2 and int(got["rej_v"]) == 2 and int(got["rej_t"]) == 1 and int(got["rej_dt"]) == 2
    assert int(got["fallback"]) > 0 and int(got["gated"]) > 0


@needs_cc
def test_real_data_model_matches_python_reference(tmp_path, realdata):
    # Panasonic 18650PF (Kollmeyer 2018): model identified from the C/20 and HPPC tests, golden
    # vectors = the whole drive cycle Cycle_2 at its native 10 Hz (about 111,000 rows), and at 1 Hz
    # (every tenth row, current averaged over the ten rows)
    from socfuse.models.identify import identify

    preset = "panasonic-18650pf"
    c20 = load_recording(realdata / "c20_ocv_and_1c_start_of_tests" / "05-08-17_13.26 C20 OCV Test_C20_25dC.mat",
                         preset=preset)
    hppc = load_recording(realdata / "hppc" / "03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat", preset=preset)
    model = identify(c20, [hppc], name="Panasonic NCR18650PF", pulse_temperatures_c=[25.0]).model
    cyc = load_recording(realdata / "drive_cycles" / "03-19-17_03.25 25degC_Cycle_2_Pan18650PF.mat", preset=preset)
    n = cyc.n - cyc.n % 10
    idx = np.arange(0, n, 10)
    cur = np.convolve(cyc.current_a, np.ones(10) / 10, mode="same")[idx]
    rec = Recording(cyc.time_s[idx], cur, cyc.voltage_v[idx], cyc.temperature_c[idx], None, "Cycle_2 1 Hz")
    res = export_c(model, None, tmp_path / "c", rec)
    assert res.golden_rows == idx.size
    assert res.harness_exit == 0
    assert res.max_soc_diff < 1e-4
    res10 = export_c(model, None, tmp_path / "c10", cyc)
    assert res10.golden_rows == cyc.n > 100_000
    assert res10.harness_exit == 0 and res10.max_soc_diff < 1e-4, res10.max_soc_diff
