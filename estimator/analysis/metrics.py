"""Accuracy and consistency figures of one estimator run against a SOC reference.

Error figures (SOC error ``e_k = soc_k - soc_ref_k``, fractions in code, percent points here):

- ``rmse_pct = 100 sqrt(mean(e^2))``, ``mae_pct = 100 mean(|e|)``, ``max_abs_pct = 100 max |e|``,
  ``p95_abs_pct`` (the 95th percentile of ``|e|``, numpy's linear interpolation),
  ``final_abs_pct = 100 |e_N|`` -- plain sample statistics (every sample weighs the same; the
  recordings used here are evenly sampled).
- ``converge_s``: the first time (from the first sample) after which the error stays within
  ``band`` (default 0.02 = 2 points) apart from isolated excursions: the smallest ``t_j - t_0``
  such that ``|e_j| <= band``, the last sample is inside the band, and from ``t_j`` to the end
  the error is outside the band for at most ``1 - hold`` of the time (``hold`` = 0.99 by
  default; each sample's state holds until the next sample).  0 when the error starts inside
  and stays inside (bar excursions); ``None`` (an empty cell in ``summary.csv``) when the last
  sample is outside (an excursion still running at the end is not isolated).
- ``n_excursions``, ``excursion_s``: the excursions that ``converge_s`` forgives -- the runs of
  samples outside the band after ``converge_s``, how many and their total time, s (each lasts
  from its first outside sample to the next inside sample).  Blank when never converged.
- ``inside_3sigma``: the fraction of samples with ``|e| <= 3 soc_sigma`` (about 0.997 for a
  consistent Gaussian filter).  Only for methods that carry a filter's posterior sigma
  (:data:`SIGMA_METHODS`); the coulomb-counting baseline has no such sigma, so its coverage,
  NIS and NEES are blank (``nan``), never a flattering 100 %.

Consistency figures come from :mod:`estimator.consistency` (Bar-Shalom, Li, Kirubarajan 2001,
ch. 5.4): mean NIS of the voltage innovation with its chi-square 95 % band, and the SOC NEES
against the reference when the reference is the truth (simulated data).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from socfuse.estimator.analysis import consistency

__all__ = ["SocMetrics", "Excursion", "converge_time_s", "excursions", "error_metrics", "trace_metrics",
           "has_sigma", "METRIC_COLUMNS", "SIGMA_METHODS", "CONVERGE_BAND", "CONVERGE_HOLD"]

#: Columns of a metrics row, in summary.csv order (after recording, scenario, method).
METRIC_COLUMNS = ("rmse_pct", "max_abs_pct", "final_abs_pct", "converge_s", "mae_pct", "inside_3sigma",
                  "nis_mean", "nis_lo", "nis_hi", "nis_verdict", "nees_mean", "nees_lo", "nees_hi",
                  "n_gated", "n_reseeds", "n_samples", "duration_s", "p95_abs_pct", "n_excursions",
                  "excursion_s")

#: Methods whose ``soc_sigma`` is a filter's posterior standard deviation (coverage, NIS, NEES
#: are defined for them).  The coulomb baseline's sigma is a bookkeeping growth law, not a
#: posterior, so it gets none of the three.
SIGMA_METHODS = ("ekf", "ukf", "rts")

#: Half-width of the convergence band, fraction (2 SOC points).
CONVERGE_BAND = 0.02
#: Fraction of the time after ``converge_s`` the error must spend inside the band.
CONVERGE_HOLD = 0.99


@dataclass(frozen=True)
class SocMetrics:
    """Figures of one run (see the module docstring); ``nan``/``None`` where not defined."""

    rmse_pct: float
    max_abs_pct: float
    final_abs_pct: float
    converge_s: float | None
    mae_pct: float
    inside_3sigma: float
    nis_mean: float = math.nan
    nis_lo: float = math.nan
    nis_hi: float = math.nan
    nis_verdict: str = ""
    nees_mean: float = math.nan
    nees_lo: float = math.nan
    nees_hi: float = math.nan
    n_gated: int = 0
    n_reseeds: int = 0
    n_samples: int = 0
    duration_s: float = 0.0
    p95_abs_pct: float = math.nan
    n_excursions: int | None = None
    excursion_s: float | None = None

    def as_row(self) -> dict:
        """Plain dict in :data:`METRIC_COLUMNS` order."""
        d = asdict(self)
        return {k: d[k] for k in METRIC_COLUMNS}


@dataclass(frozen=True)
class Excursion:
    """One run of samples outside the band after convergence.

    Attributes
    ----------
    start_s, end_s : float
        Time of its first outside sample and of the next inside sample, s (same clock as the input).
    peak_pct : float
        Largest ``|error|`` during the excursion, percentage points.
    """

    start_s: float
    end_s: float
    peak_pct: float

    @property
    def duration_s(self) -> float:
        """Length of the excursion, s."""
        return self.end_s - self.start_s


def _outside(time_s, error, band):
    t = np.asarray(time_s, dtype=float)
    e = np.asarray(error, dtype=float)
    if t.shape != e.shape or t.ndim != 1:
        raise ValueError(f"metrics: time_s {t.shape} and error {e.shape} must be 1-D of one length")
    return t, e, ~(np.abs(e) <= band)  # NaN counts as outside


def converge_time_s(time_s, error, band: float = CONVERGE_BAND, hold: float = CONVERGE_HOLD) -> float | None:
    """Time from the start after which ``|error|`` stays within ``band``, bar isolated excursions.

    Parameters
    ----------
    time_s : array_like (N,)
        Sample times, s (increasing).
    error : array_like (N,)
        SOC error, fraction.  NaN samples count as outside the band.
    band : float
        Half-width of the band, fraction (0.02 = 2 SOC points).
    hold : float
        Fraction of the remaining time the error must spend inside the band (0 < hold <= 1;
        ``hold = 1`` is the strict "stays inside to the end").

    Returns
    -------
    float or None
        ``t_j - t_0`` for the first sample ``j`` that is inside the band and after which the error
        is outside for at most ``1 - hold`` of the time to the end (a sample's state holds until
        the next sample); ``None`` when the last sample is outside (never converged).
    """
    if not (0.0 < hold <= 1.0):
        raise ValueError(f"metrics: hold must be in (0, 1], got {hold}")
    t, e, out = _outside(time_s, error, band)
    if t.size == 0 or out[-1]:
        return None
    w = np.diff(t, append=t[-1])                    # time each sample's state lasts, s
    tail_out = np.cumsum((w * out)[::-1])[::-1]     # time outside from sample j to the end
    tail_all = t[-1] - t                            # time from sample j to the end
    slack = (1.0 - hold) * tail_all + 1e-9 * max(1.0, abs(t[-1]))
    ok = (~out) & (tail_out <= slack)
    return float(t[int(np.argmax(ok))] - t[0])      # ok[-1] is True: the last sample is inside


def excursions(time_s, error, band: float = CONVERGE_BAND, after_s: float | None = 0.0) -> list[Excursion]:
    """Runs of samples outside the band from ``after_s`` (time since the first sample) on.

    Parameters
    ----------
    time_s, error : array_like (N,)
        Sample times (s) and SOC error (fraction); NaN counts as outside.
    band : float
        Half-width of the band, fraction.
    after_s : float or None
        Start of the search, s after the first sample (normally ``converge_s``); ``None``: none.

    Returns
    -------
    list of Excursion
        Times on the input's clock.  An excursion still running at the end ends at the last sample.
    """
    if after_s is None:
        return []
    t, e, out = _outside(time_s, error, band)
    if t.size == 0:
        return []
    out = out & (t - t[0] >= after_s - 1e-9)
    d = np.diff(np.concatenate(([0], out.astype(np.int8), [0])))
    starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1)  # ends: first inside sample after
    res = []
    for a, b in zip(starts, ends):
        seg = np.abs(e[a:b])
        peak = float(np.nanmax(seg)) if np.any(np.isfinite(seg)) else math.nan
        res.append(Excursion(float(t[a]), float(t[min(b, t.size - 1)]), 100.0 * peak))
    return res


def error_metrics(time_s, soc, soc_ref, soc_sigma=None, band: float = CONVERGE_BAND,
                  hold: float = CONVERGE_HOLD) -> dict:
    """Error figures of a SOC estimate against a reference (module docstring).

    Parameters
    ----------
    time_s, soc, soc_ref : array_like (N,)
        Times (s), estimate and reference (fractions).  Samples where the reference is NaN are
        left out.
    soc_sigma : array_like (N,), optional
        The estimator's own posterior standard deviation (fraction) for ``inside_3sigma``;
        ``None`` for a method without one (then ``inside_3sigma`` is ``nan``).
    band : float
        Convergence band, fraction.
    hold : float
        Fraction of the time after convergence spent inside the band (:func:`converge_time_s`).

    Returns
    -------
    dict
        ``rmse_pct, mae_pct, max_abs_pct, p95_abs_pct, final_abs_pct`` (percentage points),
        ``converge_s`` (s or None), ``n_excursions``, ``excursion_s`` (s; None when never
        converged) and ``inside_3sigma`` (fraction or nan).
    """
    t = np.asarray(time_s, dtype=float)
    z = np.asarray(soc, dtype=float)
    r = np.asarray(soc_ref, dtype=float)
    if not (t.shape == z.shape == r.shape):
        raise ValueError(f"metrics: time_s {t.shape}, soc {z.shape} and soc_ref {r.shape} differ in shape")
    ok = np.isfinite(r)
    if not ok.any():
        raise ValueError("metrics: the reference has no finite sample")
    t, z, r = t[ok], z[ok], r[ok]
    e = z - r
    if not np.all(np.isfinite(e)):
        k = int(np.argmax(~np.isfinite(e)))
        raise ValueError(f"metrics: the estimate is not finite at sample {k} (t = {t[k]:g} s)")
    inside = math.nan
    if soc_sigma is not None:
        s = np.asarray(soc_sigma, dtype=float)[ok]
        if np.all(np.isfinite(s)):
            inside = float(np.mean(np.abs(e) <= 3.0 * s))
    conv = converge_time_s(t, e, band, hold)
    exc = excursions(t, e, band, conv)
    a = np.abs(e)
    return {
        "rmse_pct": 100.0 * float(np.sqrt(np.mean(e ** 2))),
        "mae_pct": 100.0 * float(np.mean(a)),
        "max_abs_pct": 100.0 * float(np.max(a)),
        "p95_abs_pct": 100.0 * float(np.percentile(a, 95.0)),
        "final_abs_pct": 100.0 * float(a[-1]),
        "converge_s": conv,
        "n_excursions": None if conv is None else len(exc),
        "excursion_s": None if conv is None else float(sum(x.duration_s for x in exc)),
        "inside_3sigma": inside,
    }


def has_sigma(trace) -> bool:
    """True when ``trace.method`` carries a filter's posterior sigma (:data:`SIGMA_METHODS`).

    Parameters
    ----------
    trace : Trace
        Any estimator's trace (only its ``method`` is read).

    Returns
    -------
    bool
        True for the EKF, UKF and smoother; False for the coulomb baseline, whose sigma is a
        bookkeeping growth law, so coverage, NIS and NEES are not defined for it.
    """
    return str(getattr(trace, "method", "")).lower() in SIGMA_METHODS


def trace_metrics(trace, soc_ref=None, soc_true=None, band: float = CONVERGE_BAND, confidence: float = 0.95,
                  hold: float = CONVERGE_HOLD) -> SocMetrics:
    """All figures of one :class:`estimator.trace.Trace`.

    Parameters
    ----------
    trace : Trace
    soc_ref : array_like (N,), optional
        Reference SOC (fraction); default ``trace.soc_ref``.
    soc_true : array_like (N,), optional
        The true SOC when known (simulated data) for the NEES; ``None``: no NEES.
    band : float
        Convergence band, fraction.
    confidence : float
        Probability of the chi-square bands.
    hold : float
        Fraction of the time after convergence spent inside the band.

    Returns
    -------
    SocMetrics
        Coverage, NIS and NEES only for :data:`SIGMA_METHODS` (``nan`` otherwise).
    """
    ref = trace.soc_ref if soc_ref is None else soc_ref
    if ref is None:
        raise ValueError(f"metrics: trace {trace.name!r} ({trace.method}) has no SOC reference")
    sigma_ok = has_sigma(trace)
    err = error_metrics(trace.time_s, trace.soc, ref, trace.soc_sigma if sigma_ok else None, band, hold)
    nis = dict(nis_mean=math.nan, nis_lo=math.nan, nis_hi=math.nan, nis_verdict="")
    if sigma_ok:
        try:
            r = consistency.nis_summary(trace, confidence)
            nis = dict(nis_mean=r.mean, nis_lo=r.band_lo, nis_hi=r.band_hi, nis_verdict=r.verdict)
        except consistency.ConsistencyError:  # no usable innovation (e.g. no voltage samples)
            pass
    nees = dict(nees_mean=math.nan, nees_lo=math.nan, nees_hi=math.nan)
    if soc_true is not None and sigma_ok:
        try:
            r = consistency.nees_soc(trace, soc_true, confidence)
            nees = dict(nees_mean=r.mean, nees_lo=r.band_lo, nees_hi=r.band_hi)
        except consistency.ConsistencyError:
            pass
    t = np.asarray(trace.time_s, dtype=float)
    return SocMetrics(**err, **nis, **nees, n_gated=int(getattr(trace, "n_gated", 0) or 0),
                      n_reseeds=len(getattr(trace, "reseeds", ()) or ()), n_samples=int(t.size),
                      duration_s=float(t[-1] - t[0]) if t.size else 0.0)
