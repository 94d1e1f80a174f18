"""Physics-based reference cells from PyBaMM, recorded as a BMS would record them.

    python datasets/physics.py --out DIR            # both cells, full length (a few minutes under nice)
    python datasets/physics.py --out DIR --short    # the short versions the tests use

From Python (checkout or installed package)::

    from socfuse.datasets import physics
    case = physics.generate("chen2020_nmc", short=True)   # cached; regenerated only when missing
    case.path("pulse"), case.c20_capacity_ah, case.equilibrium_voltage(soc)

Two cells, each from a parameter set that ships with PyBaMM (nothing is downloaded):

- ``chen2020_nmc``: LG M50 (NMC811 / graphite-SiOx), parameter set ``Chen2020`` (Chen et al.,
  J. Electrochem. Soc. 167, 080534, 2020, doi:10.1149/1945-7111/ab9050); SPMe with a lumped thermal
  model (25 degC ambient); 2.5 .. 4.2 V.
- ``prada2013_lfp``: A123 26650 (LFP / graphite), parameter set ``Prada2013`` (Prada et al.,
  J. Electrochem. Soc. 160, A616, 2013, doi:10.1149/2.053304jes); SPMe, isothermal at 25 degC (the set
  has no thermal parameters); 2.0 .. 3.6 V.  The set models no OCV hysteresis.

Per cell, canonical recording CSVs (DESIGN.md section 3):

``c20``
    Low-rate OCV test: 10 min rest at full, C/20 discharge to the lower cut-off, 2 h rest, C/20 charge
    to the upper cut-off, constant-voltage hold until C/50, 1 h rest.  10 s sampling.
``pulse``
    HPPC-style pulse test (after the pattern of the US DOE/INL battery test manuals): from full and
    rested, at ten SOC levels (100, 90, ..., 10 %) a 10 s 1C discharge pulse, 40 s rest, a 10 s 0.75C
    charge pulse, 40 s rest, then (except after the last level) a 6 min discharge of 10 % of the C/20
    capacity (about 1C) and a rest (1 h; 15 min in the short mode).  A charge pulse
    that reaches the upper cut-off continues at constant voltage for the rest of its 10 s, as a
    cycler does.  0.1 s sampling during pulses and their 40 s rests, 1 s otherwise.
``drive_1`` .. ``drive_3``
    Dynamic recordings at 10 Hz (our own invented stop-and-go profiles: acceleration peaks up to 2C,
    cruising, regenerative braking to 1C of charge, standstills; ``drive_2`` holds a 20 min parked rest).

True signals go through one BMS-grade sensor model (DESIGN.md section 7): current
``q_i round((gain i + offset + n_i) / q_i)`` with offset 0.5 % of 1C, gain error 0.4 %, white noise
0.3 % of 1C and a 1 mA quantum; voltage ``q_v round((v + n_v) / q_v)`` with 1.5 mV noise and 1 mV steps;
temperature with 0.2 degC noise and 0.1 degC steps.  The offset and gain are the same in every file of a
cell (one sensor); the noise seed differs per file.  The NMC cell's sensor reads high (+offset, gain
1.004), the LFP cell's low (-offset, gain 0.996).

Every test starts from "full" as a lab defines it: the cell's standard charge (C/20 to the upper
cut-off, constant voltage until C/50, 1 h rest; not recorded).  ``soc_ref`` is the true SOC: the
model's own charge counter (``Discharge capacity [A.h]``, the integral of the true current) over the
cell's C/20 discharge capacity, 1 at full and 0 where the C/20 discharge from full reaches the lower
cut-off.  The manifest also holds the
true equilibrium voltage over that SOC (PyBaMM's ``Bulk open-circuit voltage [V]``: the electrode OCPs
at the particle-averaged stoichiometries, i.e. the voltage a fully relaxed cell shows) and the true
C/20 capacity, which tests compare identification against.

Files are cached (default ``~/.cache/socfuse/physics``, or ``$SOCFUSE_PHYSICS_CACHE``, or the ``out``
argument) in ``<cache>/<full|short>/<cell>/`` and regenerated only when the manifest is missing or
was written by another generator version.  This module is not needed by the demo and imports PyBaMM
only when it must simulate.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

__all__ = ["CELLS", "CellSpec", "PhysicsCase", "SensorSpec", "cache_dir", "generate", "load_case", "main"]

GENERATOR_VERSION = 4  # 4: sensor errors through socfuse.models.sensors (gain_error, a fraction)
MANIFEST_SCHEMA = "socfuse.physics-manifest/1"
SECONDS_PER_HOUR = 3600.0


@dataclass(frozen=True)
class SensorSpec:
    """BMS-grade measurement errors, as fractions of the 1C current where so named.

    Applied by the one sensor-error model of socfuse (:func:`socfuse.models.sensors.measure`):
    ``current_meas = q_i round(((1 + gain_error) i + offset_a + n_i) / q_i)``, ``n_i ~ N(0, noise_a^2)``;
    the same form for voltage (no gain error, no offset) and temperature.  Units: A, V, degC.
    """

    offset_frac_1c: float = 0.005
    gain_error: float = 0.004
    noise_frac_1c: float = 0.003
    current_quant_a: float = 0.001
    voltage_noise_v: float = 0.0015
    voltage_quant_v: float = 0.001
    temperature_noise_c: float = 0.2
    temperature_quant_c: float = 0.1


@dataclass(frozen=True)
class CellSpec:
    """One PyBaMM cell: parameter set, model options and voltage window (V)."""

    key: str
    parameter_set: str
    title: str
    options: tuple = ()
    v_min: float = 2.5
    v_max: float = 4.2
    sensors: SensorSpec = field(default_factory=SensorSpec)
    reference: str = ""


CELLS = {
    "chen2020_nmc": CellSpec(
        "chen2020_nmc", "Chen2020", "LG M50 NMC811 (PyBaMM Chen2020, SPMe + lumped thermal)",
        options=(("thermal", "lumped"),), v_min=2.5, v_max=4.2,
        sensors=SensorSpec(offset_frac_1c=0.005, gain_error=0.004),
        reference="Chen et al., J. Electrochem. Soc. 167, 080534 (2020), doi:10.1149/1945-7111/ab9050"),
    "prada2013_lfp": CellSpec(
        "prada2013_lfp", "Prada2013", "A123 26650 LFP (PyBaMM Prada2013, SPMe, isothermal)",
        options=(), v_min=2.0, v_max=3.6,
        sensors=SensorSpec(offset_frac_1c=-0.005, gain_error=-0.004),
        reference="Prada et al., J. Electrochem. Soc. 160, A616 (2013), doi:10.1149/2.053304jes"),
}

RECORDINGS = ("c20", "pulse", "drive_1", "drive_2", "drive_3")
PULSE_LEVELS = 10


def cache_dir(out=None) -> Path:
    """The cache root: ``out``, else ``$SOCFUSE_PHYSICS_CACHE``, else ``~/.cache/socfuse/physics``."""
    if out is not None:
        return Path(out)
    env = os.environ.get("SOCFUSE_PHYSICS_CACHE")
    if env:
        return Path(env)
    return Path.home() / ".cache" / "socfuse" / "physics"


@dataclass(frozen=True, eq=False)
class PhysicsCase:
    """A generated cell: its files and the truth a test compares against.

    Attributes
    ----------
    folder : Path
        Where the CSVs and ``manifest.json`` are.
    manifest : dict
        Everything recorded at generation (see :func:`generate`).
    """

    folder: Path
    manifest: dict

    @property
    def cell(self) -> str:
        return self.manifest["cell"]

    @property
    def c20_capacity_ah(self) -> float:
        """True C/20 discharge capacity from full to the lower cut-off, Ah."""
        return float(self.manifest["c20_capacity_ah"])

    @property
    def nominal_capacity_ah(self) -> float:
        """The parameter set's nominal capacity (the 1C current is this in A), Ah."""
        return float(self.manifest["nominal_capacity_ah"])

    @property
    def sensor_offset_a(self) -> float:
        """True current-sensor zero offset of this cell's sensor, A (positive reads discharge)."""
        return float(self.manifest["sensors"]["offset_a"])

    def path(self, name: str) -> Path:
        """Path of recording ``name`` (one of ``c20``, ``pulse``, ``drive_1`` .. ``drive_3``)."""
        if name not in self.manifest["files"]:
            raise KeyError(f"{self.cell}: no recording {name!r}; have {sorted(self.manifest['files'])}")
        return self.folder / self.manifest["files"][name]["file"]

    def equilibrium_voltage(self, soc):
        """True equilibrium (fully relaxed) voltage at SOC ``soc`` (fraction, 0..1), V, at 25 degC."""
        tab = self.manifest["equilibrium"]
        return np.interp(np.asarray(soc, dtype=float), tab["soc"], tab["voltage_v"])


