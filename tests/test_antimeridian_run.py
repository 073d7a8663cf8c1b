"""A whole run of an invented study across the 180° meridian (tests/antimeridian_world.py)
through ``timeslice run``: the inputs come split at 180° or in 0..360, the grid is written
``lon_min = 165, lon_max = -165``. Checked against the world's known fields, the sphere formula
and pyproj, and rasterio's reading of the GeoTIFFs."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from typer.testing import CliRunner

from antimeridian_world import EAST, NORTH, RES, SOUTH, WEST, true_elevation, warming_2090, write_world
from timeslice.cli import app
from timeslice.grid import AUTHALIC_RADIUS_KM
from timeslice.report import open_series

# a whole run across 180 takes ~20 s: part of the default suite, since it is the check that
# a study across the antimeridian works end to end
pyproj = pytest.importorskip("pyproj")


@pytest.fixture(scope="module")
def crossing_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("antimeridian")
    cfg = write_world(root / "data")
    out = root / "out"
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    harm = root / "harmonised"
    result = CliRunner().invoke(app, ["harmonise", str(cfg), "--out", str(harm)])
    assert result.exit_code == 0, result.output
    return out, harm


def _sphere_cell_km2(lat, lon_b, lat_b):
    # R^2 dlon (sin phi2 - sin phi1), written out here from the bounds in the file (Snyder 1987)
    dlon = np.deg2rad(lon_b[:, 1] - lon_b[:, 0])
    band = np.sin(np.deg2rad(lat_b[:, 1])) - np.sin(np.deg2rad(lat_b[:, 0]))
    return AUTHALIC_RADIUS_KM**2 * np.outer(band, dlon)


def test_series_is_on_the_continuous_axis(crossing_run):
    out, _ = crossing_run
    with open_series(out / "series.nc") as ds:
        lon = ds.lon.values
        np.testing.assert_allclose(lon, np.arange(WEST + RES / 2, EAST, RES))
        np.testing.assert_allclose(ds.lat.values, np.arange(SOUTH + RES / 2, NORTH, RES))
        assert ds["lon_bnds"].values[0, 0] == WEST and ds["lon_bnds"].values[-1, 1] == EAST
        # the whole region against pyproj's polygon area on the authalic sphere, parallels
        # densified (a geodesic between two corners is not a parallel)
        geod = pyproj.Geod(a=AUTHALIC_RADIUS_KM * 1e3, b=AUTHALIC_RADIUS_KM * 1e3)
        ring_lon = np.concatenate([np.linspace(WEST, EAST, 3000), np.linspace(EAST, WEST, 3000)])
        ring_lat = np.concatenate([np.full(3000, SOUTH), np.full(3000, NORTH)])
        area, _ = geod.polygon_area_perimeter(ring_lon, ring_lat)
        assert float(ds["cell_area"].sum()) == pytest.approx(abs(area) / 1e6, rel=1e-6)


def test_summary_areas_are_sums_of_sphere_cells(crossing_run):
    out, _ = crossing_run
    summary = pd.read_csv(out / "summary.csv").set_index("slice")
    with open_series(out / "series.nc") as ds:
        cells = _sphere_cell_km2(ds.lat.values, ds["lon_bnds"].values, ds["lat_bnds"].values)
        for label in summary.index:
            suitable = ds["suitable"].sel(slice=label).values == 1
            assert summary.loc[label, "suitable_area_km2"] == pytest.approx(
                float(cells[suitable].sum()), rel=1e-9)
        # the range straddles 180: suitable cells on both sides of it
        base = ds["suitable"].sel(slice="baseline").values == 1
        assert base[:, ds.lon.values < 180].any() and base[:, ds.lon.values > 180].any()
    # centroids are reported in [-180, 180)
    assert summary["centroid_lon"].between(-180, 180).all()


def test_elevation_split_at_180_is_regridded_in_place(crossing_run):
    # the 0.25-degree elevation came split at 180; each 0.5-degree cell is the area-weighted
    # mean of the four source cells inside it (conservative coarsening), computed here from
    # the world's own formula at the source centres
    out, _ = crossing_run
    with open_series(out / "series.nc") as ds:
        elev = ds["elevation"]
        elev = elev.isel(slice=0) if "slice" in elev.dims else elev
        lat, lon = ds.lat.values, ds.lon.values
        want = np.zeros((lat.size, lon.size))
        for dy in (-0.125, 0.125):
            w = np.sin(np.deg2rad(lat + dy + 0.125)) - np.sin(np.deg2rad(lat + dy - 0.125))
            for dx in (-0.125, 0.125):
                LAT, LON = np.meshgrid(lat + dy, lon + dx, indexing="ij")
                want += w[:, None] * true_elevation(LON, LAT)
        want /= 2 * (np.sin(np.deg2rad(lat + 0.25)) - np.sin(np.deg2rad(lat - 0.25)))[:, None]
        np.testing.assert_allclose(elev.values, want, rtol=1e-5, atol=0.05)


def test_model_change_lands_at_its_longitudes(crossing_run):
    # the invented models' 2090 warming is 3 + 2 cos(lon - 190 deg), on global 0..360 grids;
    # bio1 (annual mean temperature) of the downscaled slice minus the baseline's is that
    # change, interpolated bilinearly from 2.5 degrees (error ~ 2 (0.044 rad)^2 / 8 < 1e-3 K)
    _, harm = crossing_run
    with xr.open_dataset(harm / "harmonised" / "tundra_warm_2090.nc") as warm, \
            xr.open_dataset(harm / "harmonised" / "baseline.nc") as base:
        np.testing.assert_allclose(warm.lon.values, base.lon.values)
        d = (warm["bio1"] - base["bio1"]).values
        observed = base["bio1"].notnull().values & ~base["filled"].values.astype(bool)
        LAT, LON = np.meshgrid(base.lat.values, base.lon.values, indexing="ij")
        want = warming_2090(LON, LAT)
        assert observed.sum() > 300
        np.testing.assert_allclose(d[observed], want[observed], atol=0.01)
        # the warmest cells of the change are east of 180 (190E = 170W), as in the models
        assert LON[observed][np.argmax(d[observed])] > 185


def test_land_bridge_on_the_180_meridian_at_21ka(crossing_run):
    out, _ = crossing_run
    with open_series(out / "series.nc") as ds:
        land = ds["land"]
        strait = dict(lat=65.25, lon=[179.75, 180.25])
        assert not land.sel(slice="baseline", **strait).values.any()  # sea today (-45 m)
        assert land.sel(slice="tundra_21ka", **strait).values.all()  # dry at -120 m


def test_geotiff_cells_are_where_the_grid_puts_them(crossing_run):
    rasterio = pytest.importorskip("rasterio")
    out, _ = crossing_run
    with open_series(out / "series.nc") as ds, \
            rasterio.open(out / "geotiff" / "suitability_tundra_warm_2090.tif") as r:
        assert r.crs.to_epsg() == 4326
        assert (r.bounds.left, r.bounds.right) == pytest.approx((WEST, EAST))
        assert (r.bounds.bottom, r.bounds.top) == pytest.approx((SOUTH, NORTH))
        a = r.read(1)
        want = ds["suitability"].sel(slice="tundra_warm_2090").values
        for lon_w, lat in ((-172.25, 64.75), (170.25, 66.25), (179.75, 60.25)):
            x = lon_w % 360.0  # the raster's turn: 165 .. 195
            row, col = r.index(x, lat)
            i = int(np.argmin(np.abs(ds.lat.values - lat)))
            j = int(np.argmin(np.abs(ds.lon.values - x)))
            assert a[row, col] == pytest.approx(want[i, j], nan_ok=True)
            cx, cy = r.xy(row, col)
            assert (cx, cy) == pytest.approx((ds.lon.values[j], ds.lat.values[i]))


def test_maps_are_drawn(crossing_run):
    out, _ = crossing_run
    names = {p.name for p in (out / "maps").glob("*.png")}
    assert {"stability.png", "panel_change.png", "suitability_baseline.png"} <= names


def test_records_on_both_sides_of_180_are_used(crossing_run):
    out, _ = crossing_run
    cleaning = pd.read_csv(out / "tables" / "cleaning.csv").set_index("reason")
    assert cleaning.loc["outside grid", "n_dropped"] == 0


def test_without_a_grid_section_the_baseline_grid_is_made_continuous(tmp_path):
    # no [grid]: the fine baseline (written 165.25 .. 194.75, split at 180 by the reader) is
    # the grid; it is put back on one continuous axis before anything is regridded onto it
    cfg = write_world(tmp_path / "data")
    text = cfg.read_text()
    start = text.index("[grid]")
    end = text.index("[climate]")
    cfg.write_text(text[:start] + text[end:])
    out = tmp_path / "h"
    result = CliRunner().invoke(app, ["harmonise", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    with xr.open_dataset(out / "harmonised" / "baseline.nc") as base:
        np.testing.assert_allclose(base.lon.values, np.arange(WEST + RES / 2, EAST, RES))
        LAT, LON = np.meshgrid(base.lat.values, base.lon.values, indexing="ij")
        # land where the world's elevation (coarsened conservatively) is above sea level,
        # on both sides of 180
        land = base["land"].values.astype(bool)
        assert land[:, base.lon.values < 180].any() and land[:, base.lon.values > 180].any()
        z = true_elevation(LON, LAT)
        clear = np.abs(z) > 50  # away from the coast, where coarsening cannot flip the sign
        np.testing.assert_array_equal(land[clear], (z > 0)[clear])
