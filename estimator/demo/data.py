"""The bundled demo data: which files, how they are written, and :func:`generate_demo_data`.

``python datasets/generate.py`` is a thin wrapper; an installed package can regenerate the data
into a folder of the user's choosing (the demo does so when the bundled copy is missing).
"""
from __future__ import annotations

from dataclasses import asdict, replace
from pathlib import Path

import numpy as np

from socfuse.models.recording import Recording
from socfuse.models.fileio import replacing, write_text_replacing

from socfuse.estimator.demo.truth import C48_TRUTH, TABLE_TEMPERATURES_C, TruthParams
from socfuse.estimator.demo.scenario import (DEMO_SEED, FLEET_SENSORS, LAB_SENSORS, c20_test_profile,
                                             delivery_day_profile, pulse_test_profile, simulate_profile)

__all__ = ["DEMO_FILES", "MANIFEST_SCHEMA", "demo_file_specs", "generate_demo_data", "write_recording_csv"]

# ============================================================================ demo data
def demo_file_specs(seed: int = DEMO_SEED) -> dict:
    """What each bundled file is: ``{file name: (profile builder, sensors, noise seed)}``.

    The builders are called lazily by :func:`generate_demo_data`.  Lab tests use
    :data:`LAB_SENSORS`; the delivery days use the pack BMS (:data:`FLEET_SENSORS`), with the
    shunt offset and the temperature-sensor offset drifting a little on the cold day.

    Parameters
    ----------
    seed : int
        Base seed; each file's noise seed is ``seed + k`` and the delivery-day routes use ``seed``.

    Returns
    -------
    dict
        ``{file name: (callable returning a Profile, SensorErrors, int seed)}``.
    """
    cold_bms = replace(FLEET_SENSORS, offset_a=0.025, temperature_offset_c=1.5)
    return {
        "c48_c20_25degC.csv": (lambda: c20_test_profile(), LAB_SENSORS, seed + 1),
        "c48_pulse_25degC.csv": (lambda: pulse_test_profile(25.0), LAB_SENSORS, seed + 2),
        "c48_pulse_05degC.csv": (lambda: pulse_test_profile(5.0), LAB_SENSORS, seed + 3),
        "c48_day_lunch.csv": (lambda: delivery_day_profile("lunch", seed), FLEET_SENSORS, seed + 4),
        "c48_day_cold.csv": (lambda: delivery_day_profile("cold", seed), cold_bms, seed + 5),
        "c48_day_long.csv": (lambda: delivery_day_profile("long", seed), FLEET_SENSORS, seed + 6),
    }


DEMO_FILES = tuple(demo_file_specs())

#: CSV formats: time to 0.1 s, current to 1 mA, voltage to 0.1 mV, temperature to 0.1 degC.
_CSV_FORMATS = ("%.1f", "%.3f", "%.4f", "%.1f", "%.6f")


