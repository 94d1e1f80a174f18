"""Filter settings (JSON schema ``socfuse.filter/1``) shared by the EKF, UKF and the baseline.

Layout::

    {
      "schema": "socfuse.filter/1",
      "voltage_noise_v": 0.01, "current_noise_a": 0.048, ...
    }

Every field of :class:`FilterSettings` may appear; missing ones take the dataclass default,
unknown keys are refused (listing the valid ones) so a typo never silently drops a setting.
:func:`default_settings` derives model-dependent defaults from a cell model.
"""
from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, fields, replace
from pathlib import Path
from socfuse.models.fileio import JsonFileError, read_json, write_text_replacing

__all__ = ["FILTER_SCHEMA", "FilterSettings", "SettingsError", "at_temperature", "default_settings", "save_settings",
           "load_settings", "resolve_settings", "settings_from_dict", "settings_to_dict"]

FILTER_SCHEMA = "socfuse.filter/1"
#: Default correlation time of the model-error state, s (see :func:`default_settings`).
MODEL_ERROR_TAU_S = 300.0


class SettingsError(ValueError):
    """A filter-settings file or value that cannot be used; the message names the key."""


@dataclass(frozen=True)
class FilterSettings:
    """Noise model, initial uncertainty and policies of the estimators.

    Parameters
    ----------
    voltage_noise_v : float
        Sigma of the white part of the terminal-voltage error, per sample, V: the voltage
        sensor's own noise when ``model_error_v > 0`` (the model's slowly varying error then has
        its own state), else sensor plus model error lumped as white noise (rate dependent).
    model_error_v : float
        Magnitude (stationary sigma) of the model's slowly varying voltage error, V: OCV-table
        error, hysteresis the model does not carry, RC-dynamics mismatch.  > 0 adds a
        first-order Gauss-Markov state to the measurement equation (Gelb 1974, coloured
        measurement noise by state augmentation; see :mod:`estimator.filters.kernels`), which
        makes the filter's confidence independent of the sample rate.  0 = off (white noise only).
    model_error_tau_s : float
        Correlation time of that error, s (``a = exp(-dt/tau)``, ``q = sigma^2 (1 - a^2)``).
    noise_corr_s : float
        Correlation time of the white sensor noise (voltage and current), s: samples closer
        than this are not independent, so the white voltage variance of a sample ``dt`` after
        the previous one, and the current-noise variance of that interval, are multiplied by
        ``max(1, noise_corr_s / dt)``.  With the model-error state this makes the answer the
        same at 1, 10 or 100 Hz.  0 = every sample independent (rate dependent).
    model_error_adapt_s : float
        Window of the adaptive model-error magnitude, s: when the innovations are larger than
        the filter's ``S`` on average over about this long, the excess variance is added to
        ``model_error_v^2`` (covariance matching on the model-error state, capped at
        ``kernels.ADAPT_CAP`` times it), so a model that is worse than assumed makes the filter
        lean on counting and widen its sigma.  0 = fixed magnitude (the default: on the
        reference cases it widened the sigma but also slowed the correction of a wrong start).
    rc_error_frac : float
        One-sigma relative error of the RC pairs' polarisation, fraction: adds ``(rc_error_frac *
        sum_j |v_j|)^2`` (``v_j`` the predicted RC voltages) to the resistance part of the voltage
        variance of each sample (band-limited by ``resistance_error_corr_s`` like it).  The RC
        resistances and time constants are identified with the same scatter as R0, and their error
        shows in proportion to the polarisation they predict: a voltage after a long heavy load, or
        in the cold, says less about the OCV than one near rest.  0 = off.
    resistance_error_corr_s : float
        Correlation time of that resistance error, s: it follows the current, which in a drive
        holds a level for seconds, so its variance of a sample ``dt`` after the previous one is
        multiplied by ``max(1, resistance_error_corr_s / dt)``.  0 = independent per sample.
    gap_s : float
        An interval between samples longer than this (s) is a logging gap: the current in it is
        unknown, the SOC variance grows by the charge the seen current range allows
        (:func:`estimator.filters.kernels.gap_variance`), the RC voltages become uncertain again,
        and the trace flags the sample (status bit ``gap``).  0 = never.
    resistance_error_ohm : float
        One-sigma error of the series resistance the model predicts with, ohm: adds
        ``(resistance_error_ohm * current)^2`` to the white voltage variance of each sample (a
        voltage under load says less about the OCV than one at rest).
    capacity_error_frac : float
        One-sigma relative error of the model capacity (fraction): the SOC variance grows by
        ``capacity_error_frac^2 |dSOC|`` per interval, so the sigma widens with charge throughput.
    current_noise_a : float
        Sigma of white current-sensor noise, A.  Enters the process noise through the input
        Jacobian ``G``: ``Q_k = G G^T current_noise_a^2 + diag(q_*) dt``.
    q_soc_per_s : float
        SOC random-walk density, 1/s (capacity error and slow drift budget).
    q_rc_v2_per_s : float
        Random-walk density of each RC-pair voltage, V^2/s.
    q_bias_a2_per_s : float
        Random-walk density of the current-sensor bias state, A^2/s.
    q_hyst_per_s : float
        Random-walk density of the hysteresis state (dimensionless^2/s).
    p0_soc : float
        Sigma of the initial SOC when ``soc0`` is given (fraction).
    p0_rc_v : float
        Sigma of each initial RC voltage, V (the filter starts them at 0, a rested cell).
    p0_bias_a : float
        Sigma of the initial current-sensor bias, A (starts at 0).
    p0_hyst : float
        Sigma of the initial hysteresis state (starts at 0; the state lives in -1..1).
    estimate_bias : bool
        Add a current-sensor bias state (measured current = true current + bias).
    estimate_resistance : bool
        Add a series-resistance scale state ``r`` (the filter's R0 is the table's times ``1 + r``):
        joint estimation of the one model parameter a drive shows most clearly, so a table that
        is off at the cell's present temperature or age is not read as a SOC error (see
        :mod:`estimator.filters.kernels`).
    q_resistance_per_s : float
        Random-walk density of ``r``, 1/s.
    p0_resistance : float
        Sigma of the initial ``r`` (a fraction of R0; starts at 0).
    estimate_hysteresis : bool
        Only used when the model has hysteresis: estimate ``h`` (True) or propagate it
        deterministically with zero variance (False).
    gate_sigma : float
        Innovation gate in standard deviations: a sample with ``|innovation| >
        gate_sigma * sqrt(S)`` is not used and is counted.  0 switches the gate off.
    gate_release_s : float
        Gate release, s: when samples have been gated without a break for this long, the next
        sample that fails the gate is used anyway (and the run starts again).  A gate is meant
        to reject outliers; a persistent mismatch (a wrong initial SOC with an optimistic
        ``p0_soc``, a model error) would otherwise lock the filter out for good.  0 = never.
    soc_min, soc_max : float
        Clip policy: after every update (and every baseline step) SOC is clipped to this range.
        In the filters the clip is an estimate projection (Simon, IET Control Theory Appl. 4,
        2010; cited from memory): the states correlated with SOC move with it by
        ``P_i0 / P_00`` times the excess, and the covariance is left as it is.
    rest_current_a : float
        Baseline: a sample with ``|current| <= rest_current_a`` is at rest, A.
    rest_min_s : float
        Baseline: minimum rest duration before the OCV reseed, s.  Default 3600 s after the
        US DOE / INL pulse-test practice of resting an hour before an OCV reading.
    reseed : bool
        Baseline: reseed SOC from the OCV curve at the end of each qualifying rest.
    early_reseed_s : float
        Baseline: when > 0, a rest that lasts at least this long but less than ``rest_min_s``
        is still used, with the OCV taken as the asymptote of the relaxation extrapolated
        from the rest's voltage samples (exponential fit over its second half).  0 = off.
    n_soc_grid : int
        Resolution of the uniform SOC grid of the kernel tables (points over 0..1).
    model_error_r0_exponent : float
        Temperature axis of the model error (issue 13, item 5): a run at cell temperature ``T``
        uses ``model_error_v * (R0(50 %, T) / R0(50 %, 25 degC)) ** model_error_r0_exponent``
        (:func:`at_temperature`, applied by :func:`estimator.filters.run.estimate` with the
        recording's median temperature), since the equivalent circuit's voltage error grows with
        the overpotentials it describes, which scale with the resistance.  0 = no temperature
        dependence.
    resistance_error_r0_exponent : float
        Temperature axis of the resistance error: a sample at cell temperature ``T`` uses
        ``resistance_error_ohm * (R0(50 %, T) / R0(50 %, 25 degC)) ** resistance_error_r0_exponent``
        (``resistance_error_ohm`` is the 25 degC value; applied per sample by
        :func:`estimator.filters.kernels.resistance_sigma` in the EKF, the UKF, the batch kernels
        and the exported C step).  1 keeps the error the same fraction of the resistance at every
        temperature (the pulse resistances scatter by a fraction of their value, not by a fixed
        number of ohms).  0 = the value as given at every temperature.
    """

    voltage_noise_v: float = 0.01
    current_noise_a: float = 0.05
    q_soc_per_s: float = 2.8e-8
    q_rc_v2_per_s: float = 1e-7
    q_bias_a2_per_s: float = 1e-8
    q_hyst_per_s: float = 1e-6
    p0_soc: float = 0.02
    p0_rc_v: float = 0.02
    p0_bias_a: float = 0.05
    p0_hyst: float = 0.5
    estimate_bias: bool = False
    estimate_hysteresis: bool = True
    gate_sigma: float = 5.0
    gate_release_s: float = 30.0
    soc_min: float = 0.0
    soc_max: float = 1.0
    rest_current_a: float = 0.1
    rest_min_s: float = 3600.0
    reseed: bool = True
    early_reseed_s: float = 0.0
    n_soc_grid: int = 401
    model_error_v: float = 0.0
    model_error_tau_s: float = 60.0
    capacity_error_frac: float = 0.0
    resistance_error_ohm: float = 0.0
    noise_corr_s: float = 0.0
    model_error_adapt_s: float = 0.0
    gap_s: float = 0.0
    resistance_error_corr_s: float = 0.0
    model_error_r0_exponent: float = 0.0
    rc_error_frac: float = 0.0
    resistance_error_r0_exponent: float = 0.0
    estimate_resistance: bool = False
    q_resistance_per_s: float = 1e-5
    p0_resistance: float = 0.1

    def __post_init__(self) -> None:
        for f in fields(self):
            v = getattr(self, f.name)
            if f.type in ("bool", bool):
                if not isinstance(v, bool):
                    raise SettingsError(f"filter setting {f.name} must be true or false, got {v!r}")
                continue
            if f.name == "n_soc_grid":
                if isinstance(v, bool) or not isinstance(v, (int, float)) or int(v) != v or not (11 <= int(v) <= 10001):
                    raise SettingsError(f"filter setting n_soc_grid must be an integer in 11..10001, got {v!r}")
                object.__setattr__(self, f.name, int(v))
                continue
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
                raise SettingsError(f"filter setting {f.name} must be a finite number, got {v!r}")
            object.__setattr__(self, f.name, float(v))
            if f.name in ("soc_min", "soc_max"):
                continue
            if f.name in ("voltage_noise_v", "model_error_tau_s") and v <= 0:
                raise SettingsError(f"filter setting {f.name} must be > 0, got {v!r}")
            if v < 0:
                raise SettingsError(f"filter setting {f.name} must be >= 0, got {v!r}")
        if not self.soc_min < self.soc_max:
            raise SettingsError(f"filter settings: soc_min ({self.soc_min}) must be below soc_max ({self.soc_max})")

    def with_(self, **changes) -> "FilterSettings":
        """Copy with some fields replaced."""
        bad = sorted(set(changes) - {f.name for f in fields(self)})
        if bad:
            raise SettingsError(f"unknown filter setting(s) {', '.join(bad)}; valid: {', '.join(_names())}")
        return replace(self, **changes)


