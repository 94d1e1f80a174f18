"""Rauch-Tung-Striebel fixed-interval smoother over a stored EKF run (offline best estimate).

Rauch, Tung and Striebel, AIAA J. 3 (1965) 1445-1450, applied to the EKF's linearisation
(the extended RTS smoother): with the EKF's posterior ``x_k, P_k``, prior ``x_k+1|k,
P_k+1|k`` and ``F_k+1`` from :func:`estimator.ekf.run_ekf_store`::

    C_k  = P_k F_k+1^T P_k+1|k^-1
    xs_k = x_k + C_k (xs_k+1 - x_k+1|k)
    Ps_k = P_k + C_k (Ps_k+1 - P_k+1|k) C_k^T

SOC is clipped to ``[soc_min, soc_max]`` like the filter's.
"""
from __future__ import annotations

import numpy as np

from socfuse.estimator.filters.ekf import run_ekf_store, setup, temperature_array
from socfuse.estimator.filters.kernels import P_TDEF
from socfuse.estimator.filters.settings import FilterSettings
from socfuse.estimator.filters.trace import Trace, make_trace

__all__ = ["rts_smooth", "rts_pass"]


def rts_pass(x_post, p_post, x_prior, p_prior, f):
    """The RTS backward pass over arrays (N, n_x), (N, n_x, n_x); ``f[k]`` maps k-1 to k.

    Returns the smoothed states (N, n_x) and covariances (N, n_x, n_x).

    Parameters
    ----------
    x_post : numpy.ndarray, shape (N, n_x)
        Filter posterior states.
    p_post : numpy.ndarray, shape (N, n_x, n_x)
        Filter posterior covariances.
    x_prior : numpy.ndarray, shape (N, n_x)
        Filter prior (predicted) states.
    p_prior : numpy.ndarray, shape (N, n_x, n_x)
        Filter prior covariances.
    f : numpy.ndarray, shape (N, n_x, n_x)
        Transition Jacobians; ``f[k]`` maps sample k-1 to k.

    Returns
    -------
    xs : numpy.ndarray, shape (N, n_x)
        Smoothed states.
    ps : numpy.ndarray, shape (N, n_x, n_x)
        Smoothed covariances (symmetrised).

    References
    ----------
    H. E. Rauch, F. Tung and C. T. Striebel, "Maximum likelihood estimates of linear dynamic
    systems", AIAA J. 3 (1965) 1445-1450.
    """
    n = x_post.shape[0]
    xs = x_post.copy()
    ps = p_post.copy()
    for k in range(n - 2, -1, -1):
        c = np.linalg.solve(p_prior[k + 1].T, (p_post[k] @ f[k + 1].T).T).T
        xs[k] = x_post[k] + c @ (xs[k + 1] - x_prior[k + 1])
        pk = p_post[k] + c @ (ps[k + 1] - p_prior[k + 1]) @ c.T
        ps[k] = 0.5 * (pk + pk.T)
    return xs, ps


def rts_smooth(model, rec, settings: FilterSettings | None = None, soc0: float | None = None) -> Trace:
    """EKF forward pass then the RTS backward pass; returns a Trace with ``method="rts"``.

    ``voltage_pred_v``/``innovation_v`` are the smoothed voltage and residual (measured minus
    smoothed), ``innovation_var_v2`` the filter's; ``covariance`` holds the smoothed P.

    Parameters
    ----------
    model : CellModel
    rec : Recording
    settings : FilterSettings, optional
        Default :func:`default_settings(model) <socfuse.estimator.filters.settings.default_settings>`.
    soc0 : float, optional
        Initial SOC, fraction; default from the first voltage sample.

    Returns
    -------
    Trace
        Smoothed SOC (fraction, clipped to the settings' limits), its sigma, smoothed voltage (V),
        residual (V) and the smoothed states and covariances.

    References
    ----------
    H. E. Rauch, F. Tung and C. T. Striebel, "Maximum likelihood estimates of linear dynamic
    systems", AIAA J. 3 (1965) 1445-1450.
    """
    su = setup(model, settings)
    s = su.settings
    tr, (p_post, p_prior, f) = run_ekf_store(model, rec, settings, soc0)
    x_post = tr.states
    tc = temperature_array(rec, float(su.prm[P_TDEF]))
    t, i = rec.time_s, rec.current_a
    x_prior = x_post.copy()
    for k in range(1, rec.n):
        x_prior[k] = su.transition(x_post[k - 1], 0.5 * (i[k - 1] + i[k]), t[k] - t[k - 1], tc[k - 1])
    xs, ps = rts_pass(x_post, p_post, x_prior, p_prior, f)
    xs[:, 0] = np.clip(xs[:, 0], s.soc_min, s.soc_max)
    vs = np.array([su.measure(xs[k], i[k], tc[k])[0] for k in range(rec.n)])
    sig = np.sqrt(np.clip(ps[:, 0, 0], 0.0, None))
    return make_trace(model, rec, "rts", xs[:, 0], sig, vs, rec.voltage_v - vs, tr.innovation_var_v2, xs,
                      tr.n_gated, (), su.names, ps)
