"""One sensor-error model: how an instrument turns a true signal into a logged one.

Used by every place in socfuse that puts measurement errors on a signal: the demo truth
simulator, the fault scenarios of the benchmark and the Monte Carlo tolerance study, and the
physics-based reference cells.  Each parameter has one meaning everywhere:

``measured = quantum * round(((1 + gain_error) * true + offset + noise) / quantum)``

with ``noise ~ N(0, noise_sigma^2)`` white per sample; ``gain_error`` is a fraction (0.004 = a
0.4 % gain error), never a multiplier; a quantum of 0 means no quantisation.  Units: A for
current, V for voltage, degC for temperature.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

__all__ = ["SensorErrors", "IDEAL_SENSORS", "measure", "bms_grade_sensors"]


def measure(true, offset: float = 0.0, gain_error=0.0, noise_sigma: float = 0.0, quantum: float = 0.0,
            rng: np.random.Generator | None = None) -> np.ndarray:
    """Apply gain error, offset, white noise and quantisation to a true signal.

    Parameters
    ----------
    true : array_like
        True signal (A, V or degC), any shape.
    offset : float or array_like
        Zero offset added to the signal, same unit as ``true`` (broadcasts, e.g. one per run).
    gain_error : float or array_like
        Gain error as a fraction: ``measured = (1 + gain_error) * true + offset``.
    noise_sigma : float
        Standard deviation of white noise per sample, same unit (>= 0).
    quantum : float
        Quantisation step (>= 0; 0 = none).
    rng : numpy.random.Generator, optional
        Source of the noise; required when ``noise_sigma > 0``.

    Returns
    -------
    numpy.ndarray
        The measured signal (float64, no negative zeros).
    """
    y = (1.0 + np.asarray(gain_error, dtype=float)) * np.asarray(true, dtype=float) + offset
    if noise_sigma > 0:
        if rng is None:
            raise ValueError("measure: noise_sigma > 0 needs a random generator (rng)")
        y = y + rng.normal(0.0, noise_sigma, y.shape)
    if quantum > 0:
        y = quantum * np.round(y / quantum)
    return y + 0.0  # no negative zeros


@dataclass(frozen=True)
class SensorErrors:
    """Errors of the current, voltage and temperature channels of one logger (defaults: ideal).

    Attributes
    ----------
    offset_a : float
        Current-sensor zero offset, A (+ reads more discharge).
    gain_error : float
        Current-sensor gain error, fraction (measured = (1 + gain_error) * true + offset).
    current_noise_a, current_quant_a : float
        White current noise sigma and current quantum, A.
    voltage_offset_v, voltage_noise_v, voltage_quant_v : float
        Voltage offset, white noise sigma and quantum, V.
    temperature_offset_c, temperature_noise_c, temperature_quant_c : float
        Temperature offset, white noise sigma and quantum, degC.
    """

    offset_a: float = 0.0
    gain_error: float = 0.0
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
            if ("noise" in k or "quant" in k) and v < 0:
                raise ValueError(f"SensorErrors.{k} must be >= 0, got {v}")
        if self.gain_error <= -1.0:
            raise ValueError(f"SensorErrors.gain_error is a fraction above -1, got {self.gain_error}")

    def current(self, current_a, rng: np.random.Generator | None = None) -> np.ndarray:
        """Measured current, A, from the true current (A)."""
        return measure(current_a, self.offset_a, self.gain_error, self.current_noise_a, self.current_quant_a, rng)

    def voltage(self, voltage_v, rng: np.random.Generator | None = None) -> np.ndarray:
        """Measured voltage, V, from the true terminal voltage (V)."""
        return measure(voltage_v, self.voltage_offset_v, 0.0, self.voltage_noise_v, self.voltage_quant_v, rng)

    def temperature(self, temperature_c, rng: np.random.Generator | None = None) -> np.ndarray:
        """Measured temperature, degC, from the true temperature (degC)."""
        return measure(temperature_c, self.temperature_offset_c, 0.0, self.temperature_noise_c,
                       self.temperature_quant_c, rng)


#: No measurement error at all.
IDEAL_SENSORS = SensorErrors()


def bms_grade_sensors(capacity_ah: float) -> SensorErrors:
    """The sensor errors of a production BMS, scaled to a cell's 1C current.

    Current offset 0.5 % of 1C, gain error 0.4 %, white current noise 0.3 % of 1C; voltage noise
    1.5 mV with 1 mV steps; temperature noise 0.2 degC (the figures of the reference cases in the
    project's design notes; typical of a Hall or shunt channel and a 12-bit cell-voltage front end:
    common practice, no source).

    Parameters
    ----------
    capacity_ah : float
        Cell capacity, Ah (the 1C current in A).

    Returns
    -------
    SensorErrors
    """
    c = float(capacity_ah)
    return SensorErrors(offset_a=0.005 * c, gain_error=0.004, current_noise_a=0.003 * c, current_quant_a=0.0,
                        voltage_noise_v=0.0015, voltage_quant_v=0.001, temperature_noise_c=0.2)
