"""``socfuse demo``: the whole job on the bundled demo data (see :mod:`socfuse.estimator.demo.workflow`)."""
from __future__ import annotations

import sys

from socfuse.estimator.cli.main import COMMAND_HELP


def register(sub) -> None:
    p = sub.add_parser(
        "demo", help=COMMAND_HELP["demo"],
        description="Identify demo cell C48 from its lab tests, tune the filter, benchmark EKF, UKF and the "
                    "coulomb baseline under fault scenarios on the demo delivery days (the UKF, slow, on the first "
                    "2 h of the lunch-break day only), run a tolerance study, "
                    "write DIR/report.html, DIR/summary.csv, DIR/model.json, DIR/filter.json and the C export "
                    "DIR/c/, and print the summary table. The fault defaults are common practice for "
                    "automotive sensors (no source): current offset 0.5 % of a 5C full scale, gain 1 %, "
                    "voltage noise 5 mV, temperature sensor +2 degC, initial SOC error 20 points, fade 15 %.")
    p.add_argument("--out", required=True, help="output folder (new, or one written by an earlier demo run)")
    p.add_argument("--quick", action="store_true",
                   help="smaller run (3 h of one day, four scenarios, UKF fault-free only): for tests and a first look")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="benchmark on a local Dask cluster of N workers (needs the cluster extra)")
    p.add_argument("--quiet", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def run(args) -> int:
    from socfuse.estimator.analysis.bench import format_summary
    from socfuse.estimator.cli.main import SAFETY_NOTE
    from socfuse.estimator.demo.workflow import run_demo

    res = run_demo(args.out, quick=args.quick, quiet=args.quiet, workers=args.workers)
    print()
    print(format_summary(res.summary))
    print()
    print(f"demo finished in {res.elapsed_s:.1f} s; report: {res.files['report.html']}")
    print(SAFETY_NOTE, file=sys.stderr)
    return 0
