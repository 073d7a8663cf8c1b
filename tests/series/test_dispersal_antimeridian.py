"""Movement through the 180° meridian: a regional grid on its continuous axis is connected
across it, a global grid wraps, and a grid split at 180° is refused. Distances against
pyproj's geodesic on the authalic sphere."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import Geod

from timeslice.errors import DataError
from timeslice.grid import AUTHALIC_RADIUS_KM, make_grid
from timeslice.series.dispersal import distance_from, grid_graph, reachable

SPHERE = Geod(a=AUTHALIC_RADIUS_KM * 1e3, b=AUTHALIC_RADIUS_KM * 1e3)


def _map(g, arr):
    return xr.DataArray(arr, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})


def test_path_along_a_row_through_180_is_the_sum_of_geodesic_steps():
    g = make_grid(lon_min=170, lon_max=-170, lat_min=64, lat_max=66, resolution=0.5)
    lon, lat = g.lon.values, g.lat.values
    src = np.zeros((lat.size, lon.size), bool)
    src[1, 0] = True  # 170.25E
    row = np.zeros_like(src)
    row[1, :] = True  # only the row itself is passable: the path runs along it
    d = distance_from(_map(g, src), passable=_map(g, row)).values[1]
    steps = [SPHERE.inv(((lon[k] + 180) % 360) - 180, lat[1],
                        ((lon[k + 1] + 180) % 360) - 180, lat[1])[2] / 1e3
             for k in range(lon.size - 1)]
    np.testing.assert_allclose(d[1:], np.cumsum(steps), rtol=1e-9)
    # the step across 180 (179.75 -> 180.25) is one cell, not the width of the region
    k = int(np.argmin(np.abs(lon - 179.75)))
    assert d[k + 1] - d[k] == pytest.approx(steps[k], rel=1e-9)
    assert steps[k] == pytest.approx(111.195 * 0.5 * np.cos(np.deg2rad(lat[1])), rel=1e-3)


def test_limited_spread_reaches_across_180():
    g = make_grid(lon_min=175, lon_max=-175, lat_min=60, lat_max=62, resolution=0.5)
    ny, nx = g.sizes["lat"], g.sizes["lon"]
    suitable = np.ones((2, ny, nx), "int8")
    da = xr.DataArray(suitable, dims=("slice", "lat", "lon"),
                      coords={"slice": ["a", "b"], "lat": g.lat, "lon": g.lon,
                              "year": ("slice", [2000.0, 2100.0])})
    start = np.zeros((ny, nx), bool)
    start[:, g.lon.values < 180] = True  # occupied: everything west of 180
    # 100 years at 0.6 km/yr = 60 km: two cells of ~27 km at 61N beyond 180, not three
    out = reachable(da, _map(g, start), rate="0.6 km/yr", through="any").isel(slice=1).values
    east = g.lon.values > 180
    reached_east = g.lon.values[east][out[0, east] == 1]
    np.testing.assert_allclose(reached_east, [180.25, 180.75])


def test_global_grid_in_0_360_wraps_too():
    g = make_grid(lon_min=0, lon_max=360, lat_min=-1, lat_max=1, resolution=1.0)
    assert g.lon.values[0] == 0.5 and g.lon.values[-1] == 359.5
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[0, 0] = True
    d = distance_from(_map(g, src)).values
    assert d[0, -1] == pytest.approx(d[0, 1], rel=1e-9)


def test_grid_split_at_180_is_refused():
    g = make_grid(lon_min=170, lon_max=-170, lat_min=60, lat_max=62, resolution=1.0)
    split = ((g.lon.values + 180) % 360) - 180
    order = np.argsort(split)
    with pytest.raises(DataError, match="continuous_lon"):
        grid_graph(g.lat.values, split[order])
