"""Energy-SOC tables cached per OCV curve content (estimator.filters.energy)."""
from __future__ import annotations

import numpy as np
from scipy.integrate import quad
from scipy.interpolate import PchipInterpolator

from ekf_cases import simulated_recording, tiny_model
from socfuse.estimator.filters import energy as E
from socfuse.estimator.filters.ekf import run_ekf_batch
from socfuse.models import OcvCurve


def test_curve_integral_shared_by_content(monkeypatch):
    builds = []
    real = E._RowIntegral.build.__func__

    def counting(cls, soc, ocv):
        builds.append(1)
        return real(cls, soc, ocv)

    monkeypatch.setattr(E._RowIntegral, "build", classmethod(counting))
    E._CURVES.clear()
    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=200)
    scales = np.linspace(0.9, 1.1, 12)
    trs = run_ekf_batch(m, [rec] * 12, None, 0.8, scales)
    assert len(builds) == 1          # one OCV row integrated once for the 12 capacity variants
    # rest energy E = Q * integral_0^z OCV (common practice, no source): exact in Q; the integral against
    # scipy.integrate.quad of the same PCHIP curve (scipy.interpolate.PchipInterpolator)
    z = 0.63
    f = PchipInterpolator(m.ocv.soc, np.asarray(m.ocv.ocv_v).reshape(-1))
    ref = quad(lambda s: float(f(s)), 0.0, z, epsabs=1e-13)[0]
    for sc, tr in zip(scales, trs):
        mdl = m.with_(capacity_ah=m.capacity_ah * sc)
        assert np.isclose(E.remaining_energy_wh(mdl, z), mdl.capacity_ah * ref, rtol=1e-10)
        # the energy SOC does not depend on the capacity
        np.testing.assert_allclose(tr.soc_e, E.soc_c_to_e(m, tr.soc), rtol=0, atol=1e-15)


def test_changed_curve_is_not_served_stale_and_cache_is_bounded():
    E._CURVES.clear()
    m = tiny_model(n_rc=1)
    a = E.soc_c_to_e(m, 0.5)
    oc = m.ocv
    bumped = m.with_(ocv=OcvCurve(oc.soc, np.asarray(oc.ocv_v) + 0.001 * np.asarray(oc.soc) ** 2))
    b = E.soc_c_to_e(bumped, 0.5)
    assert a != b
    for k in range(E.CURVE_CACHE_SIZE + 8):
        E.soc_c_to_e(m.with_(ocv=OcvCurve(oc.soc, np.asarray(oc.ocv_v) + 1e-4 * k)), 0.5)
    assert len(E._CURVES) <= E.CURVE_CACHE_SIZE
    # equal content, a new object: the same (cached) integral and the same value as a fresh build
    again = m.with_(ocv=OcvCurve(np.array(oc.soc), np.array(oc.ocv_v)))
    fresh = E.EnergyTable.from_points(oc.soc, oc.ocv_v, m.capacity_ah)
    assert E.soc_c_to_e(again, 0.37) == fresh.soc_e(0.37)
