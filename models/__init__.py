"""socfuse.models: what the cell is and what was measured.

Cell physics (OCV curve, Thevenin RC model, simulation), recordings and their loaders,
identification from lab tests, and cell-model files.  This package never imports
``estimator``.
"""
from .ocv import OcvCurve
from .tables import ParamTable
from .thevenin import CellModel, Hysteresis, RcPair, Simulation, discretise_rc, interval_current, simulate
from .recording import Recording, RecordingError, charge_throughput_ah, find_rests
from .loaders import ColumnMap, load_recording
from .modelfile import MODEL_SCHEMA, ModelFileError, load_model, save_model, model_to_dict, model_from_dict

__all__ = [
    "OcvCurve", "ParamTable", "CellModel", "Hysteresis", "RcPair", "Simulation", "discretise_rc",
    "interval_current", "simulate", "Recording", "RecordingError", "charge_throughput_ah", "find_rests",
    "ColumnMap", "load_recording", "MODEL_SCHEMA", "ModelFileError", "load_model", "save_model", "model_to_dict", "model_from_dict",
]
