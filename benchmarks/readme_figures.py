"""Regenerate every figure the README quotes and store them in ``docs/readme_figures.json``.

Run from the repository root (under ``nice``: the slow parts take minutes on 2 cores)::

    nice python benchmarks/readme_figures.py                      # every part
    nice python benchmarks/readme_figures.py --parts demo energy  # some parts (the others are kept)
    python benchmarks/readme_figures.py --check                   # compare README and the file only

Each part runs what a user runs, with default options, and writes its figures (one number per
key, in the unit the README prints) into the JSON file together with the command, the git commit
and the UTC time.  The README marks each quoted number with an HTML comment naming its key,
``966<!--fig:energy.usable_600w_wh--> Wh``, invisible when rendered; ``tests/test_readme_figures.py``
fails when a marked number and the stored value disagree beyond the README's printed rounding.

Parts (the numbers come from the documented paths, never from hand-picked options):

- ``demo``: ``socfuse demo --out DIR`` (identification, likelihood tuning, benchmark on the three demo
  days, tolerance study); mean RMSE per scenario and method over the days, the cold day, the EKF's
  coverage range, the demo tolerance study's P95.
- ``energy``: ``socfuse energy --model DIR/model.json --load-w 600 --pack 14s4p`` on the demo's
  identified model (its printed rest and usable energy) and ``soc_c_to_e(model, 0.5)``.
- ``montecarlo``: ``tolerance_study(model, lunch_day)`` with 1,000 runs and the sweeps, once with the
  model-derived default settings and once with the demo's tuned ``filter.json``; its run time from
  ``benchmarks/montecarlo_speed.py`` (last line).
- ``speed``: ``benchmarks/speed.py`` (last line ``ns_per_step=.. ratio_vs_filterpy=..`` and the real
  10 Hz and batched lines).
- ``identify``: ``benchmarks/identify_speed.py`` (pulse-test timings) and the demo round trip of
  ``socfuse.identify`` against the truth simulator's parameters.
- ``energy_real``: ``tests/test_energy_realdata.py -s -k midpoint`` (remaining energy predicted at the
  midpoint of the real 25 degC drive cycles against the energy delivered to 2.5 V).
- ``generalisation``: ``benchmarks/generalisation.py --json`` (every reference case of DESIGN.md
  section 7 through the CLI: demo, Panasonic 25/10/0 degC at 10 Hz, PyBaMM NMC and LFP); RMSE, max
  and coverage per case, recording, rate and method, and its headline line.

Intermediate files go to ``~/.cache/socfuse/readme_figures`` (``--work DIR``).  Timings are figures
of this shared 2-core machine at the time of the run, stored as measured.
"""
from __future__ import annotations

import argparse
import contextlib
import io
import json
import math
import os
import re
import shutil
import subprocess
import sys
import time
from datetime import datetime, timezone
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

FIGURES = REPO / "docs" / "readme_figures.json"
#: folder of the README's PNG figures (the folder of --out)
DOCS = FIGURES.parent
README = REPO / "README.md"
SCHEMA = "socfuse.readme-figures/1"
PARTS = ("demo", "energy", "montecarlo", "speed", "identify", "generalisation", "energy_real")
# a sign belongs to the number only after a space or "(": in "+-42" the 42 is unsigned
MARKER = re.compile(r"((?:(?<=[\s(])[+-])?\d[\d,]*(?:\.\d+)?)<!--fig:([A-Za-z0-9_.\-]+)-->")
DEMO_SCENARIOS = ("nominal", "soc0", "offset", "gain", "vnoise", "fade", "toffset", "vdrop", "ocv_offset", "combined")


# ====================================================================== comparison (used by the test)
def readme_marks(text: str) -> list[tuple[str, str, int]]:
    """``(key, printed number, line number)`` for every ``N<!--fig:KEY-->`` in the README text."""
    out = []
    for k, line in enumerate(text.splitlines(), start=1):
        for m in MARKER.finditer(line):
            out.append((m.group(2), m.group(1), k))
    return out