# ============================================================================ simulation
def _pybamm():
    os.environ["PYBAMM_DISABLE_TELEMETRY"] = "true"  # before the import: never phone home
    import pybamm

    return pybamm


def _model(pybamm, spec: CellSpec):
    return pybamm.lithium_ion.SPMe(dict(spec.options))


def _params(pybamm, spec: CellSpec):
    p = pybamm.ParameterValues(spec.parameter_set)
    p.update({"Ambient temperature [K]": 298.15, "Initial temperature [K]": 298.15})
    return p


_TEMP_VAR = "Volume-averaged cell temperature [C]"


def _collect(cycles) -> dict:
    """Time, true current, voltage, temperature, charge counter and bulk OCV of solution cycles.

    PyBaMM repeats the boundary time between experiment steps; the later sample (the new step's
    current) is kept, so the times are strictly increasing.
    """
    names = {"time_s": "Time [s]", "current_a": "Current [A]", "voltage_v": "Voltage [V]",
             "temperature_c": _TEMP_VAR, "discharged_ah": "Discharge capacity [A.h]",
             "ocv_v": "Bulk open-circuit voltage [V]"}
    out = {k: np.concatenate([np.asarray(c[v].entries, dtype=float) for c in cycles]) for k, v in names.items()}
    t = out["time_s"]
    keep = np.ones(t.size, dtype=bool)
    keep[:-1] = np.diff(t) > 1e-9  # drop the earlier of two equal times
    return {k: v[keep] for k, v in out.items()}


