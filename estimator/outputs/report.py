"""One self-contained HTML report of a benchmark, plus its PNG figures and ``summary.csv``.

The HTML holds everything inline: the CSS below (our own) and every figure as a base64
``data:image/png`` URI, so the file can be mailed or attached to a review as it is.  Figures are
drawn with Matplotlib's Agg backend only; SOC is shown in percent, time in hours, voltage
residuals in millivolts.

Per scenario (on the report's main recording) a 2 x 2 figure: SOC against the reference with the
EKF's +-3 sigma band; the SOC error with the filter's +-3 sigma and, when given, the +-3 sigma of
the posterior Cramer-Rao bound (the best any unbiased estimator can do under the model and noise
settings; Tichavsky, Muravchik, Nehorai, IEEE TSP 46, 1998); the voltage residual
(innovation); the histogram of the normalised innovation against N(0, 1) with the mean NIS and
its chi-square 95 % band (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4).  Then RMSE / max error per
scenario and method over all recordings, SOC_C against SOC_E, and any extra sections (tuning,
tolerance study) the caller passes in.
"""
from __future__ import annotations

import base64
import html
import io
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
from socfuse.models.fileio import write_bytes_replacing

__all__ = ["ReportSection", "ReportFiles", "write_report", "figure_png", "df_to_html", "SAFETY_PARAGRAPH",
           "METHOD_COLOURS"]

METHOD_COLOURS = {"ekf": "#1f5fa8", "ukf": "#2a9d5c", "coulomb": "#c8641e", "reference": "#111111"}
METHOD_LABELS = {"ekf": "EKF", "ukf": "UKF (sigma-point)", "coulomb": "coulomb + OCV reseed"}
MAX_PLOT_POINTS = 2000

SAFETY_PARAGRAPH = (
    "These figures describe an estimator on recorded data; they are not evidence that a battery is "
    "safe. A state-of-charge estimate can be wrong in ways a benchmark does not show (a cell that ages "
    "differently, a sensor that fails outright, a temperature outside the identified range). Never "
    "use the SOC estimate as a protection function: over- and under-voltage, over-current and "
    "over-temperature protection must act on the measured quantities, independently of the "
    "estimator, and within the limits given by the cell maker. Lithium cells store a lot of energy; "
    "run lab tests only with suitable equipment, supervision and enclosures, under local codes and "
    "licensed practice. Firmware derived from this work must go through the functional-safety process "
    "of its application (for example ISO 26262 for road vehicles), including independent review and "
    "hardware-in-the-loop testing.")

_CSS = """
body{font:15px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d2530;margin:0;background:#f4f5f7}
main{max-width:1180px;margin:0 auto;padding:18px 28px 60px;background:#fff}
h1{font-size:26px;margin:10px 0 4px}h2{font-size:20px;margin:34px 0 8px;border-bottom:2px solid #d8dde5;padding-bottom:3px}
h3{font-size:16px;margin:22px 0 6px}
.sub{color:#5a6573;margin:0 0 14px}
.caution{border-left:5px solid #c0392b;background:#fcf1ef;padding:8px 14px;margin:14px 0}
.note{color:#5a6573;font-size:13px}
table.t{border-collapse:collapse;font-size:13px;margin:6px 0 12px}
table.t th{background:#e9edf2;text-align:left;padding:3px 8px;border-bottom:1px solid #c5ccd6}
table.t td{padding:2px 8px;border-bottom:1px solid #eceff3;font-variant-numeric:tabular-nums}
table.t td.n{text-align:right}
table.t tr:hover td{background:#f6f8fb}
figure{margin:10px 0 22px}figure img{max-width:100%;border:1px solid #e2e6ec}
figcaption{font-size:13px;color:#46505c;margin-top:4px}
nav a{margin-right:12px;font-size:13px}
code{background:#f0f2f5;padding:0 3px;border-radius:3px}
"""


