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


# --- verdict, per-recording tables and number formats (issue 17 items 1-3) ---------------------
def _summary(rows):
    cols = ["recording", "scenario", "method", "rmse_pct", "p95_abs_pct", "max_abs_pct", "inside_3sigma",
            "nis_mean", "nis_lo", "nis_hi", "faults"]
    return pd.DataFrame(rows, columns=cols)


def test_verdict_names_the_winner_the_margin_and_a_reason():
    import numpy as np
    from types import SimpleNamespace

    from socfuse.estimator.outputs.report import verdict_sentences, verdicts

    nan = float("nan")
    s = _summary([
        ("day_a", "offset", "ekf", 0.93, 1.80, 2.30, 0.40, 1.01, 0.98, 1.02, "offset"),
        ("day_a", "offset", "coulomb", 12.40, 20.10, 21.00, nan, nan, nan, nan, "offset"),
        ("day_a", "toffset", "ekf", 1.56, 2.90, 3.10, 0.30, 1.40, 0.98, 1.02, "toffset=2"),
        ("day_a", "toffset", "coulomb", 1.37, 2.50, 2.90, nan, nan, nan, nan, "toffset=2"),
        ("cold", "nominal", "ekf", 1.39, 3.00, 4.30, 0.20, 1.90, 0.98, 1.02, "nominal"),
        ("cold", "nominal", "coulomb", 1.09, 2.00, 2.50, nan, nan, nan, nan, "nominal"),
        ("day_a", "nominal", "ekf", 1.00, 1.50, 2.00, 0.90, 1.00, 0.98, 1.02, "nominal"),
        ("day_a", "nominal", "coulomb", 1.03, 1.60, 2.10, nan, nan, nan, nan, "nominal"),
    ])
    cold = SimpleNamespace(name="cold", temperature_c=np.linspace(1.0, 9.0, 50))
    warm = SimpleNamespace(name="day_a", temperature_c=np.full(50, 25.0))
    v = {(x.recording, x.scenario): x for x in verdicts(s, {"cold": cold, "day_a": warm})}
    # by hand: 12.40 - 0.93 = 11.47 points, 12.40 / 0.93 = 13.3x
    assert v[("day_a", "offset")].winner == "ekf" and not v[("day_a", "offset")].ekf_loses
    assert "the EKF wins by 11.47 points RMSE (13.3x lower)" in v[("day_a", "offset")].sentence
    assert "P95 1.80 vs 20.10, max 2.30 vs 21.00" in v[("day_a", "offset")].sentence
    # 1.56 - 1.37 = 0.19 > max(0.05, 5 % of 1.56): the baseline wins; the fault is in a sensor the EKF trusts
    t = v[("day_a", "toffset")]
    assert t.winner == "coulomb" and t.ekf_loses and "baseline wins by 0.19 points" in t.sentence
    assert any("temperature sensor" in r for r in t.reasons)
    # the cold day: no fault, so the reasons are temperature and model error with its evidence
    c = v[("cold", "nominal")]
    assert c.ekf_loses and any("cold recording (mean 5.0 degC, 1.0 to 9.0)" in r for r in c.reasons)
    assert any("mean NIS 1.90 outside its 95 % band" in r for r in c.reasons)
    # 1.03 - 1.00 = 0.03 <= 0.05 points: about equal
    assert v[("day_a", "nominal")].winner == "tie" and v[("day_a", "nominal")].leaders == ("ekf", "coulomb")
    head = " ".join(verdict_sentences(s))
    assert "the EKF has the lower SOC RMSE in 1, the coulomb baseline in 2, and they are about equal in 1" in head
    assert "cold / nominal (1.39 vs 1.09 points)" in head
    # faults: offset (EKF), toffset (baseline) -> 1 of 2; fault-free: cold (baseline), day_a (tie) -> 0 of 2
    assert "Under injected faults it is lower in 1 of 2 cases; without a fault in 0 of 2." in head
    assert "median 35 % of the samples" in head  # EKF coverage 0.40, 0.30, 0.20, 0.90 -> median 0.35


def test_report_has_verdict_first_per_recording_tables_and_blank_baseline_coverage(report):
    files, res = report
    page = files.html.read_text(encoding="utf-8")
    assert page.index('id="verdict"') < page.index('id="summary"') < page.index('id="scenarios"')
    assert "errors_c48_day_lunch.png" in {p.name for p in files.pngs}  # a figure for the recording
    # the per-recording table: one format per column, units in the header
    table = page[page.index('id="rec-c48_day_lunch"'):]
    table = table[:table.index("</table>")]
    assert "RMSE (points)" in table and "inside own +-3 sigma (%)" in table and "converged after (s)" in table
    rows = re.findall(r"<tr><td>([^<]*)</td><td>([^<]*)</td>(.*?)</tr>", table)
    assert len(rows) == 4
    for _scen, method, cells in rows:
        nums = re.findall(r'<td class="n">([^<]*)</td>', cells)
        assert re.fullmatch(r"\d+\.\d\d", nums[0]) and re.fullmatch(r"\d+\.\d\d", nums[1])  # RMSE, P95
        cover = nums[8]                                           # inside own +-3 sigma (%)
        if method == "coulomb":
            assert cover == ""                                    # no sigma, no coverage (never "100 %")
        else:
            assert re.fullmatch(r"\d+\.\d", cover)
    back = pd.read_csv(files.summary_csv)
    assert back.loc[back["method"] == "coulomb", "inside_3sigma"].isna().all()
    assert {"p95_abs_pct", "n_excursions", "excursion_s"} <= set(back.columns)


def test_report_never_touches_the_matplotlib_backend(repo, tmp_path):
    # issue 10 item 6: library code uses Figure objects, never matplotlib.use or pyplot
    import subprocess
    import sys

    code = ("import matplotlib; matplotlib.use('svg'); import sys\n"
            "import socfuse.estimator.outputs.report as r\n"
            "from socfuse.estimator.filters.settings import default_settings\n"
            "from matplotlib.figure import Figure\n"
            "f = Figure(); f.subplots().plot([0, 1]); png = r.figure_png(f)\n"
            "assert png[:8] == b'\\x89PNG\\r\\n\\x1a\\n'\n"
            "print(matplotlib.get_backend(), 'matplotlib.pyplot' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=repo, check=True)
    assert out.stdout.split() == ["svg", "False"]
    assert "matplotlib.use" not in (repo / "estimator" / "outputs" / "report.py").read_text()
