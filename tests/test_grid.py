"""Grid geometry against outside references."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import (
    AUTHALIC_RADIUS_KM,
    cell_area,
    cell_bounds,
    haversine_km,
    make_grid,
    normalise_lonlat,
)

pyproj = pytest.importorskip("pyproj")


def test_global_area_is_sphere_area():
    # 4*pi*R^2 with R = 6371.0072 km = 510 065 625 km^2 (METHODS.md, computed)
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=2.5)
    total = float(cell_area(g).sum())
    assert total == pytest.approx(4 * np.pi * AUTHALIC_RADIUS_KM**2, rel=1e-12)
    assert total == pytest.approx(510_065_625, abs=1.0)


def test_equatorial_cell_formula():
    # R^2 * dlon * (sin(phi2) - sin(phi1)) for a 1 x 1 degree cell at the equator (Snyder 1987)
    g = make_grid(lon_min=0, lon_max=1, lat_min=0, lat_max=1, resolution=1)
    expected = AUTHALIC_RADIUS_KM**2 * np.deg2rad(1.0) * np.sin(np.deg2rad(1.0))
    assert float(cell_area(g)[0, 0]) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    ("lat0", "rtol"), [(-59.0, 7e-3), (-45.0, 7e-3), (0.0, 7e-3), (30.0, 7e-3), (85.0, 1e-2), (-89.0, 1e-2)]
)
def test_cell_area_against_pyproj_wgs84(lat0, rtol):
    # pyproj Geod(ellps="WGS84").polygon_area_perimeter: ellipsoid vs authalic sphere agree to
    # within ~0.7 % per cell up to 60 degrees (METHODS.md); poleward of that the authalic vs
    # geodetic latitude shift makes single cells differ by up to ~0.9 % (measured here: 0.89 %
    # for 89-90 S), so 1 % there.
    g = make_grid(lon_min=10, lon_max=11, lat_min=lat0, lat_max=lat0 + 1, resolution=1)
    geod = pyproj.Geod(ellps="WGS84")
    # densify the parallels: a geodesic between two corners is not a parallel
    lons = np.concatenate([np.linspace(10, 11, 200), np.linspace(11, 10, 200)])
    lats = np.concatenate([np.full(200, lat0), np.full(200, lat0 + 1.0)])
    area, _ = geod.polygon_area_perimeter(lons, lats)
    assert float(cell_area(g)[0, 0]) == pytest.approx(abs(area) / 1e6, rel=rtol)


def test_areas_are_additive():
    fine = make_grid(lon_min=0, lon_max=4, lat_min=40, lat_max=44, resolution=0.5)
    coarse = make_grid(lon_min=0, lon_max=4, lat_min=40, lat_max=44, resolution=2.0)
    assert float(cell_area(fine).sum()) == pytest.approx(float(cell_area(coarse).sum()), rel=1e-12)


def test_cell_bounds_clip_at_poles():
    b = cell_bounds(np.array([-89.5, 89.5, 90.5])[:2], kind="lat")
    assert b.min() >= -90 and b.max() <= 90


def test_haversine_against_pyproj():
    # pyproj Geod(ellps="WGS84").inv is the reference; sphere vs ellipsoid differ by < 0.6 %
    rng = np.random.default_rng(7)
    lon1, lon2 = rng.uniform(-180, 180, (2, 200))
    lat1, lat2 = rng.uniform(-80, 80, (2, 200))
    _, _, dist_m = pyproj.Geod(ellps="WGS84").inv(lon1, lat1, lon2, lat2)
    ours = haversine_km(lon1, lat1, lon2, lat2)
    np.testing.assert_allclose(ours, dist_m / 1000, rtol=6e-3)


def test_normalise_wraps_and_sorts():
    lon = np.arange(0.5, 360, 1.0)
    lat = np.arange(89.5, -90, -1.0)
    da = xr.DataArray(
        np.add.outer(lat, lon), dims=("latitude", "longitude"),
        coords={"latitude": lat, "longitude": lon}, name="tas", attrs={"units": "K"},
    )
    da["longitude"].attrs["units"] = "degrees_east"
    da["latitude"].attrs["units"] = "degrees_north"
    out = normalise_lonlat(da)
    assert out.dims == ("lat", "lon")
    assert out["lon"].min() == -179.5 and out["lon"].max() == 179.5
    assert np.all(np.diff(out["lat"]) > 0)
    assert out.attrs == {"units": "K"}
    # value at (lat 10.5, lon -20.5) came from longitude 339.5
    assert float(out.sel(lat=10.5, lon=-20.5)) == 10.5 + 339.5


def test_normalise_rejects_curvilinear():
    ds = xr.Dataset(
        {"tas": (("y", "x"), np.zeros((2, 3)))},
        coords={"lat": (("y", "x"), np.zeros((2, 3))), "lon": (("y", "x"), np.zeros((2, 3)))},
    )
    with pytest.raises(DataError, match="only regular"):
        normalise_lonlat(ds, source="model.nc")


def test_normalise_rejects_non_monotonic():
    ds = xr.Dataset(coords={"lat": [1.0, 3.0, 2.0], "lon": [0.0, 1.0]})
    with pytest.raises(DataError, match="not monotonic"):
        normalise_lonlat(ds, source="x.nc")