def _precondition_steps(spec: CellSpec) -> list[str]:
    """The lab's standard charge before every test: what "full" (SOC 1) means here.

    From PyBaMM's equilibrium at the upper cut-off: a 6 min 1C discharge, a C/20 charge to the
    upper cut-off, a constant-voltage hold until C/50 and a 1 h rest (not recorded).
    """
    return ["Discharge at 1C for 6 minutes (60 second period)",
            f"Charge at C/20 until {spec.v_max} V (60 second period)",
            f"Hold at {spec.v_max} V until C/50 (60 second period)",
            "Rest for 1 hour (60 second period)"]


def _run_experiment(pybamm, spec: CellSpec, steps):
    """Solve the preconditioning and then ``steps``; returns the solution and the test's cycles."""
    pre = _precondition_steps(spec)
    exp = pybamm.Experiment(pre + list(steps))
    sim = pybamm.Simulation(_model(pybamm, spec), parameter_values=_params(pybamm, spec), experiment=exp)
    sol = sim.solve(initial_soc=1.0)
    return sol, list(sol.cycles[len(pre):])


def _c20_steps(spec: CellSpec) -> list[str]:
    return [
        "Rest for 10 minutes (10 second period)",
        f"Discharge at C/20 until {spec.v_min} V (10 second period)",
        "Rest for 2 hours (10 second period)",
        f"Charge at C/20 until {spec.v_max} V (10 second period)",
        f"Hold at {spec.v_max} V until C/50 (10 second period)",
        "Rest for 1 hour (10 second period)",
    ]


