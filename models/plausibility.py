"""Is this recording plausible for this cell model?  Unit, sign and range checks before any estimate.

The loaders convert what the user declared; they cannot know that a current column logged in mA
was declared as A, that a 4-cell pack voltage is fed to a cell model, or that ``soc_ref`` is in
percent.  An estimator then answers confidently and wrongly.  :func:`check_against_model` looks
at a loaded :class:`~models.recording.Recording` beside a :class:`~models.thevenin.CellModel`
(or beside a generic lithium-ion cell when no model exists yet, as in identification) and
returns a list of :class:`Finding` objects; :func:`require_plausible` raises
:class:`ImplausibleInputError` on the first finding of severity ``"error"``, naming the column,
what was seen and the option that fixes it.

Checks (each finding names the option that fixes it):

- ``voltage_v``: the 1st..99th percentile band of the finite samples against the model's voltage
  window ``v_min_v .. v_max_v`` (a generic 2.0..4.5 V without a model).  About 1000 times too
  high and inside the window once divided by 1000: millivolts (``--voltage-unit mV``).  Inside
  the window once divided by an integer ``N >= 2``: a pack of ``N`` cells in series
  (``--series-cells N``).  Anything else far outside: the wrong column or the wrong model.
- ``current_a``: the 99.9th percentile of ``|I|`` against the capacity (``C`` = capacity in Ah
  read as A).  Above 50 C and plausible once divided by 1000: milliamps (``--current-unit mA``).
- charge throughput: the largest one-way run of the cumulative charge (the largest rise, or fall,
  of ``Q(t) = integral of I dt`` between two times) cannot exceed the capacity of one cell by
  much; allowed: 1.5 capacity plus 1 % of C per hour of log (room for a current-sensor offset on
  long logs; BMS-grade offsets are about 0.5 % of 1C, DESIGN.md section 7).  Beyond it: the
  current is scaled (mA, or a pack with cells in parallel: ``--parallel-cells M``).
- sign: with current positive on discharge the terminal voltage drops when the discharge
  current steps up (``dV = -R0 dI``, Thevenin model; Hu, Li and Peng, J. Power Sources 198
  (2012)), and falls as charge is drawn (the OCV falls with SOC).  The step slope is measured
  with spikes removed (:func:`spike_samples`); a positive slope larger than a quarter of the model's
  R0, or (when the current never steps) a voltage that rises with drawn charge over more than
  20 % of the capacity, is reported as an inverted sign (``--discharge-negative`` /
  ``--discharge-positive``).
- current scale: the apparent resistance ``|dV/dI|`` at the current steps lies within 1/50..100
  times the model's R0 on every real and simulated recording we checked (6.6..443 mOhm for the
  Panasonic 18650PF files against about 30 mOhm); outside it (0.1 mOhm..10 Ohm without a model) the
  current is about 1000 times off (mA read as A, or A read as mA).
- ``soc_ref``: values above 1.5 and at most 100.5 are percent (``--soc-ref-unit percent``);
  other values outside -0.05..1.05 are refused.
- spikes: isolated samples far from their neighbours (a 5-sample running median) in current or
  voltage are outliers, not a sign or unit error; they are refused (they would be integrated as
  charge) unless ``--trust-input``, or dropped with ``--drop-spikes`` (:func:`drop_spikes`).
- ``temperature_c``: a median of 200..400 with every value above 150 is kelvin read as degC
  (``--temperature-unit K``); other values outside -60..150 degC are not a cell temperature
  (lithium-ion cells operate well inside it; common practice, no source).
- missing voltage samples and a dropped truncated last line are reported as warnings.

Every ``"error"`` finding can be overridden with ``--trust-input`` (``trust=True``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.recording import Recording, RecordingError

__all__ = ["Finding", "ImplausibleInputError", "check_against_model", "require_plausible", "spike_samples",
           "drop_spikes",
           "GENERIC_CELL_WINDOW_V", "TRUST_OPTION"]

#: Voltage window assumed for a lithium-ion cell when no model exists yet (identification):
#: LFP rests at about 2.5..3.65 V, NMC/LCO about 2.5..4.2 V (common practice, no source).
GENERIC_CELL_WINDOW_V = (2.0, 4.5)
#: The command-line option that lets an implausible recording through.
TRUST_OPTION = "--trust-input"

_MAX_C_RATE = 50.0          # |I| above this many C (99.9th percentile) is not a cell current
_SPIKE_C_RATE = 10.0        # a current spike departs from its neighbours by more than this many C
_SPIKE_V = 1.0              # a voltage spike departs from its neighbours by more than this, V per cell


class ImplausibleInputError(RecordingError):
    """The recording does not fit the model: a likely unit, sign or column mistake."""


@dataclass(frozen=True)
class Finding:
    """One plausibility finding.

    Parameters
    ----------
    code : str
        Short identifier (``"voltage-mv"``, ``"voltage-pack"``, ``"current-ma"``,
        ``"charge-throughput"``, ``"sign-inverted"``, ``"soc-ref-percent"``, ``"soc-ref-range"``,
        ``"spikes"``, ``"voltage-range"``, ``"current-range"``, ``"current-scale"``,
        ``"temperature-kelvin"``, ``"temperature-range"``, ``"voltage-missing"``, ``"truncated-row"``).
    column : str
        Canonical column concerned (``current_a``, ``voltage_v``, ``soc_ref``).
    severity : {"error", "warning"}
        An error stops a command unless the input is trusted.
    seen : str
        What was seen, with units.
    fix : str
        The option (or action) that fixes it.
    """

    code: str
    column: str
    severity: str
    seen: str
    fix: str

    def message(self, source: str = "") -> str:
        """One line: ``source: column: seen; fix``."""
        head = f"{source}: " if source else ""
        return f"{head}{self.column}: {self.seen}" + (f"; {self.fix}" if self.fix else "")


def _spikes(x: np.ndarray, floor: float) -> np.ndarray:
    """Spike samples of ``x``: departures above ``floor`` and 20 times the signal's own 99th-percentile
    departure from its running median; none when they are not rare (more than 0.5 % of samples)."""
    a = np.asarray(x, dtype=float)
    if a.size < 5:
        return np.zeros(a.size, dtype=bool)
    ok = np.isfinite(a)
    b = np.where(ok, a, np.interp(np.arange(a.size), np.flatnonzero(ok), a[ok])) if 0 < ok.sum() < a.size else a
    if not ok.any():
        return np.zeros(a.size, dtype=bool)
    pad = np.concatenate([np.full(2, b[0]), b, np.full(2, b[-1])])
    dev = np.abs(b - np.median(np.lib.stride_tricks.sliding_window_view(pad, 5), axis=1))
    scale = float(np.percentile(dev, 99))
    mask = (dev > max(floor, 20.0 * scale)) & ok
    if mask.sum() > max(3, 0.005 * a.size):
        return np.zeros(a.size, dtype=bool)
    return mask


def spike_samples(rec: Recording, model=None) -> np.ndarray:
    """Samples of ``rec`` that are isolated current or voltage outliers (see :func:`check_against_model`).

    Parameters
    ----------
    rec : Recording
    model : CellModel, optional
        Sets the current floor (10 C); without it 5 times the 99th percentile of ``|I|`` (at least 1 A).

    Returns
    -------
    ndarray of bool (N,)
    """
    i_spk, v_spk = _spike_masks(rec, model)
    return i_spk | v_spk


def drop_spikes(rec: Recording, model=None) -> tuple[Recording, int]:
    """``rec`` without its spike samples (:func:`spike_samples`), and how many were dropped.

    The rows are removed (the interval around each becomes one longer interval, bridged by the
    neighbouring samples as any sampling interval is); ``metadata["spikes_dropped"]`` lists
    their times, s.

    Parameters
    ----------
    rec : Recording
    model : CellModel, optional

    Returns
    -------
    (Recording, int)
    """
    mask = spike_samples(rec, model)
    n = int(mask.sum())
    if n == 0:
        return rec, 0
    keep = ~mask
    if keep.sum() < 2:
        raise RecordingError(f"recording {rec.name!r}: fewer than 2 samples left without the spikes")
    meta = dict(rec.metadata or {})
    meta["spikes_dropped"] = [float(x) for x in rec.time_s[mask]]
    extras = meta.get("extras")
    if isinstance(extras, dict):
        meta["extras"] = {k: (np.asarray(v)[keep] if np.shape(v) == rec.time_s.shape else v) for k, v in extras.items()}
    opt = lambda a: None if a is None else a[keep]  # noqa: E731
    return Recording(rec.time_s[keep], rec.current_a[keep], rec.voltage_v[keep], opt(rec.temperature_c),
                     opt(rec.soc_ref), rec.name, meta), n


def _spike_masks(rec: Recording, model=None):
    v_all = rec.voltage_v
    fin_v = np.isfinite(v_all)
    hi = float(model.v_max_v) if model is not None else GENERIC_CELL_WINDOW_V[1]
    cap = float(model.capacity_ah) if model is not None else None
    v_med = float(np.median(v_all[fin_v])) if fin_v.any() else 0.0
    cells = max(1.0, round(v_med / hi)) if v_med > hi else 1.0
    i_floor = _SPIKE_C_RATE * cap if cap else 5.0 * max(1.0, float(np.percentile(np.abs(rec.current_a), 99)))
    return _spikes(rec.current_a, i_floor), _spikes(v_all, _SPIKE_V * cells)


def _rows(mask, rec: Recording, k: int = 3) -> str:
    idx = np.flatnonzero(mask)[:k]
    return ", ".join(f"t={rec.time_s[j]:.6g} s" for j in idx)


def _charge_ah(t: np.ndarray, i: np.ndarray, gap_factor: float = 5.0) -> np.ndarray:
    """Cumulative charge (Ah, + = discharge) by the interval-mean rule, counting nothing over
    logging gaps (intervals longer than ``gap_factor`` median intervals: the current is unknown)."""
    dt = np.diff(t)
    if dt.size == 0:
        return np.zeros(t.size)
    dq = 0.5 * (i[1:] + i[:-1]) * dt
    dq[dt > gap_factor * float(np.median(dt))] = 0.0
    return np.concatenate([[0.0], np.cumsum(dq)]) / 3600.0


def _max_run(t: np.ndarray, i: np.ndarray, gap_factor: float = 5.0) -> tuple[float, float]:
    """Largest rise and largest fall of the cumulative charge between two times of one stretch
    without logging gaps (across a gap the cell may have been charged or discharged unseen), Ah."""
    dt = np.diff(t)
    if dt.size == 0:
        return 0.0, 0.0
    cuts = np.flatnonzero(dt > gap_factor * float(np.median(dt))) + 1
    rise = fall = 0.0
    for a, b in zip(np.concatenate([[0], cuts]), np.concatenate([cuts, [t.size]])):
        if b - a < 2:
            continue
        q = _charge_ah(t[a:b], i[a:b], np.inf)
        rise = max(rise, float(np.max(q - np.minimum.accumulate(q))))
        fall = max(fall, float(np.max(np.maximum.accumulate(q) - q)))
    return rise, fall


def _voltage_findings(v: np.ndarray, lo: float, hi: float, what: str) -> list[Finding]:
    out: list[Finding] = []
    if v.size == 0:
        return out
    p1, p50, p99 = (float(x) for x in np.percentile(v, [1, 50, 99]))
    margin_lo, margin_hi = 1.0, 0.5  # under load a cell dips well below its cut-off, rises less above
    if p1 >= lo - margin_lo and p99 <= hi + margin_hi:
        return out
    seen = f"median {p50:.5g} V (1..99 % {p1:.5g}..{p99:.5g} V) against {what} {lo:g}..{hi:g} V"
    if p50 > 100 and lo - margin_lo <= p1 / 1000 and p99 / 1000 <= hi + margin_hi:
        return [Finding("voltage-mv", "voltage_v", "error", f"looks like millivolts: {seen}",
                        "load it with --voltage-unit mV")]
    if p50 > hi:
        for n in range(2, 1001):
            if p1 / n >= lo - margin_lo and p99 / n <= hi + margin_hi and lo <= p50 / n <= hi:
                return [Finding("voltage-pack", "voltage_v", "error",
                                f"looks like a pack of about {n} cells in series: {seen}",
                                f"give the cell count with --series-cells {n} (or a cell voltage column)")]
            if p99 / n < lo - margin_lo:
                break
    return [Finding("voltage-range", "voltage_v", "error", f"outside the cell's range: {seen}",
                    "check --voltage-col, --voltage-unit and the model")]


def _scale_findings(rec: Recording, keep: np.ndarray, r0_ohm: float | None) -> list[Finding]:
    """The apparent resistance ``|dV/dI|`` at current steps against the model's R0 (or, without a model,
    against 0.1 mOhm..10 Ohm): a current about 1000 times too large or too small shows here."""
    from socfuse.models.checks import sign_check

    slope, n_used = sign_check(rec.current_a, rec.voltage_v, time_s=rec.time_s, exclude=~keep)
    if slope is None or n_used < 3 or slope == 0:
        return []
    r = abs(slope)
    lo, hi = (r0_ohm / 50.0, r0_ohm * 100.0) if r0_ohm else (1e-4, 10.0)
    against = f"the model's R0 {r0_ohm * 1e3:.3g} mOhm" if r0_ohm else "a lithium-ion cell (0.1 mOhm..10 Ohm)"
    seen = f"the voltage steps give an apparent resistance of {r * 1e3:.4g} mOhm over {n_used} current steps"
    if r < lo:
        return [Finding("current-scale", "current_a", "error", f"looks far too large: {seen}, against {against}",
                        "if the current is logged in mA, load it with --current-unit mA; if it is a pack current, "
                        "give --parallel-cells M")]
    if r > hi:
        return [Finding("current-scale", "current_a", "error", f"looks far too small: {seen}, against {against}",
                        "check --current-unit (A is the default) and --current-col")]
    return []


def _sign_findings(rec: Recording, keep: np.ndarray, r0_ohm: float | None, capacity_ah: float | None,
                   negative_declared: bool) -> list[Finding]:
    from socfuse.models.checks import sign_check

    slope, n_used = sign_check(rec.current_a, rec.voltage_v, time_s=rec.time_s, exclude=~keep)
    t = rec.time_s[keep]
    i = rec.current_a[keep]
    v = rec.voltage_v[keep]
    fix = ("the file may log discharge as positive: drop --discharge-negative (or use --discharge-positive)"
           if negative_declared else "if the file logs discharge as negative, use --discharge-negative")
    if slope is not None and n_used >= 3:
        floor = 0.25 * r0_ohm if r0_ohm else 1e-4
        if slope > floor:
            return [Finding("sign-inverted", "current_a", "error",
                            f"sign looks inverted: the voltage rises when the discharge current rises "
                            f"(dV/dI = {slope * 1e3:+.1f} mOhm over {n_used} steps)", fix)]
        if slope < -floor:
            return []
    # no decisive steps: the voltage should fall as charge is drawn
    if t.size < 2:
        return []
    q = _charge_ah(t, i)
    fin = np.isfinite(v)
    if fin.sum() < 10:
        return []
    span = float(np.ptp(q[fin]))
    if span < (0.2 * capacity_ah if capacity_ah else 1e-3) or np.ptp(v[fin]) == 0:
        return []
    c = float(np.corrcoef(q[fin], v[fin])[0, 1])
    if c > (0.5 if capacity_ah else 0.8):
        return [Finding("sign-inverted", "current_a", "error",
                        f"sign looks inverted: the voltage rises as discharge charge is drawn "
                        f"(correlation {c:+.2f} over {float(np.ptp(q[fin])):.3g} Ah)", fix)]
    return []


def check_against_model(rec: Recording, model=None) -> list[Finding]:
    """Plausibility findings for ``rec`` against ``model`` (module docstring).

    Parameters
    ----------
    rec : Recording
        Loaded recording (SI units, current positive on discharge).
    model : CellModel, optional
        The cell model the recording will be estimated with; None = a generic lithium-ion cell
        (:data:`GENERIC_CELL_WINDOW_V`, no capacity checks), for identification inputs.

    Returns
    -------
    list of Finding
        Errors first, then warnings; empty when nothing looks wrong.

    References
    ----------
    .. [1] X. Hu, S. Li, H. Peng, "A comparative study of equivalent circuit models for Li-ion
       batteries", J. Power Sources 198 (2012) 359-367, doi:10.1016/j.jpowsour.2011.10.013
       (the ohmic step ``dV = -R0 dI`` used for the sign and current-scale checks).
    .. [2] G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based
       HEV battery packs, part 2", J. Power Sources 134 (2004) 262-276,
       doi:10.1016/j.jpowsour.2004.02.032 (coulomb counting: charge drawn over capacity).  (Page
       numbers and DOIs quoted from memory.)
    """
    findings: list[Finding] = []
    meta = rec.metadata or {}
    mapping = meta.get("mapping") or {}
    negative_declared = bool(mapping.get("discharge_negative", False))
    v_all = rec.voltage_v
    fin_v = np.isfinite(v_all)
    if model is not None:
        lo, hi = float(model.v_min_v), float(model.v_max_v)
        ocv = np.asarray(model.ocv.ocv_v, dtype=float)
        lo, hi = min(lo, float(np.min(ocv))), max(hi, float(np.max(ocv)))
        what = f"the cell model{(' ' + repr(model.name)) if model.name else ''}"
        cap = float(model.capacity_ah)
        try:
            r0 = float(np.median(np.asarray(model.r0_ohm.at(np.linspace(0.2, 0.8, 7), 25.0), dtype=float)))
        except (ValueError, TypeError):
            r0 = None
    else:
        lo, hi = GENERIC_CELL_WINDOW_V
        what = "a lithium-ion cell"
        cap, r0 = None, None

    # spikes first: they must not drive the unit and sign checks
    i_spk, v_spk = _spike_masks(rec, model)
    spikes = i_spk | v_spk
    keep = ~spikes
    spike_finding = None
    if spikes.any():
        parts = []
        if i_spk.any():
            big = float(np.max(np.abs(rec.current_a[i_spk])))
            parts.append(f"{int(i_spk.sum())} current spike(s) up to {big:.4g} A ({_rows(i_spk, rec)})")
        if v_spk.any():
            big = float(np.max(np.abs(v_all[v_spk])))
            parts.append(f"{int(v_spk.sum())} voltage spike(s) up to {big:.4g} V ({_rows(v_spk, rec)})")
        col = "current_a" if i_spk.any() else "voltage_v"
        spike_finding = (Finding("spikes", col, "error",
                                "isolated outliers, not a unit or sign error: " + "; ".join(parts),
                                "remove them from the file or load with --drop-spikes (they would be counted "
                                "as charge)"))

    v = v_all[fin_v & keep]
    unit_v = _voltage_findings(v, lo, hi, what)
    findings += unit_v

    i = rec.current_a[keep]
    if cap is not None and i.size:
        p999 = float(np.percentile(np.abs(i), 99.9))
        if p999 > _MAX_C_RATE * cap:
            seen = (f"99.9 % of |I| up to {p999:.5g} A = {p999 / cap:.4g} C for a {cap:.4g} Ah cell "
                    f"(above {_MAX_C_RATE:g} C)")
            if p999 / 1000 <= _MAX_C_RATE * cap:
                findings.append(Finding("current-ma", "current_a", "error", f"looks like milliamps: {seen}",
                                        "load it with --current-unit mA"))
            else:
                findings.append(Finding("current-range", "current_a", "error", f"not a cell current: {seen}",
                                        "check --current-col and --current-unit"))
    if cap is not None and rec.n >= 2 and not any(f.code.startswith("current-") for f in findings):
        t = rec.time_s[keep]
        if t.size >= 2:
            rise, fall = _max_run(t, i)
            hours = float(t[-1] - t[0]) / 3600.0
            allowed = 1.5 * cap + 0.01 * cap * hours
            worst = max(rise, fall)
            if worst > allowed:
                ratio = worst / cap
                way = "discharged" if rise >= fall else "charged"
                fix = ("if the log is of a pack with M cells in parallel, give --parallel-cells M; "
                       "if the current is in mA, --current-unit mA")
                findings.append(Finding("charge-throughput", "current_a", "error",
                                        f"{worst:.4g} Ah {way} in one run, {ratio:.3g} times the "
                                        f"{cap:.4g} Ah capacity (at most {allowed:.3g} Ah fits one cell)", fix))

    units = ("current-ma", "current-range", "voltage-mv", "voltage-pack", "voltage-range")
    if spike_finding is not None and not any(f.code in units for f in findings):
        findings.append(spike_finding)  # with a scale error the "spikes" are that error's consequence
    if not unit_v and not any(f.code in units for f in findings):
        findings += _scale_findings(rec, keep, r0)
    if not unit_v and not any(f.code in units + ("current-scale",) for f in findings):
        findings += _sign_findings(rec, keep, r0, cap, negative_declared)

    if rec.soc_ref is not None:
        s = rec.soc_ref[np.isfinite(rec.soc_ref)]
        if s.size:
            smax, smin = float(s.max()), float(s.min())
            if 1.5 < smax <= 100.5 and smin >= -5.0:
                findings.append(Finding("soc-ref-percent", "soc_ref", "error",
                                        f"looks like percent: values {smin:.4g}..{smax:.4g} for a fraction 0..1",
                                        "load it with --soc-ref-unit percent"))
            elif smax > 1.05 or smin < -0.05:
                findings.append(Finding("soc-ref-range", "soc_ref", "error",
                                        f"values {smin:.4g}..{smax:.4g} outside 0..1",
                                        "check --soc-ref-col (soc_ref is a fraction 0..1)"))

    if rec.temperature_c is not None and rec.temperature_c.size:
        tc = rec.temperature_c[np.isfinite(rec.temperature_c)]
        if tc.size:
            t50, tmin, tmax = float(np.median(tc)), float(tc.min()), float(tc.max())
            if 200.0 <= t50 <= 400.0 and tmin > 150.0:
                findings.append(Finding("temperature-kelvin", "temperature_c", "error",
                                        f"looks like kelvin: median {t50:.5g} (range {tmin:.5g}..{tmax:.5g}) "
                                        "read as degC", "load it with --temperature-unit K"))
            elif tmin < -60.0 or tmax > 150.0:
                findings.append(Finding("temperature-range", "temperature_c", "error",
                                        f"values {tmin:.5g}..{tmax:.5g} degC are not a cell temperature "
                                        "(-60..150 degC)", "check --temperature-col and --temperature-unit"))
    n_missing = int(np.count_nonzero(~fin_v))
    if n_missing:
        findings.append(Finding("voltage-missing", "voltage_v", "warning",
                                f"{n_missing} of {rec.n} samples missing (blank cells); the filters predict "
                                "only there", ""))
    dropped = meta.get("truncated_last_row")
    if dropped:
        findings.append(Finding("truncated-row", "file", "warning",
                                f"the last line looked truncated and was dropped: {dropped}", ""))
    findings.sort(key=lambda f: f.severity != "error")
    return findings


def require_plausible(rec: Recording, model=None, *, trust: bool = False, source: str | None = None):
    """Run :func:`check_against_model`; raise on the first error unless ``trust``.

    Parameters
    ----------
    rec : Recording
    model : CellModel, optional
    trust : bool
        Let errors through (they are returned with the warnings).
    source : str, optional
        Name used in the message (default: the recording's source file).

    Returns
    -------
    list of Finding
        All findings (the warnings, and the errors when ``trust``).

    Raises
    ------
    ImplausibleInputError
        One line: the source, the column, what was seen and the option that fixes it.
    """
    findings = check_against_model(rec, model)
    src = source if source is not None else str((rec.metadata or {}).get("source", rec.name))
    errors = [f for f in findings if f.severity == "error"]
    if errors and not trust:
        raise ImplausibleInputError(errors[0].message(src) + f" (or {TRUST_OPTION} to use it as it is)")
    return findings
