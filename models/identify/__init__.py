"""Identification of a cell model from lab tests (low-rate OCV test, pulse test, refinement).

Entry point: :func:`models.identify.pipeline.identify` (returns an ``IdentifyResult`` with the
model and a report).  Parts: :mod:`.ocvtest` (OCV curve, capacity, hysteresis half-gap,
coulombic efficiency), :mod:`.pulse` (pulse detection, R0, RC relaxation fits, DOE/INL pulse
resistance and power table), :mod:`.ocvsource` (OCV from several sources), :mod:`.refine`
(regularised least squares on a dynamic recording), :mod:`.validate` (open-loop voltage error),
:mod:`.fastsim` (fast simulation that follows the sampling rule), :mod:`.plots` (PNG plots).
"""
from socfuse.models.identify.pipeline import IdentifyError, IdentifyResult, identify

__all__ = ["identify", "IdentifyResult", "IdentifyError"]
