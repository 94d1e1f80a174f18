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
summarised per temperature by the medians over the levels.  The model's filter
does not use it (its R0 has no current axis); identification reports it so an engineer can see
how much a linear R0 misses at a given temperature.
"""
from __future__ import annotations

import numpy as np
from scipy.optimize import least_squares

__all__ = ["fit_butler_volmer", "current_dependence"]

FARADAY_C_PER_MOL = 96485.33212  # CODATA 2018
GAS_J_PER_MOL_K = 8.314462618  # CODATA 2018


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
    res = least_squares(resid, [start], bounds=(np.log(1e-4), np.log(1e4)))
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
        resistance at the smallest and largest current (ohm).
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
        out.append({"file": res.source, "temperature_c": float(res.temperature_c), "levels": len(fits),
                    "r_s_ohm": float(np.median([f["r_s_ohm"] for f in fits])),
                    "i0_a": float(np.exp(np.median([np.log(f["i0_a"]) for f in fits]))),
                    "rms_v": float(np.median([f["rms_v"] for f in fits])),
                    "pulse_resistance_low_ohm": float(np.median(lows)), "current_low_a": float(np.median(i_lo)),
                    "pulse_resistance_high_ohm": float(np.median(highs)), "current_high_a": float(np.median(i_hi))})
    return out
