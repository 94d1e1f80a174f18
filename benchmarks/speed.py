"""Speed of socfuse's EKF beside its own exported C, filterpy, and the cross-cell batch kernel.

Run from the repository root::

    python benchmarks/speed.py [--rounds 7] [--filterpy-steps 3000] [--no-c]

What is timed, in one run, on the same inputs:

- socfuse single stream: the compiled kernel (``estimator.filters.kernels.ekf_run``, the filter
  ``run_ekf`` calls) on the demo day ``datasets/c48_day_lunch.csv`` (1 Hz, 7.4 h) with the demo
  cell's model (``socfuse.estimator.demo.truth.truth_cell_model``: 2 RC pairs, hysteresis,
  temperature tables) and its default settings, and the same model on the real 10 Hz Panasonic
  18650PF drive cycle (Kollmeyer 2018, doi:10.17632/wykht8y7tg.1; timing only) when
  ``../shared/realdata`` (or ``SOCFUSE_REALDATA``) is present.  Also the monitored run that
  ``socfuse estimate`` uses (input checks, health monitor, baseline; Python set-up included).
- the C99 code socfuse exports (``export_c``, float32, monitored step ``sfx_step``), compiled
  with the system ``cc -O2`` and timed by a small generated C driver over the same samples
  (skipped with the reason when there is no compiler).
- filterpy's ``ExtendedKalmanFilter`` written the usual way: the state transition, its Jacobian
  and the measurement Jacobian in Python/numpy (``np.interp`` on the model's tables), nothing of
  socfuse's compiled code; on the first ``--filterpy-steps`` samples of the demo day.
- the cross-cell batch kernel (``estimator.filters.batch.run_ekf_cells``, final state only) at
  1, 100 and 10,000 cells (capacity scales 0.95..1.05; 10,000 cells on the first 2,000 samples),
  in million cell-steps per CPU-second (and per wall-clock second), beside the older
  recording-parallel ``kernels.ekf_run_batch`` at 100 cells.

- start-up, wall-clock: ``socfuse --help``, and a warm ``socfuse estimate -o trace.csv`` of the
  real 10 Hz drive cycle 1 (3.0 h, a model from ``socfuse identify`` on the Panasonic C/20 and HPPC
  files) read from a canonical CSV and from the dataset's ``.mat`` (targets: 0.3 s and 1.0 s).
  Warm: bytecode written, numba's on-disk cache filled, the files in the page cache.  Only this
  part: ``python benchmarks/speed.py --startup-only``.

Clock: the process CPU clock (``time.process_time``; for the batch it sums both cores), min and
median of ``--rounds`` rounds.  The machine has 2 cores shared with other work: the load
average is printed, and figures move with it.  The last line is
``ns_per_step=.. ratio_vs_filterpy=.. ratio_vs_c=.. batch_msteps_per_cpu_s=.. help_wall_s=..
estimate_wall_s=.. estimate_mat_wall_s=..`` (demo day;
``ratio_vs_filterpy`` = filterpy time / ours, ``ratio_vs_c`` = exported C time / ours, above 1
when socfuse is faster, ``nan`` when the C was skipped; batch at 10,000 cells).
"""
from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from socfuse.estimator.demo.truth import truth_cell_model  # noqa: E402
from socfuse.estimator.filters import kernels as K  # noqa: E402
from socfuse.estimator.filters.batch import run_ekf_cells  # noqa: E402
from socfuse.estimator.filters.ekf import initial_soc, prior, recording_arrays, run_ekf, setup  # noqa: E402
from socfuse.estimator.filters.settings import default_settings  # noqa: E402
from socfuse.models import Recording  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402

CLOCK = time.process_time
DAY = REPO / "datasets" / "c48_day_lunch.csv"
DRIVE = "panasonic_18650pf/drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat"


def _stats(times, n):
    a = np.sort(np.asarray(times)) / n * 1e9
    return float(a[0]), float(np.median(a))


