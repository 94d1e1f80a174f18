"""One self-contained HTML report of a benchmark, plus its PNG figures and ``summary.csv``.

The HTML holds everything inline: the CSS below (our own) and every figure as a base64
``data:image/png`` URI, so the file can be mailed or attached to a review as it is.  Figures are
:class:`matplotlib.figure.Figure` objects rendered to PNG without pyplot, so writing a report never
touches the caller's Matplotlib backend.  SOC is shown in percent, time in hours, voltage residuals
in millivolts.

Order of the page (a design reviewer reads the top first):

1. **Verdict**: per recording and scenario which method has the lower SOC error and by how much
   (RMSE, P95 and maximum error, percentage points), and where the EKF loses, with the likely
   reason read from the numbers (a fault in a sensor or table the filter trusts, a cold
   recording, model error shown by the innovations), in generated sentences.  The design is our
   own: the better method is named in words and with a shape, and coloured from the Okabe-Ito
   palette (Okabe and Ito, *Color Universal Design*, 2008), which stays distinct under the common
   colour-vision deficiencies; nothing relies on red against green.
2. **Per recording**: a table of every run with one number format per column and units in the
   header, and a figure of RMSE, P95 and maximum error per scenario and method.
3. The fault scenarios, the caller's sections (tuning, tolerance study, ...), and per scenario
   (on every recording whose traces were kept) a 2 x 2 figure: SOC against the reference with the
   EKF's +-3 sigma band; the SOC error with the filter's +-3 sigma, the +-2 point band, the
   convergence time and the excursions it forgives shaded, and, when given, the +-3 sigma of
   the posterior Cramer-Rao bound (Tichavsky, Muravchik, Nehorai, IEEE TSP 46, 1998); the
   voltage residual (innovation); the histogram of the normalised innovation against N(0, 1)
   with the mean NIS (Bar-Shalom, Li, Kirubarajan 2001, ch. 5.4).  Then SOC_C against SOC_E,
   the model and settings, and the safety caution.

Coverage (``inside_3sigma``), NIS and NEES are shown only for methods that carry a filter sigma
(:data:`estimator.analysis.metrics.SIGMA_METHODS`); the coulomb baseline's cells are blank.

Layout rules (checked in a browser by ``tests/test_report_browser.py``): monospace blocks wrap,
wide tables scroll inside their own box, and the page never grows wider than the window.
"""
from __future__ import annotations

import base64
import html
import io
import math
import sys
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Mapping, Sequence

import numpy as np
from socfuse.models.fileio import write_bytes_replacing

__all__ = ["ReportSection", "ReportFiles", "Verdict", "write_report", "figure_png", "df_to_html", "verdicts",
           "verdict_sentences", "SAFETY_PARAGRAPH", "METHOD_COLOURS", "COLUMN_FORMATS", "TIE_POINTS"]

# Okabe-Ito colour-universal-design palette (Okabe and Ito 2008): blue, vermillion, bluish green
METHOD_COLOURS = {"ekf": "#0072B2", "ukf": "#009E73", "coulomb": "#D55E00", "rts": "#CC79A7",
                  "reference": "#111111"}
