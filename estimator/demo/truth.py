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
- measurement effects applied afterwards (:class:`SensorErrors`): current-sensor offset and gain
  error, white noise and quantisation on current, voltage and temperature, a voltage offset and a
  temperature-sensor offset.  The measured recording's ``soc_ref`` is the true SOC (a perfect lab
  reference).

The lab tests and delivery days are built by :func:`c20_test_profile`, :func:`pulse_test_profile`
and :func:`delivery_day_profile`; :func:`generate_demo_data` writes the bundled CSVs and
``manifest.json`` (``python datasets/generate.py`` is a thin wrapper).
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path

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
from socfuse.models.fileio import replacing, write_text_replacing

__all__ = [
    "TruthParams", "C48_TRUTH", "SensorErrors", "IDEAL_SENSORS", "LAB_SENSORS", "FLEET_SENSORS",
    "TruthTrace", "Profile", "arrhenius_factor", "truth_ocv_curve", "truth_cell_model", "simulate_truth",
    "simulate_profile", "c20_test_profile", "pulse_test_profile", "delivery_day_profile", "DAY_KINDS",
    "DEMO_SEED", "DEMO_FILES", "MANIFEST_SCHEMA", "demo_file_specs", "generate_demo_data", "write_recording_csv",
]

KELVIN = 273.15
DEMO_SEED = 4848
CELLS_IN_PARALLEL = 4  # 14s4p pack: per-cell current = pack current / 4


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


@dataclass(frozen=True)
class SensorErrors:
    """Measurement effects applied to the true signals (defaults: an ideal instrument).

    ``current_meas = q_i round((gain * i + offset_a + n_i) / q_i)``, ``n_i ~ N(0, current_noise_a^2)``;
    ``voltage_meas = q_v round((v + voltage_offset_v + n_v) / q_v)``; temperature likewise with
    ``temperature_offset_c``, ``temperature_noise_c`` and ``temperature_quant_c``.  A quantum of 0
    means no quantisation.  Units: A, V, degC.
    """

    offset_a: float = 0.0
    gain: float = 1.0
    current_noise_a: float = 0.0
    current_quant_a: float = 0.0
    voltage_offset_v: float = 0.0
    voltage_noise_v: float = 0.0
    voltage_quant_v: float = 0.0
    temperature_offset_c: float = 0.0
    temperature_noise_c: float = 0.0
    temperature_quant_c: float = 0.0

    def __post_init__(self) -> None:
        for k, v in asdict(self).items():
            if not math.isfinite(v):
                raise ValueError(f"SensorErrors.{k} must be finite, got {v}")
            if (k.endswith("_noise_a") or k.endswith("_noise_v") or k.endswith("_noise_c")
                    or "quant" in k) and v < 0:
                raise ValueError(f"SensorErrors.{k} must be >= 0, got {v}")
        if self.gain <= 0:
            raise ValueError(f"SensorErrors.gain must be positive, got {self.gain}")


#: No measurement error at all.
IDEAL_SENSORS = SensorErrors()
#: A lab cycler channel on its low current range (invented figures): 0.1 mV voltage resolution,
#: 1 mA current resolution.
LAB_SENSORS = SensorErrors(offset_a=0.00005, gain=1.0002, current_noise_a=0.0005, current_quant_a=0.001,
                           voltage_offset_v=0.0, voltage_noise_v=0.0003, voltage_quant_v=0.0001,
                           temperature_offset_c=0.2, temperature_noise_c=0.05, temperature_quant_c=0.1)
#: The tricycle's pack BMS seen per cell (invented): the pack shunt offset of 60 mA and its 40 mA
#: quantum divided by the 4 parallel cells, 0.6 % gain error, 1 mV cell-voltage quantisation.
FLEET_SENSORS = SensorErrors(offset_a=0.015, gain=1.006, current_noise_a=0.01, current_quant_a=0.01,
                             voltage_offset_v=0.001, voltage_noise_v=0.0015, voltage_quant_v=0.001,
                             temperature_offset_c=1.0, temperature_noise_c=0.2, temperature_quant_c=0.5)


def arrhenius_factor(temperature_c, activation_k: float, t_ref_c: float = 25.0):
    """Arrhenius-like factor ``exp(E (1/(T+273.15) - 1/(T_ref+273.15)))``; exactly 1 at ``T_ref``."""
    t = np.asarray(temperature_c, dtype=float)
    return np.exp(activation_k * (1.0 / (t + KELVIN) - 1.0 / (t_ref_c + KELVIN)))


