"""Every number the README marks with ``<!--fig:KEY-->`` agrees with docs/readme_figures.json.

``python benchmarks/readme_figures.py`` regenerates the file from the documented commands (demo,
energy, Monte Carlo, speed, identification, the generalisation benchmark); this test compares what
the README prints with what was regenerated, at the README's own rounding (half a unit of the last
printed digit).  The slow regeneration itself is a benchmark script, not a test; the comparison
always runs.
"""
from __future__ import annotations

import importlib.util
import json

import pytest


@pytest.fixture(scope="module")
def rf(repo):
    spec = importlib.util.spec_from_file_location("readme_figures", repo / "benchmarks" / "readme_figures.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_rounding_rule_catches_the_energy_figure_of_issue_17(rf):
    # issue 17: `socfuse energy --load-w 600 --pack 14s4p` gave 966.03 Wh while the README said 959
    data = {"parts": {"energy": {"figures": {"usable_600w_wh": 966.03, "soc_e_at_half_pct": 47.74}}}}
    bad = rf.check_readme("600 W gives 959<!--fig:energy.usable_600w_wh--> Wh", data)
    assert len(bad) == 1 and "prints 959" in bad[0] and "966.03" in bad[0]
    assert rf.check_readme("600 W gives 966<!--fig:energy.usable_600w_wh--> Wh", data) == []
    # 47.74 rounds to 47.7 but not to 47.8; a mark naming no stored figure is a problem too
    assert rf.check_readme("50 % is 47.7<!--fig:energy.soc_e_at_half_pct--> %", data) == []
    assert len(rf.check_readme("50 % is 47.8<!--fig:energy.soc_e_at_half_pct--> %", data)) == 1
    assert "does not have" in rf.check_readme("1.0<!--fig:energy.nope-->", data)[0]
    assert rf.printed_mismatch("1,004", 1003.6) is None and rf.printed_mismatch("1,004", 1003.4) is not None


def test_readme_figures_match_the_regenerated_file(repo, rf):
    readme = (repo / "README.md").read_text(encoding="utf-8")
    path = repo / "docs" / "readme_figures.json"
    assert path.is_file(), "run: python benchmarks/readme_figures.py"
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["schema"] == rf.SCHEMA
    marks = rf.readme_marks(readme)
    assert len(marks) >= 20, "the README's quoted figures carry <!--fig:KEY--> marks"
    # every regenerated part the README draws on is quoted, with its provenance stored
    quoted_parts = {key.split(".")[0] for key, _, _ in marks}
    for part in quoted_parts:
        body = data["parts"].get(part)
        assert body is not None, f"README quotes part {part!r}, which the figures file lacks"
        assert body["command"] and body["git_commit"] and body["generated_utc"]
    assert rf.check_readme(readme, data) == []
