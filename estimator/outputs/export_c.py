"""Export the tuned estimator as portable C99 with golden test vectors.

:func:`export_c` writes, into one folder,

- ``socfuse_ekf.h`` / ``socfuse_ekf.c``: the EKF of :mod:`estimator.kernels` (``ekf_run``) and
  the coulomb-counting + OCV-reseed baseline (``coulomb_run``) ported statement by statement to
  single-precision C99 (prefix ``sfx_``): the model's :class:`estimator.tables.KernelTables`
  as const arrays, the filter settings as constants, one ``sfx_state`` struct passed by
  pointer, no dynamic memory, no global mutable state, only ``<math.h>``, fixed loop bounds
  (the state size is a compile-time constant).  On top of the Python filter the C code checks
  its inputs (NaN or implausible samples are rejected and counted), floors the covariance
  diagonal and watches its own health (non-finite values, running mean of the NIS far above
  its chi-square mean of 1); when unhealthy the output falls back to the baseline and returns
  to the EKF when healthy again.  The SOC integrals use compensated two-float sums (TwoSum,
  Knuth, TAOCP vol. 2, 4.2.2; Ogita, Rump and Oishi, SIAM J. Sci. Comput. 26 (2005)) so the
  single-precision SOC follows the float64 reference over a whole day.
- ``golden.csv``: the inputs of one recording and the float64 Python reference outputs
  (``soc``, ``soc_sigma``, ``voltage_pred_v`` of the EKF, ``base_soc`` of the baseline and a
  ``base_reseed`` flag).
- ``harness.c``: ``main()`` that runs the C filter over the golden vectors and prints
  ``max_soc_diff=<value>`` last; exit 0 only when every row is within 1e-4.
- ``README.md``: footprint (state RAM, const tables, operations per step, stack) and notes.

Nothing the user typed (model name, file names) reaches the C text except through
:func:`safe_text`, which keeps a small safe character set; identifiers come from the fixed
``sfx_`` vocabulary of the templates.
"""
from __future__ import annotations

import json
import math
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from string import Template

import numpy as np

from socfuse.estimator.filters.settings import FilterSettings, default_settings
from socfuse.models.fileio import write_text_replacing

__all__ = ["ExportError", "Footprint", "ExportResult", "export_c", "golden_frame", "default_golden_recording",
           "render_sources", "safe_text", "c_float", "find_c_compiler", "measure_footprint", "flops_per_step",
           "GOLDEN_COLUMNS", "MARKER_NAME", "SOC_TOLERANCE", "CFLAGS"]

TEMPLATE_DIR = Path(__file__).resolve().parent / "c_templates"
MARKER_NAME = ".socfuse-export-c.json"
GENERATOR = "socfuse.export-c/1"
GOLDEN_COLUMNS = ("time_s", "current_a", "voltage_v", "temperature_c", "soc", "soc_sigma", "voltage_pred_v",
                  "base_soc", "base_reseed")
SOC_TOLERANCE = 1e-4
CFLAGS = ("-std=c99", "-O2", "-Wall", "-Wextra", "-Werror")
SOURCE_FILES = ("socfuse_ekf.h", "socfuse_ekf.c", "harness.c")
DEMO_DAY = "c48_day_lunch.csv"

# health monitor and plausibility limits (common practice, no source; see README of the export)
from socfuse.estimator.filters import kernels as _K  # noqa: E402  (the filter step's definitions, once)
from socfuse.estimator.filters.kernels import (NIS_ALPHA, NIS_CAP, NIS_HIGH, NIS_LOW, P_FLOOR,  # noqa: E402
                                               T_LIMITS_C)


class ExportError(ValueError):
    """The export cannot be written (bad folder, unusable model or recording)."""


@dataclass(frozen=True)
class Footprint:
    """Resource figures of the exported estimator.

    Attributes
    ----------
    state_bytes : int
        ``sizeof(sfx_state)``: measured by the harness when a compiler was available
        (``state_bytes_measured``), else computed for an LP64 target.
    table_bytes : int
        Bytes of the const model tables (4-byte floats).
    flops_per_step : int
        Floating-point additions, subtractions, multiplications and divisions of the worst-case
        step (update performed, every optional state), counted from the C source.
    transcendentals_per_step : int
        ``expf`` and ``sqrtf`` calls of that step.
    stack_bytes : int or None
        Worst-case stack: the sum of the frames gcc ``-fstack-usage`` reports for the library
        functions (no recursion, so any call chain uses at most this); None when not measured.
    stack_detail : tuple of (function, bytes)
    """

    state_bytes: int
    state_bytes_measured: bool
    table_bytes: int
    flops_per_step: int
    transcendentals_per_step: int
    stack_bytes: int | None = None
    stack_detail: tuple = ()