# ============================================================================ CellModel view
TABLE_TEMPERATURES_C = tuple(float(t) for t in range(-20, 55, 5))


def truth_ocv_curve(params: TruthParams = C48_TRUTH) -> OcvCurve:
    """The truth OCV over SOC x temperature (rows every 5 degC from -20 to 50 degC).

    Row ``T`` is the PCHIP through ``ocv_v + ocv_temp_coeff_v_per_c (T - 25)``.  The simulator
    evaluates exactly this object, so it *is* the truth OCV (linear between rows in temperature).
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


def _measure(x, offset, gain, noise, quant, rng):
    y = gain * x + offset
    if noise > 0:
        y = y + rng.normal(0.0, noise, x.shape)
    if quant > 0:
        y = quant * np.round(y / quant)
    return y + 0.0  # no negative zeros


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
    i_m = _measure(i_s, s.offset_a, s.gain, s.current_noise_a, s.current_quant_a, rng)
    v_m = _measure(v_true, s.voltage_offset_v, 1.0, s.voltage_noise_v, s.voltage_quant_v, rng)
    T_m = _measure(T_s, s.temperature_offset_c, 1.0, s.temperature_noise_c, s.temperature_quant_c, rng)
    rec = Recording(ts, i_m, v_m, T_m, soc, name=name,
                    metadata={"source": "socfuse.estimator.demo.truth.simulate_truth (invented demo cell)", "seed": int(seed),
                              "sensors": asdict(s), "capacity_scale": float(capacity_scale)})
    truth = TruthTrace(ts, i_s, T_s, soc, v_true, ocv, v_rc, h)
    return rec, truth


# ============================================================================ profiles
@dataclass(frozen=True, eq=False)
class Profile:
    """A true test or drive: current and temperature knots, the logger's sample times, start state.

    ``time_s``/``current_a``/``temperature_c`` are the knots of the piecewise-linear true signals
    (:func:`simulate_truth`); ``sample_time_s`` are the instants the instruments record.
    """

    time_s: np.ndarray
    current_a: np.ndarray
    temperature_c: np.ndarray
    sample_time_s: np.ndarray
    soc0: float
    h0: float
    name: str
    description: str
    info: dict = field(default_factory=dict)

    @property
    def duration_s(self) -> float:
        return float(self.time_s[-1] - self.time_s[0])


def simulate_profile(profile: Profile, sensors: SensorErrors | None = None, seed: int = 0,
                     params: TruthParams = C48_TRUTH, capacity_scale: float = 1.0,
                     internal_dt_s: float = 0.1) -> tuple[Recording, TruthTrace]:
    """:func:`simulate_truth` on a :class:`Profile` (its knots, sample times and start state)."""
    return simulate_truth(profile.time_s, profile.current_a, profile.temperature_c, profile.soc0,
                          sensors=sensors, seed=seed, capacity_scale=capacity_scale, params=params,
                          sample_time_s=profile.sample_time_s, internal_dt_s=internal_dt_s,
                          h0=profile.h0, name=profile.name)


_EDGE_DS = 1  # a current step ramps over 0.1 s (one decisecond) in the true signal


class _LabSchedule:
    """Constant-current steps of a cycler schedule, timed in integer deciseconds (exact times).

    Each step ``[a, b)`` holds its current at knots ``a`` and ``b - 0.1 s``, so a change of current
    is a 0.1 s ramp.  The logger records at each step start and just before each step end (as
    cyclers log at step changes), at ``fast_dt_s`` for the first ``fast_s`` of the step and at
    ``slow_dt_s`` after.
    """

    def __init__(self) -> None:
        self.steps: list[tuple[int, int, float, int, int, int]] = []  # start, end, current, fast ds...
        self.t_ds = 0

    def add(self, duration_s: float, current_a: float, slow_dt_s: float = 10.0, fast_dt_s: float = 1.0,
            fast_s: float = 0.0) -> None:
        n = int(round(duration_s * 10))
        if n < 2 * _EDGE_DS:
            raise ValueError(f"step of {duration_s} s is too short")
        self.steps.append((self.t_ds, self.t_ds + n, float(current_a), int(round(fast_dt_s * 10)),
                           int(round(fast_s * 10)), int(round(slow_dt_s * 10))))
        self.t_ds += n

    def knots(self):
        k_t, k_i = [], []
        for a, b, cur, *_ in self.steps:
            k_t += [a, b - _EDGE_DS]
            k_i += [cur, cur]
        k_t.append(self.t_ds)
        k_i.append(self.steps[-1][2])
        return np.asarray(k_t, dtype=np.int64), np.asarray(k_i, dtype=float)

    def samples(self) -> np.ndarray:
        out = []
        for a, b, _cur, fdt, fs, sdt in self.steps:
            fast_end = min(b, a + fs)
            if fs > 0:
                out.append(np.arange(a, fast_end, fdt))
            out.append(np.arange(fast_end if fs > 0 else a, b, sdt))
            out.append(np.array([a, b - _EDGE_DS]))
        out.append(np.array([self.t_ds]))
        return np.unique(np.concatenate(out))

    def profile(self, temperature_c: float, soc0: float, h0: float, name: str, description: str,
                info=None) -> Profile:
        kt, ki = self.knots()
        return Profile(kt / 10.0, ki, np.full(kt.size, float(temperature_c)), self.samples() / 10.0,
                       float(soc0), float(h0), name, description, dict(info or {}))


def _first_crossing_s(profile: Profile, params: TruthParams, start_s: float, limit_v: float,
                      below: bool) -> float:
    """First whole second after ``start_s`` at which the ideal terminal voltage crosses ``limit_v``."""
    ts = np.arange(math.ceil(start_s), math.floor(profile.time_s[-1]) + 1, 1.0)
    p = replace(profile, sample_time_s=ts)
    _, tr = simulate_profile(p, params=params)
    hit = tr.voltage_true <= limit_v if below else tr.voltage_true >= limit_v
    if not np.any(hit):
        raise RuntimeError(f"{profile.name}: the voltage never reaches {limit_v} V")
    return float(ts[int(np.argmax(hit))])


def _cv_hold(params: TruthParams, truth_end: TruthTrace, temperature_c: float, v_hold_v: float,
             i_start_a: float, i_end_a: float, max_s: float = 6 * 3600.0) -> np.ndarray:
    """Currents (A, one per second) of a cycler holding the terminal voltage at ``v_hold_v``.

    Each second the channel sets the current that puts the present terminal voltage at the
    hold value, ``i = (OCV + M h - sum v_rc - v_hold) / R0`` (limited to the CC current), and
    the cell is propagated over that second on 0.1 s sub-steps; it stops when ``|i|`` falls to
    ``i_end_a``.
    """
    kp = _kernel_params(params)
    ocv = truth_ocv_curve(params)
    z, h = float(truth_end.soc[-1]), float(truth_end.h[-1])
    vrc = np.array(truth_end.v_rc[-1], dtype=float)
    tt = np.array([0.0, 1.0])
    temp = np.full(2, float(temperature_c))
    n_sub = np.array([10], dtype=np.int64)
    out = np.array([1], dtype=np.int64)
    r0_factor = float(arrhenius_factor(temperature_c, params.r0_activation_k, params.t_ref_c))
    cur = []
    for _ in range(int(max_s)):
        r0 = float(np.interp(z, params.res_soc, params.r0_ohm)) * r0_factor
        emf = float(ocv.voltage(z, temperature_c)) + params.hysteresis_max_v * h - vrc.sum()
        i = min(max((emf - v_hold_v) / r0, -abs(i_start_a)), 0.0)
        cur.append(i)
        if abs(i) <= i_end_a:
            break
        zs, vs, hs = _truth_kernel(tt, np.array([i, i]), temp, n_sub, out, z, h, vrc, *kp)
        z, h, vrc = float(zs[0]), float(hs[0]), np.array(vs[0])
    return np.asarray(cur)


def c20_test_profile(params: TruthParams = C48_TRUTH, temperature_c: float = 25.0) -> Profile:
    """C/20 discharge then C/20 charge of one cell (pseudo-OCV and capacity test).

    Schedule (invented lab practice in the common C/20 pattern): start full and rested (SOC 1,
    h = +1 after the charge), 30 min rest, discharge at C/20 (0.24 A) to the 2.5 V cut-off, rest 2 h,
    charge at C/20 to 4.2 V, hold 4.2 V until the current falls to C/50 (constant-voltage phase),
    rest 1 h.  Logged every 10 s and at each step change.  The constant-current steps end at the
    first whole second at which the true terminal voltage reaches the limit.
    """
    i20 = params.capacity_ah / 20.0
    name = f"c48_c20_{int(round(temperature_c)):02d}degC"
    sched = _LabSchedule()
    sched.add(1800, 0.0)
    t_dis = sched.t_ds / 10.0
    trial = _LabSchedule()
    trial.steps = list(sched.steps)
    trial.t_ds = sched.t_ds
    trial.add(26 * 3600, i20)
    p = trial.profile(temperature_c, 1.0, 1.0, name, "")
    t_cut = _first_crossing_s(p, params, t_dis + 60, params.v_min_v, below=True)
    sched.add(t_cut - t_dis, i20)
    sched.add(2 * 3600, 0.0)
    t_chg = sched.t_ds / 10.0
    trial.steps = list(sched.steps)
    trial.t_ds = sched.t_ds
    trial.add(26 * 3600, -i20)
    p = trial.profile(temperature_c, 1.0, 1.0, name, "")
    t_full = _first_crossing_s(p, params, t_chg + 60, params.v_max_v, below=False)
    sched.add(t_full - t_chg, -i20)
    cc = sched.profile(temperature_c, 1.0, 1.0, name, "")
    _, end = simulate_profile(replace(cc, sample_time_s=np.array([0.0, t_full])), params=params)
    cv = _cv_hold(params, end, temperature_c, params.v_max_v, i20, params.capacity_ah / 50.0)
    k_cv = np.arange(cv.size, dtype=float)
    t_cv_end = t_full + cv.size - 1
    rest_end = t_cv_end + 3600.0
    knots_t = np.concatenate([cc.time_s[:-1], t_full + k_cv, [t_cv_end + 0.1, rest_end]])
    knots_i = np.concatenate([cc.current_a[:-1], cv, [0.0, 0.0]])
    samples = np.concatenate([cc.sample_time_s, np.arange(t_full, t_cv_end, 10.0), [t_cv_end],
                              np.arange(t_cv_end + 0.1, rest_end, 10.0), [rest_end]])
    samples = np.unique(np.round(samples, 1))
    charged = (i20 * (t_full - t_chg) - float(np.sum(0.5 * (cv[1:] + cv[:-1])))) / SECONDS_PER_HOUR
    return Profile(
        np.round(knots_t, 1), knots_i, np.full(knots_t.size, float(temperature_c)), samples, 1.0, 1.0, name,
        f"C/20 ({i20:.2f} A) discharge to {params.v_min_v} V and C/20 charge to {params.v_max_v} V with a "
        f"constant-voltage hold to C/50, at {temperature_c:g} degC, rests of 30 min, 2 h and 1 h; logged every 10 s",
        {"discharge_start_s": t_dis, "discharge_end_s": t_cut, "charge_start_s": t_chg,
         "cv_start_s": t_full, "charge_end_s": t_cv_end, "discharged_ah": i20 * (t_cut - t_dis) / SECONDS_PER_HOUR,
         "charged_ah": float(charged)})


def pulse_test_profile(temperature_c: float = 25.0, params: TruthParams = C48_TRUTH) -> Profile:
    """HPPC-style pulse test after the pattern of the US DOE / INL battery test manuals.

    Start full and rested (SOC 1, h = +1), 1 h rest.  At each 10 % SOC step (SOC 1.0 down to 0.1):
    a 10 s discharge pulse at 1C (4.8 A), 40 s rest, a 10 s regen (charge) pulse at 0.75 of the
    discharge current, 40 s rest (the DOE/INL HPPC profile: 10 s discharge, 40 s rest, 10 s regen at
    75 %); at SOC 0.8, 0.5 and 0.2 also, after 10 min rest, a second pair at 2C / 0.5C.  At full
    charge the regen pulse is left out (it would exceed 4.2 V).  Then 10 % of the rated capacity is
    discharged at C/3 (1.6 A, 18 min) and the cell rests 1 h.  The chamber (and the cell) is at
    ``temperature_c``.  Logged every 1 s around the pulses and for the first 2 min of each rest and
    discharge, every 10 s otherwise, and at every step change.
    """
    c = params.capacity_ah
    name = f"c48_pulse_{int(round(temperature_c)):02d}degC"
    s = _LabSchedule()
    s.add(3600, 0.0)
    pulse_starts = []
    levels = [round(1.0 - 0.1 * k, 1) for k in range(10)]
    for lvl in levels:
        pairs = [(1.0, 0.75)] + ([(2.0, 0.5)] if lvl in (0.8, 0.5, 0.2) else [])
        for j, (dis_c, reg_c) in enumerate(pairs):
            if j > 0:
                s.add(600, 0.0, fast_s=120)
            pulse_starts.append((lvl, dis_c, s.t_ds / 10.0))
            s.add(10, dis_c * c, fast_s=10)
            s.add(40, 0.0, fast_s=40)
            if lvl < 1.0:
                s.add(10, -reg_c * dis_c * c, fast_s=10)
                s.add(40, 0.0, fast_s=40)
        if lvl > 0.1:
            s.add(0.1 * c / (c / 3.0) * 3600, c / 3.0, fast_s=120)
        s.add(3600, 0.0, fast_s=120)
    return s.profile(temperature_c, 1.0, 1.0, name,
                     f"HPPC-style pulse test at {temperature_c:g} degC: 10 s 1C discharge / 40 s rest / 10 s "
                     "0.75C regen at SOC 100..10 % (regen left out at 100 %), extra 2C/0.5C pair at 80, 50, "
                     "20 %, C/3 steps of 10 %, 1 h rests",
                     {"pulses": [{"soc_level": lv, "discharge_c_rate": d, "start_s": t} for lv, d, t in pulse_starts]})


DAY_KINDS = ("lunch", "cold", "long")

# kind -> (start SOC, charge used, ambient start/end degC, route blocks, peak discharge C-rate)
# a route block is ("ride", seconds) or ("off", (min_s, max_s)) for a rest with the pack switched off
_DAYS = {
    "lunch": dict(soc0=1.00, target=0.75, ambient=(17.0, 24.0), peak_c=2.0,
                  blocks=(("ride", 3.5 * 3600), ("off", (45 * 60, 60 * 60)), ("ride", 3.0 * 3600))),
    "cold": dict(soc0=0.96, target=0.62, ambient=(1.0, 8.0), peak_c=1.5,
                 blocks=(("ride", 3.5 * 3600), ("off", (12 * 60, 15 * 60)), ("ride", 3.5 * 3600))),
    "long": dict(soc0=0.98, target=0.82, ambient=(22.0, 28.0), peak_c=2.0,
                 blocks=(("ride", 9.0 * 3600),)),
}
_DT = 0.1  # s, knot spacing of the true current on delivery days
_IDLE_C = 0.01  # C-rate drawn by lights, display and BMS while parked with the pack on


def _ride(rng, seconds: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Stop-and-go riding in C-rate units at 0.1 s: traction (>= 0), regen (<= 0), launch-burst mask."""
    trac, regen, burst = [], [], []

    def piece(n, tr=0.0, rg=0.0, is_burst=False):
        trac.append(np.broadcast_to(np.asarray(tr, dtype=float), (n,)).copy())
        regen.append(np.broadcast_to(np.asarray(rg, dtype=float), (n,)).copy())
        burst.append(np.full(n, is_burst))

    def ramp(a, b, n):
        return np.linspace(a, b, n, endpoint=False)

    def launch(to_level):
        peak = rng.uniform(1.4, 2.4)
        piece(10, ramp(_IDLE_C, peak, 10), is_burst=True)
        piece(int(rng.uniform(30, 60)), peak, is_burst=True)  # 3-6 s
        piece(20, ramp(peak, to_level, 20), is_burst=True)

    def brake():
        lvl = -rng.uniform(0.2, 0.5)
        n = int(rng.uniform(30, 60))
        piece(n, 0.0, lvl)

    total = 0
    target = int(seconds / _DT)
    while total < target:
        n0 = sum(a.size for a in trac)
        cruise = rng.uniform(0.12, 0.3)
        launch(cruise)
        leg_s = rng.uniform(60, 400)
        t_leg = 0.0
        while t_leg < leg_s:
            r = rng.random()
            if r < 0.15:  # climb
                d = rng.uniform(20, 90)
                lvl = cruise + rng.uniform(0.25, 0.7)
            elif r < 0.27:  # descent with regeneration
                d = rng.uniform(15, 60)
                n = int(d / _DT)
                piece(n, 0.0, -rng.uniform(0.15, 0.5))
                t_leg += d
                continue
            elif r < 0.37:  # traffic stop: brake, wait, launch
                brake()
                w = int(rng.uniform(10, 40) / _DT)
                piece(w, _IDLE_C)
                launch(cruise)
                t_leg += w * _DT + 9
                continue
            else:
                d = rng.uniform(20, 80)
                lvl = cruise
            n = int(d / _DT)
            # per-second fluctuation (AR(1)), then pedal-assist ripple at the pedalling cadence
            n1 = n // 10 + 2
            e = rng.normal(0.0, 0.12, n1)
            ar = np.empty(n1)
            ar[0] = e[0]
            for k in range(1, n1):
                ar[k] = 0.9 * ar[k - 1] + np.sqrt(1 - 0.81) * e[k]
            slow = np.interp(np.arange(n) / 10.0, np.arange(n1), ar)
            f = rng.uniform(1.0, 1.4)
            ripple = 1.0 + 0.15 * np.sin(2 * np.pi * f * np.arange(n) * _DT + rng.uniform(0, 2 * np.pi))
            piece(n, np.maximum(lvl + slow, 0.05) * ripple)
            t_leg += d
        brake()
        dwell = int(rng.uniform(45, 240) / _DT)  # parked at the delivery address, pack on
        piece(dwell, _IDLE_C)
        total += sum(a.size for a in trac) - n0
    tr = np.concatenate(trac)[:target]
    rg = np.concatenate(regen)[:target]
    bu = np.concatenate(burst)[:target]
    return tr, rg, bu


