"""One filter step: the Python filter and the exported C code take the same decisions on a bad log.

The input checks, the innovation gate and its release, the SOC projection, the covariance floor,
the reset from the baseline and the NIS health monitor with fallback to coulomb counting are
defined once (``estimator/filters/kernels.py``: ``check_inputs``, ``ekf_run_monitored``, the
``ST_*`` status bits and limits; the C header's status bits and limits are generated from them).
Here one bad log - current spikes, an implausible and a missing voltage, an implausible
temperature, a current logged far too large (the RC states leave their physical range: reset),
a voltage sensor stuck 0.4 V high (NIS far above its chi-square mean: fallback, then recovery)
and a logging gap while working - goes through :func:`run_ekf` with ``monitor=True`` and through the compiled C
(gcc, C99, float32), and the per-sample status bits must be identical.  The reference for the
decisions is the C code itself, a separate implementation in another language and precision.
"""
from __future__ import annotations

import subprocess

import numpy as np
import pytest

from socfuse.estimator.filters import kernels as K
from socfuse.estimator.filters.ekf import run_ekf
from socfuse.estimator.filters.settings import default_settings
from socfuse.estimator.outputs.export_c import CFLAGS, export_c, find_c_compiler
from socfuse.models import CellModel, OcvCurve, ParamTable, RcPair, Recording, simulate

CC = find_c_compiler()

_DRIVER_C = r"""
#include <stdio.h>
#include <stdlib.h>
#include "socfuse_ekf.h"
int main(int argc, char **argv)
{
    sfx_state st;
    sfx_output out;
    double dt, i, v, t;
    FILE *f = fopen(argv[1], "r");
    (void)argc;
    if (!f) return 2;
    sfx_init(&st, (float)atof(argv[2]));
    while (fscanf(f, "%lf,%lf,%lf,%lf", &dt, &i, &v, &t) == 4) {
        unsigned int s = sfx_step(&st, (float)dt, (float)i, (float)v, (float)t, &out);
        printf("%u,%.9g,%.9g,%.9g,%d\n", s, (double)out.soc, (double)out.ekf_soc, (double)out.base_soc, out.healthy);
    }
    fclose(f);
    return 0;
}
"""


def _model() -> CellModel:
    soc = np.linspace(0.0, 1.0, 11)
    return CellModel(4.8, OcvCurve(soc, 3.3 + 0.7 * soc + 0.2 * soc ** 2), ParamTable.constant(0.02, "r0_ohm"),
                     (RcPair(ParamTable.constant(0.012, "r1"), ParamTable.constant(40.0, "tau1")),), 1.0, None,
                     2.5, 4.2, "parity cell")


def _bad_log(model):
    rng = np.random.default_rng(21)
    n = 2400
    t = np.arange(n, dtype=float)
    i = 4.0 * (np.sin(t / 50.0) > -0.3) - 1.5 * (np.sin(t / 17.0) > 0.8) + rng.normal(0, 0.2, n)
    sim = simulate(model, t, i, soc0=0.85)
    v = sim.voltage_v + rng.normal(0.0, 0.002, n)
    temp = np.full(n, 25.0)
    i_log = i.copy()
    i_log[[60, 61, 300]] = [1e9, -3e7, 5e6]   # spikes beyond any sensor range: held
    v[80] = 1e30                               # implausible voltage: predict only
    v[[90, 91, 92]] = np.nan                   # missing voltage
    v[100] = -2.0
    temp[110] = 900.0                          # implausible temperature: 25 degC used
    temp[2000:2100] = 60.0                     # plausible but outside the model's tables: voltage not used
    i_log[500:520] = 450.0                     # within 100 C but the RC state leaves its range: reset
    v[900:1300] += 0.4                         # voltage sensor stuck high: fallback, then recovery
    v[1400:1420] = 2.55                        # within 0.1 V of the 2.5 V cut-off: voltage not used
    keep = np.ones(n, bool)
    keep[1600:1900] = False                    # a 5 min logging gap while working
    return Recording(t[keep], i_log[keep], v[keep], temp[keep], name="bad log")


@pytest.mark.skipif(CC is None, reason="no C compiler")
@pytest.mark.parametrize("soc0,adapt", [(None, 0.0), (0.55, 0.0), (None, 600.0)])  # a hand-over 30 points low;
def test_python_and_c_take_the_same_decisions(tmp_path, soc0, adapt):          # the adaptive model error on
    model = _model()
    rec = _bad_log(model)
    s = default_settings(model).with_(model_error_adapt_s=adapt)
    tr = run_ekf(model, rec, s, soc0=soc0, monitor=True)
    export_c(model, s, tmp_path, rec.slice(0, 50), measure=False)
    (tmp_path / "driver.c").write_text(_DRIVER_C)
    b = subprocess.run([CC, *CFLAGS, "-o", str(tmp_path / "driver"), str(tmp_path / "driver.c"),
                        str(tmp_path / "socfuse_ekf.c"), "-lm"], capture_output=True, text=True, cwd=tmp_path)
    assert b.returncode == 0, b.stderr
    dt = np.concatenate([[0.0], np.diff(rec.time_s)])
    rows = np.column_stack([dt, rec.current_a, rec.voltage_v, rec.temperature_c])
    np.savetxt(tmp_path / "in.csv", rows, fmt="%.17g", delimiter=",")
    run = subprocess.run([str(tmp_path / "driver"), str(tmp_path / "in.csv"), str(-1.0 if soc0 is None else soc0)],
                         capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, run.stderr
    c = np.loadtxt(run.stdout.splitlines(), delimiter=",")
    c_status = c[:, 0].astype(np.int64)
    py_status = tr.status.copy()
    # every path was taken
    for bit in ("rej_current", "rej_voltage", "rej_temp", "gated", "fallback", "reset", "gap", "envelope"):
        assert np.any(py_status & K.STATUS_BITS[bit]), bit
    # identical decisions, sample by sample (the baseline's reseed bit is left out: the stream sees a
    # rest's end one sample later, and this log has no hour-long rest anyway)
    keep = ~np.int64(K.ST_RESEED)
    mismatch = np.flatnonzero((py_status & keep) != (c_status & keep))
    assert mismatch.size == 0, [(int(k), int(py_status[k]), int(c_status[k])) for k in mismatch[:10]]
    healthy_py = (py_status & K.ST_FALLBACK) == 0
    assert np.array_equal(healthy_py, c[:, 4].astype(bool))
    # the outputs follow: the BMS output is the baseline while unhealthy, in both
    assert np.max(np.abs(tr.soc - c[:, 1])) < 1e-3
    assert np.max(np.abs(tr.states[:, 0] - c[:, 2])) < 1e-3
    # recovered after the sensor was repaired
    assert healthy_py[-100:].all()
    # the voltages next to the cut-off are left out by both (kernels.voltage_outside_envelope, sfx_step)
    assert np.all(py_status[1400:1420] & K.ST_ENVELOPE) and np.all(c_status[1400:1420] & K.ST_ENVELOPE)
