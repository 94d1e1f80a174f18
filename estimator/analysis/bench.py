"""Benchmark harness: recordings x fault scenarios x methods -> summary table (+ traces).

Every run is one pure task: apply the scenario to the case (:mod:`estimator.faults`), run the
estimator (:func:`estimator.run.estimate`), compute the figures (:mod:`estimator.metrics`).  The
serial path loops over the tasks; the Dask path (:mod:`estimator.cluster`) submits the very same
task function and gathers the results in submission order, so both give identical tables.

The summary has one row per run with the DESIGN.md section 4 columns ``recording, scenario,
method, rmse_pct, max_abs_pct, final_abs_pct, converge_s`` first, then ``mae_pct,
inside_3sigma, nis_mean, nis_lo, nis_hi, nis_verdict, nees_mean, nees_lo, nees_hi, n_gated,
n_reseeds, n_samples, duration_s, faults``.  Run times are kept apart (``BenchResult.run_time_s``)
because they are not reproducible.
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from socfuse.estimator.analysis.faults import DEFAULT_SCENARIOS, Case, Scenario, apply_scenario, parse_scenarios
from socfuse.estimator.analysis.metrics import METRIC_COLUMNS, trace_metrics
from socfuse.estimator.analysis.progress import ProgressBar

__all__ = ["BenchResult", "BenchTask", "run_bench", "run_task", "summary_columns", "format_summary",
           "write_summary_csv", "DEFAULT_METHODS", "SUMMARY_KEY_COLUMNS"]

SUMMARY_KEY_COLUMNS = ("recording", "scenario", "method")
DEFAULT_METHODS = ("ekf", "coulomb")


#: Per-run counts of samples the filter step flagged (status bits of the EKF and UKF traces; blank
#: for methods without status): inside or after a logging gap, outside the model's temperature
#: envelope (voltage not used), and fallen back to coulomb counting by the consistency monitor.
FLAG_COLUMNS = ("n_gap", "n_envelope", "n_fallback")


def flag_counts(tr) -> dict:
    """Counts of flagged samples in a trace.

    Parameters
    ----------
    tr : Trace
        A trace; its ``status`` bits (None for methods without a filter step) are counted.

    Returns
    -------
    dict
        :data:`FLAG_COLUMNS` -> int, or None for each when the trace has no status.
    """
    status = getattr(tr, "status", None)
    if status is None:
        return dict.fromkeys(FLAG_COLUMNS)
    from socfuse.estimator.filters.kernels import STATUS_BITS

    st = np.asarray(status)
    return {f"n_{b}": int(np.count_nonzero(st & STATUS_BITS[b])) for b in ("gap", "envelope", "fallback")}


def summary_columns() -> list[str]:
    """All summary.csv columns in order.

    Parameters
    ----------
    None

    Returns
    -------
    list of str
        Key columns, metric columns, flag-count columns, then ``faults``.
    """
    return list(SUMMARY_KEY_COLUMNS) + list(METRIC_COLUMNS) + list(FLAG_COLUMNS) + ["faults"]


@dataclass(frozen=True)
class BenchTask:
    """One run: recording index, scenario and method."""

    rec_index: int
    scenario: Scenario
    method: str
    keep_trace: bool = False


@dataclass(frozen=True, eq=False)
class BenchResult:
    """Benchmark output.

    Attributes
    ----------
    summary : pandas.DataFrame
        One row per run (:func:`summary_columns`), in task order.
    traces : dict
        ``(recording, scenario, method) -> Trace`` for the runs whose trace was kept.
    notes : dict
        ``(recording, scenario) -> tuple of str``: what each scenario did to the case.
    scenarios : tuple of Scenario
    methods : tuple of str
    run_time_s : dict
        ``(recording, scenario, method) -> wall time of the run``, s (not reproducible).
    errors : dict
        ``(recording, scenario, method) -> message`` for runs that failed (kept out of the summary).
    elapsed_s : float
        Wall time of the whole benchmark, s.
    """

    summary: pd.DataFrame
    traces: dict = field(default_factory=dict)
    notes: dict = field(default_factory=dict)
    scenarios: tuple = ()
    methods: tuple = ()
    run_time_s: dict = field(default_factory=dict)
    errors: dict = field(default_factory=dict)
    elapsed_s: float = 0.0

    def to_frame(self) -> pd.DataFrame:
        """The summary table (one row per run, the ``summary.csv`` columns) as a new DataFrame."""
        return self.summary.copy()


def _estimate(model, rec, method, settings, soc0):
    from socfuse.estimator.filters.run import estimate

    return estimate(model, rec, method=method, settings=settings, soc0=soc0)


def run_task(model, recording, scenario: Scenario, method: str, settings=None, soc0=None,
             keep_trace: bool = False, reference_is_truth: bool = False):
    """Run one case (module docstring); top-level so Dask can ship it to a worker.

    Parameters
    ----------
    model : CellModel
        The model the estimator uses (before the scenario's model faults).
    recording : Recording
        The recording (before the scenario's sensor faults).
    scenario : Scenario
        Faults applied to the recording, the model and the start SOC.
    method : str
        Estimator name (``"ekf"``, ``"coulomb"``, ...).
    settings : FilterSettings, optional
        Filter settings; default from the model.
    soc0 : float, optional
        Start SOC, fraction; default from the first voltage sample.
    keep_trace : bool
        Return the trace as well as the row.
    reference_is_truth : bool
        The recording's ``soc_ref`` is the true SOC (simulated data), so truth-based metrics are
        filled in.

    Returns
    -------
    row : dict or None
        Summary row (None when the run failed).
    trace : Trace or None
        The trace when ``keep_trace``.
    notes : tuple of str
    run_time_s : float
    error : str or None
        Failure message.
    """
    t0 = time.perf_counter()
    case = apply_scenario(Case(recording, model, soc0), scenario)
    try:
        tr = _estimate(case.model, case.recording, method, settings, case.soc0)
        truth = case.recording.soc_ref if reference_is_truth else None
        m = trace_metrics(tr, case.recording.soc_ref, soc_true=truth)
    except (ValueError, ArithmeticError) as e:
        return None, None, case.notes, time.perf_counter() - t0, f"{type(e).__name__}: {e}"
    row = {"recording": recording.name, "scenario": scenario.name, "method": method, **m.as_row(),
           **flag_counts(tr), "faults": scenario.spec}
    return row, (tr if keep_trace else None), case.notes, time.perf_counter() - t0, None


def _unique_names(recordings) -> list:
    out, seen = [], {}
    for k, r in enumerate(recordings):
        name = r.name or f"recording_{k + 1}"
        if name in seen:
            seen[name] += 1
            name = f"{name}_{seen[name]}"
        else:
            seen[name] = 1
        out.append(r if name == r.name else r.with_(name=name))
    return out


def _wanted(table: Mapping | None, key: str, name: str) -> bool:
    if not table or key not in table:
        return True
    return name in set(table[key])


def run_bench(model, recordings: Sequence, scenarios=DEFAULT_SCENARIOS, methods: Sequence[str] = DEFAULT_METHODS,
              settings=None, soc0=None, *, method_recordings: Mapping[str, Sequence[str]] | None = None,
              method_scenarios: Mapping[str, Sequence[str]] | None = None, keep_traces="all",
              reference_is_truth: bool = False, workers: int | None = None, scheduler: str | None = None,
              processes: bool = True, quiet: bool = False, desc: str = "benchmark") -> BenchResult:
    """Run every recording x scenario x method and collect the summary.

    Parameters
    ----------
    model : CellModel
        The model the filter uses (faults such as ``fade`` or ``ocv_offset`` alter a copy).
    recordings : sequence of Recording
        Each needs ``soc_ref`` (the reference the errors are measured against).
    scenarios : sequence of Scenario or spec strings
        Default :data:`estimator.faults.DEFAULT_SCENARIOS`.
    methods : sequence of str
        Estimator names understood by :func:`estimator.run.estimate` (``ekf``, ``coulomb``, ``ukf``).
    settings : FilterSettings, optional
    soc0 : float, optional
        Initial SOC given to the filters in the fault-free case (``None``: from the first voltage
        sample).  The ``soc0`` fault offsets the true initial SOC instead.
    method_recordings, method_scenarios : mapping, optional
        Restrict a method to some recordings / scenarios by name, e.g. ``{"ukf": ["day_lunch"]}``
        (the sigma-point filter is slow).
    keep_traces : {"all", "first", "none"} or collection of recording names
        Which traces to keep for the report.
    reference_is_truth : bool
        The reference is the true SOC (simulated data): also compute the SOC NEES.
    workers : int, optional
        Run on a local Dask cluster with this many workers (loopback only).
    scheduler : str, optional
        Run on an existing Dask scheduler at this address.
    processes : bool
        Local cluster of processes (default) or threads.
    quiet : bool
        No progress bar.
    desc : str
        Label of the progress bar.

    Returns
    -------
    BenchResult
    """
    t_start = time.perf_counter()
    recs = _unique_names(recordings)
    if not recs:
        raise ValueError("benchmark: no recordings given")
    for r in recs:
        if r.soc_ref is None:
            raise ValueError(f"benchmark: recording {r.name!r} has no soc_ref column; the benchmark measures "
                             "errors against a reference (give soc_ref or an amp-hour counter with a capacity)")
    scen = [s if isinstance(s, Scenario) else None for s in scenarios]
    if any(s is None for s in scen):
        scen = [s if isinstance(s, Scenario) else parse_scenarios([s])[0] for s in scenarios]
    names = [s.name for s in scen]
    if len(set(names)) != len(names):
        raise ValueError(f"benchmark: scenario names repeat: {names}")
    methods = tuple(methods)
    if keep_traces == "all":
        keep = {r.name for r in recs}
    elif keep_traces == "first":
        keep = {recs[0].name}
    elif keep_traces in ("none", None):
        keep = set()
    else:
        keep = set(keep_traces)
    tasks = [BenchTask(k, s, m, r.name in keep)
             for k, r in enumerate(recs) for s in scen for m in methods
             if _wanted(method_recordings, m, r.name) and _wanted(method_scenarios, m, s.name)]
    results = [None] * len(tasks)
    with ProgressBar(len(tasks), desc, quiet) as bar:
        if workers is None and scheduler is None:
            for j, tk in enumerate(tasks):
                results[j] = run_task(model, recs[tk.rec_index], tk.scenario, tk.method, settings, soc0,
                                      tk.keep_trace, reference_is_truth)
                bar.update()
        else:
            from socfuse.estimator.analysis.cluster import open_client

            with open_client(workers=workers, scheduler=scheduler, processes=processes) as client:
                from distributed import as_completed

                model_f = client.scatter(model, broadcast=True)
                rec_f = client.scatter(recs)
                futs = [client.submit(run_task, model_f, rec_f[tk.rec_index], tk.scenario, tk.method, settings,
                                      soc0, tk.keep_trace, reference_is_truth, pure=False) for tk in tasks]
                index = {f.key: j for j, f in enumerate(futs)}
                for f in as_completed(futs):
                    results[index[f.key]] = f.result()
                    bar.update()
    rows, traces, notes, run_time, errors = [], {}, {}, {}, {}
    for tk, (row, tr, nt, dt, err) in zip(tasks, results):
        key = (recs[tk.rec_index].name, tk.scenario.name, tk.method)
        notes[key[:2]] = tuple(nt)
        run_time[key] = dt
        if err is not None:
            errors[key] = err
            continue
        rows.append(row)
        if tr is not None:
            traces[key] = tr
    summary = pd.DataFrame(rows, columns=summary_columns())
    return BenchResult(summary, traces, notes, tuple(scen), methods, run_time, errors,
                       time.perf_counter() - t_start)


def write_summary_csv(summary: pd.DataFrame, path) -> None:
    """Write summary.csv (``converge_s`` of a run that never converged is an empty cell).

    Written to a temporary name and renamed.

    Parameters
    ----------
    summary : pandas.DataFrame
        The benchmark summary.
    path : str or os.PathLike
        The CSV file to write (replaced atomically).

    Returns
    -------
    None
    """
    from socfuse.models.fileio import replacing

    with replacing(path) as tmp:
        summary.to_csv(tmp, index=False, float_format="%.6g", na_rep="")


def _fmt(v, digits=2):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if isinstance(v, (float, np.floating)):
        return f"{v:.{digits}f}"
    return str(v)


def format_summary(summary: pd.DataFrame, columns=("rmse_pct", "max_abs_pct", "final_abs_pct", "converge_s",
                                                   "inside_3sigma", "nis_mean")) -> str:
    """The summary as a fixed-width text table for the terminal (``-`` = not defined / never).

    Parameters
    ----------
    summary : pandas.DataFrame
        The benchmark summary (columns of :func:`summary_columns`).
    columns : sequence of str
        Metric columns to show after the key columns (those absent are skipped).

    Returns
    -------
    str
        Header, a dash rule and one line per row; percentages in SOC points, ``conv s`` in s.
    """
    cols = list(SUMMARY_KEY_COLUMNS) + [c for c in columns if c in summary.columns]
    head = {"rmse_pct": "RMSE %", "max_abs_pct": "max %", "final_abs_pct": "final %", "converge_s": "conv s",
            "inside_3sigma": "in 3sig", "nis_mean": "NIS", "mae_pct": "MAE %"}
    cells = [[head.get(c, c) for c in cols]]
    for _, r in summary.iterrows():
        line = []
        for c in cols:
            v = r[c]
            if c == "converge_s":
                line.append(_fmt(v, 0))
            elif c == "inside_3sigma":
                line.append("-" if not (isinstance(v, float) and math.isfinite(v)) else f"{100 * v:.0f}%")
            else:
                line.append(_fmt(v))
        cells.append(line)
    widths = [max(len(row[j]) for row in cells) for j in range(len(cols))]
    out = []
    for k, row in enumerate(cells):
        out.append("  ".join(s.ljust(w) if j < 3 else s.rjust(w) for j, (s, w) in enumerate(zip(row, widths))))
        if k == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)
