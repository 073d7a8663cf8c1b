"""GeoTIFF export read back with rasterio."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_bounds

from timeslice.errors import DataError
from timeslice.report.geotiff import export


def test_files_bounds_transform_values(series_ds, tmp_path):
    files = export(series_ds, tmp_path, variables=["suitability", "suitable", "refugium"])
    n = series_ds.sizes["slice"]
    assert len(files) == 2 * n + 1
    f = tmp_path / "suitability_alder_21ka.tif"
    assert f in files
    lat, lon = series_ds.lat.values, series_ds.lon.values
    with rasterio.open(f) as r:
        assert r.crs.to_epsg() == 4326
        # grid edges: centres +- half a 0.5 degree cell
        assert r.bounds.left == pytest.approx(lon[0] - 0.25)
        assert r.bounds.right == pytest.approx(lon[-1] + 0.25)
        assert r.bounds.bottom == pytest.approx(lat[0] - 0.25)
        assert r.bounds.top == pytest.approx(lat[-1] + 0.25)
        # Reference: rasterio.transform.from_bounds (north-up affine from the edges).
        ref = from_bounds(lon[0] - 0.25, lat[0] - 0.25, lon[-1] + 0.25, lat[-1] + 0.25,
                          lon.size, lat.size)
        assert r.transform.almost_equals(ref)
        assert np.isnan(r.nodata)
        assert r.descriptions[0].startswith("climatic suitability")
        assert r.tags()["model"] == "alder" and r.tags()["scenario"] == "past"
        a = r.read(1)
        # top row is the northernmost latitude
        np.testing.assert_array_equal(a[::-1], series_ds["suitability"].values[1])
        # the value at a given cell centre comes back from its coordinates
        row, col = r.index(lon[3], lat[5])
        assert a[row, col] == pytest.approx(series_ds["suitability"].values[1, 5, 3],
                                            nan_ok=True)
    with rasterio.open(tmp_path / "suitable_baseline.tif") as r:
        assert r.dtypes[0] == "int8" and r.nodata == -1
        assert r.tags()["flag_meanings"] == "not_land unsuitable suitable"
    with rasterio.open(tmp_path / "refugium.tif") as r:
        assert r.dtypes[0] == "uint8" and r.nodata == 255
        np.testing.assert_array_equal(r.read(1)[::-1].astype(bool), series_ds.refugium.values)


def test_cloud_optimised_layout(series_ds, tmp_path):
    with rasterio.Env() as env:
        if "COG" not in env.drivers():
            pytest.skip("GDAL build without the COG driver (needs GDAL >= 3.1)")
    (f,) = export(series_ds.isel(slice=[0]), tmp_path, variables=["suitability"])
    with rasterio.open(f) as r:
        assert r.tags(ns="IMAGE_STRUCTURE").get("LAYOUT") == "COG"
        assert r.compression is not None


def test_default_exports_known_layers(series_ds, tmp_path):
    files = export(series_ds, tmp_path)
    stems = {p.stem for p in files}
    assert {"stability", "elevation", "refugium", "calibration_area"} <= stems
    for layer in ("suitability", "mess", "nt1", "nt2", "most_dissimilar", "change"):
        assert f"{layer}_baseline" in stems
    assert not list(tmp_path.glob("*.part"))


def test_unknown_variable_named(series_ds, tmp_path):
    with pytest.raises(DataError, match="'nope'"):
        export(series_ds, tmp_path, variables=["nope"])
    with pytest.raises(DataError, match="xarray.Dataset"):
        export(series_ds["suitability"], tmp_path)


def test_export_from_written_series(series_ds, tmp_path):
    from timeslice.report.geotiff import export_file
    from timeslice.report.netcdf import write_series

    run = tmp_path / "run"
    write_series(series_ds, run / "series.nc")
    files = export_file(run, variables=["change", "refugium"])
    assert files[0].parent == run / "geotiff"
    with rasterio.open(run / "geotiff" / "change_alder_21ka.tif") as r:
        np.testing.assert_array_equal(r.read(1)[::-1], series_ds["change"].values[1])
        assert r.tags()["flag_meanings"] == "not_land absent gain loss stable"
    with rasterio.open(run / "geotiff" / "refugium.tif") as r:
        np.testing.assert_array_equal(r.read(1)[::-1].astype(bool), series_ds.refugium.values)


def test_lazy_layers_are_exported(series_ds, tmp_path):
    files = export(series_ds.chunk({"slice": 1}), tmp_path, variables=["mess"])
    with rasterio.open(files[2]) as r:
        np.testing.assert_array_equal(r.read(1)[::-1], series_ds["mess"].values[2])