@dataclass(frozen=True, eq=False)
class ExportResult:
    """What :func:`export_c` wrote.

    Attributes
    ----------
    out_dir : Path
    files : tuple of Path     every file written
    footprint : Footprint
    golden_rows : int         rows of golden.csv
    golden_source : str       sanitised name of the recording used
    max_soc_diff : float or None   harness result when it was built and run here
    harness_exit : int or None
    compiler : str or None
    notes : tuple of str      differences from the Python settings that the C code cannot follow
    """

    out_dir: Path
    files: tuple
    footprint: Footprint
    golden_rows: int
    golden_source: str
    max_soc_diff: float | None = None
    harness_exit: int | None = None
    compiler: str | None = None
    notes: tuple = field(default_factory=tuple)


# ----------------------------------------------------------------------------- text helpers
_SAFE = re.compile(r"[^A-Za-z0-9 _.,:;+=()\-]")


def safe_text(s, limit: int = 80) -> str:
    """``s`` reduced to letters, digits, space and ``_.,:;+=()-`` (others become ``_``), at most
    ``limit`` characters: safe inside a C comment (no ``*/``, no trigraph, no backslash).

    Parameters
    ----------
    s : object
        Text (converted with ``str``; line breaks become spaces).
    limit : int
        Largest length, characters.

    Returns
    -------
    str
        The safe text (``"unnamed"`` when empty).
    """
    t = _SAFE.sub("_", str(s).replace("\n", " ").replace("\r", " "))
    return (t[:limit] if len(t) > limit else t) or "unnamed"


def c_float(x) -> str:
    """A finite number as a C ``float`` literal that round-trips the float32 value.

    Parameters
    ----------
    x : float
        The value, in whatever unit the constant has.

    Returns
    -------
    str
        A literal such as ``"0.00100000005f"``.

    Raises
    ------
    ExportError
        When the value (as float32) is not finite.
    """
    v = float(np.float32(x))
    if not math.isfinite(v):
        raise ExportError(f"cannot export the non-finite value {x!r} as a C constant")
    s = "%.9g" % v
    if not any(c in s for c in ".en"):
        s += ".0"
    return s + "f"


def _table_text(packed: np.ndarray) -> str:
    rows = []
    for r in range(packed.shape[0]):
        trows = []
        for t in range(packed.shape[1]):
            vals = [c_float(v) for v in packed[r, t]]
            lines = ["            " + ", ".join(vals[i:i + 8]) for i in range(0, len(vals), 8)]
            trows.append("        {\n" + ",\n".join(lines) + "\n        }")
        rows.append("    {\n" + ",\n".join(trows) + "\n    }")
    return ",\n".join(rows)


def _template(name: str) -> Template:
    return Template((TEMPLATE_DIR / name).read_text())


def _safety_note() -> str:
    from socfuse.estimator.cli.main import SAFETY_NOTE
    return safe_text(SAFETY_NOTE, 1000)


# ----------------------------------------------------------------------------- sources
def _layout(model, settings):
    from socfuse.estimator.filters.ekf import setup
    su = setup(model, settings)
    return su


