"""Is an identified model physically plausible?  Chemistry-agnostic range checks with reasons.

An identification that runs to the end is not yet a model: mislabelled units (a current in mA
read as A, a time in minutes read as seconds), a test that did not span the voltage window, or a
fit that failed quietly produce numbers that no cell has.  Each check below names the table, the
SOC (and temperature) and the value; :func:`check_model` returns the list of problems and
:func:`models.identify.pipeline.identify` refuses the model (``IdentifyError``, exit 2 in the
CLI) unless the caller passes ``allow_implausible=True`` (``--accept-implausible``).

The bounds are deliberately wide, facts of the trade for lithium-ion cells of any chemistry
(common practice, no source; the figures are from memory):

- capacity 5 mAh .. 2000 Ah (coin cells to large storage prismatics);
- series resistance positive, 20 uOhm .. 20 Ohm, and R0 x capacity 0.001 .. 10 Ohm Ah (a cell's
  area-specific resistance: a 3 Ah 18650 at 25 mOhm is 0.075 Ohm Ah, a 280 Ah prismatic at
  0.25 mOhm 0.07 Ohm Ah; the bound catches a factor 1000 error in either unit);
- RC resistances positive; time constants inside the time scales the pulse test can show (half
  its shortest sample interval to three times its longest relaxation window);
- the low-rate test runs between C/200 and C/2 (a "C/20" test that took 50 days, or 3 minutes, is
  a time-unit error), and no pulse exceeds 30C;
- the charge moved in a pulse test is at most 110 % of the capacity;
- the OCV curve spans the voltage window: OCV(1) within 20 % of the window below ``v_max`` and
  OCV(0) within 40 % above ``v_min`` (no chemistry's voltages are assumed: only the window the
  tests themselves reached);
- coulombic efficiency in (0.9, 1].
"""
from __future__ import annotations

import numpy as np

from socfuse.models.recording import charge_throughput_ah

__all__ = ["check_model"]

CAPACITY_RANGE_AH = (0.005, 2000.0)
R0_RANGE_OHM = (20e-6, 20.0)
R0_Q_RANGE_OHM_AH = (1e-3, 10.0)
LOW_RATE_RANGE_C = (1.0 / 200.0, 0.5)
MAX_PULSE_C = 30.0


def _where(soc, temp):
    return f"SOC {100 * soc:.0f} %" + ("" if temp is None else f", {temp:.1f} degC")


def _table_points(table):
    soc = np.asarray(table.soc, dtype=float)
    vals = np.atleast_2d(np.asarray(table.values, dtype=float))
    temps = [None] if table.temperature_c is None else list(np.asarray(table.temperature_c, dtype=float))
    for r, tc in enumerate(temps):
        for k, s in enumerate(soc):
            yield float(s), tc, float(vals[r, k])


