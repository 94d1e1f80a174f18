"""Trace CSV writer for ``socfuse estimate`` (DESIGN.md section 3 columns).

The columns are those of :meth:`estimator.filters.trace.Trace.columns` (one definition of the
column set, which ``Trace.to_frame`` also uses); only the formatting is done here.  The bytes
equal ``frame.to_csv(index=False, float_format="%.8g")`` (``%d`` for integer columns such as
``status``; NaN written as an empty field, as pandas writes it), without importing pandas.

How: one compiled pass (:func:`_format_table`, plain scalar numba code) writes every value into
a byte buffer.  A float is printed the way C's ``printf("%.8g")`` (and Python's ``%``) prints
it: its 8-digit decimal mantissa ``M = round(|x| 10^(7-X))`` (X the decimal exponent), fixed
notation when ``-4 <= X < 8`` and exponent notation otherwise, trailing zeros dropped (ISO C99
7.19.6.1, conversion ``g``).  The scaled value is one correctly rounded float operation by an
exact power of ten (``10^k``, ``|k| <= 22``), so its error is below 1e-8 while its digits are
below 1.4e8; the rounding is therefore exact unless the scaled value lies within 1e-6 of a half
integer.  Those rare values (and values below 1e-15 or above 1e29, where the power of ten is not
exact) are left to Python's correctly rounded ``"%.8g" %`` and spliced in, so every byte is the
one Python would print.
"""
from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["FLOAT_FORMAT", "format_trace_csv", "format_columns", "write_trace_csv"]

FLOAT_FORMAT = "%.8g"   # 8 significant digits: 1e-8 relative, below any sensor's resolution
_FIELD_MAX = 24         # bytes a value takes at most ("-1.2345678e+308", "-9007199254740992")
_DOUBT = 1e-6           # distance of the scaled value from a half integer left to Python


@njit(cache=True)
def _digits(buf, pos, v, width):
    """Write the non-negative integer ``v`` with ``width`` digits (leading zeros) at ``pos``."""
    for j in range(width - 1, -1, -1):
        buf[pos + j] = 48 + v % 10
        v //= 10
    return pos + width


@njit(cache=True)
def _n_digits(v):
    """Number of decimal digits of the non-negative integer ``v`` (1 for 0)."""
    n = 1
    while v >= 10:
        v //= 10
        n += 1
    return n


