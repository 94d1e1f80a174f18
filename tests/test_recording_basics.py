"""The helpers in models/recording.py against outside references and facts of the trade."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import cumulative_trapezoid

from socfuse.models.recording import Recording, RecordingError, charge_throughput_ah, find_rests
from socfuse.models.thevenin import SECONDS_PER_HOUR


def test_charge_throughput_matches_scipy_cumulative_trapezoid():
    rng = np.random.default_rng(7)
    t = np.cumsum(rng.uniform(0.05, 3.0, 500))  # uneven intervals
    i = rng.normal(1.0, 4.0, 500)  # discharge and charge
    got = charge_throughput_ah(t, i)
    # reference: scipy.integrate.cumulative_trapezoid(i, t, initial=0) / 3600
    ref = cumulative_trapezoid(i, t, initial=0) / 3600.0
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-12)
    assert got[0] == 0.0 and got.shape == (500,)


def test_one_amp_hour_is_3600_coulomb():
    # 1 Ah = 3600 C (common practice, no source): 2 A for 1800 s is 3600 C = 1 Ah
    assert SECONDS_PER_HOUR == 3600.0
    ah = charge_throughput_ah([0.0, 1800.0], [2.0, 2.0])[-1]
    assert ah == pytest.approx(1.0, rel=1e-15)


def test_soc_after_drawing_30_of_100_ah_and_dod():
    # a 100 Ah pack with 30 Ah drawn is at 70 % SOC; DoD = 1 - SOC (common practice, no source)
    t = np.linspace(0.0, 3 * 3600.0, 301)
    i = np.full_like(t, 10.0)  # 10 A for 3 h = 30 Ah
    drawn = charge_throughput_ah(t, i)[-1]
    soc = 1.0 - drawn / 100.0
    assert drawn == pytest.approx(30.0, rel=1e-12)
    assert soc == pytest.approx(0.70, abs=1e-12)
    assert 1.0 - soc == pytest.approx(0.30, abs=1e-12)


def test_find_rests_indices_and_threshold():
    t = np.arange(0.0, 4000.0, 10.0)  # 400 samples
    i = np.full(t.size, 2.0)
    i[50:130] = 0.01    # 80 samples: 790 s of rest
    i[200:230] = -0.03  # 290 s: too short for 600 s
    i[300:] = 0.0       # 990 s at the end
    assert find_rests(t, i, 0.05, 600.0) == [(50, 129), (300, 399)]
    # with a 250 s minimum the short one counts; a 0.02 A threshold rejects the 0.03 A stretch
    assert find_rests(t, i, 0.05, 250.0) == [(50, 129), (200, 229), (300, 399)]
    assert find_rests(t, i, 0.02, 250.0) == [(50, 129), (300, 399)]
    assert find_rests([], [], 0.05, 1.0) == []


def test_recording_refuses_nonincreasing_time_with_row():
    with pytest.raises(RecordingError, match="row 2"):
        Recording([0.0, 1.0, 1.0], [0.0, 0.0, 0.0], [3.7, 3.7, 3.7])
