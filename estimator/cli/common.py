"""Argparse helpers shared by the commands that read recordings (check, estimate, tune, bench, identify).

Use::

    from socfuse.estimator.cli.common import add_mapping_options, load_from_args, load_checked
    add_mapping_options(parser)             # in register(): --time-col, --current-unit, --preset, ...
    rec = load_from_args(args, path)         # in run(): a models.recording.Recording
    rec = load_checked(args, path, model)    # ... checked for plausibility against the model first

The options map onto :class:`models.loaders.ColumnMap` fields; options left out keep the
preset's (or the canonical) value.  ``--trust-input`` lets a recording through that
:func:`models.plausibility.check_against_model` finds implausible (a likely unit or sign
mistake stops the command otherwise, exit 2, naming the column and the option that fixes it).
"""
from __future__ import annotations

import argparse
import sys

from socfuse.models.loaders import PRESETS, ColumnMap, load_recording, make_column_map
from socfuse.models.recording import Recording

__all__ = ["add_mapping_options", "mapping_from_args", "load_from_args", "load_checked", "check_json_inputs",
           "note"]

# (flag, ColumnMap field, help)
_COLUMN_FLAGS = (
    ("--time-col", "time", "source column holding time (default time_s)"),
    ("--current-col", "current", "source column holding current (default current_a)"),
    ("--voltage-col", "voltage", "source column holding terminal voltage (default voltage_v)"),
    ("--temperature-col", "temperature", "source column holding cell temperature, degC "
                                         "(default temperature_c when present)"),
    ("--soc-ref-col", "soc_ref", "source column holding a lab SOC reference, fraction 0..1 "
                                 "(default soc_ref when present)"),
    ("--ah-col", "ah_counter", "source column holding the cycler amp-hour counter"),
)


def add_mapping_options(parser: argparse.ArgumentParser) -> argparse.ArgumentParser:
    """Add the recording-mapping options (an option group) to ``parser``; returns it.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The command's parser; the options store into ``map_<field>`` destinations (plus ``preset``,
        ``drop_spikes`` and ``trust_input``).

    Returns
    -------
    argparse.ArgumentParser
        ``parser``.
    """
    g = parser.add_argument_group(
        "recording mapping",
        "how to read the recording file: column names, units and sign (default: the canonical columns "
        "time_s, current_a [A, + = discharge], voltage_v, temperature_c, soc_ref)")
    g.add_argument("--preset", choices=sorted(PRESETS), default=None,
                   help="ready-made mapping for a public dataset layout; other options override it")
    for flag, dest, text in _COLUMN_FLAGS:
        g.add_argument(flag, dest=f"map_{dest}", metavar="NAME", default=None, help=text)
    g.add_argument("--time-unit", dest="map_time_unit", choices=["s", "ms", "min", "h", "iso", "hms"],
                   default=None,
                   help="unit of the time column; iso = ISO 8601 timestamps counted from the first row; "
                        "hms = elapsed hh:mm:ss[.fff] (default s)")
    g.add_argument("--time-format", dest="map_time_format", default=None, metavar="FMT",
                   help="with --time-unit iso: strftime format of non-ISO date-time text, "
                        "e.g. '%%m/%%d/%%Y %%I:%%M:%%S %%p'")
    g.add_argument("--current-unit", dest="map_current_unit", choices=["A", "mA"], default=None,
                   help="unit of the current column (default A)")
    g.add_argument("--voltage-unit", dest="map_voltage_unit", choices=["V", "mV"], default=None,
                   help="unit of the voltage column (default V)")
    g.add_argument("--ah-unit", dest="map_ah_unit", choices=["Ah", "mAh"], default=None,
                   help="unit of the amp-hour counter (default Ah)")
    sign = g.add_mutually_exclusive_group()
    sign.add_argument("--discharge-negative", dest="map_discharge_negative", action="store_const", const=True,
                      default=None, help="the file logs discharge current as negative (it is flipped)")
    sign.add_argument("--discharge-positive", dest="map_discharge_negative", action="store_const",
                      const=False, help="the file logs discharge current as positive (the default)")
    ah_sign = g.add_mutually_exclusive_group()
    ah_sign.add_argument("--ah-discharge-negative", dest="map_ah_discharge_negative", action="store_const",
                         const=True, default=None,
                         help="the amp-hour counter falls on discharge (default: same sign as the current)")
    ah_sign.add_argument("--ah-discharge-positive", dest="map_ah_discharge_negative", action="store_const",
                         const=False, help="the amp-hour counter rises on discharge")
    g.add_argument("--ref-capacity-ah", dest="map_ref_capacity_ah", type=float, default=None, metavar="AH",
                   help="derive soc_ref from the amp-hour counter with this capacity, Ah")
    g.add_argument("--ref-soc0", dest="map_ref_soc0", type=float, default=None, metavar="SOC",
                   help="SOC (fraction 0..1) at the first row, for soc_ref from the amp-hour counter")
    g.add_argument("--separator", dest="map_separator", default=None, metavar="CHAR",
                   help="CSV field separator (default: detect , ; or tab)")
    g.add_argument("--decimal-comma", dest="map_decimal", action="store_const", const=",", default=None,
                   help="CSV numbers use a decimal comma (then fields are separated by ; or tab)")
    g.add_argument("--mat-struct", dest="map_mat_struct", default=None, metavar="NAME",
                   help=".mat variable holding the struct of columns (default: the only struct)")
    g.add_argument("--soc-ref-unit", dest="map_soc_ref_unit", choices=["fraction", "percent"], default=None,
                   help="unit of the soc_ref column (default fraction 0..1)")
    g.add_argument("--temperature-unit", dest="map_temperature_unit", choices=["degC", "K"], default=None,
                   help="unit of the temperature column (default degC)")
    g.add_argument("--series-cells", dest="map_series_cells", type=int, default=None, metavar="N",
                   help="the file logs a pack of N cells in series: the voltage is divided by N (balanced cells)")
    g.add_argument("--parallel-cells", dest="map_parallel_cells", type=int, default=None, metavar="M",
                   help="the file logs a pack of M cells in parallel: the current is divided by M")
    g.add_argument("--recording-name", dest="map_name", default=None, metavar="NAME",
                   help="recording name used in reports (default: the file name)")
    g.add_argument("--drop-spikes", action="store_true",
                   help="drop isolated current or voltage spikes (single samples far from their neighbours) "
                        "instead of refusing the recording; the number dropped is reported")
    g.add_argument("--trust-input", action="store_true",
                   help="use the recording even when it looks implausible for the model (a likely unit, sign or "
                        "pack mistake, or spikes); without it such a recording stops the command with exit 2")
    return parser


