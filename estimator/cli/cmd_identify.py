"""``socfuse identify``: cell model (OCV, capacity, R0, RC pairs) from a low-rate test and pulse tests."""
from __future__ import annotations

import csv
from pathlib import Path

from socfuse.models.identify.ocvsource import OCV_SOURCES
from socfuse.models.identify.pipeline import identify
from socfuse.models.modelfile import save_model

from socfuse.estimator.cli.main import COMMAND_HELP, CliError, SAFETY_NOTE
from socfuse.estimator.cli.common import add_mapping_options, load_checked, note
from socfuse.models.fileio import replacing


def register(sub) -> None:
    p = sub.add_parser(
        "identify", help=COMMAND_HELP["identify"],
        description="Identify a Thevenin cell model: capacity and OCV(SOC) from a low-rate (about C/20) test, "
                    "R0 and 1-2 RC pairs over SOC (and temperature) from pulse tests, optionally refined and "
                    "validated on dynamic recordings. Writes the cell-model JSON (schema socfuse.cell-model/1) "
                    "with the provenance of every table.",
        epilog=SAFETY_NOTE)
    p.add_argument("--ocv-test", required=True, metavar="FILE", help="low-rate discharge (and charge) recording")
    p.add_argument("--pulse-test", required=True, action="append", metavar="FILE",
                   help="pulse (HPPC-style) test; repeat for several temperatures")
    p.add_argument("--pulse-temperature-c", action="append", type=float, metavar="DEGC",
                   help="temperature of each --pulse-test in order (default: median of its temperature "
                        "column, else 25)")
    p.add_argument("--rc-pairs", type=int, choices=[1, 2, 3], default=None,
                   help="number of RC pairs (default: 1 or 2 by the Bayesian information criterion)")
    p.add_argument("--ocv-source", choices=("auto",) + OCV_SOURCES, default="auto",
                   help="OCV curve: average (low-rate mean of both branches), discharge (low-rate discharge "
                        "branch), rest (pulse-test rest-end voltages), anchored (low-rate shape anchored to the "
                        "rest points); auto = lowest voltage RMS on --refine/--validate, else anchored")
    p.add_argument("--ocv-breakpoints", type=int, default=41, metavar="N",
                   help="number of OCV breakpoints: half evenly spaced, half where the curve bends (default 41)")
    p.add_argument("--pulse-soc", choices=["auto", "soc_ref", "ah_counter", "count"], default="auto",
                   help="how pulses are placed on the SOC axis: the soc_ref column, the cycler amp-hour "
                        "counter (--ah-col or a preset), or counting charge from full (default auto: in "
                        "that order of preference)")
    p.add_argument("--refine", metavar="REC", default=None,
                   help="dynamic recording on which the R0/RC tables are refined (regularised least squares)")
    p.add_argument("--refine-stride", type=int, default=10, metavar="K",
                   help="use every K-th voltage sample in the refinement fit; the simulation keeps every "
                        "sample (default 10)")
    p.add_argument("--validate", action="append", metavar="REC", default=None,
                   help="recording for open-loop validation (voltage RMS and max); repeatable")
    p.add_argument("--soc0", type=float, default=None, metavar="X",
                   help="initial SOC (fraction) of the --refine/--validate recordings (default: their soc_ref, "
                        "else the OCV of the first sample)")
    p.add_argument("--plots", metavar="DIR", default=None, help="write PNG plots into this folder")
    p.add_argument("--power-table", metavar="CSV", default=None,
                   help="write the DOE/INL pulse-resistance and power table to this CSV")
    p.add_argument("--current-dependence", action="store_true",
                   help="put the Butler-Volmer charge-transfer term fitted to pulses of several amplitudes into "
                        "the model (resistance falling with current at cold); off by default")
    p.add_argument("--model-name", dest="model_name", default="", help="model name stored in the file")
    p.add_argument("-o", "--output", required=True, metavar="MODEL_JSON", help="cell-model file to write")
    p.add_argument("--force", action="store_true", help="overwrite existing output files")
    p.add_argument("--accept-implausible", action="store_true",
                   help="write the model even when it fails the plausibility checks (R0 not positive, time "
                        "constants outside the tests' time scales, capacity far from the charge moved, OCV not "
                        "spanning the voltage window, unit errors); the problems are kept in its provenance")
    p.add_argument("--current-offset-a", type=float, default=None, metavar="A",
                   help="known current-sensor zero offset in A (what the sensor reads at zero current); "
                        "default: estimated from the rests of the lab tests and subtracted")
    add_mapping_options(p)
    p.set_defaults(func=run)


def _check_new(path, force: bool, what: str) -> None:
    if path is not None and Path(path).exists() and not force:
        raise CliError(f"{path}: {what} exists; not overwritten (use --force or another name)")


def run(args) -> int:
    from socfuse.models.fileio import check_output_file, check_output_folder

    _check_new(args.output, args.force, "output file")
    _check_new(args.power_table, args.force, "power table")
    check_output_file(args.output, args.force, "-o")  # before any work: missing or unwritable folders
    if args.power_table:
        check_output_file(args.power_table, args.force, "--power-table")
    if args.plots:
        check_output_folder(args.plots, "--plots")
    if args.ocv_breakpoints < 3:
        raise CliError("--ocv-breakpoints must be at least 3")
    if args.refine_stride < 1:
        raise CliError("--refine-stride must be at least 1")
    if args.soc0 is not None and not (0.0 <= args.soc0 <= 1.0):
        raise CliError(f"--soc0 is a fraction 0..1, not {args.soc0}")
    if args.pulse_temperature_c is not None and len(args.pulse_temperature_c) != len(args.pulse_test):
        raise CliError(f"{len(args.pulse_temperature_c)} --pulse-temperature-c for {len(args.pulse_test)} "
                       "--pulse-test files")
    # plausibility against a generic lithium-ion cell (units, pack voltage, sign, spikes); --trust-input overrides
    ocv_rec = load_checked(args, args.ocv_test)
    pulses = [load_checked(args, f) for f in args.pulse_test]
    refine = load_checked(args, args.refine) if args.refine else None
    vals = [load_checked(args, f) for f in (args.validate or [])]
    res = identify(ocv_rec, pulses, rc_pairs=args.rc_pairs, ocv_source=args.ocv_source, refine=refine,
                   validate=vals, n_ocv_breakpoints=args.ocv_breakpoints,
                   pulse_temperatures_c=args.pulse_temperature_c, soc_mode=args.pulse_soc,
                   name=args.model_name, refine_soc0=args.soc0, validate_soc0=args.soc0,
                   refine_options={"stride": args.refine_stride}, allow_implausible=args.accept_implausible,
                   pulse_options=None if args.current_offset_a is None else {"offset_a": args.current_offset_a},
                   current_dependence_in_model=args.current_dependence)
    save_model(res.model, args.output)
    print(f"socfuse identify: wrote {args.output}")
    print(res.summary())
    if args.power_table:
        frame = res.power_frame()
        with replacing(args.power_table) as tmp:
            frame.to_csv(tmp, index=False, float_format="%.6g", quoting=csv.QUOTE_MINIMAL)
        print(f"pulse-resistance and power table: {args.power_table} ({len(frame)} rows)")
    if args.plots:
        from socfuse.models.identify.plots import save_plots

        try:
            paths = save_plots(res, args.plots, overwrite=args.force)
        except FileExistsError as e:
            raise CliError(str(e)) from None
        print(f"plots: {len(paths)} PNG files in {args.plots}")
    note(SAFETY_NOTE)  # cautions on stderr, results on stdout
    return 0