def render_sources(model, settings: FilterSettings | None = None) -> dict:
    """The C sources for ``model`` and ``settings``: ``{file name: text}`` (header, library, harness).

    Parameters
    ----------
    model : CellModel
    settings : FilterSettings, optional
        Default from the model.

    Returns
    -------
    dict of str to str
        The C file names and their text (tables and constants as float32 literals).

    Raises
    ------
    ExportError
        When a constant is not finite.
    """
    s = default_settings(model) if settings is None else settings
    su = _layout(model, s)
    tab = su.tables
    packed = tab.tables   # the table rows; the temperature axis goes out as its own array
    n_s = int(packed.shape[2])
    subs = dict(
        generator=GENERATOR, model_comment=safe_text(model.name or "unnamed cell model"),
        safety_note=_safety_note(),
        n_rc=su.n_rc, has_bias=int(su.i_b >= 0), has_hyst=int(su.i_h >= 0), est_hyst=int(su.est_h), n_x=su.n_x,
        i_b=su.i_b, i_h=su.i_h, has_rs=int(su.i_r >= 0), i_r=su.i_r, has_err=int(su.i_e >= 0), i_e=su.i_e, has_ct=int(tab.has_charge_transfer),
        model_error_v=c_float(s.model_error_v), model_error_tau_s=c_float(s.model_error_tau_s),
        capacity_error_frac=c_float(s.capacity_error_frac), resistance_error_ohm=c_float(s.resistance_error_ohm),
        rc_error_frac=c_float(s.rc_error_frac),
        resistance_error_r0_exponent=c_float(s.resistance_error_r0_exponent), r0_ref_ohm=c_float(su.prm[_K.P_R0REF]),
        noise_corr_s=c_float(s.noise_corr_s), model_error_adapt_s=c_float(s.model_error_adapt_s),
        adapt_cap=c_float(_K.ADAPT_CAP), gap_s=c_float(s.gap_s),
        tenv_lo=c_float(su.prm[_K.P_TENV_LO]), tenv_hi=c_float(su.prm[_K.P_TENV_HI]), vcut_v=c_float(su.prm[_K.P_VCUT]),
        default_temp_c=c_float(su.prm[_K.P_TDEF]),
        resistance_error_corr_s=c_float(s.resistance_error_corr_s), n_t=int(packed.shape[1]), n_s=n_s,
        n_bisect=int(math.ceil(math.log2(max(n_s - 1, 2)))) + 1,
        capacity_as=c_float(tab.capacity_as), eta_charge=c_float(tab.eta_charge), hyst_gamma=c_float(tab.hyst_gamma),
        hyst_max_v=c_float(tab.hyst_max_v), temp_axis=", ".join(c_float(t) for t in tab.temp_grid),
        voltage_noise_v=c_float(s.voltage_noise_v), current_noise_a=c_float(s.current_noise_a),
        q_soc_per_s=c_float(s.q_soc_per_s), q_rc_v2_per_s=c_float(s.q_rc_v2_per_s),
        q_bias_a2_per_s=c_float(s.q_bias_a2_per_s), q_hyst_per_s=c_float(s.q_hyst_per_s),
        p0_soc=c_float(s.p0_soc), p0_rc_v=c_float(s.p0_rc_v), p0_bias_a=c_float(s.p0_bias_a),
        p0_hyst=c_float(s.p0_hyst), q_resistance_per_s=c_float(s.q_resistance_per_s),
        p0_resistance=c_float(s.p0_resistance), r_scale_lo=c_float(_K.R_SCALE_LIMITS[0]),
        r_scale_hi=c_float(_K.R_SCALE_LIMITS[1]), gate_sigma=c_float(s.gate_sigma),
        gate_release_s=c_float(s.gate_release_s), soc_min=c_float(s.soc_min),
        soc_max=c_float(s.soc_max), rest_current_a=c_float(s.rest_current_a), rest_min_s=c_float(s.rest_min_s),
        reseed=int(bool(s.reseed)),
        i_abs_max=c_float(su.prm[_K.P_IMAX]), v_lo=c_float(su.prm[_K.P_VLO]), v_hi=c_float(su.prm[_K.P_VHI]),
        t_lo=c_float(T_LIMITS_C[0]), t_hi=c_float(T_LIMITS_C[1]),
        nis_alpha=c_float(NIS_ALPHA), nis_cap=c_float(NIS_CAP), nis_high=c_float(NIS_HIGH),
        nis_low=c_float(NIS_LOW), p_floor=c_float(P_FLOOR), vrc_max=c_float(su.prm[_K.P_VRCMAX]),
        h_max=c_float(_K.H_MAX), big=c_float(_K.BIG),
        **{f"st_{k}": f"0x{v:02x}" for k, v in _K.STATUS_BITS.items()},
        tables=_table_text(packed),
    )
    return {name: _template(name + ".in").substitute(subs) for name in SOURCE_FILES}


