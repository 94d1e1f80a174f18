"""Where an identified model holds: the SOC range its pulse tests covered at each temperature.

Identification (:func:`models.identify.pipeline.identify`) records, per pulse test, the lowest
and highest SOC of its pulses (``provenance["pulse_soc_range"]``).  Below the lowest pulse level
the R0/RC tables at that temperature are held constant from the last level, and in the cold that
is where the cell's voltage collapses (the Panasonic 18650PF at 0 degC reaches its cut-off on a
drive cycle at 13-25 % SOC on the 25 degC scale, with the last 0 degC pulse level at 17.5 %): a
terminal voltage that, with its ohmic drop ``R0 i`` put back, lies below the OCV at that lowest
level says "below the identified range", where the model's prediction rests on extrapolated
tables.  :func:`outside_identified_range` marks such samples so an estimator can leave their
voltage out (count charge through them) instead of letting an extrapolated model steer the SOC.
The RC polarisation the model itself predicts for the current history (an open-loop simulation,
:func:`models.thevenin.simulate`) may be put back as well, so a sustained heavy load in the
middle of the range is not taken for it.
"""
from __future__ import annotations

import numpy as np

__all__ = ["CUTOFF_MARGIN_V", "identified_soc_floor", "outside_identified_range"]

# Within this much of the lower voltage limit an equivalent-circuit model misses the
# diffusion-limited collapse of the voltage (and a cycler or BMS may hold the voltage at the limit
# by cutting the current): such samples say little about the SOC.  Common practice, no source; the
# identification's refinement does not fit them and the estimators do not update on them.
CUTOFF_MARGIN_V = 0.10


def identified_soc_floor(model, temperature_c):
    """Lowest SOC the model's pulse tests covered, interpolated at ``temperature_c``.

    Parameters
    ----------
    model : CellModel
        A model whose provenance holds ``pulse_soc_range`` (written by ``identify``).
    temperature_c : float or array_like
        Cell temperature, degC (clamped to the tested range).

    Returns
    -------
    numpy.ndarray or None
        SOC (fraction), same shape as ``temperature_c``; None when the model file does not
        record the range (models made by hand or by an older version).
    """
    rng = (getattr(model, "provenance", None) or {}).get("pulse_soc_range") or {}
    temps, lows = rng.get("temperatures_c"), rng.get("soc_min")
    if not temps or not lows or len(temps) != len(lows):
        return None
    order = np.argsort(np.asarray(temps, dtype=float))
    t = np.asarray(temps, dtype=float)[order]
    z = np.asarray(lows, dtype=float)[order]
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(z))):
        return None
    return np.interp(np.asarray(temperature_c, dtype=float), t, z)


def outside_identified_range(model, current_a, voltage_v, temperature_c=None, polarisation_v=None):
    """Samples whose voltage reads an SOC below the identified range at their temperature.

    A sample is outside when ``v + R0(z_lo, T) max(i, 0) + max(p, 0) < OCV(z_lo, T)`` with
    ``z_lo`` the :func:`identified_soc_floor` at its temperature ``T`` and ``p`` the RC
    polarisation put back (discharge only: a charging current and a negative polarisation raise
    the voltage).

    Parameters
    ----------
    model : CellModel
    current_a : array_like, shape (n,)
        Current, A (positive on discharge).
    voltage_v : array_like, shape (n,)
        Terminal voltage, V (NaN samples are never outside).
    temperature_c : array_like, shape (n,), optional
        Cell temperature, degC (default 25; NaN samples count as 25).
    polarisation_v : array_like, shape (n,), optional
        Sum of the RC voltages the model predicts at each sample, V (default 0).

    Returns
    -------
    numpy.ndarray of bool, shape (n,)
        True where the voltage lies below the identified range; all False when the model does not
        record its range.
    """
    i = np.asarray(current_a, dtype=float)
    v = np.asarray(voltage_v, dtype=float)
    t = np.full(v.shape, 25.0) if temperature_c is None else np.asarray(temperature_c, dtype=float)
    t = np.where(np.isfinite(t), t, 25.0)
    z_lo = identified_soc_floor(model, t)
    if z_lo is None:
        return np.zeros(v.shape, dtype=bool)
    floor_v = np.asarray(model.ocv.voltage(z_lo, t), dtype=float)
    r0 = np.asarray(model.r0_ohm.at(z_lo, t), dtype=float)
    back = r0 * np.maximum(np.nan_to_num(i), 0.0)
    if polarisation_v is not None:
        back = back + np.maximum(np.nan_to_num(np.asarray(polarisation_v, dtype=float)), 0.0)
    with np.errstate(invalid="ignore"):
        return np.isfinite(v) & (v + back < floor_v)
