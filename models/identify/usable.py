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

__all__ = ["cutoff_soc", "usable_capacity_table"]


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
