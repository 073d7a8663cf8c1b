"""GeoTIFF and ESRI ASCII grids through rioxarray/rasterio."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.readers import open_climate, open_raster

rioxarray = pytest.importorskip("rioxarray")
# affine (inside rasterio/rioxarray) announces a deprecation of `*`; not ours to fix
pytestmark = pytest.mark.filterwarnings("ignore::PendingDeprecationWarning")


def _raster(values, *, lon0=-40.0, lat_top=55.0, res=0.5, crs="EPSG:4326"):
    values = np.asarray(values, dtype="f4")
    if values.ndim == 2:
        values = values[None]
    nb, ny, nx = values.shape
    x = lon0 + res * (np.arange(nx) + 0.5)
    y = lat_top - res * (np.arange(ny) + 0.5)  # north-up, latitudes descending
    da = xr.DataArray(values, dims=("band", "y", "x"),
                      coords={"band": np.arange(1, nb + 1), "y": y, "x": x})
    return da.rio.write_crs(crs)


def test_monthly_geotiff(tmp_path):
    vals = np.arange(12, dtype=float)[:, None, None] + np.zeros((12, 4, 6))
    path = tmp_path / "tmin.tif"
    _raster(vals * 10).rio.to_raster(path)
    ds = open_raster(path, units="degC", scale=0.1)
    assert ds["tasmin"].dims == ("month", "lat", "lon")
    assert np.all(np.diff(ds["lat"].values) > 0)
    np.testing.assert_allclose(ds["tasmin"].isel(lat=0, lon=0).values, np.arange(12), atol=1e-5)
    # through open_climate too, with month labels given per band
    ds2 = open_climate(path, variable="tasmin", units="degC", scale=0.1,
                       band_names=[f"m{m}" for m in range(1, 13)])
    xr.testing.assert_allclose(ds2["tasmin"], ds["tasmin"])


def test_bio_layers_and_ascii(tmp_path):
    vals = np.arange(19, dtype=float)[:, None, None] + np.zeros((19, 3, 5))
    path = tmp_path / "bio.tif"
    _raster(vals).rio.to_raster(path)
    ds = open_raster(path, variable="bio")
    assert list(ds.data_vars) == [f"bio{i}" for i in range(1, 20)]
    assert float(ds["bio12"][0, 0]) == 11.0
    import rasterio
    from rasterio.transform import from_origin

    asc = tmp_path / "elevation.asc"
    with rasterio.open(asc, "w", driver="AAIGrid", height=3, width=4, count=1, dtype="float32",
                       transform=from_origin(-40, 55, 0.5, 0.5)) as dst:
        dst.write(np.arange(12, dtype="f4").reshape(1, 3, 4))
    el = open_raster(asc)
    assert el["elevation"].attrs["units"] == "m"
    assert float(el["elevation"].sel(lat=54.75, lon=-39.75)) == 0.0


def test_projected_crs_is_refused(tmp_path):
    path = tmp_path / "tmax.tif"
    da = _raster(np.zeros((4, 6)), lon0=3_000_000, lat_top=2_000_000, res=1000, crs="EPSG:3035")
    da.rio.to_raster(path)
    with pytest.raises(DataError, match="projected CRS.*EPSG:4326"):
        open_raster(path, units="degC")


def test_raster_errors(tmp_path):
    with pytest.raises(InputFileError, match="file not found"):
        open_raster(tmp_path / "missing.tif")
    path = tmp_path / "layer.tif"
    _raster(np.zeros((5, 4, 6))).rio.to_raster(path)
    with pytest.raises(DataError, match="band_names"):
        open_raster(path, variable="pr")
    with pytest.raises(DataError, match="one name per band"):
        open_raster(path, variable="pr", band_names=["a", "b"])


def test_one_geotiff_per_month(tmp_path):
    for m in range(1, 13):
        _raster(np.full((3, 4), 10.0 * m)).rio.to_raster(tmp_path / f"prec_{m:02d}.tif")
    ds = open_climate(str(tmp_path / "prec_*.tif"), units="mm month-1")
    assert ds["pr"].dims == ("month", "lat", "lon")
    np.testing.assert_allclose(ds["pr"].isel(lat=0, lon=0).values, 10.0 * np.arange(1, 13))
    (tmp_path / "prec_07.tif").unlink()
    with pytest.raises(DataError, match=r"'pr' has 11 months, missing \[7\]"):
        open_climate(str(tmp_path / "prec_*.tif"), units="mm month-1")
