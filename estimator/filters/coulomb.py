"""Baseline: coulomb counting with OCV reseed after rests (kernel :func:`estimator.kernels.coulomb_run`).

Charge is integrated by the trapezoid rule of the sampling rule (interval mean current), with
the coulombic efficiency applied to charge.  A rest is a run of samples with ``|current| <=
rest_current_a``; when it lasted at least ``rest_min_s`` (default 3600 s, the US DOE / INL
pulse-test practice of an hour's rest before an OCV reading) SOC is reseeded at its last
sample from the OCV inverse of the rested voltage (plus its ``R0 i`` drop) at the measured
temperature, through the kernel tables.  With ``early_reseed_s > 0`` a shorter rest of at
least that length is used too, with the OCV extrapolated to the relaxation asymptote.

``soc_sigma``: starts like the EKF's (``p0_soc`` with ``soc0``, else from the OCV inverse),
grows per interval by ``(eta dt / Q)^2 current_noise_a^2 + q_soc_per_s dt`` and is reset at a
reseed to ``sqrt(voltage_noise_v^2 + M^2) / |dOCV/dSOC|`` (M the hysteresis magnitude).
SOC is clipped to ``[soc_min, soc_max]`` after every step.
"""
from __future__ import annotations

import numpy as np

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import _arrays, initial_soc, setup
from socfuse.estimator.filters.settings import FilterSettings
from socfuse.estimator.filters.trace import Trace, make_trace

__all__ = ["run_coulomb"]


def run_coulomb(model, rec, settings: FilterSettings | None = None, soc0: float | None = None,
                start: tuple[float, float] | None = None) -> Trace:
    """Run the coulomb-counting baseline over one recording.

    Parameters
    ----------
    model : models.CellModel
    rec : models.Recording
    settings : FilterSettings, optional (default from the model)
    soc0 : float, optional  initial SOC (fraction); else from the OCV at the first sample
    start : (soc, sigma), optional  start here instead (the monitored EKF's fallback baseline
        starts where the filter starts, after its hand-over check)

    Returns
    -------
    Trace with ``method="coulomb"``, ``reseeds`` = tuple of (time_s, soc_before, soc_after);
    ``voltage_pred_v``, ``innovation_v`` and ``innovation_var_v2`` are NaN.
    """
    su = setup(model, settings)
    s = su.settings
    z0, sig0 = initial_soc(su, rec, soc0, check=False) if start is None else (float(start[0]), float(start[1]))
    n = rec.n
    soc, sig = np.empty(n), np.empty(n)
    m = n // 2 + 1
    rt, rb, ra = np.empty(m), np.empty(m), np.empty(m)
    t, i, v, tc = _arrays(rec)
    nrs = K.coulomb_run(t, i, v, tc, su.tables.packed, su.prm, z0, sig0 ** 2, s.rest_current_a, s.rest_min_s,
                        s.reseed, s.early_reseed_s, soc, sig, rt, rb, ra)
    reseeds = tuple((float(rt[k]), float(rb[k]), float(ra[k])) for k in range(nrs))
    nan = np.full(n, np.nan)
    return make_trace(model, rec, "coulomb", soc, sig, nan, nan, nan, soc[:, None], 0, reseeds, ("soc",))
