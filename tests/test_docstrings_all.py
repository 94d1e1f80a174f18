"""Every public function of socfuse.models and socfuse.estimator has numpydoc Parameters and Returns.

Convention: the numpydoc docstring standard (https://numpydoc.readthedocs.io, "Style guide"):
a ``Parameters`` section and a ``Returns`` (or, for generators and context managers, ``Yields``)
section, each a title underlined with hyphens.  "Public" here means a name in a module's
``__all__`` that is a function defined in that module (re-exports are checked where defined).
"""

import importlib
import inspect
import pkgutil

import pytest

BASES = ("socfuse.models", "socfuse.estimator")

# every module is covered
EXEMPT: set = set()


def _module_names():
    names = []
    for base in BASES:
        pkg = importlib.import_module(base)
        names.append(base)
        names += [m.name for m in pkgutil.walk_packages(pkg.__path__, base + ".")]
    return sorted(set(names))


MODULES = _module_names()


def _missing(modname):
    mod = importlib.import_module(modname)
    out = []
    for n in getattr(mod, "__all__", []) or []:
        o = getattr(mod, n, None)
        if inspect.isfunction(o) and o.__module__ == modname:
            d = inspect.getdoc(o) or ""
            lacks = []
            if "Parameters\n---" not in d:
                lacks.append("Parameters")
            if "Returns\n---" not in d and "Yields\n---" not in d:
                lacks.append("Returns/Yields")
            if lacks:
                out.append(f"{n}: no {' and '.join(lacks)}")
    return out


def test_the_walk_finds_the_packages():
    # the check below would pass vacuously if the walk found nothing
    assert "socfuse.models.thevenin" in MODULES
    assert "socfuse.estimator.filters.ekf" in MODULES
    assert len(MODULES) > 40


def test_the_check_detects_a_missing_section(monkeypatch):
    # a public function with only a summary line must be reported (the check can fail)
    mod = importlib.import_module("socfuse.models.thevenin")

    def bare(x):
        """Only a summary."""
        return x

    bare.__module__ = mod.__name__
    monkeypatch.setattr(mod, "bare", bare, raising=False)
    monkeypatch.setattr(mod, "__all__", list(mod.__all__) + ["bare"])
    assert _missing(mod.__name__) == ["bare: no Parameters and Returns/Yields"]


@pytest.mark.parametrize("modname", [m for m in MODULES if m not in EXEMPT])
def test_public_functions_have_parameters_and_returns(modname):
    missing = _missing(modname)
    assert not missing, f"{modname}: " + "; ".join(missing)
