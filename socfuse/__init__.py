"""socfuse: state-of-charge estimation for battery-management engineers.

Two sub-packages, one import name:

- :mod:`socfuse.models`: what the cell is and what was measured (recordings and loaders, OCV curve,
  Thevenin RC model, simulation, identification from lab tests, model files);
- :mod:`socfuse.estimator`: what the BMS believes (coulomb-counting baseline, EKF, UKF, smoother,
  tuning, consistency, benchmarks, reports, C99 export, the ``socfuse`` command line).

The calls a Python user starts from are re-exported here (imported lazily, so ``import socfuse`` is
cheap)::

    import socfuse
    rec = socfuse.load_recording("drive.csv")
    model = socfuse.load_model("model.json")
    trace = socfuse.estimate(model, rec, method="ekf")
    trace.to_frame()

Caution: a SOC estimate is not a protection function.  Keep independent voltage, current and
temperature protection, respect the cell maker's limits, and take production firmware through its
functional-safety process (for example ISO 26262).
"""
from __future__ import annotations

import importlib
from pathlib import Path as _Path

__version__ = "0.2.0"

# In a source checkout the sub-package folders models/ and estimator/ (and the data folder
# datasets/) sit beside this folder, not inside it; an installed copy has them inside (setuptools
# package-dir mapping in pyproject.toml).  Extending __path__ lets both layouts import as
# socfuse.models / socfuse.estimator.
_here = _Path(__file__).resolve().parent
if not (_here / "models").is_dir() and (_here.parent / "models" / "__init__.py").is_file():
    __path__.append(str(_here.parent))  # type: ignore[name-defined]

# public name -> (module, attribute)
_PUBLIC = {
    "load_recording": ("socfuse.models.loaders", "load_recording"),
    "Recording": ("socfuse.models.recording", "Recording"),
    "check_against_model": ("socfuse.models.plausibility", "check_against_model"),
    "CellModel": ("socfuse.models.thevenin", "CellModel"),
    "load_model": ("socfuse.models.modelfile", "load_model"),
    "save_model": ("socfuse.models.modelfile", "save_model"),
    "identify": ("socfuse.models.identify.pipeline", "identify"),
    "FilterSettings": ("socfuse.estimator.filters.settings", "FilterSettings"),
    "load_settings": ("socfuse.estimator.filters.settings", "load_settings"),
    "save_settings": ("socfuse.estimator.filters.settings", "save_settings"),
    "default_settings": ("socfuse.estimator.filters.settings", "default_settings"),
    "resolve_settings": ("socfuse.estimator.filters.settings", "resolve_settings"),
    "estimate": ("socfuse.estimator.filters.run", "estimate"),
    "METHODS": ("socfuse.estimator.filters.run", "METHODS"),
    "Trace": ("socfuse.estimator.filters.trace", "Trace"),
    "bench": ("socfuse.estimator.analysis.bench", "run_bench"),
    "tune": ("socfuse.estimator.analysis.tuning", "tune"),
    "export_c": ("socfuse.estimator.outputs.export_c", "export_c"),
}

__all__ = sorted(_PUBLIC) + ["__version__"]


def __getattr__(name: str):
    try:
        mod, attr = _PUBLIC[name]
    except KeyError:
        raise AttributeError(f"module 'socfuse' has no attribute {name!r}") from None
    value = getattr(importlib.import_module(mod), attr)
    globals()[name] = value
    return value


def __dir__():
    return __all__
