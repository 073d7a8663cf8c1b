"""timeslice.units: the one place units are converted (readers and config both use it)."""

from __future__ import annotations

import doctest

import pytest

import timeslice.units as u
from timeslice.errors import DataError


def test_docstring_examples():
    result = doctest.testmod(u, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.failed == 0
    assert result.attempted > 0


def test_fast_unit_table_agrees_with_pint():
    # the shortcut table must give exactly what pint (through cf_xarray.units) gives
    for text, expected in u.TEMPERATURE_TABLE.items():
        got = u.temperature_conversion(text, use_table=False)
        assert got == pytest.approx(expected, rel=1e-12, abs=1e-12), text
    for text, (kind, factor) in u.PRECIPITATION_TABLE.items():
        k, f = u.precipitation_conversion(text, use_table=False)
        assert k == kind and f == pytest.approx(factor, rel=1e-12), text


def test_length_and_fraction_factors():
    # SI definitions: 1 km = 1000 m, 1 ft = 0.3048 m exactly (international foot, 1959)
    assert u.length_factor("km") == pytest.approx(1000.0, rel=1e-12)
    assert u.length_factor("ft") == pytest.approx(0.3048, rel=1e-12)
    assert u.length_factor(None) == 1.0
    with pytest.raises(DataError, match=r"dem.tif: variable 'z' has units 'K', not a length"):
        u.length_factor("K", variable="z", source="dem.tif")
    assert u.fraction_factor("percent") == 0.01 and u.fraction_factor(None) == 1.0
    with pytest.raises(DataError, match=r"expected '%' or '1' \(fraction\)"):
        u.fraction_factor("m")
