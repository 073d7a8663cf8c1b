"""Zonal summaries: exact cell fractions, spherical areas against pyproj."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.grid import AUTHALIC_RADIUS_KM, cell_area, make_grid
from timeslice.series.zonal import cell_fractions, read_zones, zonal_table

pyproj = pytest.importorskip("pyproj")
shapely = pytest.importorskip("shapely")


def _geod_area_km2(geom) -> float:
    # pyproj.Geod on the authalic sphere; edges densified to 0.01 degree so the geodesic
    # polygon follows the straight lon/lat edges the grid uses
    g = pyproj.Geod(a=AUTHALIC_RADIUS_KM * 1000.0, b=AUTHALIC_RADIUS_KM * 1000.0)
    dense = shapely.segmentize(geom, 0.01)
    return abs(g.geometry_area_perimeter(dense)[0]) / 1e6


def test_fractions_of_a_box_by_hand():
    grid = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=4, resolution=1.0)
    f = cell_fractions(shapely.box(0.5, 0.5, 2.0, 1.25), grid).values
    # row 0 (lat 0..1): cols 0 (half of 0.5 wide x 0.5 high = 0.25), 1 (1 x 0.5 = 0.5)
    assert f[0, 0] == pytest.approx(0.25) and f[0, 1] == pytest.approx(0.5)
    # row 1 (lat 1..2): 0.25 high: col 0 0.125, col 1 0.25
    assert f[1, 0] == pytest.approx(0.125) and f[1, 1] == pytest.approx(0.25)
    assert f[:, 2:].sum() == 0 and f[2:].sum() == 0


@pytest.mark.parametrize("poly", [
    [(10.3, 44.2), (13.7, 44.6), (12.9, 47.8), (10.9, 46.1)],
    [(-5.0, 60.0), (5.0, 61.0), (2.0, 68.5), (-4.0, 65.0)],
])
def test_zone_area_matches_pyproj(poly):
    geom = shapely.Polygon(poly)
    grid = make_grid(lon_min=-10, lon_max=20, lat_min=40, lat_max=70, resolution=0.1)
    area = float((cell_fractions(geom, grid) * cell_area(grid)).sum())
    # planar-within-cell fractions: error of the order of the cell height times tan(lat)
    assert area == pytest.approx(_geod_area_km2(geom), rel=2e-3)


def test_zone_across_the_antimeridian():
    geom = shapely.Polygon([(175.0, 60.0), (180.0, 60.0), (180.0, 64.0), (175.0, 64.0)])
    geom2 = shapely.Polygon([(-180.0, 60.0), (-175.0, 60.0), (-175.0, 64.0), (-180.0, 64.0)])
    both = shapely.MultiPolygon([geom, geom2])
    grid = make_grid(lon_min=170, lon_max=190, lat_min=55, lat_max=70, resolution=0.5)
    area = float((cell_fractions(both, grid) * cell_area(grid)).sum())
    assert area == pytest.approx(_geod_area_km2(geom) + _geod_area_km2(geom2), rel=2e-3)


def test_zonal_table_and_reader(tmp_path):
    grid = make_grid(lon_min=0, lon_max=4, lat_min=40, lat_max=44, resolution=1.0)
    ny, nx = grid.sizes["lat"], grid.sizes["lon"]
    suit = np.zeros((2, ny, nx), dtype="i1")
    suit[:, :, :2] = 1  # western half suitable in both slices
    change = np.where(suit == 1, 3, 0).astype("i1")
    ds = xr.Dataset({"suitable": (("slice", "lat", "lon"), suit),
                     "change": (("slice", "lat", "lon"), change),
                     "land": (("slice", "lat", "lon"), np.ones((2, ny, nx), bool)),
                     "refugium_window": (("lat", "lon"), suit[0] == 1)},
                    coords={"slice": ["baseline", "a"], **grid.coords})
    path = tmp_path / "zones.geojson"
    features = [{"type": "Feature", "properties": {"name": "west"},
                 "geometry": shapely.geometry.mapping(shapely.box(0, 40, 2, 44))},
                {"type": "Feature", "properties": {"name": "middle"},
                 "geometry": shapely.geometry.mapping(shapely.box(1, 40, 3, 44))}]
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    zones = read_zones(path)
    t = zonal_table(ds, zones).set_index(["zone", "slice"])
    area = cell_area(grid).values
    west = area[:, :2].sum()
    assert t.loc[("west", "a"), "suitable_km2"] == pytest.approx(west)
    assert t.loc[("west", "a"), "refugium_share"] == pytest.approx(1.0)
    # the middle zone covers one suitable and one unsuitable column
    assert t.loc[("middle", "a"), "suitable_km2"] == pytest.approx(area[:, 1].sum())
    assert t.loc[("middle", "a"), "refugium_share"] == pytest.approx(0.5, rel=1e-9)
    (tmp_path / "zones.gpkg").write_text("x")
    with pytest.raises(InputFileError, match="zones.gpkg"):
        read_zones(tmp_path / "zones.gpkg")
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features,
                                "crs": {"type": "name", "properties": {"name": "EPSG:3035"}}}))
    with pytest.raises(DataError, match="EPSG:3035"):
        read_zones(path)


def test_geopackage_and_shapefile_read_like_geojson(tmp_path):
    # written with pyogrio (GDAL) and read back: the same zones as the GeoJSON
    pyogrio = pytest.importorskip("pyogrio")
    boxes = {"west": shapely.box(0, 40, 2, 44), "east": shapely.box(2, 40, 4, 44)}
    for name in ("zones.gpkg", "zones.shp"):
        pyogrio.raw.write(tmp_path / name, geometry=shapely.to_wkb(list(boxes.values())),
                          field_data=[np.array(list(boxes), dtype=object)], fields=["name"],
                          geometry_type="Polygon", crs="EPSG:4326")
        zones = dict(read_zones(tmp_path / name))
        assert set(zones) == {"west", "east"}
        assert zones["west"].equals(boxes["west"])
    pyogrio.raw.write(tmp_path / "lambert.gpkg", geometry=shapely.to_wkb([boxes["west"]]),
                      field_data=[np.array(["w"], dtype=object)], fields=["name"],
                      geometry_type="Polygon", crs="EPSG:3035")
    with pytest.raises(DataError, match="EPSG:3035"):
        read_zones(tmp_path / "lambert.gpkg")
