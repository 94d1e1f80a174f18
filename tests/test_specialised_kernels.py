"""The kernels compiled per state layout give the same numbers as the same source compiled generically.

``kernels.ekf_run`` hands the layout ints to numba as literals (one machine code per layout);
calling the numba dispatcher ``kernels._ekf_run`` directly compiles the same source with the
layout as run-time ints (the way every kernel was compiled before).  Both must agree to 1e-12 on
the demo day and on a real 10 Hz recording (Panasonic 18650PF, Kollmeyer 2018,
doi:10.17632/wykht8y7tg.1, CC BY 4.0; skipped when absent).  The reference for the filter itself
is filterpy (tests/test_ekf_filterpy.py); this file checks only that specialising changes nothing.
"""
from __future__ import annotations

import numpy as np
import pytest

from ekf_cases import tiny_model
from socfuse.estimator.demo.truth import truth_cell_model
from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import initial_soc, prior, recording_arrays, setup
from socfuse.estimator.filters.settings import default_settings
from socfuse.models.loaders import load_recording


def _both(model, rec, settings):
    su = setup(model, settings)
    x0, p0 = prior(su, *initial_soc(su, rec, 0.8))
    t, i, v, tc = recording_arrays(rec)
    n, nx = rec.n, su.n_x
    res = []
    for generic in (False, True):
        outs = (np.empty((n, nx)), np.empty(n), np.empty(n), np.empty(n), np.empty(n))
        d = np.empty((1, nx, nx))
        if generic:
            if not hasattr(K._ekf_run, "compile"):
                pytest.skip("NUMBA_DISABLE_JIT: no compiled variants to compare")
            g = K._ekf_run(t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.i_r, su.i_e, int(su.est_h), su.prm,
                           x0, p0, *outs, False, d, d, d)
        else:
            g = K.ekf_run(t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, x0, p0, *outs,
                          False, d, d, d)
        res.append((g, outs))
    return res


def _assert_same(res):
    (ga, a), (gb, b) = res
    assert ga == gb
    for u, w in zip(a, b):
        np.testing.assert_allclose(u, w, rtol=0, atol=1e-12)


def test_demo_day_specialised_equals_generic(repo):
    m = truth_cell_model()   # 7 states: 2 RC, bias, hysteresis, resistance scale, model error
    rec = load_recording(repo / "datasets" / "c48_day_lunch.csv")
    _assert_same(_both(m, rec, default_settings(m)))


def test_real_10hz_specialised_equals_generic(realdata):
    m = tiny_model(n_rc=2)   # 4 states: a layout other than the demo's
    rec = load_recording(realdata / "drive_cycles" / "03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat",
                         preset="panasonic-18650pf")
    rec = rec.slice(0, 20000)
    m = m.with_(capacity_ah=2.9)
    _assert_same(_both(m, rec, default_settings(m)))


def test_layout_mismatch_is_refused():
    su = setup(tiny_model())
    assert su.n_x == 5   # soc, one RC pair, bias, resistance scale, model error
    with pytest.raises(ValueError, match="state size 6 does not match"):
        K.layout(6, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm)
