"""Monte Carlo tolerance study: how large do SOC errors get with real sensor tolerances?

Each run takes one recording with a true SOC (``soc_ref``: simulated data or a trusted lab
reference) and corrupts what the BMS would see, drawing every error independently:

- current-sensor offset ``o`` uniform in ``+-current_offset_a`` (A, added to the current),
- current-sensor gain error ``g`` uniform in ``+-current_gain`` (measured = (1 + g) i + o),
- extra white voltage noise of sigma ``voltage_noise_v`` (V) on every sample,
- initial SOC error ``e`` uniform in ``+-initial_soc_error`` (the estimators start at
  ``soc_ref[0] + e``, clipped to 0..1),
- capacity error ``c`` uniform in ``+-capacity``: the estimators assume ``(1 + c)`` times the
  cell's capacity (the model file is wrong or the cell has faded).

All runs of a study go through the compiled batched kernels: the EKF
(:func:`estimator.kernels.ekf_run_batch`, parallel over runs) and the coulomb-counting baseline
(:func:`estimator.kernels.coulomb_run`, looped over runs in parallel here).  The figure of merit
per run and method is the maximum absolute SOC error after ``skip_s`` seconds (default 600 s, so
the EKF's initial convergence from a deliberately wrong start is not counted; the baseline's
initial error persists and is counted); the study reports its 50th and 95th percentiles.

A sweep replaces the current-offset (or gain) tolerance with each value of a grid, keeping the
other tolerances and the random draws (common random numbers, so the curve is smooth), and
answers "what current sensor do I need for a 3 % SOC budget": the largest offset whose P95 error
stays within the budget, per method (linear interpolation between grid points).

Everything is reproducible from ``seed`` (numpy ``default_rng``).  Default tolerances are typical
automotive sensor figures (common practice, no source): offset +-50 mA per cell (a Hall sensor of
about +-200 mA on a 4p pack), gain +-1 %, 2 mV voltage noise, +-2 % initial SOC (a start from a
rested OCV reading), +-3 % capacity (model-file capacity against a cell's spread and early fade).
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field, fields, replace

import numpy as np
from numba import njit, prange

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import recording_arrays, setup
from socfuse.estimator.filters.settings import FilterSettings, default_settings
from socfuse.estimator.analysis.tuning import ekf_raw
from socfuse.models.sensors import measure

__all__ = ["Tolerances", "ToleranceRuns", "SweepResult", "ToleranceStudy", "MonteCarloError", "run_tolerance",
           "sweep", "tolerance_study", "tolerance_figure", "METHODS"]

METHODS = ("ekf", "coulomb")


class MonteCarloError(ValueError):
    """Bad Monte Carlo input (no truth in the recording, bad tolerance, unknown method)."""


@dataclass(frozen=True)
class Tolerances:
    """Half-widths of the uniform error ranges (sigma for the voltage noise).

    Parameters
    ----------
    current_offset_a : float  current-sensor offset range +-A (per cell)
    current_gain : float      gain-error range +- fraction (0.01 = 1 %)
    voltage_noise_v : float   extra white voltage noise sigma, V
    initial_soc_error : float initial SOC error range +- fraction
    capacity : float          assumed-capacity error range +- fraction
    """

    current_offset_a: float = 0.05
    current_gain: float = 0.01
    voltage_noise_v: float = 0.002
    initial_soc_error: float = 0.02
    capacity: float = 0.03

    def __post_init__(self) -> None:
        for f in fields(self):
            v = getattr(self, f.name)
            if not (np.isfinite(v) and v >= 0):
                raise MonteCarloError(f"tolerance {f.name} must be finite and >= 0, got {v!r}")
        if self.capacity >= 1 or self.current_gain >= 1:
            raise MonteCarloError("capacity and current_gain tolerances must be below 1 (100 %)")

    def describe(self) -> str:
        return (f"current offset +-{1000 * self.current_offset_a:.0f} mA, gain +-{100 * self.current_gain:.1f} %, "
                f"voltage noise {1000 * self.voltage_noise_v:.1f} mV, initial SOC +-{100 * self.initial_soc_error:.1f} %, "
                f"capacity +-{100 * self.capacity:.1f} %")


@dataclass(frozen=True, eq=False)
class ToleranceRuns:
    """Draws and outcomes of ``n_runs`` Monte Carlo runs.

    Attributes
    ----------
    offset_a, gain, soc0_error, capacity_scale : ndarray (n_runs,)
        The drawn errors (capacity_scale = assumed / true capacity).
    max_abs_error : dict method -> ndarray (n_runs,)
        Maximum |SOC error| (fraction) after ``skip_s``.
    final_abs_error : dict method -> ndarray (n_runs,)
        |SOC error| at the last sample.
    tolerances : Tolerances
    seed : int
    skip_s : float
    """

    offset_a: np.ndarray
    gain: np.ndarray
    soc0_error: np.ndarray
    capacity_scale: np.ndarray
    max_abs_error: dict
    final_abs_error: dict
    tolerances: Tolerances
    seed: int
    skip_s: float

    @property
    def n_runs(self) -> int:
        return int(self.offset_a.size)

    def percentile(self, method: str, q: float) -> float:
        """``q``-th percentile (0..100) of the max |SOC error| of ``method`` (fraction)."""
        return float(np.percentile(self.max_abs_error[method], q))

    def to_frame(self):
        """One row per run: the draws and ``max_abs_pct_<method>``, ``final_abs_pct_<method>``."""
        import pandas as pd

        cols = {"run": np.arange(self.n_runs), "offset_a": self.offset_a, "gain": self.gain,
                "soc0_error": self.soc0_error, "capacity_scale": self.capacity_scale}
        for m, a in self.max_abs_error.items():
            cols[f"max_abs_pct_{m}"] = 100 * a
        for m, a in self.final_abs_error.items():
            cols[f"final_abs_pct_{m}"] = 100 * a
        return pd.DataFrame(cols)


@dataclass(frozen=True, eq=False)
class SweepResult:
    """P50/P95 of the max |SOC error| over a grid of one tolerance.

    Attributes
    ----------
    knob : str              ``"current_offset_a"`` or ``"current_gain"``
    values : ndarray (n,)   grid of the tolerance (A or fraction)
    p50, p95 : dict method -> ndarray (n,)   fractions
    budget : float          SOC error budget (fraction)
    limit : dict method -> float or None
        Largest tolerance whose P95 stays within ``budget`` (interpolated between grid points; the
        last grid value when all pass; None when even the first fails).
    limit_reached : dict method -> bool
        False when every grid value passed (the true limit is beyond the grid).
    n_runs : int            runs per grid point
    """

    knob: str
    values: np.ndarray
    p50: dict
    p95: dict
    budget: float
    limit: dict
    limit_reached: dict
    n_runs: int

    def to_frame(self):
        """One row per grid value: ``<knob>``, ``p50_pct_<method>``, ``p95_pct_<method>``."""
        import pandas as pd

        cols = {self.knob: self.values}
        for m in self.p50:
            cols[f"p50_pct_{m}"] = 100 * self.p50[m]
            cols[f"p95_pct_{m}"] = 100 * self.p95[m]
        return pd.DataFrame(cols)

    def describe(self) -> str:
        unit = (lambda v: f"{1000 * v:.0f} mA") if self.knob == "current_offset_a" else (lambda v: f"{100 * v:.2f} %")
        what = "current-sensor offset" if self.knob == "current_offset_a" else "current-sensor gain error"
        out = []
        for m, lim in self.limit.items():
            if lim is None:
                out.append(f"  {m}: P95 above {100 * self.budget:.1f} % even at {unit(self.values[0])}")
            elif not self.limit_reached[m]:
                out.append(f"  {m}: P95 within {100 * self.budget:.1f} % up to at least {unit(lim)} (end of the grid)")
            else:
                out.append(f"  {m}: largest {what} for P95 <= {100 * self.budget:.1f} %: +-{unit(lim)}")
        return f"{what} sweep ({self.n_runs} runs per point):\n" + "\n".join(out)


@dataclass(frozen=True, eq=False)
class ToleranceStudy:
    """Result of :func:`tolerance_study`: the base runs and the sweeps."""

    runs: ToleranceRuns
    sweeps: tuple
    budget: float
    recording: str
    elapsed_s: float
    methods: tuple = METHODS
    extra: dict = field(default_factory=dict)

    @property
    def p50(self) -> dict:
        return {m: self.runs.percentile(m, 50) for m in self.methods}

    @property
    def p95(self) -> dict:
        return {m: self.runs.percentile(m, 95) for m in self.methods}

    def to_frame(self):
        """Summary: one row per method with ``p50_pct``, ``p95_pct`` and the sweep limits."""
        import pandas as pd

        rows = []
        for m in self.methods:
            row = {"method": m, "n_runs": self.runs.n_runs, "p50_pct": 100 * self.p50[m], "p95_pct": 100 * self.p95[m]}
            for s in self.sweeps:
                row[f"max_{s.knob}_for_budget"] = s.limit.get(m)
            rows.append(row)
        return pd.DataFrame(rows)

    def describe(self) -> str:
        lines = [f"Monte Carlo tolerance study on {self.recording!r}: {self.runs.n_runs} runs, seed {self.runs.seed}, "
                 f"{self.elapsed_s:.1f} s",
                 f"tolerances: {self.runs.tolerances.describe()}",
                 f"max |SOC error| after the first {self.runs.skip_s:.0f} s:"]
        for m in self.methods:
            lines.append(f"  {m:<8} P50 {100 * self.p50[m]:.2f} %   P95 {100 * self.p95[m]:.2f} %")
        for s in self.sweeps:
            lines.append(s.describe())
        return "\n".join(lines)

    def figure(self):
        """Matplotlib figure of the sweeps (P95 against the tolerance, budget line)."""
        return tolerance_figure(self)


# ----------------------------------------------------------------------------- kernels
@njit(cache=True, parallel=True)
def _coulomb_batch(time_s, current_runs, voltage_runs, temp_c, tab, prm, cap_scale, soc0s, var0, rest_i,
                   rest_min_s, do_reseed, early_s, soc_out):
    """Coulomb baseline for many corrupted copies of one recording (rows of ``*_runs``)."""
    m = current_runs.shape[0]
    n = time_s.size
    for r in prange(m):
        pr = prm.copy()
        pr[K.P_CAP] = prm[K.P_CAP] * cap_scale[r]
        sig = np.empty(n)
        k = n // 2 + 1
        rt = np.empty(k)
        rb = np.empty(k)
        ra = np.empty(k)
        K.coulomb_run(time_s, current_runs[r], voltage_runs[r], temp_c, tab, pr, soc0s[r], var0, rest_i, rest_min_s,
                      do_reseed, early_s, soc_out[r], sig, rt, rb, ra)


@njit(cache=True, parallel=True)
def _max_abs_after(soc, ref, start, out_max, out_final):
    for r in prange(soc.shape[0]):
        mx = 0.0
        for k in range(start, ref.size):
            e = abs(soc[r, k] - ref[k])
            if e > mx:
                mx = e
        out_max[r] = mx
        out_final[r] = abs(soc[r, ref.size - 1] - ref[ref.size - 1])


# ----------------------------------------------------------------------------- runs
def _draws(tol: Tolerances, n_runs: int, seed: int):
    """Unit draws (common random numbers) and the scaled errors."""
    rng = np.random.default_rng(seed)
    u = rng.uniform(-1.0, 1.0, size=(4, n_runs))
    noise_seed = int(rng.integers(0, 2 ** 63 - 1))
    return u, noise_seed


def _check(model, rec, methods):
    if rec.soc_ref is None:
        raise MonteCarloError(f"recording {rec.name!r} has no soc_ref: the tolerance study needs the true SOC")
    ref = np.asarray(rec.soc_ref, dtype=float)
    if not np.all(np.isfinite(ref)):
        raise MonteCarloError(f"recording {rec.name!r}: soc_ref is not finite at row {int(np.argmax(~np.isfinite(ref)))}")
    bad = [m for m in methods if m not in METHODS]
    if bad:
        raise MonteCarloError(f"unknown method(s) {', '.join(bad)}; choose from {', '.join(METHODS)}")
    return ref


def run_tolerance(model, rec, settings: FilterSettings | None = None, tolerances: Tolerances | None = None,
                  n_runs: int = 1000, seed: int = 0, methods=METHODS, skip_s: float = 600.0, chunk: int = 100,
                  quiet: bool = True, _units=None) -> ToleranceRuns:
    """Run ``n_runs`` corrupted copies of ``rec`` through the chosen estimators.

    Parameters
    ----------
    model : models.CellModel
        The model the estimators use.
    rec : models.Recording
        Recording with ``soc_ref`` (the truth).  Voltage NaNs stay missing in every run.
    settings : FilterSettings, optional (default from the model)
    tolerances : Tolerances, optional (default :class:`Tolerances`)
    n_runs : int
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same result.
    methods : sequence of ``"ekf"``, ``"coulomb"``
    skip_s : float
        The max error is taken after the first ``skip_s`` seconds.
    chunk : int
        Runs per batch (memory: about ``chunk * N * 40`` bytes).
    quiet : bool
        No progress bar.

    Returns
    -------
    ToleranceRuns
    """
    from socfuse.estimator.analysis.progress import ProgressBar

    methods = tuple(methods)
    ref = _check(model, rec, methods)
    tol = Tolerances() if tolerances is None else tolerances
    s = default_settings(model) if settings is None else settings
    if n_runs < 1:
        raise MonteCarloError(f"n_runs must be >= 1, got {n_runs}")
    u, noise_seed = _draws(tol, n_runs, seed) if _units is None else _units
    offset = tol.current_offset_a * u[0]
    gain = tol.current_gain * u[1]
    soc0_err = tol.initial_soc_error * u[2]
    cap = 1.0 + tol.capacity * u[3]
    soc0 = np.clip(ref[0] + soc0_err, 0.0, 1.0)
    su = setup(model, s)
    t_s, i_a, v_v, temp = recording_arrays(rec, float(su.prm[K.P_TDEF]))
    start = int(np.searchsorted(rec.time_s, rec.time_s[0] + skip_s))
    start = min(start, rec.n - 1)
    max_err = {m: np.empty(n_runs) for m in methods}
    fin_err = {m: np.empty(n_runs) for m in methods}
    bar = ProgressBar(n_runs, "Monte Carlo", quiet)
    try:
        for a in range(0, n_runs, chunk):
            b = min(a + chunk, n_runs)
            cur = measure(i_a[None, :], offset=offset[a:b, None], gain_error=gain[a:b, None])
            vol = np.empty((b - a, rec.n))
            for j in range(b - a):  # voltage noise seeded per run: independent of the chunking
                vol[j] = v_v
                if tol.voltage_noise_v > 0:
                    vol[j] = measure(v_v, noise_sigma=tol.voltage_noise_v, rng=np.random.default_rng([noise_seed, a + j]))
            for m in methods:
                if m == "ekf":
                    from socfuse.models.recording import Recording

                    recs = [Recording(t_s, cur[j], vol[j], temp, None, rec.name) for j in range(b - a)]
                    raw = ekf_raw(model, recs, s, list(soc0[a:b]), cap[a:b])
                    soc = raw["soc"].reshape(b - a, rec.n)
                else:
                    soc = np.empty((b - a, rec.n))
                    _coulomb_batch(t_s, cur, vol, temp, su.tables.packed, su.prm, np.ascontiguousarray(cap[a:b]),
                                   np.ascontiguousarray(soc0[a:b]), s.p0_soc ** 2, s.rest_current_a, s.rest_min_s,
                                   s.reseed, s.early_reseed_s, soc)
                _max_abs_after(soc, ref, start, max_err[m][a:b], fin_err[m][a:b])
            bar.update(b - a)
    finally:
        bar.close()
    return ToleranceRuns(offset, gain, soc0_err, cap, max_err, fin_err, tol, int(seed), float(skip_s))


def sweep(model, rec, knob: str = "current_offset_a", values=None, settings: FilterSettings | None = None,
          tolerances: Tolerances | None = None, n_runs: int = 200, seed: int = 0, methods=METHODS,
          budget: float = 0.03, skip_s: float = 600.0, quiet: bool = True) -> SweepResult:
    """P50/P95 of the max |SOC error| over a grid of one tolerance (common random numbers).

    Parameters
    ----------
    knob : ``"current_offset_a"`` or ``"current_gain"``
    values : array_like, optional
        Grid (A or fraction).  Default offsets 0..0.1 A and gains 0..3 %, 6 points each.
    budget : float
        SOC error budget (fraction, 0.03 = 3 %).
    model : CellModel
        The model the estimators use.
    rec : Recording
        Recording with ``soc_ref`` (the truth).
    settings : FilterSettings, optional
        Default from the model.
    tolerances : Tolerances, optional
        The other tolerances (held at these values while ``knob`` is swept); default :class:`Tolerances`.
    n_runs : int
        Runs per grid point (the same random draws at every point).
    seed : int
        Seed of ``numpy.random.default_rng``.
    methods : sequence of str
        ``"ekf"``, ``"coulomb"``.
    skip_s : float
        The max error is taken after the first ``skip_s`` seconds, s.
    quiet : bool
        No progress bar.

    Returns
    -------
    SweepResult
        Grid values (A or fraction), P50 and P95 of the max |SOC error| per method and grid point
        (fraction), the budget, and per method the largest tolerance whose P95 stays within it.

    Raises
    ------
    MonteCarloError
        For an unknown knob or a grid that is empty, not increasing or negative.
    """
    if knob not in ("current_offset_a", "current_gain"):
        raise MonteCarloError(f"cannot sweep {knob!r}; choose current_offset_a or current_gain")
    if values is None:
        values = np.linspace(0.0, 0.1, 6) if knob == "current_offset_a" else np.linspace(0.0, 0.03, 6)
    values = np.asarray(values, dtype=float)
    if values.ndim != 1 or values.size == 0 or np.any(np.diff(values) <= 0) or np.any(values < 0):
        raise MonteCarloError("sweep values must be a non-empty increasing grid of values >= 0")
    base = Tolerances() if tolerances is None else tolerances
    methods = tuple(methods)
    units = _draws(base, n_runs, seed)
    p50 = {m: np.empty(values.size) for m in methods}
    p95 = {m: np.empty(values.size) for m in methods}
    for j, v in enumerate(values):
        r = run_tolerance(model, rec, settings, replace(base, **{knob: float(v)}), n_runs, seed, methods, skip_s,
                          quiet=quiet, _units=units)
        for m in methods:
            p50[m][j] = r.percentile(m, 50)
            p95[m][j] = r.percentile(m, 95)
    limit, reached = {}, {}
    for m in methods:
        limit[m], reached[m] = _budget_limit(values, p95[m], budget)
    return SweepResult(knob, values, p50, p95, float(budget), limit, reached, int(n_runs))


def _budget_limit(values, p95, budget):
    """Largest grid value before the P95 curve first exceeds ``budget`` (linear interpolation)."""
    over = np.flatnonzero(p95 > budget)
    if over.size == 0:
        return float(values[-1]), False
    j = int(over[0])
    if j == 0:
        return None, True
    x0, x1, y0, y1 = values[j - 1], values[j], p95[j - 1], p95[j]
    return float(x0 + (budget - y0) * (x1 - x0) / (y1 - y0)), True


def tolerance_study(model, rec, settings: FilterSettings | None = None, tolerances: Tolerances | None = None,
                    n_runs: int = 1000, seed: int = 0, methods=METHODS, budget: float = 0.03,
                    offset_grid=None, gain_grid=None, sweep_runs: int | None = None, skip_s: float = 600.0,
                    quiet: bool = True) -> ToleranceStudy:
    """Base Monte Carlo runs plus the current-offset and gain sweeps against ``budget``.

    ``sweep_runs`` runs per grid point (default ``max(50, n_runs // 8)``); ``offset_grid`` /
    ``gain_grid`` as :func:`sweep` (pass an empty list to skip a sweep).  Other parameters as
    :func:`run_tolerance`.

    Parameters
    ----------
    model : CellModel
    rec : Recording
        The drive cycle (its ``soc_ref`` is the truth).
    settings : FilterSettings, optional
        Default from the model.
    tolerances : Tolerances, optional
        Sensor and model tolerances drawn per run; default :class:`Tolerances()`.
    n_runs : int
        Base Monte Carlo runs.
    seed : int
        Random seed (the sweeps use ``seed + 1``).
    methods : sequence of str
        Estimators compared.
    budget : float
        SOC error budget, fraction.
    offset_grid : array_like, optional
        Current-offset tolerances to sweep, A.
    gain_grid : array_like, optional
        Current-gain tolerances to sweep, fraction.
    sweep_runs : int, optional
        Runs per grid point.
    skip_s : float
        Leave out the first ``skip_s`` seconds from the error, s.
    quiet : bool
        No progress bar.

    Returns
    -------
    ToleranceStudy
        The base runs, the sweeps, the budget, the recording name and the wall time (s).
    """
    t0 = time.perf_counter()
    methods = tuple(methods)
    runs = run_tolerance(model, rec, settings, tolerances, n_runs, seed, methods, skip_s, quiet=quiet)
    k = max(50, n_runs // 8) if sweep_runs is None else int(sweep_runs)
    sweeps = []
    for knob, grid in (("current_offset_a", offset_grid), ("current_gain", gain_grid)):
        if grid is not None and len(grid) == 0:
            continue
        sweeps.append(sweep(model, rec, knob, grid, settings, tolerances, k, seed + 1, methods, budget, skip_s, quiet))
    return ToleranceStudy(runs, tuple(sweeps), float(budget), rec.name, time.perf_counter() - t0, methods)


def tolerance_figure(study: ToleranceStudy):
    """Figure: histogram of the max |SOC error| per method, and P95 against each swept tolerance.

    Parameters
    ----------
    study : ToleranceStudy

    Returns
    -------
    matplotlib.figure.Figure
        Errors in percent of SOC, offset tolerances in mA, gain tolerances in percent.
    """
    from matplotlib.figure import Figure  # a plain Figure: the user's pyplot backend is never touched

    n_ax = 1 + len(study.sweeps)
    fig = Figure(figsize=(4.2 * n_ax, 3.4))
    axes = fig.subplots(1, n_ax, squeeze=False)
    ax = axes[0, 0]
    for m in study.methods:
        ax.hist(100 * study.runs.max_abs_error[m], bins=30, alpha=0.6, label=f"{m} (P95 {100 * study.p95[m]:.2f} %)")
    ax.axvline(100 * study.budget, color="k", ls="--", lw=1, label=f"budget {100 * study.budget:.0f} %")
    ax.set_xlabel("max |SOC error| (%)")
    ax.set_ylabel("runs")
    ax.legend(fontsize=7)
    for j, s in enumerate(study.sweeps, start=1):
        ax = axes[0, j]
        x = 1000 * s.values if s.knob == "current_offset_a" else 100 * s.values
        for m in study.methods:
            ax.plot(x, 100 * s.p95[m], marker="o", label=f"{m} P95")
            ax.plot(x, 100 * s.p50[m], ls=":", label=f"{m} P50")
        ax.axhline(100 * s.budget, color="k", ls="--", lw=1)
        ax.set_xlabel("current offset tolerance (+- mA)" if s.knob == "current_offset_a" else "gain tolerance (+- %)")
        ax.set_ylabel("max |SOC error| (%)")
        ax.legend(fontsize=7)
    fig.tight_layout()
    return fig
