"""Intermediate slices by linear interpolation."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.harmonise import between


def _slice(value, year, sea_level):
    g = make_grid(lon_min=-45, lon_max=-15, lat_min=35, lat_max=60, resolution=1.0)
    shape = (12, g.sizes["lat"], g.sizes["lon"])
    dims = ("month", "lat", "lon")
    return xr.Dataset(
        {"tasmin": (dims, np.full(shape, value)), "tasmax": (dims, np.full(shape, value + 8)),
         "pr": (dims, np.full(shape, 50.0 + value))},
        coords={"month": np.arange(1, 13), "lat": g.lat, "lon": g.lon},
        attrs={"year": year, "sea_level": sea_level},
    )


def test_linear_weights():
    # 21 ka (year -19050, -120 m) and 6 ka (year -4050, -3 m): 12 ka is year -10050,
    # w = (-10050 + 19050) / 15000 = 0.6 (linear interpolation by definition)
    a = _slice(-10.0, 1950 - 21000, -120.0)
    b = _slice(0.0, 1950 - 6000, -3.0)
    out = between(a, b, 1950 - 12000)
    np.testing.assert_allclose(out["tasmin"].values, -10.0 * 0.4)
    np.testing.assert_allclose(out["pr"].values, 50.0 - 4.0)
    assert out.attrs["sea_level"] == pytest.approx(0.4 * -120 + 0.6 * -3)
    assert out.attrs["year"] == -10050.0
    assert "weight" in json.loads(out.attrs["harmonise_log"])[0]


def test_no_extrapolation_and_grid_check():
    a = _slice(-10.0, -19050.0, -120.0)
    b = _slice(0.0, -4050.0, -3.0)
    with pytest.raises(DataError, match="outside"):
        between(a, b, 1990.0)
    c = b.isel(lon=slice(0, 10))
    with pytest.raises(DataError, match="different grids"):
        between(a, c, -10000.0)
    with pytest.raises(DataError, match="year"):
        between(xr.Dataset(a.data_vars), b, -10000.0)  # no year attribute
