"""The whole job on the bundled demo data (``socfuse demo``).

Demo cell C48 is invented (DESIGN.md section 5): a 4.8 Ah NMC cell in the 14s4p packs of a courier
co-operative's cargo tricycles.  The bundled recordings come from the truth simulator
(:mod:`socfuse.estimator.demo.truth`), which is richer than the estimator's model, so the benchmark is not
trivially perfect.

Steps (each one timed; a step whose module is missing is reported as skipped, never a crash):

1. find the demo data (:func:`demo_data_dir`);
2. identify the cell model from the C/20 test and the pulse tests (``models.identify.pipeline``),
   with the R0/RC tables refined on the lunch-break day;
3. tune the filter noise on the lunch-break day by the innovation likelihood (``estimator.tuning``);
4. benchmark EKF and the coulomb baseline under the fault scenarios on the three delivery days,
   the sigma-point filter (UKF, slow) on the lunch-break day only;
5. the posterior Cramer-Rao bound on the lunch-break day (``estimator.bound``);
6. a modest Monte Carlo tolerance study (``estimator.montecarlo``);
7. the report, ``summary.csv``, ``model.json``, ``filter.json``;
8. the C99 export with golden vectors into ``DIR/c/`` (``estimator.export_c``).

``quick=True`` (``socfuse demo --quick``, used by the tests) runs the first three hours of the
lunch-break day only, four scenarios, the UKF on the fault-free case only and a smaller Monte
Carlo study: the same code path in a fraction of the time.
"""
from __future__ import annotations

import html
import importlib
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable

import numpy as np

__all__ = ["demo_data_dir", "run_demo", "DemoResult", "DEMO_DAYS", "MAIN_DAY", "LAB_TESTS", "DEMO_MARKER",
           "DemoError"]

LAB_TESTS = {"ocv": "c48_c20_25degC.csv", "pulse": ("c48_pulse_25degC.csv", "c48_pulse_05degC.csv")}
DEMO_DAYS = ("c48_day_lunch.csv", "c48_day_cold.csv", "c48_day_long.csv")
MAIN_DAY = "c48_day_lunch"
DEMO_MARKER = ".socfuse-demo"
ALL_FILES = (LAB_TESTS["ocv"],) + LAB_TESTS["pulse"] + DEMO_DAYS

FULL_SCENARIOS = ("nominal", "soc0", "offset", "gain", "vnoise", "fade", "toffset", "vdrop", "ocv_offset",
                  "combined:soc0+offset+gain+vnoise+fade")
#: quick mode: hours of the lunch-break day used
QUICK_HOURS = 3.0
QUICK_SCENARIOS = ("nominal", "soc0", "offset", "combined:soc0+offset+gain+vnoise+fade")
UKF_SCENARIOS_FULL = ("nominal", "offset")
#: sigma of an initial SOC handed to the filter (a remembered value after an unknown rest), fraction
DEMO_P0_SOC = 0.30


class DemoError(ValueError):
    """The demo cannot run (output folder in use, no demo data)."""


def _has_all(folder: Path) -> bool:
    return folder.is_dir() and all((folder / f).is_file() for f in ALL_FILES)


def _package_data_dirs() -> list:
    """Folders of the installed ``socfuse.datasets`` package (a regular or a namespace package:
    the data folder has no ``__init__.py``, so ``importlib.resources.files`` may give a
    multiplexed path; the import spec's search locations cover both)."""
    import importlib.util

    try:
        spec = importlib.util.find_spec("socfuse.datasets")
    except (ImportError, ValueError):
        return []
    if spec is None:
        return []
    locs = list(spec.submodule_search_locations or [])
    if not locs and spec.origin:
        locs = [str(Path(spec.origin).parent)]
    return [Path(p) for p in locs]


def demo_data_dir(out_dir=None, seed: int | None = None) -> Path:
    """Folder holding the demo CSVs.

    Looks for (a) ``datasets/`` next to the package source (a checkout), (b) the installed
    package-data copy ``socfuse.datasets`` (``importlib.resources``), else (c) regenerates the
    data with :func:`socfuse.estimator.demo.data.generate_demo_data` into ``out_dir/data`` (never elsewhere).

    Raises
    ------
    DemoError
        When nothing is found and ``out_dir`` is None or the generator is unavailable.
    """
    here = Path(__file__).resolve().parents[2] / "datasets"
    if _has_all(here):
        return here
    for cand in _package_data_dirs():
        if _has_all(cand):
            return cand
    if out_dir is None:
        raise DemoError("demo data not found (no datasets/ folder and no socfuse.datasets package); "
                        "give an output folder to regenerate it")
    try:
        from socfuse.estimator.demo.data import generate_demo_data
        from socfuse.estimator.demo.scenario import DEMO_SEED
    except ImportError:
        raise DemoError("demo data not found and socfuse.estimator.demo.data.generate_demo_data is unavailable") from None
    target = Path(out_dir) / "data"
    if not _has_all(target):
        generate_demo_data(target, DEMO_SEED if seed is None else seed)
    return target