@dataclass(frozen=True)
class ReportSection:
    """An extra section supplied by the caller (tuning result, tolerance study, ...).

    Parameters
    ----------
    title : str
    html : str
        Body HTML (already escaped by the caller; use :func:`df_to_html` for tables).
    figures : tuple of (stem, figure, caption)
        ``figure`` is a Matplotlib Figure or PNG bytes; saved as ``<stem>.png``.
    """

    title: str
    html: str = ""
    figures: tuple = ()


@dataclass(frozen=True)
class ReportFiles:
    """Paths written by :func:`write_report`."""

    html: Path
    summary_csv: Path
    pngs: tuple = field(default_factory=tuple)


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def figure_png(fig, dpi: int = 110) -> bytes:
    """PNG bytes of a Matplotlib figure (the figure is closed)."""
    plt = _plt()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    plt.close(fig)
    return buf.getvalue()


def _fmt_cell(v) -> tuple[str, bool]:
    if v is None:
        return "", False
    if isinstance(v, (bool, np.bool_)):
        return ("yes" if v else "no"), False
    if isinstance(v, (int, np.integer)):
        return f"{int(v)}", True
    if isinstance(v, (float, np.floating)):
        if not math.isfinite(float(v)):
            return "", True
        a = abs(float(v))
        if a != 0 and (a < 1e-3 or a >= 1e6):
            return f"{float(v):.3e}", True
        return f"{float(v):.4g}" if a < 100 else f"{float(v):.1f}", True
    return html.escape(str(v)), False


