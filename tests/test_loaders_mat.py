"""The plain MAT-file reader (models.loaders._read_mat_plain) against scipy.io.loadmat, the reference.

Files written by scipy.io.savemat (level 5, compressed or not; MathWorks "MAT-File Format"); the
plain reader must give the very columns the scipy path gives (names, order, dtypes, values), or
leave the file to scipy (None).  Real Panasonic 18650PF files (Kollmeyer 2018) when present.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.io as sio

from socfuse.models import loaders as L


def _scipy_table(path, cmap, monkeypatch):
    with monkeypatch.context() as m:
        m.setattr(L, "_read_mat_plain", lambda *a: None)
        return L._read_mat(Path(path), cmap)


def _assert_same(path, cmap, monkeypatch, plain_expected=True):
    a = L._read_mat_plain(Path(path), cmap)
    if not plain_expected:
        assert a is None
        return
    assert a is not None
    b = _scipy_table(path, cmap, monkeypatch)
    assert list(a.columns) == list(b.columns)
    for k in a.columns:
        x, y = a.columns[k], b.columns[k]
        assert x.dtype == y.dtype and x.shape == y.shape, k
        if x.dtype == object:
            assert x.tolist() == [str(v) for v in y.tolist()], k
        else:
            np.testing.assert_array_equal(x, y, err_msg=k)
    assert a.info == b.info


def _cells(texts):
    c = np.empty((len(texts), 1), dtype=object)
    c[:, 0] = texts
    return c


N = 7
T = np.arange(N, dtype=float).reshape(-1, 1) * 0.1
BASE = {"Time": T, "Current": -np.linspace(1, 2, N).reshape(-1, 1), "Voltage": np.linspace(4.1, 3.9, N)[:, None]}


@pytest.mark.parametrize("compress", [True, False])
@pytest.mark.parametrize("extra, plain", [
    ({}, True),
    ({"Stamp": _cells([f"3/18/2017 2:17:{k:02d} AM" for k in range(N)])}, True),     # cell of texts
    ({"Stamp": _cells([f"3/18/2017 {k}:17:05 AM" for k in range(7, 7 + N)])}, True),  # lengths 19, 20
    ({"Step": _cells(["ab", "rest", "discharge", "c", "charge-cv", "x", "pause"])}, True),  # cells of many sizes
    ({"Nul": _cells(["a\x00b"] * N)}, True),   # savemat writes a NUL as a blank: both readers give "a b"
    ({"Chamber": np.full((N, 1), 23, dtype=np.uint8), "I16": np.arange(N, dtype=np.int16)[None, :]}, True),
    ({"F32": np.linspace(0, 1, N, dtype=np.float32)[:, None], "Grid": np.ones((N, 3))}, True),  # 2-D skipped
    ({"Short": np.ones((3, 1)), "One": np.array([[5.0]])}, True),                     # other lengths dropped
    ({"Empty": np.zeros((0, 0))}, True),
    ({"Note": "a char field"}, False),
    ({"Flag": np.ones((N, 1), dtype=bool)}, False),                                   # logical: scipy's
    ({"Z": (1 + 2j) * np.ones((N, 1))}, False),                                       # complex: scipy's
    ({"Stamp": _cells(["caf\u00e9"] * N)}, False),                                    # non-ASCII text
    ({"Mixed": _cells(["a", 1.0] + ["b"] * (N - 2))}, False),
])
def test_plain_reader_equals_scipy(tmp_path, monkeypatch, compress, extra, plain):
    p = tmp_path / "run.mat"
    sio.savemat(p, {"meas": {**BASE, **extra}}, do_compression=compress)
    cmap = L.make_column_map(time="Time", current="Current", voltage="Voltage", discharge_negative=True)
    _assert_same(p, cmap, monkeypatch, plain)
    rec = L.load_recording(p, cmap)          # either path: the same recording
    np.testing.assert_array_equal(rec.time_s, T[:, 0])


def test_struct_choice_is_scipy_s(tmp_path, monkeypatch):
    p = tmp_path / "two.mat"
    sio.savemat(p, {"a": BASE, "b": {**BASE, "X": np.ones((N, 1))}, "scalar": np.array([[1.0]])})
    cm = L.make_column_map(time="Time", current="Current", voltage="Voltage")
    assert L._read_mat_plain(p, cm) is None                      # two structs: scipy's error message
    with pytest.raises(L.RecordingError, match="several structs"):
        L.load_recording(p, cm)
    _assert_same(p, L.make_column_map(mapping=cm, mat_struct="b"), monkeypatch)
    with pytest.raises(L.RecordingError, match="no struct 'c'"):
        L.load_recording(p, L.make_column_map(mapping=cm, mat_struct="c"))


def test_damaged_file_is_left_to_scipy(tmp_path):
    p = tmp_path / "cut.mat"
    sio.savemat(p, {"meas": BASE})
    raw = p.read_bytes()
    p.write_bytes(raw[:len(raw) - 20])
    cm = L.make_column_map(time="Time", current="Current", voltage="Voltage")
    assert L._read_mat_plain(p, cm) is None
    with pytest.raises(L.RecordingError, match="not a readable MATLAB file"):
        L.load_recording(p, cm)


def test_real_files_equal_scipy(realdata, monkeypatch):
    cm = L.make_column_map(preset="panasonic-18650pf")
    files = sorted(realdata.glob("drive_cycles/*US06*.mat"))
    if not files:
        pytest.skip("no Panasonic US06 drive cycle in the real data")
    _assert_same(files[0], cm, monkeypatch)
