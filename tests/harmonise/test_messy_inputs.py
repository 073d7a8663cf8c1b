"""A deliberately messy input set harmonises to the same prepared slice as its clean twin.

Messy: kelvin and flux units, 0..360 longitudes, descending latitudes, a 360_day multi-year
monthly series, one file per variable, a GeoTIFF baseline with degC x 10 integers.
Clean: canonical Datasets (degC, mm month-1, lat ascending, lon in [-180, 180)).
"""

from __future__ import annotations

import cftime
import numpy as np
import pytest
import xarray as xr

from timeslice.grid import make_grid
from timeslice.harmonise import prepare_slice, regrid
from timeslice.readers import open_climate

rioxarray = pytest.importorskip("rioxarray")
pytestmark = pytest.mark.filterwarnings("ignore::PendingDeprecationWarning")

MONTHS = np.arange(1, 13)


def _clean_inputs(rng):
    fine = make_grid(lon_min=-40, lon_max=-20, lat_min=40, lat_max=55, resolution=0.5)
    coarse = make_grid(lon_min=-45, lon_max=-15, lat_min=35, lat_max=60, resolution=1.0)
    lon, lat = np.meshgrid(fine.lon.values, fine.lat.values)
    z = 1500 * np.exp(-((lon + 30) ** 2 + (lat - 47.5) ** 2) / 25) - 150
    land = z > 0
    season = 9 * np.sin(2 * np.pi * (MONTHS - 4) / 12)[:, None, None]
    # baseline temperatures on a 0.1 degC lattice so that degC x 10 integers are exact
    tmin = np.round((2 - 0.0065 * z)[None] + season, 1)
    tmin = np.where(land[None], tmin, np.nan).astype("f4")
    tmax = (tmin + 9).astype("f4")
    pr = np.where(land[None], np.round(rng.gamma(4, 15, tmin.shape)), np.nan).astype("f4")
    dims = ("month", "lat", "lon")
    fb = xr.Dataset(
        {"tasmin": (dims, tmin, {"units": "degC"}), "tasmax": (dims, tmax, {"units": "degC"}),
         "pr": (dims, pr, {"units": "mm month-1"})},
        coords={"month": MONTHS, "lat": fine.lat, "lon": fine.lon},
    )
    elev = xr.DataArray(z.astype("f4"), dims=("lat", "lon"),
                        coords={"lat": fine.lat, "lon": fine.lon}, name="elevation",
                        attrs={"units": "m"})
    cshape = (12, coarse.sizes["lat"], coarse.sizes["lon"])
    def model(offset, wet):
        t = -3 + offset + season + rng.normal(0, 1, cshape)
        return xr.Dataset(
            {"tasmin": (dims, t, {"units": "degC"}),
             "tasmax": (dims, t + 8 + rng.uniform(0, 2, cshape), {"units": "degC"}),
             "pr": (dims, wet * rng.gamma(3, 20, cshape), {"units": "mm month-1"})},
            coords={"month": MONTHS, "lat": coarse.lat, "lon": coarse.lon},
        )
    return fb, elev, model(0.0, 1.0), model(2.5, 0.8)


def _write_messy_model(ds: xr.Dataset, folder, rng):
    """One file per variable, K and kg m-2 s-1, lon 0..360, lat descending, a 360_day
    monthly series 2001-2004 whose per-month mean is the clean climatology."""
    folder.mkdir()
    years = np.arange(2001, 2005)
    times = [cftime.Datetime360Day(int(y), int(m), 16) for y in years for m in MONTHS]
    wiggle = np.array([-1.5, -0.5, 0.5, 1.5])  # mean zero over the 4 years
    for v in ("tasmin", "tasmax", "pr"):
        clim = ds[v].values
        if v == "pr":
            series = np.concatenate([clim * (1 + 0.1 * w) for w in wiggle])
            series = series / (86400.0 * 30)  # mm per 30-day month -> kg m-2 s-1
            units, attrs = "kg m-2 s-1", {"standard_name": "precipitation_flux"}
        else:
            series = np.concatenate([clim + w for w in wiggle]) + 273.15
            units = "K"
            attrs = {"standard_name": "air_temperature",
                     "cell_methods": f"time: {'minimum' if v == 'tasmin' else 'maximum'}"}
        lon360 = ds["lon"].values % 360
        order = np.argsort(lon360)
        data = series[:, ::-1, :][:, :, order]  # float64 storage: K in float32 alone
        # would carry ~1.5e-5 K of rounding, larger than the 1e-5 the comparison allows
        out = xr.Dataset(
            {f"var_{v}": (("time", "latitude", "longitude"), data, {"units": units, **attrs})},
            coords={"time": ("time", times),
                    "latitude": ("latitude", ds["lat"].values[::-1], {"units": "degrees_north"}),
                    "longitude": ("longitude", lon360[order], {"units": "degrees_east"})},
        )
        out["time"].encoding.update(units="days since 2000-01-01", calendar="360_day")
        out.to_netcdf(folder / f"{v}.nc")
    return str(folder / "*.nc")