def real_recording():
    root = Path(os.environ.get("SOCFUSE_REALDATA", REPO.parent / "shared" / "realdata"))
    path = root / DRIVE
    if not path.exists():
        return None
    from scipy.io import loadmat
    meas = loadmat(path, squeeze_me=True, struct_as_record=False)["meas"]
    t = np.asarray(meas.Time, dtype=float)
    i = -np.asarray(meas.Current, dtype=float)     # the dataset's sign is + = charge
    v = np.asarray(meas.Voltage, dtype=float)
    temp = np.asarray(meas.Battery_Temp_degC, dtype=float)
    keep = np.ones(t.size, dtype=bool)
    last = -np.inf
    for k in range(t.size):                         # strictly increasing times only
        keep[k] = t[k] > last
        last = max(last, t[k])
    return Recording(t[keep], i[keep], v[keep], temp[keep], name="panasonic drive cycle 1 (10 Hz)")


# ----------------------------------------------------------------------------- start-up (CLI)
PAN_C20 = "panasonic_18650pf/c20_ocv_and_1c_start_of_tests/05-08-17_13.26 C20 OCV Test_C20_25dC.mat"
PAN_HPPC = "panasonic_18650pf/hppc/03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat"


def _socfuse_cmd() -> list:
    """This checkout's command line: ``python -m`` of the CLI module (what the console script calls).

    Not a ``socfuse`` found on PATH: that may be another installation (a pyenv shim of another
    checkout, say), which would time other code and add the shim's own start-up.
    """
    return [sys.executable, "-m", "socfuse.estimator.cli.main"]


def _checkout_env() -> dict:
    """The environment with this checkout first on ``PYTHONPATH``, so the child imports its code."""
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO)] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p])
    return env


def _timed_runs(argv, rounds, cwd):
    """Wall and CPU (user + sys of the child) seconds of ``rounds`` runs of ``socfuse argv``; min, median."""
    import resource
    import statistics

    walls, cpus = [], []
    for _ in range(rounds):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        t0 = time.perf_counter()
        p = subprocess.run(_socfuse_cmd() + [str(a) for a in argv], cwd=cwd, capture_output=True, text=True,
                           env=_checkout_env())
        walls.append(time.perf_counter() - t0)
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpus.append(r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime)
        if p.returncode != 0:
            raise RuntimeError(f"socfuse {' '.join(map(str, argv))} exited {p.returncode}: {p.stderr.strip()[-300:]}")
    return min(walls), statistics.median(walls), min(cpus), statistics.median(cpus)


def _compile_bytecode():
    """Write the package's bytecode (``__pycache__``, git-ignored) as an install would.

    ``pip install`` compiles every module; an editable checkout gets its ``.pyc`` files on the first
    import, unless ``PYTHONDONTWRITEBYTECODE`` is set (some sandboxes and CI images set it).  Then
    every run would compile about 20 modules from source (0.1 to 0.3 s on 2 busy cores), which
    is not the warm start-up a user sees; so the warm-up writes them once, explicitly.
    """
    import compileall

    for sub in ("socfuse", "models", "estimator"):
        compileall.compile_dir(str(REPO / sub), quiet=1)


def time_startup(rounds):
    """``socfuse --help`` and a warm ``socfuse estimate`` of the real 10 Hz drive cycle, wall-clock.

    The model comes from ``socfuse identify`` on the Panasonic C/20 and 25 degC HPPC files (the
    README's commands); the recording is drive cycle 1 (3.0 h at 10 Hz, 109,637 samples) as the
    dataset's ``.mat`` file and as a canonical-column CSV written here.  One untimed run first
    (numba's on-disk cache filled, files in the page cache), then ``rounds`` timed runs.

    Returns
    -------
    dict
        ``help``, ``estimate_csv``, ``estimate_mat``: (wall min, wall median, CPU min, CPU median) in
        s, or a str saying why it was skipped.
    """
    _compile_bytecode()
    out: dict = {"help": _timed_runs(["--help"], rounds, REPO)}
    root = Path(os.environ.get("SOCFUSE_REALDATA", REPO.parent / "shared" / "realdata"))
    if not (root / DRIVE).exists():
        out["estimate_csv"] = out["estimate_mat"] = "real drive cycle not found (set SOCFUSE_REALDATA)"
        return out
    import json

    with tempfile.TemporaryDirectory() as tmp:
        model = Path(tmp) / "pan.json"
        _timed_runs(["identify", "--ocv-test", root / PAN_C20, "--pulse-test", root / PAN_HPPC,
                     "--preset", "panasonic-18650pf", "-o", model], 1, tmp)
        cap = json.loads(model.read_text())["capacity_ah"]
        mat = ["--preset", "panasonic-18650pf", "--ref-soc0", "1", "--ref-capacity-ah", repr(cap), root / DRIVE]
        rec = load_recording(root / DRIVE, preset="panasonic-18650pf", ref_soc0=1.0, ref_capacity_ah=cap)
        csv = Path(tmp) / "cycle1.csv"
        cols = {"time_s": rec.time_s, "current_a": rec.current_a, "voltage_v": rec.voltage_v,
                "temperature_c": rec.temperature_c, "soc_ref": rec.soc_ref}
        np.savetxt(csv, np.column_stack(list(cols.values())), fmt="%.17g", delimiter=",",
                   header=",".join(cols), comments="")
        for key, src in (("estimate_csv", [csv]), ("estimate_mat", mat)):
            argv = ["estimate", "--model", model, *src, "-o", Path(tmp) / "trace.csv", "--force"]
            _timed_runs(argv, 1, tmp)                       # warm-up: numba cache, page cache
            out[key] = _timed_runs(argv, rounds, tmp)
    return out


