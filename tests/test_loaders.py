"""Loader cases: each malformed input, unit and sign options, preamble/NUL, separators, .mat, Parquet.

Outside references named beside the checks:
- SI prefixes: 1 mA = 1e-3 A, 1 mV = 1e-3 V, 1 ms = 1e-3 s, 1 min = 60 s, 1 h = 3600 s
  (common practice, no source).
- ISO 8601 time offsets: 08:00:00+01:00 is the same instant as 07:00:00Z (ISO 8601-1:2019).
- A 100 Ah pack with 30 Ah drawn is at 70 % SOC (common practice, no source).
- Many cyclers log discharge as negative current (Panasonic 18650PF dataset SOURCE.md, Kollmeyer 2018).
"""
from __future__ import annotations

import sys

import numpy as np
import pytest
import scipy.io as sio

from socfuse.models.loaders import ColumnMap, load_recording, make_column_map
from socfuse.models.recording import RecordingError

CANON = "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65\n2,-0.5,3.80\n"


def _text(name, body, mode="w"):
    def write(tmp):
        p = tmp / name
        if mode == "wb":
            p.write_bytes(body)
        else:
            p.write_text(body)
        return p
    return write


def _mat(fields, struct="meas", name="run.mat"):
    def write(tmp):
        p = tmp / name
        sio.savemat(p, {struct: {k: np.asarray(v, dtype=float).reshape(-1, 1) for k, v in fields.items()}})
        return p
    return write


def _parquet(cols, name="run.parquet"):
    def write(tmp):
        import pandas as pd

        p = tmp / name
        pd.DataFrame(cols).to_parquet(p, engine="pyarrow")
        return p
    return write


OK_T = [0.0, 1.0, 2.0]
OK_I = [1.0, 1.5, -0.5]
OK_V = [3.70, 3.65, 3.80]

