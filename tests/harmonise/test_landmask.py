"""Land, ice and exposed-shelf masks; nearest-cell fill with the standard lapse rate."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.grid import make_grid
from timeslice.harmonise.landmask import fill_exposed, land_mask


@pytest.fixture
def dem():
    g = make_grid(lon_min=-10, lon_max=0, lat_min=40, lat_max=45, resolution=0.5)
    lon = g.lon.values
    # a coast running north-south: land east of -5, a shelf to -150 m, deep ocean west
    z = np.interp(lon, [-10, -8, -5, 0], [-3000, -150, 0, 800])
    z = np.broadcast_to(z, (g.sizes["lat"], lon.size)).copy()
    return xr.DataArray(z, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon},
                        name="elevation", attrs={"units": "m"})


def test_lgm_sea_level_exposes_shelf(dem):
    present = land_mask(dem, sea_level=0.0)
    lgm = land_mask(dem, sea_level=-120.0)
    assert not present["exposed_shelf"].any()
    assert lgm["land"].sum() > present["land"].sum()
    shelf = lgm["exposed_shelf"]
    expected = (dem > -120) & (dem <= 0)
    assert bool((shelf == expected).all())
    assert bool((lgm["land"] == (dem > -120)).all())
    assert lgm["land"].dtype == bool


def test_ice_percent_on_coarse_grid(dem):
    coarse = make_grid(lon_min=-10, lon_max=0, lat_min=40, lat_max=45, resolution=2.5)
    frac = np.zeros((2, 4))
    frac[1, 3] = 90.0  # the north-east corner 90 % ice
    ice = xr.DataArray(frac, dims=("lat", "lon"), coords={"lat": coarse.lat, "lon": coarse.lon},
                       attrs={"units": "%"})
    m = land_mask(dem, ice=ice, ice_threshold=0.5)
    ne = (dem["lat"] > 43.5) & (dem["lon"] > -1.5)
    assert bool(m["ice"].where(ne, True).all())
    assert not bool((m["land"] & m["ice"]).any())
    sw = (dem["lat"] < 41) & (dem["lon"] > -4)
    assert not bool(m["ice"].where(sw, False).any())


def test_fill_exposed_lapse_rate(dem):
    lgm = land_mask(dem, sea_level=-120.0)
    present = dem > 0
    shape = (12,) + dem.shape
    t = np.where(present.values[None], 10.0, np.nan) * np.ones(shape)
    clim = xr.Dataset(
        {"tasmin": (("month", "lat", "lon"), t), "tasmax": (("month", "lat", "lon"), t + 5),
         "pr": (("month", "lat", "lon"), np.where(np.isfinite(t), 50.0, np.nan))},
        coords={"month": np.arange(1, 13), "lat": dem.lat, "lon": dem.lon},
    )
    out = fill_exposed(clim, lgm["land"], dem)
    filled = out["filled"]
    assert bool((filled == (lgm["land"] & ~present)).all())
    # nearest donor is the first land column east of the shelf; correction per ICAO Doc
    # 7488 standard atmosphere: -6.5 K per km of elevation gain (warmer below the donor)
    i, j = 0, int(np.nonzero(filled.values[0])[0][0])
    donor_j = int(np.nonzero(present.values[0])[0][0])
    dz = float(dem[i, j] - dem[i, donor_j])
    assert float(out["tasmin"][0, i, j]) == pytest.approx(10.0 - 0.0065 * dz)
    assert float(out["pr"][0, i, j]) == pytest.approx(50.0)
    assert np.isfinite(out["tasmin"].where(lgm["land"])).sum() == 12 * int(lgm["land"].sum())
