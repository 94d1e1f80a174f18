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


def test_estimate_process_exits_at_once_with_everything_written(tmp_path):
    # `socfuse estimate` as its own process ends by os._exit (cli.main._exit_at_once): the trace file,
    # stdout, stderr and the exit code must be those of the same command run inside this process
    import gc

    import numpy as np

    from ekf_cases import simulated_recording, tiny_model
    from socfuse.estimator.cli.main import main
    from socfuse.models.loaders import gc_paused
    from socfuse.models.modelfile import save_model

    m = tiny_model(n_rc=1)
    rec, _ = simulated_recording(m, n=400, soc0=0.7, seed=2)
    rec_path = tmp_path / "rec.csv"
    np.savetxt(rec_path, np.column_stack([rec.time_s, rec.current_a, rec.voltage_v]), fmt="%.17g",
               delimiter=",", header="time_s,current_a,voltage_v", comments="")
    save_model(m, tmp_path / "model.json")
    args = ["estimate", "--model", str(tmp_path / "model.json"), str(rec_path)]
    p = subprocess.run([sys.executable, "-m", "socfuse.estimator.cli.main", *args, "-o", str(tmp_path / "a.csv")],
                       capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert p.stdout.startswith("wrote ") and "Caution:" in p.stderr
    assert main([*args, "-o", str(tmp_path / "b.csv")]) == 0
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    # bad input still exits 2 with its one line (the early exit is for a finished run only)
    p = subprocess.run([sys.executable, "-m", "socfuse.estimator.cli.main", *args, "-o", str(tmp_path / "a.csv")],
                       capture_output=True, text=True)
    assert p.returncode == 2 and "exists" in p.stderr
    # the collector pause of estimate's run leaves the collector as it found it
    for enabled in (True, False):
        (gc.enable if enabled else gc.disable)()
        with gc_paused():
            assert not gc.isenabled()
        assert gc.isenabled() is enabled
    gc.enable()
