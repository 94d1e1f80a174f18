"""Probe (not a tool feature): does a core temperature ahead of the case sensor explain the cold error?

At 0 degC the Panasonic 18650PF case warms 5-14 degC during a drive; under load the core runs warmer
than the case, so tables looked up at the case temperature over-predict the resistance.  This script
estimates the core temperature from the case reading with the two-state lumped thermal model of a
cylindrical cell (core heat capacity ``Cc``, core-to-case resistance ``Rc``; form from Lin et al.,
IEEE Trans. Control Syst. Technol. 21(5), 2013, and Forgez et al., J. Power Sources 195, 2961, 2010;
their 26650 values, about 60 J/K and 2 K/W, are quoted from memory)::

    Tc[k] = Tcase[k] + (Tc[k-1] - Tcase[k-1]) a + (1 - a) Rc P[k-1],   a = exp(-dt / (Rc Cc))

with the irreversible heat ``P = max(I (OCV(soc_ref, T) - V), 0)`` (entropic heat left out), writes
the recordings with the core temperature in place of the case reading (the refine recording too, in
the dataset preset's layout), and runs the documented ``identify -> estimate`` path with default
options at 10 Hz, as ``benchmarks/generalisation.py`` does.  It prints EKF SOC RMSE, coverage and the
wrong-start RMSE 600 s after a mid-drive hand-over (the hand-over carries the core state) per ``Rc``.

Needs the shared real data (``SOCFUSE_REALDATA``).  Usage::

    python benchmarks/core_temperature_probe.py [--temps 0 10] [--rc 0 2]
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
import generalisation as g  # noqa: E402

CORE_HEAT_CAPACITY_J_PER_K = 40.0  # order of magnitude for an 18650 (see the module docstring)


def core_temperature(time_s, case_c, heat_w, rc_k_per_w: float, cc_j_per_k: float) -> np.ndarray:
    """Core temperature, degC, shape (n,), from the case reading and the heat (see the module docstring)."""
    tc = np.array(case_c, dtype=float)
    if rc_k_per_w <= 0:
        return tc
    tau = rc_k_per_w * cc_j_per_k
    for k in range(1, tc.size):
        a = np.exp(-(time_s[k] - time_s[k - 1]) / tau)
        tc[k] = case_c[k] + (tc[k - 1] - case_c[k - 1]) * a + (1 - a) * rc_k_per_w * heat_w[k - 1]
    return tc


def _preset_csv(path: Path, t, i, v, temp, ref, capacity_ah: float) -> None:
    # the Panasonic preset's layout (discharge negative, Ah counter negative on discharge)
    pd.DataFrame({"Time": t, "Current": -i, "Voltage": v, "Battery_Temp_degC": temp,
                  "Ah": -(1 - ref) * capacity_ah}).to_csv(path, index=False, float_format="%.9g")


def _metrics(trace: Path, after_s=None) -> dict:
    return g.metrics(g.read_trace(trace), after_s)


def probe(temp: str, rcs, work: Path, cli) -> list:
    root = g.realdata_root()
    case = g.pan_case(root, temp, work)
    cyc = g._pan_cycles(root, temp)
    ident = list(case.identify_args)
    k_ref = ident.index("--refine")
    model0 = work / "model_case.json"
    if cli(["identify", *ident, "-o", model0, "--force"]) != 0:
        raise SystemExit(f"identify failed: {cli.last_stderr.strip()[:300]}")
    from socfuse.models.modelfile import load_model

    m0 = load_model(model0)
    cap = m0.capacity_ah
    recs = {}
    for name, path in cyc.items():
        r = g._load(g.TestRec(name, path, "10 Hz", ("--preset", g.PAN_PRESET, "--ref-soc0", "1")), cap)
        t, i, v, tcase, ref = (np.asarray(x, dtype=float) for x in
                               (r.time_s, r.current_a, r.voltage_v, r.temperature_c, r.soc_ref))
        heat = np.maximum(i * (m0.ocv.voltage(np.clip(ref, 0, 1), tcase) - v), 0.0)
        recs[name] = (t, i, v, tcase, ref, heat)
    rows = []
    for rc in rcs:
        tag = f"rc{rc:g}"
        files, mean_dt = {}, {}
        for name, (t, i, v, tcase, ref, heat) in recs.items():
            tc = core_temperature(t, tcase, heat, rc, CORE_HEAT_CAPACITY_J_PER_K)
            files[name] = work / f"{name}_{tag}.csv"
            g._write_csv(files[name], t, i, v, tc, ref)
            if name == "Cycle_1":
                _preset_csv(work / f"Cycle_1_{tag}_preset.csv", t, i, v, tc, ref, cap)
            mean_dt[name] = float(np.mean(tc - tcase))
        argv = list(ident)
        argv[k_ref + 1] = work / f"Cycle_1_{tag}_preset.csv"
        model = work / f"model_{tag}.json"
        if cli(["identify", *argv, "-o", model, "--force"]) != 0:
            raise SystemExit(f"identify failed: {cli.last_stderr.strip()[:300]}")
        for rec in [*case.tune_recs, *case.tests]:
            tr = work / f"trace_{rec.name}_{tag}.csv"
            cli(["estimate", "--model", model, "--method", "ekf", files[rec.name], "-o", tr, "--force"])
            row = {"temp": temp, "rc": rc, "rec": rec.name + (" (refined on)" if rec.tuned_on else ""),
                   "dT": mean_dt[rec.name], **_metrics(tr)}
            # wrong start: the generalisation benchmark's own hand-over rule and offset
            t, i, v, tcase, ref, heat = recs[rec.name]
            k = g.handover_index(t, i, cap)
            d = pd.read_csv(files[rec.name]).iloc[k:]
            ho = work / f"handover_{rec.name}_{tag}.csv"
            d.to_csv(ho, index=False, float_format="%.9g")
            wrong = ref[k] - g.WRONG_START if ref[k] > 0.5 else ref[k] + g.WRONG_START
            tw = work / f"trace_ws_{rec.name}_{tag}.csv"
            cli(["estimate", "--model", model, "--method", "ekf", "--soc0", f"{wrong:.6f}", ho, "-o", tw,
                 "--force"])
            row["ws600_pct"] = _metrics(tw, g.WRONG_START_AFTER_S)["rmse_pct"]
            rows.append(row)
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--temps", nargs="+", default=["0", "10"], help="Panasonic cold cases: 0 10 (25 has no "
                    "temperature axis in its model, so nothing changes there)")
    ap.add_argument("--rc", nargs="+", type=float, default=[0.0, 2.0], help="core-to-case resistance, K/W")
    ap.add_argument("--work", default=str(Path.home() / ".cache" / "socfuse" / "core_temperature_probe"))
    a = ap.parse_args(argv)
    if g.realdata_root() is None:
        print("real data not found (SOCFUSE_REALDATA): nothing to probe", file=sys.stderr)
        return 0
    rows = []
    for temp in a.temps:
        work = Path(a.work) / f"pan{temp}"
        work.mkdir(parents=True, exist_ok=True)
        rows += probe(temp, a.rc, work, g.Cli(work / "cli.log"))
    print(f"{'case':6} {'Rc K/W':>6} {'recording':22} {'mean dT K':>9} {'RMSE%':>6} {'max%':>6} {'cov%':>6} "
          f"{'ws600%':>6}")
    for r in rows:
        print(f"pan{r['temp']:<3} {r['rc']:6.1f} {r['rec']:22} {r['dT']:9.2f} {r['rmse_pct']:6.2f} "
              f"{r['max_pct']:6.2f} {r.get('coverage_pct', float('nan')):6.1f} {r.get('ws600_pct', float('nan')):6.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
