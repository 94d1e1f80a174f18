"""The ``socfuse`` command line: one module per command (``cmd_<name>.py`` with ``register``),
imported lazily so ``socfuse --help`` stays light."""
from socfuse.estimator.cli.main import SAFETY_NOTE, CliError, main

__all__ = ["main", "CliError", "SAFETY_NOTE"]
