"""Helpers for curves identified on a dense SOC grid: monotone projection and breakpoint choice.

- :func:`isotonic_increasing`: least-squares projection of a sampled curve onto non-decreasing
  sequences by the pool-adjacent-violators algorithm (Ayer, Brunk, Ewing, Reid and Silverman,
  Ann. Math. Statist. 26, 1955; Barlow et al., "Statistical inference under order
  restrictions", 1972), then a tiny ramp so the result is strictly increasing.
- :func:`greedy_breakpoints`: choose ``n`` breakpoints where the curve bends by greedy
  max-error insertion: start from the two ends, interpolate the breakpoints with PCHIP (the
  interpolant :class:`models.OcvCurve` uses), insert the grid point with the largest absolute
  error, repeat.  This is the classic adaptive piecewise-polynomial refinement (as in the
  Douglas-Peucker polyline simplification, Cartographica 10, 1973, applied to the interpolant's
  error rather than the chord distance).
"""
from __future__ import annotations

import numpy as np

from socfuse.models.ocv import OcvCurve
from socfuse.models.pchip import pchip

__all__ = ["isotonic_increasing", "greedy_breakpoints", "curve_from_dense", "whittaker_gcv", "MIN_STEP_V"]

#: smallest voltage step between neighbouring breakpoints after the monotone projection (V)
MIN_STEP_V = 1e-5


def isotonic_increasing(y, weights=None, min_step: float = 0.0) -> np.ndarray:
    """Weighted least-squares non-decreasing fit to ``y`` (pool adjacent violators).

    Parameters
    ----------
    y : array_like (n,)
    weights : array_like (n,), optional
        Positive weights (default 1).
    min_step : float
        After the projection, a ramp makes every step at least ``min_step`` (the result is then
        strictly increasing when ``min_step > 0``).

    Returns
    -------
    ndarray (n,)

    References
    ----------
    M. Ayer, H. D. Brunk, G. M. Ewing, W. T. Reid and E. Silverman, Ann. Math. Statist. 26 (1955)
    (the pool-adjacent-violators algorithm).
    R. E. Barlow et al., Statistical Inference under Order Restrictions, Wiley, 1972 (publisher from memory).
    """
    y = np.asarray(y, dtype=float)
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float)
    vals: list[float] = []
    wts: list[float] = []
    cnt: list[int] = []
    for yi, wi in zip(y, w):
        vals.append(yi)
        wts.append(wi)
        cnt.append(1)
        while len(vals) > 1 and vals[-2] > vals[-1]:
            v2, w2, c2 = vals.pop(), wts.pop(), cnt.pop()
            v1, w1, c1 = vals.pop(), wts.pop(), cnt.pop()
            wsum = w1 + w2
            vals.append((v1 * w1 + v2 * w2) / wsum)
            wts.append(wsum)
            cnt.append(c1 + c2)
    out = np.repeat(np.array(vals), np.array(cnt))
    if min_step > 0 and out.size > 1:
        # lift plateaus into gentle ramps: each step at least min_step
        steps = np.maximum(np.diff(out), min_step)
        out = out[0] + np.concatenate([[0.0], np.cumsum(steps)])
        out += float(np.mean(y) - np.mean(out))  # keep the level unbiased
    return out


def greedy_breakpoints(grid, values, n_breakpoints: int, tol_v: float = 0.0, n_even: int = 0) -> np.ndarray:
    """Indices into ``grid`` of ``n_breakpoints`` breakpoints chosen by greedy max-error insertion.

    With ``n_even`` > 0 the insertion starts from ``n_even`` evenly spaced points instead of the
    two ends, so a flat stretch (an LFP plateau, where a millivolt is several SOC points) keeps
    its share of breakpoints while the greedy ones go where the curve bends.

    Parameters
    ----------
    grid : ndarray (m,)
        Strictly increasing abscissa (SOC).
    values : ndarray (m,)
        Strictly increasing curve values.
    n_breakpoints : int
        Number of breakpoints wanted (>= 2, at most m).
    tol_v : float
        Stop early once the PCHIP interpolant of the breakpoints is within ``tol_v`` of the curve.
    n_even : int
        Evenly spaced starting points (0: the two ends only).

    Returns
    -------
    ndarray of int, sorted
    """
    grid = np.asarray(grid, dtype=float)
    values = np.asarray(values, dtype=float)
    m = grid.size
    n = int(min(max(n_breakpoints, 2), m))
    chosen = [0, m - 1]
    if n_even > 2:
        chosen = sorted(set(np.searchsorted(grid, np.linspace(grid[0], grid[-1], min(n_even, n))).clip(0, m - 1)
                            .tolist()) | {0, m - 1})
    while len(chosen) < n:
        idx = np.array(sorted(chosen))
        f = pchip(grid[idx], values[idx])
        err = np.abs(f(grid) - values)
        err[idx] = -1.0
        k = int(np.argmax(err))
        if err[k] <= tol_v:
            break
        chosen.append(k)
    return np.array(sorted(chosen))


