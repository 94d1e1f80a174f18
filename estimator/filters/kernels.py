"""Compiled kernels: EKF step/run, coulomb counting with OCV reseed, batched runs (the only copy).

Everything here is plain scalar numba code (``@njit(cache=True, error_model="numpy")``, explicit loops over the
small state, no allocation inside the per-sample loops) and also runs as pure Python under
``NUMBA_DISABLE_JIT=1``.  Python wrappers live in :mod:`estimator.ekf` and
:mod:`estimator.coulomb`; the C export mirrors these functions line by line.

Model and sampling rule (DEVELOPERS.md, models/thevenin.py): over ``[t_k, t_k+1]`` the
current is ``u_k = (i_k + i_k+1)/2 - b`` (``b`` the bias state when estimated); with
parameters at ``(z_k, T_k)``::

    z'   = z - eta(u) u dt / Q                       eta = 1 (u >= 0), eta_charge (u < 0)
    v_j' = a_j v_j + R_j (1 - a_j) u                 a_j = exp(-dt / tau_j)   (exact ZOH)
    b'   = b
    h'   = e h - (1 - e) sgn(u)                      e = exp(-|eta u gamma dt / Q|)  (Plett 2004, part 2)
    r'   = r                                         (resistance-scale state)
    m'   = a_m m                                     a_m = exp(-dt / tau_m)   (model-error state)
    y_k  = OCV(z_k, T_k) + M h_k - sum_j v_j,k - R0(z_k, T_k) (1 + r_k) (i_k - b_k) + m_k

Resistance scale (the state ``r``, when ``prm[P_RSTATE] > 0``): the series resistance the filter
uses is the table's times ``1 + r``, ``r`` a random walk (density ``prm[P_QR]``, 1/s) with
``H[r] = -R0 (i_k - b_k)``.  Joint estimation of a model parameter in the state vector (Plett, J.
Power Sources 134 (2004) 277-292, part 3, sec. on joint estimation, cited from memory): the
identified R0 is that of the pulse test's temperature and age, and on a cold drive the cell's core
runs ahead of its case sensor while its resistance falls by a third; an R0 that is too high reads
as a SOC too high (the voltage under load looks higher than the model expects).  Such an error is
proportional to the current, so a dynamic drive tells it apart from a SOC error (a constant
offset); benchmarks/generalisation.py gives the effect on every reference case (the README table).  Its ``F`` entry is 1 and its ``G`` entry 0, so the covariance algebra is
unchanged; its mean is held to :data:`R_SCALE_LIMITS` at each prediction (R0 between half and
twice its table), so a voltage-sensor fault cannot drive it to a negative resistance.

Current-dependent resistance: when the packed tables carry the charge-transfer rows
(:func:`tab_n_rc`), the first RC pair is driven by ``R_1 u + c(u, T)`` instead of ``R_1 u``::

    v_1' = a_1 v_1 + (1 - a_1) (R_1 u + c(u, T_k))

with ``c`` the model's charge-transfer excess (symmetric Butler-Volmer over the chord the linear
tables hold; :class:`models.thevenin.ChargeTransfer`, Bard and Faulkner 2001, ch. 3), whose
arithmetic is :func:`models.simulation.charge_transfer_v`, the simulator's own.  Linearisation:
``G[1] = (1 - a_1) (R_1 + dc/du)`` (so the bias column of ``F`` carries it too); ``dc/dSOC = 0``
(no SOC axis), so ``F`` is otherwise unchanged and ``H`` is untouched.

Rate invariance (the model-error state ``m``).  The equivalent circuit's voltage error is not
white: OCV-table error, unmodelled hysteresis and RC-dynamics mismatch stay for tens to
thousands of seconds.  Treating it as white noise per sample gives a 10 Hz recording ten times
the confidence of a 1 Hz one.  It is modelled instead as a first-order Gauss-Markov process
(coloured measurement noise handled by state augmentation: Gelb (ed.), Applied Optimal
Estimation, MIT Press 1974, sec. 4.5; Bar-Shalom, Li, Kirubarajan, Estimation with Applications
to Tracking and Navigation, Wiley 2001, sec. 8.3), magnitude ``sigma_m`` (V) and correlation
time ``tau_m`` (s), discretised exactly: ``a_m = exp(-dt/tau_m)``, ``q_m = sigma_m^2 (1 -
a_m^2)``, so its statistics do not depend on the sample interval.  The SOC information the
voltage carries per second is then bounded by the error's low-frequency density ``2 sigma_m^2
tau_m`` whatever the rate; the white ``voltage_noise_v`` is the sensor's own noise.  Where the
OCV curve is flat (LFP plateaus) ``dOCV/dSOC`` is small next to ``sigma_m``, the gain on SOC
vanishes and the filter counts charge with a growing sigma instead of chasing the voltage.
The state exists when ``prm[P_SE] > 0`` and is always the last one (:func:`error_index`).

Resistance uncertainty: the white measurement variance of sample ``k`` is ``R_k = sigma_v^2 +
(sigma_R i_x)^2`` with ``i_x`` the larger in magnitude of ``i_k`` and ``i_k-1`` (``sigma_R`` =
``prm[P_RERR]``, ohm, at 25 degC, scaled with R0 over temperature by :func:`resistance_sigma`): an error in R0 (and in the fast part of the RC response) shows at once when
the current steps, in proportion to the current, so a voltage under heavy load says less about the
OCV than one near rest (heteroscedastic noise, common practice, no source).  The previous current
counts because a BMS does not sample current and voltage at the same instant: at the first
sample after a step to rest the voltage still carries part of the load's ``R0 i`` drop (on the
Panasonic Cycle_1 a wrong start handed over under load was pulled a further 23 points away by one
such edge sample, 104 mV against an S of 52 mV; RMSE after 600 s 2.40 -> 0.81 points with it).  The gate uses the same ``S``.  Both white parts are band-limited:
samples closer than ``tau_v = prm[P_VCORR]`` (s) are not independent, so the sensor part is
multiplied by ``max(1, tau_v / dt_k)``, and the resistance part by ``max(1, tau_R / dt_k)`` with
its own ``tau_R = prm[P_RCORR]`` (:func:`resistance_factor`: it follows the current, which holds a
level for seconds) (:func:`white_factor`; "noise scaled by the correlation time", the
equivalent-bandwidth argument of Gelb 1974, sec. 3.8, cited from memory): a recording sampled
faster than ``1 / tau_v`` (or interpolated to a higher rate) carries no more white-noise
information per second than one sampled at ``1 / tau_v``.  The first sample uses factor 1.  The
white current noise of an interval is scaled by the same factor (its charge error over a time
``T`` is then ``sigma_i^2 tau_v T`` at any rate above ``1 / tau_v``), in the EKF and the baseline.

Polarisation uncertainty: the RC pairs' resistances and time constants come from the same pulse
fits as R0, with the same scatter, and an error in them shows in proportion to the polarisation
they predict.  So the resistance part of ``R_k`` also carries ``(sigma_P sum_j |v_j|)^2``
(:func:`polarisation_variance`, ``sigma_P = prm[P_RCERR]``, a fraction; ``v_j`` the RC voltages of
the state being measured), band-limited by ``tau_R`` like the R0 part.  A model-error state cannot
stand in for it: that error is a property of the load history, large after a long heavy load or in
the cold, and near zero at rest.  Without it, at 0 degC (where the slow pair holds about 0.1 V on a
drive) a 30-point wrong start was read as certain with the wrong split between SOC and
polarisation (Panasonic 18650PF 0 degC Cycle_1: 3.6 points after 600 s, true SOC inside +-3 sigma
39 % of the time; 0.5 points and 100 % with it).  It is a Schmidt-style consider term in its
simplest form: the parameter error is not estimated, only its effect on the measurement counted
(Schmidt, NASA TN D-3139, 1966, cited from memory).

Capacity uncertainty: the SOC variance grows by ``capacity_error^2 |dz|`` per interval
(``|dz| = |eta u dt / Q|`` the SOC moved), so a 1-sigma capacity error ``c`` reaches a SOC sigma of
``c`` after a full discharge (a random-walk stand-in for the systematic error ``c * throughput``;
it over-states the error for partial throughput, common practice, no source).

Jacobian choice: ``H[soc] = dOCV/dSOC`` only.  The term ``-i dR0/dSOC`` of the exact derivative
is left out, as the SOC dependence of ``a_j, R_j`` is left out of ``F``: identified R0/RC tables
are noisy over SOC, and at 10-20 A the slope of that noise outweighs the OCV slope and steers
SOC by table noise (on the Panasonic 10 degC drive cycles dropping it alone took the SOC error
from 12.6 to 2.7 points).  The predicted voltage still uses R0 at the estimated SOC.

The EKF is that of Plett, J. Power Sources 134 (2004) 277-292 (part 3): ``F = dx'/dx`` ignores
the SOC dependence of ``a_j, R_j`` (as Plett does), ``G = dx'/du``, ``Q_k = G G^T
sigma_i^2 + diag(q) dt`` (plus the model-error and capacity terms above), ``H`` from the
tabulated OCV slope, and the update is ``P+ = P - K S K^T = P - (P H)(P H)^T / S``, evaluated
on the lower triangle and mirrored, so ``P`` is exactly symmetric.  For the optimal gain this
equals the Joseph form ``(I - K H) P (I - K H)^T + K R K^T`` (Bucy and Joseph 1968) in exact
arithmetic; in float64 the two agree to rounding (tests compare with filterpy's Joseph-form
update at 1e-9) at a third of the cost.  The single-precision C export keeps the Joseph form.

Layout of the parameter vector ``prm`` (float64): see the ``P_*`` constants.  The state
layout is ``[soc, v_rc_1..n, (bias), (h), (r), (m)]`` with ``i_b`` / ``i_h`` / ``i_r`` the indices of
the optional states (-1 when absent), the resistance scale ``r`` before the model-error state and
the model-error state ``m`` last when ``prm[P_SE] > 0``.
The exponential cache of the kernels has ``2 n_rc + 3`` entries (``cache_size``).
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit, prange
from numba import typeof as _nb_typeof
from numba.core import types as _nb_types

from socfuse.models.simulation import charge_transfer_v

__all__ = ["P_VN", "P_IN", "P_QSOC", "P_QRC", "P_QB", "P_QH", "P_GATE", "P_SMIN", "P_SMAX", "P_CAP",
           "P_ETA", "P_HG", "P_HM", "P_TMIN", "P_TSTEP", "P_GREL", "P_SE", "P_TAUE", "P_CAPERR", "P_RERR", "P_VCORR", "P_IMAX", "P_VLO", "P_VHI",
           "P_VRCMAX", "P_P0SOC", "P_ADAPT", "P_GAP", "P_RCORR", "P_TENV_LO", "P_TENV_HI", "P_TDEF", "P_RCERR", "P_RERRX", "P_R0REF", "P_VCUT", "N_PRM", "voltage_outside_envelope", "polarisation_variance", "resistance_sigma", "resistance_sigma_at", "ST_ENVELOPE", "ENVELOPE_MARGIN_C", "resistance_factor", "measurement_variance", "gap_variance", "ST_GAP", "check_inputs", "gate_rejects", "project_soc", "health_step", "ekf_run_monitored", "STATUS_BITS", "ST_REJ_DT",
           "ST_REJ_CURRENT", "ST_REJ_VOLTAGE", "ST_REJ_TEMP", "ST_GATED", "ST_FALLBACK", "ST_RESET",
           "ST_WAITING", "ST_RESEED", "P_FLOOR", "H_MAX", "BIG", "I_MAX_C", "V_MARGIN", "T_LIMITS_C",
           "white_factor", "layout", "layout_size", "specialised",
           "error_index", "cache_size", "NIS_ALPHA", "NIS_CAP", "NIS_HIGH", "NIS_LOW", "table_value", "tab_n_rc", "ocv_lookup",
           "ocv_inverse", "measure", "transition", "linearise", "ekf_run", "ekf_run_batch", "coulomb_run"]

P_VN, P_IN, P_QSOC, P_QRC, P_QB, P_QH, P_GATE, P_SMIN, P_SMAX = 0, 1, 2, 3, 4, 5, 6, 7, 8
P_CAP, P_ETA, P_HG, P_HM, P_TMIN, P_TSTEP, P_GREL = 9, 10, 11, 12, 13, 14, 15
P_SE, P_TAUE, P_CAPERR, P_RERR, P_VCORR = 16, 17, 18, 19, 20
P_IMAX, P_VLO, P_VHI, P_VRCMAX, P_P0SOC, P_ADAPT, P_GAP, P_RCORR = 21, 22, 23, 24, 25, 26, 27, 28
P_TENV_LO, P_TENV_HI = 29, 30
P_TDEF = 31  # temperature used for a missing or implausible sample, degC (estimator.filters.ekf.setup)
P_RCERR = 32  # relative sigma of the RC polarisation (measurement_variance)
P_RERRX = 33  # exponent of the resistance error's temperature axis (resistance_sigma)
P_R0REF = 34  # R0 of the kernel tables at 50 % SOC, 25 degC, ohm (resistance_sigma)
P_VCUT = 35   # voltages below this are not used (V): the cut-off plus models.validity.CUTOFF_MARGIN_V
P_RSTATE = 36  # 1: the series-resistance scale state r exists (resistance_index), 0: it does not
P_QR = 37      # random-walk density of r, 1/s
N_PRM = 38
DEFAULT_TEMP_C = 25.0

# Consistency monitor (shared by the EKF kernel, the UKF and the exported C code): a running mean
# of the normalised innovation squared, NIS = innov^2 / S, whose chi-square(1) mean is 1 for a
# consistent filter (Bar-Shalom, Li, Kirubarajan 2001, sec. 5.4).  Constants: common practice, no
# source.
NIS_ALPHA = 1.0 / 64.0   # weight of the newest NIS (running mean over about 64 updates)
NIS_CAP = 25.0           # one sample adds at most a 5-sigma innovation
NIS_HIGH = 9.0           # mean NIS 9 = innovations of 3 sigma on average: the filter is inconsistent
NIS_LOW = 4.0            # ... healthy again below this (hysteresis of the health flag)
ADAPT_CAP = 8.0          # adaptive model-error variance: at most this many times sigma_m^2 added (3 sigma_m)
P_FLOOR = 1e-12          # diagonal floor of P for estimated states (monitored runs)
H_MAX = 1.5              # |hysteresis state| above this is not physical (it lives in -1..1)
R_SCALE_LIMITS = (-0.5, 1.0)  # the resistance-scale state is held to R0 between half and twice its table
#                               (a voltage fault must not drive it to a negative resistance; common practice,
#                               no source)
BIG = 1e30               # |value| at or above this counts as not finite (the C code's float range check)
# input plausibility (common practice, no source): current within 100 C, voltage within half the
# model's voltage window beyond either limit, temperature within -60..150 degC
I_MAX_C = 100.0
V_MARGIN = 0.5
T_LIMITS_C = (-60.0, 150.0)

# Status bits of one step, shared with the exported C code (socfuse_ekf.h is generated from these)
ST_REJ_DT = 0x01        # dt not finite or <= 0: whole sample ignored (C API only; recordings cannot have it)
ST_REJ_CURRENT = 0x02   # current NaN or implausible: last valid current held
ST_REJ_VOLTAGE = 0x04   # voltage NaN or implausible: predict only
ST_REJ_TEMP = 0x08      # temperature implausible: default temperature used
ST_GATED = 0x10         # innovation outside the gate: update skipped
ST_FALLBACK = 0x20      # output is the coulomb-counting baseline
ST_RESET = 0x40         # filter re-initialised from the baseline (non-finite or unphysical values)
ST_WAITING = 0x80       # not started: no valid voltage yet and no initial SOC given (C API)
ST_RESEED = 0x100       # baseline reseeded from the OCV after a rest
ST_GAP = 0x200          # a logging gap ended here: the current in it was unknown, SOC variance widened
ST_ENVELOPE = 0x400     # temperature outside the model's tables (beyond a margin), or a voltage next to the
#                         cut-off (voltage_outside_envelope): voltage not used
# operating envelope: a voltage measured more than this far outside the model's temperature tables
# is not used (counting only, sigma grows) rather than extrapolated with confidence (common
# practice, no source)
ENVELOPE_MARGIN_C = 10.0
STATUS_BITS = {"rej_dt": ST_REJ_DT, "rej_current": ST_REJ_CURRENT, "rej_voltage": ST_REJ_VOLTAGE,
               "rej_temp": ST_REJ_TEMP, "gated": ST_GATED, "fallback": ST_FALLBACK, "reset": ST_RESET,
               "waiting": ST_WAITING, "reseed": ST_RESEED, "gap": ST_GAP, "envelope": ST_ENVELOPE}


@njit(cache=True, error_model="numpy", inline="always")
def white_factor(prm, dt):
    """Factor on the white measurement variance for a sample ``dt`` s after the previous one."""
    c = prm[P_VCORR]
    if dt > 0.0 and c > dt:
        return c / dt
    return 1.0


@njit(cache=True, error_model="numpy", inline="always")
def resistance_factor(prm, dt):
    """Factor on the resistance-error variance ``(sigma_R i)^2`` for a sample ``dt`` s after the last.

    That error follows the current, which in a drive holds a level for seconds to tens of seconds:
    samples closer than ``prm[P_RCORR]`` s are not independent (as :func:`white_factor`).
    """
    c = prm[P_RCORR]
    if dt > 0.0 and c > dt:
        return c / dt
    return 1.0


@njit(cache=True, error_model="numpy", inline="always")
def measurement_variance(vn2, re2, wf, wr, i_k, i_prev, pv):
    """Variance of one voltage measurement, V^2 (the one rule of the EKF kernels).

    Parameters
    ----------
    vn2, re2 : float
        Voltage-noise variance (V^2) and resistance-error variance (ohm^2).
    wf, wr : float
        Band-limit factors of the sensor and the resistance error for this interval
        (:func:`white_factor`, :func:`resistance_factor`; 1 at the first sample).
    i_k, i_prev : float
        This and the previous current sample, A.  The resistance error acts on the larger of the
        two: at a current edge the voltage and current channels are not sampled at the same
        instant (common practice, no source).
    pv : float
        Polarisation variance of this sample, V^2 (:func:`polarisation_variance`).

    Returns
    -------
    float
        ``vn2 wf + re2 i^2 wr + pv wr`` with ``i`` the larger current in magnitude.
    """
    ik = i_prev if abs(i_prev) > abs(i_k) else i_k
    return vn2 * wf + re2 * ik * ik * wr + pv * wr


@njit(cache=True, error_model="numpy", inline="always")
def resistance_sigma(tab, prm, it0, it1, wt):
    """Sigma of the series-resistance error at a temperature, ohm (the one rule of the kernels).

    ``prm[P_RERR] * (R0(50 %, T) / prm[P_R0REF]) ** prm[P_RERRX]`` with ``R0(50 %, T)`` from the
    kernel tables on temperature rows ``it0``, ``it1`` with weight ``wt`` (:func:`_temp_search`)
    and ``prm[P_R0REF]`` the same at 25 degC: with exponent 1 the error stays the same fraction of
    the resistance at every temperature (the pulse resistances scatter by a fraction of their
    value; R0 at 0 degC is about 2.7 times its 25 degC value on the Panasonic 18650PF).  Exponent 0
    (or no temperature axis) gives ``prm[P_RERR]``.  The filters call it when the temperature
    changes.

    Parameters
    ----------
    tab : ndarray
        Kernel tables.
    prm : ndarray (N_PRM,)
    it0, it1 : int
        Temperature rows.
    wt : float
        Weight of row ``it1``.

    Returns
    -------
    float
        Resistance sigma, ohm.
    """
    sr = prm[P_RERR]
    e = prm[P_RERRX]
    if e == 0.0 or sr == 0.0 or not (prm[P_R0REF] > 0.0):
        return sr
    is0, ws = _soc_index(tab, 0.5)
    ratio = _bil(tab, 2, it0, it1, wt, is0, ws) / prm[P_R0REF]
    if not (ratio > 0.0):
        return sr
    if e == 1.0:
        return sr * ratio
    return sr * ratio ** e


@njit(cache=True, error_model="numpy", inline="always")
def voltage_outside_envelope(prm, v, t_c):
    """Whether a finite voltage sample ``v`` (V) at temperature ``t_c`` (degC) is left out (predict only).

    Outside the operating envelope: a temperature outside ``[prm[P_TENV_LO], prm[P_TENV_HI]]``
    (the model's tables plus :data:`ENVELOPE_MARGIN_C`), or a voltage below ``prm[P_VCUT]``, the
    discharge cut-off plus :data:`socfuse.models.validity.CUTOFF_MARGIN_V` (there the cell's
    voltage collapses faster than an equivalent circuit says, or is held at the limit; the
    identification's refinement leaves the same samples out).  The one rule of the EKF, the batch
    kernel, the UKF and the exported C step; the trace marks such samples ``envelope``.
    """
    return v == v and (not (prm[P_TENV_LO] <= t_c <= prm[P_TENV_HI]) or v < prm[P_VCUT])


@njit(cache=True, error_model="numpy")
def resistance_sigma_at(tab, prm, t_c):
    """:func:`resistance_sigma` at temperature ``t_c`` (degC; NaN = 25 degC), ohm."""
    it0, it1, wt = _temp_search(tab, t_c, 0)
    return resistance_sigma(tab, prm, it0, it1, wt)


@njit(cache=True, error_model="numpy", inline="always")
def polarisation_variance(prm, x, n_rc):
    """Variance of the RC polarisation's parameter error, V^2: ``(prm[P_RCERR] sum_j |x[1 + j]|)^2``.

    Parameters
    ----------
    prm : ndarray (N_PRM,)
    x : ndarray (n_x,)
        The predicted state (RC voltages in V at ``x[1:1 + n_rc]``).
    n_rc : int
    """
    c = prm[P_RCERR]
    if not c > 0.0:
        return 0.0
    pol = 0.0
    for j in range(n_rc):
        pol += abs(x[1 + j])
    return (c * pol) * (c * pol)


@njit(cache=True, error_model="numpy", inline="always")
def gap_variance(prm, dt, i_lo, i_hi):
    """SOC variance added over an interval of ``dt`` s that is a logging gap (else 0).

    An interval longer than ``prm[P_GAP]`` s (> 0) is a gap: the current inside it is unknown.
    The charge moved lies anywhere between ``i_lo dt`` and ``i_hi dt`` (the current range seen in
    the recording so far); taken as uniform there, the SOC variance grows by ``(dt (i_hi - i_lo) /
    Q)^2 / 12`` (at most 0.25, the variance of a SOC anywhere in 0..1), so the filter (and the
    baseline) neither trust the interpolated count nor claim a tight sigma; the voltage afterwards
    pulls the filter back (common practice, no source).
    """
    g = prm[P_GAP]
    if not (g > 0.0 and dt > g):
        return 0.0
    w = dt * (i_hi - i_lo) / prm[P_CAP]
    v = w * w / 12.0
    return v if v < 0.25 else 0.25


@njit(cache=True, error_model="numpy", inline="always")
def error_index(nx, prm):
    """Index of the model-error state (the last one) or -1 when it is off (``prm[P_SE] == 0``)."""
    return nx - 1 if prm[P_SE] > 0.0 else -1


@njit(cache=True, error_model="numpy", inline="always")
def resistance_index(nx, prm):
    """Index of the resistance-scale state (just before the model-error state, else last) or -1
    when it is off (``prm[P_RSTATE] == 0``)."""
    if not (prm[P_RSTATE] > 0.0):
        return -1
    return nx - 2 if prm[P_SE] > 0.0 else nx - 1


def cache_size(n_rc: int) -> int:
    """Length of the kernels' exponential cache for ``n_rc`` RC pairs.

    Parameters
    ----------
    n_rc : int
        Number of RC pairs.

    Returns
    -------
    int
        ``2 * n_rc + 3``.
    """
    return 2 * n_rc + 3


@njit(cache=True, error_model="numpy", inline="always")
def layout_size(n_rc, i_b, i_h, i_r, i_e):
    """State size of the layout ``[soc, v_rc_1..n_rc, (bias), (h), (r), (m)]`` (absent states have index -1)."""
    return (1 + n_rc + (1 if i_b >= 0 else 0) + (1 if i_h >= 0 else 0) + (1 if i_r >= 0 else 0)
            + (1 if i_e >= 0 else 0))


def layout(n_x: int, n_rc: int, i_b: int, i_h: int, est_h: bool, prm) -> tuple:
    """The state layout ``(n_rc, i_b, i_h, i_r, i_e, est_h)`` as plain ints, checked against the state size.

    Parameters
    ----------
    n_x : int
        State size of the prior handed to the kernel.
    n_rc, i_b, i_h : int
        RC pairs; index of the bias / hysteresis state or -1.
    est_h : bool
        Hysteresis estimated.
    prm : ndarray (N_PRM,)
        Parameter vector; the model-error state exists when ``prm[P_SE] > 0`` (:func:`error_index`).

    Returns
    -------
    tuple of int
        ``(n_rc, i_b, i_h, i_r, i_e, est_h)`` with ``est_h`` as 0/1; the resistance-scale state
        ``i_r`` exists when ``prm[P_RSTATE] > 0`` (:func:`resistance_index`).

    Raises
    ------
    ValueError
        When ``n_x`` does not match the layout (the kernel would index past its arrays).
    """
    n_x, n_rc, i_b, i_h = int(n_x), int(n_rc), int(i_b), int(i_h)
    i_e = n_x - 1 if prm[P_SE] > 0.0 else -1
    i_r = -1
    if prm[P_RSTATE] > 0.0:
        i_r = n_x - 2 if i_e >= 0 else n_x - 1
    if (n_rc < 0 or layout_size(n_rc, i_b, i_h, i_r, i_e) != n_x or max(i_b, i_h, i_r, i_e) >= n_x
            or (i_r >= 0 and max(i_b, i_h) >= i_r)):
        raise ValueError(f"state size {n_x} does not match the layout n_rc={n_rc}, i_b={i_b}, i_h={i_h}, "
                         f"resistance scale {'on' if i_r >= 0 else 'off'}, model error {'on' if i_e >= 0 else 'off'}")
    return n_rc, i_b, i_h, i_r, i_e, int(bool(est_h))


_SPECIALISED: dict = {}


def _nb_type(a):
    if isinstance(a, (bool, np.bool_)):
        return _nb_types.boolean
    if isinstance(a, (int, np.integer)):
        return _nb_types.int64
    if isinstance(a, float):
        return _nb_types.float64
    return _nb_typeof(a)


def specialised(fn, first: int, args: tuple):
    """The compiled ``fn`` for ``args`` with the state layout as compile-time constants.

    ``args[first:first + 6]`` is the layout ``(n_rc, i_b, i_h, i_r, i_e, est_h)`` (plain ints, from
    :func:`layout`).  They are typed as numba literals, so every layout gets its own machine code
    (loops over the state with fixed trip counts, branches on absent states folded away) from the
    one source; each is compiled once and kept in numba's on-disk cache (``cache=True``: the literal
    types are part of the cache key).  The entry point is looked up directly, so no Python-side
    dispatch on literal values happens per call.  Under ``NUMBA_DISABLE_JIT=1`` this is ``fn``.

    Parameters
    ----------
    fn : numba dispatcher (or plain function without JIT)
    first : int
        Position of ``n_rc`` in ``args``.
    args : tuple
        The call's arguments.

    Returns
    -------
    callable
        To be called with ``args``.
    """
    compile_ = getattr(fn, "compile", None)
    if compile_ is None:
        return fn
    lay = args[first:first + 6]
    key = (fn, lay, tuple(_nb_type(a) for a in args))
    hit = _SPECIALISED.get(key)
    if hit is None:
        sig = list(key[2])
        for j, v in enumerate(lay):
            sig[first + j] = _nb_types.literal(int(v))
        hit = compile_(tuple(sig))
        _SPECIALISED[key] = hit
    return hit


def _call(fn, head: tuple, n_x: int, n_rc, i_b, i_h, est_h, prm, tail: tuple):
    """``fn(*head, n_rc, i_b, i_h, i_r, i_e, est_h, prm, *tail)`` compiled for this layout (:func:`specialised`)."""
    args = (*head, *layout(n_x, n_rc, i_b, i_h, est_h, prm), prm, *tail)
    return specialised(fn, len(head), args)(*args)


# ----------------------------------------------------------------------------- look-ups
@njit(cache=True, error_model="numpy", inline="always")
def _soc_index(tab, z):
    """Lower node and weight on the uniform SOC grid (clamped to the table)."""
    n_s = tab.shape[2]
    s = z * (n_s - 1)
    if not (s > 0.0):          # also catches NaN
        return 0, 0.0
    if s >= n_s - 1:
        return n_s - 2, 1.0
    i = int(s)
    if i > n_s - 2:
        i = n_s - 2
    return i, s - i


@njit(cache=True, error_model="numpy", inline="always")
def _temp_index(tab, t_c, t_min, t_step):
    """Rows and weight on the table's temperature axis (clamped; NaN -> 25 degC).

    The axis is the model's own breakpoints (non-uniform), carried in the last packed row
    (:attr:`estimator.filters.tables.KernelTables.row_temp`); a short linear search (the filter
    loop calls this only when the temperature changes).  At a breakpoint the weight is exactly 0,
    so that row is used as identified.  ``t_min`` and ``t_step`` are not used (kept for callers).
    """
    return _temp_search(tab, t_c, 0)


@njit(cache=True, error_model="numpy", inline="always")
def _temp_search(tab, t_c, i):
    """:func:`_temp_index`, the search starting at row ``i`` (0..n_t-2; the previous sample's row)."""
    n_t = tab.shape[1]
    if n_t == 1:
        return 0, 0, 0.0
    if not (t_c == t_c):
        t_c = DEFAULT_TEMP_C
    ax = tab.shape[0] - 1
    if t_c <= tab[ax, 0, 0]:
        return 0, 1, 0.0
    if t_c >= tab[ax, n_t - 1, 0]:
        return n_t - 2, n_t - 1, 1.0
    while i > 0 and tab[ax, i, 0] > t_c:
        i -= 1
    while i < n_t - 2 and tab[ax, i + 1, 0] <= t_c:
        i += 1
    t0 = tab[ax, i, 0]
    return i, i + 1, (t_c - t0) / (tab[ax, i + 1, 0] - t0)


@njit(cache=True, error_model="numpy", inline="always")
def _bil(tab, row, it0, it1, wt, is0, ws):
    a = tab[row, it0, is0]
    b = tab[row, it0, is0 + 1]
    lo = a + ws * (b - a)
    if wt == 0.0:
        return lo
    c = tab[row, it1, is0]
    d = tab[row, it1, is0 + 1]
    hi = c + ws * (d - c)
    return lo + wt * (hi - lo)


@njit(cache=True, error_model="numpy", inline="always")
def tab_n_rc(tab):
    """RC pairs of a packed table: ``5 + 2 n_rc`` rows (odd), or ``8 + 2 n_rc`` (even) with the
    three charge-transfer rows (:mod:`estimator.filters.tables`)."""
    nr = tab.shape[0]
    if nr % 2 == 1:
        return (nr - 5) // 2
    return (nr - 8) // 2


@njit(cache=True, error_model="numpy", inline="always")
def _ct_excess(tab, n_rc, i, it0, it1, wt):
    """Charge-transfer excess ``(c, dc/di)`` at current ``i`` (A) on temperature rows ``it0, it1``
    (weight ``wt``); ``(0, 0)`` when the tables have no charge-transfer rows."""
    rb = 4 + 2 * n_rc
    if tab.shape[0] != rb + 4:
        return 0.0, 0.0
    b = tab[rb, it0, 0]
    g = tab[rb + 1, it0, 0]
    r = tab[rb + 2, it0, 0]
    if wt != 0.0:
        b += wt * (tab[rb, it1, 0] - b)
        g += wt * (tab[rb + 1, it1, 0] - g)
        r += wt * (tab[rb + 2, it1, 0] - r)
    return charge_transfer_v(i, b, g, r)


@njit(cache=True, error_model="numpy")
def table_value(tab, row, z, t_c, t_min, t_step):
    """Bilinear value of packed table ``row`` at SOC ``z`` and temperature ``t_c`` (degC)."""
    it0, it1, wt = _temp_index(tab, t_c, t_min, t_step)
    is0, ws = _soc_index(tab, z)
    return _bil(tab, row, it0, it1, wt, is0, ws)


@njit(cache=True, error_model="numpy")
def _ocv_at(tab, z, it0, it1, wt):
    """OCV (V) and slope (V/unit SOC); linear continuation with the end slope outside 0..1."""
    is0, ws = _soc_index(tab, z)
    v = _bil(tab, 0, it0, it1, wt, is0, ws)
    d = _bil(tab, 1, it0, it1, wt, is0, ws)
    if z < 0.0:
        v += d * z
    elif z > 1.0:
        v += d * (z - 1.0)
    return v, d


@njit(cache=True, error_model="numpy")
def ocv_lookup(tab, z, t_c, t_min, t_step):
    """OCV (V) and dOCV/dSOC at SOC ``z``, temperature ``t_c`` (degC) from the tables."""
    it0, it1, wt = _temp_index(tab, t_c, t_min, t_step)
    return _ocv_at(tab, z, it0, it1, wt)


@njit(cache=True, error_model="numpy", inline="always")
def _voltage_read(tab, n_rc, prm, v, i, t_c):
    """OCV inverse of ``v`` corrected by the ``R0 i`` drop: ``(z, r0, sum r_rc, dOCV/dSOC)`` at that SOC."""
    t_min = prm[P_TMIN]
    t_step = prm[P_TSTEP]
    z = ocv_inverse(tab, v, t_c, t_min, t_step)
    r0 = table_value(tab, 2, z, t_c, t_min, t_step)
    z = ocv_inverse(tab, v + r0 * i, t_c, t_min, t_step)
    r0 = table_value(tab, 2, z, t_c, t_min, t_step)
    r_rc = 0.0
    for j in range(n_rc):
        r_rc += table_value(tab, 4 + j, z, t_c, t_min, t_step)
    _, slope = ocv_lookup(tab, z, t_c, t_min, t_step)
    return z, r0, r_rc, slope


@njit(cache=True, error_model="numpy", inline="always")
def _read_sigma(z, sv2, slope):
    """``(z, sigma_v / |dOCV/dSOC|)`` with the slope floored at 1 mV per unit SOC, sigma in 0.01..0.5."""
    den = abs(slope)
    if den < 1e-3:
        den = 1e-3
    sig = math.sqrt(sv2) / den
    if sig < 0.01:
        sig = 0.01
    elif sig > 0.5:
        sig = 0.5
    return z, sig


@njit(cache=True, error_model="numpy")
def soc_from_voltage(tab, n_rc, prm, v, i, t_c):
    """SOC read from one voltage sample under current ``i`` (A) and its sigma (the filter's start).

    The OCV inverse of ``v`` corrected by the ``R0 i`` drop (first without the drop, then once
    with R0 at that SOC), with sigma ``sigma_v / |dOCV/dSOC|`` where ``sigma_v^2 = voltage_noise^2
    + model_error^2 + (sigma_R i)^2 + (sum R_rc i / 2)^2 + M^2``: the corrected drop is uncertain
    by the resistance error ``sigma_R``, the RC voltages at that current lie somewhere between 0
    and their steady state (taken as half of it, one sigma), and the hysteresis magnitude ``M``;
    slope floored at 1 mV per unit SOC, sigma in 0.01..0.5.  Used at the start, for the hand-over
    check and at the end of a logging gap.
    """
    z, r0, r_rc, slope = _voltage_read(tab, n_rc, prm, v, i, t_c)
    sr = resistance_sigma_at(tab, prm, t_c)
    sv2 = (prm[P_VN] * prm[P_VN] + prm[P_SE] * prm[P_SE] + (sr * i) * (sr * i)
           + (0.5 * r_rc * i) * (0.5 * r_rc * i) + prm[P_HM] * prm[P_HM])
    return _read_sigma(z, sv2, slope)


@njit(cache=True, error_model="numpy")
def soc_from_voltage_start(tab, n_rc, prm, v, i, t_c):
    """As :func:`soc_from_voltage`, with the wider sigma of a start from an unknown history.

    At the first sample nothing is known of what came before: the whole ``R0 i`` drop and the
    whole RC steady state ``sum R_rc i`` count as uncertain (``sigma_v^2 = voltage_noise^2 +
    model_error^2 + (R0 i)^2 + (sum R_rc i)^2 + M^2``), so a start under load does not claim more
    than it knows.  The estimate itself is that of :func:`soc_from_voltage`.

"""
    z, r0, r_rc, slope = _voltage_read(tab, n_rc, prm, v, i, t_c)
    sv2 = (prm[P_VN] * prm[P_VN] + prm[P_SE] * prm[P_SE] + (r0 * i) * (r0 * i) + (r_rc * i) * (r_rc * i)
           + prm[P_HM] * prm[P_HM])
    return _read_sigma(z, sv2, slope)


@njit(cache=True, error_model="numpy")
def ocv_inverse(tab, v, t_c, t_min, t_step):
    """SOC whose tabulated OCV at ``t_c`` equals ``v`` (the exact inverse of the piecewise-linear
    table in SOC, found by bisection over the nodes); clamped to [0, 1]."""
    it0, it1, wt = _temp_index(tab, t_c, t_min, t_step)
    n_s = tab.shape[2]
    f0 = tab[0, it0, 0] + wt * (tab[0, it1, 0] - tab[0, it0, 0])
    fn = tab[0, it0, n_s - 1] + wt * (tab[0, it1, n_s - 1] - tab[0, it0, n_s - 1])
    if not (v > f0):
        return 0.0
    if v >= fn:
        return 1.0
    lo = 0
    hi = n_s - 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        fm = tab[0, it0, mid] + wt * (tab[0, it1, mid] - tab[0, it0, mid])
        if fm <= v:
            lo = mid
        else:
            hi = mid
    flo = tab[0, it0, lo] + wt * (tab[0, it1, lo] - tab[0, it0, lo])
    fhi = tab[0, it0, hi] + wt * (tab[0, it1, hi] - tab[0, it0, hi])
    return (lo + (v - flo) / (fhi - flo)) / (n_s - 1)


# ----------------------------------------------------------------------------- model pieces
@njit(cache=True, error_model="numpy", inline="always")
def _transition(tab, n_rc, i_b, i_h, i_r, i_e, prm, x, u_meas, dt, it0, it1, wt, xn, d, g, cache):
    """One interval of the sampling rule.

    Writes the next state ``xn``, the diagonal ``d`` of ``F`` and the input Jacobian
    ``g = dx'/du``; the full ``F`` is ``diag(d)`` with column ``i_b`` equal to ``-g`` (and
    ``F[i_b, i_b] = 1``).  ``cache`` (length 2 n_rc + 3) holds the last ``dt``, ``tau_j``,
    ``a_j``, ``a_m`` and ``q_m`` so a repeated ``dt/tau`` reuses its exponential; ``q_m =
    sigma_m^2 (1 - a_m^2)`` is the model-error state's process noise of this interval.
    """
    cap = prm[P_CAP]
    z = x[0]
    u = u_meas
    if i_b >= 0:
        u = u_meas - x[i_b]
    eta = 1.0 if u >= 0.0 else prm[P_ETA]
    is0, ws = _soc_index(tab, z)
    xn[0] = z - eta * u * dt / cap
    d[0] = 1.0
    g[0] = -eta * dt / cap
    same_dt = dt == cache[0]
    cache[0] = dt
    for j in range(n_rc):
        r = _bil(tab, 4 + j, it0, it1, wt, is0, ws)
        tau = _bil(tab, 4 + n_rc + j, it0, it1, wt, is0, ws)
        if same_dt and tau == cache[1 + j]:
            a = cache[1 + n_rc + j]
        else:
            a = math.exp(-dt / tau)
            cache[1 + j] = tau
            cache[1 + n_rc + j] = a
        b = r * (1.0 - a)
        xn[1 + j] = a * x[1 + j] + b * u
        d[1 + j] = a
        g[1 + j] = b
        if j == 0 and tab.shape[0] == 8 + 2 * n_rc:  # charge-transfer excess drives the first pair
            c, dc = _ct_excess(tab, n_rc, u, it0, it1, wt)
            xn[1] += (1.0 - a) * c
            g[1] = b + (1.0 - a) * dc
    if i_b >= 0:
        xn[i_b] = x[i_b]
        d[i_b] = 1.0
        g[i_b] = 0.0
    if i_h >= 0:
        h = x[i_h]
        k = eta * prm[P_HG] * dt / cap
        e = math.exp(-abs(eta * u * prm[P_HG] * dt / cap))
        sg = 0.0
        if u > 0.0:
            sg = 1.0
        elif u < 0.0:
            sg = -1.0
        xn[i_h] = e * h - (1.0 - e) * sg
        d[i_h] = e
        g[i_h] = -(h + sg) * e * k * sg
    if i_r >= 0:
        xn[i_r] = min(max(x[i_r], R_SCALE_LIMITS[0]), R_SCALE_LIMITS[1])
        d[i_r] = 1.0
        g[i_r] = 0.0
    if i_e >= 0:
        ke = 2 * n_rc + 1
        if same_dt and cache[ke] == cache[ke]:
            ae = cache[ke]
        else:
            ae = math.exp(-dt / prm[P_TAUE])
            cache[ke] = ae
            cache[ke + 1] = prm[P_SE] * prm[P_SE] * (1.0 - ae * ae)
        xn[i_e] = ae * x[i_e]
        d[i_e] = ae
        g[i_e] = 0.0


@njit(cache=True, error_model="numpy", inline="always")
def _measure(tab, n_rc, i_b, i_h, i_r, i_e, prm, x, i_k, it0, it1, wt, hrow):
    """Predicted terminal voltage at state ``x`` and current sample ``i_k``; writes ``H``."""
    z = x[0]
    is0, ws = _soc_index(tab, z)
    ocv = _bil(tab, 0, it0, it1, wt, is0, ws)
    docv = _bil(tab, 1, it0, it1, wt, is0, ws)
    if z < 0.0:  # linear continuation with the end slope, as _ocv_at
        ocv += docv * z
    elif z > 1.0:
        ocv += docv * (z - 1.0)
    r0 = _bil(tab, 2, it0, it1, wt, is0, ws)
    ie = i_k
    if i_b >= 0:
        ie = i_k - x[i_b]
    rs = r0
    if i_r >= 0:  # the series resistance R0 (1 + r)
        rs = r0 * (1.0 + x[i_r])
        hrow[i_r] = -r0 * ie
    y = ocv - rs * ie
    hrow[0] = docv  # no -i dR0/dSOC: see the module docstring (Jacobian choice)
    for j in range(n_rc):
        y -= x[1 + j]
        hrow[1 + j] = -1.0
    if i_b >= 0:
        hrow[i_b] = rs
    if i_h >= 0:
        y += prm[P_HM] * x[i_h]
        hrow[i_h] = prm[P_HM]
    if i_e >= 0:
        y += x[i_e]
        hrow[i_e] = 1.0
    return y


@njit(cache=True, error_model="numpy")
def _qdiag(n_rc, i_b, i_h, i_r, i_e, est_h, prm, q):
    q[0] = prm[P_QSOC]
    for j in range(n_rc):
        q[1 + j] = prm[P_QRC]
    if i_b >= 0:
        q[i_b] = prm[P_QB]
    if i_h >= 0:
        q[i_h] = prm[P_QH] if est_h else 0.0
    if i_r >= 0:
        q[i_r] = prm[P_QR]
    if i_e >= 0:
        q[i_e] = 0.0  # its noise sigma_m^2 (1 - a_m^2) is not a density: added per interval


@njit(cache=True, error_model="numpy", inline="always")
def gate_rejects(innov, sv, gate, run_on, run_s, grel):
    """The innovation gate with its release: True when the sample is refused.

    Refused when ``innov^2 > gate^2 S`` (``gate`` > 0), unless a run of consecutive refused
    samples has lasted ``grel`` s (``grel`` > 0): then this one is used and the run ends.
    """
    return gate > 0.0 and innov * innov > gate * gate * sv and not (run_on and grel > 0.0 and run_s >= grel)


@njit(cache=True, error_model="numpy", inline="always")
def health_step(nis_avg, healthy, innov, sv):
    """One update of the consistency monitor: ``(nis_avg, healthy)`` after an innovation.

    The running mean of ``NIS = innov^2 / S`` (capped at :data:`NIS_CAP`, weight :data:`NIS_ALPHA`)
    whose chi-square(1) mean is 1 for a consistent filter (Bar-Shalom, Li, Kirubarajan 2001,
    sec. 5.4); the filter turns unhealthy above :data:`NIS_HIGH` and healthy again below
    :data:`NIS_LOW`.  While unhealthy the estimate falls back to coulomb counting.  Shared by the
    EKF kernel and the UKF; the C template implements the same constants and rule.
    """
    nis = innov * innov / sv
    if nis > NIS_CAP:
        nis = NIS_CAP
    nis_avg += NIS_ALPHA * (nis - nis_avg)
    if healthy and nis_avg > NIS_HIGH:
        healthy = False
    elif not healthy and nis_avg < NIS_LOW:
        healthy = True
    return nis_avg, healthy


@njit(cache=True, error_model="numpy", inline="always")
def project_soc(x, p, smin, smax):
    """SOC limit by estimate projection (Simon, IET Control Theory Appl. 4, 2010; from memory).

    When ``x[0]`` is outside ``[smin, smax]`` the correlated states move with the clipped SOC,
    ``x_i -= P_i0 / P_00 * excess``, and ``P`` is left as it is.  A bare clip would let the RC (and
    bias) states absorb every later update and run away.
    """
    if x[0] < smin or x[0] > smax:
        lim = smin if x[0] < smin else smax
        ex = x[0] - lim
        if p[0, 0] > 0.0:
            for i in range(1, x.size):
                x[i] -= p[i, 0] / p[0, 0] * ex
        x[0] = lim


@njit(cache=True, error_model="numpy")
def measure(tab, n_rc, i_b, i_h, prm, x, i_k, t_c):
    """Python-callable measurement model: ``(y_pred_v, H)`` at state ``x`` (n_x,)."""
    hrow = np.zeros(x.size)
    it0, it1, wt = _temp_index(tab, t_c, prm[P_TMIN], prm[P_TSTEP])
    y = _measure(tab, n_rc, i_b, i_h, resistance_index(x.size, prm), error_index(x.size, prm), prm, x, i_k,
                 it0, it1, wt, hrow)
    return y, hrow


@njit(cache=True, error_model="numpy")
def transition(tab, n_rc, i_b, i_h, prm, x, u_meas, dt, t_c):
    """Python-callable process model: the state after one interval with mean current ``u_meas``."""
    nx = x.size
    xn = np.zeros(nx)
    d = np.zeros(nx)
    g = np.zeros(nx)
    cache = np.full(2 * n_rc + 3, np.nan)
    it0, it1, wt = _temp_index(tab, t_c, prm[P_TMIN], prm[P_TSTEP])
    _transition(tab, n_rc, i_b, i_h, resistance_index(nx, prm), error_index(nx, prm), prm, x, u_meas, dt,
                it0, it1, wt, xn, d, g, cache)
    return xn


@njit(cache=True, error_model="numpy")
def linearise(tab, n_rc, i_b, i_h, est_h, prm, x, i_prev, i_next, dt, t_prev, t_next):
    """The EKF's linearisation of one step, for other modules (bounds, tests).

    Parameters
    ----------
    x : ndarray (n_x,)   state at ``t_k`` (after the update)
    i_prev, i_next : float   current samples ``i_k``, ``i_k+1`` (A)
    dt : float   ``t_k+1 - t_k`` (s)
    t_prev, t_next : float   temperatures at ``t_k``, ``t_k+1`` (degC, NaN -> 25)

    Returns
    -------
    x_pred : (n_x,)    state at ``t_k+1`` by the sampling rule
    F : (n_x, n_x)     dx'/dx
    G : (n_x,)         dx'/du (input Jacobian; current noise enters through it)
    Q : (n_x, n_x)     G G^T current_noise_a^2 + diag(q) dt, plus the capacity term on SOC and
                       sigma_m^2 (1 - a_m^2) on the model-error state
    H : (n_x,)         dy/dx at ``x_pred`` with ``i_next``
    y_pred : float     predicted terminal voltage at ``t_k+1``
    """
    nx = x.size
    xn = np.zeros(nx)
    d = np.zeros(nx)
    g = np.zeros(nx)
    cache = np.full(2 * n_rc + 3, np.nan)
    it0, it1, wt = _temp_index(tab, t_prev, prm[P_TMIN], prm[P_TSTEP])
    u = 0.5 * (i_prev + i_next)
    ue = u - x[i_b] if i_b >= 0 else u
    i_e = error_index(nx, prm)
    i_r = resistance_index(nx, prm)
    _transition(tab, n_rc, i_b, i_h, i_r, i_e, prm, x, u, dt, it0, it1, wt, xn, d, g, cache)
    f = np.zeros((nx, nx))
    for i in range(nx):
        f[i, i] = d[i]
        if i_b >= 0 and i != i_b:
            f[i, i_b] = -g[i]
    q = np.zeros(nx)
    _qdiag(n_rc, i_b, i_h, i_r, i_e, est_h, prm, q)
    gq = g.copy()
    if i_h >= 0 and not est_h:
        gq[i_h] = 0.0
    s2 = prm[P_IN] * prm[P_IN] * white_factor(prm, dt)
    qm = np.zeros((nx, nx))
    for i in range(nx):
        for j in range(nx):
            qm[i, j] = gq[i] * gq[j] * s2
        qm[i, i] += q[i] * dt
    qm[0, 0] += prm[P_CAPERR] * prm[P_CAPERR] * abs(g[0] * ue)
    if i_e >= 0:
        qm[i_e, i_e] += cache[2 * n_rc + 2]
    hrow = np.zeros(nx)
    it0, it1, wt = _temp_index(tab, t_next, prm[P_TMIN], prm[P_TSTEP])
    y = _measure(tab, n_rc, i_b, i_h, i_r, i_e, prm, xn, i_next, it0, it1, wt, hrow)
    return xn, f, g, qm, hrow, y


# ----------------------------------------------------------------------------- EKF
def ekf_run(time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, est_h, prm, x0, p0,
            x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out):
    """Run the EKF over one recording; returns the number of gated samples.

    The kernel is compiled once per state layout (:func:`specialised`).

    Parameters
    ----------
    time_s, current_a, voltage_v, temp_c : ndarray (N,)
        Samples (s, A positive on discharge, V with NaN = missing, degC with NaN = 25).
    tab : ndarray (5 + 2 n_rc, n_t, n_s)   packed :class:`estimator.tables.KernelTables` (last row: the
        temperature axis)
    n_rc, i_b, i_h : int    RC pairs; index of the bias / hysteresis state or -1
    est_h : bool            hysteresis estimated (else propagated with zero noise)
    prm : ndarray (N_PRM,)  settings and model scalars (``P_*`` layout)
    x0, p0 : ndarray (n_x,), (n_x, n_x)   prior at the first sample
    x_out : (N, n_x); sig_out, vpred_out, innov_out, s_out : (N,)   outputs (posterior state,
        SOC sigma, predicted voltage, innovation (NaN when no voltage), innovation variance)
    store : bool
        When True also write ``p_out`` (posterior P), ``ppred_out`` (prior P) and ``f_out``
        (the F that led to sample k; identity at k = 0), each (N, n_x, n_x).

    Returns
    -------
    int
        The number of gated samples.
    """
    return _call(_ekf_run, (time_s, current_a, voltage_v, temp_c, tab), x0.size, n_rc, i_b, i_h, est_h, prm,
                 (x0, p0, x_out, sig_out, vpred_out, innov_out, s_out, bool(store), p_out, ppred_out, f_out))


@njit(cache=True, error_model="numpy")
def _ekf_run(time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm, x0, p0,
             x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out):
    dummy = np.zeros(1)
    idummy = np.zeros(1, dtype=np.int64)
    return _ekf_core(0, time_s.size, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm,
                     x0, p0, x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out,
                     False, dummy, dummy, idummy, idummy)


@njit(cache=True, error_model="numpy")
def _finite(v):
    return v == v and -BIG < v < BIG


@njit(cache=True, error_model="numpy")
def check_inputs(current_a, voltage_v, temp_c, prm, cur_out, volt_out, temp_out, status_out):
    """The input checks of one filter step, over a recording (the C code's ``sfx_step`` checks).

    A current that is not finite or above ``prm[P_IMAX]`` in magnitude is replaced by the last
    valid one (0 before any) and flagged ``ST_REJ_CURRENT``; a voltage that is not finite or
    outside ``[prm[P_VLO], prm[P_VHI]]`` becomes missing (predict only) and is flagged
    ``ST_REJ_VOLTAGE`` (a missing voltage too); a temperature outside :data:`T_LIMITS_C` is
    flagged ``ST_REJ_TEMP`` and, like a missing one (NaN, not flagged), replaced by ``prm[P_TDEF]``
    (25 degC; a single-temperature model's own temperature).
    Writes the cleaned arrays and the status bits (N,); returns nothing.
    """
    n = current_a.size
    i_last = 0.0
    for k in range(n):
        st = 0
        ik = current_a[k]
        if not (_finite(ik) and abs(ik) <= prm[P_IMAX]):
            st |= ST_REJ_CURRENT
            ik = i_last
        i_last = ik
        cur_out[k] = ik
        vk = voltage_v[k]
        if not (_finite(vk) and prm[P_VLO] <= vk <= prm[P_VHI]):
            st |= ST_REJ_VOLTAGE
            vk = np.nan
        volt_out[k] = vk
        tk = temp_c[k]
        if not (_finite(tk) and T_LIMITS_C[0] <= tk <= T_LIMITS_C[1]):
            if tk == tk:
                st |= ST_REJ_TEMP
            tk = prm[P_TDEF]
        temp_out[k] = tk
        status_out[k] = st


def ekf_run_monitored(time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, est_h, prm, x0, p0,
                      base_soc, base_sig, x_out, sig_out, vpred_out, innov_out, s_out, status_out, healthy_out):
    """The EKF with the health monitor of the exported C code (inputs already through :func:`check_inputs`).

    On top of :func:`ekf_run`: after every step the covariance diagonal is floored at
    :data:`P_FLOOR`; a state or covariance entry that is not finite, an RC voltage above
    ``prm[P_VRCMAX]``, a bias above ``prm[P_IMAX]`` or a hysteresis state above :data:`H_MAX`
    re-initialises the filter from the baseline (``base_soc[k]``, sigma ``max(base_sig[k],
    p0_soc)``, the other states as at the start; ``ST_RESET``, unhealthy); a running mean of the
    NIS (:data:`NIS_ALPHA`, one sample capped at :data:`NIS_CAP`) above :data:`NIS_HIGH` marks the
    filter unhealthy until it falls below :data:`NIS_LOW`.  ``healthy_out[k]`` = 0 means the
    output at ``k`` is the baseline (``ST_FALLBACK``).  ``status_out`` carries the input-check
    bits on entry; ``ST_GATED``, ``ST_RESET`` and ``ST_FALLBACK`` are added.  Compiled once per state
    layout (:func:`specialised`).

    Parameters
    ----------
    time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, est_h, prm, x0, p0 : as :func:`ekf_run`
    base_soc, base_sig : ndarray (N,)   the baseline's SOC and sigma (fractions; fallback and reset)
    x_out, sig_out, vpred_out, innov_out, s_out : as :func:`ekf_run`
    status_out : int64 (N,)   status bits (input-check bits on entry)
    healthy_out : int64 (N,)   1 where the filter's own output is used

    Returns
    -------
    int
        The number of gated samples.
    """
    return _call(_ekf_run_monitored, (time_s, current_a, voltage_v, temp_c, tab), x0.size, n_rc, i_b, i_h, est_h,
                 prm, (x0, p0, base_soc, base_sig, x_out, sig_out, vpred_out, innov_out, s_out, status_out,
                       healthy_out))


@njit(cache=True, error_model="numpy")
def _ekf_run_monitored(time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm, x0, p0,
                       base_soc, base_sig, x_out, sig_out, vpred_out, innov_out, s_out, status_out, healthy_out):
    dummy = np.zeros((1, x0.size, x0.size))
    return _ekf_core(0, time_s.size, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm,
                     x0, p0, x_out, sig_out, vpred_out, innov_out, s_out, False, dummy, dummy, dummy,
                     True, base_soc, base_sig, status_out, healthy_out)


@njit(cache=True, error_model="numpy")
def _ekf_core(lo, hi, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm, x0, p0,
              x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out,
              mon, base_soc, base_sig, status_out, healthy_out):
    """The EKF loop over rows ``lo..hi-1`` of the (possibly concatenated) arrays; see :func:`ekf_run`.

    The layout ints ``n_rc, i_b, i_h, i_r, i_e, est_h`` are compile-time constants when called through
    :func:`ekf_run` and its siblings (:func:`specialised`), so the loops over the state have fixed
    trip counts and the branches on absent states fold away.
    """
    nx = layout_size(n_rc, i_b, i_h, i_r, i_e)
    x = np.empty(nx)
    p = np.empty((nx, nx))
    for i in range(nx):
        x[i] = x0[i]
        for j in range(nx):
            p[i, j] = p0[i, j]
    work = np.zeros((10, nx))   # xn, d, g, hrow, ph, kg, cb, ub, q, qd
    cache = np.full(2 * n_rc + 3, np.nan)
    return _ekf_loop(lo, hi, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm, p0,
                     x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out,
                     mon, base_soc, base_sig, status_out, healthy_out, x, p, work, cache)


@njit(cache=True, error_model="numpy", _nrt=False)
def _ekf_loop(lo, hi, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm, p0,
              x_out, sig_out, vpred_out, innov_out, s_out, store, p_out, ppred_out, f_out,
              mon, base_soc, base_sig, status_out, healthy_out, x, p, work, cache):
    """The loop of :func:`_ekf_core` over the state ``x``, ``p`` and scratch ``work``, ``cache`` it allocated.

    Compiled without numba's reference counting (``_nrt=False``: it allocates nothing): the
    helpers inlined into the loop would otherwise count references to the arrays they are handed
    with atomic operations, twenty or so per sample, most of the loop's time.
    """
    nx = layout_size(n_rc, i_b, i_h, i_r, i_e)
    xn = work[0]
    d = work[1]
    g = work[2]
    hrow = work[3]
    ph = work[4]
    kg = work[5]
    cb = work[6]
    ub = work[7]
    q = work[8]
    qd = work[9]
    _qdiag(n_rc, i_b, i_h, i_r, i_e, est_h, prm, q)
    ke = 2 * n_rc + 2
    ce2 = prm[P_CAPERR] * prm[P_CAPERR]
    se2 = prm[P_SE] * prm[P_SE]
    adapt = prm[P_ADAPT] if i_e >= 0 else 0.0
    nu2_avg = 0.0   # adaptive model-error magnitude: running second moment of the state, its excess
    excess = 0.0
    s2i = prm[P_IN] * prm[P_IN]
    s2 = s2i
    wf = 1.0
    wr = 1.0
    dt_f = np.nan
    vn2 = prm[P_VN] * prm[P_VN]
    re2 = prm[P_RERR] * prm[P_RERR]
    gate = prm[P_GATE]
    grel = prm[P_GREL]
    i_lo = current_a[lo]  # current range seen so far (logging gaps)
    i_hi = i_lo
    gap_k = False
    nis_avg = 1.0   # health monitor (mon): running mean NIS and the healthy flag
    healthy = True
    run_on = False  # inside a run of consecutive gated samples
    run_s = 0.0     # time since that run began, s
    smin = prm[P_SMIN]
    smax = prm[P_SMAX]
    no_h_noise = i_h >= 0 and not est_h
    gh = 0.0
    gated = 0
    pt0, pt1, pwt = 0, 0, 0.0
    t_last = np.nan
    for k in range(lo, hi):
        tk = temp_c[k]
        if tk == t_last:
            it0, it1, wt = pt0, pt1, pwt
        else:
            it0, it1, wt = _temp_search(tab, tk, pt0)
            sr = resistance_sigma(tab, prm, it0, it1, wt)
            re2 = sr * sr
        if k > lo:
            dt = time_s[k] - time_s[k - 1]
            u = 0.5 * (current_a[k - 1] + current_a[k])
            if run_on:
                run_s += dt
            ue = u - x[i_b] if i_b >= 0 else u
            _transition(tab, n_rc, i_b, i_h, i_r, i_e, prm, x, u, dt, pt0, pt1, pwt, xn, d, g, cache)
            for i in range(nx):
                x[i] = xn[i]
                qd[i] = q[i] * dt
            qd[0] += ce2 * abs(g[0] * ue)
            ik_ = current_a[k]
            if ik_ < i_lo:
                i_lo = ik_
            elif ik_ > i_hi:
                i_hi = ik_
            gv = gap_variance(prm, dt, i_lo, i_hi)
            if gv > 0.0:
                qd[0] += gv
                for j in range(n_rc):  # the RC voltages are unknown after a working gap too
                    qd[1 + j] += p0[1 + j, 1 + j]
                gap_k = True
            if i_e >= 0:
                qd[i_e] = cache[ke]
                if adapt > 0.0:  # adapted magnitude: q_m = sigma_eff^2 (1 - a_m^2)
                    qd[i_e] *= (se2 + excess) / se2
            if no_h_noise:
                gh = g[i_h]
                g[i_h] = 0.0
            # P- = F P F^T + G G^T s2 + diag(q) dt, with F = diag(d) + c e_b^T, c = -g (c_b = 0)
            if dt != dt_f:  # the noise factors of this interval length (recomputed only when it changes)
                dt_f = dt
                wf = white_factor(prm, dt)
                wr = resistance_factor(prm, dt)
            s2 = s2i * wf
            if i_b < 0:  # F diagonal: in place, no branches in the inner loop
                for i in range(nx):
                    di = d[i]
                    gi = g[i] * s2
                    for j in range(i):
                        v = di * d[j] * p[i, j] + gi * g[j]
                        p[i, j] = v
                        p[j, i] = v
                    p[i, i] = di * di * p[i, i] + gi * g[i] + qd[i]
            else:  # in place: entry (i, j) reads only p[i, j] and the precomputed column terms
                pbb = p[i_b, i_b]
                for i in range(nx):
                    cb[i] = -g[i]
                    ub[i] = d[i] * p[i, i_b]
                cb[i_b] = 0.0
                if no_h_noise:
                    cb[i_h] = -gh
                for i in range(nx):
                    di = d[i]
                    ci = cb[i]
                    ui = ub[i]
                    gi = g[i] * s2
                    for j in range(i):
                        v = di * d[j] * p[i, j] + ui * cb[j] + ci * ub[j] + ci * cb[j] * pbb + gi * g[j]
                        p[i, j] = v
                        p[j, i] = v
                    p[i, i] = di * di * p[i, i] + 2.0 * ui * ci + ci * ci * pbb + gi * g[i] + qd[i]
            if store:
                for i in range(nx):
                    for j in range(nx):
                        f_out[k, i, j] = 0.0
                    f_out[k, i, i] = d[i]
                    if i_b >= 0 and i != i_b:
                        f_out[k, i, i_b] = -gh if (no_h_noise and i == i_h) else -g[i]
        elif store:
            for i in range(nx):
                for j in range(nx):
                    f_out[k, i, j] = 0.0
                f_out[k, i, i] = 1.0
        if store:
            for i in range(nx):
                for j in range(nx):
                    ppred_out[k, i, j] = p[i, j]
        skip_upd = False
        vk = voltage_v[k]
        env_k = voltage_outside_envelope(prm, vk, tk)
        if env_k:
            vk = np.nan  # outside the operating envelope: predict only
        if gap_k and vk == vk:
            # end of a logging gap: the SOC read from this voltage (its sigma large under load) is
            # fused as a direct SOC measurement (H = e_0), not through the linearised OCV, which a
            # SOC sigma of tens of points would make overshoot; this sample's voltage is then used up
            zv, sgv = soc_from_voltage(tab, n_rc, prm, vk, current_a[k], tk)
            den = p[0, 0] + sgv * sgv
            dz = zv - x[0]
            for i in range(nx):
                kg[i] = p[i, 0] / den
            for i in range(nx):
                x[i] += kg[i] * dz
            for i in range(nx):
                ph[i] = p[i, 0]
            for i in range(nx):
                for j in range(i + 1):
                    v = p[i, j] - kg[i] * ph[j]
                    p[i, j] = v
                    p[j, i] = v
            skip_upd = True
        # measurement
        y = _measure(tab, n_rc, i_b, i_h, i_r, i_e, prm, x, current_a[k], it0, it1, wt, hrow)
        pt0, pt1, pwt = it0, it1, wt
        t_last = tk
        if k > lo:
            r_meas = measurement_variance(vn2, re2, wf, wr, current_a[k], current_a[k - 1],
                                          polarisation_variance(prm, x, n_rc))
        else:
            r_meas = measurement_variance(vn2, re2, 1.0, 1.0, current_a[k], current_a[k],
                                          polarisation_variance(prm, x, n_rc))
        sv = r_meas
        for i in range(nx):
            acc = 0.0
            for j in range(nx):
                acc += p[i, j] * hrow[j]
            ph[i] = acc
            sv += hrow[i] * acc
        vpred_out[k] = y
        s_out[k] = sv
        innov = np.nan
        gk = False
        if vk == vk:
            innov = vk - y
            innov_out[k] = innov
            if skip_upd:
                pass
            elif gate_rejects(innov, sv, gate, run_on, run_s, grel):
                gated += 1
                gk = True
                if not run_on:
                    run_on = True
                    run_s = 0.0
            else:
                run_on = False
                inv_s = 1.0 / sv
                for i in range(nx):
                    kg[i] = ph[i] * inv_s
                    x[i] += kg[i] * innov
                # P+ = P - K S K^T = P - PH (PH)^T / S on the lower triangle, mirrored
                for i in range(nx):
                    ki = kg[i]
                    for j in range(i + 1):
                        v = p[i, j] - ki * ph[j]
                        p[i, j] = v
                        p[j, i] = v
                if adapt > 0.0:
                    # covariance matching on the model-error state (Myers and Tapley, IEEE Trans.
                    # Autom. Control 21, 1976, from memory): its second moment m^2 + P_mm, averaged
                    # over the window ``adapt`` (s), should not exceed sigma_m^2; an excess (a model
                    # worse than assumed) is added to sigma_m^2 in the state's process noise
                    wa = 1.0
                    if k > lo:
                        dtk = time_s[k] - time_s[k - 1]
                        wa = dtk / (adapt + dtk)
                    nu2_avg += wa * (x[i_e] * x[i_e] + p[i_e, i_e] - nu2_avg)
                    excess = nu2_avg - se2
                    if not (excess > 0.0):
                        excess = 0.0
                    elif excess > ADAPT_CAP * se2:
                        excess = ADAPT_CAP * se2
        else:
            innov_out[k] = np.nan
        project_soc(x, p, smin, smax)
        if mon:
            st = ST_GATED if gk else 0
            if gap_k:
                st |= ST_GAP
            if env_k:
                st |= ST_ENVELOPE
            ok = _finite(y) and _finite(sv) and sv > 0.0
            for j in range(n_rc):
                if not (abs(x[1 + j]) <= prm[P_VRCMAX]):
                    ok = False
            if i_b >= 0 and not (abs(x[i_b]) <= prm[P_IMAX]):
                ok = False
            if i_h >= 0 and not (abs(x[i_h]) <= H_MAX):
                ok = False
            for i in range(nx):
                if not _finite(x[i]):
                    ok = False
                for j in range(nx):
                    if not _finite(p[i, j]):
                        ok = False
                fl = 0.0 if (i == i_h and not est_h) else P_FLOOR
                if p[i, i] < fl:
                    p[i, i] = fl
            if not ok:
                sg = base_sig[k]
                if not (sg >= prm[P_P0SOC]):
                    sg = prm[P_P0SOC]
                for i in range(nx):
                    x[i] = 0.0
                    for j in range(nx):
                        p[i, j] = p0[i, j] if i == j else 0.0
                x[0] = base_soc[k]
                p[0, 0] = sg * sg
                nis_avg = NIS_HIGH
                healthy = False
                st |= ST_RESET
                vpred_out[k] = np.nan
                innov_out[k] = np.nan
            elif vk == vk:
                nis_avg, healthy = health_step(nis_avg, healthy, innov, sv)
            if not healthy:
                st |= ST_FALLBACK
            status_out[k] |= st
            healthy_out[k] = 1 if healthy else 0
        gap_k = False
        for i in range(nx):
            x_out[k, i] = x[i]
        sig_out[k] = math.sqrt(p[0, 0]) if p[0, 0] > 0.0 else 0.0
        if store:
            for i in range(nx):
                for j in range(nx):
                    p_out[k, i, j] = p[i, j]
    return gated


def ekf_run_batch(offsets, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, est_h, prm,
                  cap_scale, x0s, p0s, x_out, sig_out, vpred_out, innov_out, s_out, gated_out):
    """Many recordings of one model in parallel (numba ``prange`` over recordings).

    Recordings are concatenated; recording ``r`` occupies rows ``offsets[r]:offsets[r+1]``.
    ``cap_scale[r]`` multiplies the capacity, ``x0s[r]``/``p0s[r]`` are the priors.  Compiled once
    per state layout (:func:`specialised`).

    Parameters
    ----------
    offsets : int64 (R + 1,)   row range of each recording in the concatenated samples
    time_s, current_a, voltage_v, temp_c : (sum N,)   samples as :func:`ekf_run`
    tab, n_rc, i_b, i_h, est_h, prm : as :func:`ekf_run`
    cap_scale : (R,)   capacity multiplier per recording
    x0s, p0s : (R, n_x), (R, n_x, n_x)   priors
    x_out, sig_out, vpred_out, innov_out, s_out : concatenated outputs as :func:`ekf_run`
    gated_out : int64 (R,)   gated samples per recording

    Returns
    -------
    None
        Writes the outputs as :func:`ekf_run` (concatenated) and ``gated_out[r]``.
    """
    _call(_ekf_run_batch, (offsets, time_s, current_a, voltage_v, temp_c, tab), x0s.shape[1], n_rc, i_b, i_h,
          est_h, prm, (cap_scale, x0s, p0s, x_out, sig_out, vpred_out, innov_out, s_out, gated_out))


@njit(cache=True, parallel=True, error_model="numpy")
def _ekf_run_batch(offsets, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, prm,
                   cap_scale, x0s, p0s, x_out, sig_out, vpred_out, innov_out, s_out, gated_out):
    nrec = offsets.size - 1
    nx = x0s.shape[1]
    dummy = np.zeros((1, nx, nx))
    dummy1 = np.zeros(1)
    idummy = np.zeros(1, dtype=np.int64)
    for r in prange(nrec):
        a = offsets[r]
        b = offsets[r + 1]
        pr = prm.copy()
        pr[P_CAP] = prm[P_CAP] * cap_scale[r]
        gated_out[r] = _ekf_core(a, b, time_s, current_a, voltage_v, temp_c, tab, n_rc, i_b, i_h, i_r, i_e, est_h, pr,
                                 x0s[r], p0s[r], x_out, sig_out, vpred_out, innov_out, s_out, False, dummy,
                                 dummy, dummy, False, dummy1, dummy1, idummy, idummy)


# ----------------------------------------------------------------------------- baseline
@njit(cache=True, error_model="numpy")
def _rest_ocv(time_s, voltage_v, current_a, tab, t_c, prm, start, end, early_s, z):
    """OCV estimate at the end of a rest ``start..end`` (inclusive), or NaN.

    Full rest: the last finite voltage plus the ``R0 i`` drop of its (small) current.  Early
    reseed (``early_s > 0``): the asymptote of an exponential through three equally spaced
    points over the rest's second half (Aitken's delta-squared extrapolation; falls back to
    the last voltage when the points are not monotone-converging).
    """
    kk = end
    while kk >= start and not (voltage_v[kk] == voltage_v[kk]):
        kk -= 1
    if kk < start:
        return np.nan
    it0, it1, wt = _temp_index(tab, t_c, prm[P_TMIN], prm[P_TSTEP])
    v_last = voltage_v[kk]
    if early_s > 0.0:
        t0 = time_s[start]
        dur = time_s[kk] - t0
        ta = t0 + 0.5 * dur
        tm = t0 + 0.75 * dur
        va = np.nan
        vm = np.nan
        for m in range(start, kk):
            if time_s[m] <= ta <= time_s[m + 1]:
                w = (ta - time_s[m]) / (time_s[m + 1] - time_s[m])
                va = voltage_v[m] + w * (voltage_v[m + 1] - voltage_v[m])
            if time_s[m] <= tm <= time_s[m + 1]:
                w = (tm - time_s[m]) / (time_s[m + 1] - time_s[m])
                vm = voltage_v[m] + w * (voltage_v[m + 1] - voltage_v[m])
        d1 = vm - va
        d2 = v_last - vm
        if d1 * d2 > 0.0 and abs(d2) < abs(d1):
            v_last = v_last - d2 * d2 / (d2 - d1)
    is0, ws = _soc_index(tab, z)
    r0 = _bil(tab, 2, it0, it1, wt, is0, ws)
    return v_last + r0 * current_a[kk]


@njit(cache=True, error_model="numpy")
def coulomb_run(time_s, current_a, voltage_v, temp_c, tab, prm, soc0, var0, rest_i, rest_min_s,
                do_reseed, early_s, soc_out, sig_out, rs_time, rs_before, rs_after):
    """Coulomb counting (trapezoid rule, coulombic efficiency on charge) with OCV reseed.

    A rest is a run of samples with ``|i| <= rest_i``.  At its last sample, when it lasted
    ``>= rest_min_s`` (or ``>= early_s`` with the relaxation extrapolated, when ``early_s >
    0``), SOC is reseeded from the OCV inverse of the rested voltage at the sample's
    temperature.  The variance grows by ``(eta dt / Q)^2 sigma_i^2 + q_soc dt`` per interval
    and is reset at a reseed to ``(sigma_v / |dOCV/dSOC|)^2`` with ``sigma_v^2 =
    voltage_noise^2 + M^2`` (M the hysteresis magnitude; slope floored at 1 mV per unit SOC,
    sigma capped at 0.5).  Returns the number of reseeds written to ``rs_*``.
    """
    n = time_s.size
    cap = prm[P_CAP]
    eta_c = prm[P_ETA]
    s2 = prm[P_IN] * prm[P_IN]
    qs = prm[P_QSOC]
    smin = prm[P_SMIN]
    smax = prm[P_SMAX]
    sv2 = prm[P_VN] * prm[P_VN] + prm[P_HM] * prm[P_HM]
    z = soc0
    var = var0
    rest_start = -1
    nrs = 0
    i_lo = current_a[0] if n else 0.0
    i_hi = i_lo
    for k in range(n):
        if k > 0:
            dt = time_s[k] - time_s[k - 1]
            u = 0.5 * (current_a[k - 1] + current_a[k])
            eta = 1.0 if u >= 0.0 else eta_c
            z = z - eta * u * dt / cap
            c = eta * dt / cap
            i_lo = min(i_lo, current_a[k])
            i_hi = max(i_hi, current_a[k])
            gv = gap_variance(prm, dt, i_lo, i_hi)
            var += c * c * s2 * white_factor(prm, dt) + qs * dt + gv
            if gv > 0.0 and voltage_v[k] == voltage_v[k]:
                # end of a logging gap: restart the count from this voltage when it knows better
                zv, sgv = soc_from_voltage(tab, tab_n_rc(tab), prm, voltage_v[k], current_a[k], temp_c[k])
                if sgv * sgv < var:
                    z = zv
                    var = sgv * sgv
            if z < smin:
                z = smin
            elif z > smax:
                z = smax
        if abs(current_a[k]) <= rest_i:
            if rest_start < 0:
                rest_start = k
            if k == n - 1 or abs(current_a[k + 1]) > rest_i:
                dur = time_s[k] - time_s[rest_start]
                use = do_reseed and (dur >= rest_min_s or (early_s > 0.0 and dur >= early_s))
                if use:
                    ex = early_s if dur < rest_min_s else 0.0
                    ocv = _rest_ocv(time_s, voltage_v, current_a, tab, temp_c[k], prm, rest_start, k, ex, z)
                    if ocv == ocv:
                        zn = ocv_inverse(tab, ocv, temp_c[k], prm[P_TMIN], prm[P_TSTEP])
                        if zn < smin:
                            zn = smin
                        elif zn > smax:
                            zn = smax
                        rs_time[nrs] = time_s[k]
                        rs_before[nrs] = z
                        rs_after[nrs] = zn
                        nrs += 1
                        z = zn
                        _, slope = ocv_lookup(tab, zn, temp_c[k], prm[P_TMIN], prm[P_TSTEP])
                        slope = max(abs(slope), 1e-3)
                        sig = min(math.sqrt(sv2) / slope, 0.5)
                        var = sig * sig
                rest_start = -1
        else:
            rest_start = -1
        soc_out[k] = z
        sig_out[k] = math.sqrt(var)
    return nrs
