"""Docstring examples of the harmonise stage run as tests."""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["regrid", "interpolate"]  # timeslice.harmonise.<name>; units: tests/readers/test_units.py


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples(name):
    # import the module itself: the package re-exports a function called `regrid`
    module = importlib.import_module(f"timeslice.harmonise.{name}")
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
    assert result.attempted > 0
