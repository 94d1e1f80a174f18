"""What a user wants to know about a recording before trusting it (``socfuse check``).

:func:`summarise` gives a frozen :class:`RecordingSummary`: duration, sample intervals, net and
total charge, rests, ranges, duplicates and gaps from the loader, and a check of the current
sign.  :func:`format_summary` renders it as a plain-text block.

Sign check: with current positive on discharge, the terminal voltage of a cell drops when the
discharge current steps up (``dV = -R0 dI`` for an ohmic step; Thevenin model, e.g. Hu, Li and
Peng, J. Power Sources 198 (2012)).  Over the largest current steps between consecutive samples
we fit ``dV = k dI`` through the origin; a positive ``k`` (voltage rises with discharge current)
means the file's sign convention was probably not declared.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from socfuse.models.recording import Recording, find_rests
from socfuse.models.thevenin import SECONDS_PER_HOUR

__all__ = ["RecordingSummary", "summarise", "sign_check", "format_summary"]


@dataclass(frozen=True)
class RecordingSummary:
    """Facts about one recording (all SI units; charge in Ah, + = discharge).

    ``discharged_ah`` and ``charged_ah`` are sums of the interval-mean current
    ``(i_k + i_k+1)/2`` times ``dt`` over discharging and charging intervals (the sampling rule
    of DEVELOPERS.md), so ``net_ah = discharged_ah - charged_ah`` equals the trapezoid
    integral and ``total_ah = discharged_ah + charged_ah`` is the throughput.
    """

    name: str
    source: str
    n_samples: int
    duration_s: float
    dt_median_s: float
    dt_min_s: float
    dt_max_s: float
    net_ah: float
    discharged_ah: float
    charged_ah: float
    total_ah: float
    n_rests: int
    longest_rest_s: float
    rest_current_a: float
    rest_min_s: float
    current_min_a: float
    current_max_a: float
    voltage_min_v: float
    voltage_max_v: float
    temperature_min_c: float | None
    temperature_max_c: float | None
    soc_ref_min: float | None
    soc_ref_max: float | None
    duplicates_dropped: int
    gaps: tuple[tuple[float, float], ...]
    sign_slope_ohm: float | None
    sign_steps: int
    sign_inverted: bool
    warnings: tuple[str, ...]
    current_offset_a: float | None = None  # sensor zero offset found in the rests (robust rests only)


def sign_check(current_a, voltage_v, n_steps: int = 50, min_fraction: float = 0.2, time_s=None,
               gap_factor: float = 5.0, exclude=None):
    """Slope ``k`` of ``dV = k dI`` over the largest current steps between consecutive samples.

    Parameters
    ----------
    current_a, voltage_v : ndarray (N,)
        Current (A, + = discharge) and terminal voltage (V).
    time_s : ndarray (N,), optional
        Sample times, s.  When given, steps across an interval longer than ``gap_factor``
        median intervals are skipped (across a logging gap the cell relaxed or worked unseen,
        so the voltage change is not the response to the current step).
    gap_factor : float
        See ``time_s``.
    exclude : ndarray of bool (N,), optional
        Samples to leave out (spikes): steps into or out of them are skipped, so an outlier
        cannot pass for a sign error.
    n_steps : int
        At most this many of the largest ``|dI|`` are used.
    min_fraction : float
        Only steps with ``|dI| >= min_fraction * max |dI|`` count.

    Returns
    -------
    (slope_ohm, n_used)
        ``slope_ohm`` is None when the current never steps (``max |dI|`` below 1 mA) or a
        voltage is missing at every step.  A healthy file gives a negative slope (about
        ``-R0`` when the sampling catches the step).
    """
    i = np.asarray(current_a, dtype=float)
    v = np.asarray(voltage_v, dtype=float)
    if i.size < 2:
        return None, 0
    di = np.diff(i)
    dv = np.diff(v)
    ok = np.isfinite(dv) & np.isfinite(di)
    if time_s is not None:
        dt = np.diff(np.asarray(time_s, dtype=float))
        if dt.size:
            ok &= dt <= gap_factor * float(np.median(dt))
    if exclude is not None:
        ex = np.asarray(exclude, dtype=bool)
        ok &= ~(ex[1:] | ex[:-1])
    di, dv = di[ok], dv[ok]
    if di.size == 0:
        return None, 0
    mag = np.abs(di)
    top = float(mag.max())
    if top < 1e-3:
        return None, 0
    order = np.argsort(mag)[::-1][:n_steps]
    order = order[mag[order] >= min_fraction * top]
    slope = float(np.sum(dv[order] * di[order]) / np.sum(di[order] ** 2))
    return slope, int(order.size)


def summarise(rec: Recording, rest_current_a: float | None = None, rest_min_s: float = 600.0) -> RecordingSummary:
    """Summarise a recording (see :class:`RecordingSummary`).

    Parameters
    ----------
    rec : Recording
    rest_current_a : float, optional
        Fixed rest threshold: ``|current|`` at or below this counts as rest, A.  Default (None):
        the robust segmentation of :func:`socfuse.models.segment.segment_recording` (the sensor's
        zero offset removed, thresholds from the recording's own noise floor, rests confirmed by
        the voltage relaxation).
    rest_min_s : float
        A rest must last at least this long, s (uses :func:`models.recording.find_rests`).

    Returns
    -------
    RecordingSummary
        Sample count, duration (s), sample intervals (s), charge throughput (Ah), rests (count,
        longest in s, threshold in A, sensor zero offset in A when estimated), current (A), voltage (V),
        temperature (degC) and ``soc_ref`` (fraction) ranges, gaps ``(start_s, length_s)``, the sign
        check (dV/dI in ohm) and the warnings.
    """
    t, i, v = rec.time_s, rec.current_a, rec.voltage_v
    dt = np.diff(t)
    u = 0.5 * (i[:-1] + i[1:])
    q = u * dt / SECONDS_PER_HOUR
    dis = float(np.sum(q[q > 0]))
    chg = float(-np.sum(q[q < 0])) + 0.0
    offset = None
    if rest_current_a is None and t.size >= 2:
        from socfuse.models.segment import segment_recording

        seg = segment_recording(t, i, rec.voltage_v)
        rest_current_a, offset = float(seg.off_threshold_a), float(seg.offset_a)
    rests = find_rests(t, i, None if offset is not None else rest_current_a, rest_min_s, voltage_v=rec.voltage_v)
    longest = max((t[e] - t[s] for s, e in rests), default=0.0)
    meta = rec.metadata or {}
    gaps = tuple((float(a), float(b)) for a, b in meta.get("gaps", ()))
    from socfuse.models.plausibility import spike_samples

    slope, n_used = sign_check(i, v, time_s=t, exclude=spike_samples(rec))
    inverted = slope is not None and slope > 0
    warn = []
    if inverted:
        warn.append(f"sign looks inverted: the voltage rises when discharge current rises (dV/dI = "
                    f"{slope * 1e3:+.1f} mOhm over {n_used} steps); if the file logs discharge as "
                    "negative, load it with the discharge-negative option")
    if slope is None:
        warn.append("the current never steps, so the sign convention could not be checked")
    if not np.all(np.isfinite(v)):
        warn.append(f"{int(np.count_nonzero(~np.isfinite(v)))} voltage samples are missing")
    if gaps:
        warn.append(f"{len(gaps)} gap(s) in time, longest {max(g[1] for g in gaps):.6g} s")

    def rng(a):
        if a is None:
            return None, None
        a = a[np.isfinite(a)]
        return (float(a.min()), float(a.max())) if a.size else (None, None)

    tmin, tmax = rng(rec.temperature_c)
    smin, smax = rng(rec.soc_ref)
    vmin, vmax = rng(v)
    return RecordingSummary(
        name=rec.name, source=str(meta.get("source", "")), n_samples=rec.n, duration_s=rec.duration_s,
        dt_median_s=float(np.median(dt)) if dt.size else 0.0,
        dt_min_s=float(dt.min()) if dt.size else 0.0, dt_max_s=float(dt.max()) if dt.size else 0.0,
        net_ah=dis - chg, discharged_ah=dis, charged_ah=chg, total_ah=dis + chg,
        n_rests=len(rests), longest_rest_s=float(longest), rest_current_a=float(rest_current_a or 0.0), current_offset_a=offset,
        rest_min_s=float(rest_min_s),
        current_min_a=float(i.min()), current_max_a=float(i.max()), voltage_min_v=vmin, voltage_max_v=vmax,
        temperature_min_c=tmin, temperature_max_c=tmax, soc_ref_min=smin, soc_ref_max=smax,
        duplicates_dropped=int(meta.get("duplicates_dropped", 0)), gaps=gaps,
        sign_slope_ohm=slope, sign_steps=n_used, sign_inverted=inverted, warnings=tuple(warn))


def _dur(s: float) -> str:
    s = float(s)
    if s < 120:
        return f"{s:.4g} s"
    h, rem = divmod(s, 3600.0)
    m, sec = divmod(rem, 60.0)
    return f"{s:.6g} s ({int(h)} h {int(m):02d} min {sec:04.1f} s)"


def format_summary(s: RecordingSummary, max_gaps: int = 5) -> str:
    """The summary as a plain-text block (one fact per line, units stated).

    Parameters
    ----------
    s : RecordingSummary
        The summary from :func:`summarise`.
    max_gaps : int
        At most this many gaps are listed one by one; the rest are counted.

    Returns
    -------
    str
        Lines ``"<fact>  <value with unit>"`` joined by ``\\n``, then one ``WARNING: ...`` line per warning.
    """
    rows = [
        ("recording", s.name + (f"  ({s.source})" if s.source else "")),
        ("samples", f"{s.n_samples}"),
        ("duration", _dur(s.duration_s)),
        ("sample interval", f"median {s.dt_median_s:.4g} s, min {s.dt_min_s:.4g} s, max {s.dt_max_s:.6g} s"),
        ("charge (+ = discharge)", f"net {s.net_ah:.5g} Ah, total {s.total_ah:.5g} Ah "
                                   f"(discharged {s.discharged_ah:.5g} Ah, charged {s.charged_ah:.5g} Ah)"),
        ("rests", (f"{s.n_rests} (|I| <= {s.rest_current_a:g} A for >= {s.rest_min_s:g} s)" if s.current_offset_a is None
                   else f"{s.n_rests} (|I - offset| <= {s.rest_current_a:.3g} A for >= {s.rest_min_s:g} s; sensor "
                        f"zero offset {1e3 * s.current_offset_a:+.3g} mA)")
                  + (f", longest {_dur(s.longest_rest_s)}" if s.n_rests else "")),
        ("current", f"{s.current_min_a:.5g} .. {s.current_max_a:.5g} A"),
        ("voltage", "none" if s.voltage_min_v is None else f"{s.voltage_min_v:.5g} .. {s.voltage_max_v:.5g} V"),
        ("temperature", "not in file" if s.temperature_min_c is None
         else f"{s.temperature_min_c:.4g} .. {s.temperature_max_c:.4g} degC"),
    ]
    if s.soc_ref_min is not None:
        rows.append(("soc_ref", f"{100 * s.soc_ref_min:.2f} .. {100 * s.soc_ref_max:.2f} %"))
    rows.append(("duplicates dropped", f"{s.duplicates_dropped}"))
    if s.gaps:
        shown = ", ".join(f"{g[1]:.4g} s at {g[0]:.6g} s" for g in s.gaps[:max_gaps])
        more = f" and {len(s.gaps) - max_gaps} more" if len(s.gaps) > max_gaps else ""
        rows.append(("gaps", f"{len(s.gaps)}: {shown}{more}"))
    else:
        rows.append(("gaps", "none"))
    if s.sign_slope_ohm is None:
        rows.append(("sign check", "not possible (no current steps)"))
    else:
        verdict = "INVERTED?" if s.sign_inverted else "ok"
        rows.append(("sign check", f"{verdict} (dV/dI = {s.sign_slope_ohm * 1e3:+.2f} mOhm over "
                                   f"{s.sign_steps} largest current steps)"))
    width = max(len(k) for k, _ in rows)
    lines = [f"{k.ljust(width)}  {v}" for k, v in rows]
    lines += [f"WARNING: {w}" for w in s.warnings]
    return "\n".join(lines)
