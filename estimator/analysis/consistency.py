"""Filter consistency: normalised innovation (NIS) and estimation-error (NEES) statistics.

The tests follow Bar-Shalom, Li and Kirubarajan, *Estimation with Applications to Tracking and
Navigation* (Wiley, 2001), chapter 5.4: for a consistent filter the normalised innovation
squared ``eps_nu,k = nu_k^T S_k^-1 nu_k`` of an ``m``-dimensional measurement is chi-square
with ``m`` degrees of freedom, and the time average over ``N`` samples satisfies::

    N * mean(eps) ~ chi2(N * m)

so the two-sided ``1 - alpha`` acceptance band of the *mean* is::

    [chi2.ppf(alpha/2, N m) / N,  chi2.ppf(1 - alpha/2, N m) / N].

The same holds for the normalised estimation error squared ``e^T P^-1 e`` (NEES) of an
``n``-dimensional state when the truth is known (simulation, or a lab reference).  Both
statistics assume the innovations are white; a filter that is mistuned or whose model is wrong
gives correlated innovations, which :func:`innovation_autocorrelation` exposes (the normalised
sample autocorrelation, whose 95 % band is about ``+-1.96/sqrt(N)``, same chapter).

Correlated innovations.  An equivalent-circuit filter on a real cell leaves time-correlated
innovations (the model's voltage error persists), and then the band above, which assumes
independent samples, is far too narrow and its verdict means nothing.  :func:`consistency_test`
therefore also runs the whiteness test on the lag-1 autocorrelation ``rho`` of the normalised
residuals (same chapter; 95 % band ``+-1.96/sqrt(N)``) and reports an effective sample count
``N_eff = N (1 - rho^2) / (1 + rho^2)`` for the mean of the squares (the variance-inflation
factor of the mean of a first-order autoregressive sequence, whose squares have lag-j
correlation ``rho^(2j)``; Bartlett, J. R. Stat. Soc. Suppl. 8 (1946) 27-41, cited from memory)
with the band at ``N_eff``.  The verdict is ``"correlated"`` (never ``"consistent"``) when the
whiteness test fails and the mean lies inside that wider band.

On long recordings (a day at 1 Hz is 86 400 samples) the band around 1 becomes very narrow
(about +-0.01), so only a filter whose model matches the cell closely passes; the fraction of
samples inside the +-3 sigma bound (about 99.7 % for a Gaussian) is reported beside it as a
more forgiving figure.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = [
    "ConsistencyResult", "chi2_band", "chi2_band_effective", "consistency_test", "nis_test", "nees_test", "nis_summary",
    "nees_soc", "innovation_autocorrelation", "pooled_nis", "EnsembleConsistency", "nees_ensemble",
]

#: Fraction of a Gaussian inside +-3 sigma (about 0.9973); printed beside ``inside_3sigma``.
GAUSS_3SIGMA = float(stats.norm.cdf(3.0) - stats.norm.cdf(-3.0))


class ConsistencyError(ValueError):
    """Inputs that cannot be tested (shape mismatch, no finite samples, non-positive variance)."""


@dataclass(frozen=True)
class ConsistencyResult:
    """Result of a time-averaged chi-square consistency test.

    Attributes
    ----------
    statistic : str
        ``"NIS"`` or ``"NEES"``.
    n_samples : int
        Number of samples used (finite value and positive variance).
    dim : int
        Dimension of each sample (1 for the scalar voltage innovation or the SOC error).
    mean : float
        Time-averaged normalised squared value (expected 1 per degree of freedom x ``dim``).
    band_lo, band_hi : float
        Two-sided acceptance band of ``mean`` at ``confidence`` (Bar-Shalom et al. 2001, ch. 5).
    confidence : float
        Band probability, e.g. 0.95.
    inside_3sigma : float
        Fraction of samples with ``|value| <= 3 sigma`` (scalar case: ``eps <= 9``); about 0.997
        for a consistent Gaussian filter.
    n_excluded : int
        Samples skipped (NaN innovation of a predict-only step, non-positive variance).
    """

    statistic: str
    n_samples: int
    dim: int
    mean: float
    band_lo: float
    band_hi: float
    confidence: float
    inside_3sigma: float
    n_excluded: int = 0
    lag1_autocorr: float = float("nan")
    whiteness_band: float = float("nan")
    n_effective: float = float("nan")
    band_lo_eff: float = float("nan")
    band_hi_eff: float = float("nan")

    @property
    def white(self) -> bool | None:
        """Whiteness test at lag 1: ``|rho| <= 1.96 / sqrt(N)``; None when not tested (N < 20)."""
        if not np.isfinite(self.lag1_autocorr):
            return None
        return bool(abs(self.lag1_autocorr) <= self.whiteness_band)

    @property
    def passed(self) -> bool:
        """True when ``mean`` lies inside the chi-square band and the residuals pass the whiteness
        test (when it was run)."""
        return bool(self.band_lo <= self.mean <= self.band_hi) and self.white is not False

    @property
    def verdict(self) -> str:
        """``"consistent"``, ``"overconfident"`` (mean above the band: the filter's sigma is too
        small), ``"pessimistic"`` (mean below the band: sigma too large) or ``"correlated"``
        (residuals fail the whiteness test; the mean is inside the band at the effective sample
        count, or inside the ordinary band).  With correlated residuals the bands are judged at
        ``n_effective``."""
        white = self.white
        lo, hi = self.band_lo, self.band_hi
        if white is False and np.isfinite(self.band_lo_eff):
            lo, hi = self.band_lo_eff, self.band_hi_eff
        if self.mean > hi:
            return "overconfident"
        if self.mean < lo:
            return "pessimistic"
        return "correlated" if white is False else "consistent"

    def as_dict(self) -> dict:
        """Plain dict (for tables and JSON), including ``passed`` and ``verdict``."""
        return {"statistic": self.statistic, "n_samples": self.n_samples, "dim": self.dim,
                "mean": self.mean, "band_lo": self.band_lo, "band_hi": self.band_hi,
                "confidence": self.confidence, "inside_3sigma": self.inside_3sigma,
                "n_excluded": self.n_excluded, "lag1_autocorr": self.lag1_autocorr,
                "whiteness_band": self.whiteness_band, "n_effective": self.n_effective,
                "band_lo_eff": self.band_lo_eff, "band_hi_eff": self.band_hi_eff,
                "passed": self.passed, "verdict": self.verdict}

    def describe(self) -> str:
        """One line for CLI output, e.g. ``mean NIS 1.02 (95 % band 0.98..1.02, n=8000): consistent``."""
        white = ""
        if self.white is False:
            white = (f"; residuals correlated (lag-1 {self.lag1_autocorr:.3f}, white band +-{self.whiteness_band:.3g}; "
                     f"effective n {self.n_effective:.0f}, band {self.band_lo_eff:.4g}..{self.band_hi_eff:.4g})")
        return (f"mean {self.statistic} {self.mean:.4g} ({100 * self.confidence:.0f} % band "
                f"{self.band_lo:.4g}..{self.band_hi:.4g}, n={self.n_samples}): {self.verdict}; "
                f"{100 * self.inside_3sigma:.2f} % inside +-3 sigma (Gaussian {100 * GAUSS_3SIGMA:.2f} %){white}")


def chi2_band(n_samples: int, dim: int = 1, confidence: float = 0.95) -> tuple[float, float]:
    """Two-sided band of the time-averaged normalised squared value.

    Parameters
    ----------
    n_samples : int
        Number of time samples ``N`` (>= 1).
    dim : int
        Degrees of freedom per sample ``m``.
    confidence : float
        Probability inside the band (0 < confidence < 1).

    Returns
    -------
    (lo, hi) : tuple of float
        ``chi2.ppf((1 -+ confidence)/2, N m) / N`` (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4).

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    if n_samples < 1:
        raise ConsistencyError(f"need at least one sample for a chi-square band, got {n_samples}")
    if dim < 1:
        raise ConsistencyError(f"dim must be >= 1, got {dim}")
    if not (0.0 < confidence < 1.0):
        raise ConsistencyError(f"confidence must lie in (0, 1), got {confidence}")
    dof = n_samples * dim
    alpha = 1.0 - confidence
    lo = stats.chi2.ppf(0.5 * alpha, dof) / n_samples
    hi = stats.chi2.ppf(1.0 - 0.5 * alpha, dof) / n_samples
    return float(lo), float(hi)


