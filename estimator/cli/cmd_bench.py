"""``socfuse bench``: recordings x fault scenarios x methods -> report.html, summary.csv, PNGs."""
from __future__ import annotations

from socfuse.estimator.cli.main import COMMAND_HELP

from pathlib import Path

from socfuse.estimator.analysis.faults import DEFAULT_SCENARIOS, fault_help, parse_scenarios

OUTPUTS = ("report.html", "summary.csv")


def register(sub) -> None:
    p = sub.add_parser(
        "bench", help=COMMAND_HELP["bench"],
        description="Run each recording under each fault scenario with each method, measure the SOC error "
                    "against the recording's reference (soc_ref, or an amp-hour counter with a capacity) and "
                    "write DIR/report.html (self-contained), DIR/summary.csv and the PNG figures. "
                    + fault_help())
    p.add_argument("recordings", nargs="+", metavar="REC", help="recording files (CSV, Parquet, .mat)")
    p.add_argument("--model", required=True, help="cell-model JSON (socfuse.cell-model/1)")
    p.add_argument("--filter", dest="filter_path", help="filter-settings JSON (socfuse.filter/1); default: "
                   "the defaults for the model")
    p.add_argument("--out", required=True, help="output folder (created; existing report files are refused)")
    p.add_argument("--scenarios", nargs="+", default=None, metavar="SPEC",
                   help=f"scenario specs, e.g. nominal offset=0.05+soc0=-0.2 (default: {' '.join(DEFAULT_SCENARIOS)})")
    p.add_argument("--methods", nargs="+", default=["ekf", "coulomb"], choices=["ekf", "coulomb", "ukf"],
                   help="estimators to run (default: ekf coulomb; ukf is slow)")
    p.add_argument("--ukf-only", nargs="+", default=None, metavar="NAME",
                   help="run the UKF only on these recordings (names = file names without suffix)")
    p.add_argument("--soc0", type=float, default=None,
                   help="initial SOC given to the filters in the fault-free case (default: from the first voltage)")
    p.add_argument("--main", default=None, help="recording drawn in the per-scenario figures (default: the first)")
    p.add_argument("--truth", action="store_true",
                   help="the reference is the true SOC (simulated data): also report the SOC NEES")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--workers", type=int, default=None, metavar="N",
                   help="run on a local Dask cluster of N workers on 127.0.0.1 (needs the cluster extra)")
    g.add_argument("--scheduler", default=None, metavar="ADDR", help="run on an existing Dask scheduler, e.g. "
                   "tcp://10.0.0.5:8786 (needs the cluster extra)")
    p.add_argument("--threads", action="store_true", help="local cluster workers as threads, not processes")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    _mapping_options(p)
    p.set_defaults(func=run)


def _mapping_options(p) -> None:
    from socfuse.estimator.cli.common import add_mapping_options

    add_mapping_options(p)


def _load(path, args):
    from socfuse.estimator.cli.common import load_from_args

    return load_from_args(args, path)


def run(args) -> int:
    from socfuse.models.modelfile import load_model

    from socfuse.estimator.analysis.bench import format_summary, run_bench
    from socfuse.estimator.cli.main import SAFETY_NOTE, CliError
    from socfuse.estimator.outputs.report import write_report
    from socfuse.estimator.filters.settings import resolve_settings

    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise CliError(f"--out {out} exists and is not a folder")
    clash = [n for n in OUTPUTS if (out / n).exists()]
    if clash:
        raise CliError(f"{out} already holds {', '.join(clash)}; choose a new --out folder (files are never overwritten)")
    model = load_model(args.model)
    settings = resolve_settings(model, args.filter_path)
    scenarios = parse_scenarios(args.scenarios if args.scenarios else list(DEFAULT_SCENARIOS))
    recs = [_load(r, args) for r in args.recordings]
    for path, r in zip(args.recordings, recs):
        if r.soc_ref is None:
            raise CliError(f"{path}: no SOC reference (a soc_ref column, or an amp-hour counter with "
                           "--ref-capacity-ah and --ref-soc0); the benchmark needs one")
    if args.soc0 is not None and not (0.0 <= args.soc0 <= 1.0):
        raise CliError(f"--soc0 is a fraction 0..1, got {args.soc0}")
    only = {"ukf": args.ukf_only} if args.ukf_only else None
    res = run_bench(model, recs, scenarios, args.methods, settings, args.soc0, method_recordings=only,
                    keep_traces=[args.main] if args.main else "first", reference_is_truth=args.truth,
                    workers=args.workers, scheduler=args.scheduler, processes=not args.threads, quiet=args.quiet)
    bounds = {}
    main = args.main or recs[0].name
    try:
        from socfuse.estimator.demo.workflow import _bound_sigma, _optional

        bmod = _optional("socfuse.estimator.analysis.bound")
        if bmod is not None:
            rec = next(r for r in recs if r.name == main)
            bounds[main] = (rec.time_s, _bound_sigma(bmod, model, rec, settings))
    except (StopIteration, ValueError, ArithmeticError, AttributeError, TypeError):
        bounds = {}
    files = write_report(out, res, model, settings=settings, main_recording=main, bounds=bounds,
                         recordings=recs)
    print(format_summary(res.summary))
    for k, v in res.errors.items():
        print(f"failed: {' / '.join(k)}: {v}")
    print(f"wrote {files.html}, {files.summary_csv} and {len(files.pngs)} figures ({res.elapsed_s:.1f} s)")
    print(SAFETY_NOTE)
    return 0
