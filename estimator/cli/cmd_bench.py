"""``socfuse bench``: recordings x fault scenarios x methods -> report.html, summary.csv, PNGs.

The output folder goes through :func:`models.fileio.output_folder`: locked for the run, refused
when it holds files this run did not write or an earlier bench report (unless ``--force``), and
filled only when the run succeeds.  Recording paths may stand anywhere on the line: values of
``--methods`` / ``--scenarios`` that name recording files (a recording suffix) are taken as
recordings.
"""
from __future__ import annotations

from socfuse.estimator.cli.main import COMMAND_HELP

from pathlib import Path

from socfuse.estimator.analysis.faults import DEFAULT_SCENARIOS, fault_help, parse_scenarios

OUTPUTS = ("report.html", "summary.csv")
METHODS = ("ekf", "coulomb", "ukf")
_RECORDING_SUFFIXES = (".csv", ".txt", ".tsv", ".parquet", ".pq", ".mat")


def register(sub) -> None:
    p = sub.add_parser(
        "bench", help=COMMAND_HELP["bench"],
        description="Run each recording under each fault scenario with each method, measure the SOC error "
                    "against the recording's reference (soc_ref, or an amp-hour counter with a capacity) and "
                    "write DIR/report.html (self-contained), DIR/summary.csv and the PNG figures. "
                    + fault_help())
    p.add_argument("recordings", nargs="*", metavar="REC", help="recording files (CSV, Parquet, .mat)")
    p.add_argument("--model", required=True, help="cell-model JSON (socfuse.cell-model/1)")
    p.add_argument("--filter", dest="filter_path", help="filter-settings JSON (socfuse.filter/1); default: "
                   "the defaults for the model")
    p.add_argument("--out", required=True, help="output folder (created; a folder holding other files or an "
                   "earlier report is refused unless --force; locked while the run writes)")
    p.add_argument("--force", action="store_true",
                   help="write into a folder holding other files (files of the same names are replaced)")
    p.add_argument("--scenarios", nargs="+", default=None, metavar="SPEC",
                   help=f"scenario specs, e.g. nominal offset=0.05+soc0=-0.2 (default: {' '.join(DEFAULT_SCENARIOS)})")
    p.add_argument("--methods", nargs="+", default=None, metavar="METHOD",
                   help=f"estimators to run, from {', '.join(METHODS)} (default: ekf coulomb; ukf is slow)")
    p.add_argument("--ukf-only", nargs="+", default=None, metavar="NAME",
                   help="run the UKF only on these recordings (names = file names without suffix); adds ukf to "
                        "the methods")
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


def _is_recording_path(value: str) -> bool:
    return Path(value).suffix.lower() in _RECORDING_SUFFIXES


def _sort_out_paths(args):
    """Move recording paths that ``--methods`` / ``--scenarios`` swallowed back to the recordings."""
    from socfuse.estimator.cli.main import CliError

    recs = list(args.recordings)
    for attr in ("methods", "scenarios", "ukf_only"):
        vals = getattr(args, attr)
        if vals:
            keep = [v for v in vals if not _is_recording_path(v)]
            recs += [v for v in vals if _is_recording_path(v)]
            setattr(args, attr, keep or None)
            if vals and not keep:
                raise CliError(f"--{attr.replace('_', '-')} needs at least one value before the recordings")
    if not recs:
        raise CliError("no recording given (REC ...)")
    methods = list(args.methods) if args.methods else ["ekf", "coulomb"]
    bad = [m for m in methods if m not in METHODS]
    if bad:
        raise CliError(f"--methods: unknown method(s) {', '.join(bad)}; choose from {', '.join(METHODS)}")
    if len(set(methods)) != len(methods):
        raise CliError("--methods: a method is given twice")
    return recs, methods


def run(args) -> int:
    from socfuse.models.fileio import output_folder
    from socfuse.models.modelfile import load_model

    from socfuse.estimator.analysis.bench import format_summary, run_bench
    from socfuse.estimator.cli.common import check_json_inputs, load_checked, note
    from socfuse.estimator.cli.main import SAFETY_NOTE, CliError
    from socfuse.estimator.outputs.report import write_report
    from socfuse.estimator.filters.settings import resolve_settings

    paths, methods = _sort_out_paths(args)
    if args.soc0 is not None and not (0.0 <= args.soc0 <= 1.0):
        raise CliError(f"--soc0 is a fraction 0..1, got {args.soc0}")
    scenarios = parse_scenarios(args.scenarios if args.scenarios else list(DEFAULT_SCENARIOS))
    check_json_inputs(cell_model=args.model, filter_settings=args.filter_path)
    model = load_model(args.model)
    settings = resolve_settings(model, args.filter_path)
    out = Path(args.out)
    with output_folder(out, "bench", force=args.force, rerun=False) as stage:
        recs = [load_checked(args, r, model) for r in paths]
        for path, r in zip(paths, recs):
            if r.soc_ref is None:
                raise CliError(f"{path}: no SOC reference (a soc_ref column, or an amp-hour counter with "
                               "--ref-capacity-ah and --ref-soc0); the benchmark needs one")
        names = [r.name for r in recs]
        if args.ukf_only:
            unknown = [n for n in args.ukf_only if n not in names]
            if unknown:
                raise CliError(f"--ukf-only: no recording named {', '.join(unknown)}; the recordings are "
                               f"{', '.join(names)}")
            if "ukf" not in methods:
                methods.append("ukf")
                note(f"note: --ukf-only adds ukf to the methods (on {', '.join(args.ukf_only)})")
        if args.main is not None and args.main not in names:
            raise CliError(f"--main: no recording named {args.main}; the recordings are {', '.join(names)}")
        only = {"ukf": args.ukf_only} if args.ukf_only else None
        res = run_bench(model, recs, scenarios, methods, settings, args.soc0, method_recordings=only,
                        keep_traces=[args.main] if args.main else "first", reference_is_truth=args.truth,
                        workers=args.workers, scheduler=args.scheduler, processes=not args.threads,
                        quiet=args.quiet)
        bounds = {}
        main = args.main or recs[0].name
        try:
            import numpy as np

            from socfuse.estimator.analysis.bound import pcrb_soc_sigma

            rec = next(r for r in recs if r.name == main)
            bounds[main] = (rec.time_s, np.asarray(pcrb_soc_sigma(model, rec, settings).soc_sigma, dtype=float))
        except (ValueError, ArithmeticError) as e:
            note(f"note: no Cramer-Rao bound in the report ({type(e).__name__}: {e})")
            bounds = {}
        files = write_report(stage, res, model, settings=settings, main_recording=main, bounds=bounds)
    print(format_summary(res.summary))
    for k, v in res.errors.items():
        print(f"failed: {' / '.join(k)}: {v}")
    print(f"wrote {out / Path(files.html).name}, {out / Path(files.summary_csv).name} and {len(files.pngs)} "
          f"figures ({res.elapsed_s:.1f} s)")
    note(SAFETY_NOTE)
    return 0
