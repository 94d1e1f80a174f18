"""Small invented cell models and profiles shared by the estimator-core tests (not a test module)."""
from __future__ import annotations

import numpy as np

from socfuse.models import CellModel, Hysteresis, OcvCurve, ParamTable, RcPair, Recording, simulate


def tiny_model(n_rc: int = 1, hysteresis: bool = False, temperature: bool = False, eta: float = 0.99,
               linear: bool = False) -> CellModel:
    """A made-up 4.8 Ah NMC-like cell: OCV 3.0..4.2 V, R0 20 mohm, RC pairs of 30 s and 400 s."""
    soc = np.linspace(0.0, 1.0, 11)
    ocv = 3.0 + 1.2 * soc if linear else 3.0 + 1.0 * soc + 0.25 * soc ** 2 - 0.05 * np.sin(6 * soc) ** 2 * 0
    if temperature:
        temps = np.array([5.0, 25.0, 45.0])
        ocv_t = np.stack([ocv - 0.01, ocv, ocv + 0.005])
        oc = OcvCurve(soc, ocv_t, temps)
        r0 = ParamTable(soc, np.stack([0.04 - 0.01 * soc, 0.02 - 0.005 * soc, 0.015 - 0.003 * soc]), temps, "r0_ohm")
    else:
        oc = OcvCurve(soc, ocv)
        r0 = ParamTable(soc, 0.02 - 0.005 * soc if not linear else np.full(11, 0.02), None, "r0_ohm")
    pairs = [RcPair(ParamTable.constant(0.015, "r1_ohm"), ParamTable.constant(30.0, "tau1_s")),
             RcPair(ParamTable.constant(0.01, "r2_ohm"), ParamTable.constant(400.0, "tau2_s"))][:n_rc]
    hy = Hysteresis(40.0, 0.01) if hysteresis else None
    return CellModel(4.8, oc, r0, tuple(pairs), eta, hy, name="tiny test cell")


def drive_profile(n: int = 1200, seed: int = 0, dt_s: float = 1.0, uneven: bool = False):
    """Stop-and-go current (A, + discharge) with regeneration; times with optional jitter/gaps."""
    rng = np.random.default_rng(seed)
    dt = np.full(n - 1, dt_s)
    if uneven:
        dt = dt * rng.uniform(0.5, 1.5, n - 1)
        dt[n // 3] = 40.0  # a gap
    t = np.concatenate([[0.0], np.cumsum(dt)])
    base = 4.0 * (np.sin(t / 60.0) > -0.2) - 2.0 * (np.sin(t / 23.0) > 0.9)
    return t, base + rng.normal(0, 0.3, n)


def simulated_recording(model, n=1200, seed=0, soc0=0.8, noise_v=0.005, uneven=False, temperature_c=None,
                        name="sim"):
    t, i = drive_profile(n, seed, uneven=uneven)
    sim = simulate(model, t, i, temperature_c, soc0=soc0)
    rng = np.random.default_rng(seed + 1)
    v = sim.voltage_v + rng.normal(0.0, noise_v, n)
    temp = None if temperature_c is None else np.broadcast_to(np.asarray(temperature_c, float), t.shape)
    return Recording(t, i, v, temp, sim.soc, name=name), sim