def consistency_test(value, variance, statistic: str = "NIS", confidence: float = 0.95) -> ConsistencyResult:
    """Time-averaged chi-square test of scalar residuals against their claimed variance.

    Parameters
    ----------
    value : array_like (N,)
        Residuals: innovations (V) for NIS, estimation errors for NEES.  NaN entries (for example
        predict-only steps) are skipped and counted in ``n_excluded``.
    variance : array_like (N,)
        The filter's claimed variance of each residual (``S_k`` for NIS, ``P_k`` for NEES), in the
        square of the unit of ``value``.  Entries that are not finite and positive are skipped.
    statistic : str
        Label, ``"NIS"`` or ``"NEES"``.
    confidence : float
        Band probability.

    Returns
    -------
    ConsistencyResult

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    v = np.asarray(value, dtype=float).ravel()
    s = np.asarray(variance, dtype=float).ravel()
    if v.shape != s.shape:
        raise ConsistencyError(f"{statistic}: {v.size} residuals but {s.size} variances")
    ok = np.isfinite(v) & np.isfinite(s) & (s > 0)
    n = int(ok.sum())
    if n == 0:
        raise ConsistencyError(f"{statistic}: no sample with a finite residual and a positive variance")
    eps = v[ok] ** 2 / s[ok]
    lo, hi = chi2_band(n, 1, confidence)
    rho = wband = n_eff = lo_e = hi_e = float("nan")
    if n >= 20:
        rho, n_eff = _lag1(v, s, ok)
        wband = float(stats.norm.ppf(0.5 + 0.5 * confidence) / np.sqrt(n))
        lo_e, hi_e = chi2_band_effective(n_eff, confidence)
    return ConsistencyResult(statistic=statistic, n_samples=n, dim=1, mean=float(eps.mean()),
                             band_lo=lo, band_hi=hi, confidence=float(confidence),
                             inside_3sigma=float(np.mean(eps <= 9.0)), n_excluded=int(v.size - n),
                             lag1_autocorr=rho, whiteness_band=wband, n_effective=n_eff,
                             band_lo_eff=lo_e, band_hi_eff=hi_e)


def _lag1(v, s, ok):
    """Lag-1 autocorrelation of ``v / sqrt(s)`` over consecutive valid pairs and ``N_eff``."""
    e = np.where(ok, v / np.sqrt(np.where(ok, s, 1.0)), 0.0)
    pair = ok[1:] & ok[:-1]
    a, b = e[:-1][pair], e[1:][pair]
    den = float(np.sqrt(np.sum(a * a) * np.sum(b * b)))
    rho = float(np.sum(a * b) / den) if den > 0 and a.size > 1 else 0.0
    r2 = min(rho * rho, 0.999999)
    n = int(ok.sum())
    return rho, float(max(1.0, n * (1.0 - r2) / (1.0 + r2)))


def chi2_band_effective(n_effective: float, confidence: float = 0.95) -> tuple[float, float]:
    """Band of the time average at a (non-integer) effective sample count ``N_eff``.

    ``chi2.ppf((1 -+ confidence)/2, N_eff) / N_eff`` (the chi-square distribution with
    ``N_eff`` degrees of freedom, scipy accepts real values); used for correlated residuals.

    Parameters
    ----------
    n_effective : float
        Effective number of independent samples (> 0, need not be an integer).
    confidence : float
        Band probability, e.g. 0.95.

    Returns
    -------
    lo, hi : float
        Band of the time-averaged normalised squared value.

    Raises
    ------
    ConsistencyError
        When ``n_effective`` is not positive.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    if not (n_effective > 0):
        raise ConsistencyError(f"effective sample count must be > 0, got {n_effective}")
    alpha = 1.0 - confidence
    return (float(stats.chi2.ppf(0.5 * alpha, n_effective) / n_effective),
            float(stats.chi2.ppf(1.0 - 0.5 * alpha, n_effective) / n_effective))


