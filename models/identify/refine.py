"""Refinement of the R0 and RC tables on a dynamic recording (regularised least squares).

The pulse test gives each table over SOC; a drive recording exercises the cell at many rates
and frequencies.  Each table ``p(SOC[, T])`` is scaled per SOC breakpoint,
``p'(s_j, T) = p(s_j, T) exp(m_j)`` (positivity kept, temperature ratios kept), and the
log-multipliers ``m`` minimise::

    sum_k (v_sim,k - v_k)^2 / n  +  w_s^2 sum_j (D2 log p')_j^2  +  w_p^2 sum_j m_j^2

with ``D2`` the second difference over the SOC breakpoints (of the temperature-mean log values)

by ``scipy.optimize.least_squares`` (Levenberg-Marquardt) with an analytic Jacobian.  The
second term is a discrete second-difference (Tikhonov / Whittaker) smoothness penalty over SOC
(Whittaker, Proc. Edinburgh Math. Soc. 41, 1923; Eilers, Anal. Chem. 75, 2003); the third keeps
breakpoints the recording barely visits near their pulse-test values.  The simulation follows the
sampling rule exactly (same as :func:`models.simulate`); the SOC trajectory does not depend on
the refined parameters, so the interpolation weights are computed once.

A drive recording says nothing about conditions it did not visit, so the refinement changes
the tables only where it has evidence:

- **temperature rows**: only the rows of a temperature table that carry at least ``row_share``
  of the recording's interpolation weight are scaled (a 0 degC drive moves the 0 and 10 degC
  rows of a 25/10/0 degC model, not the 25 degC one); the fit sees the other rows unchanged;
- **SOC breakpoints**: a breakpoint is free only when the fitted samples spend at least
  ``min_visit_s`` of interpolation weight on it; the others keep their pulse-test values
  (multiplier exactly 1, not merely pulled towards it);
- **cut-off margin**: samples below ``soc_floor`` (on the recording's charge count) or with a
  terminal voltage within ``cutoff_margin_v`` of the model's lower limit
  (:data:`models.validity.CUTOFF_MARGIN_V`, the margin the estimators leave out too) are
  simulated but not fitted: near the cut-off an equivalent-circuit model misses the
  diffusion-limited collapse, and fitting it there inflates R0 over the whole low-SOC end (common
  practice, no source);
- **size**: multipliers are clipped to ``e^±max_log_change`` (default a factor e = 2.7);
- **need**: a model that already explains the recording to within ``min_rms_v`` (20 mV) is
  returned unchanged.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable, clamp_weights
from socfuse.models.thevenin import CellModel, RcPair, interval_current
from socfuse.models.validity import CUTOFF_MARGIN_V
from socfuse.models.identify.fastsim import njit, rc_filter, simulate_fast, soc_trajectory
from socfuse.models.identify.validate import initial_soc, recording_temperature

__all__ = ["RefineResult", "refine_model"]


@dataclass(frozen=True, eq=False)
class RefineResult:
    """Outcome of :func:`refine_model`.

    ``rms_before_v``/``rms_after_v``: open-loop voltage RMS on the recording before and after;
    ``multipliers``: ``{table name: exp(m) per SOC breakpoint}`` (exactly 1 where not refined);
    ``fitted_share``: fraction of the valid samples that entered the fit (the rest lie below the
    SOC floor or the cut-off margin); ``temperature_rows``: ``{table name: temperatures (degC) of
    the rows scaled}`` for tables with a temperature axis; ``fit_rms_after_v``: open-loop voltage RMS
    (V) of the returned model over the samples the fit may use (above the SOC floor and the cut-off
    margin), the model error an estimator can expect on such a drive.
    """

    model: CellModel
    rms_before_v: float
    rms_after_v: float
    max_before_v: float
    max_after_v: float
    multipliers: dict
    nfev: int
    success: bool
    message: str
    source: str
    soc0: float
    fitted_share: float = 1.0
    temperature_rows: dict = None
    fit_rms_after_v: float = float("nan")

    @property
    def refined(self) -> bool:
        """True when the tables were fitted (False when the model came back unchanged)."""
        return self.nfev > 0

    def as_dict(self) -> dict:
        return {"file": self.source, "test": "dynamic recording (refinement)", "refined": self.refined,
                "message": self.message, "rms_before_v": self.rms_before_v,
                "rms_after_v": self.rms_after_v, "max_before_v": self.max_before_v, "max_after_v": self.max_after_v,
                "nfev": self.nfev, "success": self.success, "soc0": self.soc0,
                "fitted_share": self.fitted_share, "fit_rms_after_v": self.fit_rms_after_v, "temperature_rows_c": dict(self.temperature_rows or {}),
                "multipliers": {k: [float(x) for x in v] for k, v in self.multipliers.items()}}


def _row_weights(table: ParamTable, temp) -> np.ndarray:
    """Interpolation weight of each temperature row at ``temp_k``, shape ``(n, n_rows)``."""
    n = np.shape(temp)[0]
    vals = table.values
    if table.temperature_c is None or vals.shape[0] == 1:
        return np.ones((n, 1))
    i0, w = clamp_weights(table.temperature_c, temp)
    out = np.zeros((n, vals.shape[0]))
    rows = np.arange(n)
    np.add.at(out, (rows, i0), 1.0 - w)
    np.add.at(out, (rows, i0 + 1), w)
    return out


def _basis(table: ParamTable, soc, temp, scaled_rows=None):
    """Two-entry form of the table's interpolation at ``(soc_k, temp_k)``.

    Returns ``(j0, j1, c0, c1, fixed)`` with ``table.at(soc_k, temp_k) = fixed_k + c0_k + c1_k``
    and, for the rows in ``scaled_rows`` (all when None) scaled per SOC column by ``e^m``,
    ``fixed_k + c0_k e^{m[j0_k]} + c1_k e^{m[j1_k]}`` (linear interpolation touches two SOC
    breakpoints; ``fixed`` is the contribution of the rows left alone).
    """
    n_s = table.soc.size
    vals = table.values
    rw = _row_weights(table, np.broadcast_to(temp, soc.shape))
    mask = np.ones(vals.shape[0], dtype=bool) if scaled_rows is None else np.asarray(scaled_rows, dtype=bool)
    vt = (rw * mask[None, :]) @ vals          # (n, n_s): the scaled rows' share
    vf = (rw * ~mask[None, :]) @ vals         # the fixed rows' share
    rows = np.arange(soc.size)
    if n_s == 1:
        j0 = np.zeros(soc.size, dtype=np.int64)
        return j0, j0.copy(), np.asarray(vt[:, 0], dtype=float).copy(), np.zeros(soc.size), vf[:, 0].copy()
    j0, wj = clamp_weights(table.soc, soc)
    j0 = j0.astype(np.int64)
    j1 = j0 + 1
    fixed = (1.0 - wj) * vf[rows, j0] + wj * vf[rows, j1]
    return j0, j1, (1.0 - wj) * vt[rows, j0], wj * vt[rows, j1], fixed


def _visits(table: ParamTable, soc, weight) -> np.ndarray:
    """Interpolation weight each SOC breakpoint of ``table`` gets from the samples, ``sum_k weight_k w_jk``."""
    n_s = table.soc.size
    if n_s == 1:
        return np.array([float(np.sum(weight))])
    j0, wj = clamp_weights(table.soc, soc)
    out = np.zeros(n_s)
    np.add.at(out, j0, weight * (1.0 - wj))
    np.add.at(out, j0 + 1, weight * wj)
    return out


@njit(cache=True)
def _sensitivity(a, g, j0, j1, c0, c1, row_of, out, col0, sign):
    """Columns ``col0..`` of the Jacobian for one RC table (one column per SOC breakpoint).

    The sensitivity ``x_s`` of the RC voltage to the log-multiplier of breakpoint ``s`` obeys
    ``x_s[k+1] = a[k] x_s[k] + g[k] (c0[k] [j0[k] = s] + c1[k] [j1[k] = s])`` from 0 (the
    derivative of the ZOH recursion); ``out[row_of[k], col0 + s] = sign * x_s[k]`` for the used
    samples (``row_of[k] >= 0``).
    """
    n = a.shape[0]
    m = out.shape[1] - col0
    n_s = 0
    for k in range(n):
        if j1[k] + 1 > n_s:
            n_s = j1[k] + 1
    if n_s > m:
        n_s = m
    x = np.zeros(n_s)
    for k in range(n):
        for c in range(n_s):
            x[c] *= a[k]
        x[j0[k]] += g[k] * c0[k]
        x[j1[k]] += g[k] * c1[k]
        r = row_of[k + 1]
        if r >= 0:
            for c in range(n_s):
                out[r, col0 + c] = sign * x[c]


def _d2(n):
    if n < 3:
        return np.zeros((0, n))
    d = np.zeros((n - 2, n))
    for r in range(n - 2):
        d[r, r:r + 3] = (1.0, -2.0, 1.0)
    return d


def _scaled(table: ParamTable, mult, rows) -> ParamTable:
    vals = table.values.copy()
    vals[np.asarray(rows, dtype=bool)] *= np.asarray(mult)[None, :]
    return ParamTable(table.soc, vals, table.temperature_c, table.name)


def refine_model(model: CellModel, rec: Recording, soc0: float | None = None, smooth_v: float = 2e-3,
                 prior_v: float = 5e-4, refine_tau: bool = True, stride: int = 1, max_nfev: int = 60,
                 max_log_change: float = 1.0, row_share: float = 0.05, min_visit_s: float = 300.0,
                 soc_floor: float = 0.10, cutoff_margin_v: float = CUTOFF_MARGIN_V,
                 min_rms_v: float = 0.020) -> RefineResult:
    """Fit the R0 and RC tables of ``model`` to the voltage of a dynamic recording.

    Only the temperature rows, SOC breakpoints and samples the recording speaks for are used
    (module docstring).

    Parameters
    ----------
    model : CellModel
        Starting model (OCV, capacity and efficiency are kept).
    rec : Recording
        Dynamic recording (drive cycle); its SOC must be known at the start (``soc0``, its
        ``soc_ref`` or a rested first sample).
    soc0 : float, optional
    smooth_v : float
        Weight ``w_s`` of the second-difference penalty on the log of the refined table (V per
        unit of log-curvature).
    prior_v : float
        Weight ``w_p`` pulling multipliers to 1 (V per unit log change).
    refine_tau : bool
        Also refine the time constants.
    stride : int
        Use every ``stride``-th voltage sample in the fit (the simulation always runs on every
        sample, so the dynamics are kept).
    max_nfev : int
    max_log_change : float
        Clip on ``|m_j|`` after the fit (e^1 = 2.7 either way).
    row_share : float
        Least share (0..1) of the fitted samples' temperature-interpolation weight for a
        temperature row to be scaled.
    min_visit_s : float
        Least time (s) of SOC-interpolation weight on a breakpoint for it to be refined.
    soc_floor : float
        Samples below this SOC (fraction, on the charge count from ``soc0``) are not fitted.
    cutoff_margin_v : float
        Samples with a terminal voltage below ``v_min + cutoff_margin_v`` (V) are not fitted.
    min_rms_v : float
        The model is refined only when its open-loop voltage RMS on the fitted samples is at
        least this (V); below it the model comes back unchanged (``success`` False, the reason
        in ``message``).  20 mV is twice the slowly varying model error the estimator assumes
        by default (``estimator.filters.settings``).  Chosen 2026-12-03 on the reference cases
        (DESIGN.md section 7): refinement helped the three Panasonic 18650PF models, whose
        pulse-test tables missed their Cycle_1 drive by 31-222 mV RMS, and hurt the demo and
        the PyBaMM NMC and LFP models (8-11 mV); a rule read off six cases, not validated
        beyond them.

    Returns
    -------
    RefineResult
    """
    z0, _ = initial_soc(model, rec, soc0)
    t = rec.time_s
    i = rec.current_a
    temp = np.broadcast_to(np.asarray(recording_temperature(rec), dtype=float), t.shape)
    soc = soc_trajectory(model, t, i, z0)
    dt = np.diff(t)
    u = interval_current(i)
    base = simulate_fast(model, t, i, temp, soc0=z0)
    v_fixed = base.ocv_v + (model.hysteresis.max_v * base.h if model.hysteresis is not None else 0.0)
    fit_ok = np.isfinite(rec.voltage_v)
    with np.errstate(invalid="ignore"):
        fit_ok &= soc >= soc_floor
        if np.isfinite(model.v_min_v):
            fit_ok &= rec.voltage_v >= model.v_min_v + cutoff_margin_v
    fitted_share = float(np.count_nonzero(fit_ok) / max(int(np.count_nonzero(np.isfinite(rec.voltage_v))), 1))
    use = np.zeros(t.size, dtype=bool)
    use[::max(int(stride), 1)] = True
    use &= fit_ok
    n_use = int(np.count_nonzero(use))
    if n_use < 10:
        raise ValueError(f"{rec.name}: fewer than 10 samples above {soc_floor:.0%} SOC and the cut-off margin "
                         "to refine on")
    scale = 1.0 / np.sqrt(n_use)
    vm = rec.voltage_v[use]
    rms_fit = float(np.sqrt(np.mean((base.voltage_v[use] - vm) ** 2)))
    # below min_rms_v the pulse-test model already explains this recording within what a filter's
    # model-error allowance covers: a fit would only chase noise and effects the tables cannot hold
    skip = (f"not refined: the pulse-test model's voltage RMS on the fitted samples is {rms_fit * 1000:.1f} mV, "
            f"below {min_rms_v * 1000:.0f} mV") if rms_fit < min_rms_v else ""
    # time each fitted sample stands for (its stride share of the recording), for the visit counts
    dt_k = np.empty(t.size)
    dt_k[:-1] = dt
    dt_k[-1] = dt[-1] if dt.size else 0.0
    w_use = np.where(use, dt_k * max(int(stride), 1), 0.0)

    # parameter blocks: (kind, pair index, table)
    blocks = [("r0", -1, model.r0_ohm)]
    for j, p in enumerate(model.rc):
        blocks.append(("r", j, p.r_ohm))
        if refine_tau:
            blocks.append(("tau", j, p.tau_s))
    bases, row_sets, free = [], [], []
    for kind, _, tab in blocks:
        s_k, t_k, w_k = (soc, temp, w_use) if kind == "r0" else (soc[:-1], temp[:-1], w_use[:-1])
        share = (_row_weights(tab, t_k) * w_k[:, None]).sum(axis=0)
        rows = share >= row_share * max(float(share.sum()), 1e-300)
        row_sets.append(rows)
        bases.append(_basis(tab, s_k, t_k, rows))
        free.append(_visits(tab, s_k, w_k) >= min_visit_s)
    sizes = [tab.soc.size for _, _, tab in blocks]
    offs = np.concatenate([[0], np.cumsum(sizes)])
    n_par = int(offs[-1])
    free_idx = np.flatnonzero(np.concatenate(free))

    def full(x):
        theta = np.zeros(n_par)
        theta[free_idx] = x
        return theta

    def unpack(theta):
        return [np.exp(theta[offs[b]:offs[b + 1]]) for b in range(len(blocks))]

    def values(theta):
        mults = unpack(theta)
        vals = []
        for b in range(len(blocks)):
            j0, j1, c0, c1, fx = bases[b]
            vals.append(fx + c0 * mults[b][j0] + c1 * mults[b][j1])
        r0 = vals[0]
        pairs = []
        for j in range(model.n_rc):
            r = [vals[b] for b, (k, jj, _) in enumerate(blocks) if k == "r" and jj == j][0]
            tb = [b for b, (k, jj, _) in enumerate(blocks) if k == "tau" and jj == j]
            tau = vals[tb[0]] if tb else np.asarray(model.rc[j].tau_s.at(soc[:-1], temp[:-1]), dtype=float)
            pairs.append((r, tau))
        return mults, r0, pairs

    def simulate(theta):
        mults, r0, pairs = values(theta)
        v = v_fixed - r0 * i
        states = []
        for r, tau in pairs:
            a = np.exp(-dt / tau)
            vr = rc_filter(a, r * (1.0 - a) * u, 0.0)
            states.append((a, vr, r, tau))
            v = v - vr
        return v, mults, states

    d2 = [_d2(s) for s in sizes]
    # the smoothness penalty acts on the refined table itself (log of the pulse-test values of the
    # scaled rows plus the multipliers), so a spike the pulse test left is smoothed rather than kept
    logs = [np.log(tab.values[rows]).mean(axis=0) for (_, _, tab), rows in zip(blocks, row_sets)]

    def fun(x):
        theta = full(x)
        v, _, _ = simulate(theta)
        parts = [(v[use] - vm) * scale]
        for b in range(len(blocks)):
            m = theta[offs[b]:offs[b + 1]]
            parts.append(smooth_v * (d2[b] @ (logs[b] + m)))
            parts.append(prior_v * m)
        return np.concatenate(parts)

    row_of = np.full(t.size, -1, dtype=np.int64)
    row_of[use] = np.arange(n_use)
    use_idx = np.flatnonzero(use)

    def jac(x):
        _, mults, states = simulate(full(x))
        jd = np.zeros((n_use, n_par))
        for b, (kind, j, _) in enumerate(blocks):
            j0, j1, c0, c1, _fx = bases[b]
            e0 = c0 * mults[b][j0]
            e1 = c1 * mults[b][j1]
            if kind == "r0":
                rows = np.arange(n_use)
                np.add.at(jd, (rows, offs[b] + j0[use_idx]), -e0[use_idx] * i[use_idx] * scale)
                np.add.at(jd, (rows, offs[b] + j1[use_idx]), -e1[use_idx] * i[use_idx] * scale)
                continue
            a, vr, r, tau = states[j]
            if kind == "r":
                g = (1.0 - a) * u
            else:
                g = a * dt / tau ** 2 * (vr[:-1] - r * u)
            _sensitivity(a, g, j0, j1, e0, e1, row_of, jd, int(offs[b]), -scale)
        reg = []
        for b in range(len(blocks)):
            blk = np.zeros((d2[b].shape[0], n_par))
            blk[:, offs[b]:offs[b + 1]] = smooth_v * d2[b]
            reg.append(blk)
            blk = np.zeros((sizes[b], n_par))
            blk[:, offs[b]:offs[b + 1]] = prior_v * np.eye(sizes[b])
            reg.append(blk)
        return np.vstack([jd] + reg)[:, free_idx]

    if free_idx.size and not skip:
        # Levenberg-Marquardt (MINPACK, QR-based: fast for many residuals and few parameters); the
        # prior term keeps the problem well posed, and the multipliers are clipped afterwards
        res = least_squares(fun, np.zeros(free_idx.size), jac=jac, method="lm", max_nfev=max_nfev, x_scale="jac")
        theta = full(np.clip(res.x, -max_log_change, max_log_change))
        nfev, ok, msg = int(res.nfev), bool(res.success), str(res.message)
    else:
        theta, nfev, ok, msg = np.zeros(n_par), 0, False, skip or "no SOC breakpoint visited long enough to refine"
    mults = unpack(theta)
    new_r0 = _scaled(model.r0_ohm, mults[0], row_sets[0])
    new_rc = []
    for j, p in enumerate(model.rc):
        br = [b for b, (k, jj, _) in enumerate(blocks) if k == "r" and jj == j][0]
        bt = [b for b, (k, jj, _) in enumerate(blocks) if k == "tau" and jj == j]
        new_rc.append(RcPair(_scaled(p.r_ohm, mults[br], row_sets[br]),
                             _scaled(p.tau_s, mults[bt[0]], row_sets[bt[0]]) if bt else p.tau_s))
    new_model = model.with_(r0_ohm=new_r0, rc=tuple(new_rc)) if nfev else model
    before = base.voltage_v - rec.voltage_v
    after = simulate_fast(new_model, t, i, temp, soc0=z0).voltage_v - rec.voltage_v if nfev else before
    g = np.isfinite(before)
    names, rows_out = {}, {}
    for b, (kind, j, tab) in enumerate(blocks):
        key = tab.name if kind == "r0" else f"{kind}{j + 1}_{'ohm' if kind == 'r' else 's'}"
        names[key] = mults[b]
        if nfev and tab.temperature_c is not None and tab.values.shape[0] > 1:
            rows_out[key] = [float(x) for x in np.asarray(tab.temperature_c)[row_sets[b]]]
    src = rec.metadata.get("source", rec.name) if rec.metadata else rec.name
    return RefineResult(new_model, float(np.sqrt(np.mean(before[g] ** 2))), float(np.sqrt(np.mean(after[g] ** 2))),
                        float(np.max(np.abs(before[g]))), float(np.max(np.abs(after[g]))), names, nfev,
                        ok, msg, str(src), float(z0), fitted_share, rows_out,
                        float(np.sqrt(np.mean(after[fit_ok & g] ** 2))))
