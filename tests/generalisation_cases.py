"""Helper for the tests that run ``benchmarks/generalisation.py`` (not a test module)."""
from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def load_benchmark():
    """The benchmark script as a module (benchmarks/ is not a package)."""
    name = "socfuse_benchmark_generalisation"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, REPO / "benchmarks" / "generalisation.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    spec.loader.exec_module(mod)
    return mod