def nis_test(innovation_v, innovation_var_v2, confidence: float = 0.95) -> ConsistencyResult:
    """NIS test of voltage innovations (V) against their predicted variance ``S`` (V^2).

    Parameters
    ----------
    innovation_v : array_like, shape (N,)
        Voltage innovations, V.
    innovation_var_v2 : array_like, shape (N,)
        Their predicted variances, V^2.
    confidence : float
        Band probability, e.g. 0.95.

    Returns
    -------
    ConsistencyResult
        ``statistic="NIS"``.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    return consistency_test(innovation_v, innovation_var_v2, "NIS", confidence)


def nees_test(error, variance, confidence: float = 0.95) -> ConsistencyResult:
    """NEES test of a scalar estimation error against the filter's variance.

    Parameters
    ----------
    error : array_like, shape (N,)
        Estimation error in the state's unit (SOC: fraction).
    variance : array_like, shape (N,)
        The filter's variance of that state, squared unit.
    confidence : float
        Band probability, e.g. 0.95.

    Returns
    -------
    ConsistencyResult
        ``statistic="NEES"``.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    return consistency_test(error, variance, "NEES", confidence)


def nis_summary(trace, confidence: float = 0.95, skip_s: float = 0.0) -> ConsistencyResult:
    """NIS test of one :class:`estimator.trace.Trace` (uses ``innovation_v``, ``innovation_var_v2``).

    Parameters
    ----------
    trace : Trace
    confidence : float
    skip_s : float
        Leave out the first ``skip_s`` seconds (initial transient), default none.

    Returns
    -------
    ConsistencyResult
        ``statistic="NIS"`` over the samples after ``skip_s``.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    keep = _after(trace.time_s, skip_s)
    return nis_test(np.asarray(trace.innovation_v)[keep], np.asarray(trace.innovation_var_v2)[keep], confidence)


def pooled_nis(traces, confidence: float = 0.95, skip_s: float = 0.0) -> ConsistencyResult:
    """NIS test over several traces pooled (all samples of all recordings in one average).

    Parameters
    ----------
    traces : iterable of Trace
        Uses ``innovation_v`` (V) and ``innovation_var_v2`` (V^2) of each.
    confidence : float
        Band probability, e.g. 0.95.
    skip_s : float
        Leave out the first ``skip_s`` seconds of each trace.

    Returns
    -------
    ConsistencyResult
        ``statistic="NIS"`` over all kept samples.

    Raises
    ------
    ConsistencyError
        When no trace is given.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    vals, vars_ = [], []
    for tr in traces:
        keep = _after(tr.time_s, skip_s)
        vals.append(np.asarray(tr.innovation_v)[keep])
        vars_.append(np.asarray(tr.innovation_var_v2)[keep])
    if not vals:
        raise ConsistencyError("NIS: no traces given")
    return nis_test(np.concatenate(vals), np.concatenate(vars_), confidence)