# id, writer, options, expected {field: values} or ("error", [substrings])
CASES = [
    ("canonical", _text("a.csv", CANON), {}, dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V)),
    ("decreasing-time", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n2,1,3.7\n1,1,3.7\n"), {},
     ("error", ["a.csv", "'time_s'", "decreases", "data row 3 (file line 4)"])),
    # a blank voltage cell is a missing sample (predict-only), counted; blank current stays refused
    ("missing-voltage", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1,\n2,1,3.6\n"), {},
     dict(voltage_v=[3.7, np.nan, 3.6], meta=dict(voltage_missing=1))),
    ("missing-current", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,,3.7\n2,1,3.6\n"), {},
     ("error", ["'current_a'", "missing value", "data row 2 (file line 3)"])),
    ("missing-time", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n,1,3.7\n2,1,3.6\n"), {},
     ("error", ["'time_s'", "missing value", "data row 2 (file line 3)"])),
    ("no-voltage-at-all", _text("a.csv", "time_s,current_a,voltage_v\n0,1,\n1,1,\n2,1,\n"), {},
     ("error", ["'voltage_v'", "missing value", "data row 1"])),
    # damaged files: a short last line (a logger killed mid-write) is dropped and reported
    ("truncated-last-line-fields", _text("a.csv", "time_s,current_a,voltage_v,soc_ref\n0,1,3.7,0.99\n"
                                                  "1,1,3.7,0.98\n2,1,3.6,0.97\n3,1,3"), {},
     dict(time_s=OK_T, soc_ref=[0.99, 0.98, 0.97],
          meta=dict(truncated_last_row="file line 5 has 3 of 4 fields", rows_read=3))),
    ("truncated-last-field", _text("a.csv", "time_s,current_a,voltage_v,soc_ref\n0,1,3.7,0.990000\n"
                                            "1,1,3.7,0.980000\n2,1,3.6,0.970000\n3,1,3.6,0"), {},
     dict(time_s=OK_T, soc_ref=[0.99, 0.98, 0.97], meta=dict(rows_read=3))),
    ("complete-last-line-no-newline", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.70\n1,1,3.70\n"
                                                     "2,1,3.60"), {},
     dict(time_s=OK_T, voltage_v=[3.7, 3.7, 3.6])),
    ("short-middle-row", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1\n2,1,3.6\n"), {},
     ("error", ["a.csv", "data row 2 (file line 3) has 2 fields", "damaged"])),
    ("huge-field", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1,\"" + "9" * 140000 + "\"\n"), {},
     ("error", ["a.csv", "not a readable CSV file", "field larger than field limit"])),
    ("voltage-1e308", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1,1e308\n2,1,3.6\n"), {},
     ("error", ["'voltage_v'", "1e+308", "data row 2 (file line 3)", "beyond any cell or pack measurement"])),
    # U+0663 ARABIC-INDIC DIGIT THREE: Python's float() reads it; a logger never writes it
    ("unicode-digits", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1,\u0663.7\n2,1,3.6\n"), {},
     ("error", ["'voltage_v'", "non-numeric", "data row 2 (file line 3)", "ASCII"])),
    ("time-beyond-range", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1e15,1,3.7\n"), {},
     ("error", ["'time_s'", "beyond 1e+12 s", "--time-unit"])),
    # 97 % is 0.97 (common practice, no source); a 4s2p pack: cell voltage = pack / 4, current = pack / 2
    ("soc-ref-percent", _text("a.csv", "time_s,current_a,voltage_v,soc_ref\n0,1,3.7,99\n1,1,3.7,98\n"), 
     dict(soc_ref_unit="percent"), dict(soc_ref=[0.99, 0.98])),
    # 0 degC = 273.15 K (SI definition of the Celsius scale)
    ("temperature-kelvin", _text("a.csv", "time_s,current_a,voltage_v,temperature_c\n0,1,3.7,298.15\n1,1,3.7,273.15\n"),
     dict(temperature_unit="K"), dict(temperature_c=[25.0, 0.0])),
    ("pack-4s2p", _text("a.csv", "time_s,current_a,voltage_v\n0,2,14.8\n1,3,14.6\n2,-1,15.2\n"),
     dict(series_cells=4, parallel_cells=2), dict(current_a=[1.0, 1.5, -0.5], voltage_v=[3.7, 3.65, 3.8])),
    ("nan-text", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,NaN,3.6\n"), {},
     ("error", ["'current_a'", "missing value", "data row 2"])),
    ("non-numeric", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1,3.6\n2,abc,3.6\n"), {},
     ("error", ["'current_a'", "non-numeric", "'abc'", "data row 3 (file line 4)"])),
    ("missing-column", _text("a.csv", "time_s,current_a,volts\n0,1,3.7\n1,1,3.6\n"), {},
     ("error", ["'voltage_v' not found", "'time_s', 'current_a', 'volts'"])),
    ("empty-file", _text("a.csv", ""), {}, ("error", ["a.csv", "empty"])),
    ("blank-lines-only", _text("a.csv", "\n \n\n"), {}, ("error", ["a.csv", "empty"])),
    ("header-only", _text("a.csv", "time_s,current_a,voltage_v\n"), {},
     ("error", ["a.csv", "no data rows", "file line 1"])),
    ("single-row", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n"), {},
     ("error", ["a.csv", "at least 2 rows"])),
    # SI prefixes (common practice, no source)
    ("mA-mV", _text("a.csv", "t,i_ma,u_mv\n0,1000,3700\n1,1500,3650\n2,-500,3800\n"),
     dict(time="t", current="i_ma", voltage="u_mv", current_unit="mA", voltage_unit="mV"),
     dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V)),
    ("ms", _text("a.csv", "time_ms,current_a,voltage_v\n0,1,3.7\n250,1,3.7\n1500,1,3.7\n"),
     dict(time="time_ms", time_unit="ms"), dict(time_s=[0.0, 0.25, 1.5])),
    ("min", _text("a.csv", "minutes,current_a,voltage_v\n0,1,3.7\n0.5,1,3.7\n2,1,3.7\n"),
     dict(time="minutes", time_unit="min"), dict(time_s=[0.0, 30.0, 120.0])),
    ("h", _text("a.csv", "hours,current_a,voltage_v\n1,1,3.7\n1.5,1,3.7\n3,1,3.7\n"),
     dict(time="hours", time_unit="h"), dict(time_s=[3600.0, 5400.0, 10800.0])),
    # ISO 8601 offsets: +01:00 at 08:00:30 is 07:00:30Z (ISO 8601-1:2019)
    ("iso", _text("a.csv", "stamp,current_a,voltage_v\n2026-03-02T07:00:00Z,1,3.7\n"
                           "2026-03-02T07:00:00.5Z,1,3.7\n2026-03-02T08:00:30+01:00,1,3.7\n"),
     dict(time="stamp", time_unit="iso"), dict(time_s=[0.0, 0.5, 30.0])),
    ("iso-bad", _text("a.csv", "stamp,current_a,voltage_v\n2026-03-02T07:00:00Z,1,3.7\nlater,1,3.7\n"),
     dict(time="stamp", time_unit="iso"), ("error", ["'stamp'", "ISO timestamp", "'later'", "data row 2"])),
    # discharge logged negative (Panasonic 18650PF SOURCE.md): flipped to + = discharge
    ("discharge-negative", _text("a.csv", "time_s,current_a,voltage_v\n0,-1,3.7\n1,-1.5,3.65\n2,0.5,3.8\n"),
     dict(discharge_negative=True), dict(current_a=OK_I)),
    ("preamble-nul", _text("a.txt", b"Cycler export v2\x00\r\nChannel;7\r\n\r\nStart;2026-03-02\r\n"
                                    b"time_s;current_a;voltage_v;\r\n0;1.0;3.70;\r\n1;1.5\x00;3.65;\r\n"
                                    b"\r\n2;-0.5;3.80;\r\n", mode="wb"), {},
     dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V, meta=dict(header_line=5, nul_bytes_removed=2,
                                                                    separator=";"))),
    ("semicolon-decimal-comma", _text("a.csv", "time_s;current_a;voltage_v\n0;1,0;3,70\n1;1,5;3,65\n"
                                               "2;-0,5;3,80\n"),
     dict(decimal=","), dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V)),
    ("preamble-missing-column", _text("a.csv", "Lab: X;1\nTime;Amps\n0;1\n1;1\n"), {},
     ("error", ["'time_s', 'current_a', 'voltage_v'", "not found", "file line 2", "'Time', 'Amps'"])),
    ("duplicates", _text("a.csv", "time_s,current_a,voltage_v\n0,1,3.7\n1,1.5,3.65\n1,1.5,3.65\n"
                                  "1,1.5,3.64\n2,-0.5,3.8\n"), {},
     dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V, meta=dict(duplicates_dropped=2, rows_read=5))),
    ("extras-and-temperature", _text("a.csv", "time_s,current_a,voltage_v,temperature_c,wh,note\n"
                                              "0,1,3.7,25,0.0,x\n1,1,3.7,25.5,0.5,y\n"), {},
     dict(temperature_c=[25.0, 25.5], meta=dict(extras_keys=["wh"]))),
    ("mat-mapping", _mat({"Time": OK_T, "Current": [-1.0, -1.5, 0.5], "Voltage": OK_V,
                          "Battery_Temp_degC": [25.0, 25.1, 25.2], "Wh": [0.0, -0.1, -0.2],
                          "Ah": [0.0, -0.01, -0.02]}),
     dict(preset="panasonic-18650pf"),
     dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V, temperature_c=[25.0, 25.1, 25.2],
          meta=dict(extras_keys=["Ah", "Wh"], format="mat"))),
    # 100 Ah pack, 30 Ah drawn -> 70 % SOC (common practice, no source); counter starts off zero
    ("mat-ah-counter-soc", _mat({"t": [0.0, 1800.0, 3600.0], "i": [-30.0, -30.0, -30.0], "v": [3.7, 3.6, 3.5],
                                 "ah": [5.0, -10.0, -25.0]}, struct="log"),
     dict(time="t", current="i", voltage="v", ah_counter="ah", discharge_negative=True,
          ref_capacity_ah=100.0, ref_soc0=1.0),
     dict(soc_ref=[1.0, 0.85, 0.70], current_a=[30.0, 30.0, 30.0])),
    ("ah-counter-discharge-positive", _text("a.csv", "time_s,current_a,voltage_v,ah_out\n0,30,3.7,0\n"
                                                     "3600,30,3.5,30\n"),
     dict(ah_counter="ah_out", ref_capacity_ah=100.0, ref_soc0=1.0), dict(soc_ref=[1.0, 0.70])),
    ("mat-nan-voltage", _mat({"Time": OK_T, "Current": OK_I, "Voltage": [3.7, 3.6, np.nan]}),
     dict(time="Time", current="Current", voltage="Voltage"),
     dict(voltage_v=[3.7, 3.6, np.nan], meta=dict(voltage_missing=1))),
    ("mat-nan-current", _mat({"Time": OK_T, "Current": [1.0, np.nan, 1.0], "Voltage": OK_V}),
     dict(time="Time", current="Current", voltage="Voltage"),
     ("error", ["'Current'", "missing value", "row 2"])),
    ("mat-missing-field", _mat({"Time": OK_T, "Current": OK_I, "Volt": OK_V}),
     dict(time="Time", current="Current", voltage="Voltage"),
     ("error", ["'Voltage' not found", "'Time', 'Current', 'Volt'"])),
    ("parquet", _parquet({"time_s": OK_T, "current_a": OK_I, "voltage_v": OK_V, "soc_ref": [0.9, 0.8, 0.7]}), {},
     dict(time_s=OK_T, current_a=OK_I, voltage_v=OK_V, soc_ref=[0.9, 0.8, 0.7], meta=dict(format="parquet"))),
    ("parquet-datetime", _parquet({"when": np.array(["2026-03-02T07:00:00", "2026-03-02T07:00:10",
                                                     "2026-03-02T07:01:00"], dtype="datetime64[ns]"),
                                   "current_a": OK_I, "voltage_v": OK_V}),
     dict(time="when", time_unit="iso"), dict(time_s=[0.0, 10.0, 60.0])),
    ("gaps", _text("a.csv", "time_s,current_a,voltage_v\n" + "".join(
        f"{t},1,3.7\n" for t in [0, 1, 2, 3, 4, 5, 65, 66, 67]) ), {},
     dict(meta=dict(gaps=[(5.0, 60.0)]))),
    # a cycler export: units row under the header, a repeated (unused) column name, elapsed hh:mm:ss
    ("units-row-hms", _text("a.csv", "Test;7\nStep;Prog Time;Voltage;Current;Step\n;;[V];[A];\n"
                                     "1;00:00:00.5;3.70;1.0;x\n1;00:01:00.5;3.65;1.5;y\n2;25:00:00.5;3.80;-0.5;z\n"),
     dict(time="Prog Time", time_unit="hms", voltage="Voltage", current="Current"),
     dict(time_s=[0.5, 60.5, 90000.5], current_a=OK_I, voltage_v=OK_V,
          meta=dict(units_row={"Voltage": "[V]", "Current": "[A]"}, units_line=3, extras_keys=["Step"]))),
    ("repeated-used-column", _text("a.csv", "time_s,current_a,voltage_v,voltage_v\n0,1,3.7,3.7\n1,1,3.7,3.7\n"),
     {}, ("error", ["'voltage_v' appears twice", "file line 1"])),
    ("time-format", _text("a.csv", "Time Stamp;Voltage;Current\n4/27/2017 11:59:58 AM;3.70;1.0\n"
                                   "4/27/2017 11:59:59 AM;3.65;1.5\n4/27/2017 12:00:08 PM;3.80;-0.5\n"),
     dict(time="Time Stamp", time_unit="iso", time_format="%m/%d/%Y %I:%M:%S %p", voltage="Voltage",
          current="Current"), dict(time_s=[0.0, 1.0, 10.0], current_a=OK_I)),
    ("unknown-suffix", _text("a.xlsx", "x"), {}, ("error", ["a.xlsx", "unknown file type"])),
    # a UTF-16 byte-order mark (FF FE, Unicode Standard ch. 23.8) on bytes that are not UTF-16: the file is named
    ("bad-utf16", _text("a.csv", b"\xff\xfetime_s,current_a,voltage_v\n0,1,3.7\n", mode="wb"), {},
     ("error", ["a.csv", "UTF-16"])),
]


