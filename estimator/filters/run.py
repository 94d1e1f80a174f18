"""One entry point for every estimator: :func:`estimate`.

Before the filters run, :func:`prepare` applies three things of the recording (issue 13): the
settings at its temperature (:func:`estimator.filters.settings.at_temperature`), the start from a
loaded first sample (below), and the model's identified range (:mod:`socfuse.models.validity`:
voltages below the SOC range the pulse tests covered at that temperature are left out, so in the
cold the voltage collapse near the cut-off, which the tables do not hold, does not drag the SOC to
zero; the trace flags those samples with the ``envelope`` status bit).

Start from a loaded first sample (issue 13, item 6).  Without a given ``soc0`` the filters read
the initial SOC from the first voltage sample.  Under load that sample says less than it seems:
the RC pairs hold an unknown voltage, anywhere between 0 (the load has only just begun) and their
steady state ``sum_j R_j i`` (it has run for longer than their time constants).  The terminal
voltage rule ``v = OCV - R0 i - sum_j v_j`` then bounds the OCV to the interval between
``v + R0 i`` and ``v + (R0 + sum_j R_j) i`` (both on the same side of ``v`` as the current), so
:func:`loaded_start` reads the SOC at both ends, clipped to 0..1, and starts at the middle with the
sigma of a uniform distribution over that interval (``width / sqrt(12)``), root-sum-squared with
the voltage and model-error part.  A relaxed full cell whose first sample already carries the load
(the Panasonic drive cycles) is thus started at 1 with a sigma of a few points, instead of the
R0-corrected read with the whole ``(R0 i)^2 + (sum R_j i)^2`` as a sigma of 0.5 that let the first
loaded samples drag the estimate 20-30 points down.
"""
from __future__ import annotations

import math

import numpy as np

from socfuse.estimator.filters.settings import FilterSettings, default_settings
from socfuse.estimator.filters.trace import Trace

__all__ = ["METHODS", "estimate", "loaded_start", "prepare", "representative_temperature"]

METHODS = ("ekf", "coulomb", "ukf")
SIGMA_MIN, SIGMA_MAX = 0.01, 0.5  # the kernels' start-sigma range (estimator.filters.kernels._read_sigma)