def _write_geotiff_baseline(fb: xr.Dataset, folder):
    folder.mkdir()
    paths = {}
    for v in ("tasmin", "tasmax", "pr"):
        vals = fb[v].values[:, ::-1, :]  # north-up
        if v == "pr":
            data = np.where(np.isfinite(vals), vals, -9999).astype("f4")
        else:
            data = np.where(np.isfinite(vals), np.round(vals * 10), -32768).astype("int16")
        da = xr.DataArray(data, dims=("band", "y", "x"),
                          coords={"band": MONTHS, "y": fb["lat"].values[::-1],
                                  "x": fb["lon"].values})
        da = da.rio.write_crs("EPSG:4326").rio.write_nodata(-9999 if v == "pr" else -32768)
        paths[v] = folder / f"{v}.tif"
        da.rio.to_raster(paths[v])
    return paths


def test_messy_and_clean_inputs_harmonise_alike(tmp_path, rng):
    fb, elev, mbase, mslice = _clean_inputs(rng)
    meta = dict(label="m_2050", year=2050.0, period="2041-2060", model="m", scenario="s")
    clean = prepare_slice(fine_baseline=fb, elevation=elev, model_slice=mslice,
                          model_baseline=mbase, **meta)

    tifs = _write_geotiff_baseline(fb, tmp_path / "tif")
    messy_fb = open_climate(
        [tifs["tasmin"], tifs["tasmax"], tifs["pr"]],
        units={"tasmin": "degC", "tasmax": "degC", "pr": "mm/mon"},
        scale={"tasmin": 0.1, "tasmax": 0.1},
    )
    base_glob = _write_messy_model(mbase, tmp_path / "base", rng)
    slice_glob = _write_messy_model(mslice, tmp_path / "slice", rng)
    messy_mb = open_climate(base_glob, period="2001-2004")
    messy_ms = open_climate(slice_glob, period="2001-2004")
    messy = prepare_slice(fine_baseline=messy_fb, elevation=elev, model_slice=messy_ms,
                          model_baseline=messy_mb, **meta)
    for v in [f"bio{i}" for i in range(1, 20)]:
        np.testing.assert_allclose(messy[v].values, clean[v].values, rtol=1e-5, atol=1e-5,
                                   equal_nan=True, err_msg=v)
    for v in ("land", "ice", "exposed_shelf", "filled"):
        assert bool((messy[v] == clean[v]).all()), v


def test_prepared_from_precomputed_bio_on_coarser_grid(rng):
    fb, elev, _, _ = _clean_inputs(rng)
    base = prepare_slice(fine_baseline=fb, elevation=elev, label="b", year=1985.0,
                         period="1971-2000", model="observed", scenario="baseline")
    coarse = make_grid(lon_min=-40, lon_max=-20, lat_min=40, lat_max=55, resolution=1.0)
    bio = regrid(base[[f"bio{i}" for i in range(1, 20)]], coarse, method="conservative",
                 min_valid_fraction=0.0)
    out = prepare_slice(fine_baseline=None, elevation=elev, bio=bio, label="p", year=1985.0,
                        period="1971-2000", model="observed", scenario="baseline",
                        regrid_method={"bio12": "conservative"})
    assert bool(out["bio1"].notnull().where(out["land"], True).all())
    assert bool(out["bio1"].isnull().where(~out["land"], True).all())
    assert np.nanmax(np.abs(out["bio1"] - base["bio1"])) < 6.0
