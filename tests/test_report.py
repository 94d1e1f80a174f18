"""The HTML report is one self-contained file: every figure is an embedded PNG, nothing external.

References: the PNG signature (ISO/IEC 15948, the first 8 bytes ``89 50 4E 47 0D 0A 1A 0A``) and
RFC 2397 ``data:`` URIs with base64 (RFC 4648) payloads.
"""
from __future__ import annotations

import base64
import re

import pandas as pd
import pytest

from socfuse.estimator.analysis.bench import run_bench
from socfuse.estimator.cli.main import SAFETY_NOTE
from socfuse.estimator.outputs.report import ReportSection, write_report
from socfuse.models.loaders import load_recording
from socfuse.estimator.demo.truth import truth_cell_model

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="module")
def report(repo, tmp_path_factory):
    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 2400)
    model = truth_cell_model(25.0)
    res = run_bench(model, [rec], ["nominal", "offset"], ["ekf", "coulomb"], quiet=True)
    out = tmp_path_factory.mktemp("report")
    extra = ReportSection("Extra section", "<p>hello from a caller</p>")
    files = write_report(out, res, model, sections=[extra], title="test report")
    return files, res


def test_report_is_self_contained(report):
    files, res = report
    page = files.html.read_text(encoding="utf-8")
    # no external assets: no src/href to another file or host, no <link>/<script src>
    assert not re.search(r'(src|href)\s*=\s*["\'](?!data:|#)', page)
    assert "<link" not in page and "<script" not in page
    uris = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', page)
    assert len(uris) == len(files.pngs) >= 4
    for b64, png in zip(uris, files.pngs):
        data = base64.b64decode(b64, validate=True)
        assert data[:8] == PNG_MAGIC
        assert data == png.read_bytes()


def test_report_content(report):
    files, res = report
    page = files.html.read_text(encoding="utf-8")
    assert SAFETY_NOTE.replace("'", "&#x27;") in page
    assert "Extra section" in page and "hello from a caller" in page
    assert "common practice" in page  # fault defaults stated with their status
    assert "0.025 C" in page          # the default offset, as stated in faults.FAULTS
    back = pd.read_csv(files.summary_csv)
    assert list(back.columns[:7]) == ["recording", "scenario", "method", "rmse_pct", "max_abs_pct",
                                      "final_abs_pct", "converge_s"]
    assert len(back) == 4
    names = sorted(p.name for p in files.pngs)
    assert "rmse_by_scenario.png" in names and "soc_c_vs_soc_e.png" in names
    assert any(n.startswith("soc_c48_day_lunch_offset") for n in names)
