"""Load recordings from CSV, Parquet and MATLAB ``.mat`` files into :class:`~models.recording.Recording`.

What labs and fleets produce rarely has our canonical columns (DESIGN.md section 3: ``time_s``,
``current_a``, ``voltage_v``, optional ``temperature_c`` and ``soc_ref``).  A :class:`ColumnMap`
says which source column is which, in which unit, and which sign the file uses for discharge;
:func:`load_recording` reads the file, converts to SI units and the socfuse sign (current
positive on discharge) and validates every row.

Rules (the same for every format):

- CSV: the header row is found after any preamble lines (the first line holding the time,
  current and voltage names); stray NUL bytes are removed; ``,`` ``;`` or tab separators are
  detected; a units row right under the header (``[V]``, ``A``, ...) is skipped and kept in
  ``metadata["units_row"]``; a repeated column name is renamed ``name.2`` unless it is one the
  mapping uses (then refused as ambiguous).
- Required columns: time, current, voltage.  A missing column is refused, listing the columns
  the file has.  Temperature and ``soc_ref`` are optional: taken when present under the
  canonical name, required when named explicitly.
- A missing, NaN or non-numeric value in a used column is refused with the file, column and
  row (CSV: data row counted from 1 after the header, and the 1-based line of the file;
  .mat/Parquet: 1-based row).  Nothing is silently turned into NaN, with one exception: a blank
  (or NaN) voltage cell is a missing sample (BMS logs drop samples; the filters then predict
  only) and is counted in ``metadata["voltage_missing"]``; a column with no voltage at all is
  refused.  Blank current or time cells stay refused (the charge count needs every current).
- Numbers are ASCII (a digit from another script is refused, not read); a value of magnitude
  1e9 or more in current, voltage, temperature or ``soc_ref`` (or a time beyond 1e12 s) is
  refused as no measurement.
- Damaged CSV files: a data row with fewer fields than the header is refused, except the last
  line of the file, which a logger killed while writing leaves short: it is dropped and
  reported in ``metadata["truncated_last_row"]``; so is a last line without a line end whose
  last field is blank or shorter than the median length of that column in the 50 rows before
  it (a number cut in the middle; a complete but short last value is then dropped too, and
  reported).  A cut that leaves a field at least as long as the median cannot be told from a
  complete line.  A field over the CSV module's limit (128 KiB) is refused.
- Packs: ``series_cells`` divides the voltage and ``parallel_cells`` the current, so a pack log
  can be estimated with a cell model (the cells are assumed balanced).
- Rows whose time repeats the previous row's time exactly are dropped (the first is kept)
  and counted in ``metadata["duplicates_dropped"]``; time that goes backwards is refused.
- Intervals longer than ``gap_factor`` (default 5) median sample intervals are reported in
  ``metadata["gaps"]`` as ``(time_s, length_s)`` pairs (time of the sample before the gap).
- Other numeric columns are kept, unconverted (the file's own units and sign), in
  ``metadata["extras"]``: a dict of read-only float arrays aligned with the recording (so the
  energy module can compare with a cycler Wh counter).  Blank cells there are NaN.
- A lab SOC reference can be derived from a cycler amp-hour counter::

      soc_ref = soc0 + s * (Ah - Ah_0) / capacity_ah

  with ``s = +1`` when the counter goes negative on discharge (as in the Panasonic 18650PF
  files) and ``s = -1`` when it counts discharged charge upwards.  Only the change of the
  counter is used, so a counter that does not start at 0 is fine.
"""
from __future__ import annotations

import csv
import gc
import math
import struct
import sys
from contextlib import contextmanager
from dataclasses import asdict, dataclass, fields
from itertools import repeat
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from socfuse.models.recording import Recording, RecordingError

__all__ = [
    "ColumnMap", "PRESETS", "make_column_map", "load_recording", "read_table", "RawTable",
    "CANONICAL_COLUMNS", "bundled_recording_path", "gc_paused",
]

CANONICAL_COLUMNS = ("time_s", "current_a", "voltage_v", "temperature_c", "soc_ref")

_CURRENT_UNITS = {"a": 1.0, "ma": 1e-3}
_VOLTAGE_UNITS = {"v": 1.0, "mv": 1e-3}
_TIME_UNITS = {"s": 1.0, "ms": 1e-3, "min": 60.0, "h": 3600.0, "iso": None, "hms": None}
# tokens a cycler writes in a units row under the header (compared lower-case, brackets stripped)
_UNIT_TOKENS = {"s", "ms", "min", "h", "a", "ma", "v", "mv", "ah", "mah", "wh", "mwh", "kwh", "w", "kw", "mw",
                "degc", "°c", "c", "k", "%", "ohm", "mohm", "hz", "1", "-"}
_AH_UNITS = {"ah": 1.0, "mah": 1e-3}
_SUFFIXES = {".csv": "csv", ".txt": "csv", ".tsv": "csv", ".parquet": "parquet", ".pq": "parquet",
             ".mat": "mat"}
_SEPARATORS = (",", ";", "\t")


