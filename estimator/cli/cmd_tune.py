"""``socfuse tune``: choose the filter noise from recordings and write filter.json."""
from __future__ import annotations

from socfuse.estimator.cli.main import COMMAND_HELP

import sys
from pathlib import Path


def register(sub) -> None:
    from socfuse.estimator.analysis.tuning import TUNABLE

    p = sub.add_parser(
        "tune", help=COMMAND_HELP["tune"],
        description="Choose the EKF noise settings from recordings: by the innovation likelihood (no reference "
                    "needed; the white form when the filter carries its model-error state, else whitened for "
                    "time-correlated innovations) or, when every recording has a SOC "
                    "reference, by the SOC error including a wrong start handed over mid-drive (so the voltage "
                    "feedback stays alive) with a coverage and NIS penalty. Settings stay inside physical bounds "
                    "for the cell. The last 30 % of each recording is held out and the start and tuned settings "
                    "are compared on it (and on --holdout recordings); when the tuned filter is worse by that "
                    "evidence the command writes nothing and exits 2 with the reason (--accept-worse writes it "
                    "anyway, with a warning). Prints the chosen values, the objective before and after, the "
                    "hold-out and per-recording transfer figures and the consistency figures, and writes the tuned "
                    "settings (socfuse.filter/1).")
    p.add_argument("recordings", nargs="+", metavar="REC", help="recording files (CSV, Parquet, .mat)")
    p.add_argument("--model", required=True, help="cell-model JSON (socfuse.cell-model/1)")
    p.add_argument("--filter", dest="filter_path", default=None,
                   help="start settings (socfuse.filter/1); default: the defaults for the model")
    p.add_argument("-o", "--output", required=True, help="where to write the tuned filter JSON (never overwritten)")
    p.add_argument("--objective", choices=["likelihood", "soc-error"], default="likelihood",
                   help="likelihood: innovation log-likelihood (default); soc-error: SOC RMSE against soc_ref "
                        "under the NIS-band penalty")
    p.add_argument("--params", nargs="+", default=None, choices=sorted(TUNABLE), metavar="NAME",
                   help="settings to tune (default: voltage_noise_v current_noise_a q_soc_per_s, plus "
                        "q_rc_v2_per_s with RC pairs, q_bias_a2_per_s with the bias state, p0_soc with --soc0); "
                        f"choose from {', '.join(TUNABLE)}")
    p.add_argument("--soc0", type=float, default=None,
                   help="initial SOC (fraction 0..1) of every recording; default: from the first voltage")
    p.add_argument("--max-evaluations", type=int, default=150, metavar="N",
                   help="budget of filter runs over all recordings (default 150)")
    p.add_argument("--penalty-weight", type=float, default=10.0, metavar="W",
                   help="soc-error: weight of the NIS-band penalty (default 10)")
    p.add_argument("--coverage", type=float, default=None, metavar="F",
                   help="soc-error: also require this fraction (e.g. 0.95) of samples to have the SOC error "
                        "inside the filter's +-3 sigma (penalised like the NIS band)")
    p.add_argument("--likelihood", choices=["auto", "whitened", "white"], default="auto",
                   help="likelihood objective: whitened (the innovations as a first-order autoregressive sequence, "
                        "so correlated samples are not counted as new evidence), white (textbook), or auto "
                        "(default: white when the filter has the model-error state, else whitened)")
    p.add_argument("--holdout-fraction", type=float, default=0.3, metavar="F",
                   help="fraction at the end of each recording left out of the search and used to check the "
                        "result (default 0.3; 0 = none)")
    p.add_argument("--holdout", nargs="+", default=None, metavar="REC",
                   help="recordings used only to check the result (never in the search)")
    p.add_argument("--bounds", choices=["physical", "wide"], default="physical",
                   help="physical (default): each setting within a range plausible for the cell (sensor noise "
                        "0.05-5 %% of 1C, voltage noise 0.2-50 mV, ...); wide: the old search limits")
    p.add_argument("--accept-worse", action="store_true",
                   help="write the tuned settings even when the hold-out evidence says they are worse than the start")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    from socfuse.estimator.cli.common import add_mapping_options

    add_mapping_options(p)
    p.set_defaults(func=run)


def run(args) -> int:
    from socfuse.models.modelfile import load_model

    from socfuse.estimator.cli.main import SAFETY_NOTE, CliError
    from socfuse.estimator.cli.common import load_checked
    from socfuse.estimator.filters.settings import resolve_settings, save_settings
    from socfuse.estimator.analysis.tuning import tune

    out = Path(args.output)
    if out.exists():
        raise CliError(f"{out} exists; choose a new output file (files are never overwritten)")
    if not out.parent.is_dir():
        raise CliError(f"folder {out.parent} does not exist")
    if args.soc0 is not None and not (0.0 <= args.soc0 <= 1.0):
        raise CliError(f"--soc0 is a fraction 0..1, got {args.soc0}")
    if args.coverage is not None and not (0.0 < args.coverage < 1.0):
        raise CliError(f"--coverage is a fraction in (0, 1), got {args.coverage}")
    if args.coverage is not None and args.objective != "soc-error":
        raise CliError("--coverage needs --objective soc-error")
    if args.max_evaluations < 2:
        raise CliError(f"--max-evaluations must be at least 2, got {args.max_evaluations}")
    model = load_model(args.model)
    start = resolve_settings(model, args.filter_path)
    recs = [load_checked(args, r, model) for r in args.recordings]
    if args.objective == "soc-error":
        for path, r in zip(args.recordings, recs):
            if r.soc_ref is None:
                raise CliError(f"{path}: no SOC reference (soc_ref column, or --ah-col with --ref-capacity-ah and "
                               "--ref-soc0); --objective soc-error needs one")
    if not (0.0 <= args.holdout_fraction <= 0.8):
        raise CliError(f"--holdout-fraction is a fraction in 0..0.8, got {args.holdout_fraction}")
    hold = [load_checked(args, r, model) for r in (args.holdout or [])]
    if args.objective == "soc-error":
        for path, r in zip(args.holdout or [], hold):
            if r.soc_ref is None:
                raise CliError(f"{path}: no SOC reference; --objective soc-error needs one in --holdout recordings too")
    soc0s = None if args.soc0 is None else [args.soc0] * len(recs)
    res = tune(model, recs, start, objective=args.objective, params=args.params, soc0s=soc0s,
               max_evaluations=args.max_evaluations, penalty_weight=args.penalty_weight, coverage=args.coverage,
               quiet=args.quiet, likelihood=args.likelihood, holdout_fraction=args.holdout_fraction,
               holdout_recs=hold, bounds=args.bounds)
    print(res.describe())
    for w in res.warnings:
        print(f"socfuse tune: warning: {w}", file=sys.stderr)
    if res.refused and not args.accept_worse:
        print(SAFETY_NOTE, file=sys.stderr)
        raise CliError("tuned settings refused, nothing written: " + "; ".join(res.reasons)
                       + " (keep the start settings, or --accept-worse)")
    if res.refused:
        print("socfuse tune: WARNING: writing settings that are worse than the start on the hold-out ("
              + "; ".join(res.reasons) + ")", file=sys.stderr)
    save_settings(res.settings, out)
    print(f"wrote {out}")
    print(SAFETY_NOTE, file=sys.stderr)
    return 0