METHOD_MARKERS = {"ekf": "o", "ukf": "^", "coulomb": "s", "rts": "D"}
METHOD_LINES = {"ekf": "-", "ukf": "-.", "coulomb": "--", "rts": ":"}
METHOD_LABELS = {"ekf": "EKF", "ukf": "UKF (sigma-point)", "coulomb": "coulomb + OCV reseed", "rts": "RTS smoother"}
METHOD_GLYPHS = {"ekf": "\u25cf", "ukf": "\u25b2", "coulomb": "\u25a0", "rts": "\u25c6"}
MAX_PLOT_POINTS = 2000
#: Two methods are "about equal" when their RMSEs differ by at most this many points, or 5 %.
TIE_POINTS = 0.05
TIE_FRACTION = 0.05
#: A recording whose mean temperature is this far from 25 degC is called cold or hot in the verdict.
TEMPERATURE_FLAG_C = 10.0

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
*{box-sizing:border-box}
body{font:15px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d2530;margin:0;background:#f4f5f7}
main{max-width:1180px;margin:0 auto;padding:18px 28px 60px;background:#fff;overflow-wrap:anywhere}
h1{font-size:26px;margin:10px 0 4px}h2{font-size:20px;margin:34px 0 8px;border-bottom:2px solid #d8dde5;padding-bottom:3px}
h3{font-size:16px;margin:22px 0 6px}
.sub{color:#5a6573;margin:0 0 14px}
.caution{border-left:5px solid #444;background:#f1f1f1;padding:8px 14px;margin:14px 0}
.note{color:#5a6573;font-size:13px}
pre{white-space:pre-wrap;overflow-wrap:anywhere;word-break:break-word;max-width:100%;background:#f6f7f9;
 border:1px solid #e2e6ec;padding:8px 10px;font-size:12.5px}
.scroll{max-width:100%;overflow-x:auto;margin:6px 0 12px}
table.t{border-collapse:collapse;font-size:13px;margin:6px 0 12px;display:block;max-width:100%;overflow-x:auto}
.scroll table.t{margin:0}
table.t th{background:#e9edf2;text-align:left;padding:3px 8px;border-bottom:1px solid #c5ccd6;vertical-align:bottom}
table.t td,table.t th{overflow-wrap:normal;word-break:normal}
table.t td{padding:2px 8px;border-bottom:1px solid #eceff3;font-variant-numeric:tabular-nums}
table.t td.n{text-align:right;white-space:nowrap}
table.t tr:hover td{background:#f6f8fb}
figure{margin:10px 0 22px}figure img{max-width:100%;height:auto;border:1px solid #e2e6ec}
figcaption{font-size:13px;color:#46505c;margin-top:4px}
nav a{margin-right:12px;font-size:13px}
code{background:#f0f2f5;padding:0 3px;border-radius:3px;overflow-wrap:anywhere}
.verdict{border:2px solid #1d2530;padding:8px 16px 10px;margin:14px 0}
.verdict p.head{font-size:16px;margin:6px 0}
.verdict ul{margin:4px 0 8px 0;padding-left:20px}
.win{font-weight:600;white-space:nowrap}
.win-ekf{background:#d9e8f5}.win-ukf{background:#d5efe6}.win-coulomb{background:#f8e0cf}.win-rts{background:#f3e1ec}
.win-tie{background:#ececec}
.lose{border-left:4px solid #D55E00;padding-left:8px}
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


@dataclass(frozen=True)
class Verdict:
    """Which method wins one recording x scenario, and by how much.

    Attributes
    ----------
    recording, scenario : str
    winner : str
        Method with the lowest RMSE, or ``"tie"`` when the best two are about equal
        (:data:`TIE_POINTS`, 5 %).
    figures : dict
        ``method -> (rmse_pct, p95_abs_pct, max_abs_pct)``, percentage points.
    ekf_loses : bool
        The EKF is present and the coulomb baseline has a clearly lower RMSE.
    reasons : tuple of str
        Likely reasons when the EKF loses (or has the larger maximum error).
    sentence : str
        One plain sentence with the numbers.
    leaders : tuple of str
        The methods within the tie margin of the lowest RMSE (one when there is a clear winner).
    """

    recording: str
    scenario: str
    winner: str
    figures: dict
    ekf_loses: bool
    reasons: tuple
    sentence: str
    leaders: tuple = ()


def figure_png(fig, dpi: int = 110) -> bytes:
    """PNG bytes of a Matplotlib figure.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        Rendered with Matplotlib's Agg canvas; a figure managed by pyplot is closed afterwards.
    dpi : int
        Resolution, dots per inch.

    Returns
    -------
    bytes
        The PNG file.
    """
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    plt = sys.modules.get("matplotlib.pyplot")
    if plt is not None and getattr(fig, "number", None) is not None:
        plt.close(fig)  # only figures pyplot made; never import or switch the user's backend
    return buf.getvalue()


def _figure(figsize):
    from matplotlib.figure import Figure

    return Figure(figsize=figsize)


# ---------------------------------------------------------------------------------- number formats
def _pct_fraction(v: float) -> str:
    return f"{100.0 * v:.1f}"


#: Column -> (header with unit, format).  One format per column; blank for NaN/None.
COLUMN_FORMATS: dict[str, tuple[str, str | Callable[[float], str]]] = {
    "rmse_pct": ("RMSE (points)", "{:.2f}"),
    "mae_pct": ("MAE (points)", "{:.2f}"),
    "p95_abs_pct": ("P95 |error| (points)", "{:.2f}"),
    "max_abs_pct": ("max |error| (points)", "{:.2f}"),
    "final_abs_pct": ("final |error| (points)", "{:.2f}"),
    "converge_s": ("converged after (s)", "{:.0f}"),
    "n_excursions": ("excursions after (n)", "{:.0f}"),
    "excursion_s": ("time outside after (s)", "{:.0f}"),
    "inside_3sigma": ("inside own +-3 sigma (%)", _pct_fraction),
    "nis_mean": ("mean NIS (-)", "{:.3f}"),
    "nis_lo": ("NIS 95 % low (-)", "{:.3f}"),
    "nis_hi": ("NIS 95 % high (-)", "{:.3f}"),
    "nees_mean": ("mean NEES (-)", "{:.2f}"),
    "n_gated": ("gated (samples)", "{:.0f}"),
    "n_reseeds": ("reseeds (n)", "{:.0f}"),
    "n_gap": ("in or after a logging gap (samples)", "{:.0f}"),
    "n_envelope": ("outside the temperature envelope (samples)", "{:.0f}"),
    "n_fallback": ("fallen back to counting (samples)", "{:.0f}"),
    "n_samples": ("samples (n)", "{:.0f}"),
    "duration_s": ("duration (s)", "{:.0f}"),
}


def _is_blank(v) -> bool:
    if v is None:
        return True
    try:
        return isinstance(v, (float, np.floating)) and not math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _infer_format(values) -> str | None:
    """One format for a column of unknown meaning (None: not numeric)."""
    nums = []
    for v in values:
        if _is_blank(v):
            continue
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.integer, np.floating)):
            return None
        nums.append(float(v))
    if not nums:
        return "{:.3g}"
    a = np.abs(np.asarray(nums))
    if np.all(a == np.round(a)) and np.all(a < 1e9):
        return "{:.0f}"
    nz = a[a > 0]
    lo, hi = (float(nz.min()), float(nz.max())) if nz.size else (1.0, 1.0)
    if hi >= 1e6 or lo < 1e-3:
        return "{:.3e}"
    decimals = int(min(6, max(0, 2 - math.floor(math.log10(lo)))))
    return "{:." + str(decimals) + "f}"


def _apply(fmt, v) -> str:
    if _is_blank(v):
        return ""
    return fmt(float(v)) if callable(fmt) else fmt.format(float(v))


def df_to_html(df, columns: Sequence[str] | None = None, headers: Mapping[str, str] | None = None,
               formats: Mapping[str, str | Callable[[float], str]] | None = None) -> str:
    """A pandas DataFrame as a compact HTML table inside a horizontally scrolling box.

    Parameters
    ----------
    df : pandas.DataFrame
    columns : sequence of str, optional
        Columns to show, in order (default all).
    headers : mapping, optional
        Column -> header text; default the unit-bearing headers of :data:`COLUMN_FORMATS`.
    formats : mapping, optional
        Column -> format string (``"{:.2f}"``) or callable; default :data:`COLUMN_FORMATS`, else
        one format inferred per column (integers, fixed decimals or scientific for the whole column).

    Returns
    -------
    str
        HTML; numbers right-aligned, NaN/None blank, text escaped.
    """
    cols = list(columns) if columns is not None else list(df.columns)
    headers = dict(headers or {})
    formats = dict(formats or {})
    fmt: dict = {}
    for c in cols:
        if c in formats:
            fmt[c] = formats[c]
        elif c in COLUMN_FORMATS:
            fmt[c] = COLUMN_FORMATS[c][1]
        else:
            fmt[c] = _infer_format(df[c].tolist())
    head = "".join(f"<th>{html.escape(str(headers.get(c, COLUMN_FORMATS.get(c, (c,))[0])))}</th>" for c in cols)
    out = ['<div class="scroll"><table class="t"><tr>' + head + "</tr>"]
    for _, row in df.iterrows():
        cells = []
        for c in cols:
            v = row[c]
            if fmt[c] is None or isinstance(v, str):
                text = "" if _is_blank(v) else html.escape(str(v))
                cells.append(f"<td>{text}</td>")
            else:
                cells.append(f'<td class="n">{_apply(fmt[c], v)}</td>')
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table></div>")
    return "\n".join(out)


# ---------------------------------------------------------------------------------- verdict
def _fault_names(spec) -> list[str]:
    if not isinstance(spec, str) or not spec or spec == "nominal":
        return []
    return [part.split("=")[0].strip() for part in spec.split("+") if part and not part.startswith("seed")]


_TRUSTED_FAULTS = {
    "toffset": "the temperature sensor reads high, and the EKF trusts it for its OCV and resistance look-ups "
               "while the counter barely uses temperature",
    "ocv_offset": "model error by construction: the OCV table the EKF trusts is offset, and the EKF pulls SOC "
                  "towards that wrong curve all day while the counter only uses it at a reseed",
    "ocv_scale": "model error by construction: the OCV table the EKF trusts is scaled, and the EKF pulls SOC "
                 "towards that wrong curve",
    "vnoise": "the voltage sensor the EKF trusts is noisier than its settings say",
    "fade": "model error: the cell has lost capacity the filter's model does not know",
    "vdrop": "voltage samples are missing, so the EKF runs open-loop for a part of the day",
    "rowdrop": "rows are missing, so both methods integrate over longer steps",
}


def _rec_temperature(recordings, name):
    if not recordings:
        return None
    rec = recordings.get(name) if isinstance(recordings, Mapping) else None
    if rec is None:
        return None
    t = getattr(rec, "temperature_c", None)
    if t is None:
        return None
    t = np.asarray(t, dtype=float)
    t = t[np.isfinite(t)]
    return (float(t.mean()), float(t.min()), float(t.max())) if t.size else None


def _reasons(row_ekf, spec, temp) -> list[str]:
    out = []
    for f in _fault_names(spec):
        if f in _TRUSTED_FAULTS:
            out.append(_TRUSTED_FAULTS[f])
    if temp is not None and abs(temp[0] - 25.0) >= TEMPERATURE_FLAG_C:
        word = "cold" if temp[0] < 25.0 else "hot"
        out.append(f"temperature: a {word} recording (mean {temp[0]:.1f} degC, {temp[1]:.1f} to {temp[2]:.1f}), "
                   "where the model's resistances and OCV are least certain and the voltage the EKF fuses is "
                   "predicted worst")
    nis, lo, hi = (row_ekf.get(k, math.nan) for k in ("nis_mean", "nis_lo", "nis_hi"))
    cov = row_ekf.get("inside_3sigma", math.nan)
    evidence = []
    if all(isinstance(x, float) and math.isfinite(x) for x in (nis, lo, hi)) and not (lo <= nis <= hi):
        evidence.append(f"mean NIS {nis:.2f} outside its 95 % band {lo:.3f} to {hi:.3f}")
    if isinstance(cov, float) and math.isfinite(cov) and cov < 0.95:
        evidence.append(f"the error inside the filter's own +-3 sigma only {100 * cov:.0f} % of the time "
                        "(99.7 % expected)")
    if evidence or not out:
        out.append("model error: the voltage the EKF fuses is predicted by an imperfect model"
                   + (" (" + "; ".join(evidence) + ")" if evidence else ""))
    return out


def _fig3(vals) -> str:
    return " vs ".join(f"{v:.2f}" for v in vals)


def verdicts(summary, recordings=None) -> list[Verdict]:
    """One :class:`Verdict` per recording x scenario of a benchmark summary.

    Parameters
    ----------
    summary : pandas.DataFrame
        ``summary.csv`` rows (``recording, scenario, method, rmse_pct, p95_abs_pct, max_abs_pct``,
        optionally ``faults, nis_mean, nis_lo, nis_hi, inside_3sigma``).
    recordings : mapping, optional
        ``name -> Recording``; its ``temperature_c`` lets the verdict name a cold or hot recording.

    Returns
    -------
    list of Verdict
        In the order of the summary.
    """
    out: list[Verdict] = []
    if summary is None or not len(summary):
        return out
    for (rec, sc), g in summary.groupby(["recording", "scenario"], sort=False):
        figs = {}
        rows = {}
        for _, r in g.iterrows():
            m = str(r["method"])
            p95 = float(r["p95_abs_pct"]) if "p95_abs_pct" in g.columns else math.nan
            figs[m] = (float(r["rmse_pct"]), p95, float(r["max_abs_pct"]))
            rows[m] = {k: r[k] for k in g.columns}
        order = sorted(figs, key=lambda m: figs[m][0])
        best = order[0]
        a = figs[best][0]
        leaders = tuple(m for m in order if figs[m][0] - a <= max(TIE_POINTS, TIE_FRACTION * figs[m][0]))
        winner = best if len(leaders) == 1 else "tie"
        spec = str(rows[best].get("faults", "") or "")
        ekf_loses = False
        reasons: tuple = ()
        if "ekf" in figs and "coulomb" in figs:
            e, c = figs["ekf"], figs["coulomb"]
            d = c[0] - e[0]
            tie = abs(d) <= max(TIE_POINTS, TIE_FRACTION * max(e[0], c[0]))
            head = (f"{rec}, {sc}: ")
            nums = (f"RMSE {_fig3((e[0], c[0]))}, P95 {_fig3((e[1], c[1]))}, max {_fig3((e[2], c[2]))} points "
                    "(EKF vs baseline)")
            if tie:
                text = head + f"EKF and baseline about equal; {nums}."
            elif d > 0:
                ratio = c[0] / e[0] if e[0] > 0 else math.inf
                text = head + f"the EKF wins by {d:.2f} points RMSE ({ratio:.1f}x lower); {nums}."
            else:
                ekf_loses = True
                text = head + f"the baseline wins by {-d:.2f} points RMSE; {nums}."
            temp = _rec_temperature(recordings, rec)
            if ekf_loses:
                reasons = tuple(_reasons(rows["ekf"], spec, temp))
                text += " Likely reason: " + "; ".join(reasons) + "."
            elif e[2] > c[2] + max(TIE_POINTS, TIE_FRACTION * c[2]):
                reasons = tuple(_reasons(rows["ekf"], spec, temp))
                text += (f" But the EKF's worst error is larger ({e[2]:.2f} vs {c[2]:.2f} points); likely reason: "
                         + "; ".join(reasons) + ".")
            for extra in [m for m in order if m not in ("ekf", "coulomb")]:
                x = figs[extra]
                text += (f" {METHOD_LABELS.get(extra, extra)}: RMSE {x[0]:.2f}, P95 {x[1]:.2f}, "
                         f"max {x[2]:.2f} points.")
        else:
            text = f"{rec}, {sc}: " + "; ".join(
                f"{METHOD_LABELS.get(m, m)} RMSE {figs[m][0]:.2f}, P95 {figs[m][1]:.2f}, max {figs[m][2]:.2f} points"
                for m in order) + "."
        out.append(Verdict(str(rec), str(sc), winner, figs, ekf_loses, reasons, text, leaders))
    return out


def verdict_sentences(summary, recordings=None) -> list[str]:
    """Headline sentences over all verdicts (counts of wins and losses, worst case, coverage).

    Parameters
    ----------
    summary : pandas.DataFrame
        ``summary.csv`` rows.
    recordings : mapping, optional
        ``name -> Recording`` (temperatures).

    Returns
    -------
    list of str
        Plain sentences, numbers included.
    """
    vs = verdicts(summary, recordings)
    pairs = [v for v in vs if "ekf" in v.figures and "coulomb" in v.figures]
    out = []
    if pairs:
        tol = [max(TIE_POINTS, TIE_FRACTION * max(v.figures["ekf"][0], v.figures["coulomb"][0])) for v in pairs]
        wins = sum(1 for v, t in zip(pairs, tol) if v.figures["coulomb"][0] - v.figures["ekf"][0] > t)
        loses = [v for v in pairs if v.ekf_loses]
        ties = len(pairs) - wins - len(loses)
        n_rec = len({v.recording for v in pairs})
        out.append(f"Over {len(pairs)} recording x scenario cases ({n_rec} recording(s)) the EKF has the lower "
                   f"SOC RMSE in {wins}, the coulomb baseline in {len(loses)}, and they are about equal in {ties} "
                   f"(within {TIE_POINTS:.2f} points or {100 * TIE_FRACTION:.0f} %).")
        spec = {(str(r["recording"]), str(r["scenario"])): str(r.get("faults", "") or "")
                for _, r in summary.iterrows()} if "faults" in summary.columns else {}
        faulty = [(v, t) for v, t in zip(pairs, tol) if _fault_names(spec.get((v.recording, v.scenario), ""))]
        if faulty and len(faulty) < len(pairs):
            fw = sum(1 for v, t in faulty if v.figures["coulomb"][0] - v.figures["ekf"][0] > t)
            out.append(f"Under injected faults it is lower in {fw} of {len(faulty)} cases; without a fault in "
                       f"{wins - fw} of {len(pairs) - len(faulty)}.")
        if loses:
            out.append("The EKF loses on: " + "; ".join(
                f"{v.recording} / {v.scenario} ({v.figures['ekf'][0]:.2f} vs {v.figures['coulomb'][0]:.2f} points)"
                for v in loses) + ".")
        worst = max(pairs, key=lambda v: v.figures["ekf"][2])
        out.append(f"The EKF's largest error is {worst.figures['ekf'][2]:.2f} points ({worst.recording} / "
                   f"{worst.scenario}); the baseline's is "
                   f"{max(v.figures['coulomb'][2] for v in pairs):.2f} points.")
    if "inside_3sigma" in summary.columns:
        cov = summary.loc[summary["method"] == "ekf", "inside_3sigma"].astype(float)
        cov = cov[np.isfinite(cov)]
        if len(cov):
            lo, med = float(cov.min()), float(cov.median())
            if med < 0.95:
                out.append(f"The EKF's own +-3 sigma covered its true error in a median {100 * med:.0f} % of the "
                           f"samples (lowest {100 * lo:.0f} %; a consistent filter: 99.7 %): its sigma is "
                           "optimistic here, so do not read it as a bound.")
            else:
                out.append(f"The EKF's own +-3 sigma covered its true error in a median {100 * med:.1f} % of the "
                           f"samples (lowest {100 * lo:.1f} %; a consistent filter: 99.7 %).")
    return out


def _verdict_html(summary, recordings) -> str:
    vs = verdicts(summary, recordings)
    if not vs:
        return "<p>No runs to judge.</p>"
    heads = verdict_sentences(summary, recordings)
    parts = ['<div class="verdict">'] + [f'<p class="head">{html.escape(s)}</p>' for s in heads]
    methods = sorted({m for v in vs for m in v.figures}, key=lambda m: (m != "ekf", m != "coulomb", m))
    cols = "".join(f"<th>{html.escape(METHOD_LABELS.get(m, m))}<br>{q} (points)</th>"
                   for q in ("RMSE", "P95", "max") for m in methods)
    rows = []
    for v in vs:
        if v.winner == "tie":
            names = " = ".join(f"{METHOD_GLYPHS.get(m, '')} {METHOD_LABELS.get(m, m)}" for m in v.leaders)
            win = f'<td class="win win-tie">{html.escape(names)} (about equal)</td>'
        else:
            win = (f'<td class="win win-{html.escape(v.winner)}">{METHOD_GLYPHS.get(v.winner, "")} '
                   f"{html.escape(METHOD_LABELS.get(v.winner, v.winner))}</td>")
        nums = "".join(f'<td class="n">{v.figures[m][q]:.2f}</td>' if m in v.figures and math.isfinite(v.figures[m][q])
                       else '<td class="n"></td>' for q in range(3) for m in methods)
        rows.append(f"<tr><td>{html.escape(v.recording)}</td><td>{html.escape(v.scenario)}</td>{win}{nums}</tr>")
    parts.append('<div class="scroll"><table class="t"><tr><th>recording</th><th>scenario</th><th>lower RMSE</th>'
                 + cols + "</tr>" + "".join(rows) + "</table></div>")
    parts.append("<ul>" + "".join(f'<li class="{"lose" if v.ekf_loses or v.reasons else ""}">'
                                  f"{html.escape(v.sentence)}</li>" for v in vs) + "</ul>")
    parts.append("<p class='note'>Errors are estimate minus reference, percentage points of SOC. "
                 "Shapes and words name the better method; colours (Okabe-Ito palette) only repeat them. "
                 "Reasons are read from the numbers: the scenario's fault, the recording's temperature and the "
                 "EKF's innovation and coverage statistics; they are likely causes, not proof.</p></div>")
    return "\n".join(parts)


# ---------------------------------------------------------------------------------- figures
def _stride(n: int) -> slice:
    return slice(None, None, max(1, int(math.ceil(n / MAX_PLOT_POINTS))))


def _safe_stem(s: str) -> str:
    keep = "".join(ch if (ch.isalnum() or ch in "-_") else "_" for ch in s)
    return keep.strip("_")[:60] or "x"


def _label(method: str) -> str:
    return METHOD_LABELS.get(method, method)


def _scenario_figure(rec_name: str, scenario: str, traces: Mapping, bound=None):
    """2 x 2 figure of one recording under one scenario (module docstring)."""
    from socfuse.estimator.analysis.metrics import converge_time_s, excursions

    fig = _figure((12.5, 7.6))
    fig.subplots_adjust(left=0.07, right=0.985, bottom=0.075, top=0.91, wspace=0.2, hspace=0.36)
    (a_soc, a_err), (a_res, a_hist) = fig.subplots(2, 2)
    ref_done = False
    res_all = []
    notes = []
    for method, tr in traces.items():
        c = METHOD_COLOURS.get(method, None)
        ls = METHOD_LINES.get(method, "-")
        s = _stride(tr.time_s.size)
        t0 = tr.time_s[0]
        th = (tr.time_s[s] - t0) / 3600.0
        if not ref_done and tr.soc_ref is not None:
            a_soc.plot(th, 100 * np.asarray(tr.soc_ref)[s], color=METHOD_COLOURS["reference"], lw=1.6,
                       label="reference")
            ref_done = True
        a_soc.plot(th, 100 * np.asarray(tr.soc)[s], color=c, ls=ls, lw=1.1, label=_label(method))
        sig = np.asarray(tr.soc_sigma, dtype=float)[s]
        has_sigma = method in ("ekf", "ukf", "rts") and np.all(np.isfinite(sig))
        if has_sigma:
            a_soc.fill_between(th, 100 * (tr.soc[s] - 3 * sig), 100 * (tr.soc[s] + 3 * sig), color=c, alpha=0.15,
                               lw=0, label=f"{_label(method)} +-3 sigma")
        if tr.soc_ref is not None:
            e_full = np.asarray(tr.soc, dtype=float) - np.asarray(tr.soc_ref, dtype=float)
            a_err.plot(th, 100 * e_full[s], color=c, ls=ls, lw=1.0, label=_label(method))
            if has_sigma:
                a_err.fill_between(th, -300 * sig, 300 * sig, color=c, alpha=0.12, lw=0)
            ok = np.isfinite(e_full)
            if ok.any():
                conv = converge_time_s(tr.time_s[ok], e_full[ok])
                exc = excursions(tr.time_s[ok], e_full[ok], after_s=conv)
                if conv is not None:
                    a_err.axvline(conv / 3600.0, color=c, lw=1.0, ls=":")
                for x in exc:
                    a_err.axvspan((x.start_s - t0) / 3600.0, max((x.end_s - t0) / 3600.0, (x.start_s - t0) / 3600.0
                                                                + 0.003), color=c, alpha=0.25, lw=0)
                notes.append(f"{_label(method)}: " + ("never within 2 points to the end" if conv is None else
                                                      f"converged {conv:.0f} s, {len(exc)} excursion(s)"))
        if method in ("ekf", "ukf", "rts") and np.any(np.isfinite(tr.innovation_v)):
            inn = np.asarray(tr.innovation_v, dtype=float)
            a_res.plot(th, 1e3 * inn[s], color=c, lw=0.6, alpha=0.8, label=_label(method))
            res_all.append(1e3 * inn[np.isfinite(inn)])
            var = np.asarray(tr.innovation_var_v2, dtype=float)
            ok = np.isfinite(inn) & np.isfinite(var) & (var > 0)
            if ok.sum() > 10:
                nu = inn[ok] / np.sqrt(var[ok])
                nis = float(np.mean(nu ** 2))
                a_hist.hist(np.clip(nu, -6, 6), bins=80, range=(-6, 6), density=True, color=c, alpha=0.45,
                            label=f"{_label(method)}: mean NIS {nis:.2f}")
    if bound is not None:
        bt, bs = bound
        bh = (np.asarray(bt) - bt[0]) / 3600.0
        s = _stride(len(bh))
        a_err.plot(bh[s], 300 * np.asarray(bs)[s], color="#444444", lw=1.2, ls=(0, (5, 2)),
                   label="+-3 sigma, Cramer-Rao bound (model, fault-free)")
        a_err.plot(bh[s], -300 * np.asarray(bs)[s], color="#444444", lw=1.2, ls=(0, (5, 2)))
    for y in (-2, 2):
        a_err.axhline(y, color="#888888", lw=0.8, ls=":")
    z = np.linspace(-6, 6, 400)
    a_hist.plot(z, np.exp(-0.5 * z ** 2) / np.sqrt(2 * np.pi), color="k", lw=1.2, label="N(0, 1)")
    a_soc.set(xlabel="time (h)", ylabel="SOC (%)", title=f"SOC against reference: {rec_name}")
    lo, hi = a_soc.get_ylim()
    a_soc.set_ylim(max(lo, -5.0), min(hi, 105.0))
    a_err.set(xlabel="time (h)", ylabel="SOC error (percentage points)")
    a_err.set_title("error (band: own +-3 sigma; dotted: 2 points, converged; shaded: excursions)", fontsize=10)
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
    fig.suptitle(f"{rec_name}, scenario: {scenario}", fontsize=13)
    return fig, notes


def _recording_figure(summary, rec: str, scenarios: Sequence[str], methods: Sequence[str]):
    """RMSE, P95 and max error per scenario and method of one recording (dot plot, log scale)."""
    sub = summary[summary["recording"] == rec]
    scen = [s for s in scenarios if s in set(sub["scenario"])] or list(dict.fromkeys(sub["scenario"]))
    fig = _figure((12.5, 0.9 + 0.36 * max(3, len(scen))))
    fig.subplots_adjust(left=0.17, right=0.99, bottom=0.2 if len(scen) < 5 else 0.12, top=0.86, wspace=0.08)
    axes = fig.subplots(1, 3, sharey=True)
    y = np.arange(len(scen))
    quant = (("rmse_pct", "RMSE"), ("p95_abs_pct", "P95 |error|"), ("max_abs_pct", "max |error|"))
    for a, (col, title) in zip(axes, quant):
        if col not in sub.columns:
            continue
        for k, m in enumerate(methods):
            mm = sub[sub["method"] == m]
            vals = [mm.loc[mm["scenario"] == s, col].astype(float).mean() for s in scen]
            a.plot(np.maximum(vals, 1e-3), y + (k - (len(methods) - 1) / 2) * 0.18, ls="none",
                   marker=METHOD_MARKERS.get(m, "o"), color=METHOD_COLOURS.get(m), ms=6, label=_label(m))
        a.set_xscale("log")
        a.axvline(2.0, color="#888888", lw=0.8, ls=":")
        a.set(xlabel=f"{title} (percentage points, log)", title=title)
        a.grid(True, axis="x", alpha=0.3, which="both")
    axes[0].set_yticks(y, scen, fontsize=8)
    axes[0].invert_yaxis()
    axes[0].legend(fontsize=8, loc="best")
    fig.suptitle(f"SOC error per scenario: {rec} (dotted: 2 points)", fontsize=12)
    return fig


def _usable_temperatures(model) -> np.ndarray:
    """Temperature axis of the usable-capacity panel: the model's own range widened to 0..40 degC."""
    pts = [0.0, 40.0]
    for a in (model.ocv.temperature_c, model.r0_ohm.temperature_c):
        if a is not None:
            pts += [float(np.min(a)), float(np.max(a))]
    return np.linspace(min(pts), max(pts), 21)


def _energy_figure(model, trace=None, rec=None):
    from socfuse.estimator.filters.energy import soc_c_to_e
    from socfuse.models.identify.usable import cutoff_soc, usable_soc

    n = 3 if trace is not None else 2
    fig = _figure((5.4 * n, 4.4))
    fig.subplots_adjust(left=0.06, right=0.98, bottom=0.13, top=0.9, wspace=0.28)
    ax = np.atleast_1d(fig.subplots(1, n))
    # usable capacity to the cut-off at temperature and load (steady-state Thevenin estimate,
    # models.identify.usable; SOC stays on the low-rate scale)
    temps = _usable_temperatures(model)
    for c_rate, ls in ((0.5, "-"), (1.0, "--"), (2.0, ":")):
        q = [(1.0 - cutoff_soc(model, float(t), c_rate * model.capacity_ah)) * model.capacity_ah for t in temps]
        ax[-1].plot(temps, q, ls=ls, color=METHOD_COLOURS["ekf"], label=f"{c_rate:g}C steady")
    ax[-1].axhline(model.capacity_ah, color="0.5", lw=0.8, label="low-rate capacity")
    meas = ((model.provenance or {}).get("usable_capacity") or {}).get("measured") or []
    if meas:
        ax[-1].plot([r["temperature_c"] for r in meas], [r["usable_ah"] for r in meas], "o",
                    color=METHOD_COLOURS["reference"], label="measured (pulse tests, to cut-off)")
    ax[-1].set(xlabel="cell temperature (degC)", ylabel="usable charge from full (Ah)",
               title=f"usable capacity to {model.v_min_v:.3g} V")
    ax[-1].grid(True, alpha=0.3)
    ax[-1].legend(fontsize=8)
    z = np.linspace(0, 1, 201)
    for t_c, ls in ((25.0, "-"), (5.0, "--")):
        ze = soc_c_to_e(model, z, t_c)
        ax[0].plot(100 * z, 100 * (np.asarray(ze) - z), ls=ls, color=METHOD_COLOURS["ekf"], label=f"{t_c:g} degC")
    ax[0].set(xlabel="capacity-based SOC_C (%)", ylabel="SOC_E - SOC_C (percentage points)",
              title="energy-based minus capacity-based SOC, at rest")
    ax[0].grid(True, alpha=0.3)
    ax[0].legend(fontsize=8)
    if trace is not None:
        s = _stride(trace.time_s.size)
        th = (trace.time_s[s] - trace.time_s[0]) / 3600.0
        ax[1].plot(th, 100 * np.asarray(trace.soc)[s], color=METHOD_COLOURS["ekf"], label="SOC_C (EKF)")
        if trace.soc_e is not None:
            ax[1].plot(th, 100 * np.asarray(trace.soc_e)[s], color=METHOD_COLOURS["coulomb"], ls="--",
                       label="SOC_E (EKF)")
        if trace.soc_ref is not None:
            ax[1].plot(th, 100 * np.asarray(trace.soc_ref)[s], color=METHOD_COLOURS["reference"], lw=0.9,
                       label="SOC_C reference")
        if rec is not None and getattr(rec, "temperature_c", None) is not None and rec.n == trace.time_s.size:
            i = np.asarray(rec.current_a, dtype=float)
            load = float(np.mean(i[i > 0])) if np.any(i > 0) else 0.0
            u = usable_soc(model, np.asarray(trace.soc)[s], np.asarray(rec.temperature_c, dtype=float)[s], load)
            ax[1].plot(th, 100 * u, color="0.35", ls="-.", lw=0.9,
                       label=f"usable SOC at the cell temperature, {load:.2g} A")
        ax[1].set(xlabel="time (h)", ylabel="SOC (%)", title=f"SOC_C and SOC_E side by side: {trace.name}")
        ax[1].grid(True, alpha=0.3)
        ax[1].legend(fontsize=8)
    return fig


# ---------------------------------------------------------------------------------- tables
def _scenario_table(bench, model) -> str:
    from socfuse.estimator.analysis.faults import FAULTS

    rows = []
    for sc in bench.scenarios:
        rows.append(f"<tr><td>{html.escape(sc.name)}</td><td><code>{html.escape(sc.spec)}</code></td>"
                    f"<td>{html.escape(sc.describe(model))}</td></tr>")
    out = ['<div class="scroll"><table class="t"><tr><th>scenario</th><th>spec</th>'
           "<th>what it does (values as applied)</th></tr>"]
    out += rows + ["</table></div>"]
    out.append('<h3>Fault defaults</h3><div class="scroll"><table class="t"><tr><th>fault</th><th>unit</th>'
               "<th>default</th><th>effect</th></tr>")
    for k in FAULTS.values():
        out.append(f"<tr><td>{k.name}</td><td>{html.escape(k.unit)}</td><td>{html.escape(k.default_text)}</td>"
                   f"<td>{html.escape(k.text)}</td></tr>")
    out.append("</table></div><p class='note'>Defaults are in ranges that are common practice for automotive BMS "
               "sensors and models (no source): Hall current-sensor offset about 0.5 % of full scale, gain "
               "error 1 %, a few mV of voltage noise, +-2 degC on the temperature sensor, a 20-point initial "
               "SOC error, 10-20 % capacity fade.</p>")
    return "\n".join(out)


def _settings_table(settings) -> str:
    if settings is None:
        return "<p>Filter settings: the defaults for this model.</p>"
    from dataclasses import asdict

    def fmt(v):
        if isinstance(v, bool):
            return "yes" if v else "no"
        if isinstance(v, (int, float)) and not _is_blank(v):
            return f"{v:.4g}"
        return html.escape(str(v))

    rows = "".join(f"<tr><td>{html.escape(k)}</td><td class='n'>{fmt(v)}</td></tr>"
                   for k, v in asdict(settings).items())
    return (f'<div class="scroll"><table class="t"><tr><th>setting (SI units as named)</th><th>value (4 significant '
            f"digits)</th></tr>{rows}</table></div>")


def _model_summary(model) -> str:
    items = [("name", model.name or "(unnamed)"), ("capacity (Ah)", f"{model.capacity_ah:.4g}"),
             ("coulombic efficiency (-)", f"{model.coulombic_efficiency:.4g}"), ("RC pairs", f"{model.n_rc}"),
             ("hysteresis", "yes" if model.hysteresis is not None else "no"),
             ("voltage limits (V)", f"{model.v_min_v:g} .. {model.v_max_v:g}"),
             ("OCV source", model.ocv.source or "")]
    rows = "".join(f"<tr><td>{html.escape(k)}</td><td>{html.escape(str(v))}</td></tr>" for k, v in items)
    return f'<div class="scroll"><table class="t"><tr><th>cell model</th><th></th></tr>{rows}</table></div>'


RUN_COLUMNS = ("scenario", "method", "rmse_pct", "p95_abs_pct", "max_abs_pct", "final_abs_pct", "mae_pct",
               "converge_s", "n_excursions", "excursion_s", "inside_3sigma", "nis_mean", "nis_lo", "nis_hi",
               "nees_mean", "n_gated", "n_reseeds", "n_gap", "n_envelope", "n_fallback")


def write_report(out_dir, bench, model, *, settings=None, title: str = "socfuse benchmark report",
                 main_recording: str | None = None, bounds: Mapping | None = None,
                 sections: Sequence[ReportSection] = (), intro_html: str = "", energy: bool = True,
                 max_scenario_figures: int = 12, recordings=None) -> ReportFiles:
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
        Recording drawn first in the per-scenario figures and in the SOC_E figure (default: the
        first with traces).  Every recording whose traces were kept gets its figures.
    bounds : mapping, optional
        ``recording name -> (time_s, sigma)``: the posterior Cramer-Rao SOC sigma (fraction) for
        the fault-free case, drawn as +-3 sigma in the error panels.
    sections : sequence of ReportSection
        Extra sections (tuning, tolerance study) inserted after the per-recording results.
    intro_html : str
        Paragraph(s) shown under the verdict.
    energy : bool
        Include the SOC_C / SOC_E figure.
    max_scenario_figures : int
        Most trace figures per recording.
    recordings : sequence or mapping of Recording, optional
        The benchmarked recordings (by name); their temperatures let the verdict name a cold or
        hot recording as a likely reason.

    Returns
    -------
    ReportFiles
    """
    from socfuse.estimator.analysis.bench import write_summary_csv
    from socfuse.estimator.cli.main import SAFETY_NOTE

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    summary = bench.summary
    if recordings is not None and not isinstance(recordings, Mapping):
        recordings = {getattr(r, "name", str(k)): r for k, r in enumerate(recordings)}
    csv_path = out / "summary.csv"
    write_summary_csv(summary, csv_path)
    pngs: list[Path] = []
    body: list[str] = []
    used: set = set()

    def add_figure(stem: str, fig, caption: str) -> None:
        data = fig if isinstance(fig, (bytes, bytearray)) else figure_png(fig)
        name = _safe_stem(stem)
        k = 2
        while name in used:  # two recordings whose names differ only in odd characters
            name = f"{_safe_stem(stem)}_{k}"
            k += 1
        used.add(name)
        p = out / f"{name}.png"
        write_bytes_replacing(p, bytes(data))
        pngs.append(p)
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        body.append(f'<figure><img alt="{html.escape(caption)}" src="{uri}">'
                    f"<figcaption>{html.escape(caption)}</figcaption></figure>")

    rec_names = list(dict.fromkeys(summary["recording"])) if len(summary) else []
    traced = list(dict.fromkeys(k[0] for k in bench.traces))
    for r in traced:
        if r not in rec_names:
            rec_names.append(r)
    main = main_recording if main_recording in traced else (traced[0] if traced else None)
    scen_names = [s.name for s in bench.scenarios]
    methods = list(bench.methods)

    body.append('<h2 id="verdict">Verdict</h2>')
    body.append(_verdict_html(summary, recordings))
    body.append(intro_html)
    body.append('<h2 id="summary">Results per recording</h2>')
    body.append(f"<p>{len(summary)} runs: {len(rec_names)} recording(s) x {len(scen_names)} scenario(s) x methods "
                f"{', '.join(methods)}; wall time {bench.elapsed_s:.1f} s. Errors are estimate minus reference in "
                "percentage points of SOC; P95 is the 95th percentile of |error|. <b>converged after</b> is the "
                "first time after which the error stays within 2 points apart from isolated excursions: from "
                "then on it is outside for at most 1 % of the remaining time and it ends inside (blank: never). "
                "The excursions it forgives are counted (<b>excursions after</b>, <b>time outside after</b>) and "
                "shaded in the error panels. <b>inside own +-3 sigma</b>, NIS and NEES exist only for a filter "
                "that carries a sigma; the coulomb baseline has none, so those cells are blank. NIS is the mean "
                "normalised innovation squared with its chi-square 95 % band (Bar-Shalom, Li, Kirubarajan "
                "2001).</p>")
    if len(summary):
        add_figure("rmse_by_scenario", _rmse_figure(summary, scen_names, methods),
                   "SOC RMSE (mean over recordings) and worst error per scenario and method")
        for rec in rec_names:
            sub = summary[summary["recording"] == rec]
            if not len(sub):
                continue
            temp = _rec_temperature(recordings, rec)
            t_txt = f" (temperature {temp[1]:.1f} to {temp[2]:.1f} degC, mean {temp[0]:.1f})" if temp else ""
            body.append(f'<h3 id="rec-{_safe_stem(rec)}">{html.escape(rec)}{html.escape(t_txt)}</h3>')
            body.append(df_to_html(sub, [c for c in RUN_COLUMNS if c in sub.columns]))
            add_figure(f"errors_{rec}", _recording_figure(summary, rec, scen_names, methods),
                       f"{rec}: RMSE, P95 and maximum SOC error per scenario and method")
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

    if traced:
        body.append('<h2 id="traces">Traces per scenario</h2>')
        untraced = [r for r in rec_names if r not in traced]
        if untraced:
            body.append(f"<p class='note'>Traces were kept for {', '.join(map(html.escape, traced))}; the other "
                        f"recordings ({', '.join(map(html.escape, untraced))}) are shown by their tables and error "
                        "figures above.</p>")
        for rec in [main] + [r for r in traced if r != main]:
            bound = (bounds or {}).get(rec)
            shown = 0
            for sc in scen_names:
                if shown >= max_scenario_figures:
                    break
                trs = {m: bench.traces[(rec, sc, m)] for m in methods if (rec, sc, m) in bench.traces}
                if not trs:
                    continue
                shown += 1
                fig, notes = _scenario_figure(rec, sc, trs, bound)
                body.append(f"<h3>{html.escape(rec)}: {html.escape(sc)}</h3>")
                what = bench.notes.get((rec, sc), ())
                if what or notes:
                    body.append(f"<p class='note'>{html.escape('; '.join(tuple(what) + tuple(notes)))}</p>")
                add_figure(f"soc_{rec}_{sc}", fig,
                           f"{rec}, scenario {sc}: SOC, error, voltage residual and normalised innovation")
    if energy:
        tr = None
        if main is not None:
            for sc in scen_names:
                if (main, sc, "ekf") in bench.traces:
                    tr = bench.traces[(main, sc, "ekf")]
                    break
        try:
            fig = _energy_figure(model, tr, recordings.get(main) if isinstance(recordings, Mapping) else None)
        except (ImportError, ValueError) as e:
            body.append(f"<p class='note'>SOC_E figure skipped: {html.escape(str(e))}</p>")
        else:
            body.append('<h2 id="energy">Capacity-based and energy-based SOC</h2>'
                        "<p>SOC_C counts charge, SOC_E counts the energy left at rest "
                        "(E(z) = Q times the integral of OCV from 0 to z). On an NMC curve SOC_E is lower mid-range "
                        "for the same charge: the upper half of the charge is delivered at a higher voltage. "
                        "SOC_E inherits the error of the SOC_C estimate it is computed from. SOC stays on the "
                        "scale of the low-rate test (the lab convention); in the cold less of that charge is "
                        "usable before the cut-off voltage, so the figure also shows the usable capacity over "
                        "temperature and, where the recording has a temperature, the \"usable SOC\": the share of "
                        "the charge usable from full that is left at the cell's present temperature and the "
                        "recording's mean discharge current (steady-state estimate, an upper bound in the "
                        "cold).</p>")
            add_figure("soc_c_vs_soc_e", fig, "SOC_E against SOC_C (left), SOC_C, SOC_E and usable SOC over a day "
                       "(middle), usable capacity over temperature (right)")
    body.append('<h2 id="setup">Model and filter settings</h2>')
    body.append(_model_summary(model))
    body.append(_settings_table(settings))
    body.append('<h2 id="safety">Safety</h2>')
    body.append(f'<div class="caution"><p><b>{html.escape(SAFETY_NOTE)}</b></p><p>{html.escape(SAFETY_PARAGRAPH)}'
                "</p></div>")
    nav = " ".join(f'<a href="#{a}">{t}</a>' for a, t in (("verdict", "verdict"), ("summary", "per recording"),
                                                          ("scenarios", "scenarios"), ("traces", "traces"),
                                                          ("energy", "SOC_E"), ("setup", "settings"),
                                                          ("safety", "safety")))
    page = ("<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
            "<meta name='viewport' content='width=device-width, initial-scale=1'>"
            f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body><main>"
            f"<h1>{html.escape(title)}</h1><p class='sub'>socfuse report</p><nav>{nav}</nav>"
            f"<div class='caution'>{html.escape(SAFETY_NOTE)}</div>" + "\n".join(body)
            + "</main></body></html>\n")
    html_path = out / "report.html"
    write_bytes_replacing(html_path, page.encode("utf-8"))
    return ReportFiles(html_path, csv_path, tuple(pngs))


def _rmse_figure(summary, scenarios: Sequence[str], methods: Sequence[str]):
    fig = _figure((12.5, 4.6))
    fig.subplots_adjust(left=0.07, right=0.985, bottom=0.3, top=0.92, wspace=0.2)
    a1, a2 = fig.subplots(1, 2)
    x = np.arange(len(scenarios))
    w = 0.8 / max(1, len(methods))
    for k, m in enumerate(methods):
        sub = summary[summary["method"] == m]
        rm = [sub[sub["scenario"] == s]["rmse_pct"].mean() for s in scenarios]
        mx = [sub[sub["scenario"] == s]["max_abs_pct"].max() for s in scenarios]
        kw = dict(color=METHOD_COLOURS.get(m), label=_label(m), hatch={"coulomb": "//", "ukf": ".."}.get(m),
                  edgecolor="white")
        a1.bar(x + (k - (len(methods) - 1) / 2) * w, rm, w, **kw)
        a2.bar(x + (k - (len(methods) - 1) / 2) * w, mx, w, **kw)
    for a, yl, t in ((a1, "RMSE (percentage points)", "SOC RMSE, mean over recordings"),
                     (a2, "max |error| (percentage points)", "worst SOC error over recordings")):
        a.set_xticks(x, scenarios, rotation=35, ha="right", fontsize=8)
        a.set(ylabel=yl, title=t)
        a.grid(True, axis="y", alpha=0.3)
        a.legend(fontsize=8)
    return fig