def nees_soc(trace, soc_true=None, confidence: float = 0.95, skip_s: float = 0.0) -> ConsistencyResult:
    """NEES of the SOC state: ``(soc - soc_true)^2 / soc_sigma^2`` averaged over time.

    Parameters
    ----------
    trace : Trace
        Uses ``soc`` and ``soc_sigma`` (fractions).
    soc_true : array_like (N,), optional
        True SOC (fraction).  Default: ``trace.soc_ref``.  A lab reference from an amp-hour
        counter carries its own error, so a NEES against it is only indicative.
    confidence : float
    skip_s : float
        Leave out the first ``skip_s`` seconds.

    Returns
    -------
    ConsistencyResult
        ``statistic="NEES"`` over the samples after ``skip_s``.

    Raises
    ------
    ConsistencyError
        Without a true SOC, or when its length differs from the trace's.

    Notes
    -----
    The band assumes independent samples.  SOC errors of one run are strongly correlated in
    time (the SOC is a slow state), so on one run the time-averaged NEES scatters much more
    than the band says; it is a rough indicator.  The rigorous form is over independent runs,
    :func:`nees_ensemble` (Bar-Shalom et al. 2001, ch. 5.4 use Monte Carlo runs).

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    if soc_true is None:
        soc_true = getattr(trace, "soc_ref", None)
        if soc_true is None:
            raise ConsistencyError("NEES needs the true SOC: give soc_true or a trace with soc_ref")
    soc = np.asarray(trace.soc, dtype=float)
    truth = np.asarray(soc_true, dtype=float)
    if truth.shape != soc.shape:
        raise ConsistencyError(f"NEES: trace has {soc.size} samples but soc_true has {truth.size}")
    keep = _after(trace.time_s, skip_s)
    sigma = np.asarray(trace.soc_sigma, dtype=float)
    return nees_test((soc - truth)[keep], (sigma ** 2)[keep], confidence)


@dataclass(frozen=True)
class EnsembleConsistency:
    """NEES (or NIS) over ``M`` independent Monte Carlo runs, tested at each time step.

    Attributes
    ----------
    statistic : str
    n_runs, n_steps : int
    mean : float
        Average over all runs and steps.
    band_lo, band_hi : float
        95 % (``confidence``) band of the run-average at one step: ``chi2.ppf(., M dim) / M``.
    fraction_in_band : float
        Fraction of time steps whose run-average lies in the band (about ``confidence`` for a
        consistent filter).
    confidence : float
    dim : int
    """

    statistic: str
    n_runs: int
    n_steps: int
    mean: float
    band_lo: float
    band_hi: float
    fraction_in_band: float
    confidence: float
    dim: int = 1

    @property
    def passed(self) -> bool:
        """True when at least ``confidence - 0.05`` of the steps lie in the band (a common
        allowance for finite samples; common practice, no source)."""
        return bool(self.fraction_in_band >= self.confidence - 0.05)


def nees_ensemble(errors, variances, confidence: float = 0.95, statistic: str = "NEES") -> EnsembleConsistency:
    """Monte Carlo NEES test of a scalar state (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4).

    Parameters
    ----------
    errors : array_like (M, N)
        Estimation error of ``M`` independent runs at ``N`` common steps (e.g. SOC fraction).
    variances : array_like (M, N)
        The filter's variance of each error.
    confidence : float
        Band probability, e.g. 0.95.
    statistic : str
        Name used in the result and in error messages (``"NEES"``, or ``"NIS"`` for innovations).

    Returns
    -------
    EnsembleConsistency
        At each step ``M * mean_runs(e^2/P) ~ chi2(M)``.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4.
    """
    e = np.asarray(errors, dtype=float)
    p = np.asarray(variances, dtype=float)
    if e.ndim != 2 or e.shape != p.shape:
        raise ConsistencyError(f"{statistic} ensemble: errors {e.shape} and variances {p.shape} must be equal (M, N)")
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(p)) and np.all(p > 0)):
        raise ConsistencyError(f"{statistic} ensemble: errors must be finite and variances positive")
    m = e.shape[0]
    eps = e ** 2 / p
    per_step = eps.mean(axis=0)
    lo, hi = chi2_band(m, 1, confidence)
    inside = (per_step >= lo) & (per_step <= hi)
    return EnsembleConsistency(statistic, m, e.shape[1], float(eps.mean()), lo, hi, float(inside.mean()),
                               float(confidence))


def innovation_autocorrelation(innovation_v, innovation_var_v2, max_lag: int = 20):
    """Normalised sample autocorrelation of the normalised innovations, lags 1..max_lag.

    ``rho(l) = sum_k e_k e_{k+l} / sqrt(sum e_k^2 sum e_{k+l}^2)`` with ``e = nu / sqrt(S)``
    (Bar-Shalom et al. 2001, ch. 5.4, whiteness test).  For white innovations each ``rho(l)`` is
    approximately normal with standard deviation ``1/sqrt(N)``; NaN samples count as zero.

    Parameters
    ----------
    innovation_v : array_like, shape (N,)
        Voltage innovations, V.
    innovation_var_v2 : array_like, shape (N,)
        Their predicted variances, V^2.
    max_lag : int
        Largest lag, samples.

    Returns
    -------
    lags : ndarray (max_lag,)
    rho : ndarray (max_lag,)
    band : float
        Two-sided 95 % half-width ``1.96 / sqrt(N)``.

    References
    ----------
    Y. Bar-Shalom, X. R. Li and T. Kirubarajan, Estimation with Applications to Tracking and
    Navigation, Wiley, 2001, ch. 5.4 (whiteness test).
    """
    v = np.asarray(innovation_v, dtype=float)
    s = np.asarray(innovation_var_v2, dtype=float)
    ok = np.isfinite(v) & np.isfinite(s) & (s > 0)
    e = np.where(ok, v / np.sqrt(np.where(ok, s, 1.0)), 0.0)
    n = int(ok.sum())
    if n <= max_lag:
        raise ConsistencyError(f"whiteness test: {n} samples, need more than max_lag={max_lag}")
    lags = np.arange(1, max_lag + 1)
    rho = np.empty(max_lag)
    for j, lag in enumerate(lags):
        a, b = e[:-lag], e[lag:]
        rho[j] = np.sum(a * b) / np.sqrt(np.sum(a * a) * np.sum(b * b))
    return lags, rho, float(stats.norm.ppf(0.975) / np.sqrt(n))


def _after(time_s, skip_s: float):
    t = np.asarray(time_s, dtype=float)
    if skip_s <= 0 or t.size == 0:
        return np.ones(t.shape, dtype=bool)
    return t >= t[0] + skip_s