def flops_per_step(n_rc: int, has_bias: bool, has_hyst: bool, has_ct: bool = False) -> tuple[int, int]:
    """Worst-case floating-point operations of one ``sfx_step`` (update performed).

    Counted by hand from ``socfuse_ekf.c.in`` (additions, subtractions, multiplications,
    divisions; comparisons, ``fabsf`` and int/float conversions not counted).  Returns
    ``(arithmetic, transcendental)`` where the second counts ``expf`` and ``sqrtf`` calls.

    Parameters
    ----------
    n_rc : int
        Number of RC pairs.
    has_bias : bool
        The current-bias state is present.
    has_hyst : bool
        The hysteresis state is present.
    has_ct : bool
        The model has the charge-transfer excess (three temperature interpolations, ``asinhf``
        and ``sqrtf`` in the transition of the first RC pair).

    Returns
    -------
    arithmetic : int
        Floating-point operations per step.
    transcendental : int
        ``expf`` and ``sqrtf`` calls per step.
    """
    nx = 1 + n_rc + int(has_bias) + int(has_hyst)
    tri = nx * (nx + 1) // 2
    tix, six, bil, acc = 3, 2, 9, 10
    # transition: indices, SOC change (3 + 1), g0 (2), per RC pair two look-ups, exp argument,
    # 1 - a, b, a x + b u; bias subtraction; hysteresis 16
    trans = tix + six + 4 + 2 + n_rc * (2 * bil + 1 + 1 + 1 + 3) + int(has_bias) + 16 * int(has_hyst)
    # covariance prediction per lower-triangle entry: d d p (2), g g s2 (2) + adds (2);
    # bias cross terms 9; diagonal q dt (2); s2 (1)
    pred = 1 + tri * (6 + 9 * int(has_bias)) + 2 * nx + acc
    # measurement: indices, OCV and slope look-ups + extrapolation, r0 and dr0, y and H
    meas = tix + six + 2 * bil + 2 + six + 2 * bil + int(has_bias) + 4 + n_rc + 2 * int(has_hyst)
    # update: P H (2 nx^2), S (2 nx), innovation 1, gate 1, K (nx), x (2 nx - 1 + acc),
    # Joseph (2 nx^2 + 2 nx^2 + 5 nx^2), symmetrise (2 per lower entry)
    upd = 2 * nx * nx + 2 * nx + 2 + nx + 2 * nx - 1 + acc + 9 * nx * nx + 2 * tri
    # baseline: interval current 2, SOC change 3 + acc, variance 6, rest duration acc
    base = 2 + 3 + acc + 6 + acc
    health = 5 + 2  # NIS and its running mean; output sums
    # charge-transfer excess: three interpolations (9), x (1), dc/du (4), c (3), 1 - a, x' and g (5)
    trans += 22 * int(has_ct)
    total = trans + pred + meas + upd + base + health
    transc = n_rc + int(has_hyst) + 1 + 2 + 2 * int(has_ct)  # expf per pair (+ hysteresis), sqrtf gate, sigma
    # outputs (+ asinhf and sqrtf of the charge-transfer term)
    return int(total), int(transc)


def _state_bytes_lp64(nx: int) -> int:
    floats = nx + 1 + nx * nx + 2 + 7 + 1 + 1
    ints = 4
    size = 4 * (floats + ints)
    size = (size + 7) // 8 * 8
    return size + 8 * 10


# ----------------------------------------------------------------------------- golden vectors
def default_golden_recording(model=None):
    """The bundled demo day ``c48_day_lunch.csv`` (package data ``socfuse.datasets``).

    Found in a source checkout and after a plain (non-editable) install alike
    (:func:`models.loaders.bundled_recording_path`).  There is no silent fallback: without the
    demo data the caller must give the golden recording.  ``model`` is accepted for
    compatibility and not used.

    Parameters
    ----------
    model : CellModel, optional
        Not used.

    Returns
    -------
    Recording
        The demo day.

    Raises
    ------
    ExportError
        The demo day is not installed.
    """
    from socfuse.models.loaders import bundled_recording_path, load_recording

    path = bundled_recording_path(DEMO_DAY)
    if path is None:
        raise ExportError(f"the bundled demo day {DEMO_DAY} (package data socfuse.datasets) is not installed; "
                          "give the golden recording (--golden REC)")
    return load_recording(path)


