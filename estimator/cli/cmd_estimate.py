"""``socfuse estimate --model M [--filter F] --method ekf|coulomb|ukf [--soc0 X] REC -o trace.csv``."""
from __future__ import annotations

import numpy as np

from socfuse.estimator.cli.main import COMMAND_HELP, CliError, SAFETY_NOTE

_METHODS = ("ekf", "coulomb", "ukf", "rts")


def register(sub) -> None:
    p = sub.add_parser(
        "estimate", help=COMMAND_HELP["estimate"],
        description="Run the EKF (default), the coulomb-counting baseline with OCV reseed after rests, the "
                    "unscented filter or the offline RTS smoother over one recording. With -o write the trace "
                    "CSV (time_s, soc, soc_sigma, voltage_pred_v, innovation_v, soc_e, energy_wh_remaining, "
                    "and soc_ref, soc_error when the recording has a reference); without it print a summary.",
        epilog="Without --filter the settings are derived from the model (estimator.settings.default_settings): "
               "voltage noise 10 mV, current noise C/100, SOC random walk 1 % per hour, 5-sigma innovation "
               "gate, SOC clipped to 0..1, rest = |I| <= C/50 for at least 3600 s before an OCV reseed "
               "(C = the model capacity in Ah as a current in A). The recording is checked against the model "
               "first (units, pack voltage, current sign, soc_ref in percent, spikes); a likely mistake stops "
               "the command with exit 2 naming the option that fixes it, --trust-input overrides. " + SAFETY_NOTE)
    p.add_argument("rec", metavar="REC", help="recording file (.csv, .parquet, .mat)")
    p.add_argument("--model", required=True, metavar="M", help="cell model JSON (socfuse.cell-model/1)")
    p.add_argument("--filter", metavar="F", default=None,
                   help="filter settings JSON (socfuse.filter/1); keys left out take the model-derived defaults")
    p.add_argument("--method", choices=_METHODS, default="ekf",
                   help="ekf (default), coulomb (baseline), ukf (sigma-point, slower) or rts (offline smoother)")
    p.add_argument("--soc0", type=float, default=None, metavar="X",
                   help="initial SOC, fraction 0..1 (default: from the OCV curve at the first sample)")
    p.add_argument("-o", "--output", metavar="trace.csv", default=None, help="write the trace CSV here")
    p.add_argument("--force", action="store_true", help="overwrite an existing output file")
    p.add_argument("--states", action="store_true", help="add the state columns (v_rc_1_v, ..., bias_a, hyst)")
    try:
        from socfuse.estimator.cli.common import add_mapping_options
    except ImportError:  # pragma: no cover
        add_mapping_options = None
    if add_mapping_options is not None:
        add_mapping_options(p)
    p.set_defaults(func=run, exit_at_once=True)  # outputs closed when run returns (cli.main._exit_at_once)


def _load_recording(args, model):
    from socfuse.estimator.cli.common import load_checked
    return load_checked(args, args.rec, model)


def summary_lines(tr) -> list:
    """Short human summary of a trace (final SOC, RMSE vs reference, gated samples, reseeds)."""
    lines = [f"recording       {tr.name or '-'}",
             f"method          {tr.method}",
             f"samples         {tr.n} over {tr.time_s[-1] - tr.time_s[0]:.0f} s",
             f"final SOC       {100 * tr.soc[-1]:.2f} % (sigma {100 * tr.soc_sigma[-1]:.2f} points)"]
    if tr.soc_e is not None:
        lines.append(f"final SOC_E     {100 * tr.soc_e[-1]:.2f} % (energy-based, at rest)")
    if tr.soc_error is not None:
        e = tr.soc_error[np.isfinite(tr.soc_error)]
        if e.size:
            lines.append(f"RMSE vs ref     {100 * np.sqrt(np.mean(e ** 2)):.2f} points "
                         f"(max |error| {100 * np.max(np.abs(e)):.2f})")
    if tr.method in ("ekf", "ukf", "rts"):
        lines.append(f"gated samples   {tr.n_gated}")
    if tr.method == "coulomb":
        lines.append(f"OCV reseeds     {len(tr.reseeds)}")
        for t, a, b in tr.reseeds[:10]:
            lines.append(f"  at {t:9.0f} s  {100 * a:6.2f} % -> {100 * b:6.2f} %")
    return lines


#: status bits worth a note after a run, with what they mean for the estimate
FLAG_NOTES = (
    ("gap", "inside or just after a logging gap (SOC sigma widened by the charge the current range allows)"),
    ("envelope", "outside the model's temperature range (voltage not used: counting only)"),
    ("fallback", "filter inconsistent: the coulomb-counting baseline's SOC reported"),
    ("reset", "filter state reset from the baseline"),
    ("rej_current", "implausible current held at the last good value"),
    ("rej_voltage", "implausible voltage not used"),
    ("rej_temp", "implausible temperature replaced"),
    ("gated", "voltage refused by the innovation gate"),
)


def flag_lines(tr) -> list:
    """One line per status bit that flags samples of ``tr``: the count and what it means.

    Parameters
    ----------
    tr : Trace
        A trace with per-sample status bits (EKF and UKF runs; other methods give no lines).

    Returns
    -------
    list of str
    """
    status = getattr(tr, "status", None)
    if status is None:
        return []
    from socfuse.estimator.filters.kernels import STATUS_BITS

    st = np.asarray(status)
    out = []
    for name, what in FLAG_NOTES:
        k = int(np.count_nonzero(st & STATUS_BITS[name]))
        if k:
            out.append(f"{k} of {st.size} samples flagged {name}: {what}")
    return out


def run(args) -> int:
    """Run ``socfuse estimate`` (see the module docstring); returns the exit code.

    The cyclic garbage collector is paused for the run (``models.loaders.gc_paused``): it imports
    numba and its registries (about a million objects, a dozen full-heap collections otherwise)
    and then makes arrays and strings, no reference cycles worth collecting.
    """
    from socfuse.models.loaders import gc_paused

    with gc_paused():
        return _run(args)


def _run(args) -> int:
    from socfuse.models.fileio import check_output_file, replacing  # here: `estimate --help` stays light
    from socfuse.models.modelfile import load_model

    from socfuse.estimator.filters.run import estimate
    from socfuse.estimator.filters.settings import resolve_settings

    if args.soc0 is not None and not (0.0 <= args.soc0 <= 1.0):
        raise CliError(f"--soc0 must be a fraction in 0..1, got {args.soc0}")
    from socfuse.estimator.cli.common import check_json_inputs, note

    out = check_output_file(args.output, args.force, "-o") if args.output else None
    check_json_inputs(cell_model=args.model, filter_settings=args.filter)
    model = load_model(args.model)
    settings = resolve_settings(model, args.filter)
    rec = _load_recording(args, model)
    if args.method == "rts":
        from socfuse.estimator.filters.smoother import rts_smooth
        tr = rts_smooth(model, rec, settings, args.soc0)
    else:
        tr = estimate(model, rec, args.method, settings, args.soc0)
    for line in flag_lines(tr):  # gaps, operating envelope, fallback: on stderr, results stay on stdout
        note(f"note: {line}")
    if out is not None:
        from socfuse.estimator.outputs.trace_csv import write_trace_csv

        with replacing(out) as tmp:
            write_trace_csv(tr, tmp, states=args.states)
        print(f"wrote {out} ({tr.n} rows, method {tr.method})")
    else:
        print("\n".join(summary_lines(tr)))
    note(SAFETY_NOTE)
    return 0