def printed_mismatch(printed: str, value: float) -> str | None:
    """Why ``printed`` does not show ``value`` at its own rounding (None when it does).

    ``"959"`` shows 958.5 .. 959.5; ``"0.98"`` shows 0.975 .. 0.985 (half a unit of the last digit).
    """
    s = printed.replace(",", "")
    decimals = len(s.split(".")[1]) if "." in s else 0
    half = 0.5 * 10.0 ** (-decimals)
    if not isinstance(value, (int, float)) or not math.isfinite(float(value)):
        return f"stored value {value!r} is not a number"
    if abs(float(s) - float(value)) > half * (1 + 1e-9) + 1e-12:
        return f"README prints {printed}, regenerated value is {float(value):.{decimals + 2}f}"
    return None


def flat_figures(data: dict) -> dict:
    """``key -> value`` over all parts of a figures file (keys are ``part.name``)."""
    out = {}
    for part, body in data.get("parts", {}).items():
        for k, v in body.get("figures", {}).items():
            out[f"{part}.{k}"] = v
    return out


def check_readme(readme_text: str, data: dict) -> list[str]:
    """Problems between the README's marked numbers and the stored figures (empty: all agree)."""
    figs = flat_figures(data)
    problems = []
    for key, printed, line in readme_marks(readme_text):
        if key not in figs:
            problems.append(f"README line {line}: {printed} is marked {key!r}, which the figures file does not have")
            continue
        why = printed_mismatch(printed, figs[key])
        if why:
            problems.append(f"README line {line} ({key}): {why}")
    return problems