@dataclass(frozen=True)
class ColumnMap:
    """Where the recording's quantities are in a source file, and in which units and sign.

    Parameters
    ----------
    time, current, voltage : str, optional
        Source column (or .mat struct field) names.  ``None`` means the canonical name
        (``time_s``, ``current_a``, ``voltage_v``).
    temperature, soc_ref : str, optional
        Source names of the cell temperature (degC) and lab SOC reference (fraction 0..1).
        ``None``: use ``temperature_c`` / ``soc_ref`` when the file has them.  A name given
        here is required to exist.
    ah_counter : str, optional
        Source name of a cycler amp-hour counter.  Kept in ``metadata["extras"]``; with
        ``ref_capacity_ah`` and ``ref_soc0`` it yields ``soc_ref``.
    time_unit : {"s", "ms", "min", "h", "iso", "hms"}
        ``iso``: ISO 8601 timestamps (or datetime values, or text in ``time_format``),
        converted to seconds after the first row.  ``hms``: elapsed time as ``[d days]
        hh:mm:ss[.fff]`` (hours may exceed 24).  Numeric times keep their origin.
    time_format : str, optional
        With ``time_unit="iso"``: a strftime format for non-ISO date-time text, e.g.
        ``"%m/%d/%Y %I:%M:%S %p"``.
    current_unit : {"A", "mA"}
    voltage_unit : {"V", "mV"}
    ah_unit : {"Ah", "mAh"}
    discharge_negative : bool
        True when the file logs discharge current as negative (most cyclers); the loader
        flips it to the socfuse convention (positive on discharge).
    ah_discharge_negative : bool, optional
        Sign of the amp-hour counter; ``None`` = same as the current in the file.
    ref_capacity_ah : float, optional
        Reference capacity (Ah, > 0) for deriving ``soc_ref`` from the counter.
    ref_soc0 : float, optional
        SOC (fraction) at the first row, for deriving ``soc_ref``.
    name : str, optional
        Recording name; default: the file name without suffix.
    separator : str, optional
        CSV field separator; ``None`` = detect among ``,`` ``;`` and tab.
    decimal : {".", ","}
        CSV decimal mark.
    mat_struct : str, optional
        Name of the .mat variable holding the struct; ``None`` = the only struct in the file,
        or the top-level variables as columns when there is no struct.
    gap_factor : float
        An interval longer than this many median intervals is reported as a gap.
    soc_ref_unit : {"fraction", "percent"}
        Unit of the ``soc_ref`` column (percent is divided by 100).
    temperature_unit : {"degC", "K"}
        Unit of the temperature column (kelvin: T - 273.15).
    series_cells, parallel_cells : int
        Cells in series and in parallel of the pack the file logs (default 1 and 1: a cell);
        the voltage is divided by ``series_cells`` and the current by ``parallel_cells``.
    """

    time: str | None = None
    current: str | None = None
    voltage: str | None = None
    temperature: str | None = None
    soc_ref: str | None = None
    ah_counter: str | None = None
    time_unit: str = "s"
    time_format: str | None = None
    current_unit: str = "A"
    voltage_unit: str = "V"
    ah_unit: str = "Ah"
    discharge_negative: bool = False
    ah_discharge_negative: bool | None = None
    ref_capacity_ah: float | None = None
    ref_soc0: float | None = None
    name: str | None = None
    separator: str | None = None
    decimal: str = "."
    mat_struct: str | None = None
    gap_factor: float = 5.0
    soc_ref_unit: str = "fraction"
    temperature_unit: str = "degC"
    series_cells: int = 1
    parallel_cells: int = 1

    def __post_init__(self) -> None:
        for attr, table in (("time_unit", _TIME_UNITS), ("current_unit", _CURRENT_UNITS),
                            ("voltage_unit", _VOLTAGE_UNITS), ("ah_unit", _AH_UNITS)):
            if str(getattr(self, attr)).lower() not in table:
                raise RecordingError(f"{attr} {getattr(self, attr)!r} is not one of "
                                     f"{', '.join(sorted(table))}")
        if self.decimal not in (".", ","):
            raise RecordingError(f"decimal must be '.' or ',', not {self.decimal!r}")
        if self.separator is not None and len(self.separator) != 1:
            raise RecordingError(f"separator must be one character, not {self.separator!r}")
        if self.decimal == "," and self.separator == ",":
            raise RecordingError("decimal ',' and separator ',' together are ambiguous; use separator ';'")
        if self.ref_capacity_ah is not None and not (math.isfinite(self.ref_capacity_ah)
                                                     and self.ref_capacity_ah > 0):
            raise RecordingError(f"ref_capacity_ah must be a positive number, not {self.ref_capacity_ah!r}")
        if self.ref_soc0 is not None and not (0.0 <= self.ref_soc0 <= 1.0):
            raise RecordingError(f"ref_soc0 is a fraction 0..1, not {self.ref_soc0!r}")
        if (self.ref_capacity_ah is None) != (self.ref_soc0 is None):
            raise RecordingError("a SOC reference from the amp-hour counter needs both ref_capacity_ah "
                                 "and ref_soc0")
        if self.ref_capacity_ah is not None:
            if self.ah_counter is None:
                raise RecordingError("ref_capacity_ah given but no amp-hour counter column (ah_counter)")
            if self.soc_ref is not None:
                raise RecordingError("give either a soc_ref column or an amp-hour counter with "
                                     "ref_capacity_ah, not both")
        if self.time_format is not None and self.time_unit.lower() != "iso":
            raise RecordingError("time_format applies to time_unit 'iso' only")
        if not (self.gap_factor > 1.0):
            raise RecordingError(f"gap_factor must be > 1, not {self.gap_factor!r}")
        if str(self.temperature_unit).lower() not in ("degc", "k"):
            raise RecordingError(f"temperature_unit {self.temperature_unit!r} is not one of degC, K")
        if str(self.soc_ref_unit).lower() not in ("fraction", "percent"):
            raise RecordingError(f"soc_ref_unit {self.soc_ref_unit!r} is not one of fraction, percent")
        for attr in ("series_cells", "parallel_cells"):
            val = getattr(self, attr)
            if isinstance(val, bool) or not isinstance(val, (int, np.integer)) or not 1 <= val <= 10000:
                raise RecordingError(f"{attr} is a whole number of cells 1..10000, not {val!r}")

    # resolved source names ------------------------------------------------
    @property
    def time_col(self) -> str:
        return self.time or "time_s"

    @property
    def current_col(self) -> str:
        return self.current or "current_a"

    @property
    def voltage_col(self) -> str:
        return self.voltage or "voltage_v"

    def to_dict(self) -> dict:
        """Plain dict of the options (for metadata and reports)."""
        return asdict(self)


#: Ready-made mappings for public dataset layouts.
PRESETS: dict[str, dict[str, Any]] = {
    # Kollmeyer, "Panasonic 18650PF Li-ion Battery Data", Mendeley Data 2018,
    # doi:10.17632/wykht8y7tg.1: struct ``meas`` of (N,1) fields; discharge negative; the
    # Ah counter goes negative on discharge.
    "panasonic-18650pf": dict(time="Time", current="Current", voltage="Voltage",
                              temperature="Battery_Temp_degC", ah_counter="Ah", time_unit="s",
                              current_unit="A", voltage_unit="V", ah_unit="Ah",
                              discharge_negative=True, mat_struct="meas"),
}

_FIELD_NAMES = tuple(f.name for f in fields(ColumnMap))


def make_column_map(preset: str | None = None, mapping: ColumnMap | None = None, **options) -> ColumnMap:
    """Build a :class:`ColumnMap` from a preset and/or a base mapping, then ``options``.

    Later sources win: preset < ``mapping`` < keyword options.  Options set to ``None`` are
    ignored (so argparse defaults do not override a preset).  Unknown option names are
    refused, listing the valid ones.

    Parameters
    ----------
    preset : str, optional
        Name of a preset in ``PRESETS``.
    mapping : ColumnMap, optional
        Base mapping; only its fields that differ from the defaults are applied.
    **options
        :class:`ColumnMap` field names and values; ``None`` values are ignored.

    Returns
    -------
    ColumnMap

    Raises
    ------
    RecordingError
        For an unknown preset or option name.
    """
    unknown = sorted(k for k in options if k not in _FIELD_NAMES)
    if unknown:
        raise RecordingError(f"unknown loader option(s) {', '.join(unknown)}; valid: {', '.join(_FIELD_NAMES)}")
    base: dict[str, Any] = {}
    if preset is not None:
        if preset not in PRESETS:
            raise RecordingError(f"unknown preset {preset!r}; known: {', '.join(sorted(PRESETS))}")
        base.update(PRESETS[preset])
    if mapping is not None:
        base.update({k: v for k, v in asdict(mapping).items() if v != getattr(ColumnMap, k, None)})
    base.update({k: v for k, v in options.items() if v is not None})
    return ColumnMap(**base)


