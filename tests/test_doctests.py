"""Run the examples in the library's docstrings (numpydoc ``Examples`` sections)."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import loopwright

MODULES = sorted(
    m.name
    for m in pkgutil.walk_packages(loopwright.__path__, prefix="loopwright.")
    if not m.name.endswith("__main__")
)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
