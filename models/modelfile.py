"""Cell-model JSON files (schema ``socfuse.cell-model/1``).

Layout::

    {
      "schema": "socfuse.cell-model/1",
      "name": "...",
      "capacity_ah": 4.8,
      "coulombic_efficiency": 0.998,
      "v_min_v": 2.5, "v_max_v": 4.2,
      "ocv": {"soc": [...], "ocv_v": [...] or [[...], ...], "temperature_c": null or [...],
              "source": "..."},
      "r0_ohm": {"soc": [...], "values": [...] or [[...]], "temperature_c": null or [...]},
      "rc_pairs": [{"r_ohm": {table}, "tau_s": {table}}, ...],
      "hysteresis": null or {"gamma": 50.0, "max_v": 0.01},
      "current_dependence": absent/null or {"form": "butler-volmer-symmetric-excess",
              "temperature_c": [...], "i0_a": [...], "i_ref_a": [...], "source": "..."},
      "provenance": {"ocv": {"file": ..., "test": ..., "residual_v": ...}, ...}
    }

Unknown keys are refused at every level, listing the valid ones, so a typo never silently
drops a parameter.
"""
from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np

from socfuse.models.fileio import JsonFileError, read_json, write_text_replacing
from socfuse.models.ocv import OcvCurve
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CHARGE_TRANSFER_FORM, CellModel, ChargeTransfer, Hysteresis, RcPair

__all__ = ["MODEL_SCHEMA", "ModelFileError", "model_to_dict", "model_from_dict", "save_model", "load_model"]

MODEL_SCHEMA = "socfuse.cell-model/1"


class ModelFileError(ValueError):
    """A cell-model file that cannot be read; the message names the file and the key."""


_TOP = {"schema", "name", "capacity_ah", "coulombic_efficiency", "v_min_v", "v_max_v", "ocv", "r0_ohm",
        "rc_pairs", "hysteresis", "provenance", "current_dependence"}
_REQUIRED = {"schema", "capacity_ah", "ocv", "r0_ohm"}
_OCV = {"soc", "ocv_v", "temperature_c", "source"}
_TABLE = {"soc", "values", "temperature_c"}
_PAIR = {"r_ohm", "tau_s"}
_HYST = {"gamma", "max_v"}
_CT = {"form", "temperature_c", "i0_a", "i_ref_a", "source"}


def _list(a):
    return None if a is None else np.asarray(a).tolist()


def _table(t: ParamTable) -> dict:
    v = t.values[0] if t.values.shape[0] == 1 and t.temperature_c is None else t.values
    return {"soc": _list(t.soc), "values": _list(v), "temperature_c": _list(t.temperature_c)}


def _jsonable(x):
    """Provenance values as plain JSON (numpy scalars/arrays converted, NaN -> null)."""
    if isinstance(x, dict):
        return {str(k): _jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return _jsonable(x.tolist())
    if isinstance(x, (np.floating, float)):
        return None if not math.isfinite(float(x)) else float(x)
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, os.PathLike):
        return os.fspath(x)
    return x


def model_to_dict(model: CellModel) -> dict:
    """The model as a JSON-ready dict.

    Parameters
    ----------
    model : CellModel

    Returns
    -------
    dict
        ``schema``, ``name``, ``capacity_ah`` (Ah), ``coulombic_efficiency``, ``v_min_v`` and ``v_max_v``
        (V), ``ocv`` (SOC fractions, V, degC axis or None), ``r0_ohm`` and the ``rc_pairs`` tables
        (ohm, s), ``hysteresis`` (``gamma``, ``max_v`` in V) or None, and ``provenance``; plus
        ``current_dependence`` (degC, A; :class:`models.thevenin.ChargeTransfer`) only when the
        model has one, so a model without it is written exactly as before.
    """
    ocv = model.ocv
    ocv_v = ocv.ocv_v[0] if ocv.temperature_c is None else ocv.ocv_v
    out = {
        "schema": MODEL_SCHEMA,
        "name": model.name,
        "capacity_ah": float(model.capacity_ah),
        "coulombic_efficiency": float(model.coulombic_efficiency),
        "v_min_v": float(model.v_min_v),
        "v_max_v": float(model.v_max_v),
        "ocv": {"soc": _list(ocv.soc), "ocv_v": _list(ocv_v), "temperature_c": _list(ocv.temperature_c),
                "source": ocv.source},
        "r0_ohm": _table(model.r0_ohm),
        "rc_pairs": [{"r_ohm": _table(p.r_ohm), "tau_s": _table(p.tau_s)} for p in model.rc],
        "hysteresis": None if model.hysteresis is None else
        {"gamma": float(model.hysteresis.gamma), "max_v": float(model.hysteresis.max_v)},
        "provenance": _jsonable(model.provenance),
    }
    if model.charge_transfer is not None:
        out["current_dependence"] = model.charge_transfer.as_dict()
    return out


def _check_keys(d, allowed, where, required=()):
    if not isinstance(d, dict):
        raise ModelFileError(f"{where}: expected an object, got {type(d).__name__}")
    unknown = sorted(set(d) - set(allowed))
    if unknown:
        raise ModelFileError(f"{where}: unknown key(s) {', '.join(map(repr, unknown))}; "
                             f"valid keys are {', '.join(sorted(allowed))}")
    missing = sorted(set(required) - set(d))
    if missing:
        raise ModelFileError(f"{where}: missing key(s) {', '.join(missing)}")


