"""A slice written block by block equals the slice prepared in memory, value for value.

Reference: the in-memory result of ``prepare_slice`` (itself checked against published
formulas in test_bioclim, test_downscale and test_landmask); the streamed file must hold the
same numbers bit for bit, except the three area sums, whose summation order differs (sums of
per-row sums): they must agree to float32 rounding (relative 2**-24).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.grid import make_grid
from timeslice.harmonise import prepare_slice, write_prepared
from timeslice.harmonise.prepare import block_rows, write_slice

from harmonise_factories import model_dataset

AREAS = ("land_km2", "ice_km2", "exposed_shelf_km2")


@pytest.fixture
def inputs(tmp_path):
    fine = make_grid(lon_min=-40, lon_max=-20, lat_min=40, lat_max=55, resolution=0.5)
    lon, lat = np.meshgrid(fine.lon.values, fine.lat.values)
    z = 1500 * np.exp(-((lon + 30) ** 2 + (lat - 47.5) ** 2) / 20) - 200  # island + shelf
    elev = xr.DataArray(z.astype("f4"), dims=("lat", "lon"),
                        coords={"lat": fine.lat, "lon": fine.lon}, name="elevation",
                        attrs={"units": "m"})
    land = z > 0
    rng = np.random.default_rng(3)
    month = np.arange(1, 13)
    season = 8 * np.sin(2 * np.pi * (month - 4) / 12)[:, None, None]
    tmin = np.where(land, 5 - 0.0065 * z, np.nan)[None] + season
    pr = np.where(land, rng.gamma(2, 30, (12,) + z.shape), np.nan)
    pr[3, 8, 18:23] = -1e-7  # tiny negatives in an early block, a real one later
    pr[5, 22, 18:23] = -0.5
    dims = ("month", "lat", "lon")
    fb = xr.Dataset(
        {"tasmin": (dims, tmin.astype("f4"), {"units": "degC"}),
         "tasmax": (dims, (tmin + 9 + rng.normal(0, 3, tmin.shape)).astype("f4"),
                    {"units": "degC"}),
         "pr": (dims, pr.astype("f4"), {"units": "mm month-1"})},
        coords={"month": month, "lat": fine.lat, "lon": fine.lon},
    )
    mb, ms = tmp_path / "mb.nc", tmp_path / "ms.nc"
    model_dataset(calendar="360_day", descending=True, seed=5).to_netcdf(mb)
    cold = model_dataset(calendar="360_day", descending=True, seed=6)
    cold["tasmin"] = cold["tasmin"] - 6
    cold["tasmax"] = cold["tasmax"] - 6
    cold.to_netcdf(ms)
    ice = xr.DataArray(np.where(lat > 50, 0.8, 0.0)[::2, ::2], dims=("lat", "lon"),
                       coords={"lat": fine.lat.values[::2], "lon": fine.lon.values[::2]},
                       attrs={"units": "1"}, name="ice")
    return fb, elev, mb, ms, ice


def _same(a: xr.Dataset, b: xr.Dataset) -> None:
    assert list(a.data_vars) == list(b.data_vars)
    for v in a.data_vars:
        assert a[v].dtype == b[v].dtype, v
        assert np.array_equal(a[v].values, b[v].values,
                              equal_nan=a[v].dtype.kind == "f"), v
        assert a[v].attrs.keys() == b[v].attrs.keys(), v
        for k, val in a[v].attrs.items():
            assert np.array_equal(val, b[v].attrs[k]), (v, k)
    for k in set(a.attrs) | set(b.attrs):
        if k in AREAS:
            assert a.attrs[k] == pytest.approx(b.attrs[k], rel=2.0**-24), k
        else:
            assert a.attrs[k] == b.attrs[k], k


@pytest.mark.parametrize("chunks", [None, 4, "auto"])
@pytest.mark.parametrize("case", ["observed", "glacial", "ice", "bio"])
def test_streamed_file_equals_whole_array(inputs, tmp_path, case, chunks):
    fb, elev, mb, ms, ice = inputs
    kw = dict(fine_baseline=fb, elevation=elev, label="x", year=-19050.0, period="21ka",
              model="a", scenario="past", chunks=chunks, sea_level=-100.0)
    if case in ("glacial", "ice"):
        kw.update(model_slice=ms, model_baseline=mb)
    if case == "ice":
        kw.update(ice=ice, sea_level=-50.0)
    if case == "bio":
        base = prepare_slice(fine_baseline=fb, elevation=elev, label="b", year=1985.0,
                             period="p", model="observed", scenario="baseline")
        kw.update(fine_baseline=None, bio=base[[f"bio{i}" for i in range(1, 20)]]
                  .isel(lat=slice(None, None, 2), lon=slice(None, None, 2)))
    whole = write_prepared(prepare_slice(**kw), tmp_path / "whole.nc")
    streamed = write_slice(tmp_path / "streamed.nc", **kw)
    with xr.open_dataset(whole) as a, xr.open_dataset(streamed) as b:
        _same(a, b)
    assert not list(tmp_path.glob(".*.part"))


def test_block_rows_align_with_the_bioclimatic_calls():
    assert block_rows(1080, 2160) == (120, 30)  # 10 arc-minutes
    assert block_rows(2160, 4320) == (60, 15)
    assert block_rows(30, 40) == (30, 30)  # small grids: one block
    assert block_rows(30, 40, 7) == (4, 1)
