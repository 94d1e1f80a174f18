"""``socfuse export-c``: the tuned estimator as C99 with golden vectors, a harness and a footprint README."""
from __future__ import annotations

from pathlib import Path

from socfuse.estimator.cli.main import COMMAND_HELP


def register(sub) -> None:
    p = sub.add_parser(
        "export-c", help=COMMAND_HELP["export-c"],
        description="Write DIR/socfuse_ekf.h, DIR/socfuse_ekf.c (the EKF and the coulomb-counting + OCV-reseed "
                    "baseline in single-precision C99, model tables as const arrays), DIR/golden.csv (inputs and "
                    "the float64 Python reference of one recording), DIR/harness.c and DIR/README.md (footprint). "
                    "Check with: cc -std=c99 -O2 -Wall -Wextra -Werror -o harness *.c -lm && ./harness golden.csv")
    p.add_argument("--model", required=True, help="cell-model JSON (socfuse.cell-model/1)")
    p.add_argument("--filter", dest="filter_path", default=None,
                   help="filter-settings JSON (socfuse.filter/1); default: the defaults for the model")
    p.add_argument("--out", required=True, help="output folder (new, empty, or written earlier by export-c; "
                   "locked while the run writes, filled only when it succeeds)")
    p.add_argument("--golden", default=None, metavar="REC",
                   help="recording for the golden vectors (default: the bundled demo day c48_day_lunch, package "
                        "data socfuse.datasets; without it installed, --golden is required)")
    p.add_argument("--max-rows", type=int, default=None, metavar="N",
                   help="keep only the first N rows of the golden recording")
    p.add_argument("--force", action="store_true",
                   help="write into a non-empty folder that export-c did not write (only its file names are replaced)")
    p.add_argument("--no-build", action="store_true",
                   help="do not build and run the harness here even when a C compiler is available")
    from socfuse.estimator.cli.common import add_mapping_options

    add_mapping_options(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from socfuse.models.fileio import output_folder
    from socfuse.models.loaders import bundled_recording_path
    from socfuse.models.modelfile import load_model

    from socfuse.estimator.cli.common import check_json_inputs, load_checked, note
    from socfuse.estimator.cli.main import SAFETY_NOTE, CliError
    from socfuse.estimator.outputs.export_c import DEMO_DAY, MARKER_NAME, export_c
    from socfuse.estimator.filters.settings import resolve_settings

    if args.max_rows is not None and args.max_rows < 2:
        raise CliError(f"--max-rows must be at least 2, got {args.max_rows}")
    golden_path = args.golden
    if golden_path is None:
        golden_path = bundled_recording_path(DEMO_DAY)
        if golden_path is None:
            raise CliError(f"the bundled demo day {DEMO_DAY} (package data socfuse.datasets) is not installed; "
                           "give the golden recording with --golden REC")
    check_json_inputs(cell_model=args.model, filter_settings=args.filter_path)
    model = load_model(args.model)
    settings = resolve_settings(model, args.filter_path)
    out = Path(args.out)
    with output_folder(out, "export-c", force=args.force, rerun=True, legacy_marker=MARKER_NAME) as stage:
        golden = load_checked(args, golden_path, model)
        res = export_c(model, settings, stage, golden, force=False, measure=not args.no_build,
                       max_golden_rows=args.max_rows)
    fp = res.footprint
    print(f"wrote {len(res.files)} files to {out}")
    print(f"golden vectors: {res.golden_rows} rows of {res.golden_source} ({golden_path})")
    print(f"state RAM {fp.state_bytes} bytes ({'measured' if fp.state_bytes_measured else 'computed, LP64'}), "
          f"const tables {fp.table_bytes} bytes, {fp.flops_per_step} flops + {fp.transcendentals_per_step} "
          f"expf/sqrtf per step, stack "
          + (f"{fp.stack_bytes} bytes" if fp.stack_bytes is not None else "not measured"))
    for n in res.notes:
        note(f"note: {n}")
    status = 0
    if res.harness_exit is not None:
        verdict = "PASS" if res.harness_exit == 0 else f"FAIL (harness exit {res.harness_exit})"
        print(f"harness: max_soc_diff={res.max_soc_diff} {verdict}")
        status = 0 if res.harness_exit == 0 else 1
    else:
        print("harness not built here (no C compiler or --no-build); build it as shown in README.md")
    note(SAFETY_NOTE)
    return status
