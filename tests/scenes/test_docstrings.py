"""The examples in the scenes modules' docstrings run and give what they show."""

import doctest
import importlib

import pytest

MODULES = ["atmosphere", "optics", "optics_sets", "random_fields", "regimes", "structures", "surface", "draws",
           "generator", "model", "config", "plotting"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(f"surrogate3d.scenes.{name}")
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.failed == 0
