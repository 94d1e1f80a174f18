"""A two-worker Dask LocalCluster on loopback gives the same summary as the serial run.

Reference: dask.distributed (the library) runs the same pure task function; the summaries must
be equal value for value.
"""
from __future__ import annotations

import pandas as pd
import pytest

pytest.importorskip("distributed")

from socfuse.estimator.analysis.bench import run_bench  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402
from socfuse.estimator.demo.truth import truth_cell_model  # noqa: E402


def test_two_worker_local_cluster_equals_serial(repo):
    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 1800)
    model = truth_cell_model(25.0)
    args = (model, [rec, rec.slice(900).with_(name="second_half")], ["nominal", "offset=0.1+vnoise=0.004"],
            ["ekf", "coulomb"])
    serial = run_bench(*args, quiet=True, keep_traces="none")
    par = run_bench(*args, quiet=True, keep_traces="none", workers=2, processes=True)
    assert len(serial.summary) == 8
    pd.testing.assert_frame_equal(serial.summary, par.summary, check_exact=True)