def _pulse_steps(spec: CellSpec, short: bool, step_a: float, cv_remaining_s=None) -> tuple[list[str], list[str]]:
    """Experiment steps of the pulse test and a parallel list of step kinds.

    ``step_a`` is the current of the 6 min SOC steps, A (10 % of the C/20 capacity in 6 min).
    """
    rest_min = 15 if short else 60
    cv_remaining_s = cv_remaining_s or {}
    steps, kinds = ["Rest for 10 minutes (1 second period)"], ["rest"]
    for k in range(PULSE_LEVELS):
        steps += [f"Discharge at 1C for 10 seconds or until {spec.v_min} V (0.1 second period)", "Rest for 40 seconds (0.1 second period)",
                  f"Charge at 0.75C for 10 seconds or until {spec.v_max} V (0.1 second period)"]
        kinds += ["discharge_pulse", "rest", "charge_pulse"]
        if k in cv_remaining_s:
            steps.append(f"Hold at {spec.v_max} V for {cv_remaining_s[k]:.1f} seconds (0.1 second period)")
            kinds.append("charge_pulse_cv")
        steps.append("Rest for 40 seconds (0.1 second period)")
        kinds.append("rest")
        if k < PULSE_LEVELS - 1:
            steps += [f"Discharge at {step_a:.4f} A for 6 minutes or until {spec.v_min} V (1 second period)", f"Rest for {rest_min} minutes (1 second period)"]
            kinds += ["soc_step", "rest"]
    return steps, kinds


def _simulate_pulse(pybamm, spec: CellSpec, short: bool, step_a: float):
    steps, kinds = _pulse_steps(spec, short, step_a)
    sol, cycles = _run_experiment(pybamm, spec, steps)
    # charge pulses that met the upper cut-off: continue at constant voltage for the rest of the 10 s.
    # PyBaMM skips a step whose limit is met at its start, so steps are told apart by their current:
    # a discharge pulse is ~10 s at +1C, a charge pulse any stretch of negative current.
    remaining = {}
    level = -1
    charged = {}
    for st in cycles:
        tt = st["Time [s]"].entries
        i_mean = float(np.mean(st["Current [A]"].entries))
        dur = float(tt[-1] - tt[0])
        if i_mean > 0 and dur < 11.0:
            level += 1
            charged[level] = 0.0
        elif i_mean < 0 and level >= 0:
            charged[level] += dur
    for k, dur in charged.items():
        if dur < 9.95:
            remaining[k] = 10.0 - dur
    if remaining:
        steps, kinds = _pulse_steps(spec, short, step_a, remaining)
        sol, cycles = _run_experiment(pybamm, spec, steps)
    return cycles, remaining


def _drive_profile(seed: int, duration_s: float, one_c_a: float, park_s: float = 0.0):
    """Our invented stop-and-go current at 1 s knots (A, + discharge), linear between knots.

    A sequence of trips: acceleration (ramp to 1.0-2.0C for 4-12 s), cruising (0.15-0.7C with a slow
    wobble, 20-150 s), regenerative braking (-0.3 to -1.0C for 3-10 s), standstill (0-40 s at a small
    auxiliary load).  ``park_s`` > 0 inserts a parked rest (zero current) in the middle.
    """
    rng = np.random.default_rng(seed)
    cur: list[float] = []
    parked = park_s <= 0
    while len(cur) < duration_s:
        if not parked and len(cur) >= duration_s / 2 - park_s / 2:
            cur += [0.0] * int(park_s)
            parked = True
            continue
        peak = rng.uniform(1.0, 2.0) * one_c_a
        n_acc = int(rng.integers(4, 13))
        cur += list(np.linspace(0.2 * one_c_a, peak, n_acc))
        cruise = rng.uniform(0.15, 0.7) * one_c_a
        n_cr = int(rng.integers(20, 151))
        ph = rng.uniform(0, 2 * np.pi)
        wob = 0.15 * one_c_a * np.sin(2 * np.pi * np.arange(n_cr) / rng.uniform(15, 40) + ph)
        cur += list(cruise + wob + rng.normal(0, 0.05 * one_c_a, n_cr))
        regen = -rng.uniform(0.3, 1.0) * one_c_a
        n_rg = int(rng.integers(3, 11))
        cur += list(np.linspace(regen, 0.3 * regen, n_rg))
        n_st = int(rng.integers(0, 41))
        cur += [0.02 * one_c_a] * n_st
    cur = np.asarray(cur[: int(duration_s) + 1], dtype=float)
    return np.arange(cur.size, dtype=float), cur