# ----------------------------------------------------------------------------- raw tables
@dataclass(frozen=True, eq=False)
class RawTable:
    """Columns as read from a file, before mapping.

    ``columns`` maps each source name to a 1-D array (for CSV: strings, or float64 when every
    field of a plain file is a finite number, see ``_plain_numbers``; the stored dtype otherwise);
    ``where(k)`` says how to name data row ``k`` (0-based) in messages.
    """

    path: str
    fmt: str
    columns: Mapping[str, np.ndarray]
    file_lines: np.ndarray | None = None   # CSV: 1-based file line of each data row
    info: Mapping[str, Any] | None = None

    @property
    def n(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def where(self, k: int) -> str:
        if self.file_lines is not None:
            return f"data row {k + 1} (file line {int(self.file_lines[k])})"
        return f"row {k + 1}"


def _decode(raw: bytes, path=None) -> str:
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as e:
            raise RecordingError(f"{path}: starts with a UTF-16 byte-order mark but is not UTF-16 text "
                                 f"(byte {e.start}: {e.reason})") from None
    raw = raw.replace(b"\x00", b"")
    for enc in ("utf-8-sig", "cp1252", "latin-1"):
        try:
            return raw.decode(enc)
        except UnicodeDecodeError:
            continue
    return raw.decode("latin-1", errors="replace")  # pragma: no cover - latin-1 never fails


def _split(line: str, sep: str) -> list[str]:
    return [f.strip().strip('"').strip() for f in next(csv.reader([line], delimiter=sep))]


def _is_number(s: str) -> bool:
    try:
        float(s.replace(",", "."))
        return True
    except ValueError:
        return False


def _find_header(lines: list[str], wanted: tuple[str, ...], sep: str | None, path: str, decimal: str = ".",
                 max_scan: int = 200):
    """Index, separator and names of the header row: the first line holding the wanted names.

    When no line holds all of them, the line holding most of them (or else the first
    line that looks like a header) is returned, so the caller can list what exists.
    """
    seps = (sep,) if sep else tuple(s for s in _SEPARATORS if not (decimal == "," and s == ","))
    best = None  # (score, index, sep, names)
    for idx, line in enumerate(lines[:max_scan]):
        if not line.strip():
            continue
        for s in seps:
            if s not in line and len(seps) > 1:
                continue
            names = _split(line, s)
            score = sum(1 for w in wanted if w in names)
            if score == len(wanted):
                return idx, s, names, True
            looks = len([n for n in names if n]) >= 2 and not all(_is_number(n) for n in names if n)
            if not (score > 0 or looks):
                continue
            # a header is followed by a numeric row of the same width
            nxt = next((ln for ln in lines[idx + 1:idx + 4] if ln.strip()), "")
            vals = _split(nxt, s) if nxt else []
            follows = len(vals) == len(names) and sum(_is_number(v) for v in vals if v) >= len(vals) / 2
            key = (score, follows)
            if best is None or key > best[0]:
                best = (key, idx, s, names)
    if best is None:
        raise RecordingError(f"{path}: no header row found in the first {min(len(lines), max_scan)} lines "
                             f"(looked for columns {', '.join(wanted)})")
    return best[1], best[2], best[3], False


def _read_csv(path: Path, cmap: ColumnMap) -> RawTable:
    try:
        return _read_csv_text(path, cmap)
    except csv.Error as e:  # a field over the csv module's limit (128 KiB), a NUL inside quotes, ...
        raise RecordingError(f"{path}: not a readable CSV file ({e})") from None


def _read_csv_text(path: Path, cmap: ColumnMap) -> RawTable:
    raw = path.read_bytes()
    nul = raw.count(b"\x00")
    text = _decode(raw, path)
    lines = text.splitlines()
    if not text.strip():
        raise RecordingError(f"{path}: the file is empty")
    ends_with_newline = text.endswith(("\n", "\r"))
    wanted = (cmap.time_col, cmap.current_col, cmap.voltage_col)
    hidx, sep, names, complete = _find_header(lines, wanted, cmap.separator, str(path), cmap.decimal)
    if not complete:
        missing = [w for w in wanted if w not in names]
        raise RecordingError(f"{path}: column(s) {', '.join(repr(m) for m in missing)} not found; the header "
                             f"(file line {hidx + 1}) has columns {', '.join(repr(n) for n in names if n)}")
    body = lines[hidx + 1:]
    width = len(names)
    info: dict = {"header_line": hidx + 1, "separator": sep, "nul_bytes_removed": nul, "preamble_lines": hidx}
    nums = _plain_numbers(body, sep, width, cmap) if ends_with_newline else None
    flat = _plain_fields(body, sep, width) if ends_with_newline and nums is None else None
    if nums is not None or flat is not None:  # every line a full data row
        columns = [nums[:, c] for c in range(width)] if nums is not None else [flat[c::width] for c in range(width)]
        return _csv_table(path, cmap, names, columns, len(body), np.arange(hidx + 2, hidx + 2 + len(body)), info,
                          None, None, hidx)
    reader = csv.reader(body, delimiter=sep)
    rows, line_no = [], []
    named = max((c for c, nm in enumerate(names) if nm), default=-1) + 1  # fields up to the last named one
    units_row = None
    units_line = None
    short: tuple[int, int, int] | None = None  # (row index, file line, fields) of the first short row
    for j, rec in enumerate(reader):
        if not "".join(rec).strip():
            continue
        if not rows and units_row is None and _is_units_row(rec):
            units_row = list(rec)
            units_line = hidx + 2 + j
            continue
        if len(rec) > width and any(f.strip() for f in rec[width:]):
            raise RecordingError(f"{path}: data row {len(rows) + 1} (file line {hidx + 2 + j}) has "
                                 f"{len(rec)} fields, the header has {width}")
        if len(rec) < named and short is None:
            short = (len(rows), hidx + 2 + j, len(rec))
        if len(rec) != width:
            rec = (rec + [""] * width)[:width]
        rows.append(rec)
        line_no.append(hidx + 2 + j)
    if short is not None:
        k, line, nf = short
        if k != len(rows) - 1:
            raise RecordingError(f"{path}: data row {k + 1} (file line {line}) has {nf} fields, the header has "
                                 f"{width}; the file is damaged")
        info["truncated_last_row"] = f"file line {line} has {nf} of {width} fields"
        rows.pop()
        line_no.pop()
    elif rows and not ends_with_newline and len(rows) > 1 and named > 0:
        last, c = rows[-1], named - 1  # a cut inside the last line shortens (or empties) its last field
        prev = [r[c].strip() for r in rows[-51:-1]]
        field = last[c].strip()
        if all(prev) and (not field or len(field) < float(np.median([len(x) for x in prev]))):
            info["truncated_last_row"] = (f"file line {line_no[-1]} ends without a line end after a short "
                                          f"field {field!r}")
            rows.pop()
            line_no.pop()
    if not rows:
        raise RecordingError(f"{path}: no data rows after the header (file line {hidx + 1})")
    return _csv_table(path, cmap, names, list(zip(*rows)), len(rows), np.asarray(line_no), info, units_row,
                      units_line, hidx)


def _plain_fields(body: list[str], sep: str, width: int) -> list[str] | None:
    """All fields of ``body``, row after row, when every line is a plain data row; else None.

    Plain: no quote character (so the csv module would split exactly at ``sep``), exactly
    ``width`` fields on every line, no line of blanks, no line longer than the csv module's
    field limit, and a first line that is not a units row.  The general loop of
    :func:`_read_csv_text` handles everything else (and gives the same table for plain lines).
    """
    if not body:
        return None
    joined = sep.join(body)
    if '"' in joined or max(map(len, body)) > csv.field_size_limit():
        return None
    seps = repeat(sep)
    if set(map(str.count, body, seps)) != {width - 1}:
        return None
    if not all(map(str.strip, map(str.replace, body, seps, repeat("")))):   # a line of blanks is skipped
        return None
    if _is_units_row(body[0].split(sep)):
        return None
    return joined.split(sep)


# ASCII characters numpy's reader strips around a number as white space and Python's float() does not
# (Py_UNICODE_ISSPACE against Py_ISSPACE): a file holding one is left to the text path
_SPACE_NOT_FOR_FLOAT = ("\x1c", "\x1d", "\x1e", "\x1f")


def _plain_numbers(body: list[str], sep: str, width: int, cmap: ColumnMap) -> np.ndarray | None:
    """The data lines of a CSV as a float table, when every line is ``width`` finite ASCII numbers; else None.

    The fast path of :func:`_read_csv_text` for the usual file (a logger's or a script's numbers
    and nothing else): numpy's text reader (``np.loadtxt``, no comments, no quotes) converts every
    field without making a string of it, where the text path (:func:`_plain_fields` or the csv
    module, then :func:`_numeric`) makes one per field and converts it with Python's ``float``.
    Both round the decimal text correctly (``PyOS_string_to_double``), so the numbers are the
    same.  None, and the text path with every check and message of :func:`_numeric`, for anything
    else: a field that is not a finite ASCII number (a blank, ``nan``, text, quotes, a digit of
    another script, an ASCII separator control that numpy would strip as white space and Python's
    ``float`` would not), a line of another width or a blank line (the row count would differ), a
    line over the csv module's field limit, a first line that is a units row, the decimal mark
    ``,``, or a time column read as text (dates, ``hh:mm:ss``).

    Parameters
    ----------
    body : list of str
        The lines after the header (each without its line end).
    sep : str
        The field separator.
    width : int
        Fields per row (the header's).
    cmap : ColumnMap
        The reader options (decimal mark, time unit).

    Returns
    -------
    numpy.ndarray or None
        Shape ``(len(body), width)`` float64, or None.
    """
    if cmap.decimal != "." or cmap.time_unit.lower() in ("iso", "hms") or not body or width < 2:
        return None
    if max(map(len, body)) > csv.field_size_limit():
        return None
    joined = "\n".join(body)
    if not joined.isascii() or any(c in joined for c in _SPACE_NOT_FOR_FLOAT):
        return None
    if _is_units_row(body[0].split(sep)):
        return None
    try:
        vals = np.loadtxt(body, dtype=float, delimiter=sep, comments=None, quotechar=None, ndmin=2)
    except (ValueError, TypeError):
        return None
    if vals.shape != (len(body), width) or not np.isfinite(vals).all():
        return None
    return vals


def _csv_table(path, cmap, names, columns, n_rows, line_no, info, units_row, units_line, hidx) -> RawTable:
    """The RawTable of a CSV's data columns (``columns[c]`` = the fields of column c).

    A column given as a float array (:func:`_plain_numbers`) is kept as it is (a copy); a list of
    fields becomes an object array of str.
    """
    width = len(names)
    cols: dict[str, np.ndarray] = {}
    final: dict[int, str] = {}
    used = {cmap.time_col, cmap.current_col, cmap.voltage_col, cmap.temperature, cmap.soc_ref, cmap.ah_counter,
            "temperature_c", "soc_ref"}
    for c, nm in enumerate(names):
        numbers = isinstance(columns[c], np.ndarray)
        if not nm:
            if not numbers and not "".join(columns[c]).strip():
                continue  # trailing separator
            nm = f"column_{c + 1}"
        if nm in cols:
            if nm in used:
                raise RecordingError(f"{path}: column {nm!r} appears twice in the header (file line {hidx + 1}); "
                                     "which one is meant is ambiguous")
            k = 2
            while f"{nm}.{k}" in cols:
                k += 1
            nm = f"{nm}.{k}"
        if numbers:
            col = columns[c].copy()
        else:
            col = np.empty(n_rows, dtype=object)
            col[:] = columns[c]
        cols[nm] = col
        final[c] = nm
    if units_row is not None:
        info["units_row"] = {final[c]: f.strip() for c, f in enumerate(units_row[:width])
                             if c in final and f.strip()}
        info["units_line"] = units_line
    return RawTable(str(path), "csv", cols, line_no, info)


def _is_units_row(fields: list[str]) -> bool:
    """A row of units under the header, e.g. ``;;[V];[A];[Ah]`` or ``s,A,V``."""
    vals = [f.strip() for f in fields if f.strip()]
    if not vals:
        return False
    for v in vals:
        bracketed = len(v) >= 2 and v[0] + v[-1] in ("[]", "()")
        if not (bracketed or v.lower() in _UNIT_TOKENS):
            return False
    return True


def _read_parquet(path: Path, cmap: ColumnMap) -> RawTable:
    try:
        import pyarrow.parquet as pq
    except ImportError as e:
        raise RecordingError(f"{path}: reading Parquet needs pyarrow: pip install socfuse[parquet]") from e
    try:
        df = pq.read_table(path).to_pandas()
    except Exception as e:  # pyarrow raises its own types for corrupt files
        raise RecordingError(f"{path}: not a readable Parquet file ({e})") from e
    cols = {str(c): df[c].to_numpy() for c in df.columns}
    if not cols or len(df) == 0:
        raise RecordingError(f"{path}: the file is empty (no rows)")
    return RawTable(str(path), "parquet", cols, None, {})


# MAT-file level 5 (MathWorks, "MAT-File Format", the Level 5 MAT-file chapter): data types and array classes
_MI_NUMERIC = {1: "<i1", 2: "<u1", 3: "<i2", 4: "<u2", 5: "<i4", 6: "<u4", 7: "<f4", 9: "<f8", 12: "<i8", 13: "<u8"}
_MI_MATRIX, _MI_COMPRESSED = 14, 15
_MX_CELL, _MX_STRUCT, _MX_CHAR = 1, 2, 4
_MX_NUMERIC = range(6, 16)      # double, single, int8 .. uint64
_CHAR_UNITS = {1: 1, 2: 1, 16: 1, 4: 2, 17: 2}   # miINT8, miUINT8, miUTF8: 1 byte; miUINT16, miUTF16: 2


class _NotPlain(Exception):
    """The MAT file holds something the plain reader leaves to scipy."""


def _mat_tag(b, pos: int) -> tuple[int, int, int, int]:
    """(type, nbytes, data offset, next offset) of the data element at ``pos`` (small elements too)."""
    if pos + 8 > len(b):
        raise _NotPlain
    first, second = struct.unpack_from("<II", b, pos)
    if first >> 16:                 # small data element: the data sit in the tag's last 4 bytes
        return first & 0xFFFF, first >> 16, pos + 4, pos + 8
    end = pos + 8 + second
    if end > len(b):
        raise _NotPlain
    return first, second, pos + 8, pos + 8 + ((second + 7) // 8) * 8


def _mat_header(b, pos: int):
    """Class, dims and name of the miMATRIX at ``pos``, and the offset after its name (or _NotPlain)."""
    typ, nbytes, data, _ = _mat_tag(b, pos)
    if typ != _MI_MATRIX or nbytes == 0:
        raise _NotPlain
    ft, fn, fd, nxt = _mat_tag(b, data)
    if ft != 6 or fn != 8:
        raise _NotPlain
    flags = struct.unpack_from("<I", b, fd)[0]
    if flags & 0x0E00:              # complex, global or logical
        raise _NotPlain
    dt, dn, dd, nxt = _mat_tag(b, nxt)
    if dt != 5 or dn < 8 or dn % 4:
        raise _NotPlain
    dims = struct.unpack_from(f"<{dn // 4}i", b, dd)
    nt, nn, nd, nxt = _mat_tag(b, nxt)
    if nt != 1:
        raise _NotPlain
    name = bytes(b[nd:nd + nn])
    if not name.isascii():
        raise _NotPlain
    return flags & 0xFF, dims, name.decode("ascii"), nxt, pos + 8 + nbytes


def _mat_numeric(b, pos: int, dims) -> np.ndarray:
    typ, nbytes, data, _ = _mat_tag(b, pos)
    dt = _MI_NUMERIC.get(typ)
    n = int(np.prod(dims))
    if dt is None or nbytes != n * np.dtype(dt).itemsize:
        raise _NotPlain
    return np.frombuffer(b, dtype=dt, count=n, offset=data).astype(dt[1:])   # a copy, native order


def _equal_cell_words(w: np.ndarray, pos: int, end: int, n: int) -> np.ndarray | None:
    """Word offsets of ``n`` cells of one size filling ``pos .. end`` exactly, or None.

    The offsets the byte-count hop of :func:`_mat_text_cells` would find when every tag says the
    size of the first (each checked here at once); None sends that function through the hop.
    """
    if pos & 7 or pos + 8 > end:
        return None
    size = 8 + int(w[(pos >> 2) + 1])
    if size % 8 or pos + n * size != end:
        return None
    q = (pos + size * np.arange(n, dtype=np.int64)) >> 2
    if np.any(w[q] != _MI_MATRIX) or np.any(w[q + 1] != size - 8):
        return None
    return q


def _mat_text_cells(b, pos: int, end: int, n: int) -> np.ndarray:
    """A cell array of ``n`` one-line ASCII texts starting at ``pos``, as an object array of str."""
    offs = []
    u = memoryview(b)[:len(b) - len(b) % 4].cast("I") if sys.byteorder == "little" else None
    if u is None:
        raise _NotPlain
    w = np.frombuffer(b, dtype="<u4", count=len(u))
    q = _equal_cell_words(w, pos, end, n)
    if q is None:
        o = pos
        for _ in range(n):          # hop from cell to cell by the tag's byte count
            if o & 7 or o + 8 > end or u[o >> 2] != _MI_MATRIX:
                raise _NotPlain
            offs.append(o)
            o += 8 + u[(o >> 2) + 1]
        if o != end:
            raise _NotPlain
        q = np.asarray(offs, dtype=np.int64) >> 2
    if (np.any(w[q + 2] != 6) or np.any(w[q + 3] != 8) or np.any((w[q + 4] & 0x0EFF) != _MX_CHAR)
            or np.any(w[q + 6] != 5) or np.any(w[q + 7] != 8) or np.any(w[q + 8] != 1)
            or np.any(w[q + 10] != 1) or np.any(w[q + 11] != 0)):
        raise _NotPlain             # not all 1 x k char arrays with an empty name
    k = w[q + 9].astype(np.int64)
    t = w[q + 12]
    small = (t >> 16) != 0
    typ = np.where(small, t & 0xFFFF, t).astype(np.int64)
    nby = np.where(small, t >> 16, w[q + 13]).astype(np.int64)
    start = (q << 2) + np.where(small, 52, 56)
    units = np.array([_CHAR_UNITS.get(int(x), 0) for x in np.unique(typ)])
    if np.any(units == 0) or np.any(k < 1) or len(np.unique(typ)) != 1:
        raise _NotPlain
    unit = int(units[0])
    size = np.where(small, 8, 8 + (nby + 7) // 8 * 8)
    if np.any(nby != k * unit) or np.any(w[q + 1] != 40 + size):
        raise _NotPlain
    codec = "ascii" if unit == 1 else "utf-16-le"
    if unit == 1:                   # one-byte texts (time stamps): all decoded at once
        width = int(nby.max())
        inside = np.arange(width) < nby[:, None]
        chars = np.frombuffer(b, dtype=np.uint8)[np.minimum(start[:, None] + np.arange(width), len(b) - 1)]
        if np.any((chars == 0) & inside) or np.any(chars >= 128, where=inside):
            raise _NotPlain         # a NUL or a non-ASCII byte, as the decode below refuses them
        chars[~inside] = 0          # padding, dropped by the fixed-width bytes type
        col = np.empty(n, dtype=object)
        col[:] = np.ascontiguousarray(chars).view(f"S{width}")[:, 0].astype(f"U{width}")
        return col
    try:
        out = [bytes(b[a:a + m]).decode(codec) for a, m in zip(start.tolist(), nby.tolist())]
    except UnicodeDecodeError:
        raise _NotPlain from None
    if not "".join(out).isascii() or any("\x00" in x for x in out):
        raise _NotPlain
    col = np.empty(n, dtype=object)
    col[:] = out
    return col


def _read_mat_plain(path: Path, cmap: ColumnMap) -> RawTable | None:
    """A level-5 MAT file holding one 1x1 struct of column vectors, read without scipy; else None.

    Reads what lab exports hold (the Panasonic 18650PF files: a struct ``meas`` of double and
    uint8 columns and a cell array of time-stamp texts) and gives the columns
    ``scipy.io.loadmat(squeeze_me=False, struct_as_record=True)`` gives (numbers in the stored
    type, cells of text as str); anything else (no struct, several, complex, sparse, logical,
    objects, non-ASCII text, a damaged file) returns None and :func:`_read_mat` uses scipy.
    """
    import zlib

    raw = path.read_bytes()
    if len(raw) < 136 or raw[124:128] != b"\x00\x01IM" or 0 in raw[:4] or raw[116:124].strip(b" \x00"):
        return None
    try:
        tops, pos = [], 128
        while pos < len(raw):
            typ, nbytes = struct.unpack_from("<II", raw, pos)
            body = raw[pos + 8:pos + 8 + nbytes]
            if len(body) != nbytes:
                return None
            if typ == _MI_COMPRESSED:
                body = zlib.decompress(body)
            elif typ != _MI_MATRIX:
                return None
            else:
                body = raw[pos:pos + 8 + nbytes]
            cls, dims, name, after, end = _mat_header(body, 0)
            if name.startswith("__") or any(name == t[1] for t in tops):
                return None
            tops.append((cls, name, dims, body, after, end))
            pos += 8 + nbytes
        structs = [t for t in tops if t[0] == _MX_STRUCT]
        if cmap.mat_struct is not None:
            structs = [t for t in structs if t[1] == cmap.mat_struct]
        if len(structs) != 1 or any(t[0] == 3 for t in tops):
            return None
        _, chosen, dims, b, pos, end = structs[0]
        if int(np.prod(dims)) != 1:
            return None
        lt, ln, ld, pos = _mat_tag(b, pos)
        if lt != 5 or ln != 4:
            return None
        width = struct.unpack_from("<i", b, ld)[0]
        nt, nn, nd, pos = _mat_tag(b, pos)
        if nt != 1 or width <= 0 or nn % width:
            return None
        names = [bytes(b[nd + j:nd + j + width]).split(b"\x00")[0] for j in range(0, nn, width)]
        if not all(nm and nm.isascii() for nm in names) or len(set(names)) != len(names):
            return None
        cols: dict[str, np.ndarray] = {}
        for nm in names:
            if struct.unpack_from("<II", b, pos) == (_MI_MATRIX, 0):
                pos += 8                # [] : a 0x0 double, not a column
                continue
            cls, fdims, _, data, fend = _mat_header(b, pos)
            vector = len(fdims) == 2 and 1 in fdims
            n = int(np.prod(fdims))
            if cls in _MX_NUMERIC:
                a = _mat_numeric(b, data, fdims)
            elif cls == _MX_CELL and vector and n > 0:
                a = _mat_text_cells(b, data, fend, n)
            else:
                return None
            pos = fend
            if vector:
                cols[nm.decode("ascii")] = a
        if pos != end:
            return None
    except (_NotPlain, struct.error, zlib.error, ValueError, OverflowError, MemoryError):
        return None
    tcol = cmap.time_col
    if tcol in cols:
        n = cols[tcol].size
        cols = {k: a for k, a in cols.items() if a.size == n}
    if not cols or max(a.size for a in cols.values()) == 0:
        return None
    return RawTable(str(path), "mat", cols, None, {"mat_struct": chosen})


def _read_mat(path: Path, cmap: ColumnMap) -> RawTable:
    plain = _read_mat_plain(path, cmap)
    if plain is not None:
        return plain
    import scipy.io as sio

    try:
        data = sio.loadmat(path, squeeze_me=False, struct_as_record=True)
    except NotImplementedError as e:
        raise RecordingError(f"{path}: MATLAB v7.3 (HDF5) files are not supported; save with -v7") from e
    except Exception as e:
        raise RecordingError(f"{path}: not a readable MATLAB file ({e})") from e
    variables = {k: v for k, v in data.items() if not k.startswith("__")}
    if not variables:
        raise RecordingError(f"{path}: the file is empty (no variables)")
    structs = {k: v for k, v in variables.items() if isinstance(v, np.ndarray) and v.dtype.names}
    if cmap.mat_struct is not None:
        if cmap.mat_struct not in structs:
            raise RecordingError(f"{path}: no struct {cmap.mat_struct!r}; variables: "
                                 f"{', '.join(sorted(variables))}")
        chosen = cmap.mat_struct
    elif len(structs) == 1:
        chosen = next(iter(structs))
    elif len(structs) > 1:
        raise RecordingError(f"{path}: several structs ({', '.join(sorted(structs))}); choose one with mat_struct")
    else:
        chosen = None
    if chosen is not None:
        s = structs[chosen]
        if s.size != 1:
            raise RecordingError(f"{path}: struct {chosen!r} is an array of {s.size} structs; expected one")
        rec = s.reshape(-1)[0]
        src = {f: rec[f] for f in s.dtype.names}
    else:
        src = variables
    cols = {}
    for k, v in src.items():
        a = np.asarray(v)
        if a.ndim == 2 and 1 in a.shape:
            a = a.reshape(-1)
        if a.ndim != 1:
            continue  # not a column vector: not a recording column
        if a.dtype == object:
            a = _unwrap_cells(a)
        cols[str(k)] = a
    tcol = cmap.time_col
    if tcol in cols:
        n = cols[tcol].size
        cols = {k: a for k, a in cols.items() if a.size == n}
    if not cols or max(a.size for a in cols.values()) == 0:
        raise RecordingError(f"{path}: the file is empty (no column vectors)")
    return RawTable(str(path), "mat", cols, None, {"mat_struct": chosen})


def _unwrap_cells(a: np.ndarray) -> np.ndarray:
    """Object array of cell contents, each unwrapped by :func:`_mat_scalar`.

    The usual cell (a 1-element text or number array, e.g. a time stamp) is unwrapped by one
    index; anything else goes through :func:`_mat_scalar`.
    """
    nd = np.ndarray
    out = np.empty(a.size, dtype=object)
    out[:] = [x[0] if (type(x) is nd and x.shape == (1,) and x.dtype.kind in "USfiub") else _mat_scalar(x)
              for x in a.tolist()]
    return out


def _mat_scalar(x):
    """Unwrap MATLAB cell contents (nested 1-element arrays) to a Python scalar or string."""
    while isinstance(x, np.ndarray):
        if x.size != 1:
            return "" if x.size == 0 else str(x.tolist())
        x = x.reshape(-1)[0]
    return x


def read_table(path, cmap: ColumnMap | None = None) -> RawTable:
    """Read a file's columns without mapping them (for tools that list what a file holds).

    Parameters
    ----------
    path : str or os.PathLike
        A CSV, Parquet or MATLAB file.
    cmap : ColumnMap, optional
        Reader options (delimiter, MATLAB variable and so on); default :class:`ColumnMap()`.

    Returns
    -------
    RawTable
        The file's columns by name, unmapped and unconverted.

    Raises
    ------
    FileNotFoundError
        When ``path`` does not exist.
    RecordingError
        For a folder, an unknown suffix or an empty file.
    """
    p = Path(path)
    cmap = cmap or ColumnMap()
    if not p.exists():
        raise FileNotFoundError(f"{p}: no such file")
    if p.is_dir():
        raise RecordingError(f"{p}: is a folder, not a recording file")
    fmt = _SUFFIXES.get(p.suffix.lower())
    if fmt is None:
        raise RecordingError(f"{p}: unknown file type {p.suffix!r}; expected one of "
                             f"{', '.join(sorted(_SUFFIXES))}")
    if p.stat().st_size == 0:
        raise RecordingError(f"{p}: the file is empty")
    return {"csv": _read_csv, "parquet": _read_parquet, "mat": _read_mat}[fmt](p, cmap)


# ----------------------------------------------------------------------------- conversion
_MAX_MAGNITUDE = 1e9   # no cell or pack measurement (A, V, degC, fraction) reaches this
_MAX_TIME_S = 1e12     # about 31,700 years


def _non_ascii(a: np.ndarray) -> int | None:
    """Index of the first cell holding non-ASCII text (a digit of another script), or None."""
    try:
        joined = "".join(a.tolist())
    except TypeError:  # not all strings (Parquet/.mat objects)
        joined = None
    if joined is not None:
        if joined.isascii():
            return None
    for k, x in enumerate(a.tolist()):
        if isinstance(x, str) and not x.isascii():
            return k
    return None


_NUMBER_CHARS = frozenset("0123456789+-.eE")
_BLANK_WORDS = ("nan", "na", "n/a", "null", "none")


def _first_value_is_text(a: np.ndarray, decimal: str = ".") -> bool:
    """True when the first non-blank cell of ``a`` holds a character no number is written with.

    Such a cell never parses as a finite number (``pandas.to_numeric`` reads digits, sign,
    decimal mark and exponent only; the words it reads, ``inf`` and the blanks, are excluded
    here or refused anyway), so an optional column holding it is not numeric: the answer of
    :func:`_numeric` without converting the other cells.
    """
    allowed = _NUMBER_CHARS | {decimal}
    for x in a.tolist():
        t = "" if x is None else str(x).strip()
        if not t or t.lower() in _BLANK_WORDS:
            continue
        return not set(t) <= allowed
    return False


def _numeric(table: RawTable, name: str, decimal: str = ".", required: bool = True,
             allow_blank: bool = False, limit: float | None = _MAX_MAGNITUDE) -> np.ndarray | None:
    """Column ``name`` as float; refuse (or, ``required=False``, give None for) bad values.

    ``allow_blank``: blank and NaN cells become NaN (missing samples) instead of being refused;
    a column with no value at all is still refused.  ``limit``: magnitudes at or above it are
    refused (None: no limit).
    """
    a = table.columns[name]
    vals = None
    if a.dtype == object:
        k = _non_ascii(a)
        if k is not None:
            if not required:
                return None
            raise RecordingError(f"{table.path}: column {name!r} has a non-numeric value {str(a[k]).strip()!r} "
                                 f"at {table.where(k)} (numbers must be written with ASCII digits)")
        if decimal == ".":
            try:  # fast path: every cell parses as a finite float
                vals = a.astype(float)
            except (ValueError, TypeError):
                vals = None
            if vals is not None and not np.all(np.isfinite(vals)):
                vals = None
    if vals is not None:
        blank = text_bad = np.zeros(vals.size, dtype=bool)
    elif a.dtype.kind in "fiub":
        vals = a.astype(float)
        text_bad = np.zeros(vals.size, dtype=bool)
        blank = np.isnan(vals)
    elif a.dtype.kind in "Mm":
        if required:
            raise RecordingError(f"{table.path}: column {name!r} holds dates or durations; "
                                 "for time use the time unit 'iso'")
        return None
    else:
        if not required and _first_value_is_text(a, decimal):
            return None  # a text extra column (time stamps, step names): one bad value refuses it anyway
        if not required and not "".join(str(x) for x in a.tolist()).strip():
            return None  # an all-blank extra column: nothing to convert (first: the cheap look at one cell)
        import pandas as pd

        s = pd.Series(a, dtype=object).map(lambda x: "" if x is None else str(x).strip())
        if decimal == ",":
            s = s.str.replace(",", ".", regex=False)
        blank = (s == "").to_numpy() | s.str.lower().isin(["nan", "na", "n/a", "null", "none"]).to_numpy()
        vals = pd.to_numeric(s.where(~blank, None), errors="coerce").to_numpy(dtype=float)
        text_bad = ~np.isfinite(vals) & ~blank
        text_bad &= ~np.isinf(vals)
    inf = np.isinf(vals)
    with np.errstate(invalid="ignore"):
        huge = (np.abs(vals) >= limit) & ~inf if limit is not None else np.zeros(vals.size, dtype=bool)
    if not required:
        if np.any(text_bad | inf | huge):
            return None
        return vals
    if np.any(blank) and not (allow_blank and not np.all(blank)):
        k = int(np.argmax(blank))
        raise RecordingError(f"{table.path}: column {name!r} has a missing value at {table.where(k)}")
    if np.any(text_bad | inf):
        k = int(np.argmax(text_bad | inf))
        raise RecordingError(f"{table.path}: column {name!r} has a non-numeric value "
                             f"{str(a[k]).strip()!r} at {table.where(k)}")
    if np.any(huge):
        k = int(np.argmax(huge))
        raise RecordingError(f"{table.path}: column {name!r} has the value {vals[k]:.6g} at {table.where(k)}, "
                             f"beyond any cell or pack measurement (magnitude {limit:g} or more)")
    return vals


def _time_seconds(table: RawTable, cmap: ColumnMap) -> tuple[np.ndarray, dict]:
    name = cmap.time_col
    a = table.columns[name]
    unit = cmap.time_unit.lower()
    if unit not in ("iso", "hms") and a.dtype.kind not in "M":
        secs = _numeric(table, name, cmap.decimal, limit=None) * _TIME_UNITS[unit]
        big = np.abs(secs) > _MAX_TIME_S
        if np.any(big):
            k = int(np.argmax(big))
            raise RecordingError(f"{table.path}: column {name!r} has the time {secs[k]:.6g} s at {table.where(k)}, "
                                 f"beyond {_MAX_TIME_S:g} s; check --time-unit")
        return secs, {}
    import pandas as pd  # here: numeric time (the usual case) needs no pandas

    what = "an elapsed time hh:mm:ss" if unit == "hms" else (
        f"a time in format {cmap.time_format!r}" if cmap.time_format else "an ISO timestamp")
    if a.dtype.kind in "Mm":
        ts = pd.to_datetime(pd.Series(a), utc=True) if a.dtype.kind == "M" else pd.to_timedelta(pd.Series(a))
        bad_blank = ts.isna().to_numpy()
        text_bad = np.zeros_like(bad_blank)
    else:
        s = pd.Series(a, dtype=object).map(lambda x: "" if x is None else str(x).strip())
        blank = (s == "").to_numpy()
        s = s.where(~blank, None)
        if unit == "hms":
            ts = pd.to_timedelta(s, errors="coerce")
        else:
            ts = pd.to_datetime(s, utc=True, errors="coerce", format=cmap.time_format or "ISO8601")
        bad_blank = blank
        text_bad = ts.isna().to_numpy() & ~blank
    if np.any(bad_blank):
        k = int(np.argmax(bad_blank))
        raise RecordingError(f"{table.path}: column {name!r} has a missing time value at {table.where(k)}")
    if np.any(text_bad):
        k = int(np.argmax(text_bad))
        raise RecordingError(f"{table.path}: column {name!r} has a value that is not {what} "
                             f"{str(a[k]).strip()!r} at {table.where(k)}")
    if ts.dtype.kind == "m":
        return ts.dt.total_seconds().to_numpy(dtype=float), {}
    t0 = ts.iloc[0]
    secs = ((ts - t0).dt.total_seconds()).to_numpy(dtype=float)
    return secs, {"time_origin": t0.isoformat()}


def _require(table: RawTable, names) -> None:
    missing = [n for n in names if n is not None and n not in table.columns]
    if missing:
        have = ", ".join(repr(c) for c in table.columns)
        hint = "".join(f" (the layout of preset {k!r} fits)" for k, p in PRESETS.items()
                       if all(p[f] in table.columns for f in ("time", "current", "voltage")))
        raise RecordingError(f"{table.path}: column(s) {', '.join(repr(m) for m in missing)} not found; "
                             f"the file has columns {have}{hint}")


def find_gaps(time_s: np.ndarray, factor: float = 5.0) -> list[tuple[float, float]]:
    """Intervals longer than ``factor`` median intervals, as ``(time_s, length_s)`` pairs."""
    t = np.asarray(time_s, dtype=float)
    if t.size < 3:
        return []
    d = np.diff(t)
    med = float(np.median(d))
    idx = np.flatnonzero(d > factor * med)
    return [(float(t[k]), float(d[k])) for k in idx]


def recording_from_table(table: RawTable, cmap: ColumnMap) -> Recording:
    """Map, convert and validate a :class:`RawTable` into a :class:`Recording`."""
    path = table.path
    _require(table, (cmap.time_col, cmap.current_col, cmap.voltage_col, cmap.temperature, cmap.soc_ref,
                     cmap.ah_counter))
    if table.n == 0:
        raise RecordingError(f"{path}: no data rows")
    time_s, tinfo = _time_seconds(table, cmap)
    sign = -1.0 if cmap.discharge_negative else 1.0
    current_a = (_numeric(table, cmap.current_col, cmap.decimal) * _CURRENT_UNITS[cmap.current_unit.lower()]
                 * sign / cmap.parallel_cells + 0.0)
    voltage_v = (_numeric(table, cmap.voltage_col, cmap.decimal, allow_blank=True)
                 * _VOLTAGE_UNITS[cmap.voltage_unit.lower()] / cmap.series_cells)
    temp_name = cmap.temperature or ("temperature_c" if "temperature_c" in table.columns else None)
    temperature_c = None if temp_name is None else _numeric(table, temp_name, cmap.decimal)
    if temperature_c is not None and cmap.temperature_unit.lower() == "k":
        temperature_c = temperature_c - 273.15
    soc_name = cmap.soc_ref or ("soc_ref" if "soc_ref" in table.columns and cmap.ref_capacity_ah is None
                                else None)
    soc_ref = None if soc_name is None else _numeric(table, soc_name, cmap.decimal)
    if soc_ref is not None and cmap.soc_ref_unit.lower() == "percent":
        soc_ref = soc_ref / 100.0
    soc_source = None if soc_name is None else f"column {soc_name}"
    ah = None
    if cmap.ah_counter is not None:
        ah = _numeric(table, cmap.ah_counter, cmap.decimal) * _AH_UNITS[cmap.ah_unit.lower()]
    if cmap.ref_capacity_ah is not None:
        neg = cmap.discharge_negative if cmap.ah_discharge_negative is None else cmap.ah_discharge_negative
        s = 1.0 if neg else -1.0
        soc_ref = cmap.ref_soc0 + s * (ah - ah[0]) / cmap.ref_capacity_ah
        soc_source = (f"amp-hour counter {cmap.ah_counter}, capacity {cmap.ref_capacity_ah:g} Ah, "
                      f"soc0 {cmap.ref_soc0:g}")

    # time order: refuse going backwards, drop exact repeats
    d = np.diff(time_s)
    if np.any(d < 0):
        k = int(np.argmax(d < 0)) + 1
        raise RecordingError(f"{path}: column {cmap.time_col!r} decreases at {table.where(k)} "
                             f"({time_s[k - 1]:g} s then {time_s[k]:g} s)")
    keep = np.concatenate([[True], d > 0])
    n_dup = int(np.count_nonzero(~keep))
    if keep.sum() < 2:
        raise RecordingError(f"{path}: only {int(keep.sum())} distinct time stamp(s); a recording needs at "
                             "least 2 rows")

    used = {cmap.time_col, cmap.current_col, cmap.voltage_col, temp_name, soc_name}
    extras = {}
    for nm in table.columns:
        if nm in used:
            continue
        vals = _numeric(table, nm, cmap.decimal, required=False)
        if vals is None or not np.any(np.isfinite(vals)):
            continue
        v = vals[keep].copy()
        v.setflags(write=False)
        extras[nm] = v
    k_ = lambda a: None if a is None else a[keep]  # noqa: E731
    meta = {
        "source": path,
        "format": table.fmt,
        "mapping": cmap.to_dict(),
        "rows_read": int(table.n),
        "duplicates_dropped": n_dup,
        "duplicate_rows": [table.where(int(k)) for k in np.flatnonzero(~keep)[:20]],
        "gaps": find_gaps(time_s[keep], cmap.gap_factor),
        "voltage_missing": int(np.count_nonzero(np.isnan(voltage_v[keep]))),
        "extras": extras,
        "soc_ref_source": soc_source,
        "temperature_column": temp_name,
        "ah_counter_column": cmap.ah_counter,
        **tinfo,
        **(table.info or {}),
    }
    name = cmap.name if cmap.name is not None else Path(path).stem
    return Recording(time_s[keep], current_a[keep], voltage_v[keep], k_(temperature_c), k_(soc_ref),
                     name=name, metadata=meta)


def load_recording(path, mapping: ColumnMap | None = None, *, preset: str | None = None,
                   **options) -> Recording:
    """Load one recording file (.csv/.txt/.tsv, .parquet/.pq, .mat) into a :class:`Recording`.

    Parameters
    ----------
    path : str or Path
        The file; the suffix chooses the reader.
    mapping : ColumnMap, optional
        Column names, units and sign.  Default: the canonical columns of DESIGN.md section 3.
    preset : str, optional
        A ready-made mapping from :data:`PRESETS` (e.g. ``"panasonic-18650pf"``).
    **options
        Any :class:`ColumnMap` field, overriding the preset and ``mapping``.

    Returns
    -------
    Recording
        SI units, current positive on discharge; ``metadata`` holds ``source``, ``format``,
        ``mapping``, ``rows_read``, ``duplicates_dropped``, ``gaps`` [(time_s, length_s)],
        ``extras`` {name: array}, ``soc_ref_source`` and reader details.

    Raises
    ------
    RecordingError
        Bad input, naming the file, the column and the row.
    FileNotFoundError
        No such file.
    """
    cmap = make_column_map(preset=preset, mapping=mapping, **options)
    with gc_paused():
        table = read_table(path, cmap)
        return recording_from_table(table, cmap)


@contextmanager
def gc_paused():
    """No cyclic garbage collection inside the block (the previous state restored after it).

    For work that makes many objects but no reference cycles worth collecting.  Parsing a file
    makes a list per row and a string per cell; none of them form reference cycles, but every
    few hundred of them trigger a collection that walks the whole heap (numba's and scipy's
    objects included): about two thirds of a 10 Hz drive cycle's CSV read time.  Importing numba
    (``socfuse estimate``'s first compiled call) makes about a million objects and so a dozen
    full collections, 0.1 to 0.2 s of a warm run.  On leaving, the objects made inside join the
    oldest generation (``gc.freeze`` then ``gc.unfreeze``), so the first collection after the block
    does not walk them all as young objects; garbage cycles among them are found by the next full
    collection, as any.

    Parameters
    ----------
    None

    Yields
    ------
    None
    """
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        gc.freeze()                 # what the block made joins the oldest generation at once: the
        gc.unfreeze()               # next young collection does not walk it all (cycles still found)
        if was:
            gc.enable()


def bundled_recording_path(name: str) -> Path | None:
    """Path of a bundled demo recording (package data ``socfuse.datasets``), or None when not installed.

    Works in a source checkout (the repository's ``datasets/`` folder) and after a plain
    (non-editable) install, where the demo data is package data of ``socfuse.datasets``.

    Parameters
    ----------
    name : str
        File name inside ``socfuse.datasets`` (e.g. a demo CSV).

    Returns
    -------
    pathlib.Path or None
        The file, or None when the package data or the file is missing.
    """
    import importlib.resources as resources

    try:
        root = resources.files("socfuse.datasets")
    except (ModuleNotFoundError, TypeError):
        return None
    try:
        item = root / name
        if item.is_file():
            return Path(str(item))
    except (OSError, TypeError):
        return None
    return None
