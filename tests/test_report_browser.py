"""The report in a real browser: no horizontal overflow at 1280 px, no console errors, all images load.

Headless Chromium through playwright (the Debian ``chromium`` package at /usr/bin/chromium; no browser
is ever downloaded).  Skips with a reason when playwright or the browser is missing.  The report is
made deliberately hostile: a 2,400-character monospace line, a 30-column table and a 1,300-character
word, the cases that once made the page 2,434 px wide (issue 17).
"""
from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from socfuse.estimator.analysis.bench import run_bench
from socfuse.estimator.demo.truth import truth_cell_model
from socfuse.estimator.outputs.report import ReportSection, df_to_html, write_report
from socfuse.models.loaders import load_recording

sync_api = pytest.importorskip("playwright.sync_api", reason="playwright not installed (test extra)")

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]
WIDTH = 1280

# every element's right edge, unless an ancestor clips or scrolls it (then that ancestor is checked)
OVERFLOW_JS = """() => {
  const w = document.documentElement.clientWidth, bad = [];
  for (const el of document.querySelectorAll('body *')) {
    let p = el.parentElement, clipped = false;
    while (p && p !== document.body) {
      const ox = getComputedStyle(p).overflowX;
      if (ox === 'auto' || ox === 'scroll' || ox === 'hidden') { clipped = true; break; }
      p = p.parentElement;
    }
    if (!clipped && el.getBoundingClientRect().right > w + 0.5) bad.push(el.tagName + ' ' + el.className);
  }
  return {scroll: document.documentElement.scrollWidth, client: w, bad: bad.slice(0, 10),
          images: Array.from(document.images).map(i => [i.complete, i.naturalWidth])};
}"""


@pytest.fixture(scope="module")
def hostile_report(repo, tmp_path_factory):
    lunch = load_recording(repo / "datasets" / "c48_day_lunch.csv").slice(0, 900)
    cold = load_recording(repo / "datasets" / "c48_day_cold.csv").slice(0, 900)
    model = truth_cell_model(25.0)
    res = run_bench(model, [lunch, cold], ["nominal", "offset=0.05+soc0=-0.1+gain=0.01"], ["ekf", "coulomb"],
                    keep_traces=[lunch.name], quiet=True)
    wide = pd.DataFrame({f"a_long_column_name_number_{k}_with_unit_v": np.linspace(0, 1e-4 * k, 4)
                         for k in range(30)})
    sec = ReportSection("Long text", "<pre>" + ("tuning made the filter overconfident " * 65) + "x" * 2400 + "</pre>"
                        + df_to_html(wide) + "<p>" + "unbrokenword" * 110 + "</p>")
    out = tmp_path_factory.mktemp("browser")
    return write_report(out, res, model, sections=[sec], recordings=[lunch, cold])


def test_report_fits_1280_px_without_console_errors(hostile_report):
    if CHROMIUM is None:
        pytest.skip("no chromium on PATH (Debian: apt-get install -y chromium); the report was not rendered")
    with sync_api.sync_playwright() as p:
        try:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        except sync_api.Error as e:  # a browser that cannot start here is not a report failure
            pytest.skip(f"chromium did not start: {str(e).splitlines()[0]}")
        try:
            page = browser.new_page(viewport={"width": WIDTH, "height": 900})
            errors: list[str] = []
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(hostile_report.html.as_uri(), wait_until="load")
            got = page.evaluate(OVERFLOW_JS)
        finally:
            browser.close()
    assert errors == []
    assert WIDTH - 20 <= got["client"] <= WIDTH  # a vertical scrollbar may take a few px
    assert got["scroll"] <= got["client"], got
    assert got["bad"] == [], got["bad"]
    assert len(got["images"]) == len(hostile_report.pngs) >= 5
    assert all(done and w > 0 for done, w in got["images"])  # every embedded PNG decoded