def delivery_day_profile(kind: str = "lunch", seed: int = DEMO_SEED, params: TruthParams = C48_TRUTH) -> Profile:
    """A courier's delivery day on a cargo tricycle, per cell of the 14s4p pack (pack current / 4).

    Stop-and-go legs between delivery stops: a 3-6 s launch burst (1.4-2.4C before scaling,
    limited to ``peak_c``),
    cruising with per-second fluctuation and a pedal-assist ripple at the pedalling cadence
    (1.0-1.4 Hz), climbs, descents with regeneration, traffic stops with regenerative braking
    (regen up to 0.5C, blocked by the BMS above 98 % SOC and ramped in down to 94 %), parked
    dwells at about 0.01C (lights, display, BMS).  Kinds:

    - ``"lunch"``: from 100 %, 3.5 h morning route, a 45-60 min lunch break with the pack off,
      3 h afternoon route, 17 -> 24 degC ambient; uses 75 % of the charge;
    - ``"cold"``: from 96 %, a cold morning (ambient 1 -> 8 degC over the day), a 12-15 min
      break, BMS derating of the peaks to 1.5C; uses 62 %;
    - ``"long"``: from 98 %, 9 h with no rest longer than the parked dwells (< 4 min); uses 82 %.

    The cruising/climbing current is scaled so the day uses the stated share of the charge (on the
    truth); launch bursts keep their level.
    Cell temperature = ambient + a first-order self-heating response (invented: 8 K/W, 600 s).
    The true current has knots every 0.1 s; the BMS logger samples every 1 s.
    """
    if kind not in _DAYS:
        raise ValueError(f"unknown day kind {kind!r}; choose one of {', '.join(DAY_KINDS)}")
    cfg = _DAYS[kind]
    rng = np.random.default_rng([int(seed), DAY_KINDS.index(kind)])
    trac_parts, reg_parts, burst_parts = [], [], []
    for what, arg in cfg["blocks"]:
        if what == "ride":
            tr, rg, bu = _ride(rng, arg)
        else:
            n = int(rng.uniform(*arg) / _DT)
            tr, rg, bu = np.zeros(n), np.zeros(n), np.zeros(n, dtype=bool)
        trac_parts.append(tr)
        reg_parts.append(rg)
        burst_parts.append(bu)
    trac = np.concatenate(trac_parts + [np.full(1200, _IDLE_C)])
    regen = np.maximum(np.concatenate(reg_parts + [np.zeros(1200)]), -0.5)
    is_burst = np.concatenate(burst_parts + [np.zeros(1200, dtype=bool)])
    n = trac.size
    t = np.arange(n) * _DT
    t = np.round(t, 1)
    amb0, amb1 = cfg["ambient"]
    ambient = amb0 + (amb1 - amb0) * t / t[-1]
    c = params.capacity_ah
    name = f"c48_day_{kind}"
    sample_t = np.arange(0.0, np.floor(t[-1]) + 1.0, 1.0)
    a_th = math.exp(-_DT / 600.0)
    from scipy.signal import lfilter

    def build(scale, peak_c, soc_est):
        # cruising and climbing scale with the day's load; launch bursts keep their level
        cur_c = np.minimum(np.where(is_burst, trac, trac * scale), peak_c)
        # the BMS blocks regeneration near full charge: none above 98 % SOC, full below 94 %
        derate = np.clip((0.98 - soc_est) / 0.04, 0.0, 1.0)
        cur_c = np.where(regen < 0, regen * derate, cur_c)
        i = cur_c * c
        heat = i * i * 0.05  # W, i^2 times a typical total resistance
        temp = ambient + 8.0 * lfilter([1 - a_th], [1, -a_th], heat, zi=[0.0])[0]
        return Profile(t, i, temp, sample_t, cfg["soc0"], 1.0, name, "", {})

    scale, peak = 1.0, cfg["peak_c"]
    soc_est = np.full(t.size, cfg["soc0"])
    for _ in range(30):
        for _it in range(6):
            p = build(scale, peak, soc_est)
            _, tr = simulate_profile(p, params=params)
            used = cfg["soc0"] - tr.soc[-1]
            scale *= cfg["target"] / used
            soc_est = np.interp(t, tr.time_s, tr.soc)
        p = build(scale, peak, soc_est)
        _, tr = simulate_profile(p, params=params)
        if tr.voltage_true.min() > params.v_min_v + 0.3:
            break
        peak *= 0.95  # derate the peaks until the day stays well above the cut-off
    else:  # pragma: no cover - the built-in kinds converge
        raise RuntimeError(f"{name}: could not keep the day above the cut-off")
    desc = {"lunch": "delivery day with a lunch-break rest (pack off)",
            "cold": "delivery day starting on a cold morning, warming during the day",
            "long": "long delivery day without a rest"}[kind]
    info = {"kind": kind, "traction_scale": float(scale), "peak_c_rate": float(peak),
            "charge_used": float(cfg["soc0"] - tr.soc[-1]), "ambient_c": [amb0, amb1],
            "route_seed": [int(seed), DAY_KINDS.index(kind)]}
    return replace(p, description=f"{desc}; per-cell current of a 14s4p pack, logged at 1 s", info=info)


