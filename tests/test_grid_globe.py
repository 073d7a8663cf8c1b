"""Grids over the whole globe: the continuous longitude axis across 180°, the polar cap of
Gaussian-like grids, and the [grid] keys checked at config load."""

from __future__ import annotations

import numpy as np
import pytest

from timeslice.config import parse_config
from timeslice.errors import ConfigError, DataError
from timeslice.grid import (
    AUTHALIC_RADIUS_KM,
    cell_area,
    cell_bounds,
    continuous_lon,
    is_global_lon,
    lon_order,
    make_grid,
    wrap_lon,
)


@pytest.mark.parametrize(("lon_min", "lon_max"), [(160, 200), (160, -160), (-200, -160), (520, 560)])
def test_crossing_180_written_any_way_gives_one_axis(lon_min, lon_max):
    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=60, lat_max=70, resolution=0.5)
    np.testing.assert_allclose(g.lon.values, np.arange(160.25, 200, 0.5))
    assert not is_global_lon(g.lon.values)


def test_region_in_0_360_terms_is_brought_to_minus_180_180():
    g = make_grid(lon_min=190, lon_max=230, lat_min=0, lat_max=1, resolution=1.0)
    np.testing.assert_allclose(g.lon.values, np.arange(-169.5, -130, 1.0))


@pytest.mark.parametrize(("lon_min", "lon_max"), [(-180, 180), (0, 360), (20, 20 + 360)])
def test_global_grids(lon_min, lon_max):
    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=-90, lat_max=90, resolution=2.0)
    assert is_global_lon(g.lon.values) and g.sizes["lon"] == 180
    # 4 pi R^2 (sphere surface) whatever the seam
    assert float(cell_area(g).sum()) == pytest.approx(4 * np.pi * AUTHALIC_RADIUS_KM**2, rel=1e-12)


@pytest.mark.parametrize("kw", [dict(lon_min=0, lon_max=0), dict(lon_min=0, lon_max=400),
                                dict(lat_min=10, lat_max=5), dict(lat_min=-95, lat_max=0)])
def test_bad_extents_are_refused(kw):
    base = dict(lon_min=0, lon_max=10, lat_min=0, lat_max=10, resolution=1.0)
    with pytest.raises(DataError):
        make_grid(**{**base, **kw})


def test_area_of_region_across_180_equals_sphere_formula():
    # R^2 * dlon * (sin phi2 - sin phi1) for the whole box 165E..165W x 60N..75N (Snyder 1987)
    g = make_grid(lon_min=165, lon_max=-165, lat_min=60, lat_max=75, resolution=0.25)
    ref = AUTHALIC_RADIUS_KM**2 * np.deg2rad(30.0) * (np.sin(np.deg2rad(75)) - np.sin(np.deg2rad(60)))
    assert float(cell_area(g).sum()) == pytest.approx(ref, rel=1e-12)


def test_gaussian_rows_reach_the_poles():
    # a T63-like axis: 96 rows, first at 88.57 (Gaussian grids have no row a half step from
    # the pole); the outermost cells are the polar caps, so the grid covers the sphere
    lat = np.linspace(-88.572, 88.572, 96)
    b = cell_bounds(lat, kind="lat")
    assert b[0, 0] == -90.0 and b[-1, 1] == 90.0
    np.testing.assert_allclose(b[1:, 0], b[:-1, 1])
    # a regional axis keeps its half-step edges
    b = cell_bounds(np.arange(60.25, 70, 0.5), kind="lat")
    assert b[0, 0] == 60.0 and b[-1, 1] == 70.0


def test_lon_order_and_wrap():
    lon = np.concatenate([np.arange(-179.5, -170, 1.0), np.arange(170.5, 180, 1.0)])
    order, values = lon_order(lon)
    np.testing.assert_allclose(values, np.arange(170.5, 190, 1.0))
    np.testing.assert_allclose(lon[order] % 360, values % 360)
    assert wrap_lon(-170.0, west=160.0) == 190.0
    assert wrap_lon(200.0) == -160.0
    with pytest.raises(DataError, match="gap"):
        lon_order(np.array([0.5, 1.5, 2.5, 10.5, 11.5]))


def test_continuous_lon_keeps_attrs(grid_factory):
    import xarray as xr

    g = grid_factory(lon_min=170, lon_max=-170, lat_min=0, lat_max=2, resolution=1.0)
    split = g.assign_coords(lon=((g.lon + 180) % 360) - 180).sortby("lon")
    da = xr.DataArray(np.arange(40.0).reshape(2, 20), dims=("lat", "lon"),
                      coords={"lat": g.lat, "lon": split.lon}, attrs={"units": "degC"})
    da["lon"].attrs["units"] = "degrees_east"
    out = continuous_lon(da)
    np.testing.assert_allclose(out.lon.values, g.lon.values)
    assert out.lon.attrs["units"] == "degrees_east" and out.attrs["units"] == "degC"


def _cfg(grid: str) -> dict:
    import tomllib

    return tomllib.loads(f"""
[grid]
{grid}
[climate]
baseline = "b.nc"
elevation = "e.nc"
[species]
occurrences = "o.csv"
""")


def test_config_accepts_both_ways_across_180():
    for text in ("lon_min = 160\nlon_max = 200", "lon_min = 160\nlon_max = -160"):
        cfg = parse_config(_cfg(text + "\nlat_min = 60\nlat_max = 70\nresolution = 0.5"))
        assert cfg.grid.lon_min == 160


@pytest.mark.parametrize(("text", "word"), [
    ("lon_min = 0\nlon_max = 0\nlat_min = 0\nlat_max = 1\nresolution = 1", "lon_max"),
    ("lon_min = 0\nlon_max = 400\nlat_min = 0\nlat_max = 1\nresolution = 1", "360"),
    ("lon_min = 0\nlon_max = 10\nlat_min = 5\nlat_max = 1\nresolution = 1", "lat_min"),
    ("lon_min = 0\nlon_max = 10\nlat_min = 0\nlat_max = 95\nresolution = 1", "lat_max"),
    ("lon_min = 0\nlon_max = 10\nlat_min = 0\nlat_max = 1\nresolution = 5", "resolution"),
])
def test_config_refuses_bad_grids_at_load(text, word):
    with pytest.raises(ConfigError, match=word) as err:
        parse_config(_cfg(text))
    assert "grid" in str(err.value) and len(str(err.value)) < 300


def test_config_projection_choices():
    base = _cfg("lon_min = 0\nlon_max = 10\nlat_min = 0\nlat_max = 1\nresolution = 1")
    assert parse_config({**base, "output": {"projection": "polar"}}).output.projection == "polar"
    with pytest.raises(ConfigError, match="projection"):
        parse_config({**base, "output": {"projection": "mercator"}})


def test_two_columns_either_side_of_180():
    order, values = lon_order(np.array([-179.5, 179.5]))
    assert order.tolist() == [1, 0] and values.tolist() == [179.5, 180.5]
    order, values = lon_order(np.array([10.0, 11.0]))
    assert order.tolist() == [0, 1] and values.tolist() == [10.0, 11.0]
