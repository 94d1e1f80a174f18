"""The bundled demo data (datasets/): present, canonical, small, described, and reproducible."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import trapezoid

from socfuse.models import find_rests
from socfuse.estimator.demo.data import DEMO_FILES, generate_demo_data
from socfuse.estimator.demo.scenario import DEMO_SEED
from socfuse.estimator.demo.truth import C48_TRUTH

CANONICAL = ["time_s", "current_a", "voltage_v", "temperature_c", "soc_ref"]  # DESIGN.md section 3


@pytest.fixture(scope="module")
def data_dir(repo):
    return repo / "datasets"


@pytest.fixture(scope="module")
def frames(data_dir):
    return {f: pd.read_csv(data_dir / f) for f in DEMO_FILES}


def test_files_exist_with_canonical_columns_and_small_size(data_dir, frames):
    assert len(DEMO_FILES) >= 6
    total = sum((data_dir / f).stat().st_size for f in DEMO_FILES)
    assert total <= 10e6  # issue 2: at most 10 MB in all
    for f, d in frames.items():
        assert list(d.columns) == CANONICAL, f
        assert not d.isna().any().any(), f
        assert np.all(np.diff(d["time_s"].to_numpy()) > 0), f


def test_manifest_and_readme_describe_every_file(data_dir):
    m = json.loads((data_dir / "manifest.json").read_text())
    assert m["seed"] == DEMO_SEED and m["truth"]["capacity_ah"] == C48_TRUTH.capacity_ah
    readme = (data_dir / "README.md").read_text()
    for f in DEMO_FILES:
        assert set(m["files"][f]["sensors"]) >= {"offset_a", "gain_error", "voltage_noise_v", "voltage_quant_v"}
        assert f in readme


def test_sign_convention_and_c20_capacity(frames):
    d = frames["c48_c20_25degC.csv"]
    dis = d["current_a"] > 0.2
    # current positive on discharge (DESIGN.md section 2): SOC falls while the current is positive
    assert np.all(np.diff(d["soc_ref"][dis].to_numpy()) <= 0)
    # the discharge ends at the 2.5 V cut-off (NMC cut-off, common practice, no source)
    assert d["voltage_v"].min() == pytest.approx(2.5, abs=0.002)
    # discharged charge by the trapezoid rule (scipy.integrate.trapezoid) ~ 4.8 Ah
    # (the measured current carries the lab channel's 0.02 % gain and 0.05 mA offset)
    t, i = d["time_s"].to_numpy(), d["current_a"].to_numpy()
    seg = np.flatnonzero(dis.to_numpy())
    ah = trapezoid(i[seg[0] - 1:seg[-1] + 2], t[seg[0] - 1:seg[-1] + 2]) / 3600.0
    assert ah == pytest.approx(4.8, rel=0.005)


@pytest.mark.parametrize("name,dod_lo,dod_hi", [("c48_day_lunch.csv", 0.6, 0.85), ("c48_day_cold.csv", 0.6, 0.85),
                                                ("c48_day_long.csv", 0.6, 0.85)])
def test_delivery_days_follow_the_scenario(frames, name, dod_lo, dod_hi):
    d = frames[name]
    soc = d["soc_ref"].to_numpy()
    i = d["current_a"].to_numpy()
    assert soc[0] >= 0.95 and dod_lo <= soc[0] - soc[-1] <= dod_hi
    assert d["voltage_v"].min() > 2.5
    assert i.max() <= 2.0 * 4.8 * 1.01 + 0.05 and i.min() >= -0.5 * 4.8 * 1.01 - 0.05  # 2C peaks, 0.5C regen
    assert np.any(i < -0.5)  # regeneration on descents and braking
    rests = find_rests(d["time_s"].to_numpy(), i, current_threshold_a=0.08, min_duration_s=600.0)
    longest = max((d["time_s"][e] - d["time_s"][s] for s, e in rests), default=0.0)
    if "lunch" in name:
        assert 45 * 60 <= longest <= 61 * 60
    if "long" in name:
        assert longest == 0.0
    if "cold" in name:
        assert d["temperature_c"].iloc[:600].mean() < 5.0


def test_regenerating_one_file_reproduces_the_bundled_one(tmp_path, frames):
    out = generate_demo_data(tmp_path, files=["c48_pulse_25degC.csv"])
    new = pd.read_csv(out[0])
    old = frames["c48_pulse_25degC.csv"]
    assert new.shape == old.shape
    for c in CANONICAL:
        a, b = new[c].to_numpy(), old[c].to_numpy()
        # a different CPU or library build may flip a rare rounding by one quantum
        assert np.allclose(a, b, rtol=0, atol=0.0011), c
        assert np.mean(a == b) > 0.999, c


def test_generator_never_overwrites_a_foreign_file(tmp_path):
    user_file = tmp_path / "c48_day_lunch.csv"
    user_file.write_text("my own measurements\n")
    with pytest.raises(FileExistsError, match="c48_day_lunch.csv"):
        generate_demo_data(tmp_path, files=["c48_day_lunch.csv"])
    assert user_file.read_text() == "my own measurements\n"
