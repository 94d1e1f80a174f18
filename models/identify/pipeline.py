"""Identification end to end: low-rate test + pulse test(s) [+ refinement, validation] -> CellModel.

Python entry point used by the ``identify`` and ``demo`` commands::

    from socfuse.models.identify.pipeline import identify
    result = identify(ocv_test, [pulse_25c, pulse_05c], ocv_source="auto", validate=[drive])
    save_model(result.model, "model.json")
    print(result.summary())
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from socfuse.models.recording import Recording
from socfuse.models.thevenin import CellModel
from socfuse.models.ocv import OcvCurve
from socfuse.models.identify.currentdep import charge_transfer_from_fits, current_dependence
from socfuse.models.identify.usable import measured_usable, usable_capacity_table
from socfuse.models.identify.curves import MIN_STEP_V, isotonic_increasing
from socfuse.models.identify.hysteresis import fit_low_rate_hysteresis, judge_hysteresis
from socfuse.models.identify.ocvsource import OCV_SOURCES, ocv_candidates
from socfuse.models.identify.plausible import check_model
from socfuse.models.identify.ocvtest import OcvTestResult, identify_ocv_test
from socfuse.models.identify.pulse import choose_rc_pairs, identify_pulse_test, pulse_power_table, pulse_tables
from socfuse.models.identify.refine import RefineResult, refine_model
from socfuse.models.identify.validate import validate

__all__ = ["IdentifyResult", "identify", "IdentifyError", "sensor_offsets", "ocv_temperature_rows"]


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

    def to_frame(self):
        """The identified parameter tables as one DataFrame.

        Returns
        -------
        pandas.DataFrame
            One row per (temperature, SOC) breakpoint of the R0 table: ``temperature_c`` (degC),
            ``soc`` (fraction), ``ocv_v`` (V), ``r0_ohm`` and, per RC pair ``j``, ``r{j}_ohm``
            (ohm) and ``tau{j}_s`` (s), all evaluated from the model's tables at that point.
        """
        import pandas as pd

        m = self.model
        temps = m.r0_ohm.temperature_c if m.r0_ohm.temperature_c is not None else np.array([25.0])
        rows = []
        for t_c in np.atleast_1d(temps):
            for z in m.r0_ohm.soc:
                row = {"temperature_c": float(t_c), "soc": float(z),
                       "ocv_v": float(m.ocv.voltage(float(z), float(t_c))),
                       "r0_ohm": float(m.r0_ohm.at(float(z), float(t_c)))}
                for j, pair in enumerate(m.rc, start=1):
                    row[f"r{j}_ohm"] = float(pair.r_ohm.at(float(z), float(t_c)))
                    row[f"tau{j}_s"] = float(pair.tau_s.at(float(z), float(t_c)))
                rows.append(row)
        return pd.DataFrame(rows)

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
        prov = m.provenance or {}
        lines.append("tables (inputs and fit residual):")
        r0p = prov.get("r0_ohm") or {}
        if r0p:
            res_txt = "n/a" if r0p.get("residual_ohm") is None else f"{r0p['residual_ohm'] * 1000:.2f} mOhm RMS"
            lines.append(f"  r0_ohm: {r0p.get('pulses', 0)} pulses; single pulses about the table {res_txt}")
        rcp = prov.get("rc_pairs") or {}
        if rcp:
            res_txt = "n/a" if rcp.get("residual_v") is None else f"{rcp['residual_v'] * 1000:.2f} mV"
            names = ", ".join(f"r{j + 1}_ohm, tau{j + 1}_s" for j in range(m.n_rc))
            lines.append(f"  {names}: {rcp.get('pulses_fitted', 0)} relaxation fits; median fit RMS {res_txt}")
        ocvp = prov.get("ocv") or {}
        if ocvp:
            rr = ocvp.get("residual_v")
            rp = ocvp.get("rest_point_rms_v")
            lines.append(f"  ocv ({ocvp.get('test')}): breakpoint fit {'n/a' if rr is None else f'{rr * 1000:.2f} mV'}"
                         f", rest points {'n/a' if rp is None else f'{rp * 1000:.1f} mV RMS'}")
        off = prov.get("current_offset") or {}
        if off:
            used = off.get("used_a") or []
            if off.get("given"):
                lines.append(f"current-sensor offset {used[0] * 1000:.2f} mA (given), subtracted")
            elif off.get("pooled_a") is not None:
                lines.append(f"current-sensor offset {off['pooled_a'] * 1000:.2f} mA +- "
                             f"{(off.get('pooled_sigma_a') or 0.0) * 1000:.2f} mA from the rests of "
                             f"{len(off.get('pooled_files') or [])} test(s), subtracted before counting charge")
        for f in (prov.get("current_dependence") or {}).get("fits", []):
            lines.append(f"current dependence at {f['temperature_c']:.1f} degC: 10 s pulse resistance "
                         f"{f['pulse_resistance_low_ohm'] * 1000:.1f} mOhm at {f['current_low_a']:.2f} A, "
                         f"{f['pulse_resistance_high_ohm'] * 1000:.1f} mOhm at {f['current_high_a']:.2f} A; "
                         f"Butler-Volmer fit R_s {f['r_s_ohm'] * 1000:.1f} mOhm, I0 {f['i0_a']:.3g} A "
                         f"(RMS {f['rms_v'] * 1000:.1f} mV; "
                         f"{'in the model' if m.charge_transfer is not None else 'not used'})")
        rows = (prov.get("usable_capacity") or {}).get("rows", [])
        for tc in sorted({r["temperature_c"] for r in rows}):
            parts = [f"{r['c_rate']:g}C {r['usable_ah']:.3f} Ah" for r in rows if r["temperature_c"] == tc]
            lines.append(f"usable capacity from full at {tc:.1f} degC (to {m.v_min_v:.2f} V, steady load): "
                         + ", ".join(parts))
        for r in (prov.get("usable_capacity") or {}).get("measured", []):
            lines.append(f"usable capacity measured at {r['temperature_c']:.1f} degC: {r['usable_ah']:.3f} Ah from "
                         f"full to {m.v_min_v:.2f} V ({100 * r['usable_fraction']:.1f} %; mean "
                         f"{r['mean_current_a']:.2f} A over the last minute; pulse test {r['file']})")
        hp = prov.get("hysteresis") or {}
        if hp:
            lines.append(f"hysteresis: {hp.get('reason', '')}")
        if self.refinement is not None:
            r = self.refinement
            if not r.refined:
                lines.append(f"refinement on {r.source}: {r.message} (the pulse-test tables kept)")
            else:
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


def sensor_offsets(recordings, offset_a: float | None = None) -> dict:
    """Current-sensor zero offset of each lab test, pooled over the tests that agree.

    Each recording's offset is estimated from its rests (:func:`models.segment.segment_recording`).
    Tests whose estimates agree with the first (the low-rate test) within three combined standard
    errors are taken to share one sensor channel and get the inverse-variance weighted mean (a
    C/20 test has few rest samples; a pulse test many), the others keep their own.

    Parameters
    ----------
    recordings : list of Recording
        The low-rate test first, then the pulse tests.
    offset_a : float, optional
        A known offset (A) used for every test instead.

    Returns
    -------
    dict
        ``estimates_a``, ``sigmas_a`` (per test, None without rests), ``used_a`` (per test),
        ``pooled_a``, ``pooled_sigma_a``, ``pooled_files``, ``notes``.
    """
    from socfuse.models.segment import segment_recording

    n = len(recordings)
    if offset_a is not None:
        return {"estimates_a": [None] * n, "sigmas_a": [None] * n, "used_a": [float(offset_a)] * n,
                "pooled_a": float(offset_a), "pooled_sigma_a": 0.0, "pooled_files": [], "given": True,
                "notes": [f"current-sensor offset {offset_a * 1000:.2f} mA given"]}
    est, sig = [], []
    for rec in recordings:
        sg = segment_recording(rec.time_s, rec.current_a, rec.voltage_v)
        est.append(sg.offset_a if sg.offset_sigma_a is not None else None)
        sig.append(sg.offset_sigma_a)
    used = [e if e is not None else 0.0 for e in est]
    notes = []
    members = [k for k in range(n) if est[k] is not None]
    pooled = pooled_sigma = None
    if members:
        ref = members[0]
        group = [k for k in members if abs(est[k] - est[ref]) <= 3.0 * np.hypot(max(sig[k], 1e-12),
                                                                                  max(sig[ref], 1e-12))]
        w = np.array([1.0 / max(sig[k], 1e-12) ** 2 for k in group])
        pooled = float(np.sum(w * np.array([est[k] for k in group])) / np.sum(w))
        pooled_sigma = float(1.0 / np.sqrt(np.sum(w)))
        for k in group:
            used[k] = pooled
        apart = [k for k in members if k not in group]
        if apart:
            notes.append("current-sensor offsets differ between tests (" + ", ".join(
                f"{_file(recordings[k])}: {est[k] * 1000:.2f} mA" for k in members) + "): each test keeps its own")
        members = group
    for k in range(n):
        if est[k] is None:
            notes.append(f"{_file(recordings[k])}: no rest to estimate the current-sensor offset; 0 assumed")
    return {"estimates_a": est, "sigmas_a": sig, "used_a": used, "pooled_a": pooled, "pooled_sigma_a": pooled_sigma,
            "pooled_files": [_file(recordings[k]) for k in members], "given": False, "notes": notes}


def ocv_temperature_rows(curve, results, ref: int, min_points: int = 3):
    """OCV over SOC x temperature: the low-rate shape plus each temperature's rest-point offset.

    The low-rate test sets the shape (at its own temperature).  At every pulse-test temperature the
    rest-end voltages, less the curve, are grouped into SOC clusters (median offset per cluster,
    linear in SOC between clusters, constant beyond the ends; :func:`ocvsource.rest_clusters`).
    Row ``T`` is the curve plus ``corr_T - corr_ref``, the difference to the same kind of rests at
    the reference temperature (the test nearest 25 degC), so what the rests share (incomplete
    relaxation, the hysteresis branch they sit on) cancels and the entropic offset remains.  Rows
    are made increasing over SOC.

    Parameters
    ----------
    curve : OcvCurve
        The chosen OCV (one temperature).
    results : list of PulseTestResult
    ref : int
        Index of the reference pulse test.
    min_points : int
        Rest points needed at a temperature.

    Returns
    -------
    (OcvCurve, dict or None)
        The curve with temperature rows and a provenance dict, or the input and None when fewer
        than two temperatures have rest points.
    """
    from socfuse.models.identify.ocvsource import rest_clusters

    groups: dict = {}
    for k, r in enumerate(results):
        if np.asarray(r.rest_soc).size:
            groups.setdefault(round(r.temperature_c), []).append(k)
    ref_key = round(results[ref].temperature_c)
    if ref_key not in groups or len(groups) < 2 or curve.temperature_c is not None:
        return curve, None
    soc = np.asarray(curve.soc, dtype=float)

    def clusters(members):
        rs = np.concatenate([np.asarray(results[k].rest_soc, dtype=float) for k in members])
        rv = np.concatenate([np.asarray(results[k].rest_v, dtype=float) for k in members])
        if rs.size < min_points:
            return None
        return rest_clusters(rs, rv - curve.voltage(rs))

    base = clusters(groups[ref_key])
    if base is None:
        return curve, None
    temps, rows, files, offs = [], [], [], []
    for key in sorted(groups):
        if key == ref_key:
            delta = np.zeros(soc.size)
        else:
            cl = clusters(groups[key])
            if cl is None:
                continue
            cs, co = cl
            # the difference where this temperature has rests (reference correction interpolated
            # there), held constant beyond its first and last cluster
            delta = np.interp(soc, cs, co - np.interp(cs, base[0], base[1]))
        row = isotonic_increasing(np.asarray(curve.ocv_v, dtype=float) + delta, min_step=MIN_STEP_V)
        temps.append(float(np.mean([results[k].temperature_c for k in groups[key]])))
        rows.append(row)
        files.append([results[k].source for k in groups[key]])
        offs.append([float(np.min(delta)), float(np.max(delta))])
    if len(rows) < 2:
        return curve, None
    out = OcvCurve(soc, np.array(rows), np.array(temps),
                   f"{curve.source}; rows over temperature from the pulse-test rests")
    summary = ", ".join(f"{t:.1f} degC {o[0] * 1000:+.1f}..{o[1] * 1000:+.1f} mV" for t, o in zip(temps, offs))
    return out, {"rows": len(rows), "temperatures_c": temps, "files": files, "offset_range_v": offs,
                 "reference_c": float(results[ref].temperature_c),
                 "test": "low-rate shape + (rest-point offset at T - rest-point offset at the reference)",
                 "summary": summary}


def _pulse_socs(res) -> tuple:
    """(lowest, highest) SOC of the pulses of one pulse test (None, None without pulses)."""
    z = [float(pf.soc) for pf in res.pulses if pf.pulse.kind == "pulse" and np.isfinite(pf.soc)]
    return (min(z), max(z)) if z else (None, None)


def _build(capacity, eta, ocv, r0, rc, v_min, v_max, name, provenance, hysteresis=None) -> CellModel:
    return CellModel(capacity_ah=capacity, ocv=ocv, r0_ohm=r0, rc=rc, coulombic_efficiency=eta,
                     v_min_v=v_min, v_max_v=v_max, name=name, provenance=provenance, hysteresis=hysteresis)


def identify(ocv_test: Recording, pulse_tests, rc_pairs: int | None = None, ocv_source: str = "auto",
             refine: Recording | None = None, validate=None, n_ocv_breakpoints: int = 41,
             pulse_temperatures_c=None, soc_mode: str = "auto", pulse_soc0: float = 1.0,
             v_min_v: float | None = None, v_max_v: float | None = None, name: str = "",
             refine_soc0: float | None = None, validate_soc0: float | None = None,
             refine_options: dict | None = None, pulse_options: dict | None = None,
             allow_implausible: bool = False, ocv_over_temperature: bool = True,
             current_dependence_in_model: bool = False) -> IdentifyResult:
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
        :func:`pulse.identify_pulse_test` (``pulse_options["offset_a"]``: a known current-sensor
        zero offset, A, used for every test).
    ocv_over_temperature : bool
        With pulse tests at two or more temperatures, give the OCV a temperature axis from their
        rest points (:func:`ocv_temperature_rows`).
    allow_implausible : bool
        Return a model that fails the plausibility checks of :mod:`models.identify.plausible`
        (the problems go into the notes and the provenance) instead of raising.
    current_dependence_in_model : bool
        Put the fitted Butler-Volmer charge-transfer term (:func:`currentdep.charge_transfer_from_fits`)
        into the model, where the pulse tests show one.  Off by default: on the Panasonic 18650PF
        (benchmarks/generalisation.py, Dec 2026) the EKF SOC RMSE at 0 degC went 5.87 -> 6.18 %
        (Cycle_2), 4.53 -> 4.97 % (US06), 1.81 -> 2.11 % (HWFET), at 10 degC slightly worse, at 25 degC
        0.02-0.03 points better: the symmetric form with ``b = 2RT/F`` over-states the resistance at the
        smallest pulses at 0 degC (about 101 against 92 mOhm at 1.45 A).  The fits and the candidate
        term are always in the provenance.

    Raises
    ------
    IdentifyError
        Bad arguments, or the model fails the plausibility checks (the message names the table,
        SOC and value) and ``allow_implausible`` is false.

    Returns
    -------
    IdentifyResult
        The model and the identification report (``summary()``).

    References
    ----------
    .. [1] U.S. DOE / INL, Battery Test Manual for Electric Vehicles (HPPC test: pulse resistance
       from the voltage step of a current pulse); edition and report number not checked here.
    .. [2] G. L. Plett, J. Power Sources 134 (2004) 262-276 (part 2: one-state hysteresis model).
    .. [3] X. Hu, S. Li, H. Peng, "A comparative study of equivalent circuit models for Li-ion
       batteries", J. Power Sources 198 (2012) 359-367.
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
    # ---- current-sensor zero offset: from each lab test's rests, pooled when they agree
    offsets = sensor_offsets([ocv_test] + pulse_tests, (pulse_options or {}).get("offset_a"))
    notes.extend(offsets["notes"])
    o = identify_ocv_test(ocv_test, n_breakpoints=n_ocv_breakpoints, v_min_v=v_min_v, v_max_v=v_max_v,
                          offset_a=offsets["used_a"][0])
    notes.extend(f"low-rate test: {n}" for n in o.notes)
    temps = list(pulse_temperatures_c) if pulse_temperatures_c is not None else [None] * len(pulse_tests)
    if len(temps) != len(pulse_tests):
        raise IdentifyError(f"{len(temps)} pulse temperatures given for {len(pulse_tests)} pulse tests")
    results = []
    popts = {k: v for k, v in (pulse_options or {}).items() if k != "offset_a"}
    for k, (rec, tc) in enumerate(zip(pulse_tests, temps)):
        res = identify_pulse_test(rec, o.capacity_ah, ocv=o.ocv, rc_pairs=rc_pairs, temperature_c=tc,
                                  soc_mode=soc_mode, soc0=pulse_soc0, offset_a=offsets["used_a"][k + 1], **popts)
        results.append(res)
        notes.extend(f"pulse test {res.source}: {n}" for n in res.notes)
    n_rc, n_rc_reason = choose_rc_pairs(results, rc_pairs)
    r0, rc, per = pulse_tables(results, n_rc)
    ref = int(np.argmin(np.abs(np.array([r.temperature_c for r in results]) - 25.0)))
    ref_res = results[ref]
    if len({round(r.temperature_c) for r in results}) > 1 and not ocv_over_temperature:
        notes.append("the OCV curve is from one temperature (the low-rate test); R0/RC tables are over "
                     "temperature")
    cands_full = ocv_candidates(o, ref_res.rest_soc, ref_res.rest_v, n_ocv_breakpoints,
                                rest_label=f"pulse test {ref_res.source}")
    cands = {k: c for k, (c, _) in cands_full.items()}
    info = {k: i for k, (_, i) in cands_full.items()}
    eta = 1.0 if o.coulombic_efficiency is None else float(o.coulombic_efficiency)
    v_min = o.v_min_v
    v_max = o.v_max_v

    # ---- hysteresis (Plett 2004) from the low-rate branches, confirmed by the pulse-test rests
    hyst_fit = None
    if o.hysteresis_v is not None:
        t_lr = ref_res.temperature_c
        r_ss = np.asarray(r0.at(o.soc_grid, t_lr), dtype=float)
        for pair in rc:
            r_ss = r_ss + np.asarray(pair.r_ohm.at(o.soc_grid, t_lr), dtype=float)
        hyst_fit = judge_hysteresis(fit_low_rate_hysteresis(o.soc_grid, o.half_gap_v, o.test_current_a * r_ss),
                                    ref_res.rest_soc, ref_res.rest_v, ref_res.rest_after_discharge, o.ocv,
                                    (o.segmentation or {}).get("voltage_noise_v") or 0.0015)
    hyst = hyst_fit.hysteresis() if hyst_fit is not None else None

    def model_with(ocv_curve, r0_, rc_, prov, hy=None):
        return _build(o.capacity_ah, eta, ocv_curve, r0_, rc_, v_min, v_max, name, prov, hy)

    # ---- choose the OCV source
    scores = {}
    forced_reason = None
    chooser = refine if refine is not None else (validate[0] if validate else None)
    chooser_soc0 = refine_soc0 if refine is not None else validate_soc0
    if hyst is not None and ocv_source == "auto" and "average" in cands:
        if chooser is not None:
            # a dynamic recording decides: the hysteresis model (on the branch average, its centre
            # line) against every OCV source without hysteresis
            with_h = validate_fn(model_with(cands["average"], r0, rc, {}, hyst), chooser, chooser_soc0).rms_v
            without = {k: validate_fn(model_with(c, r0, rc, {}), chooser, chooser_soc0).rms_v for k, c in cands.items()}
            if with_h > min(without.values()):
                hyst_fit = replace(hyst_fit, used=False, reason=hyst_fit.reason.replace(": modelled", "") + (
                    f"; but {_file(chooser)} fits better without it ({min(without.values()) * 1000:.1f} against "
                    f"{with_h * 1000:.1f} mV open loop): not modelled"))
                hyst = None
        if hyst is not None:
            # the branch average is the centre line of the hysteresis model; rest points sit on a branch
            cands = {"average": cands["average"]}
            ocv_source = "average"
            forced_reason = "centre line of the identified hysteresis"
    # the lab tests agree when the pulse-test rest points lie inside the low-rate hysteresis band
    # (the half-gap) around the low-rate average; then the average stands and a dynamic recording
    # only reports its scores: an open-loop drive RMS mixes OCV error with R0/RC error and, on the
    # PyBaMM Chen2020 NMC cell, picked the rest points over an average the rests confirmed (EKF SOC
    # RMSE on unseen drives 0.40 -> 0.58 points, benchmarks/generalisation.py, 2026-12-03)
    dist = info.get("average", {}).get("rest_point_rms_v")
    agree = ("anchored" in cands and "average" in cands and o.hysteresis_v is not None and dist is not None
             and dist <= o.hysteresis_v)
    if ocv_source == "auto":
        if chooser is not None:
            for k, c in cands.items():
                scores[k] = validate_fn(model_with(c, r0, rc, {}, hyst), chooser, chooser_soc0).rms_v
            chosen = min(scores, key=scores.get)
            reason = f"lowest open-loop voltage RMS on {_file(chooser)}"
            if agree:
                chosen = "average"
                reason = (f"rest points {dist * 1000:.1f} mV RMS from the low-rate average, within its "
                          f"half-gap {o.hysteresis_v * 1000:.1f} mV: the lab tests agree (the open-loop "
                          f"scores on {_file(chooser)} are reported, not used)")
            elif refine is None:
                notes.append("the OCV source was chosen on the validation recording itself; give --refine with a "
                             "different recording for an independent choice")
        elif "anchored" in cands and "average" in cands and o.hysteresis_v is not None:
            # no dynamic recording: keep the low-rate average while the rested voltages lie inside
            # its hysteresis band (the half-gap); a larger distance means the low-rate test does
            # not describe the cell of the pulse test (aged, or run weeks apart): anchor it
            if not agree and dist is not None:
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
        chosen, reason = ocv_source, forced_reason or "requested"
        if chooser is not None:
            for k, c in cands.items():
                scores[k] = validate_fn(model_with(c, r0, rc, {}, hyst), chooser, chooser_soc0).rms_v
    ocv_curve = cands[chosen]
    ocv_curve = type(ocv_curve)(ocv_curve.soc, ocv_curve.ocv_v, ocv_curve.temperature_c,
                                f"{chosen}: {ocv_curve.source}")
    ocv_temp_info = None
    if ocv_over_temperature:
        ocv_curve, ocv_temp_info = ocv_temperature_rows(ocv_curve, results, ref)
        if ocv_temp_info is not None:
            notes.append("OCV over temperature: " + ocv_temp_info["summary"])

    # ---- provenance
    pulse_files = [r.source if not (pulse_tests[k].metadata or {}).get("source") else _file(pulse_tests[k])
                   for k, r in enumerate(results)]
    relax_rms = [pf.fits[n_rc].rms_v for r in results for pf in r.pulses if pf.rc(n_rc) is not None]
    r0_dev = [pf.r0_ohm[n_rc] - float(r0.at(pf.soc, r.temperature_c)) for r in results for pf in r.pulses
              if pf.pulse.kind == "pulse" and n_rc in pf.r0_ohm]
    # ---- current dependence (Butler-Volmer charge transfer, models.identify.currentdep)
    cd_fits = current_dependence(results)
    cd_candidate = (charge_transfer_from_fits(cd_fits, [r.temperature_c for r in results], pulse_files)
                    if n_rc >= 1 else None)
    charge_transfer = cd_candidate if current_dependence_in_model else None
    cd_prov = {"test": "Butler-Volmer charge-transfer term fitted to the 10 s pulse drops of several amplitudes "
                       "(models.identify.currentdep)", "fits": cd_fits, "used": charge_transfer is not None,
               "candidate": None if cd_candidate is None else cd_candidate.as_dict(),
               "note": ("in the model: the excess over the chord at the median pulse current drives the first "
                        "RC pair (models.thevenin.ChargeTransfer)" if charge_transfer is not None else
                        "no pulse test shows a current dependence worth a 1 mV step (or no RC pair): the "
                        "model stays linear" if cd_candidate is None else
                        "candidate term not put in the model (off by default; identify --current-dependence)")}
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
        "current_dependence": cd_prov,
        "ocv_temperature": ocv_temp_info or {"rows": 1, "note": "one temperature (the low-rate test's)"},
        "hysteresis_estimate": {"file": _file(ocv_test), "half_gap_v": o.hysteresis_v,
                                "note": "median half-gap of the low-rate branches (includes the resistive drop)"},
        "hysteresis": {"file": [_file(ocv_test), pulse_files[ref]],
                       "test": "Plett (2004) one-state hysteresis fitted to the low-rate half-gap less "
                               "I_test (R0 + sum R_j); confirmed by the pulse-test rests after discharges",
                       **(hyst_fit.as_dict() if hyst_fit is not None else {"used": False,
                                                                            "reason": "no charge and discharge branch"})},
        "current_offset": {"test": "mean current over the rests of each lab test (voltage relaxation confirms "
                                   "them); pooled over the tests that agree within 3 standard errors",
                           "files": [_file(ocv_test)] + pulse_files, "estimates_a": offsets["estimates_a"],
                           "sigmas_a": offsets["sigmas_a"], "used_a": offsets["used_a"],
                           "pooled_a": offsets["pooled_a"], "pooled_sigma_a": offsets["pooled_sigma_a"],
                           "pooled_files": offsets["pooled_files"], "given": offsets["given"],
                           "note": "subtracted from the measured current before counting charge"},
        "pulse_soc_range": {"test": "lowest and highest SOC of the pulses of each pulse test (models.validity: "
                                    "below the lowest the tables at that temperature are extrapolated)",
                            "file": pulse_files, "temperatures_c": [r.temperature_c for r in results],
                            "soc_min": [_pulse_socs(r)[0] for r in results],
                            "soc_max": [_pulse_socs(r)[1] for r in results]},
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
    model = model_with(ocv_curve, r0, rc, prov, hyst)
    if charge_transfer is not None:
        model = model.with_(charge_transfer=charge_transfer)

    # ---- refinement
    ref_result = None
    if refine is not None:
        ref_result = refine_model(model, refine, soc0=refine_soc0, **(refine_options or {}))
        prov = dict(prov)
        prov["refinement"] = ref_result.as_dict()
        if ref_result.refined:
            prov["r0_ohm"] = dict(prov["r0_ohm"], refined_on=_file(refine))
            prov["rc_pairs"] = dict(prov["rc_pairs"], refined_on=_file(refine))
        model = ref_result.model.with_(provenance=prov)

    # ---- plausibility (before validation: a refused model is not simulated)
    problems = check_model(model, o, results)
    if problems and not allow_implausible:
        more = f" (and {len(problems) - 3} more)" if len(problems) > 3 else ""
        raise IdentifyError("identified model refused as implausible: " + "; ".join(problems[:3]) + more
                            + "; check the units and the tests, or accept it explicitly (--accept-implausible)")
    prov = dict(prov)
    prov["plausibility"] = {"checks": "models.identify.plausible.check_model", "problems": problems,
                            "accepted_by_user": bool(problems)}
    notes.extend(f"implausible (accepted): {p}" for p in problems)
    model = model.with_(provenance=prov)

    # ---- validation
    vals = tuple(validate_fn(model, rec, validate_soc0) for rec in validate)
    if vals:
        prov = dict(prov)
        prov["validation"] = [v.as_dict() for v in vals]
        model = model.with_(provenance=prov)
    # ---- usable capacity at each test temperature and load (steady-state Thevenin estimate)
    temps_tested = sorted({round(r.temperature_c, 1) for r in results})
    prov = dict(model.provenance)
    measured = []
    for k, (rec, res) in enumerate(zip(pulse_tests, results)):
        mu = measured_usable(rec.time_s, rec.current_a, rec.voltage_v, v_min, offsets["used_a"][k + 1],
                             soc=res.soc if res.soc is not None and len(res.soc) == rec.n else None,
                             capacity_ah=o.capacity_ah)
        if mu is not None and pulse_soc0 == 1.0:
            measured.append({"file": pulse_files[k], "temperature_c": float(res.temperature_c), **mu,
                             "usable_fraction": mu["usable_ah"] / o.capacity_ah})
    prov["usable_capacity"] = {"method": "models.identify.usable: SOC where OCV(z,T) - I (R0 + sum R_j) meets "
                                         "v_min; from full, on the low-rate SOC scale",
                               "rows": usable_capacity_table(model, temps_tested),
                               "measured": measured,
                               "measured_method": "charge each pulse test delivered from its (full) start to its "
                                                  "last touch of v_min under discharge "
                                                  "(models.identify.usable.measured_usable)"}
    model = model.with_(provenance=prov)
    return IdentifyResult(model, o, tuple(results), n_rc, n_rc_reason, chosen, reason, cands, scores,
                          tuple(pulse_power_table(results, v_min, v_max)), ref_result, vals, tuple(notes), info)


validate_fn = validate  # the parameter name ``validate`` shadows the function inside identify()
