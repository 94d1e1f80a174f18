"""Fast open-loop simulation: the names identification has always used.

There is one simulator, :mod:`models.simulation`; :func:`models.thevenin.simulate` and
:func:`simulate_fast` here are the same computation (``simulate_fast`` is kept as a name for
existing callers).
"""
from __future__ import annotations

from socfuse.models.simulation import hysteresis_filter, njit, rc_filter, simulate_model, soc_trajectory, unit_rc_response

__all__ = ["rc_filter", "hysteresis_filter", "soc_trajectory", "simulate_fast", "unit_rc_response", "njit"]

#: the one simulator (:func:`models.simulation.simulate_model`, also behind :func:`models.simulate`)
simulate_fast = simulate_model
