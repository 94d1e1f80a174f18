"""Extended Kalman filter for SOC (Plett, J. Power Sources 134 (2004), parts 1-3) on compiled kernels.

The per-sample loop is :func:`estimator.kernels.ekf_run` (the only copy); this module sets up
tables, priors and outputs.  State ``[soc, v_rc_1..n, (bias_a), (h)]``: the bias state
exists when ``settings.estimate_bias``, ``h`` whenever the model has hysteresis (with zero
variance and noise when ``settings.estimate_hysteresis`` is False).

Initial state: SOC ``soc0`` with sigma ``p0_soc``, or else the OCV inverse of the first
finite voltage sample corrected by its ``R0 i`` drop, with sigma ``sigma_v / |dOCV/dSOC|``
where ``sigma_v^2 = voltage_noise^2 + (R0 i)^2 + (sum R_rc i)^2 + M^2`` (the drop itself,
the possibly unrelaxed RC voltages at that current and the hysteresis magnitude ``M`` are
all uncertain); the SOC sigma is at least 0.01 and at most 0.5.  RC voltages, bias and
hysteresis start at 0 with sigmas ``p0_rc_v``, ``p0_bias_a``, ``p0_hyst``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.settings import FilterSettings, default_settings
from socfuse.estimator.filters.tables import KernelTables
from socfuse.estimator.filters.trace import Trace, make_trace, state_names
from socfuse.models.validity import CUTOFF_MARGIN_V

__all__ = ["EkfSetup", "batch_inputs", "setup", "initial_soc", "prior", "recording_arrays", "run_ekf", "run_ekf_batch",
           "run_ekf_store", "temperature_array", "envelope_c"]


@dataclass(frozen=True, eq=False)
class EkfSetup:
    """Everything the kernels need for one model and settings."""

    tables: KernelTables
    prm: np.ndarray
    n_rc: int
    i_b: int
    i_h: int
    est_h: bool
    n_x: int
    names: tuple
    settings: FilterSettings
    i_e: int = -1
    i_r: int = -1

    def linearise(self, x, i_prev, i_next, dt_s, t_prev=np.nan, t_next=np.nan):
        """``(x_pred, F, G, Q, H, y_pred)`` of one step; see :func:`estimator.kernels.linearise`."""
        return K.linearise(self.tables.packed, self.n_rc, self.i_b, self.i_h, self.est_h, self.prm,
                           np.asarray(x, dtype=float), float(i_prev), float(i_next), float(dt_s),
                           float(t_prev), float(t_next))

    def transition(self, x, u_a, dt_s, t_c=np.nan):
        """State after one interval with mean measured current ``u_a`` (A) over ``dt_s`` (s)."""
        return K.transition(self.tables.packed, self.n_rc, self.i_b, self.i_h, self.prm,
                            np.asarray(x, dtype=float), float(u_a), float(dt_s), float(t_c))

    def measure(self, x, i_k, t_c=np.nan):
        """``(y_pred_v, H)`` at state ``x``."""
        return K.measure(self.tables.packed, self.n_rc, self.i_b, self.i_h, self.prm,
                         np.asarray(x, dtype=float), float(i_k), float(t_c))


_SETUP_CACHE: dict = {}


def setup(model, settings: FilterSettings | None = None, tables: KernelTables | None = None) -> EkfSetup:
    """Build the kernel inputs for ``model`` (a CellModel) and ``settings`` (default: from the model).

    Parameters
    ----------
    model : CellModel
        The cell model.
    settings : FilterSettings, optional
        Filter settings; default :func:`default_settings(model) <default_settings>`.
    tables : KernelTables, optional
        Precomputed kernel tables for ``model`` (then the result is not cached).

    Returns
    -------
    EkfSetup
        The kernel tables, the parameter vector ``prm`` (read-only), the state layout (indices of the
        RC voltages, bias, hysteresis and model-error states; ``n_x``; state names) and the settings.

    References
    ----------
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV
    battery packs", parts 1-3, J. Power Sources 134 (2004) (as cited in the module docstring).
    """
    s = default_settings(model) if settings is None else settings
    key = (id(model), s)
    hit = _SETUP_CACHE.get(key)
    if hit is not None and hit[0] is model and tables is None:
        return hit[1]
    tab = KernelTables.from_model(model, s.n_soc_grid) if tables is None else tables
    n_rc = tab.n_rc
    nx = 1 + n_rc
    i_b = -1
    if s.estimate_bias:
        i_b = nx
        nx += 1
    i_h = -1
    if tab.has_hysteresis:
        i_h = nx
        nx += 1
    i_r = -1
    if s.estimate_resistance:
        i_r = nx
        nx += 1
    i_e = -1
    if s.model_error_v > 0.0:
        i_e = nx
        nx += 1
    prm = np.zeros(K.N_PRM)
    prm[K.P_VN] = s.voltage_noise_v
    prm[K.P_IN] = s.current_noise_a
    prm[K.P_QSOC] = s.q_soc_per_s
    prm[K.P_QRC] = s.q_rc_v2_per_s
    prm[K.P_QB] = s.q_bias_a2_per_s
    prm[K.P_QH] = s.q_hyst_per_s
    prm[K.P_GATE] = s.gate_sigma
    prm[K.P_GREL] = s.gate_release_s
    prm[K.P_SMIN] = s.soc_min
    prm[K.P_SMAX] = s.soc_max
    prm[K.P_CAP] = tab.capacity_as
    prm[K.P_ETA] = tab.eta_charge
    prm[K.P_HG] = tab.hyst_gamma
    prm[K.P_HM] = tab.hyst_max_v
    prm[K.P_TMIN] = tab.t_min
    prm[K.P_TSTEP] = tab.t_step
    prm[K.P_SE] = s.model_error_v
    prm[K.P_TAUE] = s.model_error_tau_s
    prm[K.P_CAPERR] = s.capacity_error_frac
    prm[K.P_RERR] = s.resistance_error_ohm
    prm[K.P_VCORR] = s.noise_corr_s
    prm[K.P_ADAPT] = s.model_error_adapt_s
    prm[K.P_GAP] = s.gap_s
    prm[K.P_RCORR] = s.resistance_error_corr_s
    prm[K.P_RCERR] = s.rc_error_frac
    # temperature axis of the resistance error (kernels.resistance_sigma): R0 at 50 %, 25 degC
    prm[K.P_RERRX] = s.resistance_error_r0_exponent
    prm[K.P_R0REF] = float(K.table_value(tab.packed, 2, 0.5, 25.0, tab.t_min, tab.t_step))
    # operating envelope: the model's temperature tables plus a margin
    prm[K.P_TENV_LO], prm[K.P_TENV_HI] = envelope_c(tab)
    prm[K.P_VCUT] = float(model.v_min_v) + CUTOFF_MARGIN_V   # voltages next to the cut-off are not used
    prm[K.P_TDEF] = tab.default_temperature_c   # missing / implausible temperatures (25 but for one row)
    # input plausibility and health limits (kernels: check_inputs, ekf_run_monitored; the C code)
    v_span = float(model.v_max_v - model.v_min_v)
    prm[K.P_IMAX] = K.I_MAX_C * float(model.capacity_ah)
    prm[K.P_VLO] = max(0.0, float(model.v_min_v) - K.V_MARGIN * v_span)
    prm[K.P_VHI] = float(model.v_max_v) + K.V_MARGIN * v_span
    prm[K.P_VRCMAX] = v_span
    prm[K.P_P0SOC] = s.p0_soc
    prm[K.P_RSTATE] = 1.0 if i_r >= 0 else 0.0
    prm[K.P_QR] = s.q_resistance_per_s
    prm.setflags(write=False)
    out = EkfSetup(tab, prm, n_rc, i_b, i_h, bool(s.estimate_hysteresis) and tab.has_hysteresis, nx,
                   state_names(n_rc, i_b >= 0, i_h >= 0, i_e >= 0, i_r >= 0), s, i_e, i_r)
    if tables is None:
        if len(_SETUP_CACHE) > 32:
            _SETUP_CACHE.clear()
        _SETUP_CACHE[key] = (model, out)
    return out


def envelope_c(tab: KernelTables) -> tuple[float, float]:
    """The operating envelope ``(lo, hi)`` in degC: where the filter uses the voltage.

    A model with a temperature axis: its breakpoints widened to include 25 degC (where missing
    temperatures are placed), plus :data:`estimator.filters.kernels.ENVELOPE_MARGIN_C` on either
    side.  A model with one temperature row (a single-temperature model at its identified
    temperature, or a temperature-free one at 25 degC): that temperature plus and minus the
    margin, valid around the temperature it was identified at (a 0 degC model on a 0 degC drive
    uses the voltage; the same model at 25 degC counts charge only).

    Parameters
    ----------
    tab : KernelTables

    Returns
    -------
    lo, hi : float
        degC.
    """
    if tab.temp_grid.size == 1:
        t0 = float(tab.temp_grid[0])
        return t0 - K.ENVELOPE_MARGIN_C, t0 + K.ENVELOPE_MARGIN_C
    return (min(tab.t_min, K.DEFAULT_TEMP_C) - K.ENVELOPE_MARGIN_C,
            max(tab.t_max, K.DEFAULT_TEMP_C) + K.ENVELOPE_MARGIN_C)


def temperature_array(rec, default_c: float = K.DEFAULT_TEMP_C) -> np.ndarray:
    """Per-sample temperature (degC) with missing values at ``default_c`` (25 degC).

    Parameters
    ----------
    rec : Recording
    default_c : float
        Temperature for a missing sample, degC (the filters pass
        :attr:`KernelTables.default_temperature_c`: a single-temperature model's own temperature).

    Returns
    -------
    numpy.ndarray, shape (n,)
        Temperature, degC (``default_c`` where the recording has none or a sample is not finite).
    """
    if rec.temperature_c is None:
        return np.full(rec.n, float(default_c))
    t = np.asarray(rec.temperature_c, dtype=float)
    return np.where(np.isfinite(t), t, float(default_c))


def initial_soc(su: EkfSetup, rec, soc0: float | None = None, check: bool = True) -> tuple[float, float]:
    """Initial SOC and its sigma (see the module docstring for the rule).

    With ``soc0`` given and ``check`` True (the filters), the hand-over is checked against the
    first voltage sample (:func:`handover`); the baseline passes ``check=False`` and counts from
    ``soc0`` as given.

    Parameters
    ----------
    su : EkfSetup
        From :func:`setup`.
    rec : Recording
        The recording (voltage in V, current in A, temperature in degC).
    soc0 : float, optional
        Given initial SOC, fraction; default: read from the first finite voltage sample.
    check : bool
        Check a given ``soc0`` against the first voltage sample (:func:`handover`).

    Returns
    -------
    soc0 : float
        Initial SOC, fraction.
    sigma : float
        Its standard deviation, fraction.

    Raises
    ------
    ValueError
        When ``soc0`` is not finite, or is None and no voltage sample is finite.
    """
    s = su.settings
    v = np.asarray(rec.voltage_v, dtype=float)
    if soc0 is not None:
        soc0 = float(soc0)
        if not np.isfinite(soc0):
            raise ValueError(f"soc0 must be finite, got {soc0}")
        sig = s.p0_soc
        t_def = float(su.prm[K.P_TDEF])
        t0 = float(temperature_array(rec, t_def)[0]) if rec.n else t_def
        if check and rec.n and np.isfinite(v[0]) and not K.voltage_outside_envelope(su.prm, float(v[0]), t0):
            # hand-over check (a voltage the step uses, kernels.voltage_outside_envelope, as the C
            # step's v_env): widen the given sigma to cover a disagreement with the voltage
            zv, sv = _soc_from_voltage(su, v[0], float(rec.current_a[0]), t0)
            return handover(soc0, sig, zv, sv)
        return soc0, sig
    ok = np.flatnonzero(np.isfinite(v))
    if ok.size == 0:
        raise ValueError(f"recording {rec.name!r}: no finite voltage sample to start from; give soc0")
    k = int(ok[0])
    z, sig = K.soc_from_voltage_start(su.tables.packed, su.n_rc, su.prm, float(v[k]), float(rec.current_a[k]),
                                      float(temperature_array(rec, float(su.prm[K.P_TDEF]))[k]))
    return float(z), float(sig)


def handover(soc0: float, sig0: float, z_v: float, sig_v: float) -> tuple[float, float]:
    """Start ``(soc, sigma)`` from a handed-over SOC after the check against the first voltage sample.

    Covariance matching at the start (Mehra, IEEE Trans. Autom. Control 17, 1972, cited from
    memory): the difference ``d = soc0 - z_v`` between the given SOC and the one read from the
    voltage (``z_v`` with its own sigma ``sig_v``, large under load) should lie within their
    combined spread.  When it does, the start is ``(soc0, sig0)``.  When it does not, the given
    sigma is widened to ``w = sqrt(d^2 - sig_v^2)`` and the start is the inverse-variance mean of
    ``soc0`` (sigma ``w``) and ``z_v`` with the sigma ``w`` (capped at 0.5), so a wrong hand-over
    (a remembered SOC after an unknown rest, a swapped pack) is not defended by an over-confident
    prior, and the first linearisation is not made at a point the voltage has already ruled out.
    """
    d2 = (soc0 - z_v) ** 2 - sig_v ** 2
    if not d2 > sig0 * sig0:
        return float(soc0), float(sig0)
    w2 = d2
    z = (soc0 / w2 + z_v / sig_v ** 2) / (1.0 / w2 + 1.0 / sig_v ** 2)
    return float(z), float(min(np.sqrt(w2), 0.5))


def _soc_from_voltage(su: EkfSetup, v: float, i: float, t: float) -> tuple[float, float]:
    z, sig = K.soc_from_voltage(su.tables.packed, su.n_rc, su.prm, float(v), float(i), float(t))
    return float(z), float(sig)


def _prior(su: EkfSetup, z0: float, sig0: float):
    s = su.settings
    x0 = np.zeros(su.n_x)
    x0[0] = z0
    p0 = np.zeros((su.n_x, su.n_x))
    p0[0, 0] = sig0 ** 2
    for j in range(su.n_rc):
        p0[1 + j, 1 + j] = s.p0_rc_v ** 2
    if su.i_b >= 0:
        p0[su.i_b, su.i_b] = s.p0_bias_a ** 2
    if su.i_h >= 0:
        p0[su.i_h, su.i_h] = s.p0_hyst ** 2 if su.est_h else 0.0
    if su.i_r >= 0:
        p0[su.i_r, su.i_r] = s.p0_resistance ** 2
    if su.i_e >= 0:
        p0[su.i_e, su.i_e] = s.model_error_v ** 2
    return x0, p0


def prior(su: EkfSetup, z0: float, sig0: float):
    """Initial state ``x0`` (n_x,) and covariance ``P0`` (n_x, n_x) for SOC ``z0`` with sigma ``sig0``.

    Parameters
    ----------
    su : EkfSetup
        From :func:`setup` (state layout and settings).
    z0 : float
        Initial SOC, fraction.
    sig0 : float
        Its standard deviation, fraction.

    Returns
    -------
    x0 : numpy.ndarray, shape (n_x,)
        Initial state (SOC fraction, RC voltages in V, then bias in A / hysteresis / model error in V
        where present).
    p0 : numpy.ndarray, shape (n_x, n_x)
        Initial covariance in the squared units of the states.
    """
    return _prior(su, z0, sig0)


def recording_arrays(rec, default_temperature_c: float = K.DEFAULT_TEMP_C):
    """``(time_s, current_a, voltage_v, temperature_c)`` as contiguous float arrays for the kernels.

    Parameters
    ----------
    rec : Recording
    default_temperature_c : float
        Temperature for missing samples, degC (pass ``su.prm[kernels.P_TDEF]`` of the setup, as the
        single-run filter does).

    Returns
    -------
    time_s, current_a, voltage_v, temperature_c : numpy.ndarray, shape (n,)
        s, A (positive on discharge), V and degC (missing temperatures at ``default_temperature_c``).
    """
    return _arrays(rec, default_temperature_c)


def _arrays(rec, default_temperature_c: float = K.DEFAULT_TEMP_C):
    return (np.ascontiguousarray(rec.time_s, dtype=float), np.ascontiguousarray(rec.current_a, dtype=float),
            np.ascontiguousarray(rec.voltage_v, dtype=float), temperature_array(rec, default_temperature_c))


def checked_inputs(su: EkfSetup, rec):
    """The recording after the filter step's input checks (:func:`estimator.filters.kernels.check_inputs`).

    Returns ``(recording, status)``: held currents, missing voltages and default temperatures in
    place of implausible samples, and the per-sample status bits (``ST_REJ_*``).
    """
    t, i, v, tc = _arrays(rec, float(su.prm[K.P_TDEF]))
    n = rec.n
    ci, cv, ct, st = np.empty(n), np.empty(n), np.empty(n), np.zeros(n, dtype=np.int64)
    K.check_inputs(i, v, tc, su.prm, ci, cv, ct, st)
    return rec.with_(current_a=ci, voltage_v=cv, temperature_c=ct), st


def _run(model, rec, settings, soc0, store, monitor=False):
    su = setup(model, settings)
    status = healthy = base = None
    if monitor:
        rec_in = rec
        rec, status = checked_inputs(su, rec)
    z0, sig0 = initial_soc(su, rec, soc0)
    if monitor:  # the fallback baseline starts where the filter starts (after the hand-over check)
        from socfuse.estimator.filters.coulomb import run_coulomb
        base = run_coulomb(model, rec, su.settings, start=(z0, sig0))
    x0, p0 = _prior(su, z0, sig0)
    n, nx = rec.n, su.n_x
    x_out = np.empty((n, nx))
    sig, vp, inn, sv = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    shape = (n, nx, nx) if store else (1, nx, nx)
    p_out, pp_out, f_out = np.empty(shape), np.empty(shape), np.empty(shape)
    t, i, v, tc = _arrays(rec, float(su.prm[K.P_TDEF]))
    if monitor:
        healthy = np.zeros(n, dtype=np.int64)
        gated = K.ekf_run_monitored(t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, x0,
                                    p0, np.ascontiguousarray(base.soc), np.ascontiguousarray(base.soc_sigma), x_out,
                                    sig, vp, inn, sv, status, healthy)
        for t_rs, _, _ in base.reseeds:
            status[np.searchsorted(rec.time_s, t_rs)] |= K.ST_RESEED
        ok = healthy.astype(bool)
        soc = np.where(ok, x_out[:, 0], base.soc)
        soc_sigma = np.where(ok, sig, base.soc_sigma)
        meta = {"filter_soc_sigma": sig, "n_fallback": int(np.count_nonzero(~ok)),
                "n_reset": int(np.count_nonzero(status & K.ST_RESET)),
                "n_rejected": int(np.count_nonzero(status & (K.ST_REJ_CURRENT | K.ST_REJ_VOLTAGE | K.ST_REJ_TEMP)))}
        tr = make_trace(model, rec_in, "ekf", soc, soc_sigma, vp, inn, sv, x_out, gated, (), su.names, None, meta,
                        status=status)
        return tr, None
    gated = K.ekf_run(t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, x0, p0,
                      x_out, sig, vp, inn, sv, store, p_out, pp_out, f_out)
    tr = make_trace(model, rec, "ekf", x_out[:, 0], sig, vp, inn, sv, x_out, gated, (), su.names,
                    p_out if store else None)
    return tr, (p_out, pp_out, f_out) if store else None


def run_ekf(model, rec, settings: FilterSettings | None = None, soc0: float | None = None,
            store_covariance: bool = False, monitor: bool = False) -> Trace:
    """Run the EKF over one recording.

    With ``monitor`` the run is the exported C code's filter step: input checks, covariance floor,
    reset from the baseline on non-finite or unphysical states, NIS health flag, and the output
    (``soc``, ``soc_sigma``) falls back to the coulomb-counting baseline while unhealthy; the
    filter's own SOC stays in ``states[:, 0]``, its sigma in ``metadata["filter_soc_sigma"]``, the
    per-sample status bits (``estimator.filters.kernels.ST_*``) in ``Trace.status``.
    ``store_covariance`` is not available with ``monitor``.

    Parameters
    ----------
    model : models.CellModel
    rec : models.Recording
    settings : FilterSettings, optional (default :func:`default_settings(model)`)
    soc0 : float, optional  initial SOC (fraction); else from the OCV at the first sample
    store_covariance : bool  keep the posterior covariance (N, n_x, n_x) in ``Trace.covariance``
    monitor : bool  run the monitored step of the exported C code (see above)

    Returns
    -------
    Trace
        ``method="ekf"``: SOC (fraction) and its sigma, predicted voltage (V), innovation (V) and
        its variance (V^2), the states (N, n_x), the energy SOC and remaining energy (Wh), the
        error against ``soc_ref`` when present, and the number of gated samples.

    Raises
    ------
    ValueError
        For ``monitor`` together with ``store_covariance``, or a bad ``soc0``.

    References
    ----------
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV
    battery packs", parts 1-3, J. Power Sources 134 (2004) (as cited in the module docstring).
    """
    if monitor and store_covariance:
        raise ValueError("store_covariance is not available for a monitored run")
    return _run(model, rec, settings, soc0, store_covariance, monitor)[0]


def run_ekf_store(model, rec, settings=None, soc0=None):
    """EKF run that also returns ``(P_post, P_prior, F)``, each (N, n_x, n_x), for the smoother.

    Parameters
    ----------
    model : CellModel
    rec : Recording
    settings : FilterSettings, optional
        Default :func:`default_settings(model) <default_settings>`.
    soc0 : float, optional
        Initial SOC, fraction; default from the first voltage sample.

    Returns
    -------
    trace : Trace
        As :func:`run_ekf`, with ``covariance`` set.
    matrices : tuple of numpy.ndarray
        ``(P_post, P_prior, F)``, each shape (N, n_x, n_x): posterior and prior covariance and the
        state transition Jacobian mapping sample k-1 to k.
    """
    return _run(model, rec, settings, soc0, True)


def batch_inputs(recs, soc0s, capacity_scales, noun: str = "recordings"):
    """Check the per-run inputs of a batched EKF run (the one check for every batch entry point).

    Parameters
    ----------
    recs : sequence of Recording
        One recording per run.
    soc0s : float, None or sequence
        Initial SOC (fraction) per run, or one value (or None: from the first voltage) for all.
    capacity_scales : array_like (M,) or None
        Per-run multiplier of the model capacity (positive; None = 1).
    noun : str
        What a run is called in the error messages ("recordings", "cells").

    Returns
    -------
    (list, int, list, numpy.ndarray)
        The recordings, their count ``M``, the ``M`` initial SOCs and the ``M`` capacity scales.
    """
    recs = list(recs)
    m = len(recs)
    if soc0s is None or np.isscalar(soc0s):
        soc0s = [soc0s] * m
    if len(soc0s) != m:
        raise ValueError(f"{len(soc0s)} soc0 values for {m} {noun}")
    scales = np.ones(m) if capacity_scales is None else np.ascontiguousarray(capacity_scales, dtype=float)
    if scales.shape != (m,) or np.any(~(scales > 0)):
        raise ValueError(f"capacity_scales must be one positive number per {noun[:-1]}")
    return recs, m, soc0s, scales


def run_ekf_batch_raw(model, recs, settings: FilterSettings | None = None, soc0s=None,
                     capacity_scales=None, tables: KernelTables | None = None) -> dict:
    """The batched EKF (numba ``prange`` over recordings), returning the raw arrays.

    For loops that need only the states and innovations (tuning, Monte Carlo), without building
    :class:`Trace` objects or the energy SOC.

    Parameters
    ----------
    recs : sequence of Recording (lengths may differ)
    soc0s : None, float or sequence of (float or None), optional  per-recording initial SOC
    capacity_scales : None or sequence of float, optional
        Per-recording multiplier of the model capacity the filter assumes (Monte Carlo).
    tables : KernelTables, optional
        ``KernelTables.from_model(model, settings.n_soc_grid)`` built once by a caller that runs
        many settings over one model (tuning); default: built (or cached) here.

    Returns
    -------
    dict with ``offsets`` (M+1,), ``states`` (sum N, n_x), ``soc``, ``soc_sigma``,
    ``voltage_pred_v``, ``innovation_v``, ``innovation_var_v2`` (all concatenated over the
    recordings), ``n_gated`` (M,), ``capacity_scales`` (M,) and ``setup``.
    """
    recs, m, soc0s, scales = batch_inputs(recs, soc0s, capacity_scales, "recordings")
    su = setup(model, settings, tables)
    lens = np.array([r.n for r in recs], dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)
    nx = su.n_x
    x0s = np.empty((m, nx))
    p0s = np.empty((m, nx, nx))
    for r, (rec, z) in enumerate(zip(recs, soc0s)):
        x0s[r], p0s[r] = _prior(su, *initial_soc(su, rec, z))
    n = int(offsets[-1])
    x_out = np.empty((n, nx))
    sig, vp, inn, sv = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    gated = np.zeros(m, dtype=np.int64)
    if m:
        cat = [np.ascontiguousarray(np.concatenate(a)) for a in zip(*[_arrays(r) for r in recs])]
        K.ekf_run_batch(offsets, *cat, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, scales,
                        x0s, p0s, x_out, sig, vp, inn, sv, gated)
    return {"offsets": offsets, "states": x_out, "soc": x_out[:, 0].copy(), "soc_sigma": sig,
            "voltage_pred_v": vp, "innovation_v": inn, "innovation_var_v2": sv, "n_gated": gated,
            "capacity_scales": scales, "setup": su}


def run_ekf_batch(model, recs, settings: FilterSettings | None = None, soc0s=None, capacity_scales=None) -> list:
    """Run the EKF over many recordings of one model in parallel (numba ``prange``).

    Same arguments as :func:`run_ekf_batch_raw`; returns a list of Trace, equal to running
    :func:`run_ekf` one by one.

    Parameters
    ----------
    model : CellModel
        The cell model (one for all recordings).
    recs : sequence of Recording
        The recordings (lengths may differ).
    settings : FilterSettings, optional
        Default :func:`default_settings(model) <default_settings>`.
    soc0s : None, float or sequence of (float or None), optional
        Initial SOC per recording, fraction; None: from the first voltage sample.
    capacity_scales : sequence of float, optional
        Per-recording multiplier of the capacity the filter assumes.

    Returns
    -------
    list of Trace
        One per recording, in order (empty for no recordings).

    References
    ----------
    G. L. Plett, "Extended Kalman filtering for battery management systems of LiPB-based HEV
    battery packs", parts 1-3, J. Power Sources 134 (2004) (as cited in the module docstring).
    """
    recs = list(recs)
    if not recs:
        return []
    raw = run_ekf_batch_raw(model, recs, settings, soc0s, capacity_scales)
    off, x_out, scales, su = raw["offsets"], raw["states"], raw["capacity_scales"], raw["setup"]
    sig, vp, inn, sv, gated = (raw[k] for k in ("soc_sigma", "voltage_pred_v", "innovation_v",
                                                "innovation_var_v2", "n_gated"))
    out = []
    for r, rec in enumerate(recs):
        a, b = off[r], off[r + 1]
        mdl = model if scales[r] == 1.0 else model.with_(capacity_ah=model.capacity_ah * scales[r])
        out.append(make_trace(mdl, rec, "ekf", x_out[a:b, 0], sig[a:b], vp[a:b], inn[a:b], sv[a:b], x_out[a:b],
                              int(gated[r]), (), su.names))
    return out
