"""models.pchip against scipy.interpolate.PchipInterpolator: the same doubles, bit for bit.

Reference: scipy (PyPI), ``scipy.interpolate.PchipInterpolator`` (Fritsch and Carlson, SIAM J.
Numer. Anal. 17, 1980) and its ``antiderivative()`` (``PPoly``); equality is exact (``==`` on
the bits), not a tolerance, because the OCV curve and the energy integral swapped scipy for
models.pchip and their results must not move.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

from socfuse.models.pchip import pchip


def _same_bits(a, b):
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    assert a.shape == b.shape
    assert np.array_equal(a.view(np.int64), b.view(np.int64)), np.max(np.abs(a - b))


def _curves():
    rng = np.random.default_rng(15)
    yield np.array([0.0, 1.0]), np.array([3.0, 4.2])                      # two points: linear
    yield np.array([0.0, 0.4, 1.0]), np.array([3.0, 3.0, 4.1])            # a flat segment
    yield np.array([0.0, 0.3, 0.5, 1.0]), np.array([3.2, 3.9, 3.7, 4.1])  # slope sign changes
    yield np.array([0.0, 0.01, 0.5, 1.0]), np.array([2.5, 3.6, 3.65, 4.2])  # end slope overshoot
    for n in (5, 17, 101, 400):
        x = np.sort(rng.uniform(0.0, 1.0, n))
        x = np.unique(x)
        y = 3.0 + np.cumsum(rng.uniform(0.0, 0.02, x.size))            # OCV-like, increasing
        yield x, y
        yield x, y + 0.01 * rng.standard_normal(x.size)                 # not monotone
    soc = np.linspace(0.0, 1.0, 201)
    yield soc, 3.4 + 0.6 * soc + 0.1 * np.tanh(20 * (soc - 0.1)) - 0.05 * np.exp(-soc / 0.02)


_CURVES = list(_curves())


@pytest.mark.parametrize("k", range(len(_CURVES)))
def test_values_slopes_and_antiderivative_equal_scipy(k):
    x, y = _CURVES[k]
    ref = PchipInterpolator(x, y)
    ours = pchip(x, y)
    _same_bits(ours.c, ref.c)
    rng = np.random.default_rng(k)
    v = np.concatenate([x, rng.uniform(x[0] - 0.1, x[-1] + 0.1, 2000), [x[0], x[-1], np.nan]])
    for nu in (0, 1):
        _same_bits(ours(v, nu), ref(v, nu))
        _same_bits(ours(0.37, nu), ref(0.37, nu))       # scalar: a 0-d array, as scipy gives
    anti_ref, anti = ref.antiderivative(), ours.antiderivative()
    _same_bits(anti.c, anti_ref.c)
    _same_bits(anti(v), anti_ref(v))
    _same_bits(anti(v.reshape(-1, 1)), anti_ref(v.reshape(-1, 1)))


def test_bad_breakpoints_refused():
    with pytest.raises(ValueError):
        pchip([0.0, 0.5, 0.5], [1.0, 2.0, 3.0])


def test_ocv_curve_equals_scipy_on_the_demo_cell():
    # the curve the estimator evaluates: OcvCurve.voltage / slope through models.pchip, against the same
    # expressions through scipy's PchipInterpolator on every temperature row of the demo cell's OCV table
    from socfuse.estimator.demo.truth import truth_cell_model

    ocv = truth_cell_model().ocv
    z = np.concatenate([np.linspace(-0.05, 1.05, 3001), ocv.soc])
    for r in range(ocv.n_temperatures):
        ref = PchipInterpolator(ocv.soc, ocv.ocv_v[r])
        lo, hi = ocv.soc[0], ocv.soc[-1]
        s = np.clip(z, lo, hi)
        want = np.where(z < lo, ref(lo) + ref(lo, 1) * (z - lo), ref(s))
        want = np.where(z > hi, ref(hi) + ref(hi, 1) * (z - hi), want)
        t = None if ocv.temperature_c is None else ocv.temperature_c[r]
        _same_bits(ocv.voltage(z, t), want)
        slope = np.where(z < lo, ref(lo, 1), np.where(z > hi, ref(hi, 1), ref(s, 1)))
        _same_bits(ocv.slope(z, t), slope)