def _names():
    return [f.name for f in fields(FilterSettings)]


def default_settings(model) -> FilterSettings:
    """Defaults derived from a cell model (all "common practice, no source" unless named).

    With ``C = capacity_ah`` (the 1C current in A):

    - ``voltage_noise_v`` 6 mV: the white part of the voltage error of one sample at 1 s spacing,
      the sensor's own noise (a BMS front end of 1-2 mV) plus the sample-to-sample part of the
      model error.
    - ``model_error_v`` = sqrt((10 mV)^2 + r^2) with ``r`` the OCV table's residual from the
      model file's provenance (when recorded): the slowly varying error of an equivalent-circuit
      model on dynamic load (Gauss-Markov state, see :mod:`estimator.filters.kernels`).
    - ``model_error_tau_s`` 300 s (:data:`MODEL_ERROR_TAU_S`): that error is mostly the slow
      relaxation the identified RC pairs do not hold (solid-state diffusion, unmodelled
      hysteresis, OCV-table error that changes only as the SOC moves); a rested Li-ion cell needs
      about an hour to reach its OCV (the US DOE / INL practice behind ``rest_min_s``).  The
      likelihood on the tuning cycle (Panasonic 25 degC Cycle_1, 10 Hz) chose 221-364 s.  A
      correlation time of 60 s made the filter treat a persistent 10-25 mV error as averaging out
      within a minute, and its SOC sigma shrank below the true error (Panasonic US06 at 10 Hz:
      true SOC inside +-3 sigma on 83 % of samples; 96 % with 300 s).
    - ``resistance_error_ohm`` = 0.35 R0 (at 50 % SOC, 25 degC): the scatter of pulse resistances
      over SOC, current and edge timing; ``resistance_error_corr_s`` 10 s: that fast error
      follows the current, which in a drive holds a level for seconds to tens of seconds, so
      samples closer than 10 s are not independent.  These two and ``model_error_v`` were chosen
      on the demo days and the Panasonic Cycle_1 (the tuning cycle), never on the test recordings.
    - ``rc_error_frac`` 0.35: the RC pairs' polarisation known to the same 35 % as R0 (the same
      pulse fits give both).  Checked on the Panasonic Cycle_1 recordings (the tuning cycles) at
      25, 10 and 0 degC: SOC RMSE 0.27/0.22/0.36 -> 0.19/0.14/0.28 %, and a 30-point wrong start
      handed over mid-drive at 0 degC 3.63 -> 0.52 points after 600 s (its true SOC inside +-3
      sigma 39 -> 100 % of the time): at 0 degC the slow pair holds 0.1 V on a drive, and without
      this term the filter read a wrong SOC with a wrong polarisation as certain.
    - ``noise_corr_s`` 1 s: the sensor noise of a BMS log is independent from about 1 Hz down.
    - ``capacity_error_frac`` 0.02: a capacity known to 2 % (C/20 test, ageing since).
    - ``model_error_adapt_s`` 0 (off).
    - ``gap_s`` 30 s: a BMS logs at 1 Hz or faster; 30 s without a sample is a logging gap.
    - ``model_error_r0_exponent`` 0 (off).  On the Panasonic Cycle_1 recordings (the tuning cycles)
      1 took the 0 degC SOC RMSE with default settings from 1.69 to 1.26 % and coverage from 86 to
      94 %, but slowed the correction of a wrong start (4.13 -> 4.42 points after 600 s) and, on top
      of settings that ``tune`` already fitted at 10 degC, counts the cold twice (wrong start
      3.14 -> 3.49 points on that Cycle_1); until ``tune`` records the temperature its settings
      refer to, the axis is there to be switched on, not on by default.
    - ``resistance_error_r0_exponent`` 1: the resistance error stays 35 % of R0 in the cold (R0 at
      0 degC is about 2.7 times the 25 degC value on the Panasonic 18650PF), at each sample's
      temperature.  Checked with ``benchmarks/generalisation.py`` on every reference case (against
      0): the 0 degC US06 SOC RMSE 1.72 -> 1.59 %, the 10 degC HWFET 1.30 -> 1.13 % (its true SOC
      inside +-3 sigma 95.1 -> 98.7 %), the 25 degC and physics cases unchanged; on the demo, whose
      temperature moves around 25 degC, ``tune`` then accepted its result (long day 0.37 -> 0.24 %).
    - ``estimate_resistance`` on, ``p0_resistance`` 0.1, ``q_resistance_per_s`` 1e-5 /s: the series
      resistance a drive shows is the table's to about 10 % at the start (pulse-fit scatter, a core
      warmer than the case sensor, ageing), and it drifts by about 10 % in 1000 s as the cell warms
      on a cold drive (sqrt(1e-5 * 1000) = 0.1; common practice, no source).  Chosen on the tuning
      recordings (Panasonic Cycle_1 at 25/10/0 degC, demo lunch day, physics drive_1; q 1e-6 .. 1e-4
      and p0 0.1 .. 0.4 within 0.05 points of each other but for 10 degC, where p0 0.1 gave the
      least change): SOC RMSE 0.19/0.13/0.28 -> 0.18/0.15/0.27 %, demo 0.26 -> 0.25 %, NMC 0.63 ->
      0.49 %, LFP 2.86 -> 2.62 %.  A start sigma of 0.2 also cost 0.5 points on the short LFP
      drive of the tests (the voltage on the plateau cannot separate a SOC error from an R0 one).
    - ``current_noise_a`` = C/100: a Hall-effect sensor of about 1 % of the 1C current.
    - ``q_soc_per_s`` = 0.01^2 / 3600: a random walk of 1 % SOC per hour.
    - ``q_rc_v2_per_s`` = (0.1 R_rc I_1C)^2 / tau: 10 % of the 1C polarisation per time
      constant, using the largest pair at 50 % SOC, 25 degC (1e-7 V^2/s without RC pairs).
    - ``q_bias_a2_per_s`` = (C/100)^2 / 3600: bias drifting 1 % of 1C per hour.
    - ``p0_soc`` 0.02 (a user-given soc0 is trusted to 2 points); ``p0_rc_v`` = the largest
      1C polarisation ``sum R_rc * C`` (at least 5 mV); ``p0_bias_a`` = C/50; ``p0_hyst`` 0.5.
    - ``rest_current_a`` = C/50 (quiescent loads below C/50 count as rest);
      ``rest_min_s`` = 3600 s (US DOE / INL HPPC practice: an hour's rest before an OCV reading).
    - ``gate_sigma`` 5; SOC clipped to [0, 1]; ``estimate_bias`` on (a current-sensor offset is
      observable through the voltage wherever the OCV has a slope; on a flat curve its variance
      simply widens the SOC sigma); ``estimate_hysteresis`` on when the model has hysteresis.

    Parameters
    ----------
    model : socfuse.models.CellModel
        The cell model: capacity (Ah), R0 and RC tables (ohm, s) and OCV table (V) set the scales.

    Returns
    -------
    FilterSettings
        Settings in physical units (V, A, s) for this cell.
    """
    c = float(model.capacity_ah)
    r0_mid = float(model.r0_ohm.at(0.5, 25.0))
    q_each = [(0.1 * float(p.r_ohm.at(0.5, 25.0)) * c) ** 2 / float(p.tau_s.at(0.5, 25.0)) for p in model.rc]
    q_rc = max(q_each) if q_each else 1e-7
    p_rc = sum(float(p.r_ohm.at(0.5, 25.0)) * c for p in model.rc)
    return FilterSettings(
        voltage_noise_v=0.006, current_noise_a=c / 100.0, q_soc_per_s=0.01 ** 2 / 3600.0,
        q_rc_v2_per_s=q_rc, q_bias_a2_per_s=(c / 100.0) ** 2 / 3600.0, q_hyst_per_s=1e-6,
        p0_soc=0.02, p0_rc_v=max(p_rc, 0.005), p0_bias_a=c / 50.0, p0_hyst=0.5,
        estimate_bias=True, estimate_hysteresis=model.hysteresis is not None,
        gate_sigma=5.0, soc_min=0.0, soc_max=1.0, rest_current_a=c / 50.0, rest_min_s=3600.0,
        reseed=True, early_reseed_s=0.0, n_soc_grid=401,
        model_error_v=_model_error_v(model), model_error_tau_s=MODEL_ERROR_TAU_S, capacity_error_frac=0.02,
        resistance_error_ohm=0.35 * r0_mid, noise_corr_s=1.0, model_error_adapt_s=0.0,
        gap_s=30.0, resistance_error_corr_s=10.0, model_error_r0_exponent=0.0, rc_error_frac=0.35,
        resistance_error_r0_exponent=1.0, estimate_resistance=True, q_resistance_per_s=1e-5, p0_resistance=0.1)