def curve_from_dense(grid, values, n_breakpoints: int, source: str, tol_v: float = 0.0):
    """An :class:`~models.OcvCurve` from a dense curve: monotone projection, then breakpoints
    (half of them evenly spaced, half by greedy max-error insertion).

    Parameters
    ----------
    grid : array_like, shape (n,)
        SOC grid of the dense curve, fraction 0..1, increasing.
    values : array_like, shape (n,)
        Dense OCV on ``grid``, V (made non-decreasing by isotonic projection first).
    n_breakpoints : int
        Number of breakpoints of the returned curve.
    source : str
        Provenance text stored in the curve.
    tol_v : float
        Greedy insertion stops early when the largest error is at or below this, V.

    Returns
    -------
    curve : OcvCurve
    max_error_v : float
        Largest absolute difference between the curve's PCHIP and the monotone dense curve (V).
    """
    grid = np.asarray(grid, dtype=float)
    mono = isotonic_increasing(values, min_step=MIN_STEP_V)
    # half the breakpoints evenly spaced, half where the curve bends (greedy)
    idx = greedy_breakpoints(grid, mono, n_breakpoints, tol_v, n_even=(int(n_breakpoints) + 1) // 2)
    curve = OcvCurve(grid[idx], mono[idx], source=source)
    err = float(np.max(np.abs(curve.voltage(grid) - mono)))
    return curve, err


def whittaker_gcv(x, y, weights=None, lambdas=None):
    """Whittaker-Henderson smoother with its penalty chosen by generalised cross-validation.

    Minimises ``sum w_k (y_k - z_k)^2 + lambda sum (D2 z)_k^2`` where ``D2`` is the second
    divided difference over the (uneven) abscissae ``x`` (Whittaker, Proc. Edinburgh Math. Soc.
    41, 1923; Eilers, Anal. Chem. 75, 3631, 2003, "A perfect smoother"), and picks ``lambda``
    from a logarithmic grid by the GCV score ``m RSS / (m - tr H)^2`` (Craven and Wahba, Numer.
    Math. 31, 1979).  ``lambda -> 0`` returns the data, ``lambda -> inf`` their weighted
    straight line, so a table that is only noise becomes a line and a real trend is kept.

    Parameters
    ----------
    x : array_like (m,)
        Strictly increasing abscissae (e.g. SOC).
    y : array_like (m,)
        Values; NaN entries get weight 0 (filled by the smoother).
    weights : array_like (m,), optional
    lambdas : array_like, optional
        Candidate penalties (default ``10**linspace(-8, 2, 41)``, scaled by the x-range^4).

    Returns
    -------
    z : ndarray (m,)
    lam : float
        The chosen penalty (``nan`` when fewer than 4 finite values: ``y`` returned, NaNs
        filled linearly).

    References
    ----------
    E. T. Whittaker, "On a new method of graduation", Proc. Edinburgh Math. Soc. 41 (1923) (title from memory).
    P. H. C. Eilers, "A perfect smoother", Anal. Chem. 75 (2003) 3631.
    P. Craven and G. Wahba, "Smoothing noisy data with spline functions", Numer. Math. 31 (1979) (title from memory).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    m = x.size
    w = np.ones(m) if weights is None else np.asarray(weights, dtype=float).copy()
    good = np.isfinite(y)
    w[~good] = 0.0
    if np.count_nonzero(good) < 4 or m < 4:
        out = y.copy()
        if np.any(good) and not np.all(good):
            out = np.interp(x, x[good], y[good])
        return out, float("nan")
    yy = np.where(good, y, 0.0)
    # second divided differences on an uneven grid
    d = np.zeros((m - 2, m))
    for k in range(m - 2):
        h1, h2 = x[k + 1] - x[k], x[k + 2] - x[k + 1]
        d[k, k] = 2.0 / (h1 * (h1 + h2))
        d[k, k + 1] = -2.0 / (h1 * h2)
        d[k, k + 2] = 2.0 / (h2 * (h1 + h2))
    pen = d.T @ d
    span = float(x[-1] - x[0]) or 1.0
    lams = (10.0 ** np.linspace(-8, 2, 41)) * span ** 4 if lambdas is None else np.asarray(lambdas, dtype=float)
    wm = np.diag(w)
    n_eff = float(np.count_nonzero(good))
    best = None
    for lam in lams:
        a = wm + lam * pen
        try:
            hmat = np.linalg.solve(a, wm)
        except np.linalg.LinAlgError:
            continue
        z = hmat @ yy
        rss = float(np.sum(w * (yy - z) ** 2))
        tr = float(np.trace(hmat))
        if n_eff - tr <= 1e-9:
            continue
        score = n_eff * rss / (n_eff - tr) ** 2
        if best is None or score < best[0]:
            best = (score, z, float(lam))
    if best is None:
        return np.interp(x, x[good], y[good]), float("nan")
    return best[1], best[2]
