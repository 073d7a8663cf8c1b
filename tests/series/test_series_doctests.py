"""Docstring examples of the series stage run as tests."""

from __future__ import annotations

import doctest

import pytest

from timeslice.series import change, dispersal, hindcast


@pytest.mark.parametrize("module", [change, dispersal, hindcast])
def test_docstring_examples(module):
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
    assert result.attempted > 0