def _model_error_v(model) -> float:
    """Magnitude of the slowly varying model error, V: 10 mV (common practice for an
    equivalent-circuit model on dynamic load, no source) root-sum-squared with the OCV table's
    own residual when the model file records one (``provenance.ocv.residual_v``)."""
    extra = 0.0
    try:
        r = float((getattr(model, "provenance", None) or {}).get("ocv", {}).get("residual_v") or 0.0)
        if math.isfinite(r) and 0.0 < r < 0.2:
            extra = r
    except (AttributeError, TypeError, ValueError):
        extra = 0.0
    return math.sqrt(0.01 ** 2 + extra ** 2)


def at_temperature(settings: FilterSettings, model, temperature_c: float | None) -> FilterSettings:
    """The settings for a run at cell temperature ``temperature_c`` (the temperature axis).

    Parameters
    ----------
    settings : FilterSettings
        The resolved settings (:func:`resolve_settings`).
    model : socfuse.models.CellModel
        Its R0 table (ohm over SOC x temperature) gives the scale.
    temperature_c : float or None
        Cell temperature, degC (None or not finite: 25 degC, no change).

    Returns
    -------
    FilterSettings
        ``model_error_v`` scaled by ``(R0(0.5, T) / R0(0.5, 25)) ** model_error_r0_exponent``
        (the same object when nothing changes).  The resistance error's temperature axis
        (``resistance_error_r0_exponent``) is not applied here: the filters apply it at every
        sample's own temperature (:func:`estimator.filters.kernels.resistance_sigma`).
    """
    e = settings.model_error_r0_exponent
    if e == 0.0 or settings.model_error_v == 0.0 or temperature_c is None or not math.isfinite(temperature_c):
        return settings
    ratio = float(model.r0_ohm.at(0.5, float(temperature_c))) / float(model.r0_ohm.at(0.5, 25.0))
    if not (math.isfinite(ratio) and ratio > 0.0) or ratio == 1.0:
        return settings
    return settings.with_(model_error_v=settings.model_error_v * ratio ** e)


