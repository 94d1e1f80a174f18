"""The one open-loop simulator of a :class:`~models.CellModel`, following the sampling rule exactly.

:func:`models.thevenin.simulate` (and its alias :func:`models.identify.fastsim.simulate_fast`)
runs this code.  The computation is split into vectorised parts and compiled scalar loops:

- the SOC trajectory does not depend on the RC states, so it is a cumulative sum
  ``z_{k+1} = z_k - eta(u_k) u_k dt_k / (3600 Q)`` with ``u_k = (i_k + i_{k+1}) / 2``;
- the parameters are then evaluated at the start of every interval with the tables' own
  vectorised interpolation;
- the RC states follow the exact zero-order-hold recursion ``v' = a v + R (1 - a) u``,
  ``a = exp(-dt / tau)``, in :func:`rc_filter` (numba, scalar, also runs under
  ``NUMBA_DISABLE_JIT=1``);
- the Plett (2004) hysteresis state likewise in :func:`hysteresis_filter`;
- a charge-transfer term (:class:`models.thevenin.ChargeTransfer`) adds ``(1 - a_1) c(u, T)`` to
  the input of the first pair, ``c`` from :func:`charge_transfer_v` (the filter kernels' own).

Checked against closed-form RC responses and ``scipy.integrate.solve_ivp`` in
tests/test_thevenin.py, and against a plain loop of the sampling rule in
tests/test_identify_pulse.py.
"""
from __future__ import annotations

import math

import numpy as np

from socfuse.models.thevenin import SECONDS_PER_HOUR, CellModel, Simulation, interval_current

__all__ = ["charge_transfer_v", "charge_transfer_series", "rc_filter", "hysteresis_filter", "soc_trajectory", "simulate_model", "unit_rc_response", "njit"]

try:
    from numba import njit
except ImportError:  # pragma: no cover
    def njit(*args, **kwargs):
        if args and callable(args[0]):
            return args[0]
        return lambda f: f

@njit(cache=True, error_model="numpy", inline="always")
def charge_transfer_v(i, b, g, r):
    """Charge-transfer excess voltage ``c = b asinh(g i) - r i`` (V) and ``dc/di`` (ohm).

    The one copy of this arithmetic (the simulator here, the filter kernels and, ported to
    float32, the exported C code); the form and its source are in
    :class:`models.thevenin.ChargeTransfer` (symmetric Butler-Volmer, Bard and Faulkner 2001,
    ch. 3).  ``i`` the current sample (A, + = discharge), ``b = 2RT/F`` (V), ``g = 1/(2 I_0)``
    (1/A), ``r`` the chord resistance already in the linear tables (ohm).
    """
    x = g * i
    return b * math.asinh(x) - r * i, b * g / math.sqrt(1.0 + x * x) - r


@njit(cache=True, error_model="numpy")
def charge_transfer_series(i, b, g, r):
    """:func:`charge_transfer_v` over arrays of equal length (the excess voltage only), V."""
    n = i.shape[0]
    out = np.empty(n)
    for k in range(n):
        c, _ = charge_transfer_v(i[k], b[k], g[k], r[k])
        out[k] = c
    return out


@njit(cache=True)
def rc_filter(a, bu, v0):
    """Linear recursion ``v[k+1] = a[k] v[k] + bu[k]``, ``v[0] = v0``; returns ``v`` (len(a) + 1)."""
    n = a.shape[0]
    out = np.empty(n + 1)
    out[0] = v0
    v = v0
    for k in range(n):
        v = a[k] * v + bu[k]
        out[k + 1] = v
    return out


@njit(cache=True)
def hysteresis_filter(rate, u, h0):
    """Plett (2004) one-state hysteresis: ``h' = e h - (1 - e) sgn(u)``, ``e = exp(-|rate|)``."""
    n = u.shape[0]
    out = np.empty(n + 1)
    out[0] = h0
    h = h0
    for k in range(n):
        e = np.exp(-abs(rate[k]))
        s = 0.0
        if u[k] > 0:
            s = 1.0
        elif u[k] < 0:
            s = -1.0
        h = e * h - (1.0 - e) * s
        out[k + 1] = h
    return out


