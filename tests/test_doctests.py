"""The docstring examples of every coverkit module run and give what they show (doctest, as part of the suite).

The examples' values are worked by hand in the docstrings themselves (Erlang's formulas from their closed forms);
this test only holds the code to them.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import coverkit

MODULES = sorted(
    m.name for m in pkgutil.walk_packages(coverkit.__path__, "coverkit.") if not m.name.endswith("__main__")
)


def test_the_examples_are_found():
    """The modules with examples are among those collected (a rename would otherwise silently skip them)."""
    for name in ("coverkit.errors", "coverkit.layer_names", "coverkit.where", "coverkit.queueing.erlang"):
        assert name in MODULES
        finder = doctest.DocTestFinder()
        assert any(t.examples for t in finder.find(importlib.import_module(name))), name


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE, verbose=False)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples in {name} failed (see output above)"
