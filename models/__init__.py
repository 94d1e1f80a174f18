"""socfuse.models: what the cell is and what was measured.

Cell physics (OCV curve, Thevenin RC model, simulation), recordings and their loaders,
identification from lab tests, and cell-model files.  This package never imports
``estimator``.
"""
if __name__ == "models":  # imported as a bare top-level name from a source checkout
    raise ImportError("socfuse's models/ folder is the package socfuse.models; use `import socfuse.models`")

from socfuse.models.ocv import OcvCurve
from socfuse.models.tables import ParamTable
from socfuse.models.thevenin import CellModel, Hysteresis, RcPair, Simulation, discretise_rc, interval_current, simulate
from socfuse.models.recording import Recording, RecordingError, charge_throughput_ah, find_rests
from socfuse.models.loaders import ColumnMap, load_recording
from socfuse.models.modelfile import MODEL_SCHEMA, ModelFileError, load_model, save_model, model_to_dict, model_from_dict

__all__ = [
    "OcvCurve", "ParamTable", "CellModel", "Hysteresis", "RcPair", "Simulation", "discretise_rc",
    "interval_current", "simulate", "Recording", "RecordingError", "charge_throughput_ah", "find_rests",
    "ColumnMap", "load_recording", "MODEL_SCHEMA", "ModelFileError", "load_model", "save_model", "model_to_dict", "model_from_dict",
]