@njit(cache=True)
def unit_rc_response(time_s, current_a, tau_s, start, stop):
    """RC voltage of a unit-resistance pair (R = 1 ohm) at samples ``start..stop`` (inclusive).

    The pair starts relaxed (0 V) at ``start`` and follows the sampling rule: interval-mean
    current, exact ZOH ``a = exp(-dt/tau)``.  Returns an array of length ``stop - start + 1``.
    """
    out = np.zeros(stop - start + 1)
    v = 0.0
    for k in range(start, stop):
        dt = time_s[k + 1] - time_s[k]
        a = np.exp(-dt / tau_s)
        v = a * v + (1.0 - a) * 0.5 * (current_a[k] + current_a[k + 1])
        out[k + 1 - start] = v
    return out


def soc_trajectory(model: CellModel, time_s, current_a, soc0: float = 1.0) -> np.ndarray:
    """SOC at every sample by the sampling rule (trapezoid charge, efficiency on charge).

    Parameters
    ----------
    model : CellModel
        Supplies ``capacity_ah`` (Ah) and ``coulombic_efficiency`` (applied to charging intervals).
    time_s : array_like, shape (n,)
        Sample times, s.
    current_a : array_like, shape (n,)
        Current, A, positive on discharge.
    soc0 : float
        SOC at the first sample, fraction 0..1.

    Returns
    -------
    numpy.ndarray, shape (n,)
        SOC, fraction (not clipped to 0..1).
    """
    t = np.asarray(time_s, dtype=float)
    u = interval_current(current_a)
    eta = np.where(u >= 0, 1.0, model.coulombic_efficiency)
    dz = eta * u * np.diff(t) / (model.capacity_ah * SECONDS_PER_HOUR)
    return soc0 - np.concatenate([[0.0], np.cumsum(dz)])


def simulate_model(model: CellModel, time_s, current_a, temperature_c=None, soc0: float = 1.0,
                   v_rc0=None, h0: float = 0.0) -> Simulation:
    """The open-loop simulation behind :func:`models.thevenin.simulate` (same arguments).

    Parameters
    ----------
    model : CellModel
    time_s, current_a : array_like (N,)
        Sample times (s, strictly increasing) and current (A, positive on discharge).
    temperature_c : float or array_like (N,), optional
        degC, default 25.
    soc0 : float
    v_rc0 : array_like (n_rc,), optional
    h0 : float

    Returns
    -------
    Simulation
    """
    t = np.asarray(time_s, dtype=float)
    i = np.asarray(current_a, dtype=float)
    if t.shape != i.shape or t.ndim != 1 or t.size == 0:
        raise ValueError(f"time_s ({t.shape}) and current_a ({i.shape}) must be 1-D of the same length")
    if np.any(np.diff(t) <= 0):
        raise ValueError("time_s must be strictly increasing")
    temp = np.broadcast_to(np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float), t.shape)
    soc = soc_trajectory(model, t, i, soc0)
    dt = np.diff(t)
    u = interval_current(i)
    z0, t0 = soc[:-1], temp[:-1]
    v_rc = np.zeros((t.size, model.n_rc))
    for j, pair in enumerate(model.rc):
        a = np.exp(-dt / np.asarray(pair.tau_s.at(z0, t0), dtype=float))
        bu = np.asarray(pair.r_ohm.at(z0, t0), dtype=float) * (1.0 - a) * u
        if j == 0 and model.charge_transfer is not None:  # the excess drives the first pair
            bu = bu + (1.0 - a) * model.charge_transfer.excess_v(u, t0)
        v_rc[:, j] = rc_filter(a, bu, 0.0 if v_rc0 is None else float(np.asarray(v_rc0, dtype=float)[j]))
    hy = model.hysteresis
    if hy is not None:
        eta = np.where(u >= 0, 1.0, model.coulombic_efficiency)
        rate = eta * u * hy.gamma * dt / (model.capacity_ah * SECONDS_PER_HOUR)
        h = hysteresis_filter(rate, u, float(h0))
    else:
        h = np.full(t.size, float(h0))
    ocv = np.asarray(model.ocv.voltage(soc, temp), dtype=float)
    v = ocv - np.asarray(model.r0_ohm.at(soc, temp), dtype=float) * i - v_rc.sum(axis=1)
    if hy is not None:
        v = v + hy.max_v * h
    return Simulation(t, v, ocv, soc, v_rc, h)
