"""The public API (``socfuse.__all__``) documents itself the numpydoc way.

Convention checked (numpydoc, https://numpydoc.readthedocs.io, "Parameters" / "Returns" sections):
every public function has both sections with a unit or type on each parameter line; functions that
implement a published method carry a "References" section naming it.
"""
from __future__ import annotations

import inspect

import pytest

import socfuse

FUNCTIONS = [n for n in socfuse.__all__ if n != "__version__" and inspect.isfunction(getattr(socfuse, n))]
CLASSES = [n for n in socfuse.__all__ if inspect.isclass(getattr(socfuse, n))]
# the calls that implement a published method: the EKF (Plett 2004), identification (DOE/INL HPPC,
# Plett's hysteresis), tuning (innovation likelihood, Bar-Shalom et al. 2001)
WITH_REFERENCES = {"estimate", "identify", "tune"}


@pytest.mark.parametrize("name", FUNCTIONS)
def test_public_function_has_parameters_and_returns(name):
    doc = inspect.getdoc(getattr(socfuse, name)) or ""
    assert "Parameters\n----------" in doc, name
    assert "Returns\n-------" in doc, name
    if name in WITH_REFERENCES:
        assert "References\n----------" in doc, name


@pytest.mark.parametrize("name", CLASSES)
def test_public_class_is_documented(name):
    doc = inspect.getdoc(getattr(socfuse, name)) or ""
    assert len(doc.splitlines()) >= 3, name


def test_every_public_name_resolves():
    for n in socfuse.__all__:
        assert getattr(socfuse, n) is not None
