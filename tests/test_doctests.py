"""The examples in the engine's docstrings run and print what they show (doctest).

The numbers in the examples are invented; what each example prints is checked here against
the docstring, so an example cannot drift from the code.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import xlbridge.engine

MODULES = sorted(
    info.name for info in pkgutil.walk_packages(xlbridge.engine.__path__, "xlbridge.engine.")
)


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    module = importlib.import_module(name)
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE | doctest.ELLIPSIS)
    assert result.failed == 0, f"{result.failed} of {result.attempted} examples failed in {name}"


def test_public_functions_have_examples():
    """Each public engine function shows a runnable example."""
    from xlbridge.engine import (
        FitResult,
        checks,
        fit,
        fit_groups,
        optimum,
        row_diagnostics,
        slopes,
    )

    for func in (fit, fit_groups, checks, row_diagnostics, optimum, slopes, FitResult.predict):
        finder = doctest.DocTestFinder(recurse=False)
        examples = [ex for test in finder.find(func) for ex in test.examples]
        assert examples, f"{func.__qualname__} has no example"