@dataclass(frozen=True, eq=False)
class DemoResult:
    """What :func:`run_demo` produced.

    Attributes
    ----------
    out_dir : Path
    summary : pandas.DataFrame
    model : CellModel
    settings : FilterSettings
    steps : tuple of (name, seconds, status)
        ``status`` is ``"done"`` or ``"skipped: <reason>"``.
    files : dict
        ``name -> Path`` of the files written.
    elapsed_s : float
    extras : dict
        Results of the optional steps (tuning, bound, tolerance) as returned by their modules.
    """

    out_dir: Path
    summary: object
    model: object
    settings: object
    steps: tuple
    files: dict = field(default_factory=dict)
    elapsed_s: float = 0.0
    extras: dict = field(default_factory=dict)


def _optional(modname: str):
    """Import ``modname`` or return None when that module itself is missing."""
    try:
        return importlib.import_module(modname)
    except ModuleNotFoundError as e:
        if e.name in (modname, modname.rsplit(".", 1)[0]):
            return None
        raise


def _prepare_out(out: Path) -> None:
    if out.exists() and not out.is_dir():
        raise DemoError(f"{out} exists and is not a folder")
    if out.is_dir() and any(out.iterdir()) and not (out / DEMO_MARKER).exists():
        raise DemoError(f"{out} is not empty and was not written by socfuse demo; choose a new folder "
                        "(the demo never overwrites files it did not write)")
    out.mkdir(parents=True, exist_ok=True)
    (out / DEMO_MARKER).write_text("written by socfuse demo; files here are replaced by the next run\n")


