"""PNG plots of an identification (matplotlib, Agg backend; nothing is shown on screen).

:func:`save_plots` writes into a folder:

- ``ocv.png``: the OCV sources (low-rate branches, their average, rest points, the chosen curve);
- ``parameters.png``: R0, R_j and tau_j over SOC, per-pulse values as points, tables as lines;
- ``pulse_fits_<test>_<page>.png``: every pulse's relaxation with its fitted curve (12 per page);
- ``validation_<k>.png``: open-loop voltage error over time for each validation recording.

Files are written to a temporary name and renamed; an existing file of the same name is
refused (never overwritten) unless ``overwrite=True``.
"""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
from socfuse.models.fileio import replacing

__all__ = ["save_plots", "plot_ocv", "plot_parameters", "plot_pulse_fits", "plot_validation"]


class _Figures:
    """``subplots`` and ``close`` on plain :class:`matplotlib.figure.Figure` objects: plotting here never
    touches pyplot or the user's matplotlib backend (the figures are only saved to PNG)."""

    @staticmethod
    def subplots(nrows=1, ncols=1, *, figsize=None, squeeze=True):
        from matplotlib.figure import Figure

        fig = Figure(figsize=figsize)
        return fig, fig.subplots(nrows, ncols, squeeze=squeeze)

    @staticmethod
    def close(fig) -> None:
        fig.clear()


def _plt():
    return _Figures


def _save(fig, path: Path, overwrite: bool) -> Path:
    path = Path(path)
    if path.exists() and not overwrite:
        raise FileExistsError(f"{path}: exists; not overwritten (choose another --plots folder)")
    with replacing(path, suffix=".tmp.png") as tmp:
        fig.savefig(tmp, dpi=90)
    return path


def plot_ocv(result, path, overwrite: bool = False) -> Path:
    """OCV sources of an :class:`~models.identify.pipeline.IdentifyResult`.

    Parameters
    ----------
    result : IdentifyResult
        Supplies the low-rate branches, the OCV candidates, the rest points and the model's curve.
    path : str or os.PathLike
        PNG file to write.
    overwrite : bool
        Replace an existing file; when False an existing file raises ``FileExistsError``.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    plt = _plt()
    o = result.ocv_test
    fig, ax = plt.subplots(figsize=(8, 5))
    g = o.soc_grid * 100
    if np.any(np.isfinite(o.discharge_v)):
        ax.plot(g, o.discharge_v, color="tab:red", lw=0.8, label="low-rate discharge")
    if np.any(np.isfinite(o.charge_v)):
        ax.plot(g, o.charge_v, color="tab:blue", lw=0.8, label="low-rate charge")
    for name, c in result.ocv_candidates.items():
        ax.plot(g, c.voltage(o.soc_grid), lw=2.0 if name == result.ocv_source else 1.0,
                ls="-" if name == result.ocv_source else "--", label=f"OCV: {name}")
    for p in result.pulse_tests:
        if p.rest_soc.size:
            ax.plot(p.rest_soc * 100, p.rest_v, "k.", ms=4, label=f"rest ends {p.source} ({p.temperature_c:.0f} degC)")
    m = result.model.ocv
    ax.plot(m.soc * 100, m.ocv_v[0], "o", mfc="none", color="k", ms=5, label="model breakpoints")
    ax.set_xlabel("SOC [%]")
    ax.set_ylabel("voltage [V]")
    ax.set_title(f"OCV (model uses: {result.ocv_source})")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    out = _save(fig, path, overwrite)
    plt.close(fig)
    return out


def plot_parameters(result, path, overwrite: bool = False) -> Path:
    """R0, R_j and tau_j over SOC: per-pulse values and the model tables.

    Parameters
    ----------
    result : IdentifyResult
        Supplies the per-pulse fits and the model's tables (R in ohm, plotted in mOhm; tau in s).
    path : str or os.PathLike
        PNG file to write.
    overwrite : bool
        Replace an existing file; when False an existing file raises ``FileExistsError``.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    plt = _plt()
    n = result.n_rc
    fig, axes = plt.subplots(1, 1 + 2 * n if n else 1, figsize=(4 * (1 + 2 * n), 3.8), squeeze=False)
    axes = axes[0]
    s = np.linspace(0, 1, 201)
    model = result.model
    for res in result.pulse_tests:
        tc = res.temperature_c
        ps = res.pulses
        axes[0].plot([p.soc * 100 for p in ps], [p.r0_ohm.get(n, p.r0_edge_ohm) * 1000 for p in ps], ".", alpha=0.5)
        axes[0].plot(s * 100, model.r0_ohm.at(s, tc) * 1000, "-", label=f"{tc:.0f} degC")
        for j in range(n):
            pts = [(p.soc, p.rc(n)) for p in ps if p.rc(n) is not None]
            axes[1 + j].plot([x[0] * 100 for x in pts], [x[1][0][j] * 1000 for x in pts], ".", alpha=0.5)
            axes[1 + j].plot(s * 100, model.rc[j].r_ohm.at(s, tc) * 1000, "-")
            axes[1 + n + j].plot([x[0] * 100 for x in pts], [x[1][1][j] for x in pts], ".", alpha=0.5)
            axes[1 + n + j].plot(s * 100, model.rc[j].tau_s.at(s, tc), "-")
    axes[0].set_ylabel("R0 [mOhm]")
    axes[0].legend(fontsize=7)
    for j in range(n):
        axes[1 + j].set_ylabel(f"R{j + 1} [mOhm]")
        axes[1 + n + j].set_ylabel(f"tau{j + 1} [s]")
    for ax in axes:
        ax.set_xlabel("SOC [%]")
        ax.grid(alpha=0.3)
    fig.suptitle("pulse-test parameters (points: single pulses; lines: model tables)")
    fig.tight_layout()
    out = _save(fig, path, overwrite)
    plt.close(fig)
    return out


