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

# order shown in --help
COMMANDS = ["check", "identify", "estimate", "tune", "bench", "demo", "energy", "export_c"]


class CliError(Exception):
    """Bad usage or bad input: printed as one line, exit code 2."""


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="socfuse",
        description="State-of-charge estimation for battery-management engineers: characterise a cell, "
                    "run an EKF beside coulomb counting, benchmark under faults, tune, report, export C99.",
        epilog=SAFETY_NOTE)
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"socfuse.estimator.cli.cmd_{name}")
        except ModuleNotFoundError as e:
            if e.name != f"socfuse.estimator.cli.cmd_{name}":
                raise
            continue
        mod.register(sub)
    return p


def main(argv=None) -> int:
    parser = build_parser()
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
