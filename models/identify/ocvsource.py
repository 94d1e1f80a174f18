"""OCV curves from more than one source, and the choice between them.

Sources (names used by the CLI ``--ocv-source`` and in the model's provenance):

``average``
    The low-rate test's mean of the discharge and charge branches (:mod:`ocvtest`).
``discharge``
    The low-rate discharge branch alone (a pseudo-OCV: includes the small resistive drop at the
    test current and the discharge side of the hysteresis).
``rest``
    The pulse test's rest-end voltages (each rest of at least 10 min, its last sample, at the
    SOC the pulse test assigns it), made monotone; outside the SOC range they cover, the
    low-rate curve's shape is joined on continuously.
``anchored``
    The low-rate curve's shape (average, or the discharge branch when there is no charge)
    plus a smooth correction through the rest points: the median offset of each cluster of
    rest points, linear in SOC between clusters and constant beyond the end clusters.
``auto``
    With a dynamic recording: the source with the lowest open-loop voltage RMS on it.  Without:
    ``average`` while the rest points lie within the low-rate half-gap of it (RMS distance), else
    ``anchored`` (the low-rate test then does not describe the pulse-tested cell); ``anchored``
    also when there is no average, ``discharge`` when there are no rest points.

Why more than one: a low-rate test run weeks apart from the pulse test (the cell ages), or the
charge/discharge mean on a cell with a large hysteresis, can sit tens of mV away from the
rested voltages the cell shows in use; an EKF on the wrong curve is off by several SOC points.
"""
from __future__ import annotations

import numpy as np

from socfuse.models.identify.curves import curve_from_dense, isotonic_increasing, MIN_STEP_V

__all__ = ["OCV_SOURCES", "rest_clusters", "rest_curve", "anchored_curve", "ocv_candidates"]

OCV_SOURCES = ("average", "discharge", "rest", "anchored")


def rest_clusters(rest_soc, rest_v, gap: float = 0.02):
    """Group rest points whose sorted SOCs are within ``gap``; median SOC and offset per group.

    Returns ``(soc, v)`` arrays of cluster medians (sorted by SOC).

    Parameters
    ----------
    rest_soc : array_like, shape (n,)
        SOC of each rest point, fraction 0..1.
    rest_v : array_like, shape (n,)
        Value per rest point (a rest-end voltage or an offset from a curve), V.
    gap : float
        Neighbouring sorted SOCs closer than or equal to this are one cluster, fraction.

    Returns
    -------
    soc : numpy.ndarray, shape (m,)
        Median SOC per cluster, fraction, ascending.
    v : numpy.ndarray, shape (m,)
        Median value per cluster, V.
    """
    s = np.asarray(rest_soc, dtype=float)
    v = np.asarray(rest_v, dtype=float)
    order = np.argsort(s)
    s, v = s[order], v[order]
    groups = np.concatenate([[0], np.cumsum(np.diff(s) > gap)])
    cs = np.array([np.median(s[groups == g]) for g in np.unique(groups)])
    cv = np.array([np.median(v[groups == g]) for g in np.unique(groups)])
    return cs, cv


def rest_curve(grid, base_v, rest_soc, rest_v, n_breakpoints: int, label: str):
    """OCV through the rest points (monotone), joined to the base curve's shape outside their range.

    Parameters
    ----------
    grid : array_like, shape (n,)
        SOC grid, fraction 0..1, increasing.
    base_v : array_like, shape (n,)
        Base (low-rate) OCV on ``grid``, V; its shape is used outside the rest points' SOC range.
    rest_soc : array_like, shape (m,)
        SOC of each rest point, fraction.
    rest_v : array_like, shape (m,)
        Rest-end voltage of each rest point, V.
    n_breakpoints : int
        Number of breakpoints of the returned curve.
    label : str
        Provenance text stored in the curve.

    Returns
    -------
    curve : OcvCurve
    max_error_v : float
        Largest breakpoint-fit error against the dense curve, V (see :func:`curve_from_dense`).
    """
    grid = np.asarray(grid, dtype=float)
    s = np.asarray(rest_soc, dtype=float)
    order = np.argsort(s)
    s, v = s[order], np.asarray(rest_v, dtype=float)[order]
    v = isotonic_increasing(v)
    su, idx = np.unique(s, return_index=True)
    vu = v[idx]
    inside = (grid >= su[0]) & (grid <= su[-1])
    dense = np.interp(grid, su, vu)
    lo_off = vu[0] - np.interp(su[0], grid, base_v)
    hi_off = vu[-1] - np.interp(su[-1], grid, base_v)
    dense = np.where(grid < su[0], base_v + lo_off, dense)
    dense = np.where(grid > su[-1], base_v + hi_off, dense)
    _ = inside
    return curve_from_dense(grid, dense, n_breakpoints, label)