def df_to_html(df, columns: Sequence[str] | None = None, headers: Mapping[str, str] | None = None) -> str:
    """A pandas DataFrame as a compact HTML table (numbers right-aligned, NaN/None blank)."""
    cols = list(columns) if columns is not None else list(df.columns)
    headers = headers or {}
    out = ['<table class="t"><tr>' + "".join(f"<th>{html.escape(headers.get(c, c))}</th>" for c in cols) + "</tr>"]
    for _, row in df.iterrows():
        cells = []
        for c in cols:
            s, num = _fmt_cell(row[c])
            cells.append(f'<td class="n">{s}</td>' if num else f"<td>{s}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _stride(n: int) -> slice:
    return slice(None, None, max(1, int(math.ceil(n / MAX_PLOT_POINTS))))


def _safe_stem(s: str) -> str:
    keep = "".join(ch if (ch.isalnum() or ch in "-_") else "_" for ch in s)
    return keep.strip("_")[:60] or "x"


def _scenario_figure(rec_name: str, scenario: str, traces: Mapping, bound=None):
    """2 x 2 figure of one recording under one scenario (module docstring)."""
    plt = _plt()
    fig, ax = plt.subplots(2, 2, figsize=(12.5, 7.6))
    fig.subplots_adjust(left=0.07, right=0.985, bottom=0.075, top=0.91, wspace=0.2, hspace=0.36)
    (a_soc, a_err), (a_res, a_hist) = ax
    ref_done = False
    res_all = []
    for method, tr in traces.items():
        c = METHOD_COLOURS.get(method, None)
        s = _stride(tr.time_s.size)
        th = (tr.time_s[s] - tr.time_s[0]) / 3600.0
        if not ref_done and tr.soc_ref is not None:
            a_soc.plot(th, 100 * np.asarray(tr.soc_ref)[s], color=METHOD_COLOURS["reference"], lw=1.6,
                       label="reference")
            ref_done = True
        a_soc.plot(th, 100 * np.asarray(tr.soc)[s], color=c, lw=1.1, label=METHOD_LABELS.get(method, method))
        sig = np.asarray(tr.soc_sigma, dtype=float)[s]
        has_sigma = np.all(np.isfinite(sig)) and method != "coulomb"
        if has_sigma:
            a_soc.fill_between(th, 100 * (tr.soc[s] - 3 * sig), 100 * (tr.soc[s] + 3 * sig), color=c, alpha=0.15,
                               lw=0, label=f"{METHOD_LABELS.get(method, method)} +-3 sigma")
        if tr.soc_ref is not None:
            err = 100 * (np.asarray(tr.soc)[s] - np.asarray(tr.soc_ref)[s])
            a_err.plot(th, err, color=c, lw=1.0, label=METHOD_LABELS.get(method, method))
            if has_sigma:
                a_err.fill_between(th, -300 * sig, 300 * sig, color=c, alpha=0.12, lw=0)
        if method != "coulomb" and np.any(np.isfinite(tr.innovation_v)):
            inn = np.asarray(tr.innovation_v, dtype=float)
            a_res.plot(th, 1e3 * inn[s], color=c, lw=0.6, alpha=0.8, label=METHOD_LABELS.get(method, method))
            if np.any(np.isfinite(inn)):
                res_all.append(1e3 * inn[np.isfinite(inn)])
            var = np.asarray(tr.innovation_var_v2, dtype=float)
            ok = np.isfinite(inn) & np.isfinite(var) & (var > 0)
            if ok.sum() > 10:
                nu = inn[ok] / np.sqrt(var[ok])
                nis = float(np.mean(nu ** 2))
                a_hist.hist(np.clip(nu, -6, 6), bins=80, range=(-6, 6), density=True, color=c, alpha=0.45,
                            label=f"{METHOD_LABELS.get(method, method)}: mean NIS {nis:.2f}")
    if bound is not None:
        bt, bs = bound
        bh = (np.asarray(bt) - bt[0]) / 3600.0
        s = _stride(len(bh))
        a_err.plot(bh[s], 300 * np.asarray(bs)[s], color="#7b2d8e", lw=1.2, ls="--",
                   label="+-3 sigma, Cramer-Rao bound (model, fault-free)")
        a_err.plot(bh[s], -300 * np.asarray(bs)[s], color="#7b2d8e", lw=1.2, ls="--")
    for y in (-2, 2):
        a_err.axhline(y, color="#888888", lw=0.8, ls=":")
    z = np.linspace(-6, 6, 400)
    a_hist.plot(z, np.exp(-0.5 * z ** 2) / np.sqrt(2 * np.pi), color="k", lw=1.2, label="N(0, 1)")
    a_soc.set(xlabel="time (h)", ylabel="SOC (%)", title=f"SOC against reference: {rec_name}")
    lo, hi = a_soc.get_ylim()
    a_soc.set_ylim(max(lo, -5.0), min(hi, 105.0))
    a_err.set(xlabel="time (h)", ylabel="SOC error (percentage points)",
              title="error (shaded: filter +-3 sigma; dotted: +-2 points)")
    lim = a_err.get_ylim()
    a_err.set_ylim(max(lim[0], -30), min(lim[1], 30))
    a_res.set(xlabel="time (h)", ylabel="voltage residual (mV)", title="innovation (measured - predicted voltage)")
    if res_all:
        lo, hi = np.nanpercentile(np.concatenate(res_all), [0.2, 99.8])
        pad = 0.3 * max(hi - lo, 1e-3)
        a_res.set_ylim(lo - pad, hi + pad)
    a_hist.set(xlabel="normalised innovation nu / sqrt(S) (-)", ylabel="density (-)",
               title="innovation histogram (clipped at +-6)")
    for a in (a_soc, a_err, a_res, a_hist):
        a.grid(True, alpha=0.3)
        if a.get_legend_handles_labels()[0]:
            a.legend(fontsize=8, loc="best")
    fig.suptitle(f"scenario: {scenario}", fontsize=13)
    return fig


def _rmse_figure(summary, scenarios: Sequence[str], methods: Sequence[str]):
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(12.5, 4.6))
    fig.subplots_adjust(left=0.07, right=0.985, bottom=0.3, top=0.92, wspace=0.2)
    x = np.arange(len(scenarios))
    w = 0.8 / max(1, len(methods))
    for k, m in enumerate(methods):
        sub = summary[summary["method"] == m]
        rm = [sub[sub["scenario"] == s]["rmse_pct"].mean() for s in scenarios]
        mx = [sub[sub["scenario"] == s]["max_abs_pct"].max() for s in scenarios]
        kw = dict(color=METHOD_COLOURS.get(m), label=METHOD_LABELS.get(m, m))
        a1.bar(x + (k - (len(methods) - 1) / 2) * w, rm, w, **kw)
        a2.bar(x + (k - (len(methods) - 1) / 2) * w, mx, w, **kw)
    for a, yl, t in ((a1, "RMSE (percentage points)", "SOC RMSE, mean over recordings"),
                     (a2, "max |error| (percentage points)", "worst SOC error over recordings")):
        a.set_xticks(x, scenarios, rotation=35, ha="right", fontsize=8)
        a.set(ylabel=yl, title=t)
        a.grid(True, axis="y", alpha=0.3)
        a.legend(fontsize=8)
    return fig


