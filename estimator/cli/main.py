"""The ``socfuse`` command line.

Each sub-command lives in its own module ``socfuse.estimator.cli.cmd_<name>`` exposing
``register(subparsers)``, which adds its parser and sets ``func`` to a callable taking the
parsed arguments and returning an exit code.

Failures (DESIGN.md section 4): bad usage or bad input exits with code 2 and one line on stderr
(a usage error adds one short usage line); anything else is a bug: exit 1 with one line naming
the exception.  ``SOCFUSE_DEBUG=1`` shows the traceback instead.  A closed pipe on stdout
(``socfuse check F | head``) ends the command quietly (exit 141, as a shell reports SIGPIPE);
Ctrl-C exits 130.  Results go to stdout; cautions, notes and progress to stderr.
"""
from __future__ import annotations

import argparse
import importlib
import os
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


class UsageError(CliError):
    """A command line argparse refused: one line, then one short usage line."""

    def __init__(self, message: str, usage: str):
        super().__init__(message)
        self.usage = usage


class _Parser(argparse.ArgumentParser):
    """ArgumentParser whose errors are one line plus one short usage line (sub-parsers inherit it)."""

    def short_usage(self) -> str:
        pos = []
        for a in self._actions:
            if a.option_strings or isinstance(a, argparse._SubParsersAction):
                continue
            name = a.metavar or a.dest.upper()
            pos.append(f"{name} [{name} ...]" if a.nargs in ("+", "*") else name)
        sub = any(isinstance(a, argparse._SubParsersAction) for a in self._actions)
        return (f"usage: {self.prog} [options] {'COMMAND ' if sub else ''}{' '.join(pos)}".rstrip()
                + f"  (see {self.prog} --help)")

    def error(self, message):  # noqa: D102 - argparse hook
        raise UsageError(message, self.short_usage())


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
    p = _Parser(
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


def _one_line(e: BaseException) -> str:
    text = str(e).strip()
    if isinstance(e, OSError) and e.filename is not None and e.strerror:
        text = f"{e.filename}: {e.strerror}"
    return text.splitlines()[0] if text else type(e).__name__


def _quiet_pipe() -> int:
    """stdout's reader went away: point stdout at /dev/null so the exit flush cannot fail again."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass
    return 141


def _exit_at_once(code: int) -> None:
    """End this process now with ``code``, stdout and stderr flushed, skipping the interpreter's teardown.

    Tearing down an interpreter that has loaded numba (its registries, llvmlite's LLVM, scipy.linalg)
    takes 0.3 to 0.4 s of a 1.5 s ``socfuse estimate``: freeing about a million objects nobody needs
    freed.  ``os._exit`` skips it (as mypy does for the same reason); it also skips ``atexit``
    handlers, so only a command whose results are all written and closed when ``run`` returns (no
    worker processes, no temporary folders left to a finaliser) opts in, by ``exit_at_once=True``
    in its parser defaults, and only when ``main`` runs the process's own command line.

    Parameters
    ----------
    code : int
        The process exit code.
    """
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


def main(argv=None) -> int:
    """Run the ``socfuse`` command line; returns the exit code (module docstring)."""
    whole_process = argv is None  # the console script or ``python -m``: this process ends with the command
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = os.environ.get("SOCFUSE_DEBUG", "") not in ("", "0")
    name = _chosen(argv) or "socfuse"
    prefix = "socfuse" if name == "socfuse" else f"socfuse {name}"
    try:
        parser = build_parser(argv)
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return 2
        code = int(args.func(args) or 0)
        sys.stdout.flush()  # a closed pipe shows here, inside the handler, not at interpreter exit
        if whole_process and getattr(args, "exit_at_once", False):
            _exit_at_once(code)
        return code
    except UsageError as e:
        print(f"{prefix}: error: {e}", file=sys.stderr)
        print(e.usage, file=sys.stderr)
        return 2
    except BrokenPipeError:
        return _quiet_pipe()
    except KeyboardInterrupt:
        print(f"{prefix}: interrupted", file=sys.stderr)
        return 130
    except (CliError, ValueError, OSError) as e:
        if debug:
            raise
        print(f"{prefix}: {_one_line(e)}", file=sys.stderr)
        return 2
    except Exception as e:  # a bug: say so in one line
        if debug:
            raise
        print(f"{prefix}: internal error: {type(e).__name__}: {_one_line(e)} (a bug in socfuse; run with "
              "SOCFUSE_DEBUG=1 for the traceback and please report it)", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    # python -m runs this file as __main__: use the package's copy so its exception classes are the ones
    # the commands raise
    from socfuse.estimator.cli.main import main as _main

    sys.exit(_main())
