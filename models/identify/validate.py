"""Open-loop validation of a cell model on a recording: voltage RMS and maximum error.

Open loop means the model is simulated from an initial SOC with the recorded current (and
temperature) and nothing is corrected on the way, so the error includes any capacity and OCV
error accumulated over the recording.  The simulation is :func:`fastsim.simulate_fast`
(identical to :func:`models.simulate`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.recording import Recording, RecordingError
from socfuse.models.thevenin import CellModel
from socfuse.models.identify.fastsim import simulate_fast

__all__ = ["ValidationResult", "initial_soc", "validate", "recording_temperature"]


@dataclass(frozen=True, eq=False)
class ValidationResult:
    """Open-loop voltage error of a model on one recording.

    Attributes
    ----------
    name : str
        Recording name (or file).
    rms_v, max_abs_v, mean_v : float
        RMS, largest absolute and mean of ``simulated - measured`` voltage (V), over the finite
        voltage samples.
    n : int
    soc0 : float
    soc0_source : str
    time_s, residual_v : ndarray
        Residual trace (for plots).
    """

    name: str
    rms_v: float
    max_abs_v: float
    mean_v: float
    n: int
    soc0: float
    soc0_source: str
    time_s: np.ndarray
    residual_v: np.ndarray

    def as_dict(self) -> dict:
        return {"file": self.name, "rms_v": self.rms_v, "max_abs_v": self.max_abs_v, "mean_v": self.mean_v,
                "samples": self.n, "soc0": self.soc0, "soc0_source": self.soc0_source}


def recording_temperature(rec: Recording):
    """The recording's temperature array, or 25 degC when it has none.

    Parameters
    ----------
    rec : Recording

    Returns
    -------
    numpy.ndarray, shape (n,) or float
        ``rec.temperature_c`` in degC when present and finite everywhere, else 25.0.
    """
    if rec.temperature_c is not None and np.all(np.isfinite(rec.temperature_c)):
        return rec.temperature_c
    return 25.0


def initial_soc(model: CellModel, rec: Recording, soc0: float | None = None):
    """Initial SOC for an open-loop run and a label.

    Given ``soc0``; else the recording's first ``soc_ref``; else the OCV inverse of the first
    voltage corrected by the R0 drop of the first current (assumes the cell starts rested).

    Parameters
    ----------
    model : CellModel
        Supplies the OCV curve and R0 (ohm).
    rec : Recording
        The recording (voltage in V, current in A, optional ``soc_ref`` and temperature in degC).
    soc0 : float, optional
        Given initial SOC, fraction.

    Returns
    -------
    soc0 : float
        Initial SOC, fraction.
    label : str
        How it was obtained.

    Raises
    ------
    RecordingError
        When it must be found from the voltage and the voltage column has no finite sample.
    """
    if soc0 is not None:
        return float(soc0), "given"
    if rec.soc_ref is not None and np.isfinite(rec.soc_ref[0]):
        return float(rec.soc_ref[0]), "first soc_ref sample"
    k = int(np.argmax(np.isfinite(rec.voltage_v)))
    if not np.isfinite(rec.voltage_v[k]):
        raise RecordingError(f"{rec.name or 'recording'}: column voltage_v has no finite sample")
    temp = recording_temperature(rec)
    t0 = float(temp if np.ndim(temp) == 0 else temp[k])
    z = float(model.ocv.soc_at(rec.voltage_v[k], t0))
    for _ in range(3):  # R0 depends on SOC: a short fixed-point iteration
        z = float(model.ocv.soc_at(rec.voltage_v[k] + model.r0_ohm.at(z, t0) * rec.current_a[k], t0))
    return z, f"OCV inverse of the voltage at row {k} (cell assumed rested)"


def validate(model: CellModel, rec: Recording, soc0: float | None = None,
             correct_offset: bool = True) -> ValidationResult:
    """Open-loop voltage RMS and max error of ``model`` on ``rec``.

    Parameters
    ----------
    model : CellModel
    rec : Recording
    soc0 : float, optional
        Initial SOC (fraction); default :func:`initial_soc`.
    correct_offset : bool
        Subtract the current-sensor zero offset estimated from the recording's own rests
        (:func:`models.segment.segment_recording`; nothing when it has none), so a sensor error
        integrated over hours is not charged to the model.

    Returns
    -------
    ValidationResult
    """
    z0, label = initial_soc(model, rec, soc0)
    current = rec.current_a
    if correct_offset and rec.n > 1:
        from socfuse.models.segment import segment_recording

        seg = segment_recording(rec.time_s, rec.current_a, rec.voltage_v)
        if seg.offset_sigma_a is not None:
            current = seg.current_a
    sim = simulate_fast(model, rec.time_s, current, recording_temperature(rec), soc0=z0)
    res = sim.voltage_v - rec.voltage_v
    good = np.isfinite(res)
    if not np.any(good):
        raise RecordingError(f"{rec.name or 'recording'}: column voltage_v has no finite sample")
    r = res[good]
    return ValidationResult(rec.metadata.get("source", rec.name) if rec.metadata else rec.name,
                            float(np.sqrt(np.mean(r ** 2))), float(np.max(np.abs(r))), float(np.mean(r)),
                            int(r.size), z0, label, rec.time_s, res)