#: (seed, start SOC of PyBaMM's stoichiometry scale, full duration s, short duration s, park s)
_DRIVES = {
    "drive_1": (101, 0.95, 4200.0, 900.0, 0.0),
    "drive_2": (202, 0.85, 4800.0, 1500.0, 1200.0),
    "drive_3": (303, 0.70, 3600.0, 900.0, 0.0),
}


def _simulate_drive(pybamm, spec: CellSpec, name: str, short: bool, one_c_a: float):
    seed, soc0, full_s, short_s, park_s = _DRIVES[name]
    dur = short_s if short else full_s
    park = min(park_s, dur / 3) if park_s else 0.0
    tk, ik = _drive_profile(seed, dur, one_c_a, park)
    p = _params(pybamm, spec)
    p.update({"Current function [A]": pybamm.Interpolant(tk, ik, pybamm.t, interpolator="linear")})
    sim = pybamm.Simulation(_model(pybamm, spec), parameter_values=p)
    t_out = np.round(np.arange(0.0, tk[-1] + 1e-9, 0.1), 1)
    sol = sim.solve(t_eval=[0.0, float(tk[-1])], t_interp=t_out, initial_soc=soc0)
    if sol.termination != "final time":
        raise RuntimeError(f"{spec.key} {name}: PyBaMM stopped early ({sol.termination})")
    return sol, soc0



def _sensed(sig: dict, spec: CellSpec, one_c_a: float, seed: int) -> dict:
    from socfuse.models.sensors import measure

    s = spec.sensors
    rng = np.random.default_rng(seed)
    return {
        "current_a": measure(sig["current_a"], s.offset_frac_1c * one_c_a, s.gain_error, s.noise_frac_1c * one_c_a,
                             s.current_quant_a, rng),
        "voltage_v": measure(sig["voltage_v"], 0.0, 0.0, s.voltage_noise_v, s.voltage_quant_v, rng),
        "temperature_c": measure(sig["temperature_c"], 0.0, 0.0, s.temperature_noise_c, s.temperature_quant_c, rng),
    }


def _write_csv(path: Path, cols: dict) -> None:
    from socfuse.models.fileio import replacing

    names = ["time_s", "current_a", "voltage_v", "temperature_c", "soc_ref"]
    fmts = ["%.1f", "%.3f", "%.3f", "%.1f", "%.6f"]
    data = np.column_stack([cols[n] for n in names])
    with replacing(path) as tmp:
        np.savetxt(tmp, data, fmt=fmts, delimiter=",", header=",".join(names), comments="")


def _summary(sig: dict, extra: dict | None = None) -> dict:
    t = sig["time_s"]
    d = {"rows": int(t.size), "duration_s": float(t[-1] - t[0]),
         "median_dt_s": float(np.median(np.diff(t))),
         "true_current_range_a": [float(sig["current_a"].min()), float(sig["current_a"].max())],
         "true_voltage_range_v": [float(sig["voltage_v"].min()), float(sig["voltage_v"].max())],
         "soc_ref_range": [float(sig["soc_ref"].min()), float(sig["soc_ref"].max())]}
    d.update(extra or {})
    return d