def plot_pulse_fits(res, n_rc: int, folder, per_page: int = 12, overwrite: bool = False) -> list:
    """Every pulse of one pulse test: measured pulse + relaxation and the fitted relaxation.

    Parameters
    ----------
    res : PulseTestResult
        One pulse test (its recording and per-pulse fits).
    n_rc : int
        Number of RC pairs whose fitted relaxation is drawn.
    folder : str or os.PathLike
        Output folder; files are named ``pulse_fits_<test>_<page>.png``.
    per_page : int
        Pulses per figure.
    overwrite : bool
        Replace existing files; when False an existing file raises ``FileExistsError``.

    Returns
    -------
    list of pathlib.Path
        One PNG per page; empty when the result holds no recording.
    """
    from socfuse.models.identify.pulse import relaxation_curve

    plt = _plt()
    rec = res.recording
    if rec is None:
        return []
    t, v = rec.time_s, rec.voltage_v
    stem = re.sub(r"[^A-Za-z0-9_-]+", "_", Path(str(res.source)).name)[:48] or "pulse"
    out = []
    pulses = list(res.pulses)
    for page in range(0, len(pulses), per_page):
        chunk = pulses[page:page + per_page]
        cols = 4
        rows = int(np.ceil(len(chunk) / cols))
        fig, axes = plt.subplots(rows, cols, figsize=(4 * cols, 2.8 * rows), squeeze=False)
        for ax in axes.ravel()[len(chunk):]:
            ax.axis("off")
        for ax, pf in zip(axes.ravel(), chunk):
            p = pf.pulse
            lo = max(p.start - 5, 0)
            hi = p.rest_stop if p.rest_stop > p.stop else min(p.stop + 5, t.size - 1)
            hi = int(min(hi, np.searchsorted(t, t[p.stop] + 1800.0)))
            ax.plot(t[lo:hi + 1] - t[p.start], v[lo:hi + 1], color="0.4", lw=0.8)
            f = pf.fits.get(n_rc)
            if f is not None and pf.rc(n_rc) is not None:
                tt = t[p.stop:hi + 1]
                ax.plot(tt - t[p.start], relaxation_curve(tt, f.v_inf_v, f.amplitude_v, f.tau_s), "r-", lw=1.0)
                label = f"rms {f.rms_v * 1000:.2f} mV"
            else:
                label = "no RC fit"
            ax.set_title(f"SOC {pf.soc * 100:.1f} %, {p.current_a:+.2f} A; {label}", fontsize=8)
            ax.tick_params(labelsize=7)
            ax.grid(alpha=0.3)
        fig.supxlabel("time from pulse start [s]")
        fig.supylabel("voltage [V]")
        fig.tight_layout()
        out.append(_save(fig, Path(folder) / f"pulse_fits_{stem}_{page // per_page + 1:02d}.png", overwrite))
        plt.close(fig)
    return out


def plot_validation(v, path, overwrite: bool = False) -> Path:
    """Open-loop voltage error over time for one validation result.

    Parameters
    ----------
    v : ValidationResult
        Open-loop validation of one recording (time in s, residual in V).
    path : str or os.PathLike
        PNG file to write.
    overwrite : bool
        Replace an existing file; when False an existing file raises ``FileExistsError``.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    plt = _plt()
    fig, ax = plt.subplots(figsize=(8, 3.5))
    ax.plot((v.time_s - v.time_s[0]) / 3600.0, v.residual_v * 1000, lw=0.5)
    ax.set_xlabel("time [h]")
    ax.set_ylabel("model - measured [mV]")
    ax.set_title(f"{Path(str(v.name)).name}: RMS {v.rms_v * 1000:.1f} mV, max {v.max_abs_v * 1000:.0f} mV", fontsize=9)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    out = _save(fig, path, overwrite)
    plt.close(fig)
    return out


def save_plots(result, folder, overwrite: bool = False) -> list:
    """Write all plots of an identification into ``folder`` (created if needed); returns the paths.

    Parameters
    ----------
    result : IdentifyResult
        The identification to plot.
    folder : str or os.PathLike
        Output folder.
    overwrite : bool
        Replace existing PNG files; when False an existing file raises ``FileExistsError``.

    Returns
    -------
    list of pathlib.Path
        The PNG files written (OCV, parameters, pulse fits per test and page, one per validation).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = [plot_ocv(result, folder / "ocv.png", overwrite),
             plot_parameters(result, folder / "parameters.png", overwrite)]
    for res in result.pulse_tests:
        paths.extend(plot_pulse_fits(res, result.n_rc, folder, overwrite=overwrite))
    for k, v in enumerate(result.validation):
        paths.append(plot_validation(v, folder / f"validation_{k + 1}.png", overwrite))
    return paths
