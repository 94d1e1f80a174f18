"""The in-memory recording of one test or drive: time, current, voltage (+ temperature, SOC ref)."""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any, Mapping

import numpy as np

from socfuse.models.thevenin import SECONDS_PER_HOUR

__all__ = ["Recording", "RecordingError", "charge_throughput_ah", "find_rests"]


class RecordingError(ValueError):
    """Bad input data; the message names the file, column and row where it can."""


def _ro(a):
    a = np.array(a, dtype=float)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Recording:
    """One recording, in SI units and the socfuse sign convention.

    Parameters
    ----------
    time_s : ndarray (N,)
        Strictly increasing sample times, s.
    current_a : ndarray (N,)
        Current, A, positive on discharge.  Must be finite.
    voltage_v : ndarray (N,)
        Terminal voltage, V.  NaN marks a missing sample (estimators then predict only);
        loaders never produce NaN silently, they refuse missing values.
    temperature_c : ndarray (N,), optional
        Cell temperature, degC.
    soc_ref : ndarray (N,), optional
        Lab reference SOC, fraction 0..1.
    name : str
        Short name, used in reports.
    metadata : mapping
        Free-form facts about the file (source path, options used, duplicates dropped, gaps).
    """

    time_s: np.ndarray
    current_a: np.ndarray
    voltage_v: np.ndarray
    temperature_c: np.ndarray | None = None
    soc_ref: np.ndarray | None = None
    name: str = ""
    metadata: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        t = _ro(self.time_s)
        n = t.size
        where = f"recording {self.name!r}: " if self.name else "recording: "
        if t.ndim != 1 or n == 0:
            raise RecordingError(where + "time_s must be a non-empty 1-D array")
        if not np.all(np.isfinite(t)):
            raise RecordingError(where + f"time_s is not finite at row {int(np.argmax(~np.isfinite(t)))}")
        d = np.diff(t)
        if np.any(d <= 0):
            k = int(np.argmax(d <= 0)) + 1
            raise RecordingError(where + f"time_s is not strictly increasing at row {k} "
                                 f"({t[k - 1]} then {t[k]})")
        object.__setattr__(self, "time_s", t)
        for name in ("current_a", "voltage_v", "temperature_c", "soc_ref"):
            v = getattr(self, name)
            if v is None:
                continue
            a = _ro(v)
            if a.shape != t.shape:
                raise RecordingError(where + f"{name} has {a.size} samples, time_s has {n}")
            if name == "current_a" and not np.all(np.isfinite(a)):
                raise RecordingError(where + f"current_a is not finite at row {int(np.argmax(~np.isfinite(a)))}")
            object.__setattr__(self, name, a)
        object.__setattr__(self, "metadata", dict(self.metadata))

    # ------------------------------------------------------------------ helpers
    @property
    def n(self) -> int:
        return int(self.time_s.size)

    @property
    def duration_s(self) -> float:
        return float(self.time_s[-1] - self.time_s[0])

    @property
    def dt_s(self) -> np.ndarray:
        """Sample intervals, s (length N - 1)."""
        return np.diff(self.time_s)

    def with_(self, **changes) -> "Recording":
        """A copy with some fields replaced (validation runs again)."""
        return replace(self, **changes)

    def slice(self, start: int, stop: int | None = None) -> "Recording":
        """Rows ``start:stop`` as a new recording."""
        s = np.s_[start:stop]
        opt = lambda a: None if a is None else a[s]  # noqa: E731
        meta = dict(self.metadata)
        extras = meta.get("extras")
        if isinstance(extras, dict):
            meta["extras"] = {k: (v[s] if np.shape(v) == self.time_s.shape else v) for k, v in extras.items()}
        t = self.time_s[s]
        if "gaps" in meta and t.size:
            meta["gaps"] = [g for g in meta["gaps"] if t[0] <= g[0] <= t[-1]]
        return Recording(t, self.current_a[s], self.voltage_v[s], opt(self.temperature_c),
                         opt(self.soc_ref), self.name, meta)

    def to_frame(self):
        """A pandas DataFrame with the canonical columns."""
        import pandas as pd

        cols = {"time_s": self.time_s, "current_a": self.current_a, "voltage_v": self.voltage_v}
        if self.temperature_c is not None:
            cols["temperature_c"] = self.temperature_c
        if self.soc_ref is not None:
            cols["soc_ref"] = self.soc_ref
        return pd.DataFrame(cols)

    def to_csv(self, path, float_format: str = "%.6g") -> None:
        """Write the canonical CSV (DESIGN.md section 3)."""
        self.to_frame().to_csv(path, index=False, float_format=float_format)


def charge_throughput_ah(time_s, current_a) -> np.ndarray:
    """Cumulative discharged charge in Ah by the trapezoid rule (length N, starts at 0).

    Positive when net discharge.  Matches ``scipy.integrate.cumulative_trapezoid(i, t,
    initial=0) / 3600``.

    Parameters
    ----------
    time_s : array_like, shape (n,)
        Sample times, s.
    current_a : array_like, shape (n,)
        Current, A, positive on discharge.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Cumulative net discharged charge, Ah.
    """
    t = np.asarray(time_s, dtype=float)
    i = np.asarray(current_a, dtype=float)
    out = np.zeros(t.size)
    if t.size > 1:
        out[1:] = np.cumsum(0.5 * (i[:-1] + i[1:]) * np.diff(t)) / SECONDS_PER_HOUR
    return out


def find_rests(time_s, current_a, current_threshold_a: float | None = None, min_duration_s: float = 600.0,
               voltage_v=None):
    """Find rests lasting at least ``min_duration_s``.

    Parameters
    ----------
    time_s, current_a : array_like (N,)
        Sample times (s) and measured current (A, positive on discharge).
    current_threshold_a : float, optional
        Fixed threshold: a rest is ``|current| <= current_threshold_a``.  Default (None): the
        robust segmentation of :func:`models.segment.segment_recording` (the sensor's zero offset
        estimated and subtracted, two noise-based thresholds, so sensor noise never splits a rest).
    min_duration_s : float
        Shortest rest reported, s.
    voltage_v : array_like (N,), optional
        Terminal voltage; lets the segmentation confirm rests by their relaxation.

    Returns
    -------
    list of (start_index, end_index)
        Inclusive sample indices of each rest (the end index is the last rested sample).
    """
    t = np.asarray(time_s, dtype=float)
    out = []
    if t.size == 0:
        return out
    if current_threshold_a is None:
        if t.size < 2:
            return out
        from socfuse.models.segment import segment_recording

        seg = segment_recording(t, current_a, voltage_v)
        return [(int(r.start), int(r.stop - 1)) for r in seg.rests(min_duration_s)]
    quiet = np.abs(np.asarray(current_a, dtype=float)) <= current_threshold_a
    edges = np.diff(np.concatenate([[0], quiet.astype(np.int8), [0]]))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    for s, e in zip(starts, ends):
        if t[e] - t[s] >= min_duration_s:
            out.append((int(s), int(e)))
    return out