def mapping_from_args(args: argparse.Namespace) -> ColumnMap:
    """The :class:`models.loaders.ColumnMap` the parsed options describe.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed options of a parser set up by :func:`add_mapping_options`.

    Returns
    -------
    ColumnMap

    Raises
    ------
    RecordingError
        For an unknown preset.
    """
    opts = {k[4:]: v for k, v in vars(args).items() if k.startswith("map_") and v is not None}
    if "separator" in opts and opts["separator"] in ("\\t", "tab"):
        opts["separator"] = "\t"
    return make_column_map(preset=getattr(args, "preset", None), **opts)


def load_from_args(args: argparse.Namespace, path) -> Recording:
    """Load ``path`` with the mapping given on the command line (raises RecordingError).

    Parameters
    ----------
    args : argparse.Namespace
        Parsed options of a parser set up by :func:`add_mapping_options`.
    path : str or os.PathLike
        The recording file.

    Returns
    -------
    Recording
        In canonical units (s, A positive on discharge, V, degC, SOC fraction).
    """
    return load_recording(path, mapping_from_args(args))


def note(text: str) -> None:
    """One line to stderr (notes and cautions never mix with the results on stdout).

    Parameters
    ----------
    text : str
        The line (without newline).

    Returns
    -------
    None
    """
    print(text, file=sys.stderr)


def load_checked(args: argparse.Namespace, path, model=None) -> Recording:
    """Load ``path`` and check it against ``model`` (:func:`models.plausibility.require_plausible`).

    Parameters
    ----------
    args : argparse.Namespace
        Parsed options (mapping options and ``--trust-input``).
    path : str or Path
        The recording file.
    model : CellModel, optional
        The model it will be estimated with; None = a generic lithium-ion cell (identification).

    Returns
    -------
    Recording
        Warnings (missing voltage samples, a dropped truncated line, and the errors when trusted)
        are printed to stderr as ``note:`` lines.

    Raises
    ------
    RecordingError
        The file cannot be loaded, or it looks implausible and ``--trust-input`` was not given.
    """
    from socfuse.models.plausibility import drop_spikes, require_plausible

    rec = load_from_args(args, path)
    if getattr(args, "drop_spikes", False):
        rec, n = drop_spikes(rec, model)
        if n:
            note(f"note: {path}: dropped {n} spike sample(s) at t = "
                 + ", ".join(f"{x:.6g}" for x in rec.metadata["spikes_dropped"][:5])
                 + (" ..." if n > 5 else "") + " s")
    for f in require_plausible(rec, model, trust=bool(getattr(args, "trust_input", False)), source=str(path)):
        note(f"note: {f.message(str(path))}" if f.severity == "warning" else
             f"note: trusted as given: {f.message(str(path))}")
    return rec


def check_json_inputs(**paths) -> None:
    """Read each given JSON input (``what=path``; None skipped) with :func:`models.fileio.read_json`
    first, so a damaged cell-model or filter file is refused naming the file.

    Parameters
    ----------
    **paths : str, os.PathLike or None
        Keyword = the file's role (``cell_model``, ``filter``; ``_`` shown as ``-``), value = its path.

    Returns
    -------
    None
    """
    from socfuse.models.fileio import read_json

    for what, path in paths.items():
        if path is not None:
            read_json(path, what.replace("_", "-"))