def settings_to_dict(s: FilterSettings) -> dict:
    """The settings as a JSON-ready dict (the layout of ``filter.json``).

    Parameters
    ----------
    s : FilterSettings

    Returns
    -------
    dict
        ``schema`` followed by every settings field in its unit (see :class:`FilterSettings`).
    """
    return {"schema": FILTER_SCHEMA, **asdict(s)}


def settings_from_dict(d: dict, where: str = "filter settings", base: FilterSettings | None = None) -> FilterSettings:
    """Build settings from a dict; missing keys come from ``base`` (default: dataclass defaults).

    Parameters
    ----------
    d : dict
        The parsed ``filter.json`` object; ``schema`` must equal ``FILTER_SCHEMA``.
    where : str
        Name of the source (a file name) used in error messages.
    base : FilterSettings, optional
        Values for the keys that ``d`` omits.

    Returns
    -------
    FilterSettings

    Raises
    ------
    SettingsError
        For a non-object, an unknown key, a wrong schema or an invalid value.
    """
    if not isinstance(d, dict):
        raise SettingsError(f"{where}: expected a JSON object, got {type(d).__name__}")
    valid = set(_names()) | {"schema"}
    unknown = sorted(set(d) - valid)
    if unknown:
        raise SettingsError(f"{where}: unknown key(s) {', '.join(map(repr, unknown))}; "
                            f"valid keys are {', '.join(sorted(valid))}")
    if d.get("schema") != FILTER_SCHEMA:
        raise SettingsError(f"{where}: schema is {d.get('schema')!r}, expected {FILTER_SCHEMA!r}")
    vals = {k: v for k, v in d.items() if k != "schema"}
    try:
        return replace(base, **vals) if base is not None else FilterSettings(**vals)
    except SettingsError as e:
        raise SettingsError(f"{where}: {e}") from None


