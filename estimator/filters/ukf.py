"""Sigma-point (unscented) filter on the same model, through filterpy (slower; for comparison).

filterpy's ``UnscentedKalmanFilter`` with ``MerweScaledSigmaPoints`` (van der Merwe 2004;
Julier and Uhlmann 1997) runs the process model :func:`estimator.kernels.transition` and
the measurement :func:`estimator.kernels.measure` (the sampling rule, per-step ``dt``), so
it shares the EKF's model code (including the model-error state).  ``Q_k`` is the EKF's
(:func:`estimator.kernels.linearise`) at the current mean, ``R_k = (sigma_v^2 + (sigma_R
i_k)^2) max(1, tau_v / dt)`` as in the EKF.  NaN voltage = predict only; the same input checks
(:func:`estimator.filters.kernels.check_inputs`), innovation gate with release
(:func:`~estimator.filters.kernels.gate_rejects`) and SOC projection
(:func:`~estimator.filters.kernels.project_soc`) and consistency monitor with fallback to coulomb
counting (:func:`~estimator.filters.kernels.health_step`) as the EKF kernel and the exported C code
(the same functions); the initial state comes from :func:`estimator.ekf.initial_soc`.  Zero initial
variances (``p0_soc = p0_rc_v = 0``, allowed by the schema) are raised to a tiny floor, since
the sigma points need a positive-definite ``P``.
"""
from __future__ import annotations

import numpy as np
from filterpy.kalman import MerweScaledSigmaPoints, UnscentedKalmanFilter, unscented_transform

from socfuse.estimator.filters.kernels import (P_TDEF, ST_ENVELOPE, ST_FALLBACK, gate_rejects, health_step,
                                              polarisation_variance, project_soc, resistance_factor,
                                              resistance_sigma_at, voltage_outside_envelope, white_factor)
from socfuse.estimator.filters.ekf import _prior, checked_inputs, initial_soc, setup, temperature_array
from socfuse.estimator.filters.settings import FilterSettings
from socfuse.estimator.filters.trace import Trace, make_trace

__all__ = ["run_ukf", "UKF_ALPHA", "UKF_BETA", "UKF_KAPPA"]

UKF_ALPHA, UKF_BETA, UKF_KAPPA = 1.0, 2.0, 0.0  # spread, Gaussian prior (beta = 2), no extra kappa


