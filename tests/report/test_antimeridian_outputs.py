"""Outputs of a study region across the 180° meridian and at high latitude: areas, maps,
scale bars, GeoTIFF and NetCDF georeferencing, checked against pyproj, rasterio and cartopy's
own coordinate transforms (not against what the writers print)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import AUTHALIC_RADIUS_KM, cell_area, make_grid
from timeslice.report import maps
from timeslice.report.geotiff import export
from timeslice.report.netcdf import open_series, write_series
from timeslice.series.change import suitable_area

from conftest import make_series

pyproj = pytest.importorskip("pyproj")

# an invented study over the Bering region: 40 x 24 cells of 0.5 degrees, 170E .. 170W
WEST, SOUTH, RES, NLON, NLAT = 170.0, 62.0, 0.5, 40, 24


def _crossing_series(n_slices: int = 3) -> xr.Dataset:
    ds = make_series(n_slices=n_slices, nlat=NLAT, nlon=NLON)
    g = make_grid(lon_min=WEST, lon_max=WEST + NLON * RES - 360.0, lat_min=SOUTH,
                  lat_max=SOUTH + NLAT * RES, resolution=RES)
    return ds.assign_coords(lon=g.lon, lat=g.lat)


def _sphere_polygon_km2(west, east, south, north, *, n=2000, ellps=None):
    """pyproj.Geod polygon area of a lat-lon box with its parallels densified (a geodesic
    between two corners is not a parallel): the authalic sphere unless `ellps`."""
    geod = pyproj.Geod(ellps=ellps) if ellps else pyproj.Geod(a=AUTHALIC_RADIUS_KM * 1e3,
                                                              b=AUTHALIC_RADIUS_KM * 1e3)
    lons = np.linspace(west, east, n)
    lon = np.concatenate([lons, lons[::-1]])
    lat = np.concatenate([np.full(n, south), np.full(n, north)])
    area, _ = geod.polygon_area_perimeter(lon, lat)
    return abs(area) / 1e6


def test_grid_across_180_has_continuous_axis_and_right_area():
    ds = _crossing_series()
    lon = ds.lon.values
    assert lon[0] == WEST + RES / 2 and lon[-1] == WEST + NLON * RES - RES / 2  # 170.25..189.75
    np.testing.assert_allclose(np.diff(lon), RES)
    total = float(cell_area(ds).sum())
    ref = _sphere_polygon_km2(170.0, 190.0, 62.0, 74.0)
    assert total == pytest.approx(ref, rel=1e-6)
    # the WGS84 ellipsoid differs from the authalic sphere by < 1 % at these latitudes
    # (authalic vs geodetic latitude; Snyder 1987 p. 16)
    assert total == pytest.approx(_sphere_polygon_km2(170.0, 190.0, 62.0, 74.0, ellps="WGS84"),
                                  rel=1e-2)


def test_suitable_area_of_a_patch_across_180():
    ds = _crossing_series()
    # suitable exactly on 178E .. 175W x 65N .. 68N, land everywhere
    lon, lat = ds.lon.values, ds.lat.values
    patch = (lat[:, None] > 65) & (lat[:, None] < 68) & (lon[None, :] > 178) & (lon[None, :] < 185)
    suitable = xr.DataArray(patch.astype("int8"), dims=("lat", "lon"),
                            coords={"lat": ds.lat, "lon": ds.lon})
    got = float(suitable_area(suitable))
    ref = _sphere_polygon_km2(178.0, -175.0 + 360.0, 65.0, 68.0)
    assert got == pytest.approx(ref, rel=1e-6)


def test_geotiff_across_180_is_georeferenced_at_the_cells():
    rasterio = pytest.importorskip("rasterio")
    ds = _crossing_series()
    tmp = pytest.importorskip("pathlib").Path
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        files = export(ds, tmp(d), variables=["suitability"])
        with rasterio.open(files[0]) as r:
            assert r.crs.to_epsg() == 4326
            assert r.width == NLON and r.height == NLAT
            assert r.bounds.left == pytest.approx(170.0) and r.bounds.right == pytest.approx(190.0)
            a = r.read(1)
            want = ds["suitability"].values[0]
            rng = np.random.default_rng(1)
            for i, j in zip(rng.integers(0, NLAT, 20), rng.integers(0, NLON, 20)):
                # rasterio's own georeferencing of the cell centre is the grid's cell centre
                x, y = r.xy(int(NLAT - 1 - i), int(j))
                assert ((x - ds.lon.values[j] + 180) % 360 - 180) == pytest.approx(0, abs=1e-9)
                assert y == pytest.approx(ds.lat.values[i])
                # and a point given west of 180 in [-180, 180) finds the same cell once x is
                # put on the raster's turn (x + 360)
                lon_w = ((ds.lon.values[j] + 180) % 360) - 180
                row, col = r.index(lon_w + (360 if lon_w < 0 else 0), ds.lat.values[i])
                assert (row, col) == (NLAT - 1 - i, j)
                assert a[row, col] == pytest.approx(want[i, j], nan_ok=True)


def test_geotiff_refuses_a_grid_split_at_180(tmp_path):
    ds = _crossing_series(n_slices=1)
    split = ds.assign_coords(lon=((ds.lon + 180) % 360) - 180).sortby("lon")
    with pytest.raises(DataError, match="continuous_lon"):
        export(split, tmp_path, variables=["suitability"])


def test_netcdf_across_180_keeps_bounds_and_areas(tmp_path):
    ds = _crossing_series()
    path = write_series(ds, tmp_path / "s.nc")
    with open_series(path) as back:
        np.testing.assert_allclose(back.lon.values, ds.lon.values)
        bnds = back["lon_bnds"].values
        assert bnds[0, 0] == pytest.approx(170.0) and bnds[-1, 1] == pytest.approx(190.0)
        np.testing.assert_allclose(bnds[1:, 0], bnds[:-1, 1])
        assert back.lon.attrs["units"] == "degrees_east"
        total = float(back["cell_area"].sum())
    assert total == pytest.approx(_sphere_polygon_km2(170.0, 190.0, 62.0, 74.0), rel=1e-6)


@pytest.mark.parametrize("mesh", [True, False])
@pytest.mark.parametrize("projection", maps.PROJECTIONS)
def test_map_is_centred_on_the_region_and_cells_sit_where_they_are(projection, mesh,
                                                                   monkeypatch):
    if not mesh:  # large grids on projected maps: a resampled image instead of the mesh
        monkeypatch.setattr(maps, "_MESH_MAX_CELLS", 10)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    import cartopy.crs as ccrs

    ds = _crossing_series(n_slices=1)
    lat, lon = ds.lat.values, ds.lon.values
    v = np.zeros((lat.size, lon.size), dtype="float32")
    east = lon > 180.0  # west of the dateline in [-180, 180) terms: bright
    v[:, east] = 1.0
    ds["suitability"] = (("slice", "lat", "lon"), v[None])
    fig = Figure(figsize=(5, 4), dpi=100)
    FigureCanvasAgg(fig)
    ax, fr = maps._axes(fig, 111, ds, 0, projection=projection)
    maps._draw(ax, fr, ds, "suitability", 0)
    fig.canvas.draw()
    assert fr.lon0 == pytest.approx(180.0)
    img = np.asarray(fig.canvas.buffer_rgba())[:, :, :3].astype(float)
    height = img.shape[0]

    def pixel(lo, la):
        # cartopy's own transform from ordinary (lon, lat) in [-180, 180) to the map
        x, y = ax.transData.transform(ax.projection.transform_point(lo, la, ccrs.PlateCarree()))
        return img[int(round(height - y)), int(round(x))]

    bright = pixel(-172.25, 68.25)  # 187.75 on the grid's axis
    dark = pixel(174.25, 68.25)
    assert bright[0] > 200 and bright[1] > 200  # viridis(1) is yellow
    assert dark[0] < 100 and dark[1] < 50  # viridis(0) dark purple
    # the map spans the region, not the globe: its width is the region's
    x0, x1 = ax.get_xlim()
    if projection == "lonlat":
        assert x1 - x0 == pytest.approx(20.0, rel=0.01)


@pytest.mark.parametrize("projection", maps.PROJECTIONS)
@pytest.mark.parametrize("south", [62.0, -80.0, 10.0])
def test_scale_bar_is_right_where_it_is_drawn(projection, south):
    # the label against pyproj's geodesic distance between the drawn bar's two ends, on the
    # authalic sphere (tight) and on the WGS84 ellipsoid (sphere vs ellipsoid < 0.6 %)
    from matplotlib.figure import Figure

    ds = make_series(n_slices=1, nlat=NLAT, nlon=NLON)
    g = make_grid(lon_min=WEST, lon_max=WEST + NLON * RES, lat_min=south,
                  lat_max=south + NLAT * RES, resolution=RES)
    ds = ds.assign_coords(lon=g.lon, lat=g.lat)
    fig = Figure(figsize=(5, 4))
    ax, fr = maps._axes(fig, 111, ds, 0, projection=projection)
    maps._scale_bar(ax, fr)
    (bar,) = [ln for ln in ax.lines if ln.get_gid() == "scale_bar"]
    (label,) = [t for t in ax.texts if t.get_text().endswith(" km")]
    km = float(label.get_text().split()[0])
    (x0, x1), (y0, y1) = bar.get_xdata(), bar.get_ydata()
    lon0, lat0 = fr.lonlat(x0, y0)
    lon1, lat1 = fr.lonlat(x1, y1)
    assert y0 == y1  # horizontal on the map
    sphere = pyproj.Geod(a=AUTHALIC_RADIUS_KM * 1e3, b=AUTHALIC_RADIUS_KM * 1e3)
    assert sphere.inv(lon0, lat0, lon1, lat1)[2] / 1e3 == pytest.approx(km, rel=1e-6)
    wgs = pyproj.Geod(ellps="WGS84")
    assert wgs.inv(lon0, lat0, lon1, lat1)[2] / 1e3 == pytest.approx(km, rel=6e-3)
    # the bar lies inside the grid, near its lower-left corner
    assert fr.south <= lat0 <= fr.north and fr.west <= lon0 <= fr.east


@pytest.mark.parametrize("projection", maps.PROJECTIONS)
def test_every_map_across_180_renders(projection, tmp_path):
    from PIL import Image

    ds = _crossing_series()
    files = maps.slice_maps(ds, tmp_path, slices=["baseline"], dpi=50, projection=projection)
    files.append(maps.change_map(ds, tmp_path / "c.png", dpi=40, projection=projection))
    files.append(maps.stability_map(ds, tmp_path / "s.png", dpi=40, projection=projection))
    for f in files:
        with Image.open(f) as im:
            assert im.format == "PNG" and np.asarray(im.convert("L")).std() > 5


def test_unknown_projection_is_named():
    with pytest.raises(DataError, match="projection"):
        maps.map_frame(_crossing_series(n_slices=1), "mercator")


def test_centroid_track_across_180(tmp_path):
    import pandas as pd

    from timeslice.report import plots

    ds = _crossing_series(n_slices=1)
    summary = pd.DataFrame({
        "slice": ["baseline", "a_2050", "a_2090"], "year": [1985.0, 2050.0, 2090.0],
        "model": ["observed", "a", "a"], "scenario": ["baseline", "high", "high"],
        "centroid_lat": [66.0, 67.0, 68.5], "centroid_lon": [179.5, -179.0, -176.0],
    })
    for land in (ds["land"].isel(slice=0), None):
        path = plots.centroid_track(summary, tmp_path / "t.png", land=land, dpi=40)
        assert path.is_file()


def test_netcdf_across_180_passes_cf_checker(tmp_path):
    # Reference: compliance-checker's "cf:1.8" suite, offline; longitudes past 180 are valid
    # degrees_east (CF 1.8 section 4.2 sets no range; from memory, the checker agrees here)
    from test_netcdf import _cf_errors

    path = write_series(_crossing_series(), tmp_path / "series.nc", source="unit test")
    passed, had_errors, high, medium = _cf_errors(path, tmp_path)
    assert not had_errors and high == [] and medium == [] and passed
