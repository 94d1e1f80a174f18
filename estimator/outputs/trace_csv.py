"""Trace CSV writer for ``socfuse estimate`` (DESIGN.md section 3 columns).

The columns are those of :meth:`estimator.filters.trace.Trace.to_frame` (one definition of the
column set); only the formatting is done here, and faster than ``DataFrame.to_csv``: the whole
table is formatted by one C-level ``str %`` operation over all values (``%.8g`` for floats,
``%d`` for integer columns such as ``status``), missing values (NaN) written as empty fields, as
pandas writes them.  The bytes equal ``frame.to_csv(index=False, float_format="%.8g")``.
"""
from __future__ import annotations

import numpy as np

__all__ = ["FLOAT_FORMAT", "format_trace_csv", "write_trace_csv"]

FLOAT_FORMAT = "%.8g"   # 8 significant digits: 1e-8 relative, below any sensor's resolution
_CHUNK = 20000          # rows formatted per string operation (bounded memory)


def format_trace_csv(frame) -> str:
    """The CSV text of a trace table (a DataFrame of numeric columns), header first.

    Parameters
    ----------
    frame : pandas.DataFrame
        From :meth:`Trace.to_frame`; float and integer columns.

    Returns
    -------
    str
        Comma-separated, ``\\n`` line ends, floats as ``%.8g``, NaN as an empty field.
    """
    names = [str(c) for c in frame.columns]
    for nm in names:
        if "," in nm or '"' in nm or "\n" in nm:
            raise ValueError(f"trace column name {nm!r} would need quoting in a CSV")
    cols = [frame[c].to_numpy() for c in frame.columns]
    fmts = []
    for nm, a in zip(names, cols):
        if a.dtype.kind in "iub":
            fmts.append("%d")
        elif a.dtype.kind == "f":
            fmts.append(FLOAT_FORMAT)
        else:
            raise ValueError(f"trace column {nm!r} is not numeric ({a.dtype})")
    row = ",".join(fmts) + "\n"
    parts = [",".join(names) + "\n"]
    n = len(frame)
    if not cols:
        return parts[0]
    for nm, a, f in zip(names, cols, fmts):
        if f == "%d" and a.size and np.max(np.abs(a.astype(np.int64))) >= 2 ** 53:
            raise ValueError(f"trace column {nm!r} holds integers beyond 2**53")
    for lo in range(0, n, _CHUNK):
        hi = min(n, lo + _CHUNK)
        # one float table ("%d" of an integer-valued float prints the integer; exact below 2**53)
        values = np.column_stack([a[lo:hi].astype(float) for a in cols]).ravel().tolist()
        text = (row * (hi - lo)) % tuple(values)
        # a float NaN prints as "nan" (never signed); no other field contains "nan"
        parts.append(text.replace("nan", ""))
    return "".join(parts)


def write_trace_csv(trace, path, states: bool = False) -> None:
    """Write ``trace`` (a :class:`Trace`) to ``path`` with the DESIGN.md trace columns.

    Parameters
    ----------
    trace : Trace
    path : str or Path   the file to write (the caller handles overwriting rules)
    states : bool   add the state columns (``v_rc_1_v``, ..., ``bias_a``, ``hyst``)

    Returns
    -------
    None
        The file is written.
    """
    text = format_trace_csv(trace.to_frame(states=states))
    with open(path, "w", encoding="utf-8", newline="") as f:
        f.write(text)
