"""The Examples blocks in docstrings run and print what they say."""

import doctest
import importlib

import pytest

MODULES = [
    "filtertwin.circuit.sallenkey",
    "filtertwin.circuit.design",
    "filtertwin.circuit.units",
    "filtertwin.circuit.eseries",
    "filtertwin.circuit.noise",
    "filtertwin.digital.resample",
    "filtertwin.checks.alias",
    "filtertwin.checks.foldpower",
    "filtertwin.circuit.prototypes",
    "filtertwin.archive.calibration",
    "filtertwin.archive.windows",
    "filtertwin.files.timestamps",
]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name):
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.failed == 0
