"""Speed of the compiled EKF against filterpy's ExtendedKalmanFilter, and batched throughput.

Run from the repository root::

    python benchmarks/speed.py [--cells 1000] [--filterpy-steps 20000]

Recordings: one hour at 1 Hz simulated from the demo-cell model (socfuse.estimator.demo.truth, 2 RC pairs, no
hysteresis, temperature tables), and the real 10 Hz Panasonic 18650PF drive cycle
(Kollmeyer 2018, doi:10.17632/wykht8y7tg.1) when ../shared/realdata is present (read with
scipy.io.loadmat, struct ``meas``, current sign flipped to + = discharge, duplicate times
dropped).  filterpy runs the same model: F, B and Q per step from our linearisation
(``EkfSetup.linearise``, a compiled call of about a microsecond) and Hx/HJacobian from
``EkfSetup.measure``; its time is dominated by filterpy's own numpy work.  The last line is
``ns_per_step=<ours> ratio_vs_filterpy=<filterpy time / ours>`` for the 1 Hz recording.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from socfuse.estimator.filters.ekf import _arrays, _prior, initial_soc, run_ekf, run_ekf_batch, setup  # noqa: E402
from socfuse.estimator.filters import kernels as K  # noqa: E402
from socfuse.estimator.filters.settings import default_settings  # noqa: E402
from socfuse.models import Recording, simulate  # noqa: E402
from socfuse.estimator.demo.truth import truth_cell_model  # noqa: E402

# Single-stream figures use the process CPU clock (immune to being descheduled on a shared
# machine); the batch prints both wall-clock throughput and throughput per CPU-second times the
# number of cores (what an otherwise idle machine would give).
CLOCK = time.process_time
DRIVE = "panasonic_18650pf/drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat"


def demo_recording(n=3600, seed=0):
    m = truth_cell_model().with_(hysteresis=None)
    rng = np.random.default_rng(seed)
    t = np.arange(n, dtype=float)
    i = 6.0 * (np.sin(t / 70.0) > -0.3) - 4.0 * (np.sin(t / 17.0) > 0.92) + rng.normal(0, 0.5, n)
    sim = simulate(m, t, i, 25.0, soc0=0.95)
    return m, Recording(t, i, sim.voltage_v + rng.normal(0, 0.003, n), np.full(n, 25.0), sim.soc, "demo-1h")


def real_recording():
    root = Path(os.environ.get("SOCFUSE_REALDATA", REPO.parent / "shared" / "realdata"))
    path = root / DRIVE
    if not path.exists():
        return None
    from scipy.io import loadmat
    meas = loadmat(path, squeeze_me=True, struct_as_record=False)["meas"]
    t = np.asarray(meas.Time, dtype=float)
    keep = np.concatenate([[True], np.diff(t) > 0])
    t = t[keep]
    i = -np.asarray(meas.Current, dtype=float)[keep]
    v = np.asarray(meas.Voltage, dtype=float)[keep]
    temp = np.asarray(meas.Battery_Temp_degC, dtype=float)[keep]
    keep2 = np.concatenate([[True], np.diff(t) > 0])  # any remaining non-increasing rows
    return Recording(t[keep2], i[keep2], v[keep2], temp[keep2], name="panasonic drive cycle 1 (10 Hz)")


def time_ours(model, rec, settings, repeat=100):
    su = setup(model, settings)
    x0, p0 = _prior(su, *initial_soc(su, rec, 0.9))
    t, i, v, tc = _arrays(rec)
    n, nx = rec.n, su.n_x
    outs = (np.empty((n, nx)), np.empty(n), np.empty(n), np.empty(n), np.empty(n))
    d = np.empty((1, nx, nx))
    args = (t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, x0, p0, *outs, False, d, d, d)
    K.ekf_run(*args)  # compile / load from cache
    best = np.inf
    for _ in range(repeat):
        t0 = CLOCK()
        K.ekf_run(*args)
        best = min(best, CLOCK() - t0)
    return best / n * 1e9


def time_filterpy(model, rec, settings, max_steps):
    from filterpy.kalman import ExtendedKalmanFilter

    su = setup(model, settings)
    rec = rec.slice(0, min(rec.n, max_steps))
    x0, p0 = _prior(su, *initial_soc(su, rec, 0.9))
    t, i, v, tc = _arrays(rec)
    kf = ExtendedKalmanFilter(dim_x=su.n_x, dim_z=1)
    kf.x = x0.reshape(-1, 1)
    kf.P = p0.copy()
    kf.R = np.array([[settings.voltage_noise_v ** 2]])
    su.linearise(x0, i[0], i[1], t[1] - t[0], tc[0], tc[1])  # compile / load before timing
    su.measure(x0, i[0], tc[0])
    t0 = CLOCK()
    for k in range(rec.n):
        if k > 0:
            _, f, g, q, _, _ = su.linearise(kf.x[:, 0], i[k - 1], i[k], t[k] - t[k - 1], tc[k - 1], tc[k])
            kf.F, kf.B, kf.Q = f, g.reshape(-1, 1), q
            kf.predict(u=np.array([[0.5 * (i[k - 1] + i[k])]]))
        if np.isfinite(v[k]):
            ik, tk = i[k], tc[k]
            kf.update(np.array([[v[k]]]), lambda x: su.measure(x[:, 0], ik, tk)[1].reshape(1, -1),
                      lambda x: np.array([[su.measure(x[:, 0], ik, tk)[0]]]))
    return (CLOCK() - t0) / rec.n * 1e9


def time_batch(model, rec, settings, cells):
    recs = [rec] * cells
    scales = np.linspace(0.95, 1.05, cells)
    run_ekf_batch(model, recs[:2], settings, 0.9, scales[:2])  # compile / load
    su = setup(model, settings)
    # time the kernel only (the Trace assembly per cell is Python bookkeeping)
    m = cells
    lens = np.full(m, rec.n)
    offsets = np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)
    x0, p0 = _prior(su, *initial_soc(su, rec, 0.9))
    x0s, p0s = np.repeat(x0[None], m, 0), np.repeat(p0[None], m, 0)
    cat = [np.concatenate([a] * m) for a in _arrays(rec)]
    n = int(offsets[-1])
    outs = (np.empty((n, su.n_x)), np.empty(n), np.empty(n), np.empty(n), np.empty(n), np.zeros(m, np.int64))
    best, best_cpu = np.inf, np.inf
    for _ in range(3):
        t0, c0 = time.perf_counter(), time.process_time()
        K.ekf_run_batch(offsets, *cat, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, scales,
                        x0s, p0s, *outs)
        best = min(best, time.perf_counter() - t0)
        best_cpu = min(best_cpu, time.process_time() - c0)
    return n / best, n / best_cpu


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=int, default=1000)
    ap.add_argument("--filterpy-steps", type=int, default=20000)
    a = ap.parse_args(argv)
    model, rec = demo_recording()
    s = default_settings(model)
    print(f"model: {model.name}, {model.n_rc} RC pairs, state size {setup(model, s).n_x}, "
          f"tables {setup(model, s).tables.packed.shape}")
    run_ekf(model, rec, s)
    ours = time_ours(model, rec, s)
    fp = time_filterpy(model, rec, s, a.filterpy_steps)
    print(f"{rec.name}: {rec.n} steps  ours {ours:8.1f} ns/step  filterpy {fp:10.0f} ns/step  ratio {fp / ours:7.0f}")
    real = real_recording()
    if real is not None:
        ours_r = time_ours(model, real, s, repeat=5)
        fp_r = time_filterpy(model, real, s, a.filterpy_steps)
        print(f"{real.name}: {real.n} steps  ours {ours_r:8.1f} ns/step  filterpy {fp_r:10.0f} ns/step  "
              f"ratio {fp_r / ours_r:7.0f}  (demo model on the real current; timing only)")
    else:
        print("real drive cycle not found (set SOCFUSE_REALDATA); skipped")
    thr, thr_cpu = time_batch(model, rec, s, a.cells)
    ncpu = os.cpu_count()
    print(f"batched: {a.cells} cells x {rec.n} steps on {ncpu} cores: {thr / 1e6:.1f} million cell-steps/s wall clock, "
          f"{thr_cpu * ncpu / 1e6:.1f} million per {ncpu} CPU-seconds (load average {os.getloadavg()[0]:.1f})")
    print(f"ns_per_step={ours:.1f} ratio_vs_filterpy={fp / ours:.0f}")


if __name__ == "__main__":
    main()
