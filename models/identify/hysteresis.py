"""One-state hysteresis (Plett 2004) from the low-rate branches and the pulse-test rests.

Model (Plett, J. Power Sources 134 (2004) 262-276, part 2; :class:`models.thevenin.Hysteresis`)::

    OCV_branch(z) = OCV_0(z) + M h,     dh/dz = gamma (sgn(i) + h) ... i.e. h -> -sgn(i)

``h`` moves towards -1 on discharge and +1 on charge, with e-folding charge ``1/gamma`` (a
fraction of the capacity).  In a low-rate test the charge branch starts at SOC 0 after a full
discharge (``h = -1``) and the discharge branch at SOC 1 after a full charge (``h = +1``), so::

    h_charge(z)    =  1 - 2 exp(-gamma z)
    h_discharge(z) = -1 + 2 exp(-gamma (1 - z))

and the half-gap between the branches, less the resistive drop at the test current
``I (R0 + sum R_j)`` (the RC pairs are charged through at C/20), is::

    d(z) = M (1 - exp(-gamma z) - exp(-gamma (1 - z)))

``M`` and ``gamma`` are fitted to ``d(z)`` above 30 % SOC by least squares (``gamma`` on a log grid,
``M`` linear): the discharge branch's transition after the full charge fixes ``gamma``; near
empty the steep resistance (and its table error) would shape the gap instead.
A slow overpotential that the RC pairs do not hold (solid diffusion at C/20) looks the same in a
low-rate test, so the fit is only believed when the pulse test's long rests agree: after a
discharge the rested voltage must sit below the branch average by about ``M`` (hysteresis stays,
overpotential relaxes), but not by much more than ``M`` (else the low-rate test describes another
state of the cell), and when the gap does not appear within 0.5 % SOC of each reversal (gamma <
200: at C/20 that is 6 minutes, the time scale of a diffusion overpotential).  Otherwise no hysteresis is put in the model and the reason is
given.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.thevenin import Hysteresis

__all__ = ["HysteresisFit", "fit_low_rate_hysteresis", "judge_hysteresis", "MIN_HYSTERESIS_V"]

#: below this magnitude (V) a hysteresis is not worth a filter state (twice a BMS cell-voltage
#: quantum of 1 mV plus its noise; common practice, no source)
MIN_HYSTERESIS_V = 0.004
#: a fitted rate at least this large means the gap appears within 0.5 % SOC of a reversal, i.e.
#: within 6 minutes at C/20: the time scale of solid-diffusion overpotential, which the low-rate
#: test cannot tell from hysteresis; such a gap is not modelled as hysteresis
GAMMA_MAX = 200.0


@dataclass(frozen=True)
class HysteresisFit:
    """Result of :func:`fit_low_rate_hysteresis` and :func:`judge_hysteresis`.

    Attributes
    ----------
    max_v : float
        Fitted magnitude ``M`` (V).
    gamma : float
        Fitted rate (dimensionless, per unit SOC throughput).
    rms_v : float
        RMS residual of the fit of the corrected half-gap (V).
    n : int
        Points fitted.
    rest_offset_v : float or None
        Median of (rested voltage after a discharge - branch average) over the pulse-test rests (V).
    used : bool
        Whether the model carries it.
    reason : str
    """

    max_v: float
    gamma: float
    rms_v: float
    n: int
    rest_offset_v: float | None = None
    used: bool = False
    reason: str = ""

    def hysteresis(self) -> Hysteresis | None:
        return Hysteresis(float(self.gamma), float(self.max_v)) if self.used else None

    def as_dict(self) -> dict:
        return {"max_v": self.max_v, "gamma": self.gamma, "fit_rms_v": self.rms_v, "points": self.n,
                "rest_offset_v": self.rest_offset_v, "used": self.used, "reason": self.reason}


def fit_low_rate_hysteresis(soc_grid, half_gap_v, resistive_drop_v, edge: float = 0.02,
                            lower: float = 0.3) -> HysteresisFit | None:
    """Fit ``M, gamma`` to the low-rate half-gap less the resistive drop.

    Parameters
    ----------
    soc_grid : array_like (m,)
        SOC grid (fraction).
    half_gap_v : array_like (m,)
        Half the charge-branch minus discharge-branch voltage (V); NaN where one branch is missing.
    resistive_drop_v : array_like (m,)
        ``I_test (R0 + sum R_j)`` on the grid (V).
    edge : float
        SOC left out at the top (the branches bend into the voltage limit there).
    lower : float
        Lowest SOC fitted.

    Returns
    -------
    HysteresisFit or None (fewer than 10 usable points)

    References
    ----------
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV battery
    packs", part 2, J. Power Sources 134 (2004) 262-276.
    """
    z = np.asarray(soc_grid, dtype=float)
    d = np.asarray(half_gap_v, dtype=float) - np.asarray(resistive_drop_v, dtype=float)
    # the upper part only: near empty the resistance rises steeply and its table error, not the
    # hysteresis, shapes the gap (the charge branch's own transition at z = 0 is left out)
    use = np.isfinite(d) & (z >= lower) & (z <= 1 - edge)
    if np.count_nonzero(use) < 10:
        return None
    z, d = z[use], d[use]
    best = None
    for g in np.exp(np.linspace(np.log(1.0), np.log(1000.0), 120)):
        basis = 1.0 - np.exp(-g * z) - np.exp(-g * (1.0 - z))
        den = float(basis @ basis)
        if den <= 0:
            continue
        m = max(float(basis @ d) / den, 0.0)
        r = d - m * basis
        rss = float(r @ r)
        if best is None or rss < best[0]:
            best = (rss, m, g)
    rss, m, g = best
    return HysteresisFit(float(m), float(g), float(np.sqrt(rss / z.size)), int(z.size))


def judge_hysteresis(fit: HysteresisFit | None, rest_soc, rest_v, rest_after_discharge, ocv_average,
                     v_noise: float = 0.0015) -> HysteresisFit | None:
    """Decide whether the model carries the fitted hysteresis (see the module docstring).

    Parameters
    ----------
    fit : HysteresisFit or None
    rest_soc, rest_v : array_like
        Pulse-test rest-end points (SOC, V).
    rest_after_discharge : array_like of bool
        Whether each rest followed a discharge.
    ocv_average : OcvCurve
        The low-rate branch average.
    v_noise : float
        Voltage noise sigma of the measurement (V).

    Returns
    -------
    HysteresisFit or None
    """
    if fit is None:
        return None
    rs = np.asarray(rest_soc, dtype=float)
    rv = np.asarray(rest_v, dtype=float)
    after = np.asarray(rest_after_discharge, dtype=bool)
    sel = after & (rs > 0.05) & (rs < 0.95)
    rest_off = float(np.median(rv[sel] - ocv_average.voltage(rs[sel]))) if np.any(sel) else None
    floor = max(MIN_HYSTERESIS_V, 3.0 * v_noise)
    if fit.max_v < floor:
        why = f"fitted magnitude {fit.max_v * 1000:.1f} mV below {floor * 1000:.1f} mV: not modelled"
        used = False
    elif fit.gamma >= GAMMA_MAX:
        why = (f"the low-rate gap appears within {100 / fit.gamma:.2f} % SOC of each reversal (gamma {fit.gamma:.0f}): "
               "an overpotential the RC pairs do not hold, not hysteresis; not modelled")
        used = False
    elif rest_off is None:
        why = "no pulse-test rest after a discharge to confirm it: not modelled"
        used = False
    elif rest_off < -2.0 * fit.max_v:
        why = (f"the pulse-test rests after discharges sit {rest_off * 1000:+.1f} mV from the branch average, far "
               f"beyond -{fit.max_v * 1000:.1f} mV: the low-rate test does not describe the pulse-tested cell "
               "(aged, or another cell); not modelled")
        used = False
    elif rest_off > -0.5 * fit.max_v:
        why = (f"the pulse-test rests after discharges sit {rest_off * 1000:+.1f} mV from the branch average, "
               f"not near -{fit.max_v * 1000:.1f} mV: the low-rate gap is overpotential, not hysteresis; "
               "not modelled")
        used = False
    else:
        why = (f"low-rate gap fit M {fit.max_v * 1000:.1f} mV, gamma {fit.gamma:.0f}; pulse-test rests after "
               f"discharges {rest_off * 1000:+.1f} mV from the branch average: modelled")
        used = True
    return HysteresisFit(fit.max_v, fit.gamma, fit.rms_v, fit.n, rest_off, used, why)
