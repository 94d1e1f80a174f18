"""``socfuse identify`` (default options, the documented CLI path) on PyBaMM physics cells.

Outside reference: PyBaMM (Sulzer et al., J. Open Res. Softw. 9, 14, 2021) SPMe simulations of its
bundled parameter sets Chen2020 (NMC811 / graphite-SiOx, LG M50; Chen et al., J. Electrochem. Soc.
167, 080534, 2020) and Prada2013 (LFP / graphite, A123; Prada et al., J. Electrochem. Soc. 160,
A616, 2013), recorded with BMS-grade sensor errors by datasets/physics.py (short mode).  The truth
is the model's own: its C/20 capacity, its equilibrium voltage (electrode OCPs at the
particle-averaged stoichiometries) and its charge counter.  Thresholds are the targets of the
identification issue.
"""
from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("pybamm")

from socfuse.datasets import physics  # noqa: E402
from socfuse.estimator.cli.main import main  # noqa: E402
from socfuse.models import load_model  # noqa: E402
from socfuse.models.identify.pipeline import identify  # noqa: E402
from socfuse.models.identify.validate import validate  # noqa: E402
from socfuse.models.loaders import load_recording  # noqa: E402


@pytest.fixture(scope="module", params=sorted(physics.CELLS))
def identified(request, tmp_path_factory):
    case = physics.generate(request.param, short=True)
    out = tmp_path_factory.mktemp("phys") / "model.json"
    code = main(["identify", "--ocv-test", str(case.path("c20")), "--pulse-test", str(case.path("pulse")),
                 "-o", str(out)])
    assert code == 0
    return case, load_model(out)


def test_capacity_within_half_a_percent_of_the_c20_capacity(identified):
    case, model = identified
    # true C/20 capacity from full to the cut-off (PyBaMM's charge counter); the sensor's 0.4 % gain
    # error is not observable from the tests and stays in the figure
    err = model.capacity_ah / case.c20_capacity_ah - 1.0
    assert abs(err) < 0.005, err
    # PyBaMM's SPMe has no side reactions: coulombic efficiency 1
    assert model.coulombic_efficiency == pytest.approx(1.0, abs=0.005)


def test_offset_estimated_and_recorded(identified):
    case, model = identified
    off = model.provenance["current_offset"]
    # DESIGN.md section 7 sensor: offset 0.5 % of 1C; estimated within 4 standard errors + 0.2 mA
    assert off["pooled_a"] == pytest.approx(case.sensor_offset_a, abs=4 * off["pooled_sigma_a"] + 2e-4)


def test_ocv_within_5_mv_rms_of_the_true_equilibrium_voltage(identified):
    case, model = identified
    soc = np.linspace(0.1, 0.9, 81)
    rms = float(np.sqrt(np.mean((model.ocv.voltage(soc) - case.equilibrium_voltage(soc)) ** 2)))
    assert rms < 0.005, rms
    # PyBaMM's sets model no OCV hysteresis: none may be identified
    assert model.hysteresis is None
    assert model.provenance["hysteresis"]["used"] is False


def test_open_loop_voltage_on_a_dynamic_recording(identified):
    case, model = identified
    # drive_3: 15 min of our stop-and-go profile at 10 Hz (peaks 2C, regen 1C), from mid SOC
    rec = load_recording(case.path("drive_3"))
    v = validate(model, rec)
    assert v.rms_v < 0.010, v.rms_v


def test_pulse_count_equals_the_protocol(identified):
    case, _ = identified
    res = identify(load_recording(case.path("c20")), [load_recording(case.path("pulse"))])
    proto = case.manifest["files"]["pulse"]["pulses"]
    pulses = [p for p in res.pulse_tests[0].pulses if p.pulse.kind == "pulse"]
    moves = [p for p in res.pulse_tests[0].pulses if p.pulse.kind == "move"]
    assert len(pulses) == proto["discharge_pulses"] + proto["charge_pulses"]
    assert len(moves) == proto["soc_steps"]
    # charge pulses that met the upper cut-off were held at constant voltage: recognised as such
    limited = [p for p in pulses if p.pulse.limited == "upper"]
    assert len(limited) == proto["cv_limited_charge_pulses"]
    assert all(p.pulse.direction < 0 for p in limited)