def write_recording_csv(rec: Recording, path) -> Path:
    """Write ``rec`` as a canonical CSV (DESIGN.md section 3) with the demo-data number formats.

    Written to a temporary name and renamed, so a partly written file never replaces a good one.
    Time is written with one decimal (whole seconds as ``12.0``).

    Parameters
    ----------
    rec : Recording
        The recording (s, A, V, optional degC and ``soc_ref`` fraction).
    path : str or os.PathLike
        The CSV file.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    path = Path(path)
    cols = [rec.time_s, rec.current_a, rec.voltage_v]
    names = ["time_s", "current_a", "voltage_v"]
    fmts = list(_CSV_FORMATS[:3])
    if rec.temperature_c is not None:
        cols.append(rec.temperature_c)
        names.append("temperature_c")
        fmts.append(_CSV_FORMATS[3])
    if rec.soc_ref is not None:
        cols.append(rec.soc_ref)
        names.append("soc_ref")
        fmts.append(_CSV_FORMATS[4])
    data = np.column_stack(cols)
    with replacing(path) as tmp:
        np.savetxt(tmp, data, fmt=fmts, delimiter=",", header=",".join(names), comments="")
    return path


def _sampling_summary(t: np.ndarray) -> dict:
    dt = np.diff(t)
    return {"min_s": float(dt.min()), "median_s": float(np.median(dt)), "max_s": float(dt.max())}


MANIFEST_SCHEMA = "socfuse.demo-manifest/1"


def _ours(folder: Path) -> bool:
    """True when ``folder/manifest.json`` was written by :func:`generate_demo_data`."""
    import json

    try:
        return json.loads((folder / "manifest.json").read_text()).get("schema") == MANIFEST_SCHEMA
    except (OSError, ValueError, AttributeError):
        return False


def generate_demo_data(out_dir, seed: int = DEMO_SEED, files=None, params: TruthParams = C48_TRUTH,
                       overwrite: bool = False) -> list[Path]:
    """Write the demo recordings and ``manifest.json`` into ``out_dir``; deterministic for a seed.

    Parameters
    ----------
    out_dir : path
        Target folder (created if missing).  Files of the same names are replaced only when the
        folder already holds a demo manifest written by this function, or with ``overwrite``;
        otherwise ``FileExistsError`` (a user's file is never overwritten by surprise).  Each file
        is written to a temporary name first, then renamed.
    seed : int
        Route and noise seed (:data:`DEMO_SEED` for the bundled data).
    files : iterable of str, optional
        A subset of :data:`DEMO_FILES` (default all).
    params : TruthParams
        Truth parameters (default :data:`C48_TRUTH`).
    overwrite : bool
        Replace existing files of the same names even without a demo manifest.

    Returns
    -------
    list of Path
        The CSV files written, then the manifest.
    """
    import json

    out = Path(out_dir)
    specs = demo_file_specs(seed)
    wanted = list(DEMO_FILES) if files is None else list(files)
    unknown = [f for f in wanted if f not in specs]
    if unknown:
        raise ValueError(f"unknown demo file(s) {unknown}; valid names are {', '.join(DEMO_FILES)}")
    clash = [f for f in wanted + ["manifest.json"] if (out / f).exists()]
    if clash and not overwrite and not _ours(out):
        raise FileExistsError(f"{out}: {', '.join(clash)} already exist(s) and the folder holds no demo "
                              "manifest; choose an empty folder or pass overwrite=True")
    out.mkdir(parents=True, exist_ok=True)
    manifest = {
        "schema": MANIFEST_SCHEMA,
        "generator": "socfuse.estimator.demo.data.generate_demo_data",
        "seed": int(seed),
        "note": "demo cell C48 is invented; every truth parameter below is invented, not measured",
        "internal_step_s": 0.1,
        "truth": asdict(params),
        "truth_table_temperatures_c": list(TABLE_TEMPERATURES_C),
        "files": {},
    }
    written = []
    for fname in wanted:
        build, sensors, noise_seed = specs[fname]
        prof = build()
        stem = fname[:-4]
        rec, tr = simulate_profile(prof, sensors, noise_seed, params)
        rec = rec.with_(name=stem)
        written.append(write_recording_csv(rec, out / fname))
        manifest["files"][fname] = {
            "description": prof.description,
            "sensors": asdict(sensors),
            "noise_seed": int(noise_seed),
            "capacity_scale": 1.0,
            "soc0": prof.soc0,
            "h0": prof.h0,
            "rows": int(rec.n),
            "duration_s": float(rec.duration_s),
            "sampling": _sampling_summary(rec.time_s),
            "soc_range": [float(tr.soc.min()), float(tr.soc.max())],
            "true_voltage_range_v": [float(tr.voltage_true.min()), float(tr.voltage_true.max())],
            "true_current_range_a": [float(tr.current_a.min()), float(tr.current_a.max())],
            "true_temperature_range_c": [float(tr.temperature_c.min()), float(tr.temperature_c.max())],
            "profile": prof.info,
        }
    mpath = out / "manifest.json"
    write_text_replacing(mpath, json.dumps(manifest, indent=1) + "\n")
    written.append(mpath)
    return written
