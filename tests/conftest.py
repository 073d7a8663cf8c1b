"""Shared fixtures: seeded generators and tiny CF-attributed grids."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.grid import make_grid


@pytest.fixture
def rng():
    """A seeded generator; tests must pass for any seed."""
    return np.random.default_rng(20261201)


@pytest.fixture
def grid_factory():
    """Return a function making an empty regular grid Dataset."""

    def _make(lon_min=-10.0, lon_max=10.0, lat_min=40.0, lat_max=50.0, resolution=1.0):
        return make_grid(
            lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max,
            resolution=resolution,
        )

    return _make


@pytest.fixture
def monthly_factory(grid_factory, rng):
    """Return a function making a canonical monthly climatology (tasmin, tasmax, pr)."""

    def _make(**grid_kw):
        g = grid_factory(**grid_kw)
        month = np.arange(1, 13)
        shape = (12, g.sizes["lat"], g.sizes["lon"])
        season = 10 * np.sin(2 * np.pi * (month - 4) / 12)[:, None, None]
        tmin = -2 + season + rng.normal(0, 1, shape)
        tmax = tmin + 8 + rng.uniform(0, 4, shape)
        pr = rng.gamma(4, 20, shape)
        coords = {"month": month, "lat": g.lat, "lon": g.lon}
        dims = ("month", "lat", "lon")
        return xr.Dataset(
            {
                "tasmin": (dims, tmin, {"units": "degC", "standard_name": "air_temperature"}),
                "tasmax": (dims, tmax, {"units": "degC", "standard_name": "air_temperature"}),
                "pr": (dims, pr, {"units": "mm month-1", "long_name": "precipitation"}),
            },
            coords=coords,
        )

    return _make