def _generate_cell(spec: CellSpec, folder: Path, short: bool, log=None) -> dict:
    pybamm = _pybamm()
    pybamm.set_logging_level("ERROR")
    p = _params(pybamm, spec)
    one_c_a = float(p["Nominal cell capacity [A.h]"])
    x100, _ = pybamm.lithium_ion.get_initial_stoichiometries(1.0, p)
    x0, _ = pybamm.lithium_ion.get_initial_stoichiometries(0.0, p)
    files: dict = {}
    say = log or (lambda m: None)

    # --- C/20 test: defines the capacity and the SOC scale
    say(f"{spec.key}: C/20 test")
    sol, cycles = _run_experiment(pybamm, spec, _c20_steps(spec))
    sig = _collect(cycles)
    q = sig["discharged_ah"]
    # "full" = the preconditioned state at the start of the test; the counter then holds the charge
    # between PyBaMM's equilibrium at the upper cut-off and that state
    q_full = float(cycles[0]["Discharge capacity [A.h]"].entries[0])
    # C/20 discharge capacity: charge counted from full to the end of the discharge step
    dis = cycles[1]
    c20_ah = float(dis["Discharge capacity [A.h]"].entries[-1] - q_full)
    sig["soc_ref"] = 1.0 - (q - q_full) / c20_ah
    # equilibrium voltage over SOC from the discharge branch (bulk OCV; a function of charge only)
    dd = _collect([dis])
    soc_d = 1.0 - (dd["discharged_ah"] - q_full) / c20_ah
    grid = np.linspace(0.0, 1.0, 1001)
    order = np.argsort(soc_d)
    eq_v = np.interp(grid, soc_d[order], dd["ocv_v"][order])
    if grid[-1] > soc_d.max():  # the rest before the discharge: the relaxed full cell
        eq_v[grid > soc_d.max()] = float(cycles[0]["Bulk open-circuit voltage [V]"].entries[-1])
    # the stoichiometry window charge (PyBaMM's 0..100 % scale) for drive start states
    qn_ah = float(sol["Negative electrode capacity [A.h]"].entries[0])  # constant
    q_window_ah = float((x100 - x0) * qn_ah)

    def write(name: str, sig: dict, seed: int, extra: dict | None = None):
        meas = _sensed(sig, spec, one_c_a, seed)
        cols = {"time_s": sig["time_s"] - sig["time_s"][0], **meas, "soc_ref": sig["soc_ref"]}
        fname = f"{spec.key}_{name}.csv"
        _write_csv(folder / fname, cols)
        files[name] = {"file": fname, "noise_seed": seed, **_summary(sig, extra)}

    write("c20", sig, seed=1, extra={"protocol": _c20_steps(spec)})

    # --- pulse test
    say(f"{spec.key}: pulse test")
    step_a = c20_ah / 1.0  # 10 % of the C/20 capacity in 0.1 h
    cycles, cv = _simulate_pulse(pybamm, spec, short, step_a)
    sig = _collect(cycles)
    sig["soc_ref"] = 1.0 - (sig["discharged_ah"] - q_full) / c20_ah
    steps, kinds = _pulse_steps(spec, short, step_a, cv)
    n_dis = kinds.count("discharge_pulse")
    n_chg = kinds.count("charge_pulse")
    write("pulse", sig, seed=2, extra={
        "protocol": steps,
        "pulses": {"discharge_pulses": n_dis, "charge_pulses": n_chg, "soc_steps": kinds.count("soc_step"),
                   "current_steps": n_dis + n_chg + kinds.count("soc_step"),
                   "cv_limited_charge_pulses": len(cv),
                   "cv_limited_levels": sorted(int(k) for k in cv)}})

    # --- dynamic recordings
    for k, name in enumerate(("drive_1", "drive_2", "drive_3")):
        say(f"{spec.key}: {name}")
        sol, s0 = _simulate_drive(pybamm, spec, name, short, one_c_a)
        sig = _collect([sol])
        soc_start = 1.0 - ((1.0 - s0) * q_window_ah - q_full) / c20_ah
        sig["soc_ref"] = soc_start - (sig["discharged_ah"] - sig["discharged_ah"][0]) / c20_ah
        write(name, sig, seed=10 + k, extra={"profile_seed": _DRIVES[name][0], "soc_start": soc_start})

    s = spec.sensors
    return {
        "schema": MANIFEST_SCHEMA, "generator_version": GENERATOR_VERSION, "cell": spec.key,
        "title": spec.title, "parameter_set": spec.parameter_set, "reference": spec.reference,
        "model": "SPMe" + ("" if not spec.options else " " + json.dumps(dict(spec.options))),
        "pybamm_version": pybamm.__version__, "short": bool(short),
        "v_min": spec.v_min, "v_max": spec.v_max,
        "nominal_capacity_ah": one_c_a, "c20_capacity_ah": c20_ah, "stoichiometry_window_ah": q_window_ah,
        "full_below_equilibrium_ah": q_full, "precondition": _precondition_steps(spec),
        "coulombic_efficiency": 1.0,
        "sensors": {"offset_a": s.offset_frac_1c * one_c_a, "gain_error": s.gain_error, "current_noise_a": s.noise_frac_1c * one_c_a,
                    "current_quant_a": s.current_quant_a, "voltage_noise_v": s.voltage_noise_v,
                    "voltage_quant_v": s.voltage_quant_v, "temperature_noise_c": s.temperature_noise_c,
                    "temperature_quant_c": s.temperature_quant_c},
        "equilibrium": {"what": "PyBaMM 'Bulk open-circuit voltage [V]' on the C/20 discharge over soc_ref, 25 degC",
                        "soc": [round(float(x), 6) for x in grid], "voltage_v": [round(float(v), 6) for v in eq_v]},
        "files": files,
    }


