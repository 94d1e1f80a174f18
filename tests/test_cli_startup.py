"""Lazy start-up: ``socfuse --help`` imports no sub-command's heavy dependencies."""
from __future__ import annotations

import subprocess
import sys

from socfuse.estimator.cli.main import COMMANDS, build_parser


def test_help_imports_neither_numba_nor_scipy():
    code = ("import sys; from socfuse.estimator.cli.main import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('numba', 'scipy', 'pandas', 'matplotlib') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip().splitlines()[-1] == "[]"


def test_every_command_registers():
    # the full parser (argv=None) imports every command module; each one is reachable
    p = build_parser()
    sub = next(a for a in p._actions if a.dest == "command")
    assert set(sub.choices) == set(COMMANDS)