# ============================================================================ demo data
def demo_file_specs(seed: int = DEMO_SEED) -> dict:
    """What each bundled file is: ``{file name: (profile builder, sensors, noise seed)}``.

    The builders are called lazily by :func:`generate_demo_data`.  Lab tests use
    :data:`LAB_SENSORS`; the delivery days use the pack BMS (:data:`FLEET_SENSORS`), with the
    shunt offset and the temperature-sensor offset drifting a little on the cold day.
    """
    cold_bms = replace(FLEET_SENSORS, offset_a=0.025, temperature_offset_c=1.5)
    return {
        "c48_c20_25degC.csv": (lambda: c20_test_profile(), LAB_SENSORS, seed + 1),
        "c48_pulse_25degC.csv": (lambda: pulse_test_profile(25.0), LAB_SENSORS, seed + 2),
        "c48_pulse_05degC.csv": (lambda: pulse_test_profile(5.0), LAB_SENSORS, seed + 3),
        "c48_day_lunch.csv": (lambda: delivery_day_profile("lunch", seed), FLEET_SENSORS, seed + 4),
        "c48_day_cold.csv": (lambda: delivery_day_profile("cold", seed), cold_bms, seed + 5),
        "c48_day_long.csv": (lambda: delivery_day_profile("long", seed), FLEET_SENSORS, seed + 6),
    }