def _energy_figure(model, trace=None):
    from socfuse.estimator.filters.energy import soc_c_to_e

    plt = _plt()
    n = 2 if trace is not None else 1
    fig, ax = plt.subplots(1, n, figsize=(6.2 * n, 4.4))
    fig.subplots_adjust(left=0.08, right=0.98, bottom=0.13, top=0.9, wspace=0.25)
    ax = np.atleast_1d(ax)
    z = np.linspace(0, 1, 201)
    for t_c, ls in ((25.0, "-"), (5.0, "--")):
        ze = soc_c_to_e(model, z, t_c)
        ax[0].plot(100 * z, 100 * (np.asarray(ze) - z), ls=ls, color="#1f5fa8", label=f"{t_c:g} degC")
    ax[0].set(xlabel="capacity-based SOC_C (%)", ylabel="SOC_E - SOC_C (percentage points)",
              title="energy-based minus capacity-based SOC, at rest")
    ax[0].grid(True, alpha=0.3)
    ax[0].legend(fontsize=8)
    if trace is not None:
        s = _stride(trace.time_s.size)
        th = (trace.time_s[s] - trace.time_s[0]) / 3600.0
        ax[1].plot(th, 100 * np.asarray(trace.soc)[s], color="#1f5fa8", label="SOC_C (EKF)")
        if trace.soc_e is not None:
            ax[1].plot(th, 100 * np.asarray(trace.soc_e)[s], color="#b03a2e", label="SOC_E (EKF)")
        ax[1].set(xlabel="time (h)", ylabel="SOC (%)", title=f"SOC_C and SOC_E side by side: {trace.name}")
        ax[1].grid(True, alpha=0.3)
        ax[1].legend(fontsize=8)
    return fig


def _scenario_table(bench, model) -> str:
    from socfuse.estimator.analysis.faults import FAULTS

    rows = []
    for sc in bench.scenarios:
        rows.append(f"<tr><td>{html.escape(sc.name)}</td><td><code>{html.escape(sc.spec)}</code></td>"
                    f"<td>{html.escape(sc.describe(model))}</td></tr>")
    out = ['<table class="t"><tr><th>scenario</th><th>spec</th><th>what it does (values as applied)</th></tr>']
    out += rows + ["</table>"]
    out.append('<h3>Fault defaults</h3><table class="t"><tr><th>fault</th><th>unit</th><th>default</th>'
               "<th>effect</th></tr>")
    for k in FAULTS.values():
        out.append(f"<tr><td>{k.name}</td><td>{html.escape(k.unit)}</td><td>{html.escape(k.default_text)}</td>"
                   f"<td>{html.escape(k.text)}</td></tr>")
    out.append("</table><p class='note'>Defaults are in ranges that are common practice for automotive BMS "
               "sensors and models (no source): Hall current-sensor offset about 0.5 % of full scale, gain "
               "error 1 %, a few mV of voltage noise, +-2 degC on the temperature sensor, a 20-point initial "
               "SOC error, 10-20 % capacity fade.</p>")
    return "\n".join(out)


def _settings_table(settings) -> str:
    if settings is None:
        return "<p>Filter settings: the defaults for this model.</p>"
    from dataclasses import asdict

    d = asdict(settings)
    rows = "".join(f"<tr><td>{html.escape(k)}</td><td class='n'>{_fmt_cell(v)[0]}</td></tr>" for k, v in d.items())
    return f'<table class="t"><tr><th>setting</th><th>value</th></tr>{rows}</table>'


