"""One settings resolver: every command ends with the same effective filter settings from one
partial ``filter.json`` (model-derived defaults, then the file, then options)."""
from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.cli.main import main
from socfuse.estimator.filters import settings as settings_mod
from socfuse.estimator.filters.settings import FILTER_SCHEMA, default_settings, resolve_settings
from socfuse.models import save_model

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("resolver")
    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=300, soc0=0.6, seed=3, temperature_c=25.0)
    rec.to_csv(d / "rec.csv", float_format="%.9g")
    save_model(m, d / "model.json")
    # a partial file: two keys only, everything else must come from the model
    (d / "filter.json").write_text(json.dumps({"schema": FILTER_SCHEMA, "gate_sigma": 4.5,
                                               "voltage_noise_v": 0.004}))
    return d, m


def test_resolver_order(files):
    d, m = files
    s = resolve_settings(m, d / "filter.json", {"gate_sigma": 3.0})
    base = default_settings(m)
    assert s.voltage_noise_v == 0.004  # from the file
    assert s.gate_sigma == 3.0  # option beats the file
    assert s.q_rc_v2_per_s == base.q_rc_v2_per_s and s.p0_rc_v == base.p0_rc_v  # model-derived


def test_every_command_resolves_the_same_settings(files, monkeypatch, tmp_path):
    d, m = files
    seen = {}
    real = settings_mod.resolve_settings

    def spy(model, path=None, overrides=None):
        s = real(model, path, overrides)
        seen.setdefault(current[0], s)
        return s

    monkeypatch.setattr(settings_mod, "resolve_settings", spy)
    current = [""]
    model, flt, rec = str(d / "model.json"), str(d / "filter.json"), str(d / "rec.csv")
    runs = {
        "estimate": ["estimate", "--model", model, "--filter", flt, rec, "-o", str(tmp_path / "t.csv")],
        "tune": ["tune", "--model", model, "--filter", flt, "--max-evaluations", "2", rec,
                 "-o", str(tmp_path / "tuned.json")],
        "bench": ["bench", "--model", model, "--filter", flt, "--out", str(tmp_path / "b"), rec],
        "export-c": ["export-c", "--model", model, "--filter", flt, "--no-build", "--out", str(tmp_path / "c")],
    }
    for name, argv in runs.items():
        current[0] = name
        assert main(argv) == 0, name
    assert set(seen) == set(runs)
    ref = seen["estimate"]
    for name, s in seen.items():
        assert s == ref, name


def test_no_command_builds_settings_on_its_own():
    # the resolver is the only place commands and the demo get their settings from
    for p in list((REPO / "estimator" / "cli").glob("*.py")) + [REPO / "estimator" / "demo" / "workflow.py"]:
        text = p.read_text()
        assert not re.search(r"\b(default_settings|load_settings)\(", text), p.name