def loaded_start(model, rec, settings: FilterSettings | None = None) -> tuple[float, float] | None:
    """Initial SOC and sigma from a first voltage sample taken under load (see the module docstring).

    Parameters
    ----------
    model : socfuse.models.CellModel
        The cell model (OCV in V over SOC x temperature, R0 and RC resistances in ohm).
    rec : socfuse.models.Recording
        The recording; its first sample with a finite voltage is used, at that sample's
        temperature (degC; 25 when the recording has none).
    settings : FilterSettings, optional
        ``rest_current_a`` (A) decides "under load"; ``voltage_noise_v``, ``model_error_v`` and
        ``resistance_error_ohm`` (V, V, ohm; at that temperature by
        :func:`estimator.filters.kernels.resistance_sigma`) give the voltage part of the sigma.  Default: from
        the model.

    Returns
    -------
    (float, float) or None
        ``(soc, sigma)`` as fractions (sigma in 0.01..0.5), or None when the first sample is at
        rest (``|i| <= rest_current_a``) or has no finite voltage or current (the filters' own
        start rule applies then).
    """
    s = default_settings(model) if settings is None else settings
    v_all = np.asarray(rec.voltage_v, dtype=float)
    ok = np.flatnonzero(np.isfinite(v_all))
    if ok.size == 0:
        return None
    k = int(ok[0])
    v, i = float(v_all[k]), float(rec.current_a[k])
    if not math.isfinite(i) or abs(i) <= s.rest_current_a:
        return None
    t = 25.0
    if rec.temperature_c is not None and math.isfinite(float(rec.temperature_c[k])):
        t = float(rec.temperature_c[k])
    ocv = model.ocv

    def read(volts: float) -> float:
        return float(np.clip(ocv.soc_at(volts, t), 0.0, 1.0))

    def resistances(z: float) -> tuple[float, float]:
        return (float(model.r0_ohm.at(z, t)), sum(float(p.r_ohm.at(z, t)) for p in model.rc))

    # two passes: resistances at the first read, then at the reads themselves
    z_a = z_b = read(v)
    for _ in range(2):
        r0_a, _ = resistances(z_a)
        r0_b, rrc_b = resistances(z_b)
        z_a, z_b = read(v + r0_a * i), read(v + (r0_b + rrc_b) * i)
    z = 0.5 * (z_a + z_b)
    m = 0.0 if model.hysteresis is None else float(model.hysteresis.max_v)
    from socfuse.estimator.filters.ekf import setup
    from socfuse.estimator.filters.kernels import resistance_sigma_at

    su = setup(model, s)
    sr = float(resistance_sigma_at(su.tables.packed, su.prm, t))  # the filters' rule at this temperature
    sv = math.sqrt(s.voltage_noise_v ** 2 + s.model_error_v ** 2 + (sr * i) ** 2 + m * m)
    # the voltage part as the SOC span of OCV(z) +- sv (half of it): no slope at a point, so the flat
    # ends of a curve (PCHIP slope 0 at SOC 1) and the clip at 0..1 are handled
    v_mid = float(ocv.voltage(z, t))
    sig_v = 0.5 * (read(v_mid + sv) - read(v_mid - sv))
    sig = math.sqrt((z_b - z_a) ** 2 / 12.0 + sig_v ** 2)
    return z, min(max(sig, SIGMA_MIN), SIGMA_MAX)


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
        Initial SOC (fraction 0..1); else from the OCV at the first sample, or, when that sample
        is under load, by :func:`loaded_start` (the same start for every method).

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
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    run_rec, settings, soc0, outside = prepare(model, rec, settings, soc0, check_handover=method != "coulomb")
    if method == "ekf":  # the exported C code's filter step: input checks, health monitor, fallback
        from socfuse.estimator.filters.ekf import run_ekf
        tr = run_ekf(model, run_rec, settings, soc0, monitor=True)
    elif method == "coulomb":
        from socfuse.estimator.filters.coulomb import run_coulomb
        tr = run_coulomb(model, run_rec, settings, soc0)
    else:
        from socfuse.estimator.filters.ukf import run_ukf
        tr = run_ukf(model, run_rec, settings, soc0)
    return _mark_outside(tr, outside)


def representative_temperature(rec) -> float | None:
    """Median of the recording's finite temperatures, degC (None without any).

    Parameters
    ----------
    rec : socfuse.models.Recording

    Returns
    -------
    float or None
        degC.
    """
    if rec.temperature_c is None:
        return None
    t = np.asarray(rec.temperature_c, dtype=float)
    t = t[np.isfinite(t)]
    return float(np.median(t)) if t.size else None


