"""Write the worked-example notebooks of this folder (without outputs).

    python notebooks/make_notebooks.py          # rewrites 01_*.ipynb and 02_*.ipynb here

The notebooks are kept as code here so their JSON is always valid and reviewable; the test
suite executes them (tests/test_notebooks.py).  Demo data: demo cell C48 (invented), see
datasets/README.md.
"""
from __future__ import annotations

from pathlib import Path

import nbformat
from nbformat.v4 import new_code_cell, new_markdown_cell, new_notebook

HERE = Path(__file__).resolve().parent

SETUP = '''\
import sys
from pathlib import Path

# run from notebooks/ (Jupyter's default) or from the repository root
REPO = Path.cwd().parent if (Path.cwd().parent / "models").is_dir() else Path.cwd()
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))
DATA = REPO / "datasets"

import numpy as np
import matplotlib.pyplot as plt
import socfuse
from socfuse.estimator.cli.main import SAFETY_NOTE
%matplotlib inline'''

IDENTIFY = '''\
c20 = socfuse.load_recording(DATA / "c48_c20_25degC.csv")
pulses = [socfuse.load_recording(DATA / "c48_pulse_25degC.csv"),
          socfuse.load_recording(DATA / "c48_pulse_05degC.csv")]
result = socfuse.identify(c20, pulses, name="demo cell C48 (identified)")
model = result.model'''

NB1 = [
    new_markdown_cell(
        "# Characterise demo cell C48 and estimate its SOC\n\n"
        "A courier co-operative runs electric cargo tricycles with 14s4p packs of demo cell C48 (an invented "
        "4.8 Ah NMC cell; the data in `datasets/` comes from a richer truth simulator, see its README).\n\n"
        "1. identify a Thevenin model from the C/20 test and the pulse tests at 25 and 5 degC;\n"
        "2. run the EKF and the coulomb-counting baseline (with OCV reseed after rests) over a delivery "
        "day with a lunch break;\n"
        "3. compare both with the recording's reference SOC."),
    new_code_cell(SETUP),
    new_code_cell(IDENTIFY + "\nprint(result.summary())"),
    new_code_cell('''\
s = np.linspace(0, 1, 201)
fig, ax = plt.subplots(figsize=(6, 3.5))
ax.plot(100 * c20.soc_ref, c20.voltage_v, lw=0.6, color="0.6", label="C/20 test (terminal voltage)")
ax.plot(100 * s, model.ocv.voltage(s, 25.0), lw=2, label="identified OCV")
ax.set_xlabel("SOC (%)"); ax.set_ylabel("voltage (V)"); ax.legend(); ax.grid(alpha=0.3)
print(f"R0 at 50 % SOC, 25 degC: {1000 * float(model.r0_ohm.at(0.5, 25.0)):.1f} mOhm; "
      f"{model.n_rc} RC pair(s)")'''),
    new_markdown_cell("## A delivery day: EKF beside coulomb counting\n\n"
                      "Neither estimator is told the starting SOC: both take it from the first voltage sample."),
    new_code_cell('''\
from socfuse.estimator.analysis.metrics import trace_metrics

day = socfuse.load_recording(DATA / "c48_day_lunch.csv")
traces = {m: socfuse.estimate(model, day, method=m) for m in ("ekf", "coulomb")}
print("SOC error against the recording's reference, percentage points")
for name, tr in traces.items():
    f = trace_metrics(tr)
    print(f"{name:8s} RMSE {f.rmse_pct:.2f}  P95 {f.p95_abs_pct:.2f}  max {f.max_abs_pct:.2f}  "
          f"final {f.final_abs_pct:.2f}  reseeds {len(tr.reseeds)}")'''),
    new_code_cell('''\
hours = day.time_s / 3600
fig, (a1, a2) = plt.subplots(2, 1, figsize=(7, 5), sharex=True)
a1.plot(hours, 100 * day.soc_ref, "k", lw=1, label="reference")
for name, tr in traces.items():
    a1.plot(hours, 100 * tr.soc, lw=1, label=name)
    a2.plot(hours, 100 * tr.soc_error, lw=1, label=name)
ekf = traces["ekf"]
a2.fill_between(hours, -300 * ekf.soc_sigma, 300 * ekf.soc_sigma, color="C0", alpha=0.15, label="EKF 3 sigma")
a1.set_ylabel("SOC (%)"); a2.set_ylabel("error (points)"); a2.set_xlabel("time (h)")
a1.legend(); a2.legend(); a1.grid(alpha=0.3); a2.grid(alpha=0.3)
print(SAFETY_NOTE)'''),
]

