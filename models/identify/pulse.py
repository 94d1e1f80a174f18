"""Pulse (HPPC-style) test: pulse detection, R0, RC relaxation fits, tables, DOE/INL power table.

The test layout follows the hybrid pulse power characterisation of the US DOE battery test
manuals (FreedomCAR Battery Test Manual for Power-Assist Hybrid Electric Vehicles,
DOE/ID-11069, INEEL 2003, and its INL successors): at each SOC level a rested cell gets short
discharge (and optionally regen/charge) pulses separated by rests, then a constant-current
discharge moves it to the next level.  Nothing here needs hand-entered indices:

Detection (:func:`detect_pulses`)
    Samples with ``|i| > threshold`` are active.  Active runs are split where the sign flips or
    the current jumps by more than 20 %.  A run no longer than ``max_pulse_s`` is a pulse; longer
    runs are "moves" between SOC levels.  Works at any (also uneven) sample interval; time
    intervals longer than ``gap_s`` are gaps (the recording was cut) and end a rest.

SOC placement
    Each sample's SOC comes from the recording's ``soc_ref`` column when it has one, else from a
    cycler amp-hour counter kept by the loader (``metadata["extras"]``), else by counting charge
    from ``soc0`` (full) with the given capacity.  A lab file that omits the discharges between
    pulse sets (the Panasonic 18650PF HPPC file) must use ``soc_ref`` or the counter.

R0 ("instantaneous" step)
    At each pulse edge: the last sample before the edge and the first sample after it,
    ``R0 = -dV / dI``.  The reported ``r0_edge_ohm`` is the mean of the two edges.  The sample
    interval matters: during that one interval the RC pairs already charge by about
    ``sum_j R_j dt / (2 tau_j)`` (under the sampling rule's interval-mean current), so at
    ``dt = 1 s`` and ``tau1 = 10 s`` the raw step is 5 % of ``R1`` too high.  ``r0_ohm``
    subtracts exactly that contribution (and the OCV change over the interval) using the fitted
    RC pairs, so the model's own simulation reproduces the measured edge.

RC pairs (:func:`fit_relaxation`)
    The rest after a pulse is ``v(t) = v_inf - sum_j A_j exp(-(t - t_b)/tau_j)`` (exact for a
    linear RC network at zero current).  Fitted by ``scipy.optimize.least_squares`` over
    ``log tau`` with ``v_inf`` and ``A_j`` solved linearly inside (variable projection; Golub and
    Pereyra, SIAM J. Numer. Anal. 10, 1973), starting from a grid search.  ``A_j`` is converted
    to ``R_j = A_j / g_j``, ``g_j`` = the unit-resistance RC voltage at the start of the rest
    computed from the recorded current history with the sampling rule (for a rectangular pulse
    of current I and length T from rest, ``g = I (1 - exp(-T/tau))``).  One or two pairs are
    chosen by the Bayesian information criterion (Schwarz, Ann. Statist. 6, 1978), with the
    two-pair model taken only on "very strong" evidence (median BIC drop > 10; Kass and Raftery,
    JASA 90, 1995) unless ``rc_pairs`` is given.

Power table (:func:`pulse_power_table`)
    Definitions as in the FreedomCAR manual (recalled from memory; sections on the HPPC test
    and its analysis): pulse resistance ``R = |dV / dI|`` between the sample before the pulse and
    the last sample of the pulse; discharge pulse power capability
    ``P_dis = V_min (OCV - V_min) / R_dis``; regen pulse power capability
    ``P_regen = V_max (V_max - OCV) / R_regen``; ``OCV`` = the rested voltage before the pulse.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording, RecordingError, charge_throughput_ah
from socfuse.models.segment import segment_recording
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import RcPair
from socfuse.models.identify.curves import whittaker_gcv
from socfuse.models.identify.fastsim import unit_rc_response

__all__ = [
    "PulseError", "RelaxationFit", "fit_relaxation", "rc_from_rectangular_pulse", "relaxation_curve",
    "Pulse", "detect_pulses", "PulseFit", "PulseTestResult", "identify_pulse_test", "choose_rc_pairs",
    "pulse_tables", "pulse_power_table", "PowerRow", "pulse_resistance", "discharge_power_w", "regen_power_w",
    "rest_points", "pulse_soc",
]

#: voltage floor for the information criterion (V): a noiseless fit does not get infinite evidence
RSS_FLOOR_V = 1e-6
#: BIC drop needed for the two-pair model ("very strong", Kass and Raftery 1995)
BIC_MARGIN = 10.0


class PulseError(RecordingError):
    """A pulse test that cannot be used; the message names the recording and what is missing."""


# ============================================================================ relaxation fits
@dataclass(frozen=True)
class RelaxationFit:
    """Fit of ``v(t) = v_inf - sum_j A_j exp(-(t - t0)/tau_j)`` to one rest.

    Attributes
    ----------
    v_inf_v : float
        Asymptote (V).
    amplitude_v : tuple of float
        ``A_j`` (V), ordered by increasing ``tau``.
    tau_s : tuple of float
    rms_v : float
        RMS residual (V).
    n : int
        Samples used.
    bic : float
        ``n ln(RSS/n) + k ln n`` with ``k = 1 + 2 n_rc`` (RSS floored at ``n * RSS_FLOOR_V**2``).
    ok : bool
        Converged with finite, distinct time constants inside the bounds.
    span_s : float
        Length of the fitted window from the time origin (s).
    """

    v_inf_v: float
    amplitude_v: tuple
    tau_s: tuple
    rms_v: float
    n: int
    bic: float
    ok: bool
    span_s: float = float("nan")

    @property
    def n_rc(self) -> int:
        return len(self.tau_s)


def relaxation_curve(time_s, v_inf_v, amplitude_v, tau_s):
    """``v_inf - sum_j A_j exp(-(t - t[0]) / tau_j)`` at ``time_s``.

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Sample times, s; the curve starts at ``time_s[0]``.
    v_inf_v : float
        Asymptotic (rested) voltage, V.
    amplitude_v : sequence of float
        Amplitude of each exponential, V.
    tau_s : sequence of float
        Time constant of each exponential, s.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Voltage, V.
    """
    t = np.asarray(time_s, dtype=float)
    x = t - t[0]
    v = np.full(t.shape, float(v_inf_v))
    for a, tau in zip(amplitude_v, tau_s):
        v = v - a * np.exp(-x / tau)
    return v


def _basis(x, taus):
    return np.column_stack([np.ones_like(x)] + [-np.exp(-x / tau) for tau in taus])


def _solve(x, v, taus, exact: bool = False):
    """Linear least squares for ``v_inf, A_j`` at fixed ``taus``; returns (coef, residual).

    Normal equations (a 2x2..4x4 system, cheap inside the search) unless ``exact`` or they are
    singular, then ``numpy.linalg.lstsq`` (SVD).
    """
    phi = _basis(x, taus)
    coef = None
    if not exact:
        try:
            coef = np.linalg.solve(phi.T @ phi, phi.T @ v)
        except np.linalg.LinAlgError:
            coef = None
    if coef is None or not np.all(np.isfinite(coef)):
        coef, *_ = np.linalg.lstsq(phi, v, rcond=None)
    return coef, phi @ coef - v


def fit_relaxation(time_s, voltage_v, n_rc: int = 1, tau_min_s: float | None = None,
                   tau_max_s: float | None = None, min_span_ratio: float = 1.5,
                   t0_s: float | None = None) -> RelaxationFit:
    """Fit ``n_rc`` exponentials to a relaxation by ``scipy.optimize.least_squares``.

    Variable projection: the nonlinear parameters are ``log tau_j``; ``v_inf`` and ``A_j`` are
    the linear least-squares solution for given ``tau`` (Golub and Pereyra 1973).  Start: the
    best point of a logarithmic grid of time constants (pairs with a ratio of at least 3 for
    two exponentials).

    Parameters
    ----------
    time_s, voltage_v : array_like (n,)
        The rest samples, from the first sample after the pulse.
    n_rc : {1, 2, 3}
    tau_min_s, tau_max_s : float, optional
        Bounds on the time constants; default: half the first sample interval and 3 x the
        window length.
    t0_s : float, optional
        Time origin of the exponentials (default the first sample), e.g. the first rest sample
        when the fit window starts later.
    min_span_ratio : float
        The fit is marked not ``ok`` when the largest time constant exceeds the window length
        divided by this (a rest much shorter than tau cannot pin tau down).

    Returns
    -------
    RelaxationFit

    References
    ----------
    G. H. Golub and V. Pereyra, "The differentiation of pseudo-inverses and nonlinear least squares
    problems whose variables separate", SIAM J. Numer. Anal. 10 (1973) (title from memory).
    """
    t = np.asarray(time_s, dtype=float)
    v = np.asarray(voltage_v, dtype=float)
    n = t.size
    if n < 2 * n_rc + 3:
        raise PulseError(f"relaxation has {n} samples, too few for {n_rc} RC pair(s)")
    x = t - (t[0] if t0_s is None else float(t0_s))
    span = float(x[-1])
    lo = max(float(tau_min_s) if tau_min_s else 0.5 * float(t[1] - t[0]), 1e-3)
    hi = float(tau_max_s) if tau_max_s else 3.0 * span
    grid = np.exp(np.linspace(np.log(lo * 1.5), np.log(hi / 1.5), 16))
    best = None
    if n_rc == 1:
        cands = [(g,) for g in grid]
    elif n_rc == 2:
        cands = [(g1, g2) for a, g1 in enumerate(grid) for g2 in grid[a + 1:] if g2 >= 3 * g1]
    else:
        cands = [(g1, g2, g3) for a, g1 in enumerate(grid) for b, g2 in enumerate(grid[a + 1:], a + 1)
                 if g2 >= 3 * g1 for g3 in grid[b + 1:] if g3 >= 3 * g2]
    for c in cands:
        _, r = _solve(x, v, c)
        s = float(r @ r)
        if best is None or s < best[0]:
            best = (s, c)
    theta0 = np.log(np.array(best[1]))

    def fun(theta):
        return _solve(x, v, np.exp(theta))[1]

    res = least_squares(fun, theta0, bounds=(np.log(lo), np.log(hi)), method="trf", x_scale=1.0,
                        xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=100 * (n_rc + 1))
    taus = np.exp(res.x)
    order = np.argsort(taus)
    taus = taus[order]
    coef, r = _solve(x, v, taus, exact=True)
    rss = float(r @ r)
    k = 1 + 2 * n_rc
    bic = n * np.log(max(rss, n * RSS_FLOOR_V ** 2) / n) + k * np.log(n)
    ok = bool(res.status > 0 and np.all(np.isfinite(coef))
              and np.all(taus > lo * 1.0001) and taus[-1] <= span / min_span_ratio
              and (n_rc == 1 or np.all(taus[1:] / taus[:-1] > 1.5)))
    return RelaxationFit(float(coef[0]), tuple(float(a) for a in coef[1:]), tuple(float(s) for s in taus),
                         float(np.sqrt(rss / n)), int(n), float(bic), ok, span)


def rc_from_rectangular_pulse(amplitude_v, tau_s, current_a: float, duration_s: float):
    """RC resistances from relaxation amplitudes after a rectangular pulse from rest.

    For a pair charged from 0 V by a constant current ``I`` for ``T`` seconds,
    ``v(T) = R I (1 - exp(-T / tau))`` (first-order step response), so
    ``R = A / (I (1 - exp(-T / tau)))``.

    Parameters
    ----------
    amplitude_v : sequence of float
        Relaxation amplitude of each pair, V.
    tau_s : sequence of float
        Time constant of each pair, s (same length).
    current_a : float
        Pulse current, A (its sign carries through to R).
    duration_s : float
        Pulse length, s.

    Returns
    -------
    tuple of float
        Resistance of each pair, ohm.
    """
    return tuple(float(a) / (current_a * (1.0 - np.exp(-duration_s / tau)))
                 for a, tau in zip(amplitude_v, tau_s))


# ============================================================================ detection
@dataclass(frozen=True)
class Pulse:
    """One detected pulse (sample indices into the recording).

    ``start`` = first sample of the pulse, ``stop`` = first sample after it (exclusive);
    ``rest_stop`` = last sample of the following rest (inclusive; equals ``stop - 1`` when no
    rest follows); ``rest_before_start`` = first sample of the rest before (or ``start`` when
    none).  ``current_a`` is the mean sample current (positive discharge), ``duration_s`` the
    time from the sample before to the last pulse sample plus half of the two edge intervals
    (the interval-mean convention), ``direction`` +1 discharge, -1 charge/regen.  ``kind`` is
    ``"pulse"``, or ``"move"`` for a longer step (e.g. the constant-current discharge between
    SOC levels) whose following rest is still used for the RC fit.  ``limited`` is ``"upper"``
    (``"lower"``) when the voltage was held at a limit during the step (constant voltage).
    """

    start: int
    stop: int
    rest_stop: int
    rest_before_start: int
    current_a: float
    duration_s: float
    direction: int
    kind: str = "pulse"
    limited: str = ""


def detect_pulses(rec: Recording, threshold_a: float | None = None, max_pulse_s: float = 120.0,
                  jump_fraction: float = 0.2, gap_s: float | None = None,
                  include_moves: bool = False, segmentation=None) -> list[Pulse]:
    """Find the pulses of a pulse test (no hand-entered indices).

    The recording is cut by :func:`models.segment.segment_recording`: the current-sensor zero
    offset is estimated from the rests and subtracted, and rests and steps are told apart with
    two noise-based thresholds (hysteresis), so sensor noise never splits a step.

    Parameters
    ----------
    rec : Recording
    threshold_a : float, optional
        Fixed ``|i|`` rest threshold (A) instead of the noise-based switching thresholds.
    max_pulse_s : float
        Longest step that still counts as a pulse (s); longer steps are moves.
    jump_fraction : float
        A step is split where the current changes by more than this fraction.
    gap_s : float, optional
        Intervals longer than this are gaps that end a rest; default
        ``max(60 s, 20 x median interval)``.
    include_moves : bool
        Also return the longer steps, with ``kind="move"``.
    segmentation : Segmentation, optional
        A segmentation already made for ``rec``.

    Returns
    -------
    list of Pulse, in time order.  ``Pulse.limited`` is ``"upper"`` for a charge pulse held at
    the upper voltage limit (constant voltage: cut short at full), ``"lower"`` likewise.
    """
    t, i = rec.time_s, rec.current_a
    seg = segmentation or segment_recording(t, i, rec.voltage_v, gap_s=gap_s, jump_fraction=jump_fraction,
                                            threshold_a=threshold_a)
    segs = seg.segments
    out = []
    for k, sg in enumerate(segs):
        if sg.kind == "rest":
            continue
        s, e = sg.start, sg.stop
        lo, hi = max(s - 1, 0), min(e, t.size - 1)
        dur = float(0.5 * (t[e - 1] + t[hi]) - 0.5 * (t[lo] + t[s]))  # interval-mean convention
        kind = "pulse" if dur <= max_pulse_s else "move"
        if kind == "move" and not include_moves:
            continue
        rest_stop = e - 1
        if k + 1 < len(segs) and segs[k + 1].kind == "rest":
            rest_stop = segs[k + 1].stop - 1
        rb = s
        if k > 0 and segs[k - 1].kind == "rest":
            rb = segs[k - 1].start
        cur = float(np.mean(i[s:e]))
        out.append(Pulse(int(s), int(e), int(rest_stop), int(rb), cur, dur,
                         1 if cur > 0 else -1, kind, sg.limited))
    return out


# ============================================================================ SOC placement
def pulse_soc(rec: Recording, capacity_ah: float, soc_mode: str = "auto", soc0: float = 1.0):
    """SOC at every sample of a pulse test and a label saying how it was obtained.

    ``soc_mode``: ``"soc_ref"`` (the recording's column), ``"ah_counter"`` (a cycler counter in
    ``metadata["extras"]``, named by ``metadata["ah_counter_column"]``), ``"count"`` (trapezoid
    charge from ``soc0`` with ``capacity_ah``) or ``"auto"`` (the first available in that order).

    Parameters
    ----------
    rec : Recording
        The pulse test.
    capacity_ah : float
        Cell capacity, Ah (used by ``"ah_counter"`` and ``"count"``).
    soc_mode : {"auto", "soc_ref", "ah_counter", "count"}
        How the SOC is obtained.
    soc0 : float
        SOC at the first sample for ``"ah_counter"`` and ``"count"``, fraction.

    Returns
    -------
    soc : numpy.ndarray, shape (n,)
        SOC at every sample, fraction (not clipped).
    label : str
        How it was obtained.

    Raises
    ------
    PulseError
        When the requested source is missing or not finite (naming the column and row), or for an
        unknown mode.
    """
    where = rec.name or "pulse test"
    meta = rec.metadata or {}
    ah_name = meta.get("ah_counter_column")
    extras = meta.get("extras") or {}
    has_counter = ah_name is not None and ah_name in extras
    mode = soc_mode
    if mode == "auto":
        mode = "soc_ref" if rec.soc_ref is not None else ("ah_counter" if has_counter else "count")
    if mode == "soc_ref":
        if rec.soc_ref is None:
            raise PulseError(f"{where}: soc_mode 'soc_ref' but the recording has no soc_ref column")
        s = np.asarray(rec.soc_ref, dtype=float)
        if not np.all(np.isfinite(s)):
            k = int(np.argmax(~np.isfinite(s)))
            raise PulseError(f"{where}: column soc_ref is not finite at row {k}")
        return s, "column soc_ref"
    if mode == "ah_counter":
        if not has_counter:
            raise PulseError(f"{where}: soc_mode 'ah_counter' but no amp-hour counter column was loaded")
        ah = np.asarray(extras[ah_name], dtype=float)
        if not np.all(np.isfinite(ah)):
            k = int(np.argmax(~np.isfinite(ah)))
            raise PulseError(f"{where}: amp-hour counter column {ah_name} is not finite at row {k}")
        mp = meta.get("mapping") or {}
        neg = mp.get("ah_discharge_negative")
        if neg is None:
            neg = bool(mp.get("discharge_negative", False))
        discharged = -(ah - ah[0]) if neg else (ah - ah[0])
        return soc0 - discharged / capacity_ah, f"amp-hour counter {ah_name} from SOC {soc0:g}"
    if mode == "count":
        q = charge_throughput_ah(rec.time_s, rec.current_a)
        return soc0 - q / capacity_ah, f"charge counted from SOC {soc0:g}"
    raise PulseError(f"{where}: unknown soc_mode {soc_mode!r} (auto, soc_ref, ah_counter, count)")


# ============================================================================ per-pulse fits
@dataclass(frozen=True, eq=False)
class PulseFit:
    """Everything measured on one pulse.

    Attributes
    ----------
    pulse : Pulse
    soc : float
        Mean of the SOC before and after the pulse.
    level : int
        SOC level index (pulses between two moves share a level).
    r0_edge_ohm : float
        Mean raw edge step ``-dV/dI`` (last sample before / first sample after each edge).
    r0_ohm : dict
        ``{n_rc: R0}`` corrected for the RC charge and OCV change during the edge interval.
    fits : dict
        ``{n_rc: RelaxationFit}``.
    rc_r_ohm : dict
        ``{n_rc: tuple of R_j}`` (None when the fit failed).
    pulse_resistance_ohm : float
        DOE/INL ``|dV/dI|`` from the sample before to the last sample of the pulse.
    ocv_before_v : float
        Voltage of the sample before the pulse (the rested voltage when a rest precedes it).
    temperature_c : float
    """

    pulse: Pulse
    soc: float
    level: int
    r0_edge_ohm: float
    r0_ohm: dict
    fits: dict
    rc_r_ohm: dict
    pulse_resistance_ohm: float
    ocv_before_v: float
    temperature_c: float

    def rc(self, n_rc: int):
        """``(R tuple, tau tuple)`` for ``n_rc`` pairs, or None."""
        f = self.fits.get(n_rc)
        r = self.rc_r_ohm.get(n_rc)
        if f is None or r is None or not f.ok:
            return None
        return r, f.tau_s


@dataclass(frozen=True, eq=False)
class PulseTestResult:
    """A pulse test analysed: per-pulse fits, levels, rest points, temperature.

    ``recording`` is the offset-corrected recording; ``offset_a`` / ``offset_sigma_a`` the
    current-sensor zero offset subtracted and its standard error (A); ``segmentation`` the summary
    of :func:`models.segment.segment_recording`.
    """

    pulses: tuple
    temperature_c: float
    soc_source: str
    rest_soc: np.ndarray
    rest_v: np.ndarray
    source: str
    notes: tuple = ()
    soc: np.ndarray = field(default=None, repr=False)
    recording: Recording | None = field(default=None, repr=False)
    offset_a: float = 0.0
    offset_sigma_a: float | None = None
    segmentation: dict = field(default_factory=dict, repr=False)
    rest_after_discharge: np.ndarray = field(default=None, repr=False)

    @property
    def n_levels(self) -> int:
        return len({p.level for p in self.pulses})


def _edge_r0(t, i, v, soc, k_before, k_after, rc_list, ocv):
    """R0 from one edge between samples ``k_before`` and ``k_after`` (= k_before + 1).

    ``rc_list`` holds ``(R_j, unit response array, offset)`` to subtract the RC change; ``ocv``
    the curve for the OCV change (or None).
    Returns (raw, corrected) or None when the current barely changes.
    """
    di = i[k_after] - i[k_before]
    if abs(di) < 1e-9:
        return None
    dv = v[k_after] - v[k_before]
    raw = -dv / di
    d_rc = 0.0
    for r, g, off in rc_list:
        d_rc += r * (g[k_after - off] - g[k_before - off])
    d_ocv = 0.0
    if ocv is not None:
        d_ocv = float(ocv.voltage(soc[k_after]) - ocv.voltage(soc[k_before]))
    corr = -(dv + d_rc - d_ocv) / di
    return raw, corr


def _history_start(t, a, b, tau):
    """First sample of the current history used for a unit RC response (30 tau before the rest,
    and at least two samples before the pulse)."""
    tb = t[min(b, t.size - 1)]  # a pulse may run to the end of the file
    return int(max(min(np.searchsorted(t, tb - 30.0 * tau), a - 2), 0))


def rest_points(rec: Recording, soc, threshold_a: float | None = None, min_rest_s: float = 600.0,
                gap_s: float | None = None, segmentation=None):
    """Rest-end voltages of a test: ``(soc, voltage_v, rest_length_s)`` arrays.

    Every rest of at least ``min_rest_s`` (from :func:`models.segment.segment_recording`, cut at
    gaps) contributes its last sample.  These are OCV points (on the side of the hysteresis the
    last current left).

    Parameters
    ----------
    rec : Recording
        The test (time in s, current in A, voltage in V).
    soc : array_like, shape (n,)
        SOC at every sample, fraction 0..1 (e.g. from :func:`pulse_soc`).
    threshold_a : float, optional
        Fixed rest threshold on ``|current|``, A; default from the recording's noise floor.
    min_rest_s : float
        Shortest rest that counts, s.
    gap_s : float, optional
        Time steps longer than this cut a rest, s.
    segmentation : Segmentation, optional
        A segmentation already computed for ``rec`` (then ``threshold_a`` and ``gap_s`` are unused).

    Returns
    -------
    soc : numpy.ndarray, shape (m,)
        SOC at each rest end, fraction.
    voltage_v : numpy.ndarray, shape (m,)
        Voltage at each rest end, V.
    rest_length_s : numpy.ndarray, shape (m,)
        Length of each rest, s.
    """
    t, v = rec.time_s, rec.voltage_v
    seg = segmentation or segment_recording(t, rec.current_a, v, gap_s=gap_s, threshold_a=threshold_a)
    s_out, v_out, d_out = [], [], []
    for sg in seg.rests(min_rest_s):
        e = sg.stop
        if np.isfinite(v[e - 1]):
            s_out.append(float(soc[e - 1]))
            v_out.append(float(v[e - 1]))
            d_out.append(float(t[e - 1] - t[sg.start]))
    return np.array(s_out), np.array(v_out), np.array(d_out)


def identify_pulse_test(rec: Recording, capacity_ah: float, ocv: OcvCurve | None = None,
                        rc_pairs=None, temperature_c: float | None = None, soc_mode: str = "auto",
                        soc0: float = 1.0, threshold_a: float | None = None, max_pulse_s: float = 120.0,
                        min_relax_s: float = 30.0, max_relax_s: float = 3600.0, level_gap: float = 0.005,
                        rest_min_s: float = 600.0, gap_s: float | None = None, tau_min_s: float = 1.0,
                        relax_skip_s: float = 1.0, offset_a: float | None = None) -> PulseTestResult:
    """Analyse one pulse test: every pulse's R0, RC fits (1 and 2 pairs), SOC and level.

    Parameters
    ----------
    rec : Recording
    capacity_ah : float
        Capacity used to place pulses on the SOC axis when counting charge (Ah).
    ocv : OcvCurve, optional
        Used only for the small OCV change across an edge interval in the R0 correction.
    rc_pairs : int or None
        Fit only this many pairs (1..3); default fits 1 and 2 so :func:`choose_rc_pairs` can
        decide.
    temperature_c : float, optional
        Test temperature; default the median of the ``temperature_c`` column, else 25 degC.
    soc_mode, soc0 : see :func:`pulse_soc`.
    threshold_a, max_pulse_s, gap_s : see :func:`detect_pulses`.
    min_relax_s : float
        Shortest rest after a pulse that gets an RC fit (s).
    max_relax_s : float
        Longest part of a rest used for the fit (s).
    level_gap : float
        A SOC change between pulses larger than this (not caused by the pulses) starts a new level.
    rest_min_s : float
        Shortest rest whose end voltage counts as an OCV point.
    tau_min_s : float
        Shortest RC time constant fitted (s).  Faster processes (seen only at sub-second
        sampling) are not resolved at BMS sampling rates; together with ``relax_skip_s`` they are
        left to the edge step, i.e. lumped into R0.
    relax_skip_s : float
        The first part of each rest (s after the first rest sample, that sample included) is
        left out of the relaxation fit.
    offset_a : float, optional
        Known current-sensor zero offset (A); default estimated from the test's rests.  It is
        subtracted from the current before anything else (charge counting, RC histories).

    Returns
    -------
    PulseTestResult
    """
    where = rec.name or "pulse test"
    seg = segment_recording(rec.time_s, rec.current_a, rec.voltage_v, offset_a=offset_a, gap_s=gap_s,
                            threshold_a=threshold_a)
    rec = rec.with_(current_a=seg.current_a)
    t, i, v = rec.time_s, rec.current_a, rec.voltage_v
    notes = list(seg.notes)
    if temperature_c is None:
        if rec.temperature_c is not None and np.any(np.isfinite(rec.temperature_c)):
            temperature_c = float(np.nanmedian(rec.temperature_c))
        else:
            temperature_c = 25.0
            notes.append("no temperature column: the test is taken as 25 degC")
    soc, soc_label = pulse_soc(rec, capacity_ah, soc_mode, soc0)
    pulses = detect_pulses(rec, threshold_a, max_pulse_s, gap_s=gap_s, include_moves=True, segmentation=seg)
    if not any(p.kind == "pulse" for p in pulses):
        raise PulseError(f"{where}: no pulses found (active runs of at most {max_pulse_s:g} s in column current_a)")
    bad_v = ~np.isfinite(v)
    n_list = (1, 2) if rc_pairs is None else (int(rc_pairs),)
    fits_out = []
    level = 0
    prev_soc_after = None
    for p in pulses:
        a, b = p.start, p.stop
        soc_before = float(soc[a - 1]) if a > 0 else float(soc[a])
        soc_after = float(soc[min(b, t.size - 1)])
        if prev_soc_after is not None and (abs(soc_before - prev_soc_after) > level_gap or p.kind == "move"):
            level += 1
        prev_soc_after = soc_after
        soc_event = soc_after if p.kind == "move" else 0.5 * (soc_before + soc_after)
        # DOE/INL pulse resistance: sample before the pulse to last sample of the pulse
        kb = a - 1 if a > 0 else a
        di = i[b - 1] - i[kb]
        r_pulse = abs((v[b - 1] - v[kb]) / di) if abs(di) > 1e-9 else np.nan
        # relaxation window
        fits, rcs, r0c = {}, {}, {}
        unit = {}
        stop = p.rest_stop
        if stop > b:
            t_end = min(t[stop], t[b] + max_relax_s)
            stop = int(np.searchsorted(t, t_end, side="right") - 1)
        win = np.arange(b, stop + 1)
        win = win[~bad_v[win]] if win.size else win
        if relax_skip_s > 0 and win.size:
            win = win[t[win] >= t[b] + relax_skip_s]
        have_relax = win.size >= 8 and (t[stop] - t[b]) >= min_relax_s
        for n_rc in n_list:
            if not have_relax or win.size < 2 * n_rc + 6:
                continue
            try:
                f = fit_relaxation(t[win], v[win], n_rc, tau_min_s=tau_min_s, t0_s=float(t[b]))
            except PulseError:
                continue
            fits[n_rc] = f
            rs = []
            for amp, tau in zip(f.amplitude_v, f.tau_s):
                h0 = _history_start(t, a, b, tau)
                key = (round(tau, 9), h0)
                if key not in unit:
                    unit[key] = (unit_rc_response(t, i, float(tau), h0, b), h0)
                g = unit[key][0][-1]
                rs.append(amp / g if abs(g) > 1e-12 else np.nan)
            rs = tuple(float(r) for r in rs)
            rcs[n_rc] = rs if (f.ok and all(np.isfinite(r) and r > 0 for r in rs)) else None
        # R0 from the edges: raw now, corrected below once every pulse's RC fit is known
        edges = []
        if a > 0:
            edges.append((a - 1, a))
        if b < t.size and abs(i[b]) < abs(p.current_a):
            edges.append((b - 1, b))
        raw_vals = []
        for kb_, ka_ in edges:
            res = _edge_r0(t, i, v, soc, kb_, ka_, [], None)
            if res is not None and np.isfinite(res[0]):
                raw_vals.append(res[0])
        r0_raw = float(np.mean(raw_vals)) if raw_vals else np.nan
        if p.kind == "move":
            r0_raw, r_pulse = np.nan, np.nan
        fits_out.append(PulseFit(p, soc_event, level, r0_raw, r0c, fits, rcs,
                                 float(r_pulse), float(v[kb]), float(temperature_c)))
    # R0 corrected for the RC charge and OCV change during the edge interval, with the pulse's
    # own RC fit or else the median fit of its SOC level (e.g. a discharge pulse followed by a
    # short rest and a regen pulse)
    for pf in fits_out:
        p = pf.pulse
        if p.kind == "move":
            continue
        a, b = p.start, p.stop
        edges = [(a - 1, a)] if a > 0 else []
        if b < t.size and abs(i[b]) < abs(p.current_a):
            edges.append((b - 1, b))
        for n_rc in n_list:
            own = pf.rc(n_rc)
            if own is None:
                same = _level_rc([q for q in fits_out if q.level == pf.level], n_rc)
                if not same:
                    continue
                own = (tuple(np.median([x[0][j] for x in same]) for j in range(n_rc)),
                       tuple(np.median([x[1][j] for x in same]) for j in range(n_rc)))
            rc_list = []
            for r, tau in zip(*own):
                h0 = _history_start(t, a, b, tau)
                rc_list.append((float(r), unit_rc_response(t, i, float(tau), h0, b), h0))
            vals = []
            for kb_, ka_ in edges:
                res = _edge_r0(t, i, v, soc, kb_, ka_, rc_list, ocv)
                if res is not None and np.isfinite(res[1]):
                    vals.append(res[1])
            if vals:
                pf.r0_ohm[n_rc] = float(np.mean(vals))
    rs, rv, _ = rest_points(rec, soc, threshold_a, rest_min_s, gap_s, segmentation=seg)
    before = {sg.stop: sg.kind for sg in seg.segments}
    after_dis = np.array([before.get(r.start) == "discharge" for r in seg.rests(rest_min_s) if np.isfinite(v[r.stop - 1])],
                         dtype=bool)
    return PulseTestResult(tuple(fits_out), float(temperature_c), soc_label, rs, rv, where, tuple(notes), soc, rec,
                           seg.offset_a, seg.offset_sigma_a, seg.as_dict(), after_dis)


# ============================================================================ model order and tables
def choose_rc_pairs(results, rc_pairs=None):
    """Number of RC pairs for the model, and a one-line reason.

    ``rc_pairs`` given: that.  Otherwise 2 when, over all rests with valid 1- and 2-pair fits
    (at least 3 of them), the median BIC drop exceeds :data:`BIC_MARGIN`; else 1.

    Parameters
    ----------
    results : sequence of PulseTestResult
        Pulse tests with their 1- and 2-pair relaxation fits.
    rc_pairs : int, optional
        Fixed number of pairs (overrides the choice).

    Returns
    -------
    n_rc : int
        1 or 2 (or ``rc_pairs`` when given).
    reason : str
        One line saying why.

    References
    ----------
    G. Schwarz, "Estimating the dimension of a model", Annals of Statistics 6 (1978), 461-464
    (the Bayesian information criterion; page numbers from memory).
    """
    if rc_pairs is not None:
        return int(rc_pairs), f"{int(rc_pairs)} RC pair(s) as requested"
    drops, n1, n2 = [], 0, 0
    for res in results:
        for pf in res.pulses:
            ok1 = pf.rc(1) is not None
            ok2 = pf.rc(2) is not None
            n1 += ok1
            n2 += ok2
            if ok1 and ok2:
                drops.append(pf.fits[1].bic - pf.fits[2].bic)
    if len(drops) < 3:
        return 1, f"1 RC pair (two-pair fits valid on only {n2} of {n1} fitted rests)"
    med = float(np.median(drops))
    if med > BIC_MARGIN:
        return 2, f"2 RC pairs (median BIC drop {med:.1f} > {BIC_MARGIN:g} over {len(drops)} rests)"
    return 1, f"1 RC pair (median BIC drop {med:.1f} <= {BIC_MARGIN:g} over {len(drops)} rests)"


def _level_rc(fits, n_rc: int, keep_fraction: float = 0.5):
    """Valid ``(R, tau)`` fits of one level, from the longest rests only.

    A rest much shorter than another at the same level pins the slow time constant down less
    well, so fits whose window is shorter than ``keep_fraction`` of the level's longest window
    are left out.
    """
    good = [(q.fits[n_rc].span_s, q.rc(n_rc)) for q in fits if q.rc(n_rc) is not None]
    if not good:
        return []
    longest = max(g[0] for g in good)
    return [g[1] for g in good if g[0] >= keep_fraction * longest]


def _level_table(res: PulseTestResult, n_rc: int, smooth: bool = True):
    """Per-level medians: soc, r0, [r_j], [tau_j] (NaN where no valid value)."""
    levels = sorted({p.level for p in res.pulses})
    rows = []
    for lv in levels:
        ps = [p for p in res.pulses if p.level == lv]
        s = float(np.median([p.soc for p in ps]))
        # a pulse held at a voltage limit (constant voltage, its current decaying) is no current step:
        # its edge and relaxation do not measure R0 or the RC pairs when other pulses of the level do
        free = [p for p in ps if not p.pulse.limited]
        if any(p.pulse.kind == "pulse" for p in free):
            ps = free
        r0 = [p.r0_ohm[n_rc] for p in ps if n_rc in p.r0_ohm and p.pulse.kind == "pulse"]
        if not r0:
            r0 = [p.r0_edge_ohm for p in ps if np.isfinite(p.r0_edge_ohm) and p.r0_edge_ohm > 0]
        r0v = float(np.median(r0)) if r0 else np.nan
        rc = _level_rc(ps, n_rc)
        rj = [float(np.median([x[0][j] for x in rc])) if rc else np.nan for j in range(n_rc)]
        tj = [float(np.median([x[1][j] for x in rc])) if rc else np.nan for j in range(n_rc)]
        rows.append([s, r0v] + rj + tj)
    arr = np.array(rows, dtype=float)
    arr = arr[np.argsort(arr[:, 0])]
    # merge levels closer than 0.001 in SOC
    keep = np.concatenate([[True], np.diff(arr[:, 0]) > 1e-3])
    arr = arr[keep]
    # RC values: 3-point running median over neighbouring levels (ends kept), so one odd level
    # (a rest disturbed by a temperature step, a fit caught between two time scales) does not
    # make a spike in the table; R0 is left as measured
    if arr.shape[0] >= 3:
        rc = arr[:, 2:].copy()
        for c in range(rc.shape[1]):
            col = arr[:, 2 + c]
            for k in range(1, arr.shape[0] - 1):
                win = col[k - 1:k + 2]
                if np.all(np.isfinite(win)):
                    rc[k, c] = float(np.median(win))
        arr[:, 2:] = rc
    # every column (R0, R_j, tau_j) regularised over SOC: a Whittaker-Henderson smoother on the
    # logarithm (values stay positive; resistances vary by ratios), penalty chosen by generalised
    # cross-validation.  The EKF linearises through dR0/dSOC, so a table that is noise on a trend
    # must not hand it a slope of noise; a trend the levels agree on is kept.
    if smooth and arr.shape[0] >= 4:
        for c in range(1, arr.shape[1]):
            col = arr[:, c]
            ok = np.isfinite(col) & (col > 0)
            if np.count_nonzero(ok) >= 4:
                z, _ = whittaker_gcv(arr[:, 0], np.where(ok, np.log(np.where(ok, col, 1.0)), np.nan))
                arr[:, c] = np.where(ok, np.exp(z), col)
    return arr


def _fill(soc, col, name, where):
    good = np.isfinite(col) & (col > 0)
    if not np.any(good):
        raise PulseError(f"{where}: no valid {name} value at any SOC level")
    return np.interp(soc, soc[good], col[good])


def pulse_tables(results, n_rc: int, soc_axis=None):
    """R0 and RC tables over SOC (x temperature when several tests) from analysed pulse tests.

    Parameters
    ----------
    results : list of PulseTestResult
        One per pulse test; several at the same (rounded) temperature are pooled per level.
    n_rc : int
    soc_axis : array_like, optional
        Common SOC breakpoints; default the SOC levels of the test closest to 25 degC.

    Returns
    -------
    r0 : ParamTable
    rc : tuple of RcPair
    per_test : list of ndarray
        The per-level tables ``[soc, r0, r_1.., tau_1..]`` of each test.
    """
    if not results:
        raise PulseError("no pulse tests given")
    per = [_level_table(r, n_rc) for r in results]
    temps = np.array([r.temperature_c for r in results])
    if soc_axis is None:
        ref = int(np.argmin(np.abs(temps - 25.0)))
        soc_axis = np.clip(per[ref][:, 0], 0.0, 1.0)
        soc_axis = np.unique(np.round(soc_axis, 4))
    soc_axis = np.asarray(soc_axis, dtype=float)
    # group by rounded temperature
    keys = np.round(temps, 0)
    uniq = np.unique(keys)
    cols = 1 + 2 * n_rc
    grid = np.empty((uniq.size, cols, soc_axis.size))
    t_axis = []
    for g, key in enumerate(uniq):
        members = [k for k in range(len(results)) if keys[k] == key]
        t_axis.append(float(np.mean(temps[members])))
        stack = []
        for k in members:
            arr = per[k]
            s = np.clip(arr[:, 0], 0.0, 1.0)
            rowvals = []
            for c in range(cols):
                name = ["r0_ohm"] + [f"r{j + 1}_ohm" for j in range(n_rc)] + [f"tau{j + 1}_s" for j in range(n_rc)]
                col = _fill(s, arr[:, 1 + c], name[c], results[k].source)
                rowvals.append(np.interp(soc_axis, s, col))
            stack.append(rowvals)
        grid[g] = np.median(np.array(stack), axis=0)
    temp_axis = np.array(t_axis) if uniq.size > 1 else None

    def table(c, name):
        vals = grid[:, c, :] if temp_axis is not None else grid[0, c, :]
        return ParamTable(soc_axis, vals, temp_axis, name=name)

    r0 = table(0, "r0_ohm")
    rc = tuple(RcPair(table(1 + j, f"r{j + 1}_ohm"), table(1 + n_rc + j, f"tau{j + 1}_s")) for j in range(n_rc))
    return r0, rc, per


# ============================================================================ DOE/INL pulse power
def pulse_resistance(v_before_v, i_before_a, v_end_v, i_end_a):
    """DOE/INL pulse resistance ``|dV/dI|`` (ohm) between the sample before and the pulse end.

    Parameters
    ----------
    v_before_v : float
        Voltage of the sample before the pulse, V.
    i_before_a : float
        Current of that sample, A.
    v_end_v : float
        Voltage of the last pulse sample, V.
    i_end_a : float
        Current of that sample, A (must differ from ``i_before_a``).

    Returns
    -------
    float
        Pulse resistance, ohm.

    References
    ----------
    FreedomCAR Battery Test Manual for Power-Assist Hybrid Electric Vehicles, DOE/ID-11069,
    INEEL 2003 (recalled from memory).
    """
    return abs((v_end_v - v_before_v) / (i_end_a - i_before_a))


def discharge_power_w(ocv_v, r_dis_ohm, v_min_v):
    """Discharge pulse power capability ``V_min (OCV - V_min) / R_dis`` (W), DOE/INL definition.

    Parameters
    ----------
    ocv_v : float or array_like
        Rested voltage before the pulse, V.
    r_dis_ohm : float or array_like
        Discharge pulse resistance, ohm.
    v_min_v : float
        Minimum cell voltage, V.

    Returns
    -------
    float or numpy.ndarray
        Discharge pulse power capability, W.

    References
    ----------
    FreedomCAR Battery Test Manual for Power-Assist Hybrid Electric Vehicles, DOE/ID-11069,
    INEEL 2003 (recalled from memory).
    """
    return v_min_v * (ocv_v - v_min_v) / r_dis_ohm


def regen_power_w(ocv_v, r_regen_ohm, v_max_v):
    """Regen pulse power capability ``V_max (V_max - OCV) / R_regen`` (W), DOE/INL definition.

    Parameters
    ----------
    ocv_v : float or array_like
        Rested voltage before the pulse, V.
    r_regen_ohm : float or array_like
        Regen pulse resistance, ohm.
    v_max_v : float
        Maximum cell voltage, V.

    Returns
    -------
    float or numpy.ndarray
        Regen pulse power capability, W.

    References
    ----------
    FreedomCAR Battery Test Manual for Power-Assist Hybrid Electric Vehicles, DOE/ID-11069,
    INEEL 2003 (recalled from memory).
    """
    return v_max_v * (v_max_v - ocv_v) / r_regen_ohm


@dataclass(frozen=True)
class PowerRow:
    """One row of the pulse-resistance and power table."""

    soc: float
    direction: str
    current_a: float
    duration_s: float
    ocv_v: float
    pulse_resistance_ohm: float
    power_w: float
    temperature_c: float


def pulse_power_table(results, v_min_v: float, v_max_v: float) -> list[PowerRow]:
    """The DOE/INL pulse-resistance and pulse power capability table, one row per pulse.

    Parameters
    ----------
    results : sequence of PulseTestResult
        Pulse tests; only pulses of kind ``"pulse"`` with a finite positive resistance give rows.
    v_min_v : float
        Minimum cell voltage for the discharge power, V.
    v_max_v : float
        Maximum cell voltage for the regen power, V.

    Returns
    -------
    list of PowerRow
        Per pulse: SOC (fraction), direction, |current| (A), duration (s), OCV before (V),
        pulse resistance (ohm), power capability (W) and temperature (degC).

    References
    ----------
    FreedomCAR Battery Test Manual for Power-Assist Hybrid Electric Vehicles, DOE/ID-11069,
    INEEL 2003 (HPPC analysis; recalled from memory, as in the module docstring).
    """
    rows = []
    for res in results:
        for pf in res.pulses:
            if pf.pulse.kind != "pulse":
                continue
            r = pf.pulse_resistance_ohm
            if not (np.isfinite(r) and r > 0):
                continue
            if pf.pulse.direction > 0:
                p = discharge_power_w(pf.ocv_before_v, r, v_min_v)
                d = "discharge"
            else:
                p = regen_power_w(pf.ocv_before_v, r, v_max_v)
                d = "regen"
            rows.append(PowerRow(pf.soc, d, abs(pf.pulse.current_a), pf.pulse.duration_s, pf.ocv_before_v, r,
                                 float(p), res.temperature_c))
    return rows
