"""Speed of the Monte Carlo tolerance study: N runs of one demo delivery day, EKF and baseline.

Run from the repository root::

    python benchmarks/montecarlo_speed.py [--runs 1000] [--recording datasets/c48_day_lunch.csv]

Target: 1,000 runs of one demo day (c48_day_lunch.csv, 7.4 h at 1 Hz, 26 633 samples) through
the EKF and the coulomb baseline in under 30 s on this machine (two cores).  The filter uses
the demo cell's truth parameters (socfuse.estimator.demo.truth.truth_cell_model at 25 degC: two RC pairs and
hysteresis, so a five-state EKF) with its default settings.  A first small study compiles the
kernels and is not timed.  The last line is ``runs=<N> seconds=<t> runs_per_s=<N/t>``.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from socfuse.estimator.analysis.montecarlo import run_tolerance  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402
from socfuse.estimator.demo.truth import truth_cell_model  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=1000)
    ap.add_argument("--recording", default=str(REPO / "datasets" / "c48_day_lunch.csv"))
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    rec = load_recording(a.recording)
    model = truth_cell_model(25.0)
    run_tolerance(model, rec, n_runs=4, seed=a.seed)  # compile / load the kernel cache
    t0 = time.perf_counter()
    res = run_tolerance(model, rec, n_runs=a.runs, seed=a.seed)
    dt = time.perf_counter() - t0
    print(f"recording {rec.name}: {rec.n} samples, {rec.duration_s / 3600:.1f} h")
    for m in res.max_abs_error:
        print(f"  {m:<8} P50 {100 * res.percentile(m, 50):.2f} %  P95 {100 * res.percentile(m, 95):.2f} % "
              f"(max |SOC error| after {res.skip_s:.0f} s)")
    print(f"target: {a.runs} runs under 30 s -> {'met' if dt < 30 else 'NOT met'}")
    print(f"runs={a.runs} seconds={dt:.2f} runs_per_s={a.runs / dt:.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