def run_demo(out_dir, *, quick: bool = False, quiet: bool = False, workers: int | None = None,
             log: Callable[[str], None] | None = None) -> DemoResult:
    """Run the demo (module docstring) and write everything into ``out_dir``.

    Parameters
    ----------
    out_dir : path
        Output folder: created, or a folder written by an earlier demo run (marker file
        ``.socfuse-demo``); any other non-empty folder is refused.
    quick : bool
        Smaller run for tests (module docstring).
    quiet : bool
        No progress bars.
    workers : int, optional
        Run the benchmark on a local Dask cluster with this many workers.
    log : callable, optional
        Receives one line per step (default: print).
    """
    from socfuse.models.loaders import load_recording
    from socfuse.models.modelfile import save_model

    from socfuse.estimator.analysis.bench import run_bench
    from socfuse.estimator.outputs.report import write_report
    from socfuse.estimator.filters.settings import resolve_settings, save_settings

    say = log or print
    t_all = time.perf_counter()
    out = Path(out_dir)
    _prepare_out(out)
    steps: list = []
    files: dict = {}
    extras: dict = {}

    def step(name, t0, status="done"):
        dt = time.perf_counter() - t0
        steps.append((name, dt, status))
        say(f"[{dt:6.1f} s] {name}: {status}")

    t0 = time.perf_counter()
    data = demo_data_dir(out)
    recs = {f[:-4]: load_recording(data / f) for f in ALL_FILES}
    if quick:  # the first QUICK_HOURS of the lunch-break day stand in for the whole day
        recs[MAIN_DAY] = recs[MAIN_DAY].slice(0, int(np.searchsorted(recs[MAIN_DAY].time_s, QUICK_HOURS * 3600.0)))
    step(f"demo data ({data})", t0)

    # ---------------------------------------------------------------- identify
    t0 = time.perf_counter()
    model, status, ident_section = _identify(recs, quick)
    step("identify the cell model from the C/20 and pulse tests", t0, status)
    files["model.json"] = save_model(model, out / "model.json")

    # ---------------------------------------------------------------- tune
    t0 = time.perf_counter()
    settings = resolve_settings(model)
    tuning = _optional("socfuse.estimator.analysis.tuning")
    tune_day = recs[MAIN_DAY]
    tuning_section = None
    if tuning is None or not hasattr(tuning, "tune"):
        step("tune the noise on the lunch-break day", t0, "skipped: estimator.tuning is not available; "
             "default settings used")
    else:
        try:
            # innovation likelihood: needs no reference, as on fleet data
            res = tuning.tune(model, [tune_day], settings=settings, objective="likelihood", quiet=quiet,
                              max_evaluations=60 if quick else 150)
            settings = getattr(res, "settings", res)
            extras["tuning"] = res
            tuning_section = _tuning_section(res)
            step("tune the noise on the lunch-break day", t0)
        except (ValueError, ArithmeticError, RuntimeError) as e:
            step("tune the noise on the lunch-break day", t0, f"skipped: {e}")
    if settings.p0_soc < DEMO_P0_SOC:
        # the soc0 fault hands the filter a remembered SOC; a BMS waking after an unknown rest should
        # claim a wide prior for it (demo choice, stated in the report)
        settings = replace(settings, p0_soc=DEMO_P0_SOC)
    files["filter.json"] = save_settings(settings, out / "filter.json") or out / "filter.json"

    # ---------------------------------------------------------------- benchmark
    t0 = time.perf_counter()
    days = [MAIN_DAY] if quick else [d[:-4] for d in DEMO_DAYS]
    scen = QUICK_SCENARIOS if quick else FULL_SCENARIOS
    methods = ["ekf", "coulomb"]
    if _optional("socfuse.estimator.filters.ukf") is not None:
        methods.append("ukf")
    bench = run_bench(model, [recs[d] for d in days], scen, methods, settings,
                      method_recordings={"ukf": [MAIN_DAY]},
                      method_scenarios={"ukf": ("nominal",) if quick else UKF_SCENARIOS_FULL},
                      keep_traces=[MAIN_DAY], reference_is_truth=True, workers=workers, quiet=quiet,
                      desc="demo benchmark")
    status = "done" if "ukf" in methods else "done (UKF skipped: estimator.ukf is not available)"
    if bench.errors:
        status += f"; {len(bench.errors)} run(s) failed: " + "; ".join(
            f"{'/'.join(k)}: {v}" for k, v in list(bench.errors.items())[:3])
    step(f"benchmark {len(bench.summary)} runs ({', '.join(methods)} x {len(scen)} scenarios x "
         f"{len(days)} day(s))", t0, status)

    # ---------------------------------------------------------------- bound
    t0 = time.perf_counter()
    bounds = {}
    bmod = _optional("socfuse.estimator.analysis.bound")
    if bmod is None:
        step("posterior Cramer-Rao bound", t0, "skipped: estimator.bound is not available")
    else:
        try:
            sig = _bound_sigma(bmod, model, recs[MAIN_DAY], settings)
            bounds[MAIN_DAY] = (recs[MAIN_DAY].time_s, sig)
            extras["bound_sigma_final"] = float(sig[-1])
            step("posterior Cramer-Rao bound", t0)
        except (ValueError, ArithmeticError, AttributeError, TypeError) as e:
            step("posterior Cramer-Rao bound", t0, f"skipped: {e}")

    # ---------------------------------------------------------------- tolerance
    t0 = time.perf_counter()
    sections = [s for s in (ident_section, tuning_section) if s is not None]
    mc = _optional("socfuse.estimator.analysis.montecarlo")
    if mc is None:
        step("Monte Carlo tolerance study", t0, "skipped: estimator.montecarlo is not available")
    else:
        try:
            res, sec = _tolerance(mc, model, recs[MAIN_DAY], settings, quick, quiet)
            extras["tolerance"] = res
            sections.append(sec)
            step("Monte Carlo tolerance study", t0)
        except (ValueError, ArithmeticError, AttributeError, TypeError) as e:
            step("Monte Carlo tolerance study", t0, f"skipped: {e}")

    # ---------------------------------------------------------------- report
    t0 = time.perf_counter()
    intro = ("<p>Demo cell C48 is invented: a 4.8 Ah NMC cell in the 14s4p packs of a courier co-operative's "
             "electric cargo tricycles. The recordings come from a truth simulator richer than the filter's "
             "model (two RC pairs, hysteresis, temperature dependence, sensor offset, gain error, noise and "
             "quantisation); its SOC is the reference, so NEES figures are against the truth. When the "
             f"filter is handed an initial SOC (the soc0 fault) it is told a sigma of {100 * DEMO_P0_SOC:.0f} "
             "points (p0_soc), as a BMS restoring a remembered SOC after an unknown rest should.</p>"
             "<h3>Demo steps (before the report and the C export)</h3><table class='t'><tr><th>step</th><th>s</th><th>status</th></tr>"
             + "".join(f"<tr><td>{html.escape(n)}</td><td class='n'>{dt:.1f}</td><td>{html.escape(s)}</td></tr>"
                       for n, dt, s in steps) + "</table>")
    rep = write_report(out, bench, model, settings=settings, title="socfuse demo: demo cell C48 delivery days",
                       main_recording=MAIN_DAY, bounds=bounds, sections=sections, intro_html=intro)
    files.update({"report.html": rep.html, "summary.csv": rep.summary_csv})
    step(f"report ({len(rep.pngs)} figures)", t0)

    # ---------------------------------------------------------------- C export
    t0 = time.perf_counter()
    ex = _optional("socfuse.estimator.outputs.export_c")
    if ex is None or not hasattr(ex, "export_c"):
        step("C99 export", t0, "skipped: estimator.export_c is not available")
    else:
        try:
            golden = recs[MAIN_DAY].slice(0, 600) if quick else recs[MAIN_DAY]  # the whole day unless quick
            res = ex.export_c(model, settings, out / "c", golden=golden, measure=not quick)
            files["c"] = out / "c"
            verdict = ""
            if getattr(res, "max_soc_diff", None) is not None:
                verdict = (f" (C harness over {golden.n} rows: max_soc_diff={res.max_soc_diff:.2g}, "
                           f"exit {res.harness_exit})")
            step("C99 export with golden vectors" + verdict, t0)
        except (ValueError, OSError, RuntimeError) as e:
            step("C99 export", t0, f"skipped: {e}")
    return DemoResult(out, bench.summary, model, settings, tuple(steps), files, time.perf_counter() - t_all, extras)