def check_model(model, ocv_result, pulse_results) -> list[str]:
    """Problems with an identified model, one line each (empty when plausible).

    Parameters
    ----------
    model : CellModel
        The identified model.
    ocv_result : OcvTestResult
        The low-rate test analysis (test current, voltage limits).
    pulse_results : list of PulseTestResult
        The pulse-test analyses (offset-corrected recordings, relaxation windows).

    Returns
    -------
    list of str
    """
    out = []
    q = float(model.capacity_ah)
    lo, hi = CAPACITY_RANGE_AH
    if not (lo <= q <= hi):
        out.append(f"capacity {q:.4g} Ah outside {lo:g}..{hi:g} Ah for any lithium-ion cell (current or time "
                   "in the wrong unit?)")
    if ocv_result.test_current_a > 0 and q > 0:
        c_rate = ocv_result.test_current_a / q
        a, b = LOW_RATE_RANGE_C
        if not (a <= c_rate <= b):
            out.append(f"low-rate test at {c_rate:.3g}C ({ocv_result.test_current_a:.4g} A for {q:.4g} Ah): outside "
                       f"C/{1 / a:.0f}..C/{1 / b:.0f} (time or current in the wrong unit?)")
    # R0
    for s, tc, r in _table_points(model.r0_ohm):
        if not (np.isfinite(r) and r > 0):
            out.append(f"table r0_ohm at {_where(s, tc)}: R0 {r:.4g} ohm is not positive")
            continue
        if not (R0_RANGE_OHM[0] <= r <= R0_RANGE_OHM[1]):
            out.append(f"table r0_ohm at {_where(s, tc)}: R0 {r * 1000:.4g} mOhm outside "
                       f"{R0_RANGE_OHM[0] * 1e3:g}..{R0_RANGE_OHM[1] * 1e3:g} mOhm")
        elif not (R0_Q_RANGE_OHM_AH[0] <= r * q <= R0_Q_RANGE_OHM_AH[1]):
            out.append(f"table r0_ohm at {_where(s, tc)}: R0 x capacity {r * q:.3g} ohm Ah outside "
                       f"{R0_Q_RANGE_OHM_AH[0]:g}..{R0_Q_RANGE_OHM_AH[1]:g} (unit error?)")
    # RC pairs against the time scales the pulse tests show
    dts, windows = [], []
    for res in pulse_results:
        t = res.recording.time_s if res.recording is not None else None
        if t is not None and t.size > 1:
            dts.append(float(np.min(np.diff(t))))
        for pf in res.pulses:
            for f in pf.fits.values():
                if np.isfinite(f.span_s):
                    windows.append(float(f.span_s))
    tau_lo = 0.5 * min(dts) if dts else 0.0
    tau_hi = 3.0 * max(windows) if windows else np.inf
    for j, pair in enumerate(model.rc):
        for s, tc, r in _table_points(pair.r_ohm):
            if not (np.isfinite(r) and r > 0):
                out.append(f"table r{j + 1}_ohm at {_where(s, tc)}: R{j + 1} {r:.4g} ohm is not positive")
        for s, tc, tau in _table_points(pair.tau_s):
            if not (np.isfinite(tau) and tau_lo <= tau <= tau_hi):
                out.append(f"table tau{j + 1}_s at {_where(s, tc)}: tau{j + 1} {tau:.4g} s outside the pulse "
                           f"tests' time scales {tau_lo:.3g}..{tau_hi:.4g} s")
    # charge moved in the pulse tests, and pulse C-rates
    for res in pulse_results:
        rec = res.recording
        if rec is None or rec.n < 2 or q <= 0:
            continue
        moved = charge_throughput_ah(rec.time_s, rec.current_a)
        swing = float(np.max(moved) - np.min(moved))
        if swing > 1.1 * q:
            out.append(f"pulse test {res.source}: moves {swing:.4g} Ah, more than 110 % of the capacity "
                       f"{q:.4g} Ah (capacity far from the charge moved; units of the two files?)")
        peak = float(np.max(np.abs(rec.current_a))) / q
        if peak > MAX_PULSE_C:
            out.append(f"pulse test {res.source}: peak current {peak:.3g}C above {MAX_PULSE_C:g}C for a "
                       f"{q:.4g} Ah capacity (units?)")
    # OCV spans the voltage window the tests reached
    vmin, vmax = float(model.v_min_v), float(model.v_max_v)
    win = vmax - vmin
    o1 = float(model.ocv.voltage(1.0))
    o0 = float(model.ocv.voltage(0.0))
    if o1 < vmax - 0.2 * win:
        out.append(f"table ocv at SOC 100 %: {o1:.4f} V, more than 20 % of the {vmin:.3f}..{vmax:.3f} V window "
                   "below its top (the low-rate test did not start full?)")
    if o0 > vmin + 0.4 * win:
        out.append(f"table ocv at SOC 0 %: {o0:.4f} V, more than 40 % of the {vmin:.3f}..{vmax:.3f} V window "
                   "above its bottom (the low-rate discharge did not reach the cut-off?)")
    eta = float(model.coulombic_efficiency)
    if not (0.9 < eta <= 1.0):
        out.append(f"coulombic efficiency {eta:.4f} outside (0.9, 1]")
    return out
