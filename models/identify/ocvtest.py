"""OCV curve and capacity from a low-rate (about C/20) discharge and, when present, charge.

Method (the usual pseudo-OCV procedure; see for example Plett, "Battery Management Systems,
Vol. I: Battery Modeling", Artech House 2015, ch. 2.10, and the DOE/INL battery test manuals'
static-capacity test):

1. The recording is cut into steps by the sign of the current (rest, discharge, charge) with a
   threshold relative to the test current; the longest discharge step (by charge) and the
   longest charge step are the low-rate steps.  No indices are entered by hand.
2. Capacity = the charge delivered by the discharge step, counted with the trapezoid rule of the
   sampling rule (DEVELOPERS.md) including the two edge intervals.  It is "between the voltage
   limits" when the step starts from a rested full cell and ends at the cut-off; otherwise it is
   flagged in ``notes``.
3. Each branch is put on the SOC axis: the discharge from SOC 1 down, the charge from SOC 0 up
   when it follows the discharge (or down from SOC 1 at its end when it precedes it).
4. OCV(SOC) = the mean of the two branches on a common SOC grid (the resistive drop and most of
   the hysteresis cancel); the half-gap is the hysteresis (+ resistive) estimate.  Where only one
   branch exists, that branch shifted by the half-gap at the edge of the overlap is used.
5. The curve is projected onto increasing curves (pool adjacent violators) and its breakpoints
   are placed where it bends (greedy max-error insertion, :mod:`models.identify.curves`).
6. Coulombic efficiency = discharge charge / charge put back, when the charge starts from the
   empty cell and ends full (a constant-voltage taper at the upper limit is seen).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording, RecordingError, charge_throughput_ah
from socfuse.models.segment import segment_recording
from socfuse.models.identify.curves import curve_from_dense, isotonic_increasing, MIN_STEP_V

__all__ = ["Step", "find_steps", "steps_from_segmentation", "OcvTestResult", "identify_ocv_test", "OcvTestError"]


class OcvTestError(RecordingError):
    """The low-rate test cannot be used (no discharge or charge step found, ...)."""


@dataclass(frozen=True)
class Step:
    """A run of samples with one current direction.

    ``kind`` is ``"rest"``, ``"discharge"`` or ``"charge"``; ``start``/``stop`` are sample
    indices (``stop`` exclusive); ``charge_ah`` is the signed trapezoid charge over the step
    including its two edge intervals (positive on discharge).
    """

    kind: str
    start: int
    stop: int
    charge_ah: float
    mean_current_a: float
    duration_s: float


def steps_from_segmentation(seg) -> list[Step]:
    """The :class:`Step` list of a :class:`models.segment.Segmentation` (offset-corrected charges).

    Neighbouring segments of one kind (a constant-current step and the constant-voltage taper
    after it, split where the current fell fast) are one step here.

    Parameters
    ----------
    seg : Segmentation
        Output of :func:`socfuse.models.segment.segment_recording` (its time in s, current in A with
        the sensor offset removed, and segments).

    Returns
    -------
    list of Step
        One step per run of same-kind segments: kind, start and stop sample, charge in Ah
        (positive on discharge), mean current in A and duration in s.
    """
    t, i = seg.time_s, seg.current_a
    n = t.size
    q = charge_throughput_ah(t, i)
    groups = []
    for sg in seg.segments:
        if groups and groups[-1][0] == sg.kind and groups[-1][2] == sg.start:
            groups[-1][2] = sg.stop
        else:
            groups.append([sg.kind, sg.start, sg.stop])
    out = []
    for kind, a, b in groups:
        lo, hi = max(a - 1, 0), min(b, n - 1)
        out.append(Step(kind, int(a), int(b), float(q[hi] - q[lo]), float(np.mean(i[a:b])), float(t[hi] - t[lo])))
    return out


def find_steps(rec: Recording, threshold_a: float | None = None, segmentation=None) -> list[Step]:
    """Cut a recording into rest, discharge and charge steps.

    Parameters
    ----------
    rec : Recording
    threshold_a : float, optional
        Fixed ``|current|`` rest threshold, A.  Default: the noise-based switching thresholds of
        :func:`models.segment.segment_recording` (which also estimates and subtracts the sensor
        zero offset); a constant-voltage taper stays a charge step while its current is above
        3 noise sigmas.
    segmentation : Segmentation, optional
        A segmentation already made for ``rec``.

    Returns
    -------
    list of Step, in time order (charges offset-corrected)
    """
    seg = segmentation or segment_recording(rec.time_s, rec.current_a, rec.voltage_v, threshold_a=threshold_a)
    return steps_from_segmentation(seg)


@dataclass(frozen=True, eq=False)
class OcvTestResult:
    """What a low-rate test gave.

    Attributes
    ----------
    capacity_ah : float
        Charge delivered by the low-rate discharge (or stored by the charge when there is no
        discharge), Ah.
    ocv : OcvCurve
        The curve chosen by this test (average of both branches when both exist).
    soc_grid : ndarray (m,)
        Common SOC grid of the dense curves below.
    average_v, discharge_v, charge_v, half_gap_v : ndarray (m,)
        Dense curves on ``soc_grid`` (NaN where a branch does not reach).  ``average_v`` is
        complete (extended by the shifted single branch where needed).
    discharge_curve : OcvCurve or None
        The discharge branch alone made monotone (pseudo-OCV with the resistive drop).
    hysteresis_v : float or None
        Median half-gap between the branches over their overlap (V); includes the resistive
        drop at the test current.
    coulombic_efficiency : float or None
    v_min_v, v_max_v : float
        Voltage limits seen (cut-off at the end of the discharge, end of charge).
    test_current_a : float
        Median |current| of the low-rate steps.
    breakpoint_error_v : float
        Largest difference between the breakpoint curve and the dense monotone curve.
    notes : tuple of str
        What could not be estimated and why.
    source : str
        File / recording name.
    offset_a, offset_sigma_a : float, float or None
        Current-sensor zero offset subtracted before counting charge, and its standard error (A).
    segmentation : dict
        Summary of the segmentation (noise floor, thresholds, counts).
    """

    capacity_ah: float
    ocv: OcvCurve
    soc_grid: np.ndarray
    average_v: np.ndarray
    discharge_v: np.ndarray
    charge_v: np.ndarray
    half_gap_v: np.ndarray
    discharge_curve: OcvCurve | None
    hysteresis_v: float | None
    coulombic_efficiency: float | None
    v_min_v: float
    v_max_v: float
    test_current_a: float
    breakpoint_error_v: float
    notes: tuple = ()
    source: str = ""
    steps: tuple = field(default=(), repr=False)
    offset_a: float = 0.0
    offset_sigma_a: float | None = None
    segmentation: dict = field(default_factory=dict, repr=False)

    def provenance(self) -> dict:
        return {
            "file": self.source, "test": "low-rate OCV test",
            "capacity_ah": self.capacity_ah, "test_current_a": self.test_current_a,
            "hysteresis_half_gap_v": self.hysteresis_v, "coulombic_efficiency": self.coulombic_efficiency,
            "breakpoint_error_v": self.breakpoint_error_v, "notes": list(self.notes),
            "current_offset_a": self.offset_a, "current_offset_sigma_a": self.offset_sigma_a,
        }


def _branch_on_grid(soc, v, grid):
    """Interpolate a branch (any order) onto the grid; NaN outside its SOC span."""
    order = np.argsort(soc, kind="stable")
    s, vv = soc[order], v[order]
    s, idx = np.unique(s, return_index=True)
    vv = vv[idx]
    out = np.interp(grid, s, vv)
    out[(grid < s[0] - 1e-9) | (grid > s[-1] + 1e-9)] = np.nan
    return out


def identify_ocv_test(rec: Recording, n_breakpoints: int = 41, v_min_v: float | None = None,
                      v_max_v: float | None = None, threshold_a: float | None = None,
                      n_grid: int = 401, limit_tol_v: float = 0.05,
                      edge_trim: float = 0.03, offset_a: float | None = None) -> OcvTestResult:
    """Identify OCV(SOC), capacity, hysteresis and coulombic efficiency from a low-rate test.

    Parameters
    ----------
    rec : Recording
        The low-rate test (current positive on discharge).
    n_breakpoints : int
        Number of OCV breakpoints (placed where the curve bends).
    v_min_v, v_max_v : float, optional
        Voltage limits.  Default: the discharge end voltage and the charge end voltage (or the
        rested voltage before the discharge), rounded to 10 mV.
    threshold_a : float, optional
        Fixed rest threshold for :func:`find_steps` (default: from the recording's noise floor).
    offset_a : float, optional
        Known current-sensor zero offset, A (default: estimated from the rests by
        :func:`models.segment.segment_recording`; it is subtracted before any charge is counted).
    n_grid : int
        Points of the dense common SOC grid.
    limit_tol_v : float
        A discharge that ends more than this above ``v_min_v`` (or starts from a rested voltage
        more than 3x this below ``v_max_v``) is flagged as not spanning the limits.
    edge_trim : float
        SOC trimmed from each end of the branches' overlap before averaging.

    Returns
    -------
    OcvTestResult

    Raises
    ------
    OcvTestError
        No discharge or charge step of useful length.
    """
    where = rec.name or "low-rate test"
    seg = segment_recording(rec.time_s, rec.current_a, rec.voltage_v, offset_a=offset_a, threshold_a=threshold_a)
    steps = steps_from_segmentation(seg)
    # every charge below is counted with the offset-corrected current
    t, i, v = rec.time_s, seg.current_a, rec.voltage_v
    if np.any(~np.isfinite(v)):
        k = int(np.argmax(~np.isfinite(v)))
        raise OcvTestError(f"{where}: column voltage_v is missing (NaN) at row {k}")
    q = charge_throughput_ah(t, i)
    dis = [s for s in steps if s.kind == "discharge"]
    chg = [s for s in steps if s.kind == "charge"]
    d = max(dis, key=lambda s: s.charge_ah) if dis else None
    c = max(chg, key=lambda s: -s.charge_ah) if chg else None
    min_pts = 10
    if d is not None and d.stop - d.start < min_pts:
        d = None
    if c is not None and c.stop - c.start < min_pts:
        c = None
    if d is None and c is None:
        raise OcvTestError(f"{where}: no low-rate discharge or charge step with at least {min_pts} samples "
                           "(column current_a)")
    notes = []
    grid = np.linspace(0.0, 1.0, int(n_grid))
    nanv = np.full(grid.size, np.nan)

    # ---- voltage limits
    if v_min_v is None:
        v_min_v = round(float(v[d.stop - 1]), 2) if d is not None else round(float(v[c.start]), 1)
    if v_max_v is None:
        if c is not None:
            v_max_v = round(float(np.max(v[c.start:c.stop])), 2)
        else:
            v_max_v = round(float(np.max(v[max(d.start - 1, 0):d.stop])), 2)
    test_currents = []

    # ---- capacity and discharge branch
    cap = None
    dis_v = nanv.copy()
    if d is not None:
        lo = max(d.start - 1, 0)
        hi = min(d.stop, i.size - 1)
        cap = float(q[hi] - q[lo])
        test_currents.append(float(np.median(np.abs(i[d.start:d.stop]))))
        if v[d.stop - 1] > v_min_v + limit_tol_v:
            notes.append(f"the discharge ends at {v[d.stop - 1]:.3f} V, above the {v_min_v:.3f} V cut-off: "
                         "capacity underestimated")
        v_start = float(v[lo])
        if v_start < v_max_v - 3 * limit_tol_v:
            notes.append(f"the discharge starts at {v_start:.3f} V, well below {v_max_v:.3f} V: the cell "
                         "was not full; capacity underestimated")
    # ---- charge branch, placed relative to the discharge
    ch_v = nanv.copy()
    q_ch = None
    eta = None
    if c is not None:
        lo = max(c.start - 1, 0)
        hi = min(c.stop, i.size - 1)
        q_ch = float(q[lo] - q[hi])  # charge put in, positive
        cc = np.abs(i[c.start:c.stop])
        test_currents.append(float(np.median(cc)))
        # the end current from the last few samples (one noisy sample must not decide)
        cc_end = float(np.median(cc[-3:]))
        taper = cc_end < 0.7 * np.median(cc) and np.max(v[c.start:c.stop]) >= v_max_v - 0.01
        follows = d is not None and c.start >= d.stop
        if cap is None:
            cap = q_ch
            notes.append("no low-rate discharge step: capacity is the charge stored (coulombic efficiency "
                         "taken as 1) and the OCV is the charge branch shifted by nothing (no hysteresis "
                         "or resistive drop estimate)")
        if d is not None and follows and taper:
            eta = cap / q_ch
            # uncertainty of the ratio from the offset's standard error over both steps' durations
            # (plus 0.1 % for the rest of the counting): above 1 within it means "1"
            sig = 0.001
            if seg.offset_sigma_a is not None and cap > 0:
                dur_h = (d.duration_s + c.duration_s) / 3600.0
                sig += 2.0 * seg.offset_sigma_a * dur_h / cap
            if 1.0 < eta <= 1.0 + 3.0 * sig:
                notes.append(f"coulombic efficiency measured {eta:.4f}, within its uncertainty of 1: 1 is used")
                eta = 1.0
            elif not (0.9 < eta <= 1.0):
                notes.append(f"coulombic efficiency {eta:.4f} outside (0.9, 1]: not used")
                eta = None
        elif d is not None:
            why = ("the charge does not end with a constant-voltage taper at the upper limit (it stops "
                   f"after {q_ch:.4f} Ah of the {cap:.4f} Ah discharged)") if not taper else \
                "the charge does not start from the empty cell after the discharge"
            notes.append(f"coulombic efficiency not estimated: {why}; 1 is used")
        eta_use = 1.0 if eta is None else eta
        qc = -(q[c.start:c.stop] - q[lo])  # charged so far at each sample
        if d is None or follows:
            soc_c = eta_use * qc / cap
        else:  # charge precedes the discharge: it ends full
            soc_c = 1.0 - eta_use * (q_ch - qc) / cap
        ch_v = _branch_on_grid(soc_c, v[c.start:c.stop], grid)
    if d is not None:
        lo = max(d.start - 1, 0)
        soc_d = 1.0 - (q[d.start:d.stop] - q[lo]) / cap
        dis_v = _branch_on_grid(soc_d, v[d.start:d.stop], grid)
    else:
        notes.append("no low-rate discharge step: no discharge branch")
    if c is None:
        notes.append("no low-rate charge step: the OCV is the discharge branch (includes the resistive drop "
                     "and the discharge side of the hysteresis); no hysteresis or coulombic efficiency "
                     "estimate")

    # ---- average of the branches
    both = np.isfinite(dis_v) & np.isfinite(ch_v)
    half_gap = np.where(both, 0.5 * (ch_v - dis_v), np.nan)
    hyst = None
    if d is not None and c is not None and np.count_nonzero(both) >= 5:
        idx = np.flatnonzero(both)
        # a branch is distorted within a few % SOC of its own ends (the current starts or the
        # voltage runs into a limit): trim the overlap by ``edge_trim`` at both ends
        lo_s, hi_s = grid[idx[0]] + edge_trim, grid[idx[-1]] - edge_trim
        use = both & (grid >= lo_s) & (grid <= hi_s)
        if np.count_nonzero(use) < 5:
            use = both
        idx = np.flatnonzero(use)
        avg = np.where(use, 0.5 * (ch_v + dis_v), np.nan)
        hyst = float(np.median(half_gap[use]))
        # extend outside the overlap by the single branch shifted by the half gap next to it
        n_edge = max(5, idx.size // 10)
        lo_gap = float(np.median(half_gap[idx[:n_edge]]))
        hi_gap = float(np.median(half_gap[idx[-n_edge:]]))
        below = grid < grid[idx[0]]
        above = grid > grid[idx[-1]]
        for mask, gap in ((below, lo_gap), (above, hi_gap)):
            fill = np.where(np.isfinite(dis_v), dis_v + gap, ch_v - gap)
            avg = np.where(mask, fill, avg)
        if grid[idx[-1]] < 0.99 or grid[idx[0]] > 0.01:
            notes.append(f"both branches used over SOC {grid[idx[0]]:.3f}..{grid[idx[-1]]:.3f}; outside it the "
                         "single branch shifted by the half-gap next to that range is used")
        label = "low-rate average (discharge/charge mean)"
    elif d is not None:
        avg = dis_v
        label = "low-rate discharge branch"
    else:
        avg = ch_v
        label = "low-rate charge branch"
    # fill any remaining hole at the very ends by nearest value (a branch may stop a grid step short)
    good = np.isfinite(avg)
    if not np.all(good):
        avg = np.interp(grid, grid[good], avg[good])
    src = f"{label} from {where}"
    curve, err = curve_from_dense(grid, avg, n_breakpoints, src)
    dis_curve = None
    if d is not None:
        g = np.isfinite(dis_v)
        dv = np.interp(grid, grid[g], dis_v[g])
        dis_curve, _ = curve_from_dense(grid, dv, n_breakpoints, f"low-rate discharge branch from {where}")
    return OcvTestResult(
        capacity_ah=float(cap), ocv=curve, soc_grid=grid,
        average_v=isotonic_increasing(avg, min_step=MIN_STEP_V), discharge_v=dis_v, charge_v=ch_v,
        half_gap_v=half_gap, discharge_curve=dis_curve, hysteresis_v=hyst, coulombic_efficiency=eta,
        v_min_v=float(v_min_v), v_max_v=float(v_max_v),
        test_current_a=float(np.median(test_currents)) if test_currents else 0.0,
        breakpoint_error_v=err, notes=tuple(notes) + tuple(seg.notes), source=where, steps=tuple(steps),
        offset_a=seg.offset_a, offset_sigma_a=seg.offset_sigma_a, segmentation=seg.as_dict())