def save_settings(settings: FilterSettings, path) -> Path:
    """Write the settings as a ``socfuse.filter/1`` JSON file.

    Parameters
    ----------
    settings : FilterSettings
        The settings to write.
    path : str or pathlib.Path
        Target file; written to a temporary name, then renamed.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    return write_text_replacing(path, json.dumps(settings_to_dict(settings), indent=1) + "\n")


def resolve_settings(model, path=None, overrides: dict | None = None) -> FilterSettings:
    """The one settings resolver every command and API uses.

    Order: defaults derived from the model (:func:`default_settings`), then the keys present in
    the ``socfuse.filter/1`` file at ``path`` (a partial file is fine), then ``overrides``
    (command-line options).

    Parameters
    ----------
    model : socfuse.models.CellModel
        The cell model the defaults are derived from.
    path : str or pathlib.Path, optional
        A filter-settings JSON file; keys it lacks keep the model-derived defaults.
    overrides : dict, optional
        Setting name -> value, applied last (unknown names are refused).

    Returns
    -------
    FilterSettings
        The effective settings.
    """
    s = default_settings(model)
    if path is not None:
        s = load_settings(path, base=s)
    if overrides:
        s = s.with_(**overrides)
    return s


def load_settings(path, base: FilterSettings | None = None) -> FilterSettings:
    """Read and validate a ``socfuse.filter/1`` file.

    Parameters
    ----------
    path : str or pathlib.Path
        The settings file (a partial file is fine).
    base : FilterSettings, optional
        Where the missing keys come from (default: the dataclass defaults); commands use
        :func:`resolve_settings`, which passes the model-derived defaults.

    Returns
    -------
    FilterSettings
        The settings; unknown keys, a wrong schema or out-of-range values are refused with a
        :class:`SettingsError` naming the file and key.
    """
    path = Path(path)
    try:
        d = read_json(path, "filter-settings")  # names the file on bad UTF-8, deep nesting, absurd numbers
    except FileNotFoundError:
        raise SettingsError(f"{path}: no such file") from None
    except JsonFileError as e:
        raise SettingsError(str(e)) from None
    return settings_from_dict(d, where=str(path), base=base)