def _rounded(rec):
    """The recording as the golden CSV will carry it (so Python and C read the same inputs)."""
    from socfuse.models.recording import Recording

    v = np.asarray(rec.voltage_v, dtype=float)
    ok = np.flatnonzero(np.isfinite(v))
    if ok.size == 0:
        raise ExportError(f"recording {safe_text(rec.name)}: no finite voltage sample")
    if ok[0] > 0:
        rec = rec.slice(int(ok[0]))
    rnd = lambda a, d: np.char.mod(f"%.{d}g", np.asarray(a, dtype=float)).astype(float)  # noqa: E731
    temp = None if rec.temperature_c is None else rnd(rec.temperature_c, 9)
    return Recording(rnd(rec.time_s, 15), rnd(rec.current_a, 9), rnd(rec.voltage_v, 9), temp, None,
                     name=rec.name, metadata=rec.metadata)


def golden_frame(model, settings: FilterSettings | None, rec):
    """Golden vectors for ``rec``: inputs plus the float64 reference outputs (a DataFrame).

    The EKF reference is :func:`estimator.ekf.run_ekf` with ``monitor=True`` (the filter's own SOC
    and sigma, which the harness compares with ``ekf_soc``) and the baseline reference
    :func:`estimator.coulomb.run_coulomb` (with ``early_reseed_s = 0``, the only rest rule a
    stream can follow in bounded memory), both started from the first voltage sample, on the
    inputs rounded exactly as written to the CSV.

    Parameters
    ----------
    model : CellModel
    settings : FilterSettings or None
        Default from the model; ``early_reseed_s`` is set to 0.
    rec : Recording
        The golden recording.

    Returns
    -------
    pandas.DataFrame
        Columns ``time_s`` (s), ``current_a`` (A), ``voltage_v`` (V), ``temperature_c`` (degC, NaN
        when absent), ``soc`` and ``soc_sigma`` (fraction), ``voltage_pred_v`` (V), ``base_soc``
        (fraction) and ``base_reseed`` (1 at a baseline reseed), one row per sample.
    """
    import pandas as pd

    from socfuse.estimator.filters.coulomb import run_coulomb
    from socfuse.estimator.filters.ekf import run_ekf

    s = default_settings(model) if settings is None else settings
    r = _rounded(rec)
    s = s.with_(early_reseed_s=0.0)
    tr = run_ekf(model, r, s, monitor=True)  # the C code's step: input checks and health monitor
    base = run_coulomb(model, r, s)
    flag = np.zeros(r.n, dtype=int)
    for t_rs, _, _ in base.reseeds:
        flag[np.searchsorted(r.time_s, t_rs)] = 1
    temp = np.full(r.n, np.nan) if r.temperature_c is None else r.temperature_c
    return pd.DataFrame({"time_s": r.time_s, "current_a": r.current_a, "voltage_v": r.voltage_v,
                         "temperature_c": temp, "soc": tr.states[:, 0], "soc_sigma": tr.metadata["filter_soc_sigma"],
                         "voltage_pred_v": tr.voltage_pred_v, "base_soc": base.soc, "base_reseed": flag})


def _golden_csv(frame) -> str:
    fmts = ["%.15g", "%.9g", "%.9g", "%.9g", "%.12g", "%.9g", "%.10g", "%.12g", "%d"]
    # "%g" writes NaN as "nan", which strtod reads back as NaN
    cols = [np.char.mod(f, frame[c].to_numpy()) for f, c in zip(fmts, GOLDEN_COLUMNS)]
    return ",".join(GOLDEN_COLUMNS) + "\n" + "\n".join(map(",".join, zip(*cols))) + "\n"


# ----------------------------------------------------------------------------- compile + measure
def find_c_compiler() -> str | None:
    """Path of ``cc`` (or ``gcc``, ``clang``) on PATH, or None.

    Parameters
    ----------
    None

    Returns
    -------
    str or None
    """
    for name in ("cc", "gcc", "clang"):
        p = shutil.which(name)
        if p:
            return p
    return None


def _parse_stack(folder: Path) -> tuple[int | None, tuple]:
    items = []
    for su in sorted(folder.glob("socfuse_ekf*.su")):
        for line in su.read_text().splitlines():
            parts = line.split("\t")
            if len(parts) >= 2 and parts[1].strip().isdigit():
                func = parts[0].rsplit(":", 1)[-1]
                items.append((func, int(parts[1])))
    if not items:
        return None, ()
    return sum(b for _, b in items), tuple(sorted(items, key=lambda x: -x[1]))


