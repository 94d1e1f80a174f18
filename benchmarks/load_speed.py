"""CSV loading time against the number of cells and of blank columns (issue 16: it must be linear in
cells and not grow with blank columns).  Prints one line per case; no assertions (speed is not a test).

    python benchmarks/load_speed.py [--rows N]
"""
from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path


def _write(path: Path, rows: int, blank_cols: int, extra_cols: int) -> None:
    names = ["time_s", "current_a", "voltage_v"] + [f"x{k}" for k in range(extra_cols)] + \
        [f"b{k}" for k in range(blank_cols)]
    tail = "," * blank_cols
    with open(path, "w") as f:
        f.write(",".join(names) + "\n")
        for k in range(rows):
            extras = "".join(f",{k * 0.5 + j:.3f}" for j in range(extra_cols))
            f.write(f"{k},{1.0 + (k % 7) * 0.1:.3f},{3.7 - k * 1e-5:.5f}{extras}{tail}\n")


def main(argv=None) -> None:
    from socfuse.models.loaders import load_recording

    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--rows", type=int, default=2000)
    a = ap.parse_args(argv)
    print(f"{'rows':>7} {'blank':>6} {'extra':>6} {'cells':>10} {'load_s':>8} {'us/cell':>8}")
    with tempfile.TemporaryDirectory() as d:
        _write(Path(d) / "warm.csv", 10, 0, 0)
        load_recording(Path(d) / "warm.csv")  # imports (pandas) outside the timing
        for rows, blank, extra in [(a.rows, 0, 0), (a.rows, 0, 10), (a.rows * 10, 0, 0), (a.rows, 1000, 0),
                                   (a.rows, 5000, 0), (200, 50000, 0)]:
            p = Path(d) / "x.csv"
            _write(p, rows, blank, extra)
            t0 = time.perf_counter()
            load_recording(p)
            dt = time.perf_counter() - t0
            cells = rows * (3 + blank + extra)
            print(f"{rows:7d} {blank:6d} {extra:6d} {cells:10d} {dt:8.3f} {1e6 * dt / cells:8.3f}")


if __name__ == "__main__":
    main()
