"""Thevenin equivalent-circuit cell model: OCV + R0 + n RC pairs (+ optional hysteresis).

Model (current ``i`` positive on discharge, SOC ``z`` as a fraction)::

    dz/dt    = -eta(i) * i / (3600 * Q)
    dv_j/dt  = -v_j / tau_j + i / C_j,          C_j = tau_j / R_j
    v        = OCV(z, T) + M * h - sum_j v_j - R0(z, T) * i

With a :class:`ChargeTransfer` term the first RC pair is driven by ``R_1 i + c(i, T)``
(``dv_1/dt = -v_1 / tau_1 + (i + c(i, T) / R_1) / C_1``): ``c`` is the part of a Butler-Volmer
overpotential that the linear R0/RC tables do not describe, and it builds up with the pair's
time constant (the pulse tests show it in the 10 s resistance, not in the edge step).

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
    "RcPair", "Hysteresis", "ChargeTransfer", "CellModel", "Simulation", "discretise_rc", "interval_current",
    "simulate", "SECONDS_PER_HOUR",
]

SECONDS_PER_HOUR = 3600.0  # 1 Ah = 3600 C (common practice, no source)
FARADAY_C_PER_MOL = 96485.33212  # CODATA 2018
GAS_J_PER_MOL_K = 8.314462618  # CODATA 2018
KELVIN_OFFSET = 273.15  # 0 degC in K (SI definition)


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
class ChargeTransfer:
    """Current dependence of the cell resistance: a Butler-Volmer charge-transfer excess term.

    The charge-transfer overpotential of the symmetric Butler-Volmer equation (transfer
    coefficient 1/2; Bard and Faulkner, "Electrochemical Methods", 2nd ed., Wiley 2001, ch. 3, the
    current-overpotential equation) solved for the overpotential is
    ``eta(i) = b asinh(i / (2 I_0))`` with ``b = 2 R T / F`` (CODATA R, F; T in kelvin) and ``I_0``
    the exchange current of the whole cell.  The linear R0/RC tables were identified as medians
    over pulses of several amplitudes, so they already hold the chord of ``eta`` at a typical
    amplitude ``I_ref``; the model adds only the excess over that chord::

        c(i, T) = b asinh(g i) - r i,     g = 1 / (2 I_0),     r = b asinh(g I_ref) / I_ref

    so ``c(I_ref) = 0`` (the tables stand as identified there), ``c`` is odd in ``i`` (charge and
    discharge alike) and has no SOC dependence (the fits are medians over the SOC levels: no
    SOC slope is claimed).  It is added to the steady state of the first RC pair, sampled by the
    rule of the module docstring: ``v_1' = a_1 v_1 + (1 - a_1) (R_1 u + c(u, T_k))`` with the
    interval-mean current ``u`` (on the Panasonic 18650PF at 0 degC the edge-step R0 does not fall
    with the current, the 10 s pulse resistance does).  A model with the term needs at least one
    RC pair.  ``b``, ``g`` and ``r`` are evaluated at the breakpoints and
    interpolated linearly in temperature between them (clamped beyond, ``b`` at the clamped
    temperature), the convention of every other table; :meth:`coefficients` is that rule and
    :func:`models.simulation.charge_transfer_v` the arithmetic (the one copy, used by the
    simulator and the filter kernels).

    Parameters
    ----------
    temperature_c : array_like (n_t,)
        Strictly increasing temperature breakpoints, degC.
    i0_a : array_like (n_t,)
        Exchange current at each breakpoint, A (> 0).
    i_ref_a : array_like (n_t,)
        Current at which the linear tables hold (the chord point), A (> 0).
    source : str
        Where the values come from (test files, fit).
    """

    temperature_c: np.ndarray
    i0_a: np.ndarray
    i_ref_a: np.ndarray
    source: str = ""

    def __post_init__(self) -> None:
        from socfuse.models.tables import as_axis

        t = as_axis(self.temperature_c, "charge transfer: temperature breakpoints")
        cols = {}
        for name in ("i0_a", "i_ref_a"):
            a = np.array(getattr(self, name), dtype=float).ravel()
            if a.shape != t.shape:
                raise ValueError(f"charge transfer: {name} has {a.size} values for {t.size} temperatures")
            if not np.all(np.isfinite(a) & (a > 0)):
                k = int(np.argmax(~(np.isfinite(a) & (a > 0))))
                raise ValueError(f"charge transfer: {name} must be positive and finite, got {a[k]} at "
                                 f"{t[k]} degC")
            a.setflags(write=False)
            cols[name] = a
        t.setflags(write=False)
        object.__setattr__(self, "temperature_c", t)
        object.__setattr__(self, "i0_a", cols["i0_a"])
        object.__setattr__(self, "i_ref_a", cols["i_ref_a"])
        object.__setattr__(self, "source", str(self.source or ""))

    def node_coefficients(self):
        """``(b, g, r)`` at the breakpoints: V, 1/A, ohm (arrays (n_t,))."""
        b = 2.0 * GAS_J_PER_MOL_K * (self.temperature_c + KELVIN_OFFSET) / FARADAY_C_PER_MOL
        g = 0.5 / self.i0_a
        r = b * np.arcsinh(g * self.i_ref_a) / self.i_ref_a
        return b, g, r

    def coefficients(self, temperature_c=None):
        """``(b, g, r)`` at ``temperature_c`` (degC, default 25; array_like): linear between the
        breakpoints, clamped beyond."""
        from socfuse.models.tables import clamp_weights

        t = np.asarray(25.0 if temperature_c is None else temperature_c, dtype=float)
        i0, w = clamp_weights(self.temperature_c, t)
        i1 = np.minimum(i0 + 1, self.temperature_c.size - 1)
        out = []
        for c in self.node_coefficients():
            lo, hi = c[i0], c[i1]
            out.append(lo + w * (hi - lo))
        return tuple(o[()] if np.ndim(o) == 0 else o for o in out)

    def excess_v(self, current_a, temperature_c=None):
        """``c(i, T)`` (V) for current samples ``current_a`` (A, + = discharge)."""
        from socfuse.models.simulation import charge_transfer_series

        i = np.asarray(current_a, dtype=float)
        shape = np.broadcast_shapes(i.shape, np.shape(25.0 if temperature_c is None else temperature_c))
        b, g, r = (np.ascontiguousarray(np.broadcast_to(c, shape), dtype=float).ravel()
                   for c in self.coefficients(temperature_c))
        out = charge_transfer_series(np.ascontiguousarray(np.broadcast_to(i, shape), dtype=float).ravel(), b, g, r)
        out = out.reshape(shape)
        return out[()] if out.ndim == 0 else out

    def as_dict(self) -> dict:
        return {"form": CHARGE_TRANSFER_FORM, "temperature_c": self.temperature_c.tolist(),
                "i0_a": self.i0_a.tolist(), "i_ref_a": self.i_ref_a.tolist(), "source": self.source}


CHARGE_TRANSFER_FORM = "butler-volmer-symmetric-excess"


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
    charge_transfer : ChargeTransfer or None
        Current dependence of the resistance (None: the linear R0/RC tables only).
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
    charge_transfer: ChargeTransfer | None = None

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
        if self.charge_transfer is not None:
            if not isinstance(self.charge_transfer, ChargeTransfer):
                raise TypeError("charge_transfer must be a ChargeTransfer or None")
            if not rc:
                raise ValueError("a charge-transfer term drives the first RC pair: the model needs at least one")
        if not (self.v_min_v < self.v_max_v):
            raise ValueError(f"v_min_v ({self.v_min_v}) must be below v_max_v ({self.v_max_v})")
        object.__setattr__(self, "rc", rc)
        object.__setattr__(self, "provenance", dict(self.provenance))

    @property
    def n_rc(self) -> int:
        return len(self.rc)

    def table_temperatures_c(self) -> np.ndarray:
        """Every temperature breakpoint of the OCV, R0, RC (and charge-transfer) tables, degC.

        Sorted, duplicates within 1e-9 degC merged; one-point axes included; empty when no table
        has a temperature axis.
        """
        pts: list = []
        ct = self.charge_transfer
        for a in (self.ocv.temperature_c, self.r0_ohm.temperature_c,
                  *[p.r_ohm.temperature_c for p in self.rc], *[p.tau_s.temperature_c for p in self.rc],
                  None if ct is None else ct.temperature_c):
            if a is not None:
                pts.extend(np.asarray(a, dtype=float).ravel().tolist())
        return np.unique(np.round(pts, 9)).astype(float) if pts else np.zeros(0)

    @property
    def identified_temperature_c(self) -> float | None:
        """The one temperature at which a single-temperature model was identified, degC (else None).

        A model whose tables carry no temperature variation (no axis with two or more breakpoints)
        holds at one temperature: the value of its one-point temperature axes when they agree, else
        the pulse-test temperature recorded by ``identify`` in ``provenance["r0_ohm"]
        ["temperatures_c"]`` when it lists exactly one.  None for a model with a temperature axis
        (its breakpoints say where it holds) and for a model with no temperature information at
        all (callers then assume 25 degC, the lab convention).
        """
        temps = self.table_temperatures_c()
        if temps.size > 1:
            return None
        if temps.size == 1:
            return float(temps[0])
        rec = self.provenance.get("r0_ohm") if isinstance(self.provenance, Mapping) else None
        vals = rec.get("temperatures_c") if isinstance(rec, Mapping) else None
        if isinstance(vals, (list, tuple, np.ndarray)) and len(vals) == 1:
            try:
                t = float(np.asarray(vals, dtype=float).ravel()[0])
            except (TypeError, ValueError):
                return None
            return t if np.isfinite(t) else None
        return None

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
