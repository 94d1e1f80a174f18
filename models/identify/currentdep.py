"""Current dependence of the pulse resistance: a Butler-Volmer charge-transfer term.

In the cold the 10 s pulse resistance of a lithium-ion cell falls with the pulse current (the
Panasonic 18650PF at 0 degC: about 90 mOhm at 1.45 A, 68 mOhm at 17.4 A): the charge-transfer
overpotential grows like ``asinh`` of the current, not linearly.  With pulses of several
amplitudes at one SOC level (a "5-pulse" HPPC test) the voltage drop at the end of the pulse is
fitted as::

    dV(I) = R_s I + (2 R T / F) asinh(I / (2 I_0))

the symmetric Butler-Volmer form (transfer coefficient 1/2) of the charge-transfer overpotential
(Bard and Faulkner, "Electrochemical Methods", 2nd ed., Wiley 2001, ch. 3: the current-overpotential
equation), ``R_s`` lumping the ohmic and the (linear) diffusion part within the pulse, ``I_0`` the
exchange current (A, for the whole cell).  Fitted at every SOC level between 20 and 90 % with pulses
of at least three sizes by ``scipy.optimize.least_squares`` (``log I_0``; ``R_s`` linear), and
summarised per temperature by the medians over the levels.

:func:`charge_transfer_from_fits` turns the per-temperature fits into the model's
:class:`models.thevenin.ChargeTransfer` (the excess over the chord at the test's median pulse
current, where the median-over-pulses R0/RC tables hold), used by the simulator and the filter.
A temperature whose pulses do not span a factor 3 in current, or whose fit finds no curvature
(``I_0`` at the upper bound), gets no term; without any fit the model has none (as before).
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares

from socfuse.models.thevenin import FARADAY_C_PER_MOL, GAS_J_PER_MOL_K, ChargeTransfer

__all__ = ["fit_butler_volmer", "current_dependence", "charge_transfer_from_fits", "I0_BOUNDS_A", "MIN_EXCESS_V"]

I0_BOUNDS_A = (1e-4, 1e4)  # search range of the exchange current (A); at the upper bound the drop is linear
# a fitted term smaller than this over the tested currents is no current dependence: one step of a BMS
# voltage channel (DESIGN.md sensor errors: 1 mV steps)
MIN_EXCESS_V = 1e-3


def _bv_drop(i, r_s, i0, temp_k):
    return r_s * i + 2.0 * GAS_J_PER_MOL_K * temp_k / FARADAY_C_PER_MOL * np.arcsinh(i / (2.0 * i0))


def fit_butler_volmer(current_a, drop_v, temperature_c: float) -> dict | None:
    """Fit ``R_s`` and ``I_0`` to pulse drops ``dV(I)`` (see the module docstring).

    Parameters
    ----------
    current_a : array_like
        Pulse current magnitudes, A (at least 3 distinct values).
    drop_v : array_like
        Voltage drop from the rested voltage to the end of the pulse, V (positive).
    temperature_c : float
        Cell temperature, degC.

    Returns
    -------
    dict or None
        ``r_s_ohm``, ``i0_a``, ``rms_v``, ``n`` (None when the currents do not span a factor 3).
    """
    i = np.abs(np.asarray(current_a, dtype=float))
    dv = np.asarray(drop_v, dtype=float)
    ok = np.isfinite(i) & np.isfinite(dv) & (i > 0)
    i, dv = i[ok], dv[ok]
    if i.size < 3 or np.max(i) < 3.0 * np.min(i):
        return None
    tk = float(temperature_c) + 273.15
    b = 2.0 * GAS_J_PER_MOL_K * tk / FARADAY_C_PER_MOL

    def resid(theta):
        i0 = np.exp(theta[0])
        nl = b * np.arcsinh(i / (2.0 * i0))
        r_s = max(float(i @ (dv - nl)) / float(i @ i), 0.0)
        return r_s * i + nl - dv

    grid = np.log(np.geomspace(1e-3, 1e3, 61))
    start = min(grid, key=lambda g: float(np.sum(resid([g]) ** 2)))
    res = least_squares(resid, [start], bounds=(np.log(I0_BOUNDS_A[0]), np.log(I0_BOUNDS_A[1])))
    i0 = float(np.exp(res.x[0]))
    nl = b * np.arcsinh(i / (2.0 * i0))
    r_s = max(float(i @ (dv - nl)) / float(i @ i), 0.0)
    r = _bv_drop(i, r_s, i0, tk) - dv
    return {"r_s_ohm": r_s, "i0_a": i0, "rms_v": float(np.sqrt(np.mean(r ** 2))), "n": int(i.size)}


def current_dependence(results, soc_range=(0.2, 0.9)) -> list[dict]:
    """Butler-Volmer fits per pulse test (temperature) from its discharge pulses of several sizes.

    Parameters
    ----------
    results : list of PulseTestResult
    soc_range : (float, float)
        SOC levels used.

    Returns
    -------
    list of dict
        One per test with fits: ``file``, ``temperature_c``, ``levels`` fitted, the medians over
        the SOC levels of ``r_s_ohm``, ``i0_a`` (geometric), ``rms_v``, and of the measured pulse
        resistance at the smallest and largest current (ohm); ``i_ref_a``, the median pulse
        current of the test (A; the amplitude at which the median-over-pulses R0/RC tables hold);
        and, when three or more amplitudes occur in at least half the fitted levels, one fit to the
        median pulse resistance of each amplitude (``r_s_pooled_ohm``, ``i0_pooled_a``,
        ``rms_pooled_v``; the one the model uses).
    """
    out = []
    for res in results:
        levels: dict = {}
        for pf in res.pulses:
            p = pf.pulse
            if p.kind != "pulse" or p.direction <= 0 or not (soc_range[0] <= pf.soc <= soc_range[1]):
                continue
            r = pf.pulse_resistance_ohm
            if np.isfinite(r) and r > 0:
                levels.setdefault(pf.level, []).append((abs(p.current_a), r * abs(p.current_a)))
        fits, lows, highs, i_lo, i_hi = [], [], [], [], []
        for pts in levels.values():
            cur, drop = np.array([x[0] for x in pts]), np.array([x[1] for x in pts])
            f = fit_butler_volmer(cur, drop, res.temperature_c)
            if f is None:
                continue
            fits.append(f)
            lo, hi = int(np.argmin(cur)), int(np.argmax(cur))
            lows.append(drop[lo] / cur[lo])
            highs.append(drop[hi] / cur[hi])
            i_lo.append(cur[lo])
            i_hi.append(cur[hi])
        if not fits:
            continue
        # one fit to the median pulse resistance of each amplitude over the levels (the curve of a
        # typical level; the medians of the per-level parameters need not lie on one)
        classes: dict = {}
        for pts in levels.values():
            for cur_a, drop_v in pts:
                classes.setdefault(round(cur_a, 1), []).append(drop_v / cur_a)
        keep = [c for c, v in classes.items() if len(v) * 2 >= len(fits)]
        pooled = None
        if len(keep) >= 3:
            cc = np.array(sorted(keep))
            rr = np.array([float(np.median(classes[c])) for c in cc])
            pooled = fit_butler_volmer(cc, rr * cc, res.temperature_c)
        amps = [abs(pf.pulse.current_a) for pf in res.pulses
                if pf.pulse.kind == "pulse" and not pf.pulse.limited and abs(pf.pulse.current_a) > 0]
        out.append({"i_ref_a": float(np.median(amps)) if amps else float(np.median(i_lo + i_hi)),
                    "file": res.source, "temperature_c": float(res.temperature_c), "levels": len(fits),
                    "r_s_ohm": float(np.median([f["r_s_ohm"] for f in fits])),
                    "i0_a": float(np.exp(np.median([np.log(f["i0_a"]) for f in fits]))),
                    "rms_v": float(np.median([f["rms_v"] for f in fits])),
                    "pulse_resistance_low_ohm": float(np.median(lows)), "current_low_a": float(np.median(i_lo)),
                    "pulse_resistance_high_ohm": float(np.median(highs)), "current_high_a": float(np.median(i_hi)),
                    **({} if pooled is None else {"r_s_pooled_ohm": pooled["r_s_ohm"], "i0_pooled_a": pooled["i0_a"],
                                                  "rms_pooled_v": pooled["rms_v"]})})
    return out


def charge_transfer_from_fits(fits, temperatures_c, files=None) -> ChargeTransfer | None:
    """The model's charge-transfer term from the per-test fits of :func:`current_dependence`.

    Tests at the same temperature (rounded to 1 degC) are pooled as
    :func:`models.identify.pulse.pulse_tables` pools them (the breakpoint is the mean temperature
    of all the group's tests, so it equals the R0 table's): geometric median ``I_0`` (the fit to
    the per-amplitude medians, ``i0_pooled_a``, where there is one, else ``i0_a``) and median
    ``I_ref`` of the group's fits.  A group without a fit, or whose term stays below
    :data:`MIN_EXCESS_V` at the smallest and the largest pulse current (no curvature worth a
    voltage step within the tested currents), counts as no current dependence there: it gets
    ``I_0`` = the upper search bound, which makes the excess vanish (below 1 uV at 20 A).

    Parameters
    ----------
    fits : list of dict
        Rows of :func:`current_dependence`.
    temperatures_c : list of float
        Temperature of every pulse test (degC), in the order given to identification.
    files : list of str, optional
        Test files named in the source text (default the rows' ``file``).

    Returns
    -------
    ChargeTransfer or None
        None when no test shows a current dependence (the model stays linear, as before).
    """
    rows = [f for f in fits if np.isfinite(f.get("i0_a", np.nan)) and np.isfinite(f.get("i_ref_a", np.nan))]
    if not rows:
        return None
    temps = np.array(list(temperatures_c), dtype=float)
    keys = np.round(temps, 0)
    fkeys = np.round(np.array([f["temperature_c"] for f in rows], dtype=float), 0)
    t_axis, i0s, irefs = [], [], []
    for key in np.unique(keys):
        members = [k for k in range(temps.size) if keys[k] == key]
        t_axis.append(float(np.mean(temps[members])))
        mine = [rows[k] for k in range(len(rows)) if fkeys[k] == key]
        i0 = (float(np.exp(np.median([np.log(f.get("i0_pooled_a", f["i0_a"])) for f in mine]))) if mine
              else I0_BOUNDS_A[1])
        i_ref = float(np.median([f["i_ref_a"] for f in mine])) if mine else 1.0
        if mine:
            one = ChargeTransfer([t_axis[-1]], [i0], [i_ref])
            span = [float(np.median([f[c] for f in mine])) for c in ("current_low_a", "current_high_a")
                    if all(c in f for f in mine)]
            if not span or float(np.max(np.abs(one.excess_v(np.array(span), t_axis[-1])))) < MIN_EXCESS_V:
                i0 = I0_BOUNDS_A[1]
        i0s.append(i0)
        irefs.append(i_ref)
    if all(i >= I0_BOUNDS_A[1] for i in i0s):
        return None
    names = files if files is not None else sorted({str(f.get("file", "")) for f in rows})
    src = ("symmetric Butler-Volmer charge-transfer term (Bard and Faulkner 2001, ch. 3) fitted to the 10 s "
           "pulse drops of several amplitudes (models.identify.currentdep), excess over the chord at the "
           "median pulse current; from " + ", ".join(map(str, names)))
    return ChargeTransfer(np.array(t_axis), np.array(i0s), np.array(irefs), src)