@pytest.mark.parametrize("writer, options, expected", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_loader_case(tmp_path, writer, options, expected):
    path = writer(tmp_path)
    if isinstance(expected, tuple):
        with pytest.raises(RecordingError) as exc:
            load_recording(path, **options)
        msg = str(exc.value)
        for part in expected[1]:
            assert part in msg, f"{part!r} not in {msg!r}"
        return
    rec = load_recording(path, **options)
    expected = dict(expected)
    meta = expected.pop("meta", {})
    for field_name, values in expected.items():
        np.testing.assert_allclose(getattr(rec, field_name), values, rtol=0, atol=1e-12, err_msg=field_name)
    for key, value in meta.items():
        if key == "extras_keys":
            assert sorted(rec.metadata["extras"]) == value
        else:
            assert rec.metadata[key] == value, key
    assert rec.name == path.stem
    assert rec.metadata["source"] == str(path)


def test_extras_keep_file_units_and_drop_duplicate_rows(tmp_path):
    p = tmp_path / "e.csv"
    p.write_text("time_s,current_a,voltage_v,wh\n0,1,3.7,0\n1,1,3.7,1\n1,1,3.7,1\n2,1,3.7,2\n")
    rec = load_recording(p)
    np.testing.assert_array_equal(rec.metadata["extras"]["wh"], [0.0, 1.0, 2.0])
    assert rec.metadata["duplicate_rows"] == ["data row 3 (file line 4)"]


def test_parquet_without_pyarrow_names_the_extra(tmp_path, monkeypatch):
    p = tmp_path / "x.parquet"
    p.write_bytes(b"PAR1")
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    with pytest.raises(RecordingError, match=r"pip install socfuse\[parquet\]"):
        load_recording(p)


def test_mapping_options_refused_when_ambiguous_or_unknown(tmp_path):
    with pytest.raises(RecordingError, match="unknown loader option.*curent"):
        make_column_map(curent="I")
    with pytest.raises(RecordingError, match="ref_capacity_ah and ref_soc0"):
        ColumnMap(ah_counter="Ah", ref_capacity_ah=2.9)
    with pytest.raises(RecordingError, match="either a soc_ref column"):
        ColumnMap(ah_counter="Ah", soc_ref="soc", ref_capacity_ah=2.9, ref_soc0=1.0)
    with pytest.raises(RecordingError, match="current_unit 'kA'"):
        ColumnMap(current_unit="kA")
    with pytest.raises(RecordingError, match="unknown preset"):
        make_column_map(preset="nope")
    with pytest.raises(RecordingError, match="series_cells is a whole number"):
        ColumnMap(series_cells=0)
    with pytest.raises(RecordingError, match="soc_ref_unit 'permille'"):
        ColumnMap(soc_ref_unit="permille")
    # a later option overrides the preset; None leaves it alone
    m = make_column_map(preset="panasonic-18650pf", discharge_negative=False, voltage=None)
    assert m.discharge_negative is False and m.voltage == "Voltage"


def test_missing_file_is_file_not_found(tmp_path):
    with pytest.raises(FileNotFoundError, match="nope.csv"):
        load_recording(tmp_path / "nope.csv")


@pytest.mark.parametrize("cells", [["x", "1"], ["1", "x"], ["", "nan", "x"], ["1_000", "x"], ["inf", "x"],
                                   ["  3 ", "4"], ["0x10", "1"], ["1d5", "2"], ["", "NA", "2"], ["-", "2"],
                                   ["1e5", "2.5"], ["+.5", "-7"], ["1.5e", "2"]])
def test_optional_text_column_same_as_pandas(cells, tmp_path):
    # reference: pandas.to_numeric(errors="coerce"): an optional column is kept as an extra only when
    # every non-blank cell is a finite number (blank words as in the loader's docstring)
    import pandas as pd
    n = len(cells)
    body = "time_s,current_a,voltage_v,col\n" + "".join(f"{k},1.0,3.7,{c}\n" for k, c in enumerate(cells))
    p = tmp_path / "a.csv"
    p.write_text(body)
    s = pd.Series([c.strip() for c in cells], dtype=object)
    blank = (s == "") | s.str.lower().isin(["nan", "na", "n/a", "null", "none"])
    vals = pd.to_numeric(s.where(~blank, None), errors="coerce").to_numpy(dtype=float)
    plain = all(_plain_float(c) for c in cells)   # every cell parses as Python float: the loader's fast path
    keep = plain or bool(np.all(np.isfinite(vals[~blank.to_numpy()])))
    rec = load_recording(p)
    assert ("col" in rec.metadata["extras"]) == (keep and not np.all(blank)), cells
    assert rec.n == n


def _plain_float(c: str) -> bool:
    try:
        return bool(np.isfinite(float(c)))
    except ValueError:
        return False


def test_mat_cell_array_of_time_stamps(tmp_path):
    # a cell array of text (the Panasonic 18650PF files log TimeStamp so, Kollmeyer 2018): unwrapped to
    # strings, parsed with the strftime format when mapped as time, left out of the extras otherwise
    p = tmp_path / "run.mat"
    stamps = np.empty((3, 1), dtype=object)
    stamps[:, 0] = ["3/18/2017 11:59:59 AM", "3/18/2017 12:00:00 PM", "3/18/2017 12:00:02 PM"]
    sio.savemat(p, {"meas": {"TimeStamp": stamps, "Time": np.array([[0.0], [1.0], [3.0]]),
                             "Current": np.array([[-1.0], [-1.5], [0.5]]), "Voltage": np.array([[3.7], [3.65], [3.8]])}})
    rec = load_recording(p, time="Time", current="Current", voltage="Voltage", discharge_negative=True)
    np.testing.assert_array_equal(rec.time_s, [0.0, 1.0, 3.0])
    assert "TimeStamp" not in rec.metadata["extras"]
    rec2 = load_recording(p, time="TimeStamp", time_unit="iso", time_format="%m/%d/%Y %I:%M:%S %p",
                          current="Current", voltage="Voltage", discharge_negative=True)
    np.testing.assert_array_equal(rec2.time_s, [0.0, 1.0, 3.0])   # 11:59:59 AM -> 12:00:00 PM is one second
    np.testing.assert_array_equal(rec2.current_a, [1.0, 1.5, -0.5])


@pytest.mark.parametrize("text", [
    CANON,
    "time_s,current_a,voltage_v,\n0,1.0,3.70,\n1,1.5,3.65,\n",                       # trailing separator
    "time_s;current_a;voltage_v;note\n0;1,0;3,70;a\n1;1,5;3,65;b\n",                   # ; and decimal comma
    "time_s\tcurrent_a\tvoltage_v\n0\t1.0\t3.7\n1\t1.5\t 3.65 \n",
    "time_s,current_a,,voltage_v,x,x\n0,1.0,7,3.7,1,2\n1,1.5,8,3.65,3,4\n",           # unnamed, repeated names
    "time_s,current_a,voltage_v\ns,A,V\n0,1.0,3.70\n1,1.5,3.65\n",                    # units row: general loop
    "time_s,current_a,voltage_v\n0,1.0,3.70\n,,\n1,1.5,3.65\n",                       # blank row: general loop
    'time_s,current_a,voltage_v\n0,"1.0",3.70\n1,1.5,3.65\n',                         # quotes: general loop
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65",                             # no final line end
    "time_s,current_a,voltage_v\n0,1.0,\u30003.70\n1,1.5,3.65\n",
])
def test_plain_csv_rows_read_as_the_csv_module_reads_them(text, tmp_path, monkeypatch):
    # reference: Python's csv.reader (the general loop); the plain-row shortcut must give the same table
    # (as text: the numeric fast path, compared with the text columns below, is off here)
    from socfuse.models import loaders as L
    monkeypatch.setattr(L, "_plain_numbers", lambda *a: None)
    p = tmp_path / "a.csv"
    p.write_bytes(text.encode())
    sep = ";" if ";" in text else None
    cm = L.make_column_map(separator=sep, decimal="," if sep == ";" else ".")
    fast = L._read_csv_text(p, cm)
    monkeypatch.setattr(L, "_plain_fields", lambda *a: None)
    slow = L._read_csv_text(p, cm)
    assert list(fast.columns) == list(slow.columns)
    for k in fast.columns:
        assert fast.columns[k].tolist() == slow.columns[k].tolist(), k
    np.testing.assert_array_equal(fast.file_lines, slow.file_lines)
    assert fast.info == slow.info


_NUMERIC_CASES = [
    CANON,
    # the benchmark's layout (%.17g of the Panasonic drive cycle), an extra column, an amp-hour counter
    "time_s,current_a,voltage_v,temperature_c,soc_ref,ah\n0,1.8129,4.1458500000000003,21.781980999999998,1,0\n"
    "0.095996260643005371,1.83249,4.1053199999999999,21.781980999999998,0.99998331885095482,-5e-05\n",
    "time_s,current_a,voltage_v,,x,x\n0,+1.0,.5e1,7,1,2\n1,1.5, 3.65 ,8,3,4\n2,-0,5.,9,5,6\n",   # forms float() reads
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,\n2,-0.5,3.80\n",        # blank voltage: text path
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,nan,3.65\n2,-0.5,3.80\n",    # NaN current: refused
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,inf,3.65\n2,-0.5,3.80\n",
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,2e9\n2,-0.5,3.80\n",     # beyond any measurement
    "time_s,current_a,voltage_v\n0,1.0,3.70\n2,1.5,3.65\n1,-0.5,3.80\n",    # time goes backwards
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65\n1,-0.5,3.80\n",    # repeated time: dropped
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.6x\n2,-0.5,3.80\n",
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,\u0663.65\n2,-0.5,3.80\n",   # Arabic-Indic digit
    "time_s,current_a,voltage_v\n1,1,1\n0,1.0,3.70\n1,1.5,3.65\n",           # a first row of 1s: a units row
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,\x1f3.65\n2,-0.5,3.80\n",   # numpy strips \x1f, float() not
    "time_s,current_a,voltage_v\n0,1_0,3.70\n1,1.5,3.65\n2,-0.5,3.80\n",     # float() reads 1_0, numpy not
    "time_s\tcurrent_a\tvoltage_v\n0\t1.0\t3.7\n1\t1.5\t 3.65 \n",
    "time_s,current_a,voltage_v\n0,1.0,3.70\n\n1,1.5,3.65\n",                 # blank line: skipped, rows renumbered
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65,\n2,-0.5,3.80\n",    # a row one field longer
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5\n2,-0.5,3.80\n",          # a short row (not the last)
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65\n2,-0.5\n",          # a short last row: dropped
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65\n2,-0.5,3.8",         # no final line end
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,\"3.65\"\n2,-0.5,3.80\n",  # quotes
    "time_s,current_a,voltage_v\n0,1.0,3.70\n1,1.5,3.65 # note\n2,-0.5,3.80\n",   # no comments in a CSV
]


def _load_or_message(path, **kw):
    try:
        return load_recording(path, **kw)
    except RecordingError as e:
        return str(e)


@pytest.mark.parametrize("text", _NUMERIC_CASES)
def test_numeric_csv_fast_path_gives_the_text_path_recording(text, tmp_path, monkeypatch):
    # reference: the text columns converted by _numeric (float() of each field, then every check);
    # the fast path must give the same recording, or the same refusal
    from socfuse.models import loaders as L
    p = tmp_path / "a.csv"
    p.write_text(text)
    fast = _load_or_message(p)
    monkeypatch.setattr(L, "_plain_numbers", lambda *a: None)
    slow = _load_or_message(p)
    if isinstance(slow, str):
        assert fast == slow
        return
    for attr in ("time_s", "current_a", "voltage_v", "temperature_c", "soc_ref"):
        a, b = getattr(fast, attr), getattr(slow, attr)
        assert (a is None) == (b is None), attr
        if a is not None:
            assert a.tobytes() == b.tobytes(), attr       # bit for bit (the sign of zero too)
    fx, sx = fast.metadata.pop("extras"), slow.metadata.pop("extras")
    assert list(fx) == list(sx) and all(fx[k].tobytes() == sx[k].tobytes() for k in fx)
    assert fast.metadata == slow.metadata


def test_numeric_csv_fast_path_values(tmp_path):
    from socfuse.models import loaders as L
    p = tmp_path / "a.csv"
    p.write_text(_NUMERIC_CASES[1])
    table = L.read_table(p)
    assert all(a.dtype == np.float64 for a in table.columns.values())   # the fast path was taken
    rec = load_recording(p)
    # the file's digits, correctly rounded (Python's float of the same text)
    np.testing.assert_array_equal(rec.voltage_v, [4.1458500000000003, 4.1053199999999999])
    np.testing.assert_array_equal(rec.time_s, [0.0, 0.095996260643005371])
    np.testing.assert_array_equal(rec.metadata["extras"]["ah"], [0.0, -5e-05])
    assert load_recording(tmp_path / "a.csv").metadata["rows_read"] == 2
