"""Small synthetic lab-test profiles for round-trip checks of the identification (invented data).

These are current profiles only; voltages come from :func:`models.simulate` (or the truth
simulator) with known parameters, so identification can be checked against the parameters
that made the data.  The pulse layout follows the DOE/INL HPPC pattern (a discharge pulse, a
short rest, a regen pulse, a long rest, a constant-current move to the next SOC level); the
durations are parameters.
"""
from __future__ import annotations

import numpy as np

__all__ = ["hppc_profile", "low_rate_profile"]


def _seg(t0, duration_s, current_a, dt_s):
    n = max(int(round(duration_s / dt_s)), 1)
    t = t0 + dt_s * np.arange(1, n + 1)
    return t, np.full(n, float(current_a))


def hppc_profile(capacity_ah: float, pulse_currents_a=(1.0,), regen_ratio: float = 0.75,
                 pulse_s: float = 10.0, mid_rest_s: float = 40.0, rest_s: float = 1800.0,
                 levels=(0.9, 0.7, 0.5, 0.3, 0.1), move_rate_c: float = 1 / 3, dt_s: float = 1.0,
                 fine_dt_s: float | None = None, soc_start: float = 1.0, first_rest_s: float = 600.0):
    """Time and current of a pulse test.

    At each SOC level: for every pulse current ``I``, a discharge pulse ``I`` for ``pulse_s``,
    ``mid_rest_s`` rest, a regen pulse ``-regen_ratio * I`` (skipped when ``regen_ratio`` is 0),
    then ``rest_s`` rest.  Between levels a constant discharge at ``move_rate_c`` (in C) moves the
    SOC (counting the pulses' charge), followed by ``rest_s``.  Samples every ``dt_s`` seconds,
    or every ``fine_dt_s`` during pulses and the first 60 s after them (uneven sampling).

    Parameters
    ----------
    capacity_ah : float
        Cell capacity, Ah (sets the move current and the SOC bookkeeping).
    pulse_currents_a : sequence of float
        Discharge pulse currents at each level, A.
    regen_ratio : float
        Regen pulse current as a fraction of the discharge pulse current (0: no regen pulse).
    pulse_s : float
        Length of each pulse, s.
    mid_rest_s : float
        Rest between the discharge and the regen pulse, s.
    rest_s : float
        Rest after each pulse pair and after each SOC move, s.
    levels : sequence of float
        SOC levels of the pulses, fraction 0..1, descending.
    move_rate_c : float
        Discharge rate between levels, C (1/h).
    dt_s : float
        Sample interval, s.
    fine_dt_s : float, optional
        Sample interval during pulses and the 60 s after them, s (default ``dt_s``).
    soc_start : float
        SOC at the start, fraction.
    first_rest_s : float
        Rest before the first move, s.

    Returns
    -------
    time_s, current_a : ndarray
        Current positive on discharge; the current changes exactly at sample times and is held
        for one sample on each side of an edge (a step between consecutive samples).
    """
    ts = [np.array([0.0])]
    cs = [np.array([0.0])]
    tcur = 0.0
    soc = soc_start

    def add(duration, current, step):
        nonlocal tcur, soc
        t, c = _seg(tcur, duration, current, step)
        ts.append(t)
        cs.append(c)
        tcur = float(t[-1])
        soc -= current * duration / 3600.0 / capacity_ah

    add(first_rest_s, 0.0, dt_s)
    fine = fine_dt_s or dt_s
    for lv in levels:
        move = soc - lv
        if move > 1e-6:
            i_move = move_rate_c * capacity_ah
            add(move * capacity_ah * 3600.0 / i_move, i_move, dt_s)
            add(rest_s, 0.0, dt_s)
        for cur in pulse_currents_a:
            add(pulse_s, cur, fine)
            if regen_ratio > 0:
                add(mid_rest_s, 0.0, fine)
                add(pulse_s, -regen_ratio * cur, fine)
            add(min(60.0, rest_s), 0.0, fine)
            if rest_s > 60.0:
                add(rest_s - 60.0, 0.0, dt_s)
    return np.concatenate(ts), np.concatenate(cs)


def low_rate_profile(capacity_ah: float, rate_c: float = 0.05, dt_s: float = 60.0, rest_s: float = 3600.0,
                     charge: bool = True):
    """A rest, a constant discharge of ``capacity_ah`` at ``rate_c``, a rest and (optionally) the charge back.

    The discharge removes exactly ``capacity_ah`` (the simulated cell then sits at SOC 0).

    Parameters
    ----------
    capacity_ah : float
        Cell capacity, Ah.
    rate_c : float
        Test rate, C (1/h); the current is ``rate_c * capacity_ah`` A.
    dt_s : float
        Sample interval of the rests, s (the discharge and charge intervals are adjusted so that
        they hold a whole number of samples).
    rest_s : float
        Length of each rest, s.
    charge : bool
        Append the constant-current charge back and a final rest.

    Returns
    -------
    time_s : numpy.ndarray, shape (n,)
        Sample times, s, from 0.
    current_a : numpy.ndarray, shape (n,)
        Current, A, positive on discharge.
    """
    i_test = rate_c * capacity_ah
    dur = capacity_ah / i_test * 3600.0
    n = int(round(dur / dt_s))
    dt_exact = dur / n
    t = [0.0]
    c = [0.0]
    tt = 0.0
    for _ in range(int(rest_s / dt_s)):
        tt += dt_s
        t.append(tt)
        c.append(0.0)
    # the step happens between the last rest sample and the first discharge sample; the
    # sampling rule counts that interval at half current, so the discharge is held for n
    # intervals plus one half interval at each edge: n full intervals total
    for _ in range(n):
        tt += dt_exact
        t.append(tt)
        c.append(i_test)
    for _ in range(int(rest_s / dt_s)):
        tt += dt_s
        t.append(tt)
        c.append(0.0)
    if charge:
        for _ in range(n):
            tt += dt_exact
            t.append(tt)
            c.append(-i_test)
        for _ in range(int(rest_s / dt_s)):
            tt += dt_s
            t.append(tt)
            c.append(0.0)
    return np.array(t), np.array(c)
