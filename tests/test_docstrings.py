"""The examples in the docstrings of every module run and give what they show.

Every module of the package that has examples is one test case, and every case runs at
least one of them: an example marked ``+SKIP`` throughout would pass without running.
Examples run from the repository root, so they may read the files a checkout ships
(``models/default/``, ``training/``).
"""

import doctest
import importlib
import pkgutil
from pathlib import Path

import pytest

import surrogate3d

ROOT = Path(__file__).resolve().parents[1]
_FINDER = doctest.DocTestFinder()


def _modules():
    return sorted(info.name for info in pkgutil.walk_packages(surrogate3d.__path__, "surrogate3d.")
                  if not info.name.endswith("__main__"))


def _has_examples(name):
    return any(test.examples for test in _FINDER.find(importlib.import_module(name)))


WITH_EXAMPLES = [name for name in _modules() if _has_examples(name)]


def test_modules_are_found():
    # A broken discovery would pass by finding no case; these modules have examples.
    for name in ("surrogate3d.runtime", "surrogate3d.scenes.model", "surrogate3d.solvers.montecarlo",
                 "surrogate3d.pairs.build", "surrogate3d.learn.models"):
        assert name in WITH_EXAMPLES, name


@pytest.mark.parametrize("name", WITH_EXAMPLES)
def test_docstring_examples(name, monkeypatch):
    monkeypatch.chdir(ROOT)
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, report=False)
    assert result.attempted > 0, f"{name}: every example is skipped"
    assert result.failed == 0, f"{name}: {result.failed} of {result.attempted} examples failed (run pytest -s)"
