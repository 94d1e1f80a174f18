"""Thevenin equivalent-circuit cell model: OCV + R0 + n RC pairs (+ optional hysteresis).

Model (current ``i`` positive on discharge, SOC ``z`` as a fraction)::

    dz/dt    = -eta(i) * i / (3600 * Q)
    dv_j/dt  = -v_j / tau_j + i / C_j,          C_j = tau_j / R_j
    v        = OCV(z, T) + M * h - sum_j v_j - R0(z, T) * i

The equivalent-circuit form and its comparison with other orders is in Hu, Li and Peng,
J. Power Sources 198 (2012) 359-367; the one-state hysteresis ``h`` (dimensionless, -1..1,
scaled by ``M`` volts) is the form of Plett, J. Power Sources 134 (2004) 262-276 (part 2)::

    h_{k+1} = exp(-|eta u gamma dt / (3600 Q)|) h_k - (1 - exp(...)) sgn(u)

Sampling convention used everywhere in socfuse (simulation, estimators, C export):
the current over the interval ``[t_k, t_{k+1}]`` is held at the interval mean
``u_k = (i_k + i_{k+1}) / 2`` (so coulomb counting is the trapezoid rule), and the RC states
are propagated with the exact zero-order-hold solution ``a = exp(-dt/tau)``,
``v_{k+1} = a v_k + R (1 - a) u_k`` for the actual interval ``dt`` (uneven intervals and gaps
are fine).  Parameters are evaluated at the state and temperature at the start of the
interval.  The terminal voltage at ``t_k`` uses the sample ``i_k``.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Mapping

import numpy as np

from socfuse.models.ocv import OcvCurve
from socfuse.models.tables import ParamTable

__all__ = [
    "RcPair", "Hysteresis", "CellModel", "Simulation", "discretise_rc", "interval_current",
    "simulate", "SECONDS_PER_HOUR",
]

SECONDS_PER_HOUR = 3600.0  # 1 Ah = 3600 C (common practice, no source)


@dataclass(frozen=True, eq=False)
class RcPair:
    """One parallel RC pair: resistance ``r_ohm`` and time constant ``tau_s`` tables."""

    r_ohm: ParamTable
    tau_s: ParamTable


@dataclass(frozen=True)
class Hysteresis:
    """One-state hysteresis of Plett (2004, part 2).

    Parameters
    ----------
    gamma : float
        Dimensionless rate: how fast ``h`` moves per unit of SOC throughput (> 0).
    max_v : float
        Magnitude ``M`` of the hysteresis voltage in volts (>= 0).
    """

    gamma: float
    max_v: float

    def __post_init__(self) -> None:
        if not (np.isfinite(self.gamma) and self.gamma > 0):
            raise ValueError(f"hysteresis gamma must be positive and finite, got {self.gamma}")
        if not (np.isfinite(self.max_v) and self.max_v >= 0):
            raise ValueError(f"hysteresis max_v must be >= 0 and finite, got {self.max_v}")


@dataclass(frozen=True, eq=False)
class CellModel:
    """Identified or invented Thevenin model of one cell.

    Parameters
    ----------
    capacity_ah : float
        Usable capacity in Ah between the voltage limits.
    ocv : OcvCurve
    r0_ohm : ParamTable
        Series resistance (ohm) over SOC (x temperature).
    rc : tuple of RcPair
        0 to 3 RC pairs.
    coulombic_efficiency : float
        Fraction of charge current stored (0 < eta <= 1); discharge uses 1.
    hysteresis : Hysteresis or None
    v_min_v, v_max_v : float
        Cell-maker voltage limits (cut-off on discharge, end of charge), V.
    name : str
    provenance : mapping
        Where each part came from (file, test, fit residual); saved in the model file.
    """

    capacity_ah: float
    ocv: OcvCurve
    r0_ohm: ParamTable
    rc: tuple = ()
    coulombic_efficiency: float = 1.0
    hysteresis: Hysteresis | None = None
    v_min_v: float = 2.5
    v_max_v: float = 4.2
    name: str = ""
    provenance: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not (np.isfinite(self.capacity_ah) and self.capacity_ah > 0):
            raise ValueError(f"capacity_ah must be positive and finite, got {self.capacity_ah}")
        if not (0.0 < self.coulombic_efficiency <= 1.0):
            raise ValueError(f"coulombic_efficiency must lie in (0, 1], got {self.coulombic_efficiency}")
        rc = tuple(self.rc)
        if len(rc) > 3:
            raise ValueError(f"at most 3 RC pairs are supported, got {len(rc)}")
        for j, p in enumerate(rc):
            if not isinstance(p, RcPair):
                raise TypeError(f"rc[{j}] must be an RcPair")
        if not (self.v_min_v < self.v_max_v):
            raise ValueError(f"v_min_v ({self.v_min_v}) must be below v_max_v ({self.v_max_v})")
        object.__setattr__(self, "rc", rc)
        object.__setattr__(self, "provenance", dict(self.provenance))

    @property
    def n_rc(self) -> int:
        return len(self.rc)

    def with_(self, **changes) -> "CellModel":
        """Copy with some fields replaced (the model itself is immutable)."""
        return replace(self, **changes)

    def terminal_voltage(self, soc, current_a, v_rc=None, h=0.0, temperature_c=None):
        """Terminal voltage (V) for the given state and current sample."""
        v = self.ocv.voltage(soc, temperature_c) - self.r0_ohm.at(soc, temperature_c) * np.asarray(current_a)
        if v_rc is not None:
            v = v - np.sum(np.atleast_1d(v_rc), axis=-1) if np.ndim(v_rc) else v - v_rc
        if self.hysteresis is not None:
            v = v + self.hysteresis.max_v * np.asarray(h)
        return v


@dataclass(frozen=True, eq=False)
class Simulation:
    """Result of :func:`simulate` (all arrays of length N, ``v_rc`` of shape (N, n_rc))."""

    time_s: np.ndarray
    voltage_v: np.ndarray
    ocv_v: np.ndarray
    soc: np.ndarray
    v_rc: np.ndarray
    h: np.ndarray


def discretise_rc(tau_s, r_ohm, dt_s):
    """Exact zero-order-hold discretisation of one RC pair.

    ``v[k+1] = a v[k] + b u[k]`` with ``a = exp(-dt/tau)`` and ``b = R (1 - a)``; this equals
    ``scipy.signal.cont2discrete`` of ``dv/dt = -v/tau + u/C`` with method ``"zoh"``.
    Arrays broadcast.

    Parameters
    ----------
    tau_s : array_like
        Time constant, s.
    r_ohm : array_like
        Resistance, ohm.
    dt_s : array_like
        Sample interval, s.

    Returns
    -------
    a : numpy.ndarray
        Decay factor per step, dimensionless.
    b : numpy.ndarray
        Input gain, ohm (V per A of interval current).
    """
    a = np.exp(-np.asarray(dt_s, dtype=float) / np.asarray(tau_s, dtype=float))
    return a, np.asarray(r_ohm, dtype=float) * (1.0 - a)


def interval_current(current_a) -> np.ndarray:
    """Mean current over each sample interval, ``(i[k] + i[k+1]) / 2``; length N - 1.

    Parameters
    ----------
    current_a : array_like, shape (n,)
        Current at the samples, A, positive on discharge.

    Returns
    -------
    numpy.ndarray, shape (n - 1,)
        Mean current per interval, A.
    """
    i = np.asarray(current_a, dtype=float)
    return 0.5 * (i[:-1] + i[1:])


def simulate(model: CellModel, time_s, current_a, temperature_c=None, soc0: float = 1.0,
             v_rc0=None, h0: float = 0.0) -> Simulation:
    """Simulate the model's terminal voltage for a sampled current profile.

    Parameters
    ----------
    model : CellModel
    time_s : array_like (N,)
        Strictly increasing sample times, s (uneven spacing allowed).
    current_a : array_like (N,)
        Current samples, A, positive on discharge.
    temperature_c : float or array_like (N,), optional
        Cell temperature, degC (default 25).
    soc0 : float
        SOC at the first sample (fraction).
    v_rc0 : array_like (n_rc,), optional
        Initial RC voltages (default 0, a rested cell).
    h0 : float
        Initial hysteresis state (-1..1).

    Returns
    -------
    Simulation

    Notes
    -----
    The one simulator of socfuse (:func:`models.simulation.simulate_model`, also reached as
    :func:`models.identify.fastsim.simulate_fast`): the sampling rule of the module docstring,
    vectorised, with the RC and hysteresis recursions in compiled scalar loops.

    References
    ----------
    X. Hu, S. Li and H. Peng, "A comparative study of equivalent circuit models for Li-ion batteries",
    J. Power Sources 198 (2012) 359-367 (title from memory).
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV battery
    packs", part 2, J. Power Sources 134 (2004) 262-276 (the hysteresis state).
    """
    from socfuse.models.simulation import simulate_model  # numba only when a simulation runs

    return simulate_model(model, time_s, current_a, temperature_c, soc0, v_rc0, h0)
