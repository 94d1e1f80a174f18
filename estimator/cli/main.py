"""The ``socfuse`` command line.

Each sub-command lives in its own module ``socfuse.estimator.cli.cmd_<name>`` exposing
``register(subparsers)``, which adds its parser and sets ``func`` to a callable taking the
parsed arguments and returning an exit code.  Bad usage or bad input exits with code 2 and a
one-line reason on stderr.
"""
from __future__ import annotations

import argparse
import importlib
import sys

SAFETY_NOTE = (
    "Caution: a SOC estimate is not a protection function; keep independent voltage, current and "
    "temperature protection, respect the cell maker's limits, run lab tests on lithium cells under "
    "local codes and licensed practice, and take production firmware through its functional-safety "
    "process (for example ISO 26262).")

# order shown in --help: command -> (module in socfuse.estimator.cli, one-line help)
COMMANDS = {
    "check": ("cmd_check", 'load a recording and print what to know before trusting it'),
    "identify": ("cmd_identify", 'identify the cell model from a low-rate OCV test and pulse (HPPC) tests'),
    "estimate": ("cmd_estimate", 'run an estimator over one recording and write its SOC trace'),
    "tune": ("cmd_tune", "tune the filter's process and measurement noise on recordings"),
    "bench": ("cmd_bench", 'benchmark estimators under fault scenarios and write a report'),
    "demo": ("cmd_demo", 'run the whole job on the bundled demo data'),
    "energy": ("cmd_energy", 'SOC_C to SOC_E table, rest energy and usable energy at a load'),
    "export-c": ("cmd_export_c", 'export the estimator as C99 with golden test vectors'),
}
COMMAND_HELP = {name: h for name, (_, h) in COMMANDS.items()}


class CliError(Exception):
    """Bad usage or bad input: printed as one line, exit code 2."""


def _chosen(argv) -> str | None:
    """The sub-command named in ``argv`` (the first word that is one), or None."""
    for a in argv:
        if a in COMMANDS:
            return a
        if not a.startswith("-"):
            return None
    return None


def build_parser(argv=None) -> argparse.ArgumentParser:
    """The argument parser; only the chosen sub-command's module is imported (lazy start-up:
    ``socfuse --help`` imports neither numba nor scipy).  ``argv=None`` registers every command."""
    p = argparse.ArgumentParser(
        prog="socfuse",
        description="State-of-charge estimation for battery-management engineers: characterise a cell, "
                    "run an EKF beside coulomb counting, benchmark under faults, tune, report, export C99.",
        epilog=SAFETY_NOTE)
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    chosen = _chosen(argv) if argv is not None else None
    for name, (module, help_) in COMMANDS.items():
        if argv is None or name == chosen:
            importlib.import_module(f"socfuse.estimator.cli.{module}").register(sub)
        else:
            sub.add_parser(name, help=help_, add_help=False)
    return p


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except CliError as e:
        print(f"socfuse {args.command}: {e}", file=sys.stderr)
        return 2
    except (ValueError, FileNotFoundError, KeyError) as e:
        msg = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        print(f"socfuse {args.command}: {msg}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