DEMO_FILES = tuple(demo_file_specs())

#: CSV formats: time to 0.1 s, current to 1 mA, voltage to 0.1 mV, temperature to 0.1 degC.
_CSV_FORMATS = ("%.1f", "%.3f", "%.4f", "%.1f", "%.6f")


def write_recording_csv(rec: Recording, path) -> Path:
    """Write ``rec`` as a canonical CSV (DESIGN.md section 3) with the demo-data number formats.

    Written to a temporary name and renamed, so a partly written file never replaces a good one.
    Time is written with one decimal (whole seconds as ``12.0``).
    """
    path = Path(path)
    cols = [rec.time_s, rec.current_a, rec.voltage_v]
    names = ["time_s", "current_a", "voltage_v"]
    fmts = list(_CSV_FORMATS[:3])
    if rec.temperature_c is not None:
        cols.append(rec.temperature_c)
        names.append("temperature_c")
        fmts.append(_CSV_FORMATS[3])
    if rec.soc_ref is not None:
        cols.append(rec.soc_ref)
        names.append("soc_ref")
        fmts.append(_CSV_FORMATS[4])
    data = np.column_stack(cols)
    with replacing(path) as tmp:
        np.savetxt(tmp, data, fmt=fmts, delimiter=",", header=",".join(names), comments="")
    return path