# ====================================================================== helpers
def _git_commit() -> str:
    if os.environ.get("SOCFUSE_GIT_COMMIT"):  # a snapshot of a commit (git archive) has no .git
        return os.environ["SOCFUSE_GIT_COMMIT"]
    try:
        out = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=REPO, capture_output=True, text=True,
                             check=True)
        dirty = subprocess.run(["git", "status", "--porcelain", "--untracked-files=no"], cwd=REPO,
                               capture_output=True, text=True, check=True).stdout.strip()
        return out.stdout.strip() + ("+uncommitted" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def _cli(argv) -> str:
    """Run ``socfuse ARGV`` in process; its stdout (exit code must be 0)."""
    from socfuse.estimator.cli.main import main

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main([str(a) for a in argv])
    if rc not in (0, None):
        raise RuntimeError(f"socfuse {' '.join(map(str, argv))} exited {rc}")
    return buf.getvalue()


def _script(name: str, *args: str) -> str:
    """Run ``benchmarks/NAME ARGS`` in a fresh interpreter; its stdout."""
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    res = subprocess.run([sys.executable, str(REPO / "benchmarks" / name), *args], cwd=REPO, env=env,
                         capture_output=True, text=True)
    if res.returncode != 0:
        raise RuntimeError(f"benchmarks/{name} exited {res.returncode}: {res.stderr.strip().splitlines()[-1:]}")
    return res.stdout


def _num(pattern: str, text: str, what: str) -> float:
    m = re.search(pattern, text)
    if m is None:
        raise RuntimeError(f"{what}: pattern {pattern!r} not found in the output")
    return float(m.group(1).replace(",", ""))


def _demo_dir(work: Path, refresh: bool) -> Path:
    out = work / "demo"
    if refresh or not (out / "summary.csv").is_file():
        if out.exists():
            shutil.rmtree(out)
        _cli(["demo", "--out", out, "--quiet"])
    return out


# ====================================================================== parts
def part_demo(work: Path) -> tuple[dict, str]:
    import pandas as pd

    t0 = time.perf_counter()
    out = _demo_dir(work, refresh=True)
    s = pd.read_csv(out / "summary.csv")
    figs: dict = {"seconds": time.perf_counter() - t0}
    # the README's demo figure: the lunch-break day under a current-sensor offset, as the report draws it
    shutil.copyfile(out / "soc_c48_day_lunch_offset.png", DOCS / "soc_offset.png")
    for m in ("ekf", "ukf", "coulomb"):
        sub = s[(s["recording"] == "c48_day_lunch") & (s["scenario"] == "offset") & (s["method"] == m)]
        if len(sub):
            figs[f"lunch.offset.{m}.max"] = float(sub["max_abs_pct"].iloc[0])
            figs[f"lunch.offset.{m}.rmse"] = float(sub["rmse_pct"].iloc[0])
            figs[f"lunch.offset.{m}.final_abs"] = float(sub["final_abs_pct"].iloc[0])
            cov = float(sub["inside_3sigma"].iloc[0])
            if math.isfinite(cov):
                figs[f"lunch.offset.{m}.coverage_pct"] = 100.0 * cov
    # the demo runs the slower sigma-point filter on the first 2 h of the lunch-break day only
    sub = s[(s["recording"] == "c48_day_lunch_first_2h") & (s["scenario"] == "offset") & (s["method"] == "ukf")]
    if len(sub):
        figs["lunch_first_2h.offset.ukf.max"] = float(sub["max_abs_pct"].iloc[0])
        figs["lunch_first_2h.offset.ukf.rmse"] = float(sub["rmse_pct"].iloc[0])
    figs.update(_footprint(out / "c" / "README.md"))
    figs.update(_counting_drift())
    for sc in DEMO_SCENARIOS:
        for m in ("ekf", "coulomb", "ukf"):
            sub = s[(s["scenario"] == sc) & (s["method"] == m)]
            if len(sub):
                figs[f"rmse_mean.{sc}.{m}"] = float(sub["rmse_pct"].mean())
                figs[f"max.{sc}.{m}"] = float(sub["max_abs_pct"].max())
    for day in sorted(set(s["recording"])):
        for m in ("ekf", "coulomb"):
            sub = s[(s["recording"] == day) & (s["scenario"] == "nominal") & (s["method"] == m)]
            if len(sub):
                short = day.replace("c48_day_", "")
                figs[f"{short}.nominal.{m}.rmse"] = float(sub["rmse_pct"].iloc[0])
                figs[f"{short}.nominal.{m}.max"] = float(sub["max_abs_pct"].iloc[0])
                figs[f"{short}.nominal.{m}.p95"] = float(sub["p95_abs_pct"].iloc[0])
    cov = s.loc[s["method"] == "ekf", "inside_3sigma"].astype(float).dropna()
    if len(cov):
        figs["ekf_coverage_min_pct"] = 100.0 * float(cov.min())
        figs["ekf_coverage_max_pct"] = 100.0 * float(cov.max())
    lunch = s[(s["recording"] == "c48_day_lunch") & (s["scenario"] == "nominal") & (s["method"] == "ekf")]
    if len(lunch):
        figs["lunch.nominal.ekf.final_abs"] = float(lunch["final_abs_pct"].iloc[0])
    figs.update(_bound_final(out))
    page = (out / "report.html").read_text(encoding="utf-8")
    m = re.findall(r"(ekf|coulomb)\s+P50 ([\d.]+) %\s+P95 ([\d.]+) %", page)
    for meth, p50, p95 in m:
        figs[f"tolerance.{meth}.p50"] = float(p50)
        figs[f"tolerance.{meth}.p95"] = float(p95)
    return figs, f"socfuse demo --out {out}"


def _counting_drift() -> dict:
    """How far plain coulomb counting ends below the truth on each demo day, points (a positive number).

    Counted by scipy's trapezoid rule (``integrate.cumulative_trapezoid``) from the true start SOC with the
    BMS current, the 4.8 Ah nameplate and the truth's coulombic efficiency on charge (manifest.json).
    """
    import numpy as np
    from scipy.integrate import cumulative_trapezoid

    from socfuse.models.loaders import load_recording

    eta = float(json.loads((REPO / "datasets" / "manifest.json").read_text())["truth"]["coulombic_efficiency"])
    out = {}
    for day in ("lunch", "cold", "long"):
        r = load_recording(REPO / "datasets" / f"c48_day_{day}.csv")
        i = np.asarray(r.current_a, dtype=float)
        q_ah = cumulative_trapezoid(i * np.where(i < 0, eta, 1.0), np.asarray(r.time_s, dtype=float), initial=0.0) / 3600
        out[f"{day}.counting_drift_low"] = 100.0 * float(r.soc_ref[-1] - (r.soc_ref[0] - q_ah[-1] / 4.8))
    return out


def _footprint(path: Path) -> dict:
    """State RAM, const tables, flops and stack of the demo's C export (its README's footprint table)."""
    text = path.read_text(encoding="utf-8")
    return {"c_state_bytes": _num(r"state RAM[^|]*\| (\d+) bytes", text, "C footprint"),
            "c_tables_bytes": _num(r"const tables \| (\d+) bytes", text, "C footprint"),
            "c_flops": _num(r"operations per step \| about (\d+)", text, "C footprint"),
            "c_stack_bytes": _num(r"worst-case stack \| (\d+) bytes", text, "C footprint"),
            # in units of 1e-6 so the README can print it as a plain number
            "c_max_soc_diff_1e6": 1e6 * _num(r"max_soc_diff=([\d.e+-]+)`", text, "C harness")}


def _bound_final(out: Path) -> dict:
    """Final posterior Cramer-Rao SOC sigma on the lunch day with the demo's model and filter, points."""
    from socfuse.estimator.analysis.bound import pcrb_soc_sigma
    from socfuse.estimator.filters.settings import load_settings
    from socfuse.models.loaders import load_recording
    from socfuse.models.modelfile import load_model

    model = load_model(out / "model.json")
    day = load_recording(REPO / "datasets" / "c48_day_lunch.csv")
    sig = pcrb_soc_sigma(model, day, load_settings(out / "filter.json")).soc_sigma
    return {"lunch.bound_final_sigma": 100.0 * float(sig[-1])}


def part_energy(work: Path) -> tuple[dict, str]:
    from socfuse.estimator.filters.energy import soc_c_to_e, usable_energy
    from socfuse.models.modelfile import load_model

    out = _demo_dir(work, refresh=False)
    model_path = out / "model.json"
    text = _cli(["energy", "--model", model_path, "--load-w", "600", "--pack", "14s4p"])
    model = load_model(model_path)
    r = usable_energy(model, power_w=600.0, pack="14s4p", n_steps=1000)
    figs = {
        "rest_wh": _num(r"rest energy \(full to empty\): ([\d.,]+) Wh", text, "energy"),
        "usable_600w_wh": _num(r"usable energy at [^:]*: ([\d.,]+) Wh", text, "energy"),
        "runtime_600w_h": r.runtime_s / 3600.0,
        "soc_e_at_half_pct": 100.0 * float(soc_c_to_e(model, 0.5)),
    }
    return figs, f"socfuse energy --model {model_path} --load-w 600 --pack 14s4p"


def _study_figs(study, prefix: str) -> dict:
    figs = {}
    for m in study.methods:
        figs[f"{prefix}.{m}.p50"] = 100.0 * float(study.p50[m])
        figs[f"{prefix}.{m}.p95"] = 100.0 * float(study.p95[m])
    for sw in study.sweeps:
        scale, unit = (1000.0, "ma") if sw.knob == "current_offset_a" else (100.0, "pct")
        for m, lim in sw.limit.items():
            if lim is not None:
                figs[f"{prefix}.{m}.{sw.knob}_limit_{unit}"] = scale * float(lim)
            figs[f"{prefix}.{m}.{sw.knob}_p95_at_{scale * float(sw.values[0]):g}{unit}_pct"] = 100.0 * float(sw.p95[m][0])
        figs[f"{prefix}.{sw.knob}_grid_max_{unit}"] = scale * float(sw.values[-1])
    return figs


def part_montecarlo(work: Path) -> tuple[dict, str]:
    from socfuse.estimator.analysis.montecarlo import tolerance_study
    from socfuse.estimator.filters.settings import load_settings
    from socfuse.models.loaders import load_recording
    from socfuse.models.modelfile import load_model

    out = _demo_dir(work, refresh=False)
    model = load_model(out / "model.json")
    day = load_recording(REPO / "datasets" / "c48_day_lunch.csv")
    t0 = time.perf_counter()
    figs = _study_figs(tolerance_study(model, day, n_runs=1000, seed=0), "default")
    figs["default_seconds"] = time.perf_counter() - t0
    figs.update(_study_figs(tolerance_study(model, day, load_settings(out / "filter.json"), n_runs=1000, seed=0),
                            "tuned"))
    figs["samples"] = float(day.n)
    last = _script("montecarlo_speed.py").strip().splitlines()[-1]
    figs["speed_runs"] = _num(r"runs=(\d+)", last, "montecarlo_speed")
    figs["speed_seconds"] = _num(r"seconds=([\d.]+)", last, "montecarlo_speed")
    return figs, ("tolerance_study(demo model, c48_day_lunch, n_runs=1000, seed=0) with default settings and with "
                  "the demo's filter.json; python benchmarks/montecarlo_speed.py")


def part_speed(work: Path) -> tuple[dict, str]:
    text = _script("speed.py")
    last = text.strip().splitlines()[-1]
    figs = {"ns_per_step": _num(r"ns_per_step=([\d.]+)", last, "speed"),
            "ratio_vs_filterpy": _num(r"ratio_vs_filterpy=([\d.]+)", last, "speed"),
            "load_average": _num(r"load average ([\d.]+)", text, "speed")}
    m = re.search(r"batch_msteps_per_cpu_s=([\d.]+)", last)
    figs["batch_million_per_s"] = (float(m.group(1)) if m else
                                   _num(r"batched: .*?: ([\d.]+) million cell-steps/s", text, "speed"))
    m = re.search(r"ratio_vs_c=([\d.]+)", last)
    if m:
        figs["c_time_over_ours"] = float(m.group(1))
    m = re.search(r"^(\S+): (\d+) steps\s+ours", text, re.M)
    if m:
        figs["demo_steps"] = float(m.group(2))
    for key in ("help_wall_s", "estimate_wall_s", "estimate_mat_wall_s"):
        m = re.search(key + r"=([\d.]+)", last)
        if m:
            figs[key] = float(m.group(1))
    real = re.search(r"(\d+) steps\s+ours\s+([\d.]+) ns/step.*ratio\s+(\d+)\s+\(demo model on the real", text)
    if real:
        figs.update({"real_steps": float(real.group(1)), "real_ns_per_step": float(real.group(2)),
                     "real_ratio_vs_filterpy": float(real.group(3))})
    return figs, "python benchmarks/speed.py"


def part_identify(work: Path) -> tuple[dict, str]:
    import numpy as np

    from socfuse.estimator.demo.truth import truth_cell_model
    from socfuse.models.identify.pipeline import identify
    from socfuse.models.loaders import load_recording

    data = REPO / "datasets"
    c20 = load_recording(data / "c48_c20_25degC.csv")
    pulses = [load_recording(data / "c48_pulse_25degC.csv"), load_recording(data / "c48_pulse_05degC.csv")]
    lunch = load_recording(data / "c48_day_lunch.csv")
    res = identify(c20, pulses, name="demo cell C48 (identified)", validate=lunch, validate_soc0=1.0)
    model = res.model
    truth = truth_cell_model(25.0)
    g = np.linspace(0.1, 0.9, 81)
    figs = {"demo_capacity_ah": float(model.capacity_ah),
            "demo_capacity_err_pct": 100.0 * (model.capacity_ah / truth.capacity_ah - 1.0),
            "demo_ocv_max_err_mv": 1000.0 * float(np.max(np.abs(np.asarray(model.ocv.voltage(g))
                                                                 - np.asarray(truth.ocv.voltage(g))))),
            "demo_validate_rms_mv": 1000.0 * float(res.validation[0].rms_v)}
    # as tests/test_identify_demo.py: relative error at the model's own SOC breakpoints, per temperature row
    for t_row, t_true in zip(model.r0_ohm.temperature_c, (5.0, 25.0)):
        tm = truth_cell_model(t_true)
        soc = model.r0_ohm.soc
        r0 = np.asarray(model.r0_ohm.at(soc, t_row)) / np.asarray(tm.r0_ohm.at(soc, t_true)) - 1.0
        tau = np.asarray(model.rc[0].tau_s.at(soc, t_row)) / np.asarray(tm.rc[0].tau_s.at(soc, t_true)) - 1.0
        figs[f"demo_r0_max_err_pct_{t_true:g}c"] = 100.0 * float(np.max(np.abs(r0)))
        figs[f"demo_tau1_max_err_pct_{t_true:g}c"] = 100.0 * float(np.max(np.abs(tau)))
    # the README's identification figure: `socfuse identify ... --plots DIR`, the command the README shows
    plots = work / "identify_plots"
    shutil.rmtree(plots, ignore_errors=True)
    model_out = work / "c48_identified.json"
    model_out.unlink(missing_ok=True)
    _cli(["identify", "--ocv-test", data / "c48_c20_25degC.csv", "--pulse-test", data / "c48_pulse_25degC.csv",
          "--pulse-test", data / "c48_pulse_05degC.csv", "--validate", data / "c48_day_lunch.csv",
          "--plots", plots, "-o", model_out])
    shutil.copyfile(plots / "parameters.png", DOCS / "identify_parameters.png")
    text = _script("identify_speed.py")
    pats = {"demo_pulse_s": r"pulse test 25 degC \(detect, R0, RC fits\)\s+([\d.]+) s",
            "demo_identify_s": r"identify\(\): C/20 \+ pulse tests at 25 and 5 degC\s+([\d.]+) s",
            "real_pulse_s": r"pulse test \(\d+ pulses: detect, R0, RC fits\)\s+([\d.]+) s",
            "real_identify_s": r"identify\(\): C/20 \+ HPPC\s+([\d.]+) s"}
    for k, pat in pats.items():
        m = re.search(pat, text)
        if m:
            figs[k] = float(m.group(1))
    m = re.search(r"capacity ([\d.]+) Ah; R0\(50 %\) ([\d.]+) mOhm; \d RC pair\(s\): R1 ([\d.]+) mOhm / tau1 "
                  r"([\d.]+) s, R2 ([\d.]+) mOhm / tau2 ([\d.]+) s", text)
    if m:
        for k, v in zip(("capacity_ah", "r0_50_mohm", "r1_50_mohm", "tau1_50_s", "r2_50_mohm", "tau2_50_s"),
                        m.groups()):
            figs[f"real_{k}"] = float(v)
    m = re.search(r"average ([\d.]+) mV, discharge ([\d.]+) mV, rest ([\d.]+) mV, anchored ([\d.]+) mV", text)
    if m:
        for k, v in zip(("average", "discharge", "rest", "anchored"), m.groups()):
            figs[f"real_ocv_{k}_rms_mv"] = float(v)
    m = re.search(r"refinement on Cycle_2: ([\d.]+) -> ([\d.]+) mV; validation on Cycle_1: ([\d.]+) mV RMS, "
                  r"max (\d+) mV", text)
    if m:
        for k, v in zip(("refine_before", "refine_after", "validate_cycle1", "validate_cycle1_max"), m.groups()):
            figs[f"real_{k}_mv"] = float(v)
    return figs, ("socfuse.identify on datasets/ (validated on the lunch day) against the truth simulator; "
                  "python benchmarks/identify_speed.py")


def part_generalisation(work: Path) -> tuple[dict, str]:
    out = work / "generalisation.json"
    # a cache of its own, started fresh: cached traces of an earlier code version must not be reused
    text = _script("generalisation.py", "--json", str(out), "--cache", str(work / "generalisation"), "--fresh")
    last = text.strip().splitlines()[-1]
    figs = {"worst_ekf_rmse_pct": _num(r"worst_ekf_rmse_pct=([\d.]+)", last, "generalisation"),
            "coverage_min_pct": _num(r"coverage_min=([\d.]+)", last, "generalisation")}
    m = re.search(r"ekf_beats_baseline=(\d+)/(\d+)", last)
    if m:
        figs["ekf_beats"], figs["pairs"] = float(m.group(1)), float(m.group(2))
    m = re.search(r"under faults [^\n]*?ekf_beats_baseline=(\d+)/(\d+)", text)
    if m:
        figs["faults_ekf_beats"], figs["faults_pairs"] = float(m.group(1)), float(m.group(2))
    notes = []
    for r in json.loads(out.read_text()):
        if r.get("note") and f"{r['case']}: {r['note']}" not in notes:
            notes.append(f"{r['case']}: {r['note']}")
        if r.get("method") not in ("ekf", "coulomb"):
            continue
        if r.get("tuned_on"):
            figs[f"{gen_key(r)}.tuned_on"] = 1.0
        for col in ("rmse_pct", "max_pct", "coverage_pct", "wrong_start_rmse_pct", "offset_rmse_pct"):
            v = r.get(col)
            if isinstance(v, (int, float)) and math.isfinite(v):
                figs[f"{gen_key(r)}.{col}"] = float(v)
    NOTES["generalisation"] = notes
    return figs, "python benchmarks/generalisation.py --json FILE --cache DIR --fresh"


def gen_key(row: dict) -> str:
    """Figure key of one generalisation row: ``case.recording.rate.method`` (``pan25.Cycle_2.10hz.ekf``)."""
    rec = str(row.get("recording", "")).split(" (")[0]
    rate = str(row.get("rate", "")).replace(" ", "").lower()
    return re.sub(r"[^A-Za-z0-9_.\-]", "_", f"{row['case']}.{rec}.{rate}.{row['method']}")


CASE_LABELS = {"pan25": "Panasonic 25 degC", "pan10": "Panasonic 10 degC", "pan0": "Panasonic 0 degC",
               "nmc": "PyBaMM Chen2020 NMC", "lfp": "PyBaMM Prada2013 LFP", "demo": "demo C48"}


def generalisation_table(data: dict, cases=("pan25", "pan10", "pan0", "nmc", "lfp"), rate: str = "10hz") -> str:
    """Markdown table (with figure marks) of the unseen recordings of the generalisation part."""
    figs = data["parts"]["generalisation"]["figures"]
    rows = sorted({k.rsplit(".", 1)[0] for k in figs if k.count(".") == 4}, key=lambda k: (
        cases.index(k.split(".")[0]) if k.split(".")[0] in cases else 99, k))
    out = ["| case | recording | EKF RMSE | EKF max | EKF inside +-3 sigma | baseline RMSE | with +0.025 C offset: "
           "EKF / baseline RMSE | EKF RMSE from 600 s after a 30-point wrong start |",
           "|---|---|---|---|---|---|---|---|"]
    done = set()
    for r in rows:
        case, rec, rt, _m = r.split(".")
        if case not in cases or rt != rate or (case, rec) in done or figs.get(f"{r}.tuned_on"):
            continue  # recordings the case tuned on are not in this table
        done.add((case, rec))
        e, c = f"generalisation.{case}.{rec}.{rt}.ekf", f"generalisation.{case}.{rec}.{rt}.coulomb"

        def mk(key, d=2):
            v = figs.get(key.split(".", 1)[1])
            return "" if v is None else f"{v:.{d}f}<!--fig:{key}-->"
        out.append(f"| {CASE_LABELS.get(case, case)} | {rec} | {mk(e + '.rmse_pct')} | {mk(e + '.max_pct')} | "
                   f"{mk(e + '.coverage_pct', 1)} % | {mk(c + '.rmse_pct')} | {mk(e + '.offset_rmse_pct')} / "
                   f"{mk(c + '.offset_rmse_pct')} | {mk(e + '.wrong_start_rmse_pct')} |")
    return "\n".join(out)


def part_energy_real(work: Path) -> tuple[dict, str]:
    """Remaining energy at the midpoint of the real 25 degC drive cycles (the real-data energy test's printout)."""
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    res = subprocess.run([sys.executable, "-m", "pytest", "-q", "-s", "-p", "no:cacheprovider",
                          "tests/test_energy_realdata.py", "-k", "midpoint"], cwd=REPO, env=env,
                         capture_output=True, text=True)
    pat = re.compile(r"^\s+(\S.*?): P_avg ([\d.]+) W, SOC_C ([\d.]+) %, delivered ([\d.]+) Wh, predicted ([\d.]+) Wh "
                     r"\(([+-][\d.]+) %\), with the peak ([\d.]+) Wh \(([+-][\d.]+) %\)", re.M)
    figs = {}
    for m in pat.finditer(res.stdout):
        name = m.group(1)
        short = next((k for k in ("Cycle_1", "US06", "HWFTa") if k in name), re.sub(r"\W", "_", name))
        figs[f"{short}.delivered_wh"] = float(m.group(4))
        figs[f"{short}.avg_power_err_pct"] = float(m.group(6))
        figs[f"{short}.peak_err_pct"] = float(m.group(8))
    if res.returncode != 0 or not figs:
        raise RuntimeError(f"tests/test_energy_realdata.py: exit {res.returncode}, {len(figs)} rows parsed "
                           "(is the real dataset there? SOCFUSE_REALDATA)")
    return figs, "python -m pytest -s tests/test_energy_realdata.py -k midpoint"


NOTES: dict = {}
RUNNERS = {"demo": part_demo, "energy": part_energy, "montecarlo": part_montecarlo, "speed": part_speed,
           "identify": part_identify, "generalisation": part_generalisation, "energy_real": part_energy_real}


def update_readme(text: str, data: dict) -> str:
    """The README text with every marked number rewritten from the figures file.

    Each ``N<!--fig:KEY-->`` keeps its printed precision (decimals, thousands separator); nothing
    else changes.  Words around a number (\"wins\", \"below\") are not rewritten: read the diff.
    """
    figs = flat_figures(data)

    def sub(m):
        printed, key = m.group(1), m.group(2)
        if key not in figs:
            return m.group(0)
        plain = printed.replace(",", "")
        decimals = len(plain.split(".")[1]) if "." in plain else 0
        sign = "+" if printed.startswith("+") else ""
        new = f"{float(figs[key]):{sign}{',' if ',' in printed else ''}.{decimals}f}"
        return f"{new}<!--fig:{key}-->"

    return MARKER.sub(sub, text)


def load_figures(path: Path = FIGURES) -> dict:
    """The stored figures file (an empty skeleton when there is none)."""
    if path.is_file():
        return json.loads(path.read_text(encoding="utf-8"))
    return {"schema": SCHEMA, "parts": {}}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--parts", nargs="+", choices=PARTS, default=None,
                    help="parts to regenerate (default: all, unless --check, --print-table or --update-readme "
                         "is given alone, which only read the figures file)")
    ap.add_argument("--out", default=str(FIGURES), help="figures file (default docs/readme_figures.json)")
    ap.add_argument("--work", default=str(Path.home() / ".cache" / "socfuse" / "readme_figures"),
                    help="folder for intermediate files")
    ap.add_argument("--check", action="store_true", help="only compare the README with the figures file")
    ap.add_argument("--print-table", action="store_true",
                    help="print the README's reference-case table (with marks) from the generalisation part")
    ap.add_argument("--update-readme", action="store_true",
                    help="rewrite the README's marked numbers from the figures file (then read the diff)")
    a = ap.parse_args(argv)
    global DOCS
    path = Path(a.out)
    DOCS = path.resolve().parent
    data = load_figures(path)
    if a.parts is None and not (a.check or a.print_table or a.update_readme):
        a.parts = list(PARTS)
    if a.parts and not a.check:
        work = Path(a.work)
        work.mkdir(parents=True, exist_ok=True)
        # demo first: energy and montecarlo use its model
        for name in [p for p in PARTS if p in a.parts]:
            t0 = time.perf_counter()
            print(f"[{name}] ...", file=sys.stderr, flush=True)
            figs, command = RUNNERS[name](work)
            data["parts"][name] = {"command": command, "git_commit": _git_commit(),
                                   "generated_utc": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
                                   "seconds": round(time.perf_counter() - t0, 1),
                                   "figures": {k: (round(v, 6) if isinstance(v, float) else v)
                                               for k, v in sorted(figs.items())},
                                   "notes": NOTES.get(name, [])}
            print(f"[{name}] {len(figs)} figures in {time.perf_counter() - t0:.0f} s", file=sys.stderr, flush=True)
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp = path.with_suffix(".json.tmp")
            tmp.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")
            tmp.replace(path)
    if a.print_table:
        print(generalisation_table(data))
    if a.update_readme:
        text = README.read_text(encoding="utf-8")
        new = update_readme(text, data)
        if new != text:
            tmp = README.with_suffix(".md.tmp")
            tmp.write_text(new, encoding="utf-8")
            tmp.replace(README)
    problems = check_readme(README.read_text(encoding="utf-8"), data)
    n = len(readme_marks(README.read_text(encoding="utf-8")))
    for p in problems:
        print(p)
    print(f"readme_marks={n} disagreeing={len(problems)} figures={len(flat_figures(data))}")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
