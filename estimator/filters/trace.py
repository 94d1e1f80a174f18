"""Trace: what an estimator believed at every sample of one recording."""
from __future__ import annotations

from dataclasses import dataclass, field

from typing import Any

import numpy as np

__all__ = ["Trace", "make_trace"]


@dataclass(frozen=True, eq=False)
class Trace:
    """Result of one estimator run (arrays of length N).

    Attributes
    ----------
    time_s : (N,)  sample times, s
    soc : (N,)  capacity-based SOC estimate (fraction), after the update at each sample
    soc_sigma : (N,)  one-sigma SOC uncertainty the estimator reports (fraction)
    voltage_pred_v : (N,)  predicted terminal voltage before the update, V (NaN for the baseline)
    innovation_v : (N,)  measured minus predicted voltage, V (NaN where no voltage or baseline)
    innovation_var_v2 : (N,)  innovation variance S, V^2 (NaN for the baseline)
    states : (N, n_x)  full state ``[soc, v_rc_1..n, (bias_a), (h), (model_error_v)]``
    soc_e : (N,) or None  energy-based SOC (fraction, at rest) from :mod:`estimator.energy`
    energy_wh_remaining : (N,) or None  rest energy left per cell, Wh
    soc_ref, soc_error : (N,) or None  lab reference and ``soc - soc_ref`` (fractions)
    n_gated : int  samples refused by the innovation gate
    reseeds : tuple of (time_s, soc_before, soc_after)  baseline OCV reseeds
    method : str  ``"ekf"``, ``"coulomb"``, ``"ukf"`` or ``"rts"``
    name : str  recording name
    state_names : tuple of str
    covariance : (N, n_x, n_x) or None  posterior covariance when stored
    status : (N,) int or None  status bits of a monitored run (``estimator.filters.kernels.ST_*``:
        rejected inputs, gated, fallback to the baseline, reset, baseline reseed)
    """

    time_s: np.ndarray
    soc: np.ndarray
    soc_sigma: np.ndarray
    voltage_pred_v: np.ndarray
    innovation_v: np.ndarray
    innovation_var_v2: np.ndarray
    states: np.ndarray
    soc_e: np.ndarray | None = None
    energy_wh_remaining: np.ndarray | None = None
    soc_ref: np.ndarray | None = None
    soc_error: np.ndarray | None = None
    n_gated: int = 0
    reseeds: tuple = ()
    method: str = ""
    name: str = ""
    state_names: tuple = ("soc",)
    covariance: np.ndarray | None = None
    metadata: dict = field(default_factory=dict)
    status: np.ndarray | None = None

    @property
    def n(self) -> int:
        return int(self.time_s.size)

    def to_frame(self, states: bool = False):
        """DataFrame with the DESIGN.md trace columns (:meth:`columns`)."""
        import pandas as pd

        return pd.DataFrame(self.columns(states))

    def columns(self, states: bool = False) -> dict:
        """The DESIGN.md trace columns by name, in file order (no pandas needed).

        ``time_s, soc, soc_sigma, voltage_pred_v, innovation_v, soc_e, energy_wh_remaining``
        and ``soc_ref, soc_error`` when the recording has a reference, ``status``; ``states=True``
        adds the other state columns (``v_rc_1_v``..., ``bias_a``, ``hyst``).

        Parameters
        ----------
        states : bool
            Add the state columns after SOC.

        Returns
        -------
        dict of str to ndarray, each shape (N,)
        """
        cols: dict[str, Any] = {"time_s": self.time_s, "soc": self.soc, "soc_sigma": self.soc_sigma,
                "voltage_pred_v": self.voltage_pred_v, "innovation_v": self.innovation_v}
        if self.soc_e is not None:
            cols["soc_e"] = self.soc_e
        if self.energy_wh_remaining is not None:
            cols["energy_wh_remaining"] = self.energy_wh_remaining
        if self.soc_ref is not None:
            cols["soc_ref"] = self.soc_ref
            cols["soc_error"] = self.soc_error
        if self.status is not None:
            cols["status"] = self.status
        if states:
            for j, nm in enumerate(self.state_names[1:], start=1):
                cols[nm] = self.states[:, j]
        return cols


def state_names(n_rc: int, bias: bool, hyst: bool, model_error: bool = False, resistance: bool = False) -> tuple:
    return ("soc", *[f"v_rc_{j + 1}_v" for j in range(n_rc)], *(["bias_a"] if bias else []),
            *(["hyst"] if hyst else []), *(["r0_scale"] if resistance else []),
            *(["model_error_v"] if model_error else []))


def make_trace(model, rec, method, soc, soc_sigma, vpred, innov, s, states, n_gated=0, reseeds=(),
               names=("soc",), covariance=None, metadata=None, status=None) -> Trace:
    """Assemble a :class:`Trace`, adding energy SOC and the reference error.

    Parameters
    ----------
    model : CellModel
        For the energy SOC and remaining energy.
    rec : Recording
        Supplies time (s), temperature (degC), name and ``soc_ref``.
    method : str
        ``"ekf"``, ``"coulomb"``, ``"ukf"``, ``"rts"``, ...
    soc : array_like, shape (N,)
        SOC, fraction.
    soc_sigma : array_like, shape (N,)
        Its standard deviation, fraction.
    vpred : array_like, shape (N,)
        Predicted voltage, V.
    innov : array_like, shape (N,)
        Innovation (measured minus predicted), V.
    s : array_like, shape (N,)
        Innovation variance, V^2.
    states : array_like, shape (N, n_x)
        State trajectories.
    n_gated : int
        Samples whose voltage update was gated.
    reseeds : sequence
        Baseline OCV reseed events.
    names : tuple of str
        State names.
    covariance : array_like, shape (N, n_x, n_x), optional
    metadata : dict, optional
    status : array_like of int, shape (N,), optional
        Per-sample status bits.

    Returns
    -------
    Trace
        With ``soc_e`` (fraction) and ``energy_wh_remaining`` (Wh) added, and ``soc_error`` = ``soc - soc_ref``
        when the recording has ``soc_ref``.
    """
    soc = np.asarray(soc, dtype=float)
    soc_e = energy = None
    try:
        from socfuse.estimator.filters import energy as _energy
    except ImportError:  # pragma: no cover - energy module absent
        _energy = None
    if _energy is not None:
        temp = None if rec.temperature_c is None else np.where(np.isfinite(rec.temperature_c), rec.temperature_c, 25.0)
        soc_e = np.asarray(_energy.soc_c_to_e(model, soc, temp), dtype=float)
        energy = np.asarray(_energy.remaining_energy_wh(model, soc, temp), dtype=float)
    ref = err = None
    if rec.soc_ref is not None:
        ref = np.asarray(rec.soc_ref, dtype=float)
        err = soc - ref
    return Trace(np.asarray(rec.time_s), soc, np.asarray(soc_sigma, dtype=float), np.asarray(vpred, dtype=float),
                 np.asarray(innov, dtype=float), np.asarray(s, dtype=float), np.asarray(states, dtype=float),
                 soc_e, energy, ref, err, int(n_gated), tuple(reseeds), method, rec.name, tuple(names),
                 covariance, dict(metadata or {}), None if status is None else np.asarray(status))