# ====================================================================== adapters
def _identify(recs, quick):
    """Identify the model with models.identify.pipeline, or fall back with a clear status.

    Returns ``(model, status, section)``; ``section`` is the report section with the
    identification summary (None when skipped).
    """
    from socfuse.estimator.outputs.report import ReportSection

    pipe = _optional("socfuse.models.identify.pipeline")
    ocv = recs[LAB_TESTS["ocv"][:-4]]
    pulses = [recs[p[:-4]] for p in LAB_TESTS["pulse"]]
    if pipe is not None and hasattr(pipe, "identify"):
        try:
            # R0/RC refined on the lunch-break day, which also serves for tuning; the day starts
            # after a full overnight charge (SOC 1)
            res = pipe.identify(ocv, pulses, name="demo cell C48 (identified)", refine=recs[MAIN_DAY],
                                refine_soc0=1.0)
        except (ValueError, ArithmeticError, RuntimeError) as e:
            reason = f"identification failed ({e})"
        else:
            text = res.summary() if hasattr(res, "summary") else str(res)
            sec = ReportSection("Identified cell model",
                                "<p>From the C/20 test and the pulse tests at 25 and 5 degC; R0 and RC "
                                "tables refined on the lunch-break day.</p>"
                                f"<pre>{html.escape(text)}</pre>")
            return res.model, "done", sec
    else:
        reason = "models.identify.pipeline is not available"
    from socfuse.estimator.demo.truth import truth_cell_model

    model = truth_cell_model(25.0).with_(name="demo cell C48 (truth parameters, identification skipped)")
    return model, f"skipped: {reason}; the filter uses the truth model's parameters instead (flatters it)", None


def _bound_sigma(bmod, model, rec, settings) -> np.ndarray:
    """SOC sigma of the posterior Cramer-Rao bound (estimator.bound.pcrb_soc_sigma) along ``rec``."""
    res = bmod.pcrb_soc_sigma(model, rec, settings)
    return np.asarray(res.soc_sigma, dtype=float)


def _tuning_section(res):
    from socfuse.estimator.outputs.report import ReportSection

    text = getattr(res, "describe", None)
    body = ("<p>Process and measurement noise chosen on the lunch-break day by maximising the innovation "
            "likelihood (no reference needed); the NIS lines give the chi-square 95 % band "
            "(Bar-Shalom, Li, Kirubarajan 2001).</p>"
            f"<pre>{html.escape(text() if callable(text) else str(res))}</pre>")
    return ReportSection("Noise tuning", body)


def _tolerance(mc, model, rec, settings, quick, quiet):
    """Monte Carlo tolerance study (estimator.montecarlo.tolerance_study) and its report section."""
    from socfuse.estimator.outputs.report import ReportSection, df_to_html

    study = mc.tolerance_study(model, rec, settings, n_runs=60 if quick else 200, seed=1,
                               sweep_runs=20 if quick else 40, quiet=quiet)
    body = ("<p>Sensor errors drawn from their tolerance ranges, each run through the batched filters; "
            "P50 and P95 of the maximum SOC error per method, and the current-sensor offset and gain each "
            f"swept against the P95 error for a {100 * study.budget:.0f} % SOC budget.</p>"
            + df_to_html(study.to_frame()) + f"<pre>{html.escape(study.describe())}</pre>")
    figs = ()
    try:
        figs = (("tolerance_study", mc.tolerance_figure(study),
                 "Monte Carlo tolerance study: maximum SOC error per run and P95 against each swept tolerance"),)
    except (ValueError, TypeError) as e:  # a figure problem must not lose the study
        body += f"<p class='note'>figure skipped: {html.escape(str(e))}</p>"
    return study, ReportSection("Tolerance study (Monte Carlo)", body, figs)