NB2 = [
    new_markdown_cell(
        "# Energy-based SOC and remaining energy\n\n"
        "Capacity-based SOC (SOC_C) counts charge; a rider needs energy. At rest the energy left is "
        "`E(z) = Q * integral_0^z OCV(s) ds`, and SOC_E = E(z) / E(1). Because the OCV is higher when the "
        "cell is full, SOC_E sits below SOC_C mid-range. Under load the terminal voltage reaches the 2.5 V "
        "cut-off earlier, so less energy is usable; `estimator.energy.usable_energy` simulates the "
        "identified model to the cut-off at a constant current or power."),
    new_code_cell(SETUP),
    new_code_cell(IDENTIFY),
    new_code_cell('''\
from socfuse.estimator.filters.energy import energy_table, soc_c_to_e, soc_e_to_c, usable_energy, parse_pack

table = energy_table(model)
z = np.linspace(0, 1, 11)
print(" SOC_C %   SOC_E %   rest energy per cell (Wh)")
for zc, ze, e in zip(z, table.soc_e(z), table.energy_wh(z)):
    print(f"{100 * zc:7.0f} {100 * ze:9.2f} {e:12.2f}")
print(f"half the energy is left at SOC_C {100 * soc_e_to_c(model, 0.5):.1f} %")
s = np.linspace(0, 1, 201)
fig, ax = plt.subplots(figsize=(6, 3))
ax.plot(100 * s, 100 * (soc_c_to_e(model, s) - s))
ax.set_xlabel("SOC_C (%)"); ax.set_ylabel("SOC_E - SOC_C (points)"); ax.grid(alpha=0.3)'''),
    new_markdown_cell("## The 14s4p pack at a steady load\n\nA cargo tricycle draws a few hundred watts on the "
                      "flat; the table shows how much of the rest energy each steady load can use, and how much "
                      "when the rider may ask for a 10 s, 40 A hill start at any moment (the cut-off is then "
                      "judged under that peak)."),
    new_code_cell('''\
pack = parse_pack("14s4p")
rest = float(table.full_energy_wh()) * pack.n_cells
print(f"pack {pack.label}: rest energy {rest:.0f} Wh")
print("  load W   usable Wh   of rest   runtime h   cut-off SOC_C %   with 40 A peaks: Wh   cut-off %")
for p_w in (100, 300, 600, 1000, 1500):
    r = usable_energy(model, power_w=p_w, pack=pack, n_steps=800)
    rp = usable_energy(model, power_w=p_w, pack=pack, n_steps=800, peak_current_a=40.0)
    print(f"{p_w:8.0f} {r.energy_wh:11.0f} {100 * r.energy_wh / rest:8.1f} % {r.runtime_s / 3600:10.2f} "
          f"{100 * r.cutoff_soc:12.1f} {rp.energy_wh:22.0f} {100 * rp.cutoff_soc:11.1f}")'''),
    new_markdown_cell("## Remaining energy along a delivery day, against the reference\n\nThe estimate trace "
                      "carries `soc_e` and the rest energy left per cell; multiply by the cell count for the pack. "
                      "The demo day has a reference SOC (the truth simulator's), so the figure can be checked: the "
                      "reference energy is the same identified model's rest energy at the *reference* SOC, so the "
                      "difference is the error that the SOC estimate puts into the remaining-energy figure. This "
                      "is the default path (identified model, default filter settings, start from the first "
                      "voltage sample), not tuned for this day."),
    new_code_cell('''\
day = socfuse.load_recording(DATA / "c48_day_long.csv")
tr = socfuse.estimate(model, day, method="ekf")
ref_soc_e = table.soc_e(day.soc_ref, day.temperature_c)
ref_wh = table.energy_wh(day.soc_ref, day.temperature_c) * pack.n_cells
est_wh = tr.energy_wh_remaining * pack.n_cells
hours = day.time_s / 3600
fig, (a1, a2, a3) = plt.subplots(3, 1, figsize=(7, 7), sharex=True)
a1.plot(hours, 100 * day.soc_ref, "k", lw=1.2, label="SOC_C reference")
a1.plot(hours, 100 * tr.soc, "C0", label="SOC_C (EKF)")
a1.fill_between(hours, 100 * (tr.soc - 3 * tr.soc_sigma), 100 * (tr.soc + 3 * tr.soc_sigma), color="C0",
                alpha=0.15, label="EKF +-3 sigma")
a1.plot(hours, 100 * ref_soc_e, "k--", lw=1, label="SOC_E reference")
a1.plot(hours, 100 * tr.soc_e, "C1--", label="SOC_E (EKF)")
a2.plot(hours, ref_wh, "k", lw=1.2, label="at the reference SOC")
a2.plot(hours, est_wh, "C0", label="estimated")
a3.plot(hours, est_wh - ref_wh, "C3")
a3.axhline(0, color="0.5", lw=0.8)
a1.set_ylabel("SOC (%)"); a2.set_ylabel("pack energy left (Wh)"); a3.set_ylabel("energy error (Wh)")
a3.set_xlabel("time (h)")
a1.legend(fontsize=8); a2.legend(fontsize=8)
for a in (a1, a2, a3):
    a.grid(alpha=0.3)'''),
    new_code_cell('''\
err_pts = 100 * (tr.soc[-1] - day.soc_ref[-1])
three_sigma = 300 * tr.soc_sigma[-1]
e_err = est_wh[-1] - ref_wh[-1]
print(f"end of day, estimate:  SOC_C {100 * tr.soc[-1]:.1f} %, SOC_E {100 * tr.soc_e[-1]:.1f} %, "
      f"{est_wh[-1]:.0f} Wh left at rest")
print(f"end of day, reference: SOC_C {100 * day.soc_ref[-1]:.1f} %, SOC_E {100 * ref_soc_e[-1]:.1f} %, "
      f"{ref_wh[-1]:.0f} Wh left at rest")
print(f"error: {err_pts:+.1f} SOC points, {e_err:+.0f} Wh ({100 * e_err / ref_wh[-1]:+.0f} % of what is really "
      f"left); the filter's own +-3 sigma is +-{three_sigma:.1f} points")
if abs(err_pts) > 2.0:
    print(f"The estimate is WRONG at the end of this day: {abs(err_pts):.1f} points off, so the remaining energy is "
          f"{'overstated' if e_err > 0 else 'understated'} by {abs(e_err):.0f} Wh."
          + (" Its own sigma does not cover the error, so the filter does not know it is wrong."
             if abs(err_pts) > three_sigma else " Its own sigma does cover the error."))
else:
    print("The estimate is within 2 SOC points of the reference at the end of this day.")
print("Do not use a remaining-energy figure as a range guarantee.")
print(SAFETY_NOTE)'''),
]

NOTEBOOKS = {"01_characterise_and_estimate.ipynb": NB1, "02_energy_soc.ipynb": NB2}


def build(folder: Path = HERE) -> list[Path]:
    """Write the notebooks into ``folder``; returns their paths."""
    out = []
    for name, cells in NOTEBOOKS.items():
        for k, cell in enumerate(cells):
            cell["id"] = f"{name[:2]}-cell-{k:02d}"  # stable ids: rebuilding does not churn the files
        nb = new_notebook(cells=cells, metadata={
            "kernelspec": {"name": "python3", "display_name": "Python 3", "language": "python"},
            "language_info": {"name": "python"}})
        nbformat.validate(nb)
        path = Path(folder) / name
        tmp = path.with_suffix(".ipynb.tmp")
        nbformat.write(nb, tmp)
        tmp.replace(path)
        out.append(path)
    return out


if __name__ == "__main__":
    for p in build():
        print(p)
