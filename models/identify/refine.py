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
breakpoints the recording never visits at their pulse-test values.  The simulation follows the
sampling rule exactly (same as :func:`models.simulate`); the SOC trajectory does not depend on
the refined parameters, so the interpolation weights are computed once.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable, clamp_weights
from socfuse.models.thevenin import CellModel, RcPair, interval_current
from socfuse.models.identify.fastsim import njit, rc_filter, simulate_fast, soc_trajectory
from socfuse.models.identify.validate import initial_soc, recording_temperature

__all__ = ["RefineResult", "refine_model"]


@dataclass(frozen=True, eq=False)
class RefineResult:
    """Outcome of :func:`refine_model`.

    ``rms_before_v``/``rms_after_v``: open-loop voltage RMS on the recording before and after;
    ``multipliers``: ``{table name: exp(m) per SOC breakpoint}``.
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

    def as_dict(self) -> dict:
        return {"file": self.source, "test": "dynamic recording (refinement)", "rms_before_v": self.rms_before_v,
                "rms_after_v": self.rms_after_v, "max_before_v": self.max_before_v, "max_after_v": self.max_after_v,
                "nfev": self.nfev, "success": self.success, "soc0": self.soc0,
                "multipliers": {k: [float(x) for x in v] for k, v in self.multipliers.items()}}


def _basis(table: ParamTable, soc, temp):
    """Two-entry form of the table's interpolation at ``(soc_k, temp_k)``.

    Returns ``(j0, j1, c0, c1)`` with ``table.at(soc_k, temp_k) = c0_k + c1_k`` and, for values
    scaled per SOC column by ``e^m``, ``c0_k e^{m[j0_k]} + c1_k e^{m[j1_k]}`` (linear
    interpolation touches two SOC breakpoints).
    """
    n_s = table.soc.size
    vals = table.values
    if table.temperature_c is None or vals.shape[0] == 1:
        vt = np.broadcast_to(vals[0], (soc.size, n_s))
    else:
        i0, w = clamp_weights(table.temperature_c, np.broadcast_to(temp, soc.shape))
        vt = (1.0 - w)[:, None] * vals[i0] + w[:, None] * vals[i0 + 1]
    rows = np.arange(soc.size)
    if n_s == 1:
        j0 = np.zeros(soc.size, dtype=np.int64)
        return j0, j0.copy(), np.asarray(vt[:, 0], dtype=float).copy(), np.zeros(soc.size)
    j0, wj = clamp_weights(table.soc, soc)
    j0 = j0.astype(np.int64)
    j1 = j0 + 1
    return j0, j1, (1.0 - wj) * vt[rows, j0], wj * vt[rows, j1]


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


def _scaled(table: ParamTable, mult) -> ParamTable:
    return ParamTable(table.soc, table.values * np.asarray(mult)[None, :], table.temperature_c, table.name)


def refine_model(model: CellModel, rec: Recording, soc0: float | None = None, smooth_v: float = 2e-3,
                 prior_v: float = 5e-4, refine_tau: bool = True, stride: int = 1, max_nfev: int = 60,
                 max_log_change: float = 1.5) -> RefineResult:
    """Fit the R0 and RC tables of ``model`` to the voltage of a dynamic recording.

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
        Clip on ``|m_j|`` after the fit (a factor e^1.5 = 4.5 either way).

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
    use = np.zeros(t.size, dtype=bool)
    use[::max(int(stride), 1)] = True
    use &= np.isfinite(rec.voltage_v)
    n_use = int(np.count_nonzero(use))
    scale = 1.0 / np.sqrt(n_use)
    vm = rec.voltage_v[use]

    # parameter blocks: (kind, pair index, table)
    blocks = [("r0", -1, model.r0_ohm)]
    for j, p in enumerate(model.rc):
        blocks.append(("r", j, p.r_ohm))
        if refine_tau:
            blocks.append(("tau", j, p.tau_s))
    bases = []
    for kind, _, tab in blocks:
        bases.append(_basis(tab, soc if kind == "r0" else soc[:-1], temp if kind == "r0" else temp[:-1]))
    sizes = [tab.soc.size for _, _, tab in blocks]
    offs = np.concatenate([[0], np.cumsum(sizes)])
    n_par = int(offs[-1])

    def unpack(theta):
        return [np.exp(theta[offs[b]:offs[b + 1]]) for b in range(len(blocks))]

    def values(theta):
        mults = unpack(theta)
        vals = []
        for b in range(len(blocks)):
            j0, j1, c0, c1 = bases[b]
            vals.append(c0 * mults[b][j0] + c1 * mults[b][j1])
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
    # the smoothness penalty acts on the refined table itself (log of the pulse-test values plus
    # the multipliers), so a spike the pulse test left is smoothed rather than kept
    logs = [np.log(tab.values).mean(axis=0) for _, _, tab in blocks]

    def fun(theta):
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

    def jac(theta):
        _, mults, states = simulate(theta)
        jd = np.zeros((n_use, n_par))
        for b, (kind, j, _) in enumerate(blocks):
            j0, j1, c0, c1 = bases[b]
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
        return np.vstack([jd] + reg)

    theta0 = np.zeros(n_par)
    # Levenberg-Marquardt (MINPACK, QR-based: fast for many residuals and few parameters); the
    # prior term keeps the problem well posed, and the multipliers are clipped afterwards
    res = least_squares(fun, theta0, jac=jac, method="lm", max_nfev=max_nfev, x_scale="jac")
    res.x = np.clip(res.x, -max_log_change, max_log_change)
    mults = unpack(res.x)
    new_r0 = _scaled(model.r0_ohm, mults[0])
    new_rc = []
    for j, p in enumerate(model.rc):
        br = [b for b, (k, jj, _) in enumerate(blocks) if k == "r" and jj == j][0]
        bt = [b for b, (k, jj, _) in enumerate(blocks) if k == "tau" and jj == j]
        new_rc.append(RcPair(_scaled(p.r_ohm, mults[br]), _scaled(p.tau_s, mults[bt[0]]) if bt else p.tau_s))
    new_model = model.with_(r0_ohm=new_r0, rc=tuple(new_rc))
    before = base.voltage_v - rec.voltage_v
    after = simulate_fast(new_model, t, i, temp, soc0=z0).voltage_v - rec.voltage_v
    g = np.isfinite(before)
    names = {}
    for b, (kind, j, tab) in enumerate(blocks):
        names[tab.name if kind == "r0" else f"{kind}{j + 1}_{'ohm' if kind == 'r' else 's'}"] = mults[b]
    src = rec.metadata.get("source", rec.name) if rec.metadata else rec.name
    return RefineResult(new_model, float(np.sqrt(np.mean(before[g] ** 2))), float(np.sqrt(np.mean(after[g] ** 2))),
                        float(np.max(np.abs(before[g]))), float(np.max(np.abs(after[g]))), names, int(res.nfev),
                        bool(res.success), str(res.message), str(src), float(z0))