# ----------------------------------------------------------------------------- socfuse
def time_kernel(model, rec, s, rounds):
    su = setup(model, s)
    x0, p0 = prior(su, *initial_soc(su, rec, 0.9))
    t, i, v, tc = recording_arrays(rec)
    n, nx = rec.n, su.n_x
    outs = (np.empty((n, nx)), np.empty(n), np.empty(n), np.empty(n), np.empty(n))
    d = np.empty((1, nx, nx))
    args = (t, i, v, tc, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, x0, p0, *outs, False, d, d, d)
    K.ekf_run(*args)  # compile / load from the cache
    times = []
    for _ in range(rounds):
        t0 = CLOCK()
        K.ekf_run(*args)
        times.append(CLOCK() - t0)
    return _stats(times, n)


def time_monitored(model, rec, s, rounds):
    run_ekf(model, rec.slice(0, 100), s, 0.9, monitor=True)
    times = []
    for _ in range(rounds):
        t0 = CLOCK()
        run_ekf(model, rec, s, 0.9, monitor=True)
        times.append(CLOCK() - t0)
    return _stats(times, rec.n)


# ----------------------------------------------------------------------------- exported C
_DRIVER = r"""
#include <stdio.h>
#include <stdlib.h>
#include <time.h>
#include "socfuse_ekf.h"
int main(int argc, char **argv) {
    FILE *f = fopen(argv[1], "rb");
    int rounds = atoi(argv[2]);
    long n;
    if (!f || fread(&n, sizeof n, 1, f) != 1) return 2;
    float *buf = malloc(sizeof(float) * 4 * (size_t)n);
    if (fread(buf, sizeof(float), 4 * (size_t)n, f) != 4 * (size_t)n) return 2;
    fclose(f);
    float *dt = buf, *cur = buf + n, *volt = buf + 2 * n, *temp = buf + 3 * n;
    sfx_state st;
    sfx_output out;
    double sink = 0.0;
    for (int r = 0; r < rounds; r++) {
        clock_t c0 = clock();
        sfx_init(&st, 0.9f);
        for (long k = 0; k < n; k++) {
            sfx_step(&st, dt[k], cur[k], volt[k], temp[k], &out);
        }
        clock_t c1 = clock();
        sink += out.soc;
        printf("%.9f\n", (double)(c1 - c0) / CLOCKS_PER_SEC);
    }
    fprintf(stderr, "final soc %f\n", sink / rounds);
    return 0;
}
"""


def time_c(model, s, rec, rounds):
    """(min, median) ns per step of the exported C, or a reason string when it cannot run."""
    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        return "no C compiler (cc) on PATH"
    from socfuse.estimator.outputs.export_c import export_c

    with tempfile.TemporaryDirectory(prefix="socfuse-speed-") as tmp:
        out = Path(tmp) / "c"
        export_c(model, s, out, golden=rec.slice(0, 200), measure=False)
        (out / "speed_driver.c").write_text(_DRIVER)
        exe = Path(tmp) / "speed_driver"
        res = subprocess.run([cc, "-O2", "-std=c99", "-o", str(exe), str(out / "speed_driver.c"),
                              str(out / "socfuse_ekf.c"), "-lm"], capture_output=True, text=True)
        if res.returncode != 0:
            return f"the exported C did not compile: {res.stderr.strip().splitlines()[-1:]}"
        dt = np.concatenate([[0.0], np.diff(rec.time_s)]).astype(np.float32)
        temp = np.full(rec.n, np.nan) if rec.temperature_c is None else rec.temperature_c
        data = Path(tmp) / "samples.bin"
        with open(data, "wb") as f:
            f.write(np.int64(rec.n).tobytes())
            for a in (dt, rec.current_a, rec.voltage_v, temp):
                f.write(np.ascontiguousarray(a, dtype=np.float32).tobytes())
        run = subprocess.run([str(exe), str(data), str(rounds)], capture_output=True, text=True)
        if run.returncode != 0:
            return f"the C driver failed ({run.returncode})"
        times = [float(x) for x in run.stdout.split()]
    return _stats(times, rec.n)