def anchored_curve(grid, base_v, rest_soc, rest_v, n_breakpoints: int, label: str, gap: float = 0.02):
    """Base curve + piecewise-linear correction through the rest-point clusters' offsets.

    Parameters
    ----------
    grid : array_like, shape (n,)
        SOC grid, fraction 0..1, increasing.
    base_v : array_like, shape (n,)
        Base (low-rate) OCV on ``grid``, V.
    rest_soc : array_like, shape (m,)
        SOC of each rest point, fraction.
    rest_v : array_like, shape (m,)
        Rest-end voltage of each rest point, V.
    n_breakpoints : int
        Number of breakpoints of the returned curve.
    label : str
        Provenance text stored in the curve.
    gap : float
        Cluster gap in SOC, fraction (see :func:`rest_clusters`).

    Returns
    -------
    curve : OcvCurve
    max_error_v : float
        Largest breakpoint-fit error, V.
    anchor_soc : numpy.ndarray, shape (k,)
        Cluster median SOCs, fraction.
    anchor_offset_v : numpy.ndarray, shape (k,)
        Median offset of the rest points from the base curve per cluster, V (held constant beyond
        the end clusters).
    """
    grid = np.asarray(grid, dtype=float)
    off = np.asarray(rest_v, dtype=float) - np.interp(rest_soc, grid, base_v)
    cs, co = rest_clusters(rest_soc, off, gap)
    corr = np.interp(grid, cs, co)  # constant beyond the end clusters
    curve, err = curve_from_dense(grid, base_v + corr, n_breakpoints, label)
    return curve, err, cs, co


def ocv_candidates(ocv_result, rest_soc, rest_v, n_breakpoints: int, rest_label: str = "pulse test"):
    """All OCV sources that the data allow.

    Parameters
    ----------
    ocv_result : OcvTestResult
        The low-rate OCV test result (branches on ``soc_grid``, V).
    rest_soc : array_like, shape (m,)
        SOC of each pulse-test rest point, fraction.
    rest_v : array_like, shape (m,)
        Rest-end voltage of each rest point, V.
    n_breakpoints : int
        Breakpoints of the rest-based curves.
    rest_label : str
        Name of the test the rest points come from (used in the curves' provenance).

    Returns
    -------
    dict name -> (OcvCurve, info dict)
        ``info`` holds ``residual_v`` (breakpoint-fit error or RMS distance to the rest points)
        and a description.
    """
    out = {}
    grid = ocv_result.soc_grid
    has_avg = ocv_result.hysteresis_v is not None
    rs = np.asarray(rest_soc, dtype=float)
    rv = np.asarray(rest_v, dtype=float)

    def rest_rms(curve):
        return float(np.sqrt(np.mean((curve.voltage(rs) - rv) ** 2))) if rs.size else None

    base = ocv_result.average_v
    if has_avg:
        out["average"] = (ocv_result.ocv, {"residual_v": ocv_result.breakpoint_error_v,
                                           "rest_point_rms_v": rest_rms(ocv_result.ocv),
                                           "what": "mean of the low-rate discharge and charge branches"})
    if ocv_result.discharge_curve is not None:
        dc = ocv_result.discharge_curve
        out["discharge"] = (dc, {"residual_v": float(np.max(np.abs(dc.voltage(grid) - isotonic_increasing(
            np.interp(grid, grid[np.isfinite(ocv_result.discharge_v)],
                      ocv_result.discharge_v[np.isfinite(ocv_result.discharge_v)]), min_step=MIN_STEP_V)))),
            "rest_point_rms_v": rest_rms(dc), "what": "low-rate discharge branch"})
        if not has_avg:
            base = dc.voltage(grid)
    if rs.size >= 3:
        c, err = rest_curve(grid, base, rs, rv, n_breakpoints,
                            f"rest-end voltages of the {rest_label} (low-rate shape outside their SOC range)")
        out["rest"] = (c, {"residual_v": err, "rest_point_rms_v": rest_rms(c), "points": int(rs.size),
                           "what": "pulse-test rest-end voltages"})
    if rs.size >= 2:
        c, err, cs, co = anchored_curve(grid, base, rs, rv, n_breakpoints,
                                        f"low-rate curve shape anchored to the rest-end voltages of the {rest_label}")
        out["anchored"] = (c, {"residual_v": err, "rest_point_rms_v": rest_rms(c), "anchor_soc": cs.tolist(),
                               "anchor_offset_v": co.tolist(),
                               "what": "low-rate shape + smooth offset through the pulse-test rest points"})
    return out
