"""Accuracy and consistency figures of one estimator run against a SOC reference.

Error figures (SOC error ``e_k = soc_k - soc_ref_k``, fractions in code, percent points here):

- ``rmse_pct = 100 sqrt(mean(e^2))``, ``mae_pct = 100 mean(|e|)``, ``max_abs_pct = 100 max |e|``,
  ``final_abs_pct = 100 |e_N|`` -- plain sample statistics (every sample weighs the same; the
  recordings used here are evenly sampled).
- ``converge_s``: the time from the first sample until ``|e|`` stays within ``band`` (default
  0.02 = 2 points) to the end: ``t_j - t_0`` with ``j`` the sample after the last one outside the
  band; 0 when the error never leaves it; ``None`` (an empty cell in ``summary.csv``) when the
  last sample is outside.
- ``inside_3sigma``: the fraction of samples with ``|e| <= 3 soc_sigma`` (about 0.997 for a
  consistent Gaussian filter).

Consistency figures come from :mod:`estimator.consistency` (Bar-Shalom, Li, Kirubarajan 2001,
ch. 5.4): mean NIS of the voltage innovation with its chi-square 95 % band, and the SOC NEES
against the reference when the reference is the truth (simulated data).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from socfuse.estimator.analysis import consistency

__all__ = ["SocMetrics", "converge_time_s", "error_metrics", "trace_metrics", "METRIC_COLUMNS"]

#: Columns of a metrics row, in summary.csv order (after recording, scenario, method).
METRIC_COLUMNS = ("rmse_pct", "max_abs_pct", "final_abs_pct", "converge_s", "mae_pct", "inside_3sigma",
                  "nis_mean", "nis_lo", "nis_hi", "nis_verdict", "nees_mean", "nees_lo", "nees_hi",
                  "n_gated", "n_reseeds", "n_samples", "duration_s")


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

    def as_row(self) -> dict:
        """Plain dict in :data:`METRIC_COLUMNS` order."""
        d = asdict(self)
        return {k: d[k] for k in METRIC_COLUMNS}


def converge_time_s(time_s, error, band: float = 0.02) -> float | None:
    """Time from the start until ``|error|`` stays within ``band`` to the end.

    Parameters
    ----------
    time_s : array_like (N,)
        Sample times, s.
    error : array_like (N,)
        SOC error, fraction.  NaN samples count as outside the band.
    band : float
        Half-width of the band, fraction (0.02 = 2 SOC points).

    Returns
    -------
    float or None
        ``t_j - t_0`` for the first ``j`` after which every sample is inside; 0.0 when all are;
        ``None`` when the last sample is outside (never converged).
    """
    t = np.asarray(time_s, dtype=float)
    e = np.asarray(error, dtype=float)
    outside = ~(np.abs(e) <= band)
    if not outside.any():
        return 0.0
    last = int(np.flatnonzero(outside)[-1])
    if last == e.size - 1:
        return None
    return float(t[last + 1] - t[0])


def error_metrics(time_s, soc, soc_ref, soc_sigma=None, band: float = 0.02) -> dict:
    """Error figures of a SOC estimate against a reference (module docstring).

    Parameters
    ----------
    time_s, soc, soc_ref : array_like (N,)
        Times (s), estimate and reference (fractions).  Samples where the reference is NaN are
        left out.
    soc_sigma : array_like (N,), optional
        The estimator's own standard deviation (fraction) for ``inside_3sigma``.
    band : float
        Convergence band, fraction.

    Returns
    -------
    dict
        ``rmse_pct, mae_pct, max_abs_pct, final_abs_pct, converge_s, inside_3sigma``.
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
    return {
        "rmse_pct": 100.0 * float(np.sqrt(np.mean(e ** 2))),
        "mae_pct": 100.0 * float(np.mean(np.abs(e))),
        "max_abs_pct": 100.0 * float(np.max(np.abs(e))),
        "final_abs_pct": 100.0 * float(abs(e[-1])),
        "converge_s": converge_time_s(t, e, band),
        "inside_3sigma": inside,
    }


def trace_metrics(trace, soc_ref=None, soc_true=None, band: float = 0.02, confidence: float = 0.95) -> SocMetrics:
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
    """
    ref = trace.soc_ref if soc_ref is None else soc_ref
    if ref is None:
        raise ValueError(f"metrics: trace {trace.name!r} ({trace.method}) has no SOC reference")
    err = error_metrics(trace.time_s, trace.soc, ref, trace.soc_sigma, band)
    nis = dict(nis_mean=math.nan, nis_lo=math.nan, nis_hi=math.nan, nis_verdict="")
    try:
        r = consistency.nis_summary(trace, confidence)
        nis = dict(nis_mean=r.mean, nis_lo=r.band_lo, nis_hi=r.band_hi, nis_verdict=r.verdict)
    except (ValueError, TypeError, AttributeError):  # no innovations (e.g. the coulomb baseline)
        pass
    nees = dict(nees_mean=math.nan, nees_lo=math.nan, nees_hi=math.nan)
    if soc_true is not None:
        try:
            r = consistency.nees_soc(trace, soc_true, confidence)
            nees = dict(nees_mean=r.mean, nees_lo=r.band_lo, nees_hi=r.band_hi)
        except (ValueError, TypeError, AttributeError):
            pass
    t = np.asarray(trace.time_s, dtype=float)
    return SocMetrics(**err, **nis, **nees, n_gated=int(getattr(trace, "n_gated", 0) or 0),
                      n_reseeds=len(getattr(trace, "reseeds", ()) or ()), n_samples=int(t.size),
                      duration_s=float(t[-1] - t[0]) if t.size else 0.0)