def _sampling_summary(t: np.ndarray) -> dict:
    dt = np.diff(t)
    return {"min_s": float(dt.min()), "median_s": float(np.median(dt)), "max_s": float(dt.max())}


MANIFEST_SCHEMA = "socfuse.demo-manifest/1"


def _ours(folder: Path) -> bool:
    """True when ``folder/manifest.json`` was written by :func:`generate_demo_data`."""
    import json

    try:
        return json.loads((folder / "manifest.json").read_text()).get("schema") == MANIFEST_SCHEMA
    except (OSError, ValueError, AttributeError):
        return False


def generate_demo_data(out_dir, seed: int = DEMO_SEED, files=None, params: TruthParams = C48_TRUTH,
                       overwrite: bool = False) -> list[Path]:
    """Write the demo recordings and ``manifest.json`` into ``out_dir``; deterministic for a seed.

    Parameters
    ----------
    out_dir : path
        Target folder (created if missing).  Files of the same names are replaced only when the
        folder already holds a demo manifest written by this function, or with ``overwrite``;
        otherwise ``FileExistsError`` (a user's file is never overwritten by surprise).  Each file
        is written to a temporary name first, then renamed.
    seed : int
        Route and noise seed (:data:`DEMO_SEED` for the bundled data).
    files : iterable of str, optional
        A subset of :data:`DEMO_FILES` (default all).
    params : TruthParams
        Truth parameters (default :data:`C48_TRUTH`).
    overwrite : bool
        Replace existing files of the same names even without a demo manifest.

    Returns
    -------
    list of Path
        The CSV files written, then the manifest.
    """
    import json

    out = Path(out_dir)
    specs = demo_file_specs(seed)
    wanted = list(DEMO_FILES) if files is None else list(files)
    unknown = [f for f in wanted if f not in specs]
    if unknown:
        raise ValueError(f"unknown demo file(s) {unknown}; valid names are {', '.join(DEMO_FILES)}")
    clash = [f for f in wanted + ["manifest.json"] if (out / f).exists()]
    if clash and not overwrite and not _ours(out):
        raise FileExistsError(f"{out}: {', '.join(clash)} already exist(s) and the folder holds no demo "
                              "manifest; choose an empty folder or pass overwrite=True")
    out.mkdir(parents=True, exist_ok=True)
    manifest = {
        "schema": MANIFEST_SCHEMA,
        "generator": "socfuse.estimator.demo.truth.generate_demo_data",
        "seed": int(seed),
        "note": "demo cell C48 is invented; every truth parameter below is invented, not measured",
        "internal_step_s": 0.1,
        "truth": asdict(params),
        "truth_table_temperatures_c": list(TABLE_TEMPERATURES_C),
        "files": {},
    }
    written = []
    for fname in wanted:
        build, sensors, noise_seed = specs[fname]
        prof = build()
        stem = fname[:-4]
        rec, tr = simulate_profile(prof, sensors, noise_seed, params)
        rec = rec.with_(name=stem)
        written.append(write_recording_csv(rec, out / fname))
        manifest["files"][fname] = {
            "description": prof.description,
            "sensors": asdict(sensors),
            "noise_seed": int(noise_seed),
            "capacity_scale": 1.0,
            "soc0": prof.soc0,
            "h0": prof.h0,
            "rows": int(rec.n),
            "duration_s": float(rec.duration_s),
            "sampling": _sampling_summary(rec.time_s),
            "soc_range": [float(tr.soc.min()), float(tr.soc.max())],
            "true_voltage_range_v": [float(tr.voltage_true.min()), float(tr.voltage_true.max())],
            "true_current_range_a": [float(tr.current_a.min()), float(tr.current_a.max())],
            "true_temperature_range_c": [float(tr.temperature_c.min()), float(tr.temperature_c.max())],
            "profile": prof.info,
        }
    mpath = out / "manifest.json"
    write_text_replacing(mpath, json.dumps(manifest, indent=1) + "\n")
    written.append(mpath)
    return written
