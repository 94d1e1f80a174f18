"""``socfuse tune`` on a small simulated CSV."""
from __future__ import annotations

import json

import pytest

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.cli.main import SAFETY_NOTE, main
from socfuse.estimator.filters.settings import FILTER_SCHEMA, load_settings
from socfuse.models.modelfile import save_model


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("tune")
    model = tiny_model(n_rc=1)
    rec, _ = simulated_recording(model, n=3000, soc0=0.8, noise_v=0.004, name="sim day")
    rec.to_csv(d / "day.csv", float_format="%.9g")
    rec.with_(soc_ref=None).to_csv(d / "day_noref.csv", float_format="%.9g")
    save_model(model, d / "model.json")
    return d


def _white_start(files):
    """Start settings for the simulated day: the simulator's noise is white and its model exact, so
    the model-error, capacity, resistance and noise-correlation terms are off."""
    import dataclasses

    from socfuse.estimator.filters.settings import FilterSettings, default_settings, save_settings
    from socfuse.models.modelfile import load_model

    names = {f.name for f in dataclasses.fields(FilterSettings)}
    off = {k: 0.0 for k in ("model_error_v", "capacity_error_frac", "resistance_error_ohm", "noise_corr_s",
                            "model_error_adapt_s", "rc_error_frac") if k in names}
    path = files / "white_start.json"
    if not path.exists():
        save_settings(default_settings(load_model(files / "model.json")).with_(**off), path)
    return path


def test_tune_writes_filter_json(files, capsys):
    out = files / "filter.json"
    code = main(["tune", "--model", str(files / "model.json"), str(files / "day.csv"), "-o", str(out),
                 "--filter", str(_white_start(files)),
                 "--params", "voltage_noise_v", "current_noise_a", "--max-evaluations", "40", "--quiet"])
    cap = capsys.readouterr()
    text = cap.out
    assert code == 0
    assert json.loads(out.read_text())["schema"] == FILTER_SCHEMA
    tuned = load_settings(out)
    # the simulated voltage noise is 4 mV (ekf_cases.simulated_recording): the tuned value is near it
    assert 0.004 / 1.5 < tuned.voltage_noise_v < 0.004 * 1.5
    assert "voltage_noise_v" in text and "mean NIS" in text and "log-likelihood" in text
    assert SAFETY_NOTE in cap.err  # cautions go to stderr (DESIGN.md section 4)
    # never overwrite a user's file
    before = out.read_text()
    assert main(["tune", "--model", str(files / "model.json"), str(files / "day.csv"), "-o", str(out)]) == 2
    assert out.read_text() == before


def test_tune_soc_error_needs_reference(files, capsys):
    out = files / "f2.json"
    code = main(["tune", "--model", str(files / "model.json"), str(files / "day_noref.csv"), "-o", str(out),
                 "--objective", "soc-error"])
    assert code == 2 and not out.exists()
    assert "no SOC reference" in capsys.readouterr().err
    code = main(["tune", "--model", str(files / "model.json"), str(files / "day.csv"), "-o", str(out),
                 "--objective", "soc-error", "--soc0", "0.8", "--params", "voltage_noise_v",
                 "--max-evaluations", "20", "--coverage", "0.9", "--quiet"])
    assert code == 0 and out.exists()
    text = capsys.readouterr().out
    assert "SOC RMSE" in text and "inside the filter's +-3 sigma" in text


def test_tune_help_and_bad_options(files, capsys):
    with pytest.raises(SystemExit) as e:
        main(["tune", "--help"])
    assert e.value.code == 0
    assert "--objective" in capsys.readouterr().out
    assert main(["tune", "--model", str(files / "model.json"), str(files / "day.csv"), "-o",
                 str(files / "x.json"), "--soc0", "1.7"]) == 2
    assert not (files / "x.json").exists()


def test_tune_refuses_settings_worse_on_unseen_data(files, capsys):
    # start at 50 mV voltage noise; the tuning day has 4 mV (ekf_cases.simulated_recording), the unseen
    # day 40 mV more: by the Gaussian likelihood of the unseen day the tuned ~4 mV is worse than the
    # start, so nothing is written and the exit code is 2 with the reason (DESIGN.md section 4)
    import numpy as np
    import pandas as pd

    from socfuse.estimator.filters.settings import default_settings, save_settings
    from socfuse.models.modelfile import load_model

    day = pd.read_csv(files / "day.csv")
    day["voltage_v"] += np.random.default_rng(2).normal(0.0, 0.04, len(day))
    day.to_csv(files / "noisy.csv", index=False, float_format="%.9g")
    save_settings(default_settings(load_model(files / "model.json")).with_(voltage_noise_v=0.05),
                  files / "start.json")
    out = files / "refused.json"
    argv = ["tune", "--model", str(files / "model.json"), str(files / "day.csv"), "--filter", str(files / "start.json"),
            "--holdout", str(files / "noisy.csv"), "--holdout-fraction", "0", "--params", "voltage_noise_v",
            "--max-evaluations", "30", "--quiet", "-o", str(out)]
    assert main(argv) == 2
    cap = capsys.readouterr()
    assert not out.exists()
    assert "refused" in cap.err and "hold-out objective rose" in cap.err
    assert "REFUSED" in cap.out and "unseen" in cap.out
    assert main(argv + ["--accept-worse"]) == 0
    cap = capsys.readouterr()
    assert out.exists() and "WARNING" in cap.err
    assert load_settings(out).voltage_noise_v < 0.01