def _model_summary(model) -> str:
    items = [("name", model.name or "(unnamed)"), ("capacity_ah", model.capacity_ah),
             ("coulombic_efficiency", model.coulombic_efficiency), ("RC pairs", model.n_rc),
             ("hysteresis", "yes" if model.hysteresis is not None else "no"),
             ("voltage limits (V)", f"{model.v_min_v:g} .. {model.v_max_v:g}"),
             ("OCV source", model.ocv.source or "")]
    rows = "".join(f"<tr><td>{html.escape(k)}</td><td>{_fmt_cell(v)[0]}</td></tr>" for k, v in items)
    return f'<table class="t"><tr><th>cell model</th><th></th></tr>{rows}</table>'


def write_report(out_dir, bench, model, *, settings=None, title: str = "socfuse benchmark report",
                 main_recording: str | None = None, bounds: Mapping | None = None,
                 sections: Sequence[ReportSection] = (), intro_html: str = "", energy: bool = True,
                 max_scenario_figures: int = 12) -> ReportFiles:
    """Write ``report.html``, ``summary.csv`` and the PNG figures into ``out_dir``.

    Parameters
    ----------
    out_dir : path
        Folder (created when missing).  Files are written to temporary names and renamed.
    bench : estimator.bench.BenchResult
    model : CellModel
        The model the filters used (for the scenario values and the energy figure).
    settings : FilterSettings, optional
        Listed in the report.
    title : str
    main_recording : str, optional
        Recording drawn in the per-scenario figures (default: the first with traces).
    bounds : mapping, optional
        ``recording name -> (time_s, sigma)``: the posterior Cramer-Rao SOC sigma (fraction) for
        the fault-free case, drawn as +-3 sigma in the error panels.
    sections : sequence of ReportSection
        Extra sections (tuning, tolerance study) inserted after the summary.
    intro_html : str
        Paragraph(s) shown under the title.
    energy : bool
        Include the SOC_C / SOC_E figure.

    Returns
    -------
    ReportFiles
    """
    from socfuse.estimator.analysis.bench import write_summary_csv
    from socfuse.estimator.cli.main import SAFETY_NOTE

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    summary = bench.summary
    csv_path = out / "summary.csv"
    write_summary_csv(summary, csv_path)
    pngs: list[Path] = []
    body: list[str] = []

    def add_figure(stem: str, fig, caption: str) -> None:
        data = fig if isinstance(fig, (bytes, bytearray)) else figure_png(fig)
        p = out / f"{_safe_stem(stem)}.png"
        write_bytes_replacing(p, bytes(data))
        pngs.append(p)
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        body.append(f'<figure><img alt="{html.escape(caption)}" src="{uri}">'
                    f"<figcaption>{html.escape(caption)}</figcaption></figure>")

    rec_names = list(dict.fromkeys(k[0] for k in bench.traces))
    main = main_recording if main_recording in rec_names else (rec_names[0] if rec_names else None)
    scen_names = [s.name for s in bench.scenarios]
    methods = list(bench.methods)

    body.append('<h2 id="summary">Summary</h2>')
    body.append(f"<p>{len(summary)} runs: {summary['recording'].nunique() if len(summary) else 0} recording(s) x "
                f"{len(scen_names)} scenario(s) x methods {', '.join(methods)}; wall time "
                f"{bench.elapsed_s:.1f} s. Errors are estimate minus reference in percentage points of SOC; "
                "<code>converge_s</code> is the time until the error stays within 2 points to the end "
                "(blank: never). <code>inside_3sigma</code> is the fraction of samples whose error lies "
                "inside the filter's own +-3 sigma; NIS is the mean normalised innovation squared with its "
                "chi-square 95 % band (Bar-Shalom, Li, Kirubarajan 2001).</p>")
    if len(summary):
        add_figure("rmse_by_scenario", _rmse_figure(summary, scen_names, methods),
                   "SOC RMSE and worst error per scenario and method")
        piv = summary.pivot_table(index="scenario", columns="method", values="rmse_pct", aggfunc="mean", sort=False)
        piv = piv.reindex([sc for sc in scen_names if sc in piv.index])
        piv = piv[[m for m in methods if m in piv.columns]].reset_index()
        body.append("<h3>Mean SOC RMSE (percentage points) per scenario and method, over the recordings</h3>")
        body.append(df_to_html(piv, headers={m: METHOD_LABELS.get(m, m) for m in methods}))
        body.append("<h3>All runs</h3>")
        body.append(df_to_html(summary, [c for c in ["recording", "scenario", "method", "rmse_pct", "mae_pct",
                                                     "max_abs_pct", "final_abs_pct", "converge_s", "inside_3sigma",
                                                     "nis_mean", "nis_lo", "nis_hi", "nees_mean", "n_gated",
                                                     "n_reseeds"] if c in summary.columns]))
    if bench.errors:
        body.append("<h3>Runs that failed</h3><ul>" + "".join(
            f"<li>{html.escape(' / '.join(k))}: {html.escape(v)}</li>" for k, v in bench.errors.items()) + "</ul>")
    body.append('<h2 id="scenarios">Fault scenarios</h2>')
    body.append(_scenario_table(bench, model))

    for sec in sections:
        body.append(f'<h2 id="{_safe_stem(sec.title)}">{html.escape(sec.title)}</h2>')
        body.append(sec.html)
        for stem, fig, caption in sec.figures:
            add_figure(stem, fig, caption)

    if main is not None:
        body.append(f'<h2 id="traces">Traces per scenario: {html.escape(main)}</h2>')
        bound = (bounds or {}).get(main)
        for sc in scen_names[:max_scenario_figures]:
            trs = {m: bench.traces[(main, sc, m)] for m in methods if (main, sc, m) in bench.traces}
            if not trs:
                continue
            notes = bench.notes.get((main, sc), ())
            if notes:
                body.append(f"<h3>{html.escape(sc)}</h3><p class='note'>{html.escape('; '.join(notes))}</p>")
            else:
                body.append(f"<h3>{html.escape(sc)}</h3>")
            add_figure(f"soc_{main}_{sc}", _scenario_figure(main, sc, trs, bound),
                       f"{main}, scenario {sc}: SOC, error, voltage residual and normalised innovation")
    if energy:
        tr = None
        if main is not None:
            for sc in scen_names:
                if (main, sc, "ekf") in bench.traces:
                    tr = bench.traces[(main, sc, "ekf")]
                    break
        try:
            fig = _energy_figure(model, tr)
        except (ImportError, ValueError) as e:
            body.append(f"<p class='note'>SOC_E figure skipped: {html.escape(str(e))}</p>")
        else:
            body.append('<h2 id="energy">Capacity-based and energy-based SOC</h2>'
                        "<p>SOC_C counts charge, SOC_E counts the energy left at rest "
                        "(E(z) = Q times the integral of OCV from 0 to z). On an NMC curve SOC_E is lower mid-range "
                        "for the same charge: the upper half of the charge is delivered at a higher voltage.</p>")
            add_figure("soc_c_vs_soc_e", fig, "SOC_E against SOC_C (left) and both over a day (right)")
    body.append('<h2 id="setup">Model and filter settings</h2>')
    body.append(_model_summary(model))
    body.append(_settings_table(settings))
    body.append('<h2 id="safety">Safety</h2>')
    body.append(f'<div class="caution"><p><b>{html.escape(SAFETY_NOTE)}</b></p><p>{html.escape(SAFETY_PARAGRAPH)}'
                "</p></div>")
    nav = " ".join(f'<a href="#{a}">{t}</a>' for a, t in (("summary", "summary"), ("scenarios", "scenarios"),
                                                          ("traces", "traces"), ("energy", "SOC_E"),
                                                          ("setup", "settings"), ("safety", "safety")))
    page = ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body><main>"
            f"<h1>{html.escape(title)}</h1><p class='sub'>socfuse report</p><nav>{nav}</nav>"
            f"<div class='caution'>{html.escape(SAFETY_NOTE)}</div>{intro_html}" + "\n".join(body)
            + "</main></body></html>\n")
    html_path = out / "report.html"
    write_bytes_replacing(html_path, page.encode("utf-8"))
    return ReportFiles(html_path, csv_path, tuple(pngs))
