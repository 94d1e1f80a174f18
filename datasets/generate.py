"""Regenerate the bundled demo data (demo cell C48, invented) into this folder.

    python datasets/generate.py            # the bundled files, seed socfuse.estimator.demo.scenario.DEMO_SEED
    python datasets/generate.py --out DIR  # somewhere else (same content)

The logic lives in socfuse.estimator.demo.data.generate_demo_data so an installed package can regenerate
the data too; this script is a thin wrapper.  Output is deterministic for a seed.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # run from a checkout without installing

from socfuse.estimator.demo.data import generate_demo_data  # noqa: E402
from socfuse.estimator.demo.scenario import DEMO_SEED  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Regenerate the demo-cell C48 recordings and manifest.json.")
    ap.add_argument("--out", type=Path, default=HERE, help="target folder (default: this datasets/ folder)")
    ap.add_argument("--seed", type=int, default=DEMO_SEED, help=f"route and noise seed (default {DEMO_SEED})")
    args = ap.parse_args(argv)
    for p in generate_demo_data(args.out, seed=args.seed):
        print(f"{p}  {p.stat().st_size / 1e6:.2f} MB")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
