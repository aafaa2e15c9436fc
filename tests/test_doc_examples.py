"""The Examples blocks in docstrings run and print what they say."""

import doctest
import importlib

import pytest

MODULES = [
    "filtertwin.sallenkey",
    "filtertwin.design",
    "filtertwin.units",
    "filtertwin.eseries",
    "filtertwin.noise",
    "filtertwin.resample",
    "filtertwin.checks.alias",
    "filtertwin.checks.foldpower",
    "filtertwin.prototypes",
    "filtertwin.archive.calibration",
    "filtertwin.archive.windows",
    "filtertwin.timestamps",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.failed == 0
