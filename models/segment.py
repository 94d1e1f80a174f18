"""Cutting a lab recording into rests and current steps, robust to the sensor's noise and offset.

A BMS-grade or cycler current sensor reads ``gain * i + offset + noise``.  A fixed threshold
(``|i| <= 50 mA`` or "1 % of the largest current") sits inside that noise band for a cell of a
few Ah: every rest flickers into thousands of "pulses", and the offset, integrated over a day,
is counted as charge (25 mA for 40 h is 1 Ah).  This module does what a characterisation
engineer does by eye:

1. **Noise floor** of the current from the recording itself: the standard deviation of first
   differences over short windows (``std(diff) / sqrt(2)``), taking a low quantile over the
   windows so that steps and ramps do not count as noise.  Floored at the quantum of the logged
   values (``q / sqrt(12)``).
2. **Zero offset** from the quiet periods: windows of constant current are grouped by their mean;
   the group nearest zero (and well below the test currents) is the rest level when its runs
   show voltage relaxation (after a discharge the voltage rises or holds, after a charge it
   falls or holds; a load step would drive it the other way).  The offset is the mean current
   over those rests, reported with its standard error.
3. **Steps with hysteresis**: after subtracting the offset a sample turns a rest into a step
   when ``|i| > on`` and a step ends when ``|i| < off`` (``on`` = 6, ``off`` = 3 noise sigmas),
   so noise never splits a step; steps are further split where the current changes sign or
   jumps by more than a fraction of its level; gaps in time end every run.  Rests shorter than
   ``min_rest_s`` between two steps of the same sign and level are joined into the step.
4. **Voltage limits**: a charge step whose voltage is held at its maximum while the current
   falls is marked ``limited="upper"`` (constant-voltage phase, e.g. a charge pulse cut short
   at full), a discharge held at its minimum ``"lower"``.

Everything is in the recording's own units (SI: s, A, V), current positive on discharge.

References
----------
.. [1] US DOE / INL battery test manuals (e.g. FreedomCAR Battery Test Manual for Power-Assist
   Hybrid Electric Vehicles, DOE/ID-11069, 2003): rest, pulse and constant-current steps of a
   characterisation test.
.. [2] Schmitt, "A thermionic trigger", J. Sci. Instrum. 15, 24 (1938): switching with two
   thresholds (hysteresis) so noise near one threshold cannot toggle the state.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = ["Segment", "Segmentation", "segment_recording", "noise_floor", "SegmentError"]

SECONDS_PER_HOUR = 3600.0


class SegmentError(ValueError):
    """The recording cannot be segmented (too short, non-finite values)."""


@dataclass(frozen=True)
class Segment:
    """One run of samples: a rest or a current step.

    Attributes
    ----------
    kind : str
        ``"rest"``, ``"discharge"`` or ``"charge"``.
    start, stop : int
        Sample indices (``stop`` exclusive).
    mean_current_a : float
        Mean offset-corrected current, A (positive on discharge).
    duration_s : float
        From the sample before the first to the first after the last (the two edge intervals
        included; at the ends of the file the run's own span), s.
    charge_ah : float
        Offset-corrected trapezoid charge over the run including its edge intervals, Ah.
    limited : str
        ``"upper"`` / ``"lower"`` when the voltage is held at a limit during the step (a
        constant-voltage phase), else ``""``.
    """

    kind: str
    start: int
    stop: int
    mean_current_a: float
    duration_s: float
    charge_ah: float
    limited: str = ""

    @property
    def n(self) -> int:
        return self.stop - self.start


@dataclass(frozen=True, eq=False)
class Segmentation:
    """Result of :func:`segment_recording`.

    Attributes
    ----------
    segments : tuple of Segment
        In time order, covering every sample.
    offset_a : float
        Current-sensor zero offset subtracted, A (what the sensor reads at zero current).
    offset_sigma_a : float or None
        Standard error of ``offset_a`` (None when no rest was found and 0 was assumed).
    offset_rest_s : float
        Total rest time the offset was estimated from, s.
    noise_a : float
        Current noise floor (one sigma), A.
    voltage_noise_v : float or None
        Voltage noise floor (one sigma), V.
    on_threshold_a, off_threshold_a : float
        The two switching thresholds on the corrected current, A.
    current_a : ndarray
        The offset-corrected current, A.
    time_s : ndarray
        The sample times, s.
    notes : tuple of str
    """

    segments: tuple
    offset_a: float
    offset_sigma_a: float | None
    offset_rest_s: float
    noise_a: float
    voltage_noise_v: float | None
    on_threshold_a: float
    off_threshold_a: float
    current_a: np.ndarray
    time_s: np.ndarray
    notes: tuple = ()

    def rests(self, min_duration_s: float = 0.0) -> list[Segment]:
        """Rest segments lasting at least ``min_duration_s`` (their own span, s)."""
        return [s for s in self.segments if s.kind == "rest" and self._span(s) >= min_duration_s]

    def steps(self) -> list[Segment]:
        """Current steps (discharge and charge), in time order."""
        return [s for s in self.segments if s.kind != "rest"]

    def _span(self, s: Segment) -> float:
        return float(self.time_s[s.stop - 1] - self.time_s[s.start])

    def as_dict(self) -> dict:
        """A JSON-ready summary (for provenance and reports)."""
        kinds = [s.kind for s in self.segments]
        return {"offset_a": self.offset_a, "offset_sigma_a": self.offset_sigma_a,
                "offset_rest_s": self.offset_rest_s, "noise_a": self.noise_a,
                "voltage_noise_v": self.voltage_noise_v, "on_threshold_a": self.on_threshold_a,
                "off_threshold_a": self.off_threshold_a, "rests": kinds.count("rest"),
                "discharge_steps": kinds.count("discharge"), "charge_steps": kinds.count("charge"),
                "voltage_limited_steps": sum(1 for s in self.segments if s.limited), "notes": list(self.notes)}


def _quantum(x: np.ndarray) -> float:
    """The logging quantum: the smallest non-zero step, when at least 5 % of all steps are one
    quantum (noise toggling the last digit); else 0."""
    d_all = np.abs(np.diff(x))
    d = d_all[d_all > 1e-12]
    if d.size == 0:
        return 0.0
    q = float(np.min(d))
    return q if np.count_nonzero(d < 1.5 * q) >= 0.05 * d_all.size else 0.0


def noise_floor(x, window: int = 16, quantile: float = 0.2) -> float:
    """Robust one-sigma noise of a signal whose level holds for a while (steps, rests).

    The smaller of two estimates of the first differences' spread divided by ``sqrt(2)`` (white
    noise): their RMS after leaving out steps (differences beyond 6 MADs, or 3 logging quanta), and
    the ``quantile`` of their standard deviation over non-overlapping windows of ``window``
    samples (so neither steps nor the dynamics of a drive dominate); floored at the logging quantum over ``sqrt(12)`` and at
    ``2e-5`` times the largest magnitude (a 16-bit converter's step over its range).

    Parameters
    ----------
    x : array_like (N,)
        The signal (A or V).
    window : int
    quantile : float

    Returns
    -------
    float
        Noise sigma in the signal's unit.
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    floor = max(_quantum(x) / np.sqrt(12.0), 2e-5 * float(np.max(np.abs(x))) if x.size else 0.0, 1e-12)
    if x.size < 3:
        return floor
    d = np.diff(x)
    mad = 1.4826 * float(np.median(np.abs(d - np.median(d))))
    # RMS of the small differences (steps left out): also right when a coarse quantum makes most
    # differences exactly zero and the MAD collapses
    small = d[np.abs(d) <= max(6.0 * mad, 3.0 * _quantum(x))]
    sig = float(np.sqrt(np.mean(small ** 2)) / np.sqrt(2.0)) if small.size else mad / np.sqrt(2.0)
    nw = d.size // window
    if nw >= 5:
        s = np.std(d[: nw * window].reshape(nw, window), axis=1) / np.sqrt(2.0)
        # a low quantile keeps steps and dynamics out; divided by that quantile's value for white
        # noise, it estimates the noise sigma without bias
        sig = min(sig, float(np.quantile(s, quantile)) / _white_quantile(window, quantile))
    return max(sig, floor)


@lru_cache(maxsize=8)
def _white_quantile(window: int, quantile: float) -> float:
    """The ``quantile`` of the window estimate above for unit white noise (fixed-seed simulation)."""
    x = np.random.default_rng(12345).normal(0.0, 1.0, window * 20000 + 1)
    d = np.diff(x)
    s = np.std(d.reshape(20000, window), axis=1) / np.sqrt(2.0)
    return float(np.quantile(s, quantile))


def _runs(mask: np.ndarray):
    """Start and stop (exclusive) of the True runs of a boolean array."""
    e = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return np.flatnonzero(e == 1), np.flatnonzero(e == -1)


def _rest_level(t, i, v, noise, gap, window: int):
    """Estimate the rest (zero) level of the current from quiet windows.

    Returns ``(level, n_samples, rest_time_s, mask_of_samples_used, note)``; level None when no rest.
    """
    n = i.size
    w = max(4, min(window, n // 4))
    nw = n // w
    if nw < 2:
        return None, 0, 0.0, None, "too short to find rests"
    blocks = i[: nw * w].reshape(nw, w)
    dblk = np.diff(blocks, axis=1)
    quiet = np.std(dblk, axis=1) / np.sqrt(2.0) <= 2.5 * noise
    tb = t[: nw * w].reshape(nw, w)
    nogap = np.ones(nw, dtype=bool)
    if gap is not None:
        gb = gap[: nw * w - 1]
        gb = np.concatenate([gb, [False]]).reshape(nw, w)[:, :-1]
        nogap = ~np.any(gb, axis=1)
    quiet &= nogap
    means = blocks.mean(axis=1)
    if not np.any(quiet):
        return None, 0, 0.0, None, "no window of constant current"
    # modes of the density of quiet-window means (bandwidth: the noise of a window mean)
    bw = max(2.0 * noise / np.sqrt(w), 1e-9)
    qm = means[quiet]
    lo_x, hi_x = float(qm.min()) - 4 * bw, float(qm.max()) + 4 * bw
    step = bw / 4.0
    nbin = int(min(max((hi_x - lo_x) / step, 8), 200000))
    step = (hi_x - lo_x) / nbin
    hist, _ = np.histogram(qm, bins=nbin, range=(lo_x, hi_x))
    half = int(np.ceil(3 * bw / step))
    ker = np.exp(-0.5 * (np.arange(-half, half + 1) * step / bw) ** 2)
    dens = np.convolve(hist.astype(float), ker, mode="same")
    centres = lo_x + (np.arange(nbin) + 0.5) * step
    peak = np.flatnonzero((dens[1:-1] >= dens[:-2]) & (dens[1:-1] > dens[2:]) & (dens[1:-1] >= 1.5)) + 1
    if peak.size == 0:
        return None, 0, 0.0, None, "no repeated constant-current level"
    modes = centres[peak][np.argsort(np.abs(centres[peak]))]
    big = float(np.quantile(np.abs(i), 0.99))
    lvl = None
    tol = max(3 * bw, step)  # a mode is known to a histogram bin
    for m in modes:
        member = quiet & (np.abs(means - m) <= tol)
        rs, re_ = _runs(member)
        longest = max((float(tb[e - 1, -1] - tb[s_, 0]) for s_, e in zip(rs, re_)), default=0.0)
        if longest >= min(60.0, 0.2 * float(t[-1] - t[0])):
            lvl = float(np.mean(means[member]))
            break
    if lvl is None:
        return None, 0, 0.0, None, "no quiet current level held for 60 s: no rest found, offset 0 assumed"
    lvl_abs = abs(lvl)
    others = [abs(float(m)) for m in modes if abs(float(m)) > lvl_abs + 2 * tol]
    # the rest level lies well below the test currents: under 30 % of the next level and of the 99th
    # percentile of |i| (an offset larger than that cannot be told from a small load)
    ref = min(others) if others else big
    if not (lvl_abs <= 0.3 * max(ref, 1e-12) and lvl_abs <= 0.3 * max(big, 1e-12)) and lvl_abs > 6 * noise:
        return None, 0, 0.0, None, (f"the quietest current level {lvl:.4g} A is not well below the test "
                                    f"currents (next {ref:.4g} A): no rest found, offset 0 assumed")
    in_lvl = quiet & (np.abs(means - lvl) <= tol)
    mask = np.zeros(n, dtype=bool)
    mask[: nw * w] = np.repeat(in_lvl, w)
    # voltage relaxation: in long runs at this level the voltage must not be driven the way a load
    # of this sign would drive it (a discharge lowers the voltage steadily)
    note = ""
    if v is not None and abs(lvl) > 3 * noise:
        starts, stops = _runs(mask)
        drive = []
        for s, e in zip(starts, stops):
            if e - s >= 3 * w and t[e - 1] - t[s] > 60.0:
                third = max((e - s) // 3, 2)
                a = np.nanmean(v[s:s + third])
                b = np.nanmean(v[e - third:e])
                late = np.nanmean(v[e - third:e]) - np.nanmean(v[e - 2 * third:e - third])
                early = np.nanmean(v[s + third:s + 2 * third]) - a
                # a rest relaxes: the voltage change slows down; a load keeps (or speeds up) the drift
                drive.append(np.sign(lvl) * (b - a) < 0 and abs(late) >= 0.8 * abs(early) and abs(b - a) > 0.01)
        if drive and np.mean(drive) > 0.5:
            return None, 0, 0.0, None, (f"the quietest current level {lvl:.4g} A drives the voltage like a load: "
                                        "no rest found, offset 0 assumed")
        if not drive and lvl_abs > 0.05 * big:
            return None, 0, 0.0, None, (f"the quietest current level {lvl:.4g} A is over 5 % of the largest "
                                        "currents and no long run at it shows voltage relaxation: no rest found, "
                                        "offset 0 assumed")
        note = "rest level confirmed by voltage relaxation" if drive else ""
    dt = np.diff(t)
    rest_time = float(np.sum(dt[mask[:-1] & mask[1:]]))
    return float(np.mean(i[mask])), int(np.count_nonzero(mask)), rest_time, mask, note


def segment_recording(time_s, current_a, voltage_v=None, offset_a: float | None = None,
                      min_rest_s: float | None = None, gap_s: float | None = None,
                      jump_fraction: float = 0.2, on_sigmas: float = 6.0, off_sigmas: float = 3.0,
                      threshold_a: float | None = None) -> Segmentation:
    """Cut a recording into rests and current steps (see the module docstring).

    Parameters
    ----------
    time_s : array_like (N,)
        Strictly increasing sample times, s.
    current_a : array_like (N,)
        Measured current, A, positive on discharge.
    voltage_v : array_like (N,), optional
        Terminal voltage, V: confirms rests (relaxation) and marks voltage-limited steps.
    offset_a : float, optional
        Known sensor zero offset, A; default estimated from the rests (0 when none is found).
    min_rest_s : float, optional
        A rest shorter than this between two steps of the same sign and similar current is
        joined into them (default: 3 median sample intervals, at most 2 s).
    gap_s : float, optional
        Intervals longer than this are gaps (default ``max(60 s, 20 x median interval)``).
    jump_fraction : float
        A step is split where the current changes by more than this fraction of its level.
    on_sigmas, off_sigmas : float
        The switching thresholds in noise sigmas (on > off).
    threshold_a : float, optional
        Use this fixed rest threshold (A) for both switching levels instead of the noise-based
        ones (the offset is still estimated and subtracted).

    Returns
    -------
    Segmentation

    Raises
    ------
    SegmentError
        Fewer than 2 samples, or non-finite time or current.
    """
    t = np.asarray(time_s, dtype=float)
    i_raw = np.asarray(current_a, dtype=float)
    n = t.size
    if n < 2 or i_raw.shape != t.shape:
        raise SegmentError(f"segmentation needs at least 2 samples of time_s and current_a (got {n}, {i_raw.size})")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(i_raw))):
        raise SegmentError("time_s and current_a must be finite for segmentation")
    v = None if voltage_v is None else np.asarray(voltage_v, dtype=float)
    dt = np.diff(t)
    med_dt = float(np.median(dt))
    gap_lim = max(60.0, 20.0 * med_dt) if gap_s is None else float(gap_s)
    gap = dt > gap_lim
    notes = []
    noise = noise_floor(i_raw)
    if offset_a is None:
        lvl, n_rest, rest_time, _, note = _rest_level(t, i_raw, v, noise, gap, 16)
        if note:
            notes.append(note)
        if lvl is None:
            offset, offset_sigma, rest_time = 0.0, None, 0.0
        else:
            offset = lvl
            offset_sigma = noise / np.sqrt(max(n_rest, 1))
    else:
        offset, offset_sigma, rest_time = float(offset_a), 0.0, 0.0
    i = i_raw - offset
    if threshold_a is not None:
        on = off = float(threshold_a)
    else:
        on, off = on_sigmas * noise, off_sigmas * noise
    state = _schmitt(i, on, off, gap)
    if offset_a is None and offset_sigma is not None:
        # second pass: the offset from every sample of the long rests the first pass found (the
        # window-mean level above is clipped at +-3 bandwidths; this mean is not), then re-cut
        e = np.diff(np.concatenate([[1], (state != 0).astype(np.int8), [1]]))
        rs, re_ = np.flatnonzero(e == -1), np.flatnonzero(e == 1)
        use = np.zeros(n, dtype=bool)
        for a, b in zip(rs, re_):
            if b - a >= 4 and t[b - 1] - t[a] >= 60.0 and not np.any(gap[a:b - 1]):
                # only rests at the first pass's level: a small steady load below the switching
                # threshold (a BMS's own supply) is not a rest
                run = i_raw[a + 1:b - 1]  # edge samples may hold a step's tail
                if abs(float(np.mean(run)) - offset) <= max(4.0 * noise / np.sqrt(run.size), 2.0 * noise / 4.0):
                    use[a + 1:b - 1] = True
        if np.count_nonzero(use) >= 10:
            offset = float(np.mean(i_raw[use]))
            # standard error from the rest samples' own spread (the noise floor is a low quantile)
            offset_sigma = float(np.std(i_raw[use])) / np.sqrt(np.count_nonzero(use))
            rest_time = float(np.sum(dt[use[:-1] & use[1:]]))
            i = i_raw - offset
            state = _schmitt(i, on, off, gap)
    # join short rests between steps of one sign and level (a noise dip in a low-current step)
    min_rest = min(3.0 * med_dt, 2.0) if min_rest_s is None else float(min_rest_s)
    brk = np.zeros(n, dtype=bool)
    brk[0] = True
    brk[1:] = (state[1:] != state[:-1]) | gap
    starts = np.flatnonzero(brk)
    stops = np.concatenate([starts[1:], [n]])
    for a, b in zip(starts, stops):
        if state[a] != 0 or a == 0 or b >= n:
            continue
        if state[a - 1] == state[b] and state[b] != 0 and t[b] - t[a - 1] <= min_rest + med_dt and \
                not np.any(gap[a - 1:b]):
            lvl_a, lvl_b = i[a - 1], i[b]
            if abs(lvl_a - lvl_b) <= jump_fraction * max(abs(lvl_a), abs(lvl_b)):
                state[a:b] = state[b]
    # run boundaries: state changes, gaps and level jumps inside a step
    brk = np.zeros(n, dtype=bool)
    brk[0] = True
    brk[1:] = (state[1:] != state[:-1]) | gap
    jump_floor = 2.0 * on
    active = state != 0
    both = active[1:] & active[:-1]
    jump = both & (np.abs(i[1:] - i[:-1]) > np.maximum(jump_fraction * np.abs(i[:-1]), jump_floor))
    brk[1:] |= jump
    starts = np.flatnonzero(brk)
    stops = np.concatenate([starts[1:], [n]])
    # a piece of a step left entirely inside the hysteresis band (the tail after a jump) is rest, and
    # so is a lone sample that is not clearly above the noise (2 x on: a 4.8-sigma spike is 1 in 10^6)
    changed = False
    for a, b in zip(starts, stops):
        if state[a] != 0 and (np.max(np.abs(i[a:b])) < on or (b - a == 1 and abs(i[a]) < 2.0 * on)):
            state[a:b] = 0
            changed = True
    if changed:
        brk = np.zeros(n, dtype=bool)
        brk[0] = True
        brk[1:] = (state[1:] != state[:-1]) | gap
        active = state != 0
        both = active[1:] & active[:-1]
        brk[1:] |= both & (np.abs(i[1:] - i[:-1]) > np.maximum(jump_fraction * np.abs(i[:-1]), jump_floor))
        starts = np.flatnonzero(brk)
        stops = np.concatenate([starts[1:], [n]])
    q = np.zeros(n)
    q[1:] = np.cumsum(0.5 * (i[:-1] + i[1:]) * dt) / SECONDS_PER_HOUR
    v_noise = None
    if v is not None and np.any(np.isfinite(v)):
        v_noise = noise_floor(v)
    v_top = v_bottom = None
    if v_noise is not None:
        v_top, v_bottom = float(np.nanmax(v)), float(np.nanmin(v))
    segs = []
    names = {0: "rest", 1: "discharge", -1: "charge"}
    for a, b in zip(starts, stops):
        lo, hi = max(a - 1, 0), min(b, n - 1)
        if a > 0 and gap[a - 1]:
            lo = a
        if b < n and gap[b - 1]:
            hi = b - 1
        kind = names[int(state[a])]
        limited = ""
        if v is not None and kind != "rest" and b - a >= 3:
            limited = _voltage_limited(i[a:b], v[a:b], kind, v_noise or 1e-3, v_top, v_bottom)
        segs.append(Segment(kind, int(a), int(b), float(np.mean(i[a:b])), float(t[hi] - t[lo]),
                            float(q[hi] - q[lo]), limited))
    out = Segmentation(tuple(segs), float(offset), None if offset_sigma is None else float(offset_sigma),
                       float(rest_time), float(noise), None if v_noise is None else float(v_noise),
                       float(on), float(off), i, t, tuple(notes))
    return out


def _schmitt(i, on, off, gap):
    """Two-threshold switching on the corrected current: 0 rest, +1 discharge, -1 charge."""
    n = i.size
    state = np.zeros(n, dtype=np.int8)
    s = 0
    for k in range(n):
        x = i[k]
        if k > 0 and gap[k - 1]:
            s = 0
        if s == 0:
            if x > on:
                s = 1
            elif x < -on:
                s = -1
        elif s == 1:
            if x < -on:
                s = -1
            elif x < off:
                s = 0
        else:
            if x > on:
                s = 1
            elif x > -off:
                s = 0
        state[k] = s
    return state


def _voltage_limited(i, v, kind, v_noise, v_top, v_bottom) -> str:
    """``"upper"``/``"lower"`` when the step's voltage sits at the recording's extreme (a limit)
    while ``|i|`` decays (a constant-voltage phase)."""
    good = np.isfinite(v)
    if np.count_nonzero(good) < 3:
        return ""
    tol = max(5.0 * v_noise, 3e-3)
    if kind == "charge":
        held = good & (v >= v_top - tol)
    else:
        held = good & (v <= v_bottom + tol)
    idx = np.flatnonzero(held)
    if idx.size < 3 or idx.size < 0.2 * v.size:
        return ""
    a = np.abs(i[idx])
    if a[-1] < 0.97 * np.max(a[: max(1, idx.size // 3)]):
        return "upper" if kind == "charge" else "lower"
    return ""