def _read_table(d, where, name) -> ParamTable:
    _check_keys(d, _TABLE, where, required=("soc", "values"))
    try:
        return ParamTable(d["soc"], d["values"], d.get("temperature_c"), name=name)
    except (ValueError, TypeError) as e:
        raise ModelFileError(f"{where}: {e}") from None


def model_from_dict(d: dict, where: str = "cell model") -> CellModel:
    """Build a :class:`CellModel` from a dict read from JSON, validating every key.

    Parameters
    ----------
    d : dict
        The parsed JSON (layout of :func:`model_to_dict`).
    where : str
        Name of the source (a file name) used in error messages.

    Returns
    -------
    CellModel

    Raises
    ------
    ModelFileError
        For a wrong schema, an unknown or missing key, or an invalid value, naming the key.
    """
    _check_keys(d, _TOP, where, required=_REQUIRED)
    if d["schema"] != MODEL_SCHEMA:
        raise ModelFileError(f"{where}: schema is {d['schema']!r}, expected {MODEL_SCHEMA!r}")
    o = d["ocv"]
    _check_keys(o, _OCV, f"{where}: ocv", required=("soc", "ocv_v"))
    try:
        ocv = OcvCurve(o["soc"], o["ocv_v"], o.get("temperature_c"), o.get("source", "") or "")
    except (ValueError, TypeError) as e:
        raise ModelFileError(f"{where}: ocv: {e}") from None
    r0 = _read_table(d["r0_ohm"], f"{where}: r0_ohm", "r0_ohm")
    pairs = []
    for j, p in enumerate(d.get("rc_pairs") or []):
        _check_keys(p, _PAIR, f"{where}: rc_pairs[{j}]", required=_PAIR)
        pairs.append(RcPair(_read_table(p["r_ohm"], f"{where}: rc_pairs[{j}].r_ohm", f"r{j + 1}_ohm"),
                            _read_table(p["tau_s"], f"{where}: rc_pairs[{j}].tau_s", f"tau{j + 1}_s")))
    hy = d.get("hysteresis")
    if hy is not None:
        _check_keys(hy, _HYST, f"{where}: hysteresis", required=_HYST)
    ct = None
    cd = d.get("current_dependence")
    if cd is not None:
        _check_keys(cd, _CT, f"{where}: current_dependence", required=("form", "temperature_c", "i0_a", "i_ref_a"))
        if cd["form"] != CHARGE_TRANSFER_FORM:
            raise ModelFileError(f"{where}: current_dependence.form is {cd['form']!r}, expected "
                                 f"{CHARGE_TRANSFER_FORM!r}")
        try:
            ct = ChargeTransfer(cd["temperature_c"], cd["i0_a"], cd["i_ref_a"], str(cd.get("source", "") or ""))
        except (ValueError, TypeError) as e:
            raise ModelFileError(f"{where}: current_dependence: {e}") from None
    try:
        return CellModel(
            capacity_ah=float(d["capacity_ah"]), ocv=ocv, r0_ohm=r0, rc=tuple(pairs),
            coulombic_efficiency=float(d.get("coulombic_efficiency", 1.0)),
            hysteresis=None if hy is None else Hysteresis(float(hy["gamma"]), float(hy["max_v"])),
            v_min_v=float(d.get("v_min_v", 2.5)), v_max_v=float(d.get("v_max_v", 4.2)),
            name=str(d.get("name", "") or ""), provenance=d.get("provenance") or {}, charge_transfer=ct)
    except (ValueError, TypeError) as e:
        raise ModelFileError(f"{where}: {e}") from None


def save_model(model: CellModel, path) -> Path:
    """Write the model as a ``socfuse.cell-model/1`` JSON file.

    Parameters
    ----------
    model : CellModel
        The cell model (capacity in Ah, OCV table in V, RC tables in ohm and s).
    path : str or pathlib.Path
        Target file; written to a temporary name, then renamed (a partly written file never
        replaces a good one).

    Returns
    -------
    pathlib.Path
        The path written.
    """
    return write_text_replacing(path, json.dumps(model_to_dict(model), indent=1) + "\n")


def load_model(path) -> CellModel:
    """Read and validate a ``socfuse.cell-model/1`` JSON file.

    Parameters
    ----------
    path : str or pathlib.Path
        The model file (as written by ``socfuse identify`` or :func:`save_model`).

    Returns
    -------
    CellModel
        The model; unknown keys, a wrong schema or non-physical values are refused.

    Raises
    ------
    ModelFileError
        One line naming the file and the key (also for bad UTF-8, deep nesting, absurd numbers).
    """
    path = Path(path)
    try:
        d = read_json(path, "cell-model")  # names the file on bad UTF-8, deep nesting, absurd numbers
    except FileNotFoundError:
        raise ModelFileError(f"{path}: no such file") from None
    except JsonFileError as e:
        raise ModelFileError(str(e)) from None
    return model_from_dict(d, where=str(path))