# ----------------------------------------------------------------------------- filterpy
def time_filterpy(model, rec, s, max_steps, rounds=3):
    """filterpy's ExtendedKalmanFilter with the model written in Python (tables via np.interp)."""
    from filterpy.kalman import ExtendedKalmanFilter

    su = setup(model, s)
    tab = su.tables
    rec = rec.slice(0, min(rec.n, max_steps))
    x0, p0 = prior(su, *initial_soc(su, rec, 0.9))
    t, i, v, tc = recording_arrays(rec)
    grid, tg = tab.soc_grid, tab.temp_grid
    nx, n_rc, i_b, i_h, i_r, i_e = su.n_x, su.n_rc, su.i_b, su.i_h, su.i_r, su.i_e
    cap, eta_c, gam, hm = tab.capacity_as, tab.eta_charge, tab.hyst_gamma, tab.hyst_max_v

    def rows_at(temp):
        w = np.interp(temp, tg, np.arange(tg.size, dtype=float)) if tg.size > 1 else 0.0
        lo = min(int(w), tg.size - 2) if tg.size > 1 else 0
        f = w - lo
        return tab.packed[:, lo] * (1 - f) + tab.packed[:, min(lo + 1, tg.size - 1)] * f

    def step_matrices(x, u, dt, rows):
        z = x[0]
        ue = u - x[i_b] if i_b >= 0 else u
        eta = 1.0 if ue >= 0 else eta_c
        f = np.eye(nx)
        g = np.zeros(nx)
        g[0] = -eta * dt / cap
        for j in range(n_rc):
            a = np.exp(-dt / np.interp(z, grid, rows[4 + n_rc + j]))
            f[1 + j, 1 + j] = a
            g[1 + j] = np.interp(z, grid, rows[4 + j]) * (1 - a)
        if i_h >= 0:
            e = np.exp(-abs(eta * ue * gam * dt / cap))
            f[i_h, i_h] = e
        if i_e >= 0:
            f[i_e, i_e] = np.exp(-dt / s.model_error_tau_s)
        if i_b >= 0:
            f[:, i_b] -= g
            f[i_b, i_b] = 1.0
        q = np.outer(g, g) * s.current_noise_a ** 2 + np.eye(nx) * s.q_rc_v2_per_s * dt
        q[0, 0] = s.q_soc_per_s * dt + g[0] ** 2 * s.current_noise_a ** 2
        if i_r >= 0:
            q[i_r, i_r] = s.q_resistance_per_s * dt
        if i_e >= 0:
            q[i_e, i_e] = s.model_error_v ** 2 * (1 - f[i_e, i_e] ** 2)
        return f, g, q

    def fx(x, u, dt, rows):
        z = x[0]
        ue = u - x[i_b] if i_b >= 0 else u
        eta = 1.0 if ue >= 0 else eta_c
        xn = x.copy()
        xn[0] = z - eta * ue * dt / cap
        for j in range(n_rc):
            a = np.exp(-dt / np.interp(z, grid, rows[4 + n_rc + j]))
            xn[1 + j] = a * x[1 + j] + np.interp(z, grid, rows[4 + j]) * (1 - a) * ue
        if i_h >= 0:
            e = np.exp(-abs(eta * ue * gam * dt / cap))
            xn[i_h] = e * x[i_h] - (1 - e) * np.sign(ue)
        if i_e >= 0:
            xn[i_e] = np.exp(-dt / s.model_error_tau_s) * x[i_e]
        return xn

    def hx(x, ik, rows):
        z = x[0]
        ie = ik - x[i_b] if i_b >= 0 else ik
        r0 = np.interp(z, grid, rows[2]) * (1 + x[i_r] if i_r >= 0 else 1.0)
        y = np.interp(z, grid, rows[0]) - r0 * ie - sum(x[1 + j] for j in range(n_rc))
        if i_h >= 0:
            y += hm * x[i_h]
        if i_e >= 0:
            y += x[i_e]
        return np.array([[y]])

    def hjac(x, ik, rows):
        h = np.zeros((1, nx))
        h[0, 0] = np.interp(x[0], grid, rows[1])
        h[0, 1:1 + n_rc] = -1.0
        r0 = np.interp(x[0], grid, rows[2])
        if i_b >= 0:
            h[0, i_b] = r0 * (1 + x[i_r] if i_r >= 0 else 1.0)
        if i_r >= 0:
            h[0, i_r] = -r0 * (ik - x[i_b] if i_b >= 0 else ik)
        if i_h >= 0:
            h[0, i_h] = hm
        if i_e >= 0:
            h[0, i_e] = 1.0
        return h

    times = []
    for _ in range(rounds):
        kf = ExtendedKalmanFilter(dim_x=nx, dim_z=1)
        kf.x = x0.reshape(-1, 1).copy()
        kf.P = p0.copy()
        kf.R = np.array([[s.voltage_noise_v ** 2]])
        t0 = CLOCK()
        for k in range(rec.n):
            rows = rows_at(tc[k])
            if k > 0:
                u = 0.5 * (i[k - 1] + i[k])
                dt = t[k] - t[k - 1]
                xv = kf.x[:, 0]
                f, _, q = step_matrices(xv, u, dt, rows)
                kf.F, kf.Q = f, q
                kf.P = f @ kf.P @ f.T + q          # predict written out: the transition is nonlinear
                kf.x = fx(xv, u, dt, rows).reshape(-1, 1)
            if np.isfinite(v[k]):
                ik = i[k]
                kf.update(np.array([[v[k]]]), lambda x: hjac(x[:, 0], ik, rows), lambda x: hx(x[:, 0], ik, rows))
        times.append(CLOCK() - t0)
    return _stats(times, rec.n)


