"""``socfuse energy``: capacity-based vs energy-based SOC table and usable energy at a load."""
from __future__ import annotations

from socfuse.estimator.cli.main import COMMAND_HELP

import math
import sys


def register(sub) -> None:
    p = sub.add_parser(
        "energy", help=COMMAND_HELP["energy"],
        description="Print the capacity-based to energy-based SOC table of a cell model (at rest, and at the "
                    "load when one is given), the rest energy, and the energy deliverable down to the model's "
                    "cut-off voltage at a constant current or power with the runtime and the SOC at cut-off. "
                    "With --pack the load is at the pack terminals and energies are pack energies.")
    p.add_argument("--model", required=True, help="cell-model JSON (socfuse.cell-model/1)")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--load-a", type=float, default=None, metavar="I",
                   help="constant discharge current at the pack terminals, A")
    g.add_argument("--load-w", type=float, default=None, metavar="P",
                   help="constant discharge power at the pack terminals, W")
    p.add_argument("--pack", default=None, metavar="NsMp",
                   help="pack configuration, N cells in series by M in parallel, e.g. 14s4p (default 1s1p)")
    p.add_argument("--peak-a", type=float, default=None, metavar="I",
                   help="current peak the load may draw at any moment (A, pack terminals): the cut-off is then "
                        "judged under a 10 s step to this current")
    p.add_argument("--temperature-c", type=float, default=None, metavar="T",
                   help="cell temperature, degC (default 25)")
    p.set_defaults(func=run)


def _fmt_time(seconds: float) -> str:
    if not math.isfinite(seconds):
        return "unlimited (no load)"
    h, rem = divmod(int(round(seconds)), 3600)
    return f"{seconds:.0f} s ({h} h {rem // 60:02d} min)"


def run(args) -> int:
    import numpy as np

    from socfuse.models.modelfile import load_model

    from socfuse.estimator.cli.main import SAFETY_NOTE, CliError
    from socfuse.estimator.filters.energy import EnergyError, energy_table, parse_pack, usable_energy

    try:
        pack = parse_pack(args.pack)
    except EnergyError as e:
        raise CliError(f"--pack: {e}") from None
    for name, val in (("--load-a", args.load_a), ("--load-w", args.load_w), ("--peak-a", args.peak_a)):
        if val is not None and not (math.isfinite(val) and val >= 0):
            raise CliError(f"{name} is a discharge load >= 0, got {val}")
    from socfuse.estimator.cli.common import check_json_inputs

    check_json_inputs(cell_model=args.model)
    model = load_model(args.model)
    temp = 25.0 if args.temperature_c is None else args.temperature_c
    table = energy_table(model)
    soc = np.linspace(0.0, 1.0, 11)
    soc_e = table.soc_e(soc, temp)
    e_rest = table.energy_wh(soc, temp) * pack.n_cells
    has_load = args.load_a is not None or args.load_w is not None
    load = dict(current_a=args.load_a) if args.load_a is not None else dict(power_w=args.load_w)
    if args.peak_a is not None and not has_load:
        raise CliError("--peak-a needs a steady load (--load-a or --load-w)")
    if has_load:
        at_load = [usable_energy(model, soc0=float(z), temperature_c=temp, pack=pack, n_steps=1000,
                                 peak_current_a=args.peak_a, **load)
                   for z in soc]
        full = at_load[-1]
        e_load = np.array([r.energy_wh for r in at_load])
    name = model.name or args.model
    print(f"cell model: {name}; capacity {model.capacity_ah:.4g} Ah; cut-off {model.v_min_v:.3g} V; "
          f"{temp:.1f} degC; pack {pack.label} ({pack.n_cells} cell{'s' if pack.n_cells > 1 else ''}, "
          f"{model.capacity_ah * pack.n_parallel:.4g} Ah)")
    head = f"{'soc_c_pct':>10} {'soc_e_pct':>10} {'rest_wh':>10}"
    if has_load:
        head += f" {'load_wh':>10} {'soc_e_load_pct':>15} {'usable_ah':>10} {'usable_soc_pct':>15}"
        # charge to the cut-off at this load and temperature (SOC stays on the model's low-rate scale)
        q_pack = model.capacity_ah * pack.n_parallel
        usable_ah = np.array([max(float(z) - r.cutoff_soc, 0.0) * q_pack for z, r in zip(soc, at_load)])
    print(head)
    for k in range(soc.size):
        line = f"{100 * soc[k]:10.0f} {100 * soc_e[k]:10.2f} {e_rest[k]:10.2f}"
        if has_load:
            frac = e_load[k] / e_load[-1] if e_load[-1] > 0 else float("nan")
            ufrac = usable_ah[k] / usable_ah[-1] if usable_ah[-1] > 0 else float("nan")
            line += f" {e_load[k]:10.2f} {100 * frac:15.2f} {usable_ah[k]:10.3f} {100 * ufrac:15.2f}"
        print(line)
    print(f"rest energy (full to empty): {e_rest[-1]:.2f} Wh")
    if has_load:
        what = f"{args.load_a:g} A" if args.load_a is not None else f"{args.load_w:g} W"
        if args.peak_a is not None:
            what += f" with {args.peak_a:g} A peaks"
        print(f"usable energy at {what}: {full.energy_wh:.2f} Wh "
              f"({100 * full.energy_wh / full.rest_energy_wh:.1f} % of the rest energy)")
        print(f"runtime at {what} from full: {_fmt_time(full.runtime_s)}")
        reason = {"voltage": f"terminal voltage{' under a peak' if args.peak_a is not None else ''} reaches "
                             f"{model.v_min_v:.3g} V per cell",
                  "empty": "SOC 0 reached before the voltage cut-off", "rest": "no load"}[full.cutoff_reason]
        print(f"cut-off at SOC_C {100 * full.cutoff_soc:.1f} % ({reason})")
        print(f"usable capacity at {what}, {temp:.1f} degC: {usable_ah[-1]:.3f} Ah from full "
              f"({100 * usable_ah[-1] / q_pack:.1f} % of the {q_pack:.4g} Ah low-rate capacity)")
        if math.isfinite(full.mean_voltage_v):
            print(f"mean terminal voltage {full.mean_voltage_v:.3f} V, mean current {full.mean_current_a:.3f} A")
    rows = ((model.provenance or {}).get("usable_capacity") or {}).get("rows") or []
    if rows:
        # identify's table (steady-state estimate at the tested temperatures), the nearest temperature
        t_near = min({float(r["temperature_c"]) for r in rows}, key=lambda x: abs(x - temp))
        print(f"usable capacity from full at {t_near:.1f} degC (identify, steady load): " + ", ".join(
            f"{r['c_rate']:g}C {r['usable_ah'] * pack.n_parallel:.3f} Ah" for r in rows
            if float(r["temperature_c"]) == t_near))
    for r in ((model.provenance or {}).get("usable_capacity") or {}).get("measured") or []:
        print(f"usable capacity measured at {r['temperature_c']:.1f} degC (identify, pulse test to the cut-off, "
              f"about {r['mean_current_a']:.2g} A at the end): {r['usable_ah'] * pack.n_parallel:.3f} Ah from full")
    print(SAFETY_NOTE, file=sys.stderr)
    return 0