def measure_footprint(src_dir, golden_csv=None, compiler: str | None = None, timeout_s: float = 120.0) -> dict:
    """Build the export in a temporary folder with ``CFLAGS`` and ``-fstack-usage`` and run the
    harness (on ``golden_csv`` when given).

    Returns a dict with ``compiler``, ``stack_bytes``, ``stack_detail``, ``state_bytes``,
    ``table_bytes``, ``max_soc_diff``, ``exit`` and ``stdout``; raises ExportError when the
    sources do not compile.

    Parameters
    ----------
    src_dir : str or os.PathLike
        Folder holding ``socfuse_ekf.h``, ``socfuse_ekf.c`` and ``harness.c``.
    golden_csv : str or os.PathLike, optional
        Golden vectors for the harness.
    compiler : str, optional
        Compiler path; default :func:`find_c_compiler`.
    timeout_s : float
        Limit for each compile and the harness run, s.

    Returns
    -------
    dict
        ``compiler``, ``stack_bytes`` (bytes or None), ``stack_detail``, ``state_bytes`` and
        ``table_bytes`` (bytes), ``max_soc_diff`` (fraction), ``exit``, ``stdout``, ``stderr`` and the
        other harness fields.

    Raises
    ------
    ExportError
        Without a compiler, or when the sources do not compile.
    """
    cc = compiler or find_c_compiler()
    if cc is None:
        raise ExportError("no C compiler (cc, gcc or clang) on PATH")
    src_dir = Path(src_dir)
    with tempfile.TemporaryDirectory(prefix="socfuse-cbuild-") as tmp:
        tmp = Path(tmp)
        for name in ("socfuse_ekf.h", "socfuse_ekf.c", "harness.c"):
            shutil.copy(src_dir / name, tmp / name)
        res = {"compiler": cc, "stack_bytes": None, "stack_detail": ()}
        su = subprocess.run([cc, *CFLAGS, "-fstack-usage", "-c", "socfuse_ekf.c", "-o", "socfuse_ekf.o"],
                            cwd=tmp, capture_output=True, text=True, timeout=timeout_s)
        if su.returncode == 0:
            res["stack_bytes"], res["stack_detail"] = _parse_stack(tmp)
        b = subprocess.run([cc, *CFLAGS, "-o", "harness", "harness.c", "socfuse_ekf.c", "-lm"], cwd=tmp,
                           capture_output=True, text=True, timeout=timeout_s)
        if b.returncode != 0:
            raise ExportError("the exported C does not compile: " + (b.stderr.strip().splitlines() or ["?"])[0])
        args = [str(tmp / "harness"), str(Path(golden_csv).resolve())] if golden_csv else [str(tmp / "harness")]
        run = subprocess.run(args, capture_output=True, text=True, timeout=timeout_s)
        res.update(parse_harness_output(run.stdout))
        res["exit"] = run.returncode
        res["stdout"] = run.stdout
        res["stderr"] = run.stderr
        return res


def parse_harness_output(stdout: str) -> dict:
    """``key=value`` pairs of the harness output (numbers converted), plus ``max_soc_diff``."""
    out = {}
    for tok in stdout.split():
        if "=" in tok:
            k, v = tok.split("=", 1)
            try:
                out[k] = int(v)
            except ValueError:
                try:
                    out[k] = float(v)
                except ValueError:
                    out[k] = v
    last = stdout.strip().splitlines()[-1] if stdout.strip() else ""
    m = re.fullmatch(r"max_soc_diff=(\S+)", last)
    out["max_soc_diff"] = float(m.group(1)) if m else None
    return out