# ----------------------------------------------------------------------------- batch
def time_batch(model, rec, s, cells, steps, rounds=3):
    r = rec.slice(0, min(rec.n, steps))
    scales = np.linspace(0.95, 1.05, cells) if cells > 1 else np.ones(1)
    run_ekf_cells(model, [r] * min(cells, 2), s, 0.9, scales[:2], keep="final")   # compile / load
    cpu, wall = [], []
    for _ in range(rounds):
        t0, c0 = time.perf_counter(), CLOCK()
        run_ekf_cells(model, [r] * cells, s, 0.9, scales, keep="final")
        wall.append(time.perf_counter() - t0)
        cpu.append(CLOCK() - c0)
    n = cells * r.n
    return n / min(cpu) / 1e6, n / min(wall) / 1e6, r.n


def time_old_batch(model, rec, s, cells, rounds=3):
    su = setup(model, s)
    lens = np.full(cells, rec.n)
    offsets = np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)
    x0, p0 = prior(su, *initial_soc(su, rec, 0.9))
    x0s, p0s = np.repeat(x0[None], cells, 0), np.repeat(p0[None], cells, 0)
    cat = [np.concatenate([a] * cells) for a in recording_arrays(rec)]
    n = int(offsets[-1])
    scales = np.linspace(0.95, 1.05, cells)
    outs = (np.empty((n, su.n_x)), np.empty(n), np.empty(n), np.empty(n), np.empty(n), np.zeros(cells, np.int64))
    args = (offsets, *cat, su.tables.packed, su.n_rc, su.i_b, su.i_h, su.est_h, su.prm, scales, x0s, p0s, *outs)
    K.ekf_run_batch(*args)
    cpu = []
    for _ in range(rounds):
        c0 = CLOCK()
        K.ekf_run_batch(*args)
        cpu.append(CLOCK() - c0)
    return n / min(cpu) / 1e6


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--filterpy-steps", type=int, default=3000)
    ap.add_argument("--no-c", action="store_true", help="skip the exported C")
    ap.add_argument("--startup-only", action="store_true", help="time only --help and the warm estimate")
    a = ap.parse_args(argv)
    if a.startup_only:
        print(f"machine: {os.cpu_count()} cores shared with other work, load average {os.getloadavg()[0]:.1f}")
        print_startup(time_startup(max(3, a.rounds // 2)))
        return
    model = truth_cell_model()
    s = default_settings(model)
    day = load_recording(DAY)
    su = setup(model, s)
    ncpu = os.cpu_count()
    print(f"machine: {ncpu} cores shared with other work, load average {os.getloadavg()[0]:.1f}; "
          f"process CPU clock, min / median of {a.rounds} rounds")
    print(f"model: {model.name}, {model.n_rc} RC pairs, state size {su.n_x} ({', '.join(su.names)}), "
          f"tables {su.tables.packed.shape}")
    ours, ours_med = time_kernel(model, day, s, a.rounds)
    mon, mon_med = time_monitored(model, day, s, max(3, a.rounds // 2))
    fp, fp_med = time_filterpy(model, day, s, a.filterpy_steps)
    print(f"{day.name}: {day.n} steps  ours {ours:8.1f} ns/step (median {ours_med:.1f})  "
          f"monitored run_ekf {mon:.1f} ns/step (median {mon_med:.1f}, Python set-up and baseline included)")
    print(f"filterpy ExtendedKalmanFilter, model in Python/numpy, first {min(day.n, a.filterpy_steps)} steps: "
          f"{fp:10.0f} ns/step (median {fp_med:.0f})  ratio {fp / ours:7.0f}")
    if a.no_c:
        c = "skipped (--no-c)"
    else:
        c = time_c(model, s, day, a.rounds)
    if isinstance(c, str):
        print(f"exported C: {c}")
        ratio_c = float("nan")
    else:
        ratio_c = c[0] / ours
        print(f"exported C (float32, monitored sfx_step, cc -O2): {c[0]:8.1f} ns/step (median {c[1]:.1f})  "
              f"C time / ours {ratio_c:.2f}")
    real = real_recording()
    if real is not None:
        ours_r, _ = time_kernel(model, real, s, max(3, a.rounds // 2))
        fp_r, _ = time_filterpy(model, real, s, a.filterpy_steps, rounds=1)
        print(f"{real.name}: {real.n} steps  ours {ours_r:8.1f} ns/step  filterpy {fp_r:10.0f} ns/step  "
              f"ratio {fp_r / ours_r:7.0f}  (demo model on the real current; timing only)")
    else:
        print("real drive cycle not found (set SOCFUSE_REALDATA); skipped")
    batch = {}
    for cells, steps in ((1, day.n), (100, day.n), (10000, 2000)):
        cpu, wall, used = time_batch(model, day, s, cells, steps)
        batch[cells] = cpu
        print(f"cross-cell batch, {cells} cells x {used} steps: {cpu:.1f} million cell-steps per CPU-second "
              f"({wall:.1f} per wall-clock second)")
    old = time_old_batch(model, day, s, 100)
    print(f"recording-parallel kernels.ekf_run_batch, 100 cells: {old:.1f} million cell-steps per CPU-second")
    print(f"batched: 10000 cells on {ncpu} cores: {batch[10000]:.1f} million cell-steps/s per CPU-second "
          f"(load average {os.getloadavg()[0]:.1f})")
    walls = print_startup(time_startup(max(3, a.rounds // 2)))
    print(f"ns_per_step={ours:.1f} ratio_vs_filterpy={fp / ours:.0f} ratio_vs_c={ratio_c:.2f} "
          f"batch_msteps_per_cpu_s={batch[10000]:.1f} help_wall_s={walls['help']:.2f} "
          f"estimate_wall_s={walls['estimate_csv']:.2f} estimate_mat_wall_s={walls['estimate_mat']:.2f}")


def print_startup(st) -> dict:
    """Print the start-up figures of :func:`time_startup`; return the minimum walls (s, nan if skipped)."""
    names = {"help": "socfuse --help", "estimate_csv": "warm socfuse estimate -o, drive cycle 1 as CSV",
             "estimate_mat": "warm socfuse estimate -o, drive cycle 1 as the dataset's .mat"}
    for key, what in names.items():
        v = st[key]
        if isinstance(v, str):
            print(f"{what}: skipped, {v}")
        else:
            print(f"{what}: {v[0]:.2f} s wall (median {v[1]:.2f}), {v[2]:.2f} s CPU (median {v[3]:.2f})")
    return {k: (float("nan") if isinstance(v, str) else v[0]) for k, v in st.items()}


if __name__ == "__main__":
    main()