def run_ukf(model, rec, settings: FilterSettings | None = None, soc0: float | None = None) -> Trace:
    """Run the unscented filter over one recording.

    Parameters
    ----------
    model : socfuse.models.CellModel
        The cell model.
    rec : socfuse.models.Recording
        The recording (s, A with + = discharge, V, degC).
    settings : FilterSettings, optional
        Default: the model-derived settings.
    soc0 : float, optional
        Initial SOC (fraction); else from the OCV at the first sample.

    Returns
    -------
    Trace
        ``method="ukf"``; while the consistency monitor flags the filter unhealthy the SOC and its
        sigma are the coulomb-counting baseline's (status bit ``fallback``), as in the EKF and the C code.

    References
    ----------
    S. J. Julier and J. K. Uhlmann, "A new extension of the Kalman filter to nonlinear systems",
    Proc. SPIE 3068 (1997) (details from memory).
    R. van der Merwe, Sigma-point Kalman filters for probabilistic inference in dynamic state-space
    models, PhD thesis, Oregon Health & Science University, 2004 (details from memory).
    """
    from socfuse.estimator.filters.coulomb import run_coulomb

    su = setup(model, settings)
    rec_in = rec
    rec, status = checked_inputs(su, rec)  # the filter step's input checks (implausible samples held / missing)
    s = su.settings
    nx = su.n_x
    z0, sig0 = initial_soc(su, rec, soc0)
    base = run_coulomb(model, rec, s, start=(z0, sig0))  # the fallback, started where the filter starts
    x0, p0 = _prior(su, z0, sig0)
    # the sigma points need a positive-definite P: zero variances (deterministic hysteresis,
    # p0_soc = p0_rc_v = 0) get a floor far below any physical uncertainty
    d0 = np.diag(p0).copy()
    p0[np.diag_indices(nx)] = np.maximum(d0, 1e-12)
    pts = MerweScaledSigmaPoints(nx, alpha=UKF_ALPHA, beta=UKF_BETA, kappa=UKF_KAPPA)
    t, i, v = rec.time_s, rec.current_a, rec.voltage_v
    tc = temperature_array(rec, float(su.prm[P_TDEF]))

    def fx(x, dt, u=0.0, t_c=25.0):
        return su.transition(x, u, dt, t_c)

    def hx(x, i_k=0.0, t_c=25.0):
        return np.array([su.measure(x, i_k, t_c)[0]])

    ukf = UnscentedKalmanFilter(dim_x=nx, dim_z=1, dt=1.0, hx=hx, fx=fx, points=pts)
    ukf.x = x0.copy()
    ukf.P = p0.copy()
    n = rec.n
    states = np.empty((n, nx))
    sig, vp, inn, sv = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    gated = 0
    run_on, run_s = False, 0.0  # gate release, as in the EKF kernel
    nis_avg, healthy = 1.0, True  # consistency monitor, as in the EKF kernel
    ok = np.ones(n, dtype=bool)
    for k in range(n):
        if k > 0:
            dt = float(t[k] - t[k - 1])
            u = 0.5 * (i[k - 1] + i[k])
            if run_on:
                run_s += dt
            _, _, _, q, _, _ = su.linearise(ukf.x, i[k - 1], i[k], dt, tc[k - 1], tc[k])
            q[np.diag_indices(nx)] += 1e-12
            ukf.Q = q
            ukf.predict(dt=dt, u=u, t_c=tc[k - 1])
        else:
            ukf.sigmas_f = pts.sigma_points(ukf.x, ukf.P)
        wf = white_factor(su.prm, float(t[k] - t[k - 1])) if k > 0 else 1.0
        wr = resistance_factor(su.prm, float(t[k] - t[k - 1])) if k > 0 else 1.0
        i_r = max(abs(i[k]), abs(i[k - 1])) if k > 0 else i[k]  # current edge (kernels._ekf_core)
        pv = polarisation_variance(su.prm, np.asarray(ukf.x, dtype=float), su.n_rc)  # the EKF's rule
        sr = resistance_sigma_at(su.tables.packed, su.prm, float(tc[k]))  # the EKF's rule over temperature
        r = np.array([[s.voltage_noise_v ** 2 * wf + (sr * i_r) ** 2 * wr + pv * wr]])
        ukf.R = r
        zs = np.array([hx(sp, i[k], tc[k]) for sp in ukf.sigmas_f])
        zp, smat = unscented_transform(zs, pts.Wm, pts.Wc, r)
        vp[k] = zp[0]
        sv[k] = smat[0, 0]
        outside = voltage_outside_envelope(su.prm, float(v[k]), float(tc[k]))  # the EKF kernel's rule
        if outside:
            status[k] |= ST_ENVELOPE
        if np.isfinite(v[k]) and not outside:
            inn[k] = v[k] - zp[0]
            nis_avg, healthy = health_step(nis_avg, healthy, inn[k], sv[k])
            if gate_rejects(inn[k], sv[k], s.gate_sigma, run_on, run_s, s.gate_release_s):
                gated += 1
                if not run_on:
                    run_on, run_s = True, 0.0
            else:
                run_on = False
                ukf.update(np.array([v[k]]), i_k=i[k], t_c=tc[k])
                ukf.P = 0.5 * (ukf.P + ukf.P.T)
        else:
            inn[k] = np.nan
        project_soc(ukf.x, ukf.P, s.soc_min, s.soc_max)  # the EKF kernel's estimate projection
        states[k] = ukf.x
        sig[k] = np.sqrt(max(ukf.P[0, 0], 0.0))
        ok[k] = healthy
        if not healthy:
            status[k] |= ST_FALLBACK
    soc = np.where(ok, states[:, 0], base.soc)
    soc_sigma = np.where(ok, sig, base.soc_sigma)
    meta = {"filter_soc_sigma": sig, "n_fallback": int(np.count_nonzero(~ok))}
    return make_trace(model, rec_in, "ukf", soc, soc_sigma, vp, inn, sv, states, gated, (), su.names, None, meta,
                      status=status)
