"""Time the identification of a full pulse test (target: under 5 s each) and print the figures.

    python benchmarks/identify_speed.py            # demo data, and the real data when present
    python benchmarks/identify_speed.py --repeat 3

Measures, on the bundled demo lab tests (invented demo cell C48) and on the Panasonic 18650PF
files when ``SOCFUSE_REALDATA`` / ``../shared/realdata`` has them (Kollmeyer, Mendeley Data
2018, doi:10.17632/wykht8y7tg.1, CC BY 4.0):

- the pulse-test analysis alone (detection, R0, 1- and 2-pair relaxation fits of every rest);
- the whole ``identify()`` (low-rate test, pulse test(s), OCV sources, tables);
- on the real data, the refinement on a drive cycle and the open-loop validation on another.

The first call compiles the numba kernels; it is timed separately ("warm-up").
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from socfuse.models.identify.ocvtest import identify_ocv_test  # noqa: E402
from socfuse.models.identify.pipeline import identify  # noqa: E402
from socfuse.models.identify.pulse import identify_pulse_test  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402

TARGET_S = 5.0


def _best(fn, repeat):
    times = []
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def _row(label, seconds, extra=""):
    flag = "ok" if seconds < TARGET_S else "SLOW"
    print(f"  {label:<48s} {seconds:7.2f} s  [{flag}] {extra}")


def bench_demo(repeat):
    d = REPO / "datasets"
    if not (d / "c48_pulse_25degC.csv").exists():
        print("demo data missing (python datasets/generate.py)")
        return
    c20 = load_recording(d / "c48_c20_25degC.csv")
    p25 = load_recording(d / "c48_pulse_25degC.csv")
    p05 = load_recording(d / "c48_pulse_05degC.csv")
    print(f"demo cell C48 (invented data): pulse test {p25.n} rows, {p25.duration_s / 3600:.1f} h")
    t0 = time.perf_counter()
    o = identify_ocv_test(c20)
    identify_pulse_test(p25, o.capacity_ah, ocv=o.ocv)
    print(f"  warm-up (numba compilation + first run)          {time.perf_counter() - t0:7.2f} s")
    s, _ = _best(lambda: identify_pulse_test(p25, o.capacity_ah, ocv=o.ocv), repeat)
    _row("pulse test 25 degC (detect, R0, RC fits)", s)
    s, res = _best(lambda: identify(c20, [p25, p05]), repeat)
    _row("identify(): C/20 + pulse tests at 25 and 5 degC", s,
         f"n_rc {res.n_rc}, R0(50 %) {res.model.r0_ohm.at(0.5, 25.0) * 1000:.2f} mOhm")


def bench_real(repeat):
    env = os.environ.get("SOCFUSE_REALDATA")
    root = (Path(env) if env else REPO.parent / "shared" / "realdata") / "panasonic_18650pf"
    if not root.is_dir():
        print("real data not found: skipped (set SOCFUSE_REALDATA)")
        return
    ld = lambda rel: load_recording(root / rel, preset="panasonic-18650pf")  # noqa: E731
    c20 = ld("c20_ocv_and_1c_start_of_tests/05-08-17_13.26 C20 OCV Test_C20_25dC.mat")
    hppc = ld("hppc/03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat")
    cyc1 = ld("drive_cycles/03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat")
    cyc2 = ld("drive_cycles/03-19-17_03.25 25degC_Cycle_2_Pan18650PF.mat")
    print(f"Panasonic 18650PF (real data): HPPC {hppc.n} rows, {hppc.duration_s / 3600:.1f} h")
    o = identify_ocv_test(c20)
    s, _ = _best(lambda: identify_pulse_test(hppc, o.capacity_ah, ocv=o.ocv), repeat)
    _row("pulse test (67 pulses: detect, R0, RC fits)", s)
    s, res = _best(lambda: identify(c20, [hppc]), repeat)
    _row("identify(): C/20 + HPPC", s)
    s, res = _best(lambda: identify(c20, [hppc], refine=cyc2, validate=[cyc1], refine_options={"stride": 10}), 1)
    _row("identify() + refine on Cycle_2 + validate Cycle_1", s,
         "(refinement is not part of the 5 s target)")
    m = res.model
    print(f"  capacity {m.capacity_ah:.4f} Ah; R0(50 %) {m.r0_ohm.at(0.5, 25.0) * 1000:.2f} mOhm; "
          f"{res.n_rc} RC pair(s): " + ", ".join(
              f"R{j + 1} {p.r_ohm.at(0.5, 25.0) * 1000:.2f} mOhm / tau{j + 1} {p.tau_s.at(0.5, 25.0):.1f} s"
              for j, p in enumerate(m.rc)))
    print("  open-loop RMS on Cycle_2 per OCV source (before refinement): " +
          ", ".join(f"{k} {v * 1000:.1f} mV" for k, v in res.ocv_scores.items()))
    print(f"  refinement on Cycle_2: {res.refinement.rms_before_v * 1000:.1f} -> "
          f"{res.refinement.rms_after_v * 1000:.1f} mV; validation on Cycle_1: "
          f"{res.validation[0].rms_v * 1000:.1f} mV RMS, max {res.validation[0].max_abs_v * 1000:.0f} mV")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=2, help="runs per timing (best is shown)")
    args = ap.parse_args(argv)
    print(f"identification speed (target < {TARGET_S:g} s per full pulse test; best of {args.repeat})")
    bench_demo(args.repeat)
    bench_real(args.repeat)
    return 0


if __name__ == "__main__":
    sys.exit(main())