# ----------------------------------------------------------------------------- writing
def _check_folder(out: Path, force: bool) -> None:
    if out.exists() and not out.is_dir():
        raise ExportError(f"{out}: exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not (out / MARKER_NAME).is_file() and not force:
        raise ExportError(f"{out}: folder is not empty and was not written by socfuse export-c "
                          f"(no {MARKER_NAME}); choose another folder or use --force")


def _readme(model, settings, fp: Footprint, golden_rows, golden_name, meas, notes, su) -> str:
    from socfuse.estimator.cli.main import SAFETY_NOTE

    name = safe_text(model.name or "unnamed cell model")
    v_span = float(model.v_max_v - model.v_min_v)
    lines = [
        "# Exported SOC estimator (C99)",
        "",
        f"Generated by socfuse export-c ({GENERATOR}) for cell model `{name}`. "
        "**Regenerate, do not hand-edit**: `socfuse export-c --model M --filter F --out DIR`.",
        "",
        "Files: `socfuse_ekf.h`, `socfuse_ekf.c` (the estimator), `harness.c` (golden-vector check), "
        f"`golden.csv` ({golden_rows} rows of `{golden_name}`), this README.",
        "",
        "## Build and check",
        "",
        "    cc -std=c99 -O2 -Wall -Wextra -Werror -o harness *.c -lm",
        "    ./harness golden.csv",
        "",
        "The harness prints `max_soc_diff=<value>` last and exits 0 only when the C SOC stays within "
        f"{SOC_TOLERANCE:g} of the float64 Python reference at every row (the baseline SOC too, except at rows "
        "where the reference reseeds: it looks one sample ahead, a stream reseeds one sample later). "
        "Exit 1: tolerance exceeded; 2: usage or file error; 3: corrupted lines (each reported with its line "
        "number on stderr and skipped as a missing sample). Do not build with `-ffast-math`.",
        "",
        "## Use",
        "",
        "    sfx_state st; sfx_output out;",
        "    sfx_init(&st, -1.0f);                 /* or a known SOC in [0, 1] */",
        "    status = sfx_step(&st, dt_s, current_a, voltage_v, temperature_c, &out);",
        "",
        "Current positive on discharge; `out.soc` is the SOC to use (EKF when healthy, else the "
        "coulomb-counting baseline); `status` bits are in the header.",
        "",
        "## Footprint",
        "",
        "| item | value |",
        "|---|---|",
        f"| state RAM (`sizeof(sfx_state)`) | {fp.state_bytes} bytes "
        f"({'measured by the harness' if fp.state_bytes_measured else 'computed for LP64'}) |",
        f"| const tables | {fp.table_bytes} bytes ({su.tables.tables.shape[0]} rows x {su.tables.tables.shape[1]} "
        f"temperatures x {su.tables.tables.shape[2]} SOC points, float, and the temperature axis) |",
        f"| floating-point operations per step | about {fp.flops_per_step} (+ - * /, worst case, counted by hand from the source) "
        f"+ {fp.transcendentals_per_step} expf/sqrtf |",
        "| worst-case stack | " + (f"{fp.stack_bytes} bytes (sum of the gcc -fstack-usage frames of the library)"
                                   if fp.stack_bytes is not None else "not measured (no C compiler)") + " |",
        f"| state size | {su.n_x} ({', '.join(su.names)}) |",
        "",
    ]
    if meas is not None:
        lines += [f"Harness run at export time: `max_soc_diff={meas.get('max_soc_diff')}`, exit "
                  f"{meas.get('exit')} ({safe_text(Path(meas.get('compiler', '')).name)}).", ""]
    if fp.stack_detail:
        lines += ["Stack per function (bytes): " + ", ".join(f"{safe_text(f)} {b}" for f, b in fp.stack_detail),
                  ""]
    lines += [
        "## Behaviour beyond the Python filter",
        "",
        "- Input checks: dt not finite or <= 0 ignores the sample; a NaN or implausible current "
        f"(|i| > {100.0 * model.capacity_ah:g} A) holds the last valid current; a NaN or implausible voltage "
        "(outside the model limits widened by half their span) is predict-only; a NaN temperature uses "
        f"{su.prm[_K.P_TDEF]:g} degC (25, or a single-temperature model's own) as in Python, an implausible one (outside {T_LIMITS_C[0]:g}..{T_LIMITS_C[1]:g} degC) too. All are counted.",
        f"- Operating envelope: a voltage measured outside {su.prm[_K.P_TENV_LO]:g}..{su.prm[_K.P_TENV_HI]:g} degC "
        "(the model's temperature rows plus a margin; a single-temperature model is valid around the "
        "temperature it was identified at) is predict-only (`SFX_ST_ENVELOPE`). Without `soc0` the filter "
        "starts from the first valid voltage sample even there, as Python does, and updates from the voltage "
        "once the temperature is inside.",
        f"- Covariance: symmetrised after every update (as in Python) and its diagonal floored at {P_FLOOR:g}.",
        f"- Health: unhealthy when a value is not finite or a state leaves its physical range (|RC voltage| > "
        f"{v_span:g} V, |bias| above the current limit, |h| > 1.5; the EKF is then restarted from the baseline "
        f"SOC) or when the running mean of the NIS (weight {NIS_ALPHA:.4g}, one sample capped at {NIS_CAP:g}) exceeds "
        f"{NIS_HIGH:g}, far above its chi-square mean of 1 (Bar-Shalom, Li and Kirubarajan 2001); healthy again "
        f"below {NIS_LOW:g}. While unhealthy `out.soc` is the baseline.",
        "- The SOC sums (EKF and baseline) and the rest duration use compensated two-float sums.",
        "- The filter starts at the first sample with a valid voltage when no initial SOC is given.",
    ]
    lines += [f"- {n}" for n in notes]
    lines += ["", "## Caution", "", SAFETY_NOTE, ""]
    return "\n".join(lines)


def export_c(model, settings: FilterSettings | None, out_dir, golden=None, *, force: bool = False,
             measure: bool = True, max_golden_rows: int | None = None) -> ExportResult:
    """Write the C99 estimator, golden vectors, harness and README into ``out_dir``.

    Parameters
    ----------
    model : models.CellModel
    settings : FilterSettings or None  (None: :func:`estimator.settings.default_settings`)
    out_dir : str or Path
        New or empty folder, or one written earlier by this function (marker file
        ``.socfuse-export-c.json``); anything else is refused unless ``force``.
    golden : Recording, path, or None
        Recording for the golden vectors (a path is read with the canonical CSV columns);
        default :func:`default_golden_recording`.
    force : bool
        Write into a non-empty folder without the marker (only our file names are replaced).
    measure : bool
        When a C compiler is on PATH, build the export, run the harness on the golden vectors
        and put the measured footprint (sizeof, stack) and the result into the README.
    max_golden_rows : int, optional
        Keep only the first rows of the golden recording (short vectors for tests).

    Returns
    -------
    ExportResult
    """
    from socfuse.models.loaders import load_recording
    from socfuse.models.recording import Recording

    s = default_settings(model) if settings is None else settings
    out = Path(out_dir)
    _check_folder(out, force)
    if golden is None:
        rec = default_golden_recording(model)
    elif isinstance(golden, Recording):
        rec = golden
    else:
        rec = load_recording(golden)
    if max_golden_rows is not None and rec.n > max_golden_rows:
        rec = rec.slice(0, int(max_golden_rows))
    notes = []
    if s.early_reseed_s > 0:
        notes.append(f"early_reseed_s = {s.early_reseed_s:g} s is not exported (a stream cannot extrapolate a "
                     "rest it has not seen end in bounded memory): the C baseline reseeds only after "
                     "rest_min_s, and golden.csv uses the same rule")
    su = _layout(model, s)
    sources = render_sources(model, s)
    frame = golden_frame(model, s, rec)
    golden_name = safe_text(rec.name or "recording")
    out.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in sources.items():
        written.append(write_text_replacing(out / name, text))
    gpath = write_text_replacing(out / "golden.csv", _golden_csv(frame))
    written.append(gpath)
    flops, transc = flops_per_step(su.n_rc, su.i_b >= 0, su.i_h >= 0, su.tables.has_charge_transfer)
    table_bytes = int((su.tables.tables.size + su.tables.temp_grid.size) * 4)
    meas = None
    if measure and find_c_compiler() is not None:
        meas = measure_footprint(out, gpath)
    state_bytes = int(meas["state_bytes"]) if meas and "state_bytes" in meas else _state_bytes_lp64(su.n_x)
    fp = Footprint(state_bytes, bool(meas and "state_bytes" in meas), table_bytes, flops, transc,
                   None if meas is None else meas.get("stack_bytes"),
                   () if meas is None else tuple(meas.get("stack_detail", ())))
    written.append(write_text_replacing(out / "README.md", _readme(model, s, fp, len(frame), golden_name, meas, notes, su)))
    marker = {"generator": GENERATOR, "files": [p.name for p in written], "model": safe_text(model.name),
              "golden_rows": len(frame)}
    written.append(write_text_replacing(out / MARKER_NAME, json.dumps(marker, indent=1) + "\n"))
    return ExportResult(out, tuple(written), fp, len(frame), golden_name,
                        None if meas is None else meas.get("max_soc_diff"),
                        None if meas is None else meas.get("exit"),
                        None if meas is None else meas.get("compiler"), tuple(notes))