@njit(cache=True)
def _put_float(buf, pos, x, p10):
    """Write ``x`` as ``%.8g`` at ``pos``; returns the new position, or -1 when Python must do it."""
    if x != x:                      # NaN: an empty field
        return pos
    if math.copysign(1.0, x) < 0.0:
        buf[pos] = 45               # '-' (also of -0.0, as printf writes it)
        pos += 1
        x = -x
    if x == 0.0:
        buf[pos] = 48
        return pos + 1
    if x == np.inf:
        buf[pos] = 105
        buf[pos + 1] = 110
        buf[pos + 2] = 102
        return pos + 3
    e = int(np.floor(np.log10(x)))
    m = 0
    for _ in range(3):              # log10 may be one off at a power of ten: correct and redo
        k = 7 - e
        if k > 22 or k < -22:
            return -1
        y = x * p10[k] if k >= 0 else x / p10[-k]
        if y < 1e7:
            e -= 1
            continue
        if y >= 1e8:
            e += 1
            continue
        fl = np.floor(y)
        f = y - fl
        if abs(f - 0.5) < _DOUBT:
            return -1
        m = int(fl) + (1 if f > 0.5 else 0)
        if m == 100000000:          # rounded up to the next power of ten
            m = 10000000
            e += 1
        break
    if m == 0:
        return -1
    nz = 8                          # significant digits left after dropping trailing zeros
    t = m
    while t % 10 == 0:
        t //= 10
        nz -= 1
    if -4 <= e < 8:
        if e >= 0:                  # integer part: digits 0..e (zeros kept), then the fraction
            ip = m // 10 ** (7 - e)
            pos = _digits(buf, pos, ip, e + 1)
            if nz > e + 1:
                buf[pos] = 46
                pos += 1
                pos = _digits(buf, pos, t % 10 ** (nz - e - 1), nz - e - 1)
        else:                       # 0.000ddd
            buf[pos] = 48
            buf[pos + 1] = 46
            pos += 2
            for _ in range(-e - 1):
                buf[pos] = 48
                pos += 1
            pos = _digits(buf, pos, t, nz)
        return pos
    pos = _digits(buf, pos, t // 10 ** (nz - 1), 1)
    if nz > 1:
        buf[pos] = 46
        pos += 1
        pos = _digits(buf, pos, t % 10 ** (nz - 1), nz - 1)
    buf[pos] = 101                  # 'e', sign, at least two exponent digits
    buf[pos + 1] = 45 if e < 0 else 43
    pos += 2
    ae = -e if e < 0 else e
    return _digits(buf, pos, ae, max(2, _n_digits(ae)))


@njit(cache=True)
def _put_int(buf, pos, v):
    if v < 0:
        buf[pos] = 45
        pos += 1
        v = -v
    return _digits(buf, pos, v, _n_digits(v))


@njit(cache=True)
def _format_table(fvals, ivals, is_int, buf, p10, doubt_idx, doubt_pos):
    """Write the rows of ``fvals`` (N, C) (integer columns from ``ivals``) as CSV into ``buf``.

    Returns ``(bytes written, values left to Python)``; value ``doubt_idx[j]`` (flat index
    ``row * C + col``) belongs at byte ``doubt_pos[j]``.
    """
    n, c = fvals.shape
    pos = 0
    nd = 0
    for r in range(n):
        for j in range(c):
            if j:
                buf[pos] = 44
                pos += 1
            if is_int[j]:
                pos = _put_int(buf, pos, ivals[r, j])
            else:
                q = _put_float(buf, pos, fvals[r, j], p10)
                if q < 0:
                    doubt_idx[nd] = r * c + j
                    doubt_pos[nd] = pos
                    nd += 1
                else:
                    pos = q
        buf[pos] = 10
        pos += 1
    return pos, nd


_P10 = np.array([10.0 ** k for k in range(23)])   # exact doubles 1e0 .. 1e22


def format_columns(columns) -> bytes:
    """The CSV bytes of a table given as ``{name: 1-D array}`` (float or integer), header first.

    Parameters
    ----------
    columns : mapping of str to array_like, each shape (N,)
        Column name to values, in file order; float and integer columns only.

    Returns
    -------
    bytes
        ASCII, comma-separated, ``\\n`` line ends, floats as ``%.8g``, NaN as an empty field,
        integers as ``%d``: the bytes ``DataFrame.to_csv(index=False, float_format="%.8g")`` writes.

    Raises
    ------
    ValueError
        A column name that would need quoting, a non-numeric column, integers beyond 2**53.
    """
    names = [str(c) for c in columns]
    for nm in names:
        if "," in nm or '"' in nm or "\n" in nm:
            raise ValueError(f"trace column name {nm!r} would need quoting in a CSV")
    cols = [np.asarray(a) for a in columns.values()]
    header = (",".join(names) + "\n").encode("ascii")
    is_int = np.zeros(len(cols), dtype=np.bool_)
    for j, (nm, a) in enumerate(zip(names, cols)):
        if a.dtype.kind in "iub":
            is_int[j] = True
            if a.size and np.max(np.abs(a.astype(np.int64))) >= 2 ** 53:
                raise ValueError(f"trace column {nm!r} holds integers beyond 2**53")
        elif a.dtype.kind != "f":
            raise ValueError(f"trace column {nm!r} is not numeric ({a.dtype})")
    if not cols:
        return header
    n = len(cols[0])
    fvals = np.empty((n, len(cols)))
    ivals = np.zeros((n, len(cols)), dtype=np.int64)
    for j, a in enumerate(cols):
        if is_int[j]:
            ivals[:, j] = a
        else:
            fvals[:, j] = a
    buf = np.empty(n * (len(cols) * (_FIELD_MAX + 1) + 1), dtype=np.uint8)
    doubt_idx = np.empty(n * len(cols), dtype=np.int64)
    doubt_pos = np.empty(n * len(cols), dtype=np.int64)
    end, nd = _format_table(fvals, ivals, is_int, buf, _P10, doubt_idx, doubt_pos)
    body = buf[:end].tobytes()
    if nd:  # splice in Python's correctly rounded text of the few doubtful values
        parts, last = [], 0
        flat = fvals.reshape(-1)
        for k, p in zip(doubt_idx[:nd].tolist(), doubt_pos[:nd].tolist()):
            parts += [body[last:p], (FLOAT_FORMAT % flat[k]).encode("ascii")]
            last = p
        parts.append(body[last:])
        body = b"".join(parts)
    return header + body


def format_trace_csv(frame) -> str:
    """The CSV text of a trace table (a DataFrame of numeric columns), header first.

    Parameters
    ----------
    frame : pandas.DataFrame
        E.g. from :meth:`Trace.to_frame`; float and integer columns.

    Returns
    -------
    str
        Comma-separated, ``\\n`` line ends, floats as ``%.8g``, NaN as an empty field
        (:func:`format_columns`).
    """
    return format_columns({c: frame[c].to_numpy() for c in frame.columns}).decode("ascii")


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
    data = format_columns(trace.columns(states=states))
    with open(path, "wb") as f:
        f.write(data)
