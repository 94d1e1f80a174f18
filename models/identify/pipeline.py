"""Identification end to end: low-rate test + pulse test(s) [+ refinement, validation] -> CellModel.

Python entry point used by the ``identify`` and ``demo`` commands::

    from socfuse.models.identify.pipeline import identify
    result = identify(ocv_test, [pulse_25c, pulse_05c], ocv_source="auto", validate=[drive])
    save_model(result.model, "model.json")
    print(result.summary())
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from socfuse.models.recording import Recording
from socfuse.models.thevenin import CellModel
from socfuse.models.identify.ocvsource import OCV_SOURCES, ocv_candidates
from socfuse.models.identify.ocvtest import OcvTestResult, identify_ocv_test
from socfuse.models.identify.pulse import choose_rc_pairs, identify_pulse_test, pulse_power_table, pulse_tables
from socfuse.models.identify.refine import RefineResult, refine_model
from socfuse.models.identify.validate import validate

__all__ = ["IdentifyResult", "identify", "IdentifyError"]


class IdentifyError(ValueError):
    """Identification cannot proceed with the given inputs."""


def _file(rec: Recording) -> str:
    meta = rec.metadata or {}
    return str(meta.get("source") or rec.name or "recording")


@dataclass(frozen=True, eq=False)
class IdentifyResult:
    """Everything identification produced.

    Attributes
    ----------
    model : CellModel
        The identified (and, when asked, refined) model, with provenance.
    ocv_test : OcvTestResult
    pulse_tests : tuple of PulseTestResult
    n_rc : int
    n_rc_reason : str
    ocv_source : str
        Name of the OCV source used (one of :data:`OCV_SOURCES`).
    ocv_source_reason : str
    ocv_candidates : dict name -> OcvCurve
    ocv_scores : dict name -> open-loop RMS (V) on the choosing recording (empty without one)
    power_table : tuple of PowerRow
    refinement : RefineResult or None
    validation : tuple of ValidationResult
    notes : tuple of str
    """

    model: CellModel
    ocv_test: OcvTestResult
    pulse_tests: tuple
    n_rc: int
    n_rc_reason: str
    ocv_source: str
    ocv_source_reason: str
    ocv_candidates: dict
    ocv_scores: dict
    power_table: tuple
    refinement: RefineResult | None
    validation: tuple
    notes: tuple = ()
    ocv_info: dict = field(default_factory=dict)

    def summary(self) -> str:
        """A short plain-text summary (SI units; SOC in percent)."""
        m = self.model
        lines = [f"capacity {m.capacity_ah:.4f} Ah, coulombic efficiency "
                 f"{'not estimated (1 used)' if self.ocv_test.coulombic_efficiency is None else f'{m.coulombic_efficiency:.4f}'}",
                 f"OCV source: {self.ocv_source} ({self.ocv_source_reason}); {m.ocv.soc.size} breakpoints"]
        if self.ocv_scores:
            lines.append("open-loop voltage RMS per OCV source: " + ", ".join(
                f"{k} {v * 1000:.1f} mV" for k, v in self.ocv_scores.items()))
        if self.ocv_test.hysteresis_v is not None:
            lines.append(f"low-rate half-gap (hysteresis + resistive drop at the test current): "
                         f"{self.ocv_test.hysteresis_v * 1000:.1f} mV")
        temps = [p.temperature_c for p in self.pulse_tests]
        lines.append(f"pulse tests: {len(self.pulse_tests)} at {', '.join(f'{t:.1f}' for t in temps)} degC, "
                     f"{sum(sum(q.pulse.kind == 'pulse' for q in p.pulses) for p in self.pulse_tests)} pulses; "
                     f"{self.n_rc_reason}")
        t_ref = temps[int(np.argmin(np.abs(np.array(temps) - 25.0)))]
        r0 = m.r0_ohm.at(0.5, t_ref)
        txt = f"at 50 % SOC, {t_ref:.1f} degC: R0 {r0 * 1000:.2f} mOhm"
        for j, p in enumerate(m.rc):
            txt += f", R{j + 1} {p.r_ohm.at(0.5, t_ref) * 1000:.2f} mOhm, tau{j + 1} {p.tau_s.at(0.5, t_ref):.1f} s"
        lines.append(txt)
        if self.refinement is not None:
            r = self.refinement
            lines.append(f"refinement on {r.source}: voltage RMS {r.rms_before_v * 1000:.2f} -> "
                         f"{r.rms_after_v * 1000:.2f} mV")
        for v in self.validation:
            lines.append(f"validation on {v.name}: open-loop voltage RMS {v.rms_v * 1000:.2f} mV, "
                         f"max {v.max_abs_v * 1000:.1f} mV")
        for n in self.notes:
            lines.append(f"note: {n}")
        return "\n".join(lines)

    def power_frame(self):
        """The DOE/INL pulse-resistance and power table as a pandas DataFrame (SOC in percent)."""
        import pandas as pd

        return pd.DataFrame([{"soc_pct": 100 * r.soc, "temperature_c": r.temperature_c, "direction": r.direction,
                              "current_a": r.current_a, "duration_s": r.duration_s, "ocv_v": r.ocv_v,
                              "pulse_resistance_ohm": r.pulse_resistance_ohm, "power_w": r.power_w}
                             for r in self.power_table])


def _build(capacity, eta, ocv, r0, rc, v_min, v_max, name, provenance) -> CellModel:
    return CellModel(capacity_ah=capacity, ocv=ocv, r0_ohm=r0, rc=rc, coulombic_efficiency=eta,
                     v_min_v=v_min, v_max_v=v_max, name=name, provenance=provenance)


def identify(ocv_test: Recording, pulse_tests, rc_pairs: int | None = None, ocv_source: str = "auto",
             refine: Recording | None = None, validate=None, n_ocv_breakpoints: int = 21,
             pulse_temperatures_c=None, soc_mode: str = "auto", pulse_soc0: float = 1.0,
             v_min_v: float | None = None, v_max_v: float | None = None, name: str = "",
             refine_soc0: float | None = None, validate_soc0: float | None = None,
             refine_options: dict | None = None, pulse_options: dict | None = None) -> IdentifyResult:
    """Identify a Thevenin cell model from lab tests.

    Parameters
    ----------
    ocv_test : Recording
        Low-rate (about C/20) discharge and/or charge.
    pulse_tests : list of Recording
        Pulse (HPPC-style) tests; several temperatures give tables over temperature.
    rc_pairs : int, optional
        Number of RC pairs (1..3); default chosen by BIC (1 or 2).
    ocv_source : {"auto", "average", "discharge", "rest", "anchored"}
        See :mod:`models.identify.ocvsource`.
    refine : Recording, optional
        Dynamic recording on which the R0/RC tables are refined (after the OCV choice).
    validate : Recording or list of Recording, optional
        Recordings for open-loop validation (and for the ``auto`` OCV choice when no ``refine``
        recording is given: then choice and validation use the same data, which flatters it).
    n_ocv_breakpoints : int
    pulse_temperatures_c : list of float, optional
        Temperature of each pulse test (default: median ``temperature_c`` column, else 25 degC).
    soc_mode, pulse_soc0 : how pulses are placed on the SOC axis (see :func:`pulse.pulse_soc`).
    v_min_v, v_max_v : float, optional
        Voltage limits (default from the low-rate test).
    name : str
    refine_soc0, validate_soc0 : float, optional
        Initial SOC of the dynamic recordings (default their soc_ref, else the OCV of a rested
        first sample).
    refine_options, pulse_options : dict, optional
        Extra keyword arguments for :func:`refine.refine_model` and
        :func:`pulse.identify_pulse_test`.

    Returns
    -------
    IdentifyResult
    """
    if ocv_source not in ("auto",) + OCV_SOURCES:
        raise IdentifyError(f"unknown OCV source {ocv_source!r}; choose from auto, {', '.join(OCV_SOURCES)}")
    pulse_tests = list(pulse_tests) if not isinstance(pulse_tests, Recording) else [pulse_tests]
    if not pulse_tests:
        raise IdentifyError("at least one pulse test is needed")
    if validate is None:
        validate = []
    elif isinstance(validate, Recording):
        validate = [validate]
    notes = []
    o = identify_ocv_test(ocv_test, n_breakpoints=n_ocv_breakpoints, v_min_v=v_min_v, v_max_v=v_max_v)
    notes.extend(f"low-rate test: {n}" for n in o.notes)
    temps = list(pulse_temperatures_c) if pulse_temperatures_c is not None else [None] * len(pulse_tests)
    if len(temps) != len(pulse_tests):
        raise IdentifyError(f"{len(temps)} pulse temperatures given for {len(pulse_tests)} pulse tests")
    results = []
    for rec, tc in zip(pulse_tests, temps):
        res = identify_pulse_test(rec, o.capacity_ah, ocv=o.ocv, rc_pairs=rc_pairs, temperature_c=tc,
                                  soc_mode=soc_mode, soc0=pulse_soc0, **(pulse_options or {}))
        results.append(res)
        notes.extend(f"pulse test {res.source}: {n}" for n in res.notes)
    n_rc, n_rc_reason = choose_rc_pairs(results, rc_pairs)
    r0, rc, per = pulse_tables(results, n_rc)
    ref = int(np.argmin(np.abs(np.array([r.temperature_c for r in results]) - 25.0)))
    ref_res = results[ref]
    if len({round(r.temperature_c) for r in results}) > 1:
        notes.append("the OCV curve is from one temperature (the low-rate test); R0/RC tables are over "
                     "temperature")
    cands_full = ocv_candidates(o, ref_res.rest_soc, ref_res.rest_v, n_ocv_breakpoints,
                                rest_label=f"pulse test {ref_res.source}")
    cands = {k: c for k, (c, _) in cands_full.items()}
    info = {k: i for k, (_, i) in cands_full.items()}
    eta = 1.0 if o.coulombic_efficiency is None else float(o.coulombic_efficiency)
    v_min = o.v_min_v
    v_max = o.v_max_v

    def model_with(ocv_curve, r0_, rc_, prov):
        return _build(o.capacity_ah, eta, ocv_curve, r0_, rc_, v_min, v_max, name, prov)

    # ---- choose the OCV source
    scores = {}
    chooser = refine if refine is not None else (validate[0] if validate else None)
    chooser_soc0 = refine_soc0 if refine is not None else validate_soc0
    if ocv_source == "auto":
        if chooser is not None:
            for k, c in cands.items():
                scores[k] = validate_fn(model_with(c, r0, rc, {}), chooser, chooser_soc0).rms_v
            chosen = min(scores, key=scores.get)
            reason = f"lowest open-loop voltage RMS on {_file(chooser)}"
            if refine is None:
                notes.append("the OCV source was chosen on the validation recording itself; give --refine with a "
                             "different recording for an independent choice")
        elif "anchored" in cands and "average" in cands and o.hysteresis_v is not None:
            # no dynamic recording: keep the low-rate average while the rested voltages lie inside
            # its hysteresis band (the half-gap); a larger distance means the low-rate test does
            # not describe the cell of the pulse test (aged, or run weeks apart): anchor it
            dist = info["average"].get("rest_point_rms_v")
            if dist is not None and dist > o.hysteresis_v:
                chosen = "anchored"
                reason = (f"rest points {dist * 1000:.1f} mV RMS from the low-rate average, more than its "
                          f"half-gap {o.hysteresis_v * 1000:.1f} mV (no dynamic recording given)")
            else:
                chosen = "average"
                reason = (f"rest points {dist * 1000:.1f} mV RMS from the low-rate average, within its "
                          f"half-gap {o.hysteresis_v * 1000:.1f} mV (no dynamic recording given)")
        elif "anchored" in cands:
            chosen, reason = "anchored", "default when pulse-test rest points exist (no dynamic recording given)"
        else:
            chosen = "average" if "average" in cands else "discharge"
            reason = "default (no rest points, no dynamic recording)"
    else:
        if ocv_source not in cands:
            raise IdentifyError(f"OCV source {ocv_source!r} is not available from these tests "
                                f"(available: {', '.join(cands)})")
        chosen, reason = ocv_source, "requested"
        if chooser is not None:
            for k, c in cands.items():
                scores[k] = validate_fn(model_with(c, r0, rc, {}), chooser, chooser_soc0).rms_v
    ocv_curve = cands[chosen]
    ocv_curve = type(ocv_curve)(ocv_curve.soc, ocv_curve.ocv_v, ocv_curve.temperature_c,
                                f"{chosen}: {ocv_curve.source}")

    # ---- provenance
    pulse_files = [r.source if not (pulse_tests[k].metadata or {}).get("source") else _file(pulse_tests[k])
                   for k, r in enumerate(results)]
    relax_rms = [pf.fits[n_rc].rms_v for r in results for pf in r.pulses if pf.rc(n_rc) is not None]
    r0_dev = [pf.r0_ohm[n_rc] - float(r0.at(pf.soc, r.temperature_c)) for r in results for pf in r.pulses
              if pf.pulse.kind == "pulse" and n_rc in pf.r0_ohm]
    prov = {
        "tool": "socfuse identify (models.identify.pipeline)",
        "capacity": {"file": _file(ocv_test), "test": "low-rate discharge (charge delivered between the limits)",
                     "value_ah": o.capacity_ah, "test_current_a": o.test_current_a},
        "coulombic_efficiency": {"file": _file(ocv_test), "test": "low-rate discharge / charge",
                                 "value": o.coulombic_efficiency,
                                 "estimated": o.coulombic_efficiency is not None},
        "ocv": {"file": _file(ocv_test) if chosen in ("average", "discharge") else
                [_file(ocv_test), pulse_files[ref]],
                "test": chosen, "what": info[chosen].get("what"), "residual_v": info[chosen].get("residual_v"),
                "rest_point_rms_v": info[chosen].get("rest_point_rms_v"), "choice": reason,
                "candidates": {k: {"rest_point_rms_v": info[k].get("rest_point_rms_v"),
                                   "open_loop_rms_v": scores.get(k)} for k in cands}},
        "hysteresis_estimate": {"file": _file(ocv_test), "half_gap_v": o.hysteresis_v,
                                "note": "median half-gap of the low-rate branches (includes the resistive drop); "
                                        "not put in the model"},
        "r0_ohm": {"file": pulse_files, "test": "pulse test, edge step (last sample before / first after each "
                                                "edge), corrected for the RC charge in that interval",
                   "temperatures_c": [r.temperature_c for r in results],
                   "pulses": int(sum(sum(p.pulse.kind == "pulse" for p in r.pulses) for r in results)),
                   "residual_ohm": float(np.sqrt(np.mean(np.square(r0_dev)))) if r0_dev else None,
                   "residual_note": "RMS of the single pulses' R0 about the table (current dependence "
                                    "and scatter)",
                   "soc_placement": [r.soc_source for r in results]},
        "rc_pairs": {"file": pulse_files, "test": "pulse test relaxation fits (scipy.optimize.least_squares)",
                     "n_rc": n_rc, "choice": n_rc_reason,
                     "residual_v": float(np.median(relax_rms)) if relax_rms else None,
                     "pulses_fitted": len(relax_rms)},
        "notes": list(notes),
    }
    model = model_with(ocv_curve, r0, rc, prov)

    # ---- refinement
    ref_result = None
    if refine is not None:
        ref_result = refine_model(model, refine, soc0=refine_soc0, **(refine_options or {}))
        prov = dict(prov)
        prov["refinement"] = ref_result.as_dict()
        prov["r0_ohm"] = dict(prov["r0_ohm"], refined_on=_file(refine))
        prov["rc_pairs"] = dict(prov["rc_pairs"], refined_on=_file(refine))
        model = ref_result.model.with_(provenance=prov)

    # ---- validation
    vals = tuple(validate_fn(model, rec, validate_soc0) for rec in validate)
    if vals:
        prov = dict(prov)
        prov["validation"] = [v.as_dict() for v in vals]
        model = model.with_(provenance=prov)
    return IdentifyResult(model, o, tuple(results), n_rc, n_rc_reason, chosen, reason, cands, scores,
                          tuple(pulse_power_table(results, v_min, v_max)), ref_result, vals, tuple(notes), info)


validate_fn = validate  # the parameter name ``validate`` shadows the function inside identify()
