"""``socfuse check FILE [mapping options]``: is this recording usable, and what is in it?"""
from __future__ import annotations

from socfuse.models.checks import format_summary, summarise

from socfuse.estimator.cli.main import COMMAND_HELP, CliError, SAFETY_NOTE
from socfuse.estimator.cli.common import add_mapping_options, check_json_inputs, load_from_args, note


def register(sub) -> None:
    p = sub.add_parser(
        "check", help=COMMAND_HELP["check"],
        description="Load a recording (CSV, Parquet or MATLAB .mat) with the given mapping and print its "
                    "duration, sample intervals, net and total Ah, rests, ranges, duplicates dropped, gaps "
                    "and a sign check, then the plausibility checks (units, pack voltage, sign, soc_ref in percent, "
                    "spikes) against --model or, without it, a generic lithium-ion cell. Exit 0 when usable, 2 "
                    "with a one-line reason when not.",
        epilog=SAFETY_NOTE)
    p.add_argument("file", metavar="FILE", help="recording file (.csv, .txt, .tsv, .parquet, .mat)")
    add_mapping_options(p)
    p.add_argument("--rest-current-a", type=float, default=None, metavar="A",
                   help="fixed rest threshold: |current| at or below this counts as rest (default: from the "
                        "recording's own noise floor, after removing the sensor's zero offset)")
    p.add_argument("--rest-min-s", type=float, default=600.0, metavar="S",
                   help="shortest rest reported, s (default 600)")
    p.add_argument("--model", default=None, metavar="M",
                   help="cell-model JSON to check the recording against (capacity, voltage window, R0)")
    p.add_argument("--strict", action="store_true",
                   help="treat warnings (sign looks inverted, gaps, no current steps) as unusable: exit 2")
    p.set_defaults(func=run)


def run(args) -> int:
    if (args.rest_current_a is not None and args.rest_current_a < 0) or args.rest_min_s < 0:
        raise CliError("--rest-current-a and --rest-min-s must not be negative")
    from socfuse.models.plausibility import check_against_model

    model = None
    if args.model is not None:
        from socfuse.models.modelfile import load_model

        check_json_inputs(cell_model=args.model)
        model = load_model(args.model)
    rec = load_from_args(args, args.file)
    s = summarise(rec, rest_current_a=args.rest_current_a, rest_min_s=args.rest_min_s)
    findings = check_against_model(rec, model)
    print(format_summary(s))
    for f in findings:
        if f.code not in ("sign-inverted", "voltage-missing"):  # the summary reports these already
            print(f"{'IMPLAUSIBLE' if f.severity == 'error' else 'WARNING'}: {f.message()}")
    note(SAFETY_NOTE)
    errors = [f for f in findings if f.severity == "error"]
    if errors and not args.trust_input:
        raise CliError(errors[0].message(args.file) + " (or --trust-input)")
    if args.strict and s.warnings:
        raise CliError(f"{args.file}: {s.warnings[0]}")
    return 0
