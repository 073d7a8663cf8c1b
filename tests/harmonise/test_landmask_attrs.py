"""Masks derived from elevation do not inherit its height attributes."""

import numpy as np
import xarray as xr

from timeslice.grid import make_grid
from timeslice.harmonise.landmask import land_mask


def test_mask_attrs_are_their_own():
    g = make_grid(lon_min=0, lon_max=2, lat_min=0, lat_max=2, resolution=1)
    e = xr.DataArray(np.array([[1.0, -5.0], [10.0, -200.0]]), dims=("lat", "lon"), coords=g.coords,
                     attrs={"standard_name": "height_above_mean_sea_level", "units": "m"})
    out = land_mask(e, sea_level=-10)
    for v in ("land", "ice", "exposed_shelf"):
        assert "standard_name" not in out[v].attrs and out[v].attrs["units"] == "1"
    # -10 m sea level: cells at 1, -5 and 10 m are land; -5 m is exposed shelf
    assert out["land"].values.tolist() == [[True, True], [True, False]]
    assert out["exposed_shelf"].values.tolist() == [[False, True], [False, False]]