def _valid(folder: Path) -> dict | None:
    try:
        man = json.loads((folder / "manifest.json").read_text())
    except (OSError, ValueError):
        return None
    if man.get("schema") != MANIFEST_SCHEMA or man.get("generator_version") != GENERATOR_VERSION:
        return None
    if not all((folder / f["file"]).is_file() for f in man.get("files", {}).values()):
        return None
    return man


def load_case(cell: str, short: bool = False, out=None) -> PhysicsCase | None:
    """The cached case, or None when it was not generated (never simulates)."""
    folder = cache_dir(out) / ("short" if short else "full") / cell
    man = _valid(folder)
    return None if man is None else PhysicsCase(folder, man)


def generate(cell: str, short: bool = False, out=None, force: bool = False, log=None) -> PhysicsCase:
    """Generate (or reuse from the cache) the recordings of one cell.

    Parameters
    ----------
    cell : str
        A key of :data:`CELLS` (``chen2020_nmc`` or ``prada2013_lfp``).
    short : bool
        Short mode for tests: 15 min rests between pulse levels, 15-25 min drives (same C/20 test).
    out : path, optional
        Cache root (default :func:`cache_dir`); files go to ``out/<full|short>/<cell>/``.
    force : bool
        Regenerate even when a valid cache exists.
    log : callable, optional
        Called with one progress line per simulation.

    Returns
    -------
    PhysicsCase
        Folder, manifest, true C/20 capacity (Ah) and true equilibrium voltage (V over SOC).

    Raises
    ------
    ImportError
        PyBaMM is not installed (the cache is missing and cannot be made).

    References
    ----------
    .. [1] Sulzer et al., "Python Battery Mathematical Modelling (PyBaMM)", J. Open Res. Softw. 9, 14
       (2021), doi:10.5334/jors.309.
    """
    if cell not in CELLS:
        raise KeyError(f"unknown physics cell {cell!r}; choose from {sorted(CELLS)}")
    folder = cache_dir(out) / ("short" if short else "full") / cell
    if not force:
        man = _valid(folder)
        if man is not None:
            return PhysicsCase(folder, man)
    folder.mkdir(parents=True, exist_ok=True)
    import fcntl

    with open(folder / ".lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)  # another process may be generating the same cell
        try:
            man = None if force else _valid(folder)
            if man is None:
                man = _generate_cell(CELLS[cell], folder, short, log)
                from socfuse.models.fileio import write_text_replacing

                write_text_replacing(folder / "manifest.json", json.dumps(man, indent=1) + "\n")
        finally:
            fcntl.flock(lock, fcntl.LOCK_UN)
    return PhysicsCase(folder, man)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="Generate the PyBaMM physics reference cells (cached).")
    ap.add_argument("--out", type=Path, default=None, help="cache root (default $SOCFUSE_PHYSICS_CACHE or "
                                                           "~/.cache/socfuse/physics)")
    ap.add_argument("--cell", choices=sorted(CELLS), action="append", help="only this cell (repeatable)")
    ap.add_argument("--short", action="store_true", help="the short versions used by the tests")
    ap.add_argument("--force", action="store_true", help="regenerate even if cached")
    args = ap.parse_args(argv)
    for cell in args.cell or sorted(CELLS):
        case = generate(cell, short=args.short, out=args.out, force=args.force,
                        log=lambda m: print(m, file=sys.stderr, flush=True))
        print(f"{cell}: C/20 capacity {case.c20_capacity_ah:.4f} Ah  -> {case.folder}")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))  # a checkout without installing
    raise SystemExit(main())
