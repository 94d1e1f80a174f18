"""One entry point for every estimator: :func:`estimate`."""
from __future__ import annotations

from socfuse.estimator.filters.settings import FilterSettings
from socfuse.estimator.filters.trace import Trace

__all__ = ["METHODS", "estimate"]

METHODS = ("ekf", "coulomb", "ukf")


def estimate(model, rec, method: str = "ekf", settings: FilterSettings | None = None,
             soc0: float | None = None) -> Trace:
    """Run ``method`` (``"ekf"``, ``"coulomb"`` or ``"ukf"``) over one recording.

    Parameters
    ----------
    model : models.CellModel
    rec : models.Recording
    method : str
    settings : FilterSettings, optional  (default :func:`estimator.settings.default_settings`)
    soc0 : float, optional  initial SOC (fraction); else from the OCV at the first sample

    Returns
    -------
    Trace
        For ``"ekf"`` a monitored run (:func:`estimator.filters.ekf.run_ekf` with ``monitor=True``):
        the same input checks, health monitor and fallback to the baseline as the exported C code,
        with the per-sample status bits in ``Trace.status`` (trace column ``status``).
    """
    if method == "ekf":  # the exported C code's filter step: input checks, health monitor, fallback
        from socfuse.estimator.filters.ekf import run_ekf
        return run_ekf(model, rec, settings, soc0, monitor=True)
    if method == "coulomb":
        from socfuse.estimator.filters.coulomb import run_coulomb
        return run_coulomb(model, rec, settings, soc0)
    if method == "ukf":
        from socfuse.estimator.filters.ukf import run_ukf
        return run_ukf(model, rec, settings, soc0)
    raise ValueError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
