"""The truth simulator behind the bundled demo data: the invented "demo cell C48".

Demo cell C48 is an invented 4.8 Ah NMC cylindrical cell (2.5 V to 4.2 V) used in 14s4p packs of a
courier co-operative's electric cargo tricycles.  **Every number in this module is invented** for
demonstration; none comes from a data sheet or a measurement.

The truth is deliberately richer than the estimator's model (DESIGN.md section 5):

- two RC pairs and the one-state hysteresis of Plett, J. Power Sources 134 (2004) 262-276 (part 2);
- R0, R1, R2 and both time constants rise at cold with an Arrhenius-like factor
  ``exp(E / (T + 273.15) - E / (T_ref + 273.15))`` (``E`` an activation temperature in kelvin,
  ``T_ref`` = 25 degC), the usual way equivalent-circuit parameters are given a temperature
  dependence (e.g. Hu, Li and Peng, J. Power Sources 198, 2012, discuss temperature-dependent
  equivalent circuits; the values here are invented);
- the OCV has a small entropic temperature coefficient (V/K, tabulated over SOC), and the capacity
  changes linearly with temperature (``Q(T) = Q_25 (1 + c_Q (T - 25))``).  The true SOC counts
  charge relative to the capacity at the present temperature, so an estimator that uses one
  capacity sees a small capacity error on a cold day;
- the current between input samples is the linear interpolant of the samples (a continuous,
  piecewise-linear true current) and the state is propagated on a finer internal step than the
  output is sampled (default 0.1 s): each input interval is split into ``ceil(dt / internal_dt_s)``
  sub-steps; on each sub-step the interval-mean current of the interpolant is held (exact for the
  charge, exact ZOH ``exp(-h / tau)`` for the RC pairs) with parameters at the SOC and temperature
  at the start of the sub-step.  With one sub-step per interval this is exactly the sampling rule
  of DEVELOPERS.md, so the truth agrees with :func:`models.simulate` to rounding for the same
  parameters (checked in tests/test_truth.py);
- measurement effects applied afterwards by the one sensor-error model of socfuse
  (:class:`socfuse.models.sensors.SensorErrors`): current-sensor offset and gain error, white noise
  and quantisation on current, voltage and temperature, a voltage offset and a temperature-sensor
  offset.  The measured recording's ``soc_ref`` is the true SOC (a perfect lab
  reference).

The lab tests and delivery days (the demo scenario) are built in
:mod:`socfuse.estimator.demo.scenario`; :mod:`socfuse.estimator.demo.data` writes the bundled CSVs and
``manifest.json`` (``python datasets/generate.py`` is a thin wrapper).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

try:  # numba is a runtime dependency; the kernel also runs as plain Python (NUMBA_DISABLE_JIT=1)
    from numba import njit
except ImportError:  # pragma: no cover - numba is installed with the package
    def njit(*args, **kwargs):
        if args and callable(args[0]):
            return args[0]
        return lambda f: f

from socfuse.models.ocv import OcvCurve
from socfuse.models.recording import Recording
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import SECONDS_PER_HOUR, CellModel, Hysteresis, RcPair

from socfuse.models.sensors import IDEAL_SENSORS, SensorErrors

__all__ = [
    "TruthParams", "C48_TRUTH", "TruthTrace", "arrhenius_factor", "truth_ocv_curve", "truth_cell_model",
    "simulate_truth", "TABLE_TEMPERATURES_C",
]

KELVIN = 273.15


# ============================================================================ parameters
@dataclass(frozen=True)
class TruthParams:
    """Parameters of the truth simulator (all invented for the demo).

    Tables are tuples so the dataclass stays hashable and JSON-friendly.  Resistances in ohm,
    time constants in s, at the reference temperature ``t_ref_c`` over the SOC breakpoints
    ``res_soc``; the temperature factor is ``arrhenius_factor(T, activation_k)``.

    Parameters
    ----------
    capacity_ah : float
        Capacity at 25 degC between the C/20 end-of-charge (SOC 1) and the 2.5 V cut-off (SOC 0).
    capacity_temp_coeff_per_c : float
        Relative capacity change per kelvin (``Q(T) = Q (1 + c (T - 25))``).
    coulombic_efficiency : float
        Fraction of charge current stored.
    ocv_soc, ocv_v : tuple
        OCV breakpoints at 25 degC (PCHIP through them, see :class:`models.OcvCurve`).
    ocv_temp_coeff_v_per_c : tuple
        Entropic coefficient dOCV/dT (V/K) at each OCV breakpoint.
    res_soc : tuple
        SOC breakpoints of the resistance and time-constant tables (linear interpolation).
    r0_ohm, r1_ohm, tau1_s, r2_ohm, tau2_s : tuple
        Tables at 25 degC.  Empty ``r2_ohm``/``tau2_s`` give a one-RC truth (for tests).
    r0_activation_k, r1_activation_k, r2_activation_k, tau_activation_k : float
        Activation temperatures ``E`` (K) of the Arrhenius-like factor (0 = no dependence).
    hysteresis_max_v, hysteresis_gamma : float
        Plett (2004) one-state hysteresis: magnitude M (V; 0 = none) and rate gamma.
    v_min_v, v_max_v : float
        Cut-off and end-of-charge voltages.
    """

    name: str = "demo cell C48 (invented)"
    capacity_ah: float = 4.8
    capacity_temp_coeff_per_c: float = 0.001
    coulombic_efficiency: float = 0.998
    t_ref_c: float = 25.0
    ocv_soc: tuple = (0.00, 0.01, 0.03, 0.06, 0.10, 0.15, 0.20, 0.30, 0.40, 0.50, 0.60, 0.70, 0.80,
                      0.90, 0.95, 1.00)
    ocv_v: tuple = (2.650, 3.000, 3.220, 3.400, 3.500, 3.550, 3.585, 3.630, 3.665, 3.700, 3.760,
                    3.840, 3.930, 4.030, 4.095, 4.185)
    ocv_temp_coeff_v_per_c: tuple = (-4.0e-4, -3.6e-4, -3.2e-4, -2.8e-4, -2.4e-4, -2.0e-4, -1.6e-4,
                                     -1.0e-4, -0.5e-4, 0.0, 0.5e-4, 0.5e-4, 0.0, -0.5e-4, -0.8e-4,
                                     -1.0e-4)
    res_soc: tuple = (0.00, 0.05, 0.10, 0.20, 0.30, 0.50, 0.70, 0.90, 1.00)
    r0_ohm: tuple = (0.0480, 0.0360, 0.0310, 0.0270, 0.0255, 0.0245, 0.0245, 0.0255, 0.0270)
    r1_ohm: tuple = (0.0220, 0.0150, 0.0120, 0.0105, 0.0100, 0.0095, 0.0095, 0.0100, 0.0110)
    tau1_s: tuple = (22.0, 25.0, 28.0, 30.0, 30.0, 30.0, 30.0, 28.0, 26.0)
    r2_ohm: tuple = (0.0400, 0.0260, 0.0200, 0.0160, 0.0150, 0.0140, 0.0140, 0.0150, 0.0170)
    tau2_s: tuple = (450.0, 550.0, 650.0, 700.0, 700.0, 700.0, 700.0, 650.0, 600.0)
    r0_activation_k: float = 2000.0
    r1_activation_k: float = 3200.0
    r2_activation_k: float = 2800.0
    tau_activation_k: float = 1200.0
    hysteresis_max_v: float = 0.008
    hysteresis_gamma: float = 30.0
    v_min_v: float = 2.5
    v_max_v: float = 4.2

    def __post_init__(self) -> None:
        n_o = len(self.ocv_soc)
        if len(self.ocv_v) != n_o or len(self.ocv_temp_coeff_v_per_c) != n_o:
            raise ValueError("ocv_soc, ocv_v and ocv_temp_coeff_v_per_c must have the same length")
        n_r = len(self.res_soc)
        for nm in ("r0_ohm", "r1_ohm", "tau1_s"):
            if len(getattr(self, nm)) != n_r:
                raise ValueError(f"{nm} must have {n_r} values (one per res_soc breakpoint)")
        if len(self.r2_ohm) != len(self.tau2_s) or len(self.r2_ohm) not in (0, n_r):
            raise ValueError(f"r2_ohm and tau2_s must both be empty or have {n_r} values")
        if not (self.capacity_ah > 0 and 0 < self.coulombic_efficiency <= 1):
            raise ValueError("capacity_ah must be positive and coulombic_efficiency in (0, 1]")
        if self.hysteresis_max_v < 0 or self.hysteresis_gamma <= 0:
            raise ValueError("hysteresis_max_v must be >= 0 and hysteresis_gamma > 0")

    @property
    def n_rc(self) -> int:
        return 1 if len(self.r2_ohm) == 0 else 2

    def capacity_at(self, temperature_c) -> np.ndarray:
        """Capacity (Ah) at ``temperature_c`` (degC)."""
        return self.capacity_ah * (1.0 + self.capacity_temp_coeff_per_c
                                   * (np.asarray(temperature_c, dtype=float) - self.t_ref_c))


#: The truth parameters of demo cell C48 (invented).
C48_TRUTH = TruthParams()



def arrhenius_factor(temperature_c, activation_k: float, t_ref_c: float = 25.0):
    """Arrhenius-like factor ``exp(E (1/(T+273.15) - 1/(T_ref+273.15)))``; exactly 1 at ``T_ref``.

    Parameters
    ----------
    temperature_c : float or array_like
        Temperature, degC.
    activation_k : float
        Activation temperature ``E`` (activation energy over the gas constant), K.
    t_ref_c : float
        Reference temperature, degC.

    Returns
    -------
    float or numpy.ndarray
        The dimensionless factor, shape of ``temperature_c``.
    """
    t = np.asarray(temperature_c, dtype=float)
    return np.exp(activation_k * (1.0 / (t + KELVIN) - 1.0 / (t_ref_c + KELVIN)))


# ============================================================================ CellModel view
TABLE_TEMPERATURES_C = tuple(float(t) for t in range(-20, 55, 5))


def truth_ocv_curve(params: TruthParams = C48_TRUTH) -> OcvCurve:
    """The truth OCV over SOC x temperature (rows every 5 degC from -20 to 50 degC).

    Row ``T`` is the PCHIP through ``ocv_v + ocv_temp_coeff_v_per_c (T - 25)``.  The simulator
    evaluates exactly this object, so it *is* the truth OCV (linear between rows in temperature).

    Parameters
    ----------
    params : TruthParams
        The truth cell (OCV breakpoints in V, temperature coefficients in V/degC).

    Returns
    -------
    OcvCurve
        Rows over SOC (fraction) by temperature (degC), V.
    """
    soc = np.asarray(params.ocv_soc, dtype=float)
    temps = np.asarray(TABLE_TEMPERATURES_C)
    rows = (np.asarray(params.ocv_v)[None, :]
            + np.asarray(params.ocv_temp_coeff_v_per_c)[None, :] * (temps[:, None] - params.t_ref_c))
    return OcvCurve(soc, rows, temps, source=f"truth simulator: {params.name}")


def _table(params: TruthParams, values, activation_k: float, name: str) -> ParamTable:
    temps = np.asarray(TABLE_TEMPERATURES_C)
    base = np.asarray(values, dtype=float)
    return ParamTable(np.asarray(params.res_soc, dtype=float),
                      base[None, :] * arrhenius_factor(temps, activation_k, params.t_ref_c)[:, None],
                      temps, name=name)


def truth_cell_model(temperature_c: float = 25.0, params: TruthParams = C48_TRUTH) -> CellModel:
    """The truth as a :class:`models.CellModel` (for comparisons in identification tests).

    The tables carry a temperature axis every 5 degC from -20 to 50 degC (exact at the rows, linear
    in between; at 25 degC exact).  A ``CellModel`` has one capacity: the truth capacity at
    ``temperature_c``.  The model lacks only the continuous temperature factor between rows and
    the sub-step propagation; otherwise :func:`models.simulate` with it reproduces the truth.

    Parameters
    ----------
    temperature_c : float
        Temperature at which the capacity is taken, degC.
    params : TruthParams
        The truth cell.

    Returns
    -------
    CellModel
        Capacity (Ah), OCV (V), R0 and RC tables (ohm, s) over SOC x temperature, hysteresis, limits.
    """
    rc = [RcPair(_table(params, params.r1_ohm, params.r1_activation_k, "r1_ohm"),
                 _table(params, params.tau1_s, params.tau_activation_k, "tau1_s"))]
    if params.n_rc == 2:
        rc.append(RcPair(_table(params, params.r2_ohm, params.r2_activation_k, "r2_ohm"),
                         _table(params, params.tau2_s, params.tau_activation_k, "tau2_s")))
    hy = None if params.hysteresis_max_v == 0 else Hysteresis(params.hysteresis_gamma, params.hysteresis_max_v)
    return CellModel(
        capacity_ah=float(params.capacity_at(temperature_c)), ocv=truth_ocv_curve(params),
        r0_ohm=_table(params, params.r0_ohm, params.r0_activation_k, "r0_ohm"), rc=tuple(rc),
        coulombic_efficiency=params.coulombic_efficiency, hysteresis=hy, v_min_v=params.v_min_v,
        v_max_v=params.v_max_v, name=params.name,
        provenance={"source": "socfuse.estimator.demo.truth (invented truth parameters, not a measurement)",
                    "capacity_temperature_c": float(temperature_c)})


# ============================================================================ kernel
@njit(cache=True)
def _interp_clamped(x, xp, fp):
    """Linear interpolation clamped at the ends (same as numpy.interp)."""
    n = xp.size
    if x <= xp[0]:
        return fp[0]
    if x >= xp[n - 1]:
        return fp[n - 1]
    lo = 0
    hi = n - 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if xp[mid] <= x:
            lo = mid
        else:
            hi = mid
    w = (x - xp[lo]) / (xp[hi] - xp[lo])
    return fp[lo] + w * (fp[hi] - fp[lo])


@njit(cache=True)
def _truth_kernel(t, i, temp, n_sub, out_idx, soc0, h0, vrc0, res_soc, r_tab, tau_tab, e_r, e_tau,
                  cap_as_ref, cap_coef, t_ref_c, eta_c, gamma, use_hyst):
    """Propagate SOC, RC voltages and hysteresis on the grid ``t`` with sub-steps.

    Returns states at the grid indices ``out_idx`` (sorted): soc (M,), vrc (M, n_rc), h (M,).
    """
    n = t.size
    n_rc = r_tab.shape[0]
    m = out_idx.size
    soc_o = np.empty(m)
    vrc_o = np.empty((m, n_rc))
    h_o = np.empty(m)
    z = soc0
    h = h0
    v = np.empty(n_rc)
    for j in range(n_rc):
        v[j] = vrc0[j]
    inv_ref = 1.0 / (t_ref_c + 273.15)
    o = 0
    for k in range(n):
        while o < m and out_idx[o] == k:
            soc_o[o] = z
            for j in range(n_rc):
                vrc_o[o, j] = v[j]
            h_o[o] = h
            o += 1
        if k == n - 1:
            break
        ns = n_sub[k]
        hstep = (t[k + 1] - t[k]) / ns
        di = i[k + 1] - i[k]
        dT = temp[k + 1] - temp[k]
        for s in range(ns):
            ia = i[k] + di * s / ns
            ib = i[k] + di * (s + 1) / ns
            u = 0.5 * (ia + ib)
            tc = temp[k] + dT * s / ns
            arg = 1.0 / (tc + 273.15) - inv_ref
            q_as = cap_as_ref * (1.0 + cap_coef * (tc - t_ref_c))
            eta = 1.0 if u >= 0.0 else eta_c
            for j in range(n_rc):
                r = _interp_clamped(z, res_soc, r_tab[j]) * math.exp(e_r[j] * arg)
                tau = _interp_clamped(z, res_soc, tau_tab[j]) * math.exp(e_tau[j] * arg)
                a = math.exp(-hstep / tau)
                v[j] = a * v[j] + r * (1.0 - a) * u
            if use_hyst:
                e = math.exp(-abs(eta * u * gamma * hstep / q_as))
                sg = 0.0
                if u > 0.0:
                    sg = 1.0
                elif u < 0.0:
                    sg = -1.0
                h = e * h - (1.0 - e) * sg
            z = z - eta * u * hstep / q_as
    return soc_o, vrc_o, h_o


# ============================================================================ simulation
def _kernel_params(params: TruthParams, capacity_scale: float = 1.0) -> tuple:
    """The parameter arguments of :func:`_truth_kernel` after the initial state."""
    two = params.n_rc == 2
    r_tab = np.array([params.r1_ohm] + ([params.r2_ohm] if two else []), dtype=float)
    tau_tab = np.array([params.tau1_s] + ([params.tau2_s] if two else []), dtype=float)
    e_r = np.array([params.r1_activation_k] + ([params.r2_activation_k] if two else []), dtype=float)
    e_tau = np.full(params.n_rc, float(params.tau_activation_k))
    return (np.asarray(params.res_soc, dtype=float), r_tab, tau_tab, e_r, e_tau,
            params.capacity_ah * capacity_scale * SECONDS_PER_HOUR, float(params.capacity_temp_coeff_per_c),
            float(params.t_ref_c), float(params.coulombic_efficiency), float(params.hysteresis_gamma),
            params.hysteresis_max_v > 0)


@dataclass(frozen=True, eq=False)
class TruthTrace:
    """True signals at the output sample times (arrays of length N; ``v_rc`` shape (N, n_rc))."""

    time_s: np.ndarray
    current_a: np.ndarray
    temperature_c: np.ndarray
    soc: np.ndarray
    voltage_true: np.ndarray
    ocv_v: np.ndarray
    v_rc: np.ndarray
    h: np.ndarray



def simulate_truth(time_s, current_a, temperature_c=25.0, soc0: float = 1.0, sensors: SensorErrors | None = None,
                   seed: int = 0, capacity_scale: float = 1.0, params: TruthParams = C48_TRUTH,
                   sample_time_s=None, internal_dt_s: float = 0.1, h0: float = 0.0, v_rc0=None,
                   name: str = "") -> tuple[Recording, TruthTrace]:
    """Simulate the truth cell and what the instruments record.

    Parameters
    ----------
    time_s : array_like (N,)
        Strictly increasing knots of the true current, s.  The true current is the linear
        interpolant of ``current_a`` between knots.
    current_a : array_like (N,)
        True cell current at the knots, A, positive on discharge.
    temperature_c : float or array_like (N,)
        True cell temperature at the knots, degC (linear in between).
    soc0 : float
        True SOC at ``time_s[0]`` (fraction).
    sensors : SensorErrors, optional
        Measurement effects; default :data:`IDEAL_SENSORS`.
    seed : int
        Seed of the noise generator (``numpy.random.default_rng(seed)``); same seed, same output.
    capacity_scale : float
        Multiplies the truth capacity (for example 0.95 for an aged cell).
    params : TruthParams
        Truth parameters (default :data:`C48_TRUTH`).
    sample_time_s : array_like (M,), optional
        Times at which the instruments sample (default: the knots).  Need not be knots.
    internal_dt_s : float
        Longest internal sub-step, s (``inf`` = one step per interval: the DEVELOPERS.md sampling
        rule exactly).
    h0 : float
        Initial hysteresis state (-1 after a discharge, +1 after a charge).
    v_rc0 : array_like (n_rc,), optional
        Initial RC voltages (default 0: a rested cell).
    name : str
        Name of the returned recording.

    Returns
    -------
    recording : Recording
        Measured ``time_s, current_a, voltage_v, temperature_c`` and ``soc_ref`` = true SOC.
    truth : TruthTrace
        True current, temperature, SOC, terminal voltage, OCV, RC voltages and hysteresis state
        at the sample times.
    """
    t = np.asarray(time_s, dtype=float).ravel()
    i = np.asarray(current_a, dtype=float).ravel()
    if t.size < 2 or i.shape != t.shape:
        raise ValueError(f"time_s ({t.size}) and current_a ({i.size}) must have the same length >= 2")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(i))):
        raise ValueError("time_s and current_a must be finite")
    if np.any(np.diff(t) <= 0):
        k = int(np.argmax(np.diff(t) <= 0)) + 1
        raise ValueError(f"time_s is not strictly increasing at row {k}")
    temp = np.broadcast_to(np.asarray(temperature_c, dtype=float), t.shape).astype(float)
    if not np.all(np.isfinite(temp)):
        raise ValueError("temperature_c must be finite")
    if not (capacity_scale > 0 and internal_dt_s > 0):
        raise ValueError("capacity_scale and internal_dt_s must be positive")
    sensors = IDEAL_SENSORS if sensors is None else sensors
    if sample_time_s is None:
        ts = t
        grid, gi, gT = t, i, temp
        idx = np.arange(t.size)
    else:
        ts = np.asarray(sample_time_s, dtype=float).ravel()
        if ts.size == 0 or np.any(np.diff(ts) <= 0) or ts[0] < t[0] or ts[-1] > t[-1]:
            raise ValueError("sample_time_s must be strictly increasing and inside time_s")
        grid = np.union1d(t, ts)
        gi = np.interp(grid, t, i)
        gT = np.interp(grid, t, temp)
        idx = np.searchsorted(grid, ts)
    dt = np.diff(grid)
    if math.isinf(internal_dt_s):
        n_sub = np.ones(dt.size, dtype=np.int64)
    else:
        n_sub = np.maximum(1, np.ceil(dt / internal_dt_s - 1e-9)).astype(np.int64)
    n_rc = params.n_rc
    vrc0 = np.zeros(n_rc) if v_rc0 is None else np.asarray(v_rc0, dtype=float).reshape(n_rc)
    soc, v_rc, h = _truth_kernel(grid, gi, gT, n_sub, idx.astype(np.int64), float(soc0), float(h0), vrc0,
                                 *_kernel_params(params, capacity_scale))
    i_s = gi[idx]
    T_s = gT[idx]
    ocv = truth_ocv_curve(params).voltage(soc, T_s)
    r0 = np.interp(soc, params.res_soc, params.r0_ohm) * arrhenius_factor(T_s, params.r0_activation_k,
                                                                          params.t_ref_c)
    v_true = ocv + params.hysteresis_max_v * h - v_rc.sum(axis=1) - r0 * i_s
    rng = np.random.default_rng(seed)
    s = sensors
    i_m = s.current(i_s, rng)  # drawn in this order: current, voltage, temperature noise
    v_m = s.voltage(v_true, rng)
    T_m = s.temperature(T_s, rng)
    rec = Recording(ts, i_m, v_m, T_m, soc, name=name,
                    metadata={"source": "socfuse.estimator.demo.truth.simulate_truth (invented demo cell)", "seed": int(seed),
                              "sensors": asdict(s), "capacity_scale": float(capacity_scale)})
    truth = TruthTrace(ts, i_s, T_s, soc, v_true, ocv, v_rc, h)
    return rec, truth
