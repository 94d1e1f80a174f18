"""Soak: the EKF and the coulomb baseline over 30 days at 1 Hz and 3 days at 10 Hz.

Run from the repository root::

    nice python benchmarks/soak.py [--days-1hz 30] [--days-10hz 3]

The recording is simulated with the one open-loop simulator (``socfuse.models.simulate``) from
the demo cell's truth parameters (two RC pairs; demo cell C48 is invented) on a repeated daily
duty of our own: 8 h of stop-and-go riding (mean 0.4 A, regeneration spikes), a 2 h rest, a C/3
charge that puts back exactly the charge used, and a 12 h rest at 15-25 degC.  The measured signals
go through the BMS-grade sensor model (``socfuse.models.sensors.bms_grade_sensors``: current offset
0.5 % of 1C, gain error 0.4 %, noise 0.3 % of 1C; voltage 1.5 mV noise and 1 mV steps), so coulomb
counting drifts by the offset for the whole soak.  Printed per case: covariance health (the filter
sigma finite and positive at every step, the health monitor's resets and fallbacks), SOC RMSE and
maximum error, the true SOC's coverage by +-3 sigma, CPU time and peak memory.  Figures depend on
the machine (2 cores shared with other work here); they are never asserted in tests.
"""
from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from socfuse.estimator.demo.truth import truth_cell_model  # noqa: E402
from socfuse.estimator.filters import kernels as K  # noqa: E402
from socfuse.estimator.filters.run import estimate  # noqa: E402
from socfuse.models import Recording, simulate  # noqa: E402
from socfuse.models.sensors import bms_grade_sensors  # noqa: E402

DAY_S = 86400.0


def daily_current(dt_s: float, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """One day's true current (A, + = discharge) and temperature (degC) at spacing ``dt_s``."""
    n = int(round(DAY_S / dt_s))
    t = np.arange(n) * dt_s
    ride = t < 8 * 3600.0
    # stop-and-go: 40 s cycles of pulling and stopping, with short regeneration on descents
    phase = (t % 40.0) / 40.0
    i = np.where(phase < 0.6, 0.75, 0.0) - np.where((phase > 0.6) & (phase < 0.7), 0.6, 0.0)
    i = np.where(ride, i * (1.0 + 0.3 * np.sin(t / 1300.0 + rng.uniform(0, 6))), 0.0)
    used_c = np.sum(i) * dt_s  # charge used, C (A s)
    charge = (t >= 10 * 3600.0) & (t < 10 * 3600.0 + used_c / 1.6)
    i = np.where(charge, -1.6, i)  # C/3 charge putting back exactly what the ride used
    temp = 20.0 + 5.0 * np.sin(2 * np.pi * (t / DAY_S - 0.3))
    return i, temp


def soak_recording(days: int, dt_s: float, seed: int = 11):
    model = truth_cell_model().with_(hysteresis=None)
    rng = np.random.default_rng(seed)
    parts = [daily_current(dt_s, rng) for _ in range(days)]
    i = np.concatenate([p[0] for p in parts])
    temp = np.concatenate([p[1] for p in parts])
    t = np.arange(i.size) * dt_s
    sim = simulate(model, t, i, temp, soc0=0.95)
    s = bms_grade_sensors(model.capacity_ah)
    return model, Recording(t, s.current(i, rng), s.voltage(sim.voltage_v, rng), s.temperature(temp, rng), sim.soc,
                            f"soak {days} d at {1 / dt_s:g} Hz")


def run_case(days: int, dt_s: float) -> list[str]:
    t0 = time.process_time()
    model, rec = soak_recording(days, dt_s)
    t_sim = time.process_time() - t0
    lines = [f"{rec.name}: {rec.n:,} samples (simulated in {t_sim:.1f} s CPU)"]
    for method in ("ekf", "coulomb"):
        c0 = time.process_time()
        tr = estimate(model, rec, method, soc0=0.95)
        cpu = time.process_time() - c0
        e = np.asarray(tr.soc) - np.asarray(rec.soc_ref)
        sig = np.asarray(tr.soc_sigma)
        health = (f"sigma finite and > 0 at every step: {bool(np.all(np.isfinite(sig)) and np.all(sig > 0))}")
        if getattr(tr, "status", None) is not None:
            st = np.asarray(tr.status)
            health += (f", monitor resets (non-finite or negative covariance) {np.count_nonzero(st & K.ST_RESET)}, "
                       f"fallback samples {np.count_nonzero(st & K.ST_FALLBACK)}")
        cover = f"{100 * np.mean(np.abs(e) <= 3 * sig):.1f} %" if method != "coulomb" else "-"
        lines.append(f"  {method:8s} RMSE {100 * np.sqrt(np.mean(e ** 2)):6.2f} %  max {100 * np.max(np.abs(e)):6.2f} %  "
                     f"coverage {cover:>7s}  CPU {cpu:6.1f} s ({1e9 * cpu / rec.n:5.0f} ns/sample)  {health}")
    return lines


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days-1hz", type=int, default=30)
    ap.add_argument("--days-10hz", type=int, default=3)
    a = ap.parse_args(argv)
    for days, dt in ((a.days_1hz, 1.0), (a.days_10hz, 0.1)):
        if days > 0:
            print("\n".join(run_case(days, dt)), flush=True)
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"peak memory {peak_mb:.0f} MB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
