"""Trace CSV writer (estimator.outputs.trace_csv) against pandas' own writer and reader."""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.cli.main import main
from socfuse.estimator.filters.run import estimate
from socfuse.estimator.outputs.trace_csv import format_trace_csv, write_trace_csv

REPO = Path(__file__).resolve().parents[1]
DESIGN_COLUMNS = ["time_s", "soc", "soc_sigma", "voltage_pred_v", "innovation_v", "soc_e"]  # DESIGN.md sec. 3


def _trace():
    m = tiny_model(n_rc=2, hysteresis=True)
    rec, _ = simulated_recording(m, n=3000, soc0=0.7, seed=3)
    v = rec.voltage_v.copy()
    v[[5, 6, 1000]] = np.nan                      # missing voltages: NaN innovations
    return m, estimate(m, rec.with_(voltage_v=v), "ekf", None, None)


@pytest.mark.parametrize("states", [False, True])
def test_bytes_equal_pandas_and_read_back(states, tmp_path):
    _, tr = _trace()
    frame = tr.to_frame(states=states)
    # pandas DataFrame.to_csv with the format socfuse estimate always used is the reference
    ref = frame.to_csv(index=False, float_format="%.8g", lineterminator="\n")
    path = tmp_path / "trace.csv"
    write_trace_csv(tr, path, states=states)
    text = path.read_text()
    assert text == ref
    back = pd.read_csv(io.StringIO(text))
    assert list(back.columns) == list(frame.columns)
    assert set(DESIGN_COLUMNS + ["soc_ref", "soc_error"]) <= set(back.columns)
    for c in frame.columns:
        a, b = frame[c].to_numpy(dtype=float), back[c].to_numpy(dtype=float)
        assert np.array_equal(np.isnan(a), np.isnan(b)), c
        # 8 significant digits: relative error at most half a unit in the 8th digit
        ok = ~np.isnan(a)
        np.testing.assert_allclose(b[ok], a[ok], rtol=5.01e-8, atol=0, err_msg=c)
    assert np.isnan(back["innovation_v"].to_numpy()[[5, 6, 1000]]).all()
    assert back["status"].dtype.kind == "i"


def test_special_values_and_bad_columns():
    frame = pd.DataFrame({"a": [np.inf, -np.inf, np.nan, -0.0, 1e-300, 123456789.0, 0.1 + 0.2],
                          "b": np.arange(7, dtype=np.int64)})
    assert format_trace_csv(frame) == frame.to_csv(index=False, float_format="%.8g", lineterminator="\n")
    with pytest.raises(ValueError, match="not numeric"):
        format_trace_csv(pd.DataFrame({"s": ["x"]}))
    with pytest.raises(ValueError, match="quoting"):
        format_trace_csv(pd.DataFrame({"a,b": [1.0]}))


def test_cli_writes_the_same_file(tmp_path):
    m, _ = _trace()
    from socfuse.models.modelfile import save_model
    rec, _ = simulated_recording(m, n=800, soc0=0.6, seed=5)
    rec_path = tmp_path / "rec.csv"
    pd.DataFrame({"time_s": rec.time_s, "current_a": rec.current_a, "voltage_v": rec.voltage_v,
                  "soc_ref": rec.soc_ref}).to_csv(rec_path, index=False)
    save_model(m, tmp_path / "model.json")
    out = tmp_path / "trace.csv"
    assert main(["estimate", "--model", str(tmp_path / "model.json"), str(rec_path), "-o", str(out)]) == 0
    back = pd.read_csv(out)
    assert list(back.columns[:6]) == DESIGN_COLUMNS
    assert len(back) == rec.n


def test_every_float_prints_as_python_printf():
    # reference: Python's printf-style "%.8g" (correctly rounded; ISO C99 7.19.6.1 conversion g):
    # ties and near-ties of the 8th digit, powers of ten on both sides of the fixed/exponent switch
    # (exponents -5/-4 and 7/8), values that round up to the next power, signed zero, subnormals
    rng = np.random.default_rng(11)
    edge = [0.0, -0.0, 0.5, 2.5, 1e-5, 1e-4, 9.99999995e-5, 99999999.5, 99999995.0, 12345678.5, 1e7, 1e8,
            123456789.0, 0.1 + 0.2, 1e-300, 5e-324, 1.7976931348623157e308, -1e22, 1e23, np.inf, -np.inf, np.nan]
    decimal_exact = rng.integers(-10 ** 9, 10 ** 9, 4000) * 10.0 ** rng.integers(-12, 12, 4000)  # ties
    wide = rng.standard_normal(4000) * 10.0 ** rng.integers(-30, 30, 4000)
    k = rng.integers(0, 10, 4000)
    short = np.floor(rng.random(4000) * 10.0 ** k) / 10.0 ** k                          # trailing zeros
    pw = np.array([s * 10.0 ** e * f for s in (1, -1) for e in range(-20, 25) for f in (1.0, 1 - 2e-16, 1 + 2e-16)])
    x = np.concatenate([edge, decimal_exact, wide, short, pw])
    from socfuse.estimator.outputs.trace_csv import format_columns
    got = format_columns({"x": x}).decode().split("\n")[1:-1]
    want = [("%.8g" % v).replace("nan", "") for v in x.tolist()]
    assert got == want


def test_estimate_writes_the_trace_without_pandas(tmp_path):
    # the writer takes Trace.columns(): `socfuse estimate -o` on a canonical CSV never imports pandas,
    # nor scipy.interpolate (the OCV curve is models.pchip) nor matplotlib
    import subprocess
    import sys
    m, _ = _trace()
    from socfuse.models.modelfile import save_model
    rec, _ = simulated_recording(m, n=300, soc0=0.6, seed=5)
    rec_path = tmp_path / "rec.csv"
    pd.DataFrame({"time_s": rec.time_s, "current_a": rec.current_a, "voltage_v": rec.voltage_v}).to_csv(
        rec_path, index=False)
    save_model(m, tmp_path / "model.json")
    code = ("import sys; from socfuse.estimator.cli.main import main\n"
            f"rc = main(['estimate', '--model', {str(tmp_path / 'model.json')!r}, {str(rec_path)!r}, '-o', "
            f"{str(tmp_path / 't.csv')!r}])\n"
            "print(rc, [m for m in ('pandas', 'scipy.interpolate', 'matplotlib') if m in sys.modules])")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip().splitlines()[-1] == "0 []"
    assert pd.read_csv(tmp_path / "t.csv").shape[0] == rec.n


def test_numpy_reads_back_each_value_as_its_printed_digits(tmp_path):
    # reference: numpy's own reader (numpy.genfromtxt; an empty field reads as NaN) and Python's
    # correctly rounded "%.8g": each number read back is exactly float("%.8g" % x), bit for bit
    _, tr = _trace()
    path = tmp_path / "trace.csv"
    write_trace_csv(tr, path, states=True)
    back = np.genfromtxt(path, delimiter=",", names=True)
    cols = tr.columns(states=True)
    assert list(back.dtype.names) == list(cols)
    for name, a in cols.items():
        a = np.asarray(a)
        want = a.astype(float) if a.dtype.kind in "iub" else np.array([float("%.8g" % x) for x in a.tolist()])
        got = back[name]
        assert np.array_equal(np.isnan(got), np.isnan(want)), name
        ok = ~np.isnan(want)
        assert np.array_equal(got[ok].view(np.int64), want[ok].view(np.int64)), name
