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
    model : socfuse.models.CellModel
        The cell model (capacity Ah, OCV V, R0/RC ohm and s).
    rec : socfuse.models.Recording
        The recording (time s, current A with + = discharge, voltage V, optional temperature degC).
    method : str
        ``"ekf"`` (default), ``"coulomb"`` (the coulomb-counting baseline with OCV reseed after
        rests) or ``"ukf"`` (the sigma-point filter through filterpy).
    settings : FilterSettings, optional
        Default: :func:`socfuse.estimator.filters.settings.default_settings` of ``model``.
    soc0 : float, optional
        Initial SOC (fraction 0..1); else from the OCV at the first sample.

    Returns
    -------
    Trace
        For ``"ekf"`` a monitored run (:func:`estimator.filters.ekf.run_ekf` with ``monitor=True``):
        the same input checks, health monitor and fallback to the baseline as the exported C code,
        with the per-sample status bits in ``Trace.status`` (trace column ``status``).

    References
    ----------
    .. [1] G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV
       battery packs", parts 1-3, J. Power Sources 134 (2004) 252-292 (pages from memory).
    .. [2] A. Gelb (ed.), Applied Optimal Estimation, MIT Press 1974 (coloured measurement noise by
       state augmentation: the model-error state).
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