def prepare(model, rec, settings: FilterSettings | None = None, soc0: float | None = None,
            check_handover: bool = True):
    """What :func:`estimate` hands to the filters: temperature, start and identified range applied.

    1. Settings at the recording's temperature (:func:`estimator.filters.settings.at_temperature`
       with :func:`representative_temperature`): the temperature axis of the settings.
    2. Without ``soc0``, a first sample under load starts from :func:`loaded_start` (its sigma
       replaces ``p0_soc`` for this run only; the start is not a hand-over).  With ``soc0`` and
       ``check_handover`` (the filters; the baseline counts from ``soc0`` as given), a first
       sample under load checks the hand-over against the :func:`loaded_start` read
       (:func:`estimator.filters.ekf.handover`): that read knows ``R0 i`` and bounds the RC
       voltages, so under load it tells a wrong hand-over apart where the filters' own
       unknown-history read is too wide to (Panasonic 0 degC US06, 30 points handed over wrong:
       RMSE from 600 s after the hand-over 8.9 -> 5.3 points).
    3. Voltage samples below the model's identified SOC range at their temperature
       (:func:`socfuse.models.validity.outside_identified_range`) are left out (NaN: the filters
       predict through them, the baseline does not reseed from them).  Voltages next to the
       cut-off are the filter step's own rule
       (:func:`estimator.filters.kernels.voltage_outside_envelope`, in the exported C too).

    Parameters
    ----------
    model : socfuse.models.CellModel
    rec : socfuse.models.Recording
    settings : FilterSettings, optional
        Resolved settings (default: from the model).
    soc0 : float, optional
        Given initial SOC, fraction.
    check_handover : bool
        Check a given ``soc0`` against the loaded first sample (step 2).

    Returns
    -------
    (Recording, FilterSettings, float or None, numpy.ndarray of bool)
        The recording the filters run on, the settings of this run, the initial SOC (None: the
        filters' own rule) and the mask of the samples whose voltage was left out.
    """
    from socfuse.estimator.filters.settings import at_temperature
    from socfuse.models.validity import identified_soc_floor, outside_identified_range

    s = at_temperature(default_settings(model) if settings is None else settings, model,
                       representative_temperature(rec))
    if soc0 is None:
        start = loaded_start(model, rec, s)
        if start is not None:
            soc0, s = start[0], s.with_(p0_soc=start[1])
    elif check_handover and math.isfinite(float(soc0)) and _inside_envelope(model, rec, s):
        start = loaded_start(model, rec, s)
        if start is not None:
            from socfuse.estimator.filters.ekf import handover

            z, sig = handover(float(soc0), s.p0_soc, start[0], start[1])
            if sig != s.p0_soc:
                soc0, s = z, s.with_(p0_soc=sig)
    v = np.asarray(rec.voltage_v, dtype=float)
    outside = np.zeros(rec.n, dtype=bool)
    if identified_soc_floor(model, 25.0) is not None and np.any(np.isfinite(v)):
        outside = outside_identified_range(model, rec.current_a, v, rec.temperature_c,
                                           _polarisation(model, rec, soc0))
    if soc0 is None and np.any(outside):
        # the filters' own start reads the first finite voltage: the only SOC information there is
        outside[: int(np.argmax(np.isfinite(v))) + 1] = False
    if np.any(outside):
        rec = rec.with_(voltage_v=np.where(outside, np.nan, v))
    return rec, s, soc0, outside


def _inside_envelope(model, rec, s) -> bool:
    """Whether the first finite voltage (the one :func:`loaded_start` reads) is one the filter step
    uses (:func:`estimator.filters.kernels.voltage_outside_envelope`: temperature inside the
    operating envelope, voltage clear of the cut-off); outside it that voltage cannot check a
    hand-over either."""
    from socfuse.estimator.filters.ekf import setup, temperature_array
    from socfuse.estimator.filters.kernels import P_TDEF, voltage_outside_envelope

    v = np.asarray(rec.voltage_v, dtype=float)
    ok = np.flatnonzero(np.isfinite(v))
    if ok.size == 0:
        return True
    k = int(ok[0])
    su = setup(model, s)
    return not voltage_outside_envelope(su.prm, float(v[k]), float(temperature_array(rec, float(su.prm[P_TDEF]))[k]))


def _polarisation(model, rec, soc0):
    """Sum of the RC voltages (V, per sample) of an open-loop run of the model over the recording's
    current from rest, at the start SOC (``soc0``, else the OCV read of the first finite voltage)."""
    from socfuse.models.thevenin import simulate

    if model.n_rc == 0:
        return None
    t = None if rec.temperature_c is None else np.where(np.isfinite(rec.temperature_c), rec.temperature_c, 25.0)
    if soc0 is None:
        v = np.asarray(rec.voltage_v, dtype=float)
        k = int(np.argmax(np.isfinite(v)))
        soc0 = float(np.clip(model.ocv.soc_at(v[k], 25.0 if t is None else t[k]), 0.0, 1.0))
    i = np.nan_to_num(np.asarray(rec.current_a, dtype=float))
    return np.sum(simulate(model, rec.time_s, i, t, soc0=float(soc0)).v_rc, axis=1)


def _mark_outside(tr: Trace, outside) -> Trace:
    """The trace with the ``envelope`` status bit on the samples whose voltage was left out."""
    if not np.any(outside) or tr.status is None:
        return tr
    from dataclasses import replace

    from socfuse.estimator.filters.kernels import ST_ENVELOPE, ST_REJ_VOLTAGE

    st = np.asarray(tr.status).copy()
    # the voltage was finite: not a rejected input but one outside the model's range
    st[outside] = (st[outside] & ~ST_REJ_VOLTAGE) | ST_ENVELOPE
    return replace(tr, status=st)
