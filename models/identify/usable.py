"""Usable capacity at a temperature and a load, from the identified model.

SOC stays on the scale of the low-rate test (the lab convention).  At temperature ``T`` and a
sustained discharge current ``I`` the cell reaches its cut-off where the terminal voltage with the
RC pairs charged through (a load held longer than their time constants) meets ``v_min``::

    OCV(z, T) - I (R0(z, T) + sum_j R_j(z, T)) = v_min

The SOC ``z_cut`` solving it (the largest one, searched on a fine grid) leaves
``(1 - z_cut) Q`` usable from full, and ``(z - z_cut) Q`` from SOC ``z``.  This is the steady-state
Thevenin estimate; it leaves out the slow diffusion the RC pairs do not hold, so at low
temperature and high current it is an upper bound.  Used for the "usable SOC" at a temperature.
"""
from __future__ import annotations

import numpy as np

__all__ = ["cutoff_soc", "measured_usable", "usable_capacity_table", "usable_soc"]


def cutoff_soc(model, temperature_c: float, current_a: float, n_grid: int = 2001) -> float:
    """SOC (fraction) at which a sustained discharge ``current_a`` (A) meets ``model.v_min_v``.

    Parameters
    ----------
    model : CellModel
    temperature_c : float
        Cell temperature, degC.
    current_a : float
        Sustained discharge current, A (positive).
    n_grid : int
        SOC grid points searched.

    Returns
    -------
    float
        The cut-off SOC (0 when the voltage stays above ``v_min`` down to SOC 0; 1 when it is below
        already at full).
    """
    z = np.linspace(0.0, 1.0, int(n_grid))
    r = np.asarray(model.r0_ohm.at(z, temperature_c), dtype=float)
    for pair in model.rc:
        r = r + np.asarray(pair.r_ohm.at(z, temperature_c), dtype=float)
    v = np.asarray(model.ocv.voltage(z, temperature_c), dtype=float) - float(current_a) * r
    below = np.flatnonzero(v <= model.v_min_v)
    if below.size == 0:
        return 0.0
    k = int(below[-1])
    if k == z.size - 1:
        return 1.0
    # linear interpolation between the last grid point below and the next one above
    v0, v1 = v[k], v[k + 1]
    return float(z[k] + (model.v_min_v - v0) / (v1 - v0) * (z[k + 1] - z[k])) if v1 != v0 else float(z[k])


def usable_capacity_table(model, temperatures_c, c_rates=(0.05, 0.5, 1.0)) -> list[dict]:
    """Usable capacity from full at each temperature and discharge C-rate.

    Parameters
    ----------
    model : CellModel
    temperatures_c : iterable of float
        degC.
    c_rates : iterable of float
        Discharge currents as multiples of the capacity (1/h).

    Returns
    -------
    list of dict
        ``temperature_c``, ``c_rate``, ``current_a``, ``cutoff_soc``, ``usable_ah``,
        ``usable_fraction``.
    """
    out = []
    for tc in temperatures_c:
        for c in c_rates:
            i = float(c) * model.capacity_ah
            z = cutoff_soc(model, float(tc), i)
            out.append({"temperature_c": float(tc), "c_rate": float(c), "current_a": i, "cutoff_soc": z,
                        "usable_ah": (1.0 - z) * model.capacity_ah, "usable_fraction": 1.0 - z})
    return out


def usable_soc(model, soc, temperature_c, current_a: float, step_c: float = 1.0):
    """"Usable SOC": the share of the charge usable from full that is left at ``soc``, at a temperature and load.

    ``(z - z_cut(T, I)) / (1 - z_cut(T, I))`` clipped to 0..1, with ``z_cut`` from
    :func:`cutoff_soc`; SOC itself stays on the low-rate (25 degC) scale, this is the figure a
    driver sees at the present temperature (0 when the cell would reach its cut-off now).

    Parameters
    ----------
    model : CellModel
    soc : array_like, shape (n,)
        Capacity-based SOC (fraction).
    temperature_c : float or array_like, shape (n,)
        Cell temperature, degC (NaN: 25).
    current_a : float
        Sustained discharge current the cut-off is judged at, A (>= 0).
    step_c : float
        Temperature grid step the cut-off SOC is tabulated on (linear between), degC.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Usable SOC, fraction 0..1.
    """
    z = np.asarray(soc, dtype=float)
    t = np.broadcast_to(np.asarray(temperature_c, dtype=float), z.shape)
    t = np.where(np.isfinite(t), t, 25.0)
    lo, hi = float(np.floor(np.min(t, initial=25.0))), float(np.ceil(np.max(t, initial=25.0)))
    grid = np.arange(lo, hi + step_c, step_c)
    cut = np.array([cutoff_soc(model, float(g), float(current_a)) for g in grid])
    zc = np.interp(t, grid, cut)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(zc < 1.0, (z - zc) / (1.0 - zc), 0.0)
    return np.clip(out, 0.0, 1.0)


def measured_usable(time_s, current_a, voltage_v, v_min_v: float, offset_a: float = 0.0,
                    margin_v: float = 0.01, soc=None, capacity_ah: float | None = None) -> dict | None:
    """Charge a test delivered from its start to its last touch of the cut-off voltage (measured).

    A pulse test that starts full and ends at the cut-off (the US DOE / INL HPPC sequence, and the
    Panasonic 18650PF tests at every temperature) measures the usable capacity at its temperature
    and load directly: the charge counted (trapezoid rule, current-sensor offset removed) from the
    first sample to the last discharging sample within ``margin_v`` of ``v_min_v``, or, when the
    test's SOC track is given (a cycler's Ah counter: the Panasonic HPPC files leave out the 10 %
    discharge steps between pulse levels, which only that counter holds), the SOC it fell by times
    ``capacity_ah``.

    Parameters
    ----------
    time_s, current_a, voltage_v : array_like, shape (n,)
        The test (s, A with + = discharge, V).
    v_min_v : float
        Cut-off voltage, V.
    offset_a : float
        Current-sensor zero offset subtracted before counting, A.
    margin_v : float
        How close to ``v_min_v`` counts as reaching it, V.
    soc : array_like, shape (n,), optional
        SOC at every sample (fraction), e.g. :attr:`PulseTestResult.soc`.
    capacity_ah : float, optional
        Capacity the ``soc`` track is on, Ah (needed with ``soc``).

    Returns
    -------
    dict or None
        ``usable_ah`` (Ah from the start), ``current_a`` (A at that sample), ``mean_current_a``
        (mean discharge current over the 60 s before it, A), ``time_s``; None when the test never
        reaches the cut-off under discharge.
    """
    t = np.asarray(time_s, dtype=float)
    i = np.asarray(current_a, dtype=float) - float(offset_a)
    v = np.asarray(voltage_v, dtype=float)
    hit = np.flatnonzero(np.isfinite(v) & (v <= v_min_v + margin_v) & (i > 0))
    if hit.size == 0:
        return None
    k = int(hit[-1])
    if soc is not None and capacity_ah is not None:
        z = np.asarray(soc, dtype=float)
        q = float(z[0] - z[k]) * float(capacity_ah)
    else:
        q = float(np.sum(0.5 * (i[1:k + 1] + i[:k]) * np.diff(t[:k + 1]))) / 3600.0
    w = (t >= t[k] - 60.0) & (np.arange(t.size) <= k) & (i > 0)
    return {"usable_ah": q, "current_a": float(i[k]), "mean_current_a": float(np.mean(i[w])) if np.any(w) else float(i[k]),
            "time_s": float(t[k])}
