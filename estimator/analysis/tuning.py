"""Noise tuning: choose the EKF's process and measurement noise (and initial covariance) from data.

Two objectives, both evaluated by running the compiled EKF (:func:`estimator.kernels.ekf_run_batch`,
all recordings at once) for each trial setting:

``"likelihood"`` (no reference needed)
    Maximise the innovation (prediction-error) log-likelihood of the recordings::

        log L = sum_k log N(nu_k; 0, S_k) = -1/2 sum_k [log(2 pi S_k) + nu_k^2 / S_k]

    over the logarithms of the chosen noise parameters.  For a linear Gaussian model this is the
    exact likelihood of the data (the prediction-error decomposition; Schweppe, IEEE Trans. Inf.
    Theory 11 (1965) 61-70; Harvey, *Forecasting, Structural Time Series Models and the Kalman
    Filter*, 1989, ch. 3.4); for the EKF it is the usual approximation.
``"soc-error"`` (every recording needs ``soc_ref``)
    Minimise the SOC RMSE against the reference subject to consistency, as a penalty on the
    time-averaged NIS leaving its chi-square band (Bar-Shalom, Li, Kirubarajan 2001, ch. 5)::

        J = RMSE * (1 + w * e^2),  e = max(0, log(mean NIS / hi), log(lo / mean NIS))

    so that a setting that wins RMSE by claiming an unrealistically small voltage noise (an
    overconfident filter) is refused.

Search: bounded Nelder-Mead (``scipy.optimize.minimize``) on ``log10`` of each parameter, with
an initial simplex of half a decade along each axis; parameters that behave like variances or
sigmas are all positive, so the log scale is natural and keeps them positive.

What is identifiable: the voltage noise sets the innovation floor and is well determined.
Current-sensor noise reaches the voltage only through the SOC and RC states (``Q = G G^T
sigma_i^2``), so it is determined only when it dominates the other process noise; it is
strongly confounded with ``q_soc_per_s`` and ``q_rc_v2_per_s`` (tune either, not all three, when
the data are short).  On a cell whose true behaviour is richer than the filter's model (the usual
case) the tuned values are *effective* values that absorb model error, not sensor data-sheet
figures.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from socfuse.estimator.analysis.consistency import ConsistencyResult, nis_test
from socfuse.estimator.filters.ekf import run_ekf_batch_raw
from socfuse.estimator.filters.settings import FilterSettings, default_settings

__all__ = ["TUNABLE", "TuneResult", "TuningError", "default_params", "ekf_raw", "innovation_nll",
           "evaluate", "tune", "AlsResult", "als_noise", "fixed_gain_innovations"]

#: Tunable settings: (kind, lower, upper) with absolute bounds in the setting's own unit.
#: Wide on purpose (common practice, no source): they only stop the search from running away.
TUNABLE = {
    "voltage_noise_v": ("sigma", 1e-5, 0.5),
    "current_noise_a": ("sigma", 1e-6, 50.0),
    "q_soc_per_s": ("density", 1e-18, 1e-4),
    "q_rc_v2_per_s": ("density", 1e-18, 1e-2),
    "q_bias_a2_per_s": ("density", 1e-18, 1e-2),
    "q_hyst_per_s": ("density", 1e-16, 1.0),
    "p0_soc": ("sigma", 1e-4, 0.5),
    "p0_rc_v": ("sigma", 1e-6, 1.0),
    "p0_bias_a": ("sigma", 1e-6, 20.0),
    "p0_hyst": ("sigma", 1e-4, 2.0),
}

OBJECTIVES = ("likelihood", "soc-error")
_LOG2PI = math.log(2.0 * math.pi)


class TuningError(ValueError):
    """Bad tuning input (unknown parameter or objective, no reference for ``soc-error``)."""


@dataclass(frozen=True, eq=False)
class TuneResult:
    """Outcome of :func:`tune`.

    Attributes
    ----------
    settings : FilterSettings
        The tuned settings (the start settings with the chosen values).
    start : FilterSettings
    objective : str
        ``"likelihood"`` or ``"soc-error"``.
    params : tuple of str
        Settings that were tuned.
    objective_before, objective_after : float
        The minimised objective: mean negative log-likelihood per innovation (nats) for
        ``likelihood``; penalised SOC RMSE (fraction) for ``soc-error``.
    nll_before, nll_after : float
        Mean negative log-likelihood per innovation (nats), both objectives.
    rmse_before, rmse_after : float or None
        SOC RMSE (fraction) when every recording has ``soc_ref``.
    nis_before, nis_after : ConsistencyResult
        Pooled NIS test over all recordings.
    iterations, evaluations : int
        Optimiser iterations and EKF evaluations (each runs all recordings).
    converged : bool
    message : str
    recordings : tuple of str
    n_samples : int
        Innovations used.
    """

    settings: FilterSettings
    start: FilterSettings
    objective: str
    params: tuple
    objective_before: float
    objective_after: float
    nll_before: float
    nll_after: float
    rmse_before: float | None
    rmse_after: float | None
    nis_before: ConsistencyResult
    nis_after: ConsistencyResult
    iterations: int
    evaluations: int
    converged: bool
    message: str
    recordings: tuple = ()
    n_samples: int = 0
    coverage_before: float | None = None
    coverage_after: float | None = None
    history: tuple = field(default=(), repr=False)

    def values(self) -> dict:
        """Chosen values of the tuned settings."""
        return {p: getattr(self.settings, p) for p in self.params}

    def to_frame(self):
        """DataFrame: ``setting``, ``before``, ``after``, ``ratio`` (after / before)."""
        import pandas as pd

        rows = []
        for p in self.params:
            b, a = getattr(self.start, p), getattr(self.settings, p)
            rows.append({"setting": p, "before": b, "after": a, "ratio": a / b if b > 0 else np.nan})
        return pd.DataFrame(rows)

    def describe(self) -> str:
        """Multi-line text for the CLI and the report."""
        lines = [f"noise tuning ({self.objective}) on {len(self.recordings)} recording(s), "
                 f"{self.n_samples} innovations; {self.evaluations} EKF evaluations, {self.iterations} "
                 f"iterations ({'converged' if self.converged else 'stopped: ' + self.message})"]
        w = max(len(p) for p in self.params) if self.params else 10
        for p in self.params:
            lines.append(f"  {p:<{w}}  {getattr(self.start, p):.4g} -> {getattr(self.settings, p):.4g}")
        lines.append(f"  mean negative log-likelihood per innovation: {self.nll_before:.5g} -> {self.nll_after:.5g} nats")
        if self.rmse_before is not None:
            lines.append(f"  SOC RMSE: {100 * self.rmse_before:.3f} % -> {100 * self.rmse_after:.3f} %")
            lines.append(f"  SOC error inside the filter's +-3 sigma: {100 * self.coverage_before:.1f} % -> "
                         f"{100 * self.coverage_after:.1f} % of samples")
        if self.objective == "soc-error":
            lines.append(f"  objective (penalised RMSE): {self.objective_before:.5g} -> {self.objective_after:.5g}")
        lines.append(f"  before: {self.nis_before.describe()}")
        lines.append(f"  after:  {self.nis_after.describe()}")
        if self.coverage_after is not None and self.coverage_after < 0.9:
            lines.append(f"  warning: the SOC error is outside the tuned filter's +-3 sigma in "
                         f"{100 * (1 - self.coverage_after):.0f} % of samples: it is overconfident about SOC "
                         "(model error is correlated in time, the innovations cannot show it); consider "
                         "objective soc-error with a coverage constraint, or a larger q_soc_per_s")
        return "\n".join(lines)


# ----------------------------------------------------------------------------- evaluation
def ekf_raw(model, recs, settings: FilterSettings, soc0s=None, capacity_scales=None) -> dict:
    """Run the compiled batched EKF and return the raw arrays (no Trace, no energy SOC).

    The same kernel and priors as :func:`estimator.ekf.run_ekf_batch`, for loops that only need
    the SOC, its sigma and the innovations (tuning, Monte Carlo).

    Returns
    -------
    dict with ``offsets`` (M+1,), ``soc``, ``soc_sigma``, ``innovation_v``, ``innovation_var_v2``
    (all concatenated over the recordings, total length sum N) and ``n_gated`` (M,).
    """
    try:
        raw = run_ekf_batch_raw(model, recs, settings, soc0s, capacity_scales)
    except ValueError as e:
        raise TuningError(str(e)) from None
    return {k: raw[k] for k in ("offsets", "soc", "soc_sigma", "innovation_v", "innovation_var_v2", "n_gated")}


def innovation_nll(innovation_v, innovation_var_v2) -> tuple[float, int]:
    """Total negative log-likelihood ``1/2 sum [log(2 pi S) + nu^2/S]`` (nats) and the count.

    NaN innovations (predict-only samples) are skipped.
    """
    nu = np.asarray(innovation_v, dtype=float)
    s = np.asarray(innovation_var_v2, dtype=float)
    ok = np.isfinite(nu) & np.isfinite(s) & (s > 0)
    n = int(ok.sum())
    if n == 0:
        return math.inf, 0
    return float(0.5 * np.sum(_LOG2PI + np.log(s[ok]) + nu[ok] ** 2 / s[ok])), n


@dataclass(frozen=True)
class _Eval:
    nll: float
    n: int
    rmse: float | None
    nis: ConsistencyResult
    coverage: float | None = None


def evaluate(model, recs, settings: FilterSettings, soc0s=None, confidence: float = 0.95) -> _Eval:
    """Likelihood, SOC RMSE (when all recordings have ``soc_ref``) and pooled NIS of one setting."""
    recs = list(recs)
    raw = ekf_raw(model, recs, settings, soc0s)
    nll, n = innovation_nll(raw["innovation_v"], raw["innovation_var_v2"])
    rmse = cover = None
    if all(r.soc_ref is not None for r in recs):
        ref = np.concatenate([np.asarray(r.soc_ref, dtype=float) for r in recs])
        err = raw["soc"] - ref
        rmse = float(np.sqrt(np.mean(err ** 2)))
        cover = float(np.mean(np.abs(err) <= 3.0 * raw["soc_sigma"]))
    nis = nis_test(raw["innovation_v"], raw["innovation_var_v2"], confidence)
    return _Eval(nll, n, rmse, nis, cover)


def default_params(model, settings: FilterSettings, objective: str = "likelihood", with_p0: bool = False) -> tuple:
    """Default set of tuned settings: voltage and current noise, the SOC random walk, the RC random
    walk when the model has RC pairs, the bias random walk when the bias is estimated, and
    ``p0_soc`` when ``with_p0`` (an initial SOC is given)."""
    p = ["voltage_noise_v", "current_noise_a", "q_soc_per_s"]
    if model.n_rc > 0:
        p.append("q_rc_v2_per_s")
    if settings.estimate_bias:
        p.append("q_bias_a2_per_s")
    if with_p0:
        p.append("p0_soc")
    return tuple(p)


def _penalised(ev: _Eval, weight: float, coverage: float | None) -> float:
    nis = ev.nis
    lo, hi = nis.band_lo, nis.band_hi
    e = max(0.0, math.log(nis.mean / hi), math.log(lo / nis.mean)) if nis.mean > 0 else 50.0
    c = 0.0
    if coverage is not None:
        c = max(0.0, math.log(coverage / max(ev.coverage, 1e-3)))
    return ev.rmse * (1.0 + weight * (e * e + c * c))


def tune(model, recs, settings: FilterSettings | None = None, objective: str = "likelihood", params=None,
         soc0s=None, max_evaluations: int = 150, penalty_weight: float = 10.0, confidence: float = 0.95,
         coverage: float | None = None, xatol_decades: float = 0.01, quiet: bool = True) -> TuneResult:
    """Tune the filter noise on one or more recordings.

    Parameters
    ----------
    model : models.CellModel
    recs : Recording or sequence of Recording
    settings : FilterSettings, optional
        Start values and everything that is not tuned (default :func:`default_settings`).
    objective : ``"likelihood"`` or ``"soc-error"``
    params : sequence of str, optional
        Settings to tune (keys of :data:`TUNABLE`); default :func:`default_params`.
    soc0s : None, float or sequence, optional
        Initial SOC per recording (fraction); ``p0_soc`` is only meaningful with it.
    max_evaluations : int
        Budget of EKF evaluations (each runs every recording once).
    penalty_weight : float
        ``w`` of the NIS-band penalty of the ``soc-error`` objective.
    confidence : float
        Probability of the NIS band.
    coverage : float, optional
        ``soc-error`` only: also require that at least this fraction of samples has
        ``|soc - soc_ref| <= 3 soc_sigma`` (e.g. 0.95), penalised like the NIS band with
        ``log(coverage / fraction)``.  Without it a filter can be innovation-consistent yet claim
        a far smaller SOC sigma than its real error (model error is correlated in time).
    xatol_decades : float
        Convergence tolerance of the search in decades (0.01 = 2.3 %).
    quiet : bool
        No progress bar.

    Returns
    -------
    TuneResult
    """
    from socfuse.estimator.analysis.progress import ProgressBar

    if not hasattr(recs, "__len__") or hasattr(recs, "time_s"):
        recs = [recs]
    recs = list(recs)
    if not recs:
        raise TuningError("no recordings to tune on")
    if objective not in OBJECTIVES:
        raise TuningError(f"unknown objective {objective!r}; choose one of {', '.join(OBJECTIVES)}")
    start = default_settings(model) if settings is None else settings
    if objective == "soc-error":
        missing = [r.name or f"#{j}" for j, r in enumerate(recs) if r.soc_ref is None]
        if missing:
            raise TuningError(f"objective soc-error needs soc_ref in every recording; missing in {', '.join(missing)}")
    with_p0 = soc0s is not None and (np.isscalar(soc0s) or any(z is not None for z in soc0s))
    params = tuple(default_params(model, start, objective, with_p0) if params is None else params)
    bad = [p for p in params if p not in TUNABLE]
    if bad or not params:
        raise TuningError(f"cannot tune {', '.join(bad) or 'nothing'}; tunable settings: {', '.join(TUNABLE)}")
    if len(set(params)) != len(params):
        raise TuningError("a setting is listed twice in params")
    lo = np.array([math.log10(TUNABLE[p][1]) for p in params])
    hi = np.array([math.log10(TUNABLE[p][2]) for p in params])
    x0 = np.array([math.log10(min(max(getattr(start, p), TUNABLE[p][1] * 10), TUNABLE[p][2] / 10)) for p in params])

    def to_settings(x):
        return start.with_(**{p: float(10.0 ** v) for p, v in zip(params, np.clip(x, lo, hi))})

    cache: dict = {}
    history = []
    bar = ProgressBar(max_evaluations, "tune", quiet, unit="eval")

    def fun(x):
        key = tuple(np.round(x, 6))
        if key in cache:
            return cache[key][0]
        ev = evaluate(model, recs, to_settings(x), soc0s, confidence)
        if objective == "likelihood":
            f = ev.nll if math.isfinite(ev.nll) else 1e300
        else:
            f = _penalised(ev, penalty_weight, coverage)
        cache[key] = (f, ev)
        history.append((tuple(float(10.0 ** v) for v in x), f))
        bar.update(1)
        return f

    try:
        f_before = fun(x0)
        ev_before = cache[tuple(np.round(x0, 6))][1]
        simplex = np.vstack([x0] + [x0 + 0.5 * np.eye(len(params))[j] for j in range(len(params))])
        simplex = np.clip(simplex, lo, hi)
        for j in range(1, len(simplex)):  # a start on the upper bound steps down instead
            if np.allclose(simplex[j], x0):
                simplex[j, j - 1] = x0[j - 1] - 0.5
        fatol = 0.01 if objective == "likelihood" else 1e-7
        res = optimize.minimize(fun, x0, method="Nelder-Mead", bounds=list(zip(lo, hi)),
                                options={"initial_simplex": simplex, "maxfev": max(int(max_evaluations) - 1, 1),
                                         "xatol": xatol_decades, "fatol": fatol})
    finally:
        bar.close()
    best_key = min(cache, key=lambda k: cache[k][0])
    f_after, ev_after = cache[best_key]
    if f_after > f_before:  # never return something worse than the start
        best_key, f_after, ev_after = tuple(np.round(x0, 6)), f_before, ev_before
    tuned = to_settings(np.array(best_key))
    n = ev_after.n
    return TuneResult(
        settings=tuned, start=start, objective=objective, params=params,
        objective_before=f_before / ev_before.n if objective == "likelihood" else f_before,
        objective_after=f_after / n if objective == "likelihood" else f_after,
        nll_before=ev_before.nll / ev_before.n, nll_after=ev_after.nll / n,
        rmse_before=ev_before.rmse, rmse_after=ev_after.rmse, nis_before=ev_before.nis, nis_after=ev_after.nis,
        iterations=int(getattr(res, "nit", 0)), evaluations=len(cache), converged=bool(res.success),
        message=str(res.message), recordings=tuple(r.name for r in recs), n_samples=n,
        coverage_before=ev_before.coverage, coverage_after=ev_after.coverage, history=tuple(history))



# ----------------------------------------------------------------------------- ALS (linear models)
@dataclass(frozen=True, eq=False)
class AlsResult:
    """Autocovariance least-squares estimate of the noise of a linear time-invariant model.

    Attributes
    ----------
    q_weights : ndarray (n_basis,)
        Non-negative weights of the process-noise basis: ``Q = sum_i q_weights[i] Q_i``.
    q : ndarray (n, n)
        The estimated process-noise covariance.
    r : float
        The estimated measurement-noise variance.
    autocov : ndarray (n_lags,)
        Sample autocovariances of the innovations used (lags 0..n_lags-1).
    residual : float
        Norm of the least-squares residual.
    """

    q_weights: np.ndarray
    q: np.ndarray
    r: float
    autocov: np.ndarray
    residual: float


def fixed_gain_innovations(A, C, L, y, x0=None, u=None):
    """Innovations of the fixed-gain filter ``x^-_{k+1} = A (x^-_k + L nu_k) + u_k``, ``nu_k = y_k - C x^-_k``.

    Parameters
    ----------
    A : (n, n); C : (n,); L : (n,) filter gain; y : (N,) scalar measurements;
    x0 : (n,) initial prediction (default 0); u : (N, n) known input term per step (default 0).

    Returns
    -------
    ndarray (N,)
    """
    A = np.asarray(A, dtype=float)
    C = np.asarray(C, dtype=float).ravel()
    L = np.asarray(L, dtype=float).ravel()
    y = np.asarray(y, dtype=float)
    x = np.zeros(A.shape[0]) if x0 is None else np.array(x0, dtype=float)
    nu = np.empty(y.size)
    for k in range(y.size):
        nu[k] = y[k] - C @ x
        x = A @ (x + L * nu[k])
        if u is not None:
            x = x + u[k]
    return nu


def als_noise(A, C, L, innovations, q_basis, n_lags: int = 15, skip: int = 0) -> AlsResult:
    """Autocovariance least squares (Odelson, Rajamani, Rawlings, Automatica 42 (2006) 303-308).

    For ``x' = A x + w`` (``w ~ N(0, Q)``), ``y = C x + v`` (``v ~ N(0, R)``, scalar) filtered with any
    stable fixed gain ``L`` (:func:`fixed_gain_innovations`), the prediction error ``e`` obeys
    ``e' = Abar e + w - A L v`` with ``Abar = A - A L C`` and the innovation ``nu = C e + v`` has the
    autocovariances::

        c_0 = C P C^T + R,   c_j = C Abar^j P C^T - C Abar^(j-1) A L R   (j >= 1)
        P = Abar P Abar^T + Q + A L R L^T A^T

    which are linear in ``Q`` and ``R``.  With ``Q = sum_i theta_i Q_i`` the sample autocovariances
    give a non-negative least-squares problem in ``(theta, R)`` (``scipy.optimize.nnls``; the
    Lyapunov equations by ``scipy.linalg.solve_discrete_lyapunov``).

    Parameters
    ----------
    A : (n, n); C : (n,); L : (n,)
    innovations : (N,)
    q_basis : sequence of (n, n) positive semi-definite matrices
    n_lags : int  number of autocovariance lags used (0..n_lags-1)
    skip : int  leading innovations left out (filter transient)

    Returns
    -------
    AlsResult
    """
    from scipy.linalg import solve_discrete_lyapunov

    A = np.asarray(A, dtype=float)
    C = np.asarray(C, dtype=float).ravel()
    L = np.asarray(L, dtype=float).ravel()
    nu = np.asarray(innovations, dtype=float)[skip:]
    nu = nu[np.isfinite(nu)]
    if nu.size <= 10 * n_lags:
        raise TuningError(f"ALS: {nu.size} innovations are too few for {n_lags} lags")
    abar = A - A @ np.outer(L, C)
    if np.max(np.abs(np.linalg.eigvals(abar))) >= 1.0:
        raise TuningError("ALS: the gain L does not give a stable filter (A - A L C has an eigenvalue >= 1)")
    al = A @ L
    powers = [np.eye(A.shape[0])]
    for _ in range(n_lags):
        powers.append(abar @ powers[-1])

    def cols_for(p, extra0, extra_j):
        out = np.empty(n_lags)
        for j in range(n_lags):
            out[j] = C @ powers[j] @ p @ C + (extra0 if j == 0 else extra_j(j))
        return out

    cols = []
    for qi in q_basis:
        p = solve_discrete_lyapunov(abar, np.asarray(qi, dtype=float))
        cols.append(cols_for(p, 0.0, lambda j: 0.0))
    pr = solve_discrete_lyapunov(abar, np.outer(al, al))
    cols.append(cols_for(pr, 1.0, lambda j: -(C @ powers[j - 1] @ al)))
    design = np.column_stack(cols)
    n = nu.size
    chat = np.array([np.dot(nu[j:], nu[:n - j]) / (n - j) for j in range(n_lags)])
    theta, resid = optimize.nnls(design, chat)
    q = sum(t * np.asarray(qi, dtype=float) for t, qi in zip(theta[:-1], q_basis))
    return AlsResult(theta[:-1].copy(), np.asarray(q, dtype=float), float(theta[-1]), chat, float(resid))
