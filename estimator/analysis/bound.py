"""Posterior Cramer-Rao bound (PCRB) for the SOC state: the best sigma any estimator can reach.

Tichavsky, Muravchik and Nehorai, "Posterior Cramer-Rao bounds for discrete-time nonlinear
filtering", IEEE Trans. Signal Processing 46 (1998) 1386-1396, give the recursion of the
Fisher information matrix ``J_k`` of the state (``J_k^-1`` bounds the mean-square error
matrix of every estimator)::

    J_{k+1} = D22 - D21 (J_k + D11)^-1 D12

and for additive Gaussian noise ``x' = f(x) + w`` (``w ~ N(0, Q)``), ``y = h(x) + v``
(``v ~ N(0, R)``)::

    D11 = F^T Q^-1 F,   D12 = D21^T = -F^T Q^-1,   D22 = Q^-1 + H^T R^-1 H

with the Jacobians ``F, H`` averaged over the true state distribution.  We evaluate them along
one trajectory (the true one when known, otherwise the EKF's own estimate, which is then an
approximate, "conditional" bound; :attr:`BoundResult.along` says which), using the estimator's
own linearisation :func:`estimator.kernels.linearise` (one implementation of the Jacobians).

Numerics and singular ``Q``: by the matrix inversion lemma the recursion equals::

    J_{k+1} = (Q + F J_k^-1 F^T)^-1 + H^T R^-1 H

which is what we propagate, in covariance form ``B = J^-1`` (prediction ``F B F^T + Q``,
then the rank-one Sherman-Morrison update for the scalar voltage).  This needs no ``Q^-1``, so
it stays exact when ``Q`` is singular or nearly so (a deterministic hysteresis state, zero
current noise, the SOC's very small random walk) where ``Q^-1`` would overflow or cancel
catastrophically.  Only if ``F B F^T + Q`` itself loses positive definiteness (singular ``F``
and ``Q`` together; does not happen with this model, ``F`` is diagonal with ``exp(-dt/tau) > 0``)
a floor of ``Q_FLOOR`` is added to its diagonal.  For a linear Gaussian model the bound is
the Kalman filter covariance (tested against ``scipy.linalg.solve_discrete_are``).

Samples without a voltage (NaN) add no information; the innovation gate is not part of the
bound.  The prior ``J_0^-1`` is the EKF's own initial covariance (``p0_soc`` when ``soc0`` is
given, else the OCV-derived sigma).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import initial_soc, prior, setup, temperature_array
from socfuse.estimator.filters.settings import FilterSettings

__all__ = ["BoundResult", "Q_FLOOR", "pcrb_linear", "pcrb_soc_sigma", "truth_states"]

#: Diagonal floor (in the state's squared units) added to a predicted bound that lost
#: positive definiteness; never needed for the Thevenin model, kept as a guard.
Q_FLOOR = 1e-30


class BoundError(ValueError):
    """Inputs that do not allow a bound (shapes, no truth, non-positive noise)."""


@dataclass(frozen=True, eq=False)
class BoundResult:
    """Posterior Cramer-Rao bound along one recording.

    Attributes
    ----------
    time_s : ndarray (N,)
    soc_sigma : ndarray (N,)
        Lower bound of the SOC standard deviation (fraction) of any estimator, after the
        measurement at each sample.
    state_sigma : ndarray (N, n_x)
        Square roots of the diagonal of ``J^-1`` for every state.
    along : str
        ``"truth"`` (given true SOC), ``"reference"`` (the recording's ``soc_ref``) or
        ``"estimate"`` (the EKF's trajectory: an approximation).
    name : str
    """

    time_s: np.ndarray
    soc_sigma: np.ndarray
    state_sigma: np.ndarray
    along: str
    name: str = ""

    @property
    def sigma_soc(self) -> np.ndarray:
        """Alias of :attr:`soc_sigma`."""
        return self.soc_sigma

    def to_frame(self):
        """DataFrame with ``time_s`` and ``soc_sigma_bound``."""
        import pandas as pd

        return pd.DataFrame({"time_s": self.time_s, "soc_sigma_bound": self.soc_sigma})

    def describe(self) -> str:
        s = self.soc_sigma
        return (f"posterior Cramer-Rao bound of SOC sigma along the {self.along}: final "
                f"{100 * s[-1]:.3f} %, median {100 * float(np.median(s)):.3f} %, max {100 * float(s.max()):.3f} %")


# ----------------------------------------------------------------------------- kernels
@njit(cache=True)
def _predict_update(b, f, q, h, r, has_y, bn, fb):
    """``B' = F B F^T + Q`` then, if ``has_y``, ``B' -= B'h h^T B' / (h^T B' h + r)``; writes ``bn``."""
    nx = b.shape[0]
    for i in range(nx):
        for j in range(nx):
            acc = 0.0
            for m in range(nx):
                acc += f[i, m] * b[m, j]
            fb[i, j] = acc
    for i in range(nx):
        for j in range(nx):
            acc = q[i, j]
            for m in range(nx):
                acc += fb[i, m] * f[j, m]
            bn[i, j] = acc
    for i in range(nx):
        if not bn[i, i] > 0.0 and q[i, i] > 0.0:
            bn[i, i] += Q_FLOOR
    if has_y:
        bh = np.zeros(nx)
        s = r
        for i in range(nx):
            acc = 0.0
            for m in range(nx):
                acc += bn[i, m] * h[m]
            bh[i] = acc
            s += h[i] * acc
        for i in range(nx):
            for j in range(nx):
                bn[i, j] -= bh[i] * bh[j] / s
    for i in range(nx):
        for j in range(i):
            v = 0.5 * (bn[i, j] + bn[j, i])
            bn[i, j] = v
            bn[j, i] = v


@njit(cache=True)
def _linear_run(f, q, h, r, has_y, b0, out):
    n = f.shape[0]
    nx = b0.shape[0]
    b = b0.copy()
    bn = np.zeros((nx, nx))
    fb = np.zeros((nx, nx))
    for k in range(n):
        _predict_update(b, f[k], q[k], h[k], r[k], has_y[k], bn, fb)
        for i in range(nx):
            for j in range(nx):
                b[i, j] = bn[i, j]
                out[k, i, j] = bn[i, j]


@njit(cache=True)
def _model_run(time_s, current_a, voltage_v, temp_c, states, tab, n_rc, i_b, i_h, est_h, prm, b0,
               first_update, sig_out):
    """Bound along ``states`` (N, n_x) with the EKF's linearisation; writes ``sig_out`` (N, n_x)."""
    n = time_s.size
    nx = b0.shape[0]
    b = b0.copy()
    bn = np.zeros((nx, nx))
    fb = np.zeros((nx, nx))
    vn2 = prm[K.P_VN] * prm[K.P_VN]
    eye = np.eye(nx)
    zq = np.zeros((nx, nx))
    for k in range(n):
        pv = K.polarisation_variance(prm, states[k], n_rc)
        sr = K.resistance_sigma_at(tab, prm, temp_c[k])
        re2 = sr * sr
        # the EKF's R_k, by its own rule (kernels.measurement_variance: the larger current at an edge)
        if k > 0:
            dtk = time_s[k] - time_s[k - 1]
            r = K.measurement_variance(vn2, re2, K.white_factor(prm, dtk), K.resistance_factor(prm, dtk),
                                       current_a[k], current_a[k - 1], pv)
        else:
            r = K.measurement_variance(vn2, re2, 1.0, 1.0, current_a[k], current_a[k], pv)
        if k == 0:
            y, hrow = K.measure(tab, n_rc, i_b, i_h, prm, states[0], current_a[0], temp_c[0])
            _predict_update(b, eye, zq, hrow, r, first_update and voltage_v[0] == voltage_v[0], bn, fb)
        else:
            dt = time_s[k] - time_s[k - 1]
            xn, f, g, qm, hrow, y = K.linearise(tab, n_rc, i_b, i_h, est_h, prm, states[k - 1],
                                                current_a[k - 1], current_a[k], dt, temp_c[k - 1], temp_c[k])
            y, hrow = K.measure(tab, n_rc, i_b, i_h, prm, states[k], current_a[k], temp_c[k])
            _predict_update(b, f, qm, hrow, r, voltage_v[k] == voltage_v[k], bn, fb)
        for i in range(nx):
            for j in range(nx):
                b[i, j] = bn[i, j]
            sig_out[k, i] = np.sqrt(bn[i, i]) if bn[i, i] > 0.0 else 0.0


@njit(cache=True)
def _reconstruct(time_s, current_a, temp_c, soc, tab, n_rc, i_b, i_h, est_h, prm, x0, out):
    """Other states along a given SOC: the model's own transition from ``x0``, SOC replaced."""
    n = time_s.size
    nx = x0.size
    for i in range(nx):
        out[0, i] = x0[i]
    out[0, 0] = soc[0]
    for k in range(1, n):
        xn, f, g, qm, hrow, y = K.linearise(tab, n_rc, i_b, i_h, est_h, prm, out[k - 1], current_a[k - 1],
                                            current_a[k], time_s[k] - time_s[k - 1], temp_c[k - 1], temp_c[k])
        for i in range(nx):
            out[k, i] = xn[i]
        out[k, 0] = soc[k]


# ----------------------------------------------------------------------------- API
def pcrb_linear(F, Q, H, R, P0, has_measurement=None) -> np.ndarray:
    """Bound ``J_k^-1`` for a (time-varying) linear Gaussian model with scalar measurements.

    Parameters
    ----------
    F, Q : array_like (N, n, n) or (n, n)
        Transition and process-noise covariance of the step into sample ``k``.
    H : array_like (N, n) or (n,)
        Measurement row at sample ``k``.
    R : array_like (N,) or float
        Measurement variance.
    P0 : array_like (n, n)
        Prior covariance ``J_0^-1`` (before the first step).
    has_measurement : array_like of bool (N,), optional
        False where sample ``k`` has no measurement (no information added).
    Returns
    -------
    ndarray (N, n, n)
        ``J_k^-1`` after the measurement of sample ``k`` (k = 1..N).

    References
    ----------
    P. Tichavsky, C. H. Muravchik and A. Nehorai, "Posterior Cramer-Rao bounds for discrete-time
    nonlinear filtering", IEEE Trans. Signal Processing 46 (1998) 1386-1396.
    """
    F = np.asarray(F, dtype=float)
    Q = np.asarray(Q, dtype=float)
    H = np.asarray(H, dtype=float)
    R = np.asarray(R, dtype=float)
    n_x = F.shape[-1]
    lengths = {a.shape[0] for a, d in ((F, 3), (Q, 3), (H, 2), (R, 1)) if a.ndim == d}
    if has_measurement is not None:
        lengths.add(len(has_measurement))
    if len(lengths) > 1:
        raise BoundError(f"inconsistent numbers of steps in F, Q, H, R, has_measurement: {sorted(lengths)}")
    if not lengths:
        raise BoundError("give the number of steps: F, Q, H, R or has_measurement must vary over time")
    n = lengths.pop()
    Fs = np.ascontiguousarray(np.broadcast_to(F, (n, n_x, n_x)))
    Qs = np.ascontiguousarray(np.broadcast_to(Q, (n, n_x, n_x)))
    Hs = np.ascontiguousarray(np.broadcast_to(H, (n, n_x)))
    Rs = np.ascontiguousarray(np.broadcast_to(R, (n,)))
    if np.any(~(Rs > 0)):
        raise BoundError("measurement variance R must be positive")
    hy = np.ones(n, dtype=np.bool_) if has_measurement is None else np.asarray(has_measurement, dtype=np.bool_)
    out = np.empty((n, n_x, n_x))
    _linear_run(Fs, Qs, Hs, Rs, hy, np.array(P0, dtype=float).reshape(n_x, n_x), out)
    return out


def truth_states(model, rec, soc_true, settings: FilterSettings | None = None) -> np.ndarray:
    """Full state trajectory (N, n_x) for a known SOC: RC voltages (and hysteresis) by the
    estimator's own transition from a rested start, bias 0.

    Parameters
    ----------
    model : CellModel
    rec : Recording
        Time (s), current (A) and temperature (degC) of the run.
    soc_true : array_like, shape (N,)
        True SOC at every sample, fraction.
    settings : FilterSettings, optional
        Fixes the state layout; default from the model.

    Returns
    -------
    numpy.ndarray, shape (N, n_x)
        State trajectory (SOC fraction, RC voltages in V, bias 0 A, hysteresis where present).

    Raises
    ------
    BoundError
        When ``soc_true`` has the wrong length or a non-finite value (naming the row).
    """
    su = setup(model, settings)
    z = np.ascontiguousarray(soc_true, dtype=float)
    if z.shape != (rec.n,):
        raise BoundError(f"recording {rec.name!r}: soc_true has {z.size} samples, the recording {rec.n}")
    if not np.all(np.isfinite(z)):
        raise BoundError(f"recording {rec.name!r}: soc_true is not finite at row {int(np.argmax(~np.isfinite(z)))}")
    out = np.empty((rec.n, su.n_x))
    _reconstruct(np.ascontiguousarray(rec.time_s, dtype=float), np.ascontiguousarray(rec.current_a, dtype=float),
                 temperature_array(rec, float(su.prm[K.P_TDEF])), z, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm,
                 np.zeros(su.n_x), out)
    return out


def pcrb_soc_sigma(model, rec, settings: FilterSettings | None = None, soc_true=None, soc0: float | None = None,
                   trace=None, use_reference: bool = True) -> BoundResult:
    """Posterior Cramer-Rao bound of the SOC sigma along one recording.

    Parameters
    ----------
    model : models.CellModel
    rec : models.Recording
    settings : FilterSettings, optional
        Noise model (default from the model).  The bound is for *this* noise model.
    soc_true : array_like (N,), optional
        True SOC (fraction).  Default: ``rec.soc_ref`` when ``use_reference`` and present, else
        the EKF's estimate (``trace`` if given, else a fresh :func:`estimator.ekf.run_ekf`).
    soc0 : float, optional
        Initial SOC given to the filter: the prior sigma is then ``p0_soc`` (else the OCV-derived
        sigma of :func:`estimator.ekf.initial_soc`).
    trace : Trace, optional
        An EKF trace whose ``states`` are used when no truth is available.
    use_reference : bool
        Treat ``rec.soc_ref`` as the truth.

    Returns
    -------
    BoundResult

    References
    ----------
    P. Tichavsky, C. H. Muravchik and A. Nehorai, "Posterior Cramer-Rao bounds for discrete-time
    nonlinear filtering", IEEE Trans. Signal Processing 46 (1998) 1386-1396.
    """
    su = setup(model, settings)
    if soc_true is not None:
        states, along = truth_states(model, rec, soc_true, su.settings), "truth"
    elif use_reference and rec.soc_ref is not None:
        states, along = truth_states(model, rec, rec.soc_ref, su.settings), "reference"
    else:
        if trace is None:
            from socfuse.estimator.filters.ekf import run_ekf
            trace = run_ekf(model, rec, su.settings, soc0=soc0)
        states, along = np.ascontiguousarray(trace.states, dtype=float), "estimate"
        if states.shape != (rec.n, su.n_x):
            raise BoundError(f"trace states {states.shape} do not match the filter's ({rec.n}, {su.n_x})")
    z0, sig0 = initial_soc(su, rec, soc0)
    _, p0 = prior(su, z0, sig0)
    sig = np.empty((rec.n, su.n_x))
    t = np.ascontiguousarray(rec.time_s, dtype=float)
    _model_run(t, np.ascontiguousarray(rec.current_a, dtype=float), np.ascontiguousarray(rec.voltage_v, dtype=float),
               temperature_array(rec, float(su.prm[K.P_TDEF])), np.ascontiguousarray(states), su.tables.packed, su.n_rc, su.i_b, su.i_h,
               su.est_h, su.prm, p0, True, sig)
    return BoundResult(t, sig[:, 0].copy(), sig, along, rec.name)
