"""Butler-Volmer current dependence of the pulse resistance (models/identify/currentdep.py).

References: the symmetric current-overpotential equation (Bard and Faulkner, Electrochemical
Methods, 2nd ed., 2001, ch. 3), R and F from CODATA 2018; the Panasonic 18650PF 5-pulse HPPC tests
(Kollmeyer 2018, doi:10.17632/wykht8y7tg.1).
"""
from __future__ import annotations

import numpy as np
import pytest

from socfuse.models.identify.currentdep import fit_butler_volmer


def test_fit_recovers_the_butler_volmer_parameters():
    # dV = R_s I + (2RT/F) asinh(I / 2 I0); 2RT/F at 273.15 K is 47.07 mV (R = 8.314462618 J/mol/K,
    # F = 96485.33212 C/mol, CODATA 2018)
    i = np.array([1.45, 2.9, 5.8, 11.6, 17.4])
    b = 2 * 8.314462618 * 273.15 / 96485.33212
    assert b == pytest.approx(0.04707, abs=1e-5)
    dv = 0.05 * i + b * np.arcsinh(i / (2 * 0.4))
    f = fit_butler_volmer(i, dv, 0.0)
    assert f["r_s_ohm"] == pytest.approx(0.05, rel=1e-4)
    assert f["i0_a"] == pytest.approx(0.4, rel=1e-3)
    assert f["rms_v"] < 1e-8
    assert fit_butler_volmer([1.0, 1.2, 1.5], [0.1, 0.12, 0.15], 25.0) is None  # too narrow a span
