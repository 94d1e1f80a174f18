"""Identification accuracy on the reference cases, through the documented CLI path (default options).

    python benchmarks/identification.py            # physics cells (full length), demo, Panasonic 25 degC
    python benchmarks/identification.py --short    # the physics cells' short versions

For each case: ``socfuse identify --ocv-test C20 --pulse-test PULSE -o model.json`` with default
options, then the model against the truth the case has: capacity against the true C/20 capacity
(PyBaMM cells) or the cycler's amp-hour count (Panasonic); OCV RMS over 10-90 % SOC against the
true equilibrium voltage (PyBaMM: electrode OCPs at the averaged stoichiometries; demo: the truth
table); open-loop voltage RMS on each dynamic recording (native sample rate); pulses found against
the protocol; the estimated current-sensor offset against the true one.  Prints one table.
"""
from __future__ import annotations

import argparse
import contextlib
import io
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from socfuse.estimator.cli.main import main as cli  # noqa: E402
from socfuse.models import load_model  # noqa: E402
from socfuse.models.identify.validate import validate  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402


def _identify(c20, pulses, out, load_opts=()):
    args = ["identify", "--ocv-test", str(c20)]
    for p in pulses:
        args += ["--pulse-test", str(p)]
    with contextlib.redirect_stdout(io.StringIO()):
        code = cli(args + list(load_opts) + ["-o", str(out)])
    if code != 0:
        raise SystemExit(f"identify failed on {c20}")
    return load_model(out)


def _ocv_rms(model, truth_fn):
    z = np.linspace(0.1, 0.9, 81)
    return float(np.sqrt(np.mean((model.ocv.voltage(z, 25.0) - truth_fn(z)) ** 2)))


def physics_rows(short: bool, tmp: Path):
    from socfuse.datasets import physics

    rows = []
    for cell in sorted(physics.CELLS):
        case = physics.generate(cell, short=short)
        m = _identify(case.path("c20"), [case.path("pulse")], tmp / f"{cell}.json")
        drives = [validate(m, load_recording(case.path(k))).rms_v for k in ("drive_1", "drive_2", "drive_3")]
        off = m.provenance["current_offset"]
        rows.append((f"PyBaMM {cell}" + (" (short)" if short else ""), m.capacity_ah / case.c20_capacity_ah - 1,
                     _ocv_rms(m, case.equilibrium_voltage), drives,
                     f"{off['pooled_a'] * 1000:.2f} (true {case.sensor_offset_a * 1000:.2f})",
                     "yes" if m.hysteresis else "no"))
    return rows


def demo_rows(tmp: Path):
    from socfuse.estimator.demo.truth import C48_TRUTH, truth_ocv_curve

    d = HERE.parent / "datasets"
    m = _identify(d / "c48_c20_25degC.csv", [d / "c48_pulse_25degC.csv", d / "c48_pulse_05degC.csv"], tmp / "c48.json")
    truth = truth_ocv_curve()
    drives = [validate(m, load_recording(d / f)).rms_v for f in ("c48_day_lunch.csv", "c48_day_cold.csv",
                                                                  "c48_day_long.csv")]
    h = m.hysteresis
    return [("demo C48 (invented)", m.capacity_ah / C48_TRUTH.capacity_ah - 1,
             _ocv_rms(m, lambda z: truth.voltage(z, 25.0)), drives,
             f"{m.provenance['current_offset']['pooled_a'] * 1000:.2f}",
             "no" if h is None else f"M {h.max_v * 1000:.1f} mV, gamma {h.gamma:.0f} (true 8.0, 30)")]


def panasonic_rows(tmp: Path):
    root = Path(__import__("os").environ.get("SOCFUSE_REALDATA", HERE.parent.parent / "shared" / "realdata"))
    pan = root / "panasonic_18650pf"
    if not pan.is_dir():
        return []
    c20 = pan / "c20_ocv_and_1c_start_of_tests" / "05-08-17_13.26 C20 OCV Test_C20_25dC.mat"
    hppc = pan / "hppc" / "03-11-17_08.47 25degC_5Pulse_HPPC_Pan18650PF.mat"
    opts = ["--preset", "panasonic-18650pf"]
    m = _identify(c20, [hppc], tmp / "pan.json", opts)
    drives = []
    for name in ("03-18-17_02.17 25degC_Cycle_1_Pan18650PF.mat", "03-19-17_03.25 25degC_Cycle_2_Pan18650PF.mat"):
        drives.append(validate(m, load_recording(pan / "drive_cycles" / name, preset="panasonic-18650pf")).rms_v)
    # capacity against the cycler's own amp-hour count of the C/20 discharge, 2.995 Ah (SOURCE.md)
    return [("Panasonic 18650PF 25 degC", m.capacity_ah / 2.995 - 1, float("nan"), drives,
             f"{m.provenance['current_offset']['pooled_a'] * 1000:.2f}", "yes" if m.hysteresis else "no")]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--short", action="store_true", help="physics cells in their short versions")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        rows = physics_rows(args.short, tmp) + demo_rows(tmp) + panasonic_rows(tmp)
    print(f"{'case':34s} {'capacity':>9s} {'OCV RMS':>8s}  {'open-loop RMS per drive (mV)':30s} {'offset mA':22s} hysteresis")
    for name, cap, ocv, drives, off, hy in rows:
        o = "   n/a" if not np.isfinite(ocv) else f"{ocv * 1000:5.2f} mV"
        print(f"{name:34s} {cap * 100:+8.2f}% {o:>8s}  {' / '.join(f'{x * 1000:.1f}' for x in drives):30s} {off:22s} {hy}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
