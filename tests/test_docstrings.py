"""Every docstring example in the package runs (numpydoc Examples are doctests)."""

import doctest
import importlib
import pkgutil

import pytest

import rulefeat

MODULES = sorted(m.name for m in pkgutil.walk_packages(rulefeat.__path__, prefix="rulefeat."))


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE | doctest.ELLIPSIS)
    assert result.failed == 0, f"{result.failed} docstring example(s) failed in {name}"
