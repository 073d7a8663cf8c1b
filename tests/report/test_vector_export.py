"""Vector export: the GeoJSON read back with plain json + shapely (a second reader) covers the
same area as the raster cells, measured on the sphere with pyproj."""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely
import xarray as xr
from pyproj import Geod
from shapely.geometry import shape

from timeslice.grid import cell_area, make_grid
from timeslice.report.vector import mask_geometry, write_vectors
from timeslice.series.patches import refugium_patches

#: The authalic sphere of WGS 84, R = 6371.0072 km (Snyder 1987, USGS Prof. Paper 1395,
#: p. 16): the sphere timeslice measures cell areas on.
GEOD = Geod(a=6371007.2, b=6371007.2)


def _sphere_km2(geom) -> float:
    """Area of a lon/lat geometry on the sphere [km2] by pyproj's geodesic polygon area. The
    cell edges along parallels are densified to 0.01° first: a geodesic between two corners
    is not a parallel, and densifying makes the difference negligible (< 1e-7 here)."""
    area, _ = GEOD.geometry_area_perimeter(shapely.segmentize(geom, 0.01))
    return abs(area) / 1e6


def _read(path):
    doc = json.loads(path.read_text(encoding="utf-8"))
    assert doc["type"] == "FeatureCollection"
    return doc, [(shape(f["geometry"]) if f["geometry"] else None, f["properties"])
                 for f in doc["features"]]


def test_suitable_area_per_slice_equals_the_raster(series_ds, tmp_path):
    paths = write_vectors(series_ds, tmp_path)
    assert [p.name for p in paths] == ["suitable.geojson"]
    _, feats = _read(paths[0])
    assert [p["slice"] for _, p in feats] == [str(s) for s in series_ds.slice.values]
    area = cell_area(series_ds).values
    for i, (geom, props) in enumerate(feats):
        raster = float(area[series_ds["suitable"].values[i] == 1].sum())
        assert props["area_km2"] == pytest.approx(raster, rel=1e-12)
        assert geom.is_valid
        # grid tolerance: the polygons follow the cell edges, so only the geodesic-vs-parallel
        # difference and rounding to 1e-7° remain
        assert _sphere_km2(geom) == pytest.approx(raster, rel=1e-5)
        assert props["scenario"] == str(series_ds.scenario.values[i])


def test_holes_and_separate_parts_are_kept():
    g = make_grid(lon_min=0.0, lon_max=10.0, lat_min=50.0, lat_max=60.0, resolution=1.0)
    m = np.zeros((10, 10), dtype=bool)
    m[2:7, 2:7] = True
    m[4, 4] = False  # a hole
    m[8, 8] = True  # a separate cell
    da = xr.DataArray(m, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    geom = mask_geometry(da)
    assert geom.geom_type == "MultiPolygon" and len(geom.geoms) == 2
    assert sum(len(p.interiors) for p in geom.geoms) == 1
    assert _sphere_km2(geom) == pytest.approx(float(cell_area(da).values[m].sum()), rel=1e-6)


def test_grid_across_the_antimeridian_is_cut_at_180(tmp_path):
    g = make_grid(lon_min=160.0, lon_max=200.0, lat_min=-50.0, lat_max=-30.0, resolution=1.0)
    m = np.zeros((g.sizes["lat"], g.sizes["lon"]), dtype=bool)
    m[3:9, 12:30] = True  # 172 ... 190 E on the continuous axis
    da = xr.DataArray(m, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    series = xr.Dataset({"suitable": da.astype("int8").expand_dims(slice=["s0"])})
    path = write_vectors(series, tmp_path)[0]
    _, feats = _read(path)
    geom = feats[0][0]
    # RFC 7946 section 3.1.9: longitudes within [-180, 180], cut at the antimeridian
    minx, _, maxx, _ = geom.bounds
    assert minx >= -180.0 and maxx <= 180.0
    assert geom.geom_type == "MultiPolygon"
    assert _sphere_km2(geom) == pytest.approx(float(cell_area(da).values[m].sum()), rel=1e-6)


def test_patch_features_match_the_patch_table(series_ds, tmp_path):
    series = series_ds.rename({"refugium": "refugium_window"})
    patches = refugium_patches(series)
    assert len(patches[1]) >= 1
    paths = write_vectors(series, tmp_path, patches=patches)
    doc, feats = _read(tmp_path / "refugium_patches.geojson")
    assert "hypothesis" in doc["description"]
    assert [p["name"] for _, p in feats] == list(patches[1]["name"])
    for (geom, props), row in zip(feats, patches[1].itertuples(index=False)):
        assert props["area_km2"] == pytest.approx(row.area_km2, rel=1e-12)
        assert _sphere_km2(geom) == pytest.approx(row.area_km2, rel=1e-5)
    assert len(paths) == 2


def test_patch_across_the_seam_of_a_global_grid(tmp_path):
    g = make_grid(lon_min=-180.0, lon_max=180.0, lat_min=-90.0, lat_max=90.0, resolution=10.0)
    m = np.zeros((g.sizes["lat"], g.sizes["lon"]), dtype=bool)
    m[12:14, :2] = True
    m[12:14, -2:] = True  # one patch around 180°
    da = xr.DataArray(m, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    series = xr.Dataset({"refugium_window": da,
                         "suitable": da.astype("int8").expand_dims(slice=["s0"])})
    patches = refugium_patches(series)
    assert len(patches[1]) == 1
    write_vectors(series, tmp_path, patches=patches)
    _, feats = _read(tmp_path / "refugium_patches.geojson")
    geom = feats[0][0]
    # one feature, two parts meeting at the antimeridian (RFC 7946 section 3.1.9)
    assert len(feats) == 1 and geom.geom_type == "MultiPolygon" and len(geom.geoms) == 2
    assert _sphere_km2(geom) == pytest.approx(patches[1]["area_km2"].iloc[0], rel=1e-6)
