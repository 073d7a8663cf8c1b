"""Suitable area, change map, centroid and the per-slice table."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import Geod

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.series import (
    CHANGE_FLAG_MEANINGS,
    SUMMARY_COLUMNS,
    centroid,
    change_map,
    change_table,
    suitable_area,
)

R_KM = 6371.0072  # authalic radius of GRS80/WGS84 (Moritz 2000, J. Geodesy 74:128), rounded
WGS84 = Geod(ellps="WGS84")


def _single(lon_min, lat_min, res=1.0, n=3):
    g = make_grid(lon_min=lon_min, lon_max=lon_min + n * res, lat_min=lat_min,
                  lat_max=lat_min + n * res, resolution=res)
    s = np.zeros((n, n), dtype=np.int8)
    s[0, 0] = 1
    return xr.DataArray(s, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})


def test_area_one_cell_at_equator_spherical_formula():
    # Zone area on a sphere: R^2 * dlambda * (sin phi2 - sin phi1), radians (Snyder 1987,
    # Map Projections: A Working Manual, USGS PP 1395); recomputed here independently.
    da = _single(0.0, 0.0)
    expected = R_KM**2 * np.deg2rad(1.0) * (np.sin(np.deg2rad(1.0)) - np.sin(0.0))
    got = float(suitable_area(da))
    assert got == pytest.approx(expected, rel=1e-12)
    # 1 deg x 1 deg at the equator is ~12 364 km^2 on this sphere [computed]
    assert got == pytest.approx(12363.9, abs=0.5)


@pytest.mark.parametrize(("lat0", "rel"), [(0.0, 0.007), (30.0, 0.007), (45.0, 0.007),
                                           (60.0, 0.007), (70.0, 0.009), (89.0, 0.009)])
def test_area_against_pyproj_wgs84(lat0, rel):
    # pyproj Geod(ellps="WGS84").polygon_area_perimeter: geodesic area on the ellipsoid. The
    # authalic sphere has the same total area but distributes it differently: per 1-degree cell
    # sphere/ellipsoid - 1 is +0.45 % at the equator, -0.56 % at 60 N, -0.74 % at 70 N and
    # -0.89 % at 89 N [computed with pyproj 3.7.2], so 0.7 % holds up to ~65 degrees and 0.9 %
    # everywhere.
    da = _single(10.0, lat0, n=1)
    lons = [10.0, 11.0, 11.0, 10.0]
    lats = [lat0, lat0, lat0 + 1.0, lat0 + 1.0]
    area_m2, _ = WGS84.polygon_area_perimeter(lons, lats)
    assert float(suitable_area(da)) == pytest.approx(abs(area_m2) / 1e6, rel=rel)


def test_area_additive_and_not_a_count():
    g = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=80, resolution=2.0)
    ny, nx = g.sizes["lat"], g.sizes["lon"]
    a = np.zeros((ny, nx), np.int8)
    b = np.zeros((ny, nx), np.int8)
    a[:20] = 1
    b[20:] = 1
    mk = lambda x: xr.DataArray(x, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    both = float(suitable_area(mk(a | b)))
    assert both == pytest.approx(float(suitable_area(mk(a))) + float(suitable_area(mk(b))),
                                 rel=1e-12)
    # the whole grid is a zone of 4 deg of longitude from 0 to 80 N (spherical zone formula)
    zone = R_KM**2 * np.deg2rad(4.0) * np.sin(np.deg2rad(80.0))
    assert both == pytest.approx(zone, rel=1e-12)
    # equal counts, unequal areas: high-latitude cells are smaller
    assert float(suitable_area(mk(b))) < float(suitable_area(mk(a)))


def test_area_respects_land_and_dims(stack_factory):
    ds = stack_factory()
    area = suitable_area(ds["suitable"])
    assert area.dims == ("slice",)
    assert area.attrs["units"] == "km2"
    none = suitable_area(ds["suitable"], land=xr.zeros_like(ds["land"]))
    assert np.all(none.values == 0)


def test_change_codes_hand_example():
    g = make_grid(lon_min=0, lon_max=3, lat_min=0, lat_max=2, resolution=1.0)
    coords = {"lat": g.lat, "lon": g.lon}
    ref = xr.DataArray(np.array([[1, 1, 0], [0, -1, -1]], np.int8), dims=("lat", "lon"),
                       coords=coords)
    cur = xr.DataArray(np.array([[1, 0, 1], [0, 1, -1]], np.int8), dims=("lat", "lon"),
                       coords=coords)
    got = change_map(cur, ref)
    np.testing.assert_array_equal(got.values, [[3, 2, 1], [0, 1, -1]])
    strict = change_map(cur, ref, invalid="either")
    np.testing.assert_array_equal(strict.values, [[3, 2, 1], [0, -1, -1]])
    assert got.dtype == np.int8
    assert got.attrs["flag_meanings"] == CHANGE_FLAG_MEANINGS
    np.testing.assert_array_equal(got.attrs["flag_values"], [-1, 0, 1, 2, 3])
    # float input with NaN off land gives the same codes
    fl = change_map(cur.astype(float).where(cur >= 0), ref.astype(float).where(ref >= 0))
    np.testing.assert_array_equal(fl.values, got.values)


def test_change_map_grid_mismatch():
    a = _single(0.0, 0.0)
    b = _single(1.0, 0.0)
    with pytest.raises(DataError, match="different grids"):
        change_map(a, b)


def test_centroid_shift_against_pyproj():
    # Two single-cell ranges; the haversine shift on the authalic sphere vs the WGS84 geodesic
    # of pyproj Geod.inv: sphere and ellipsoid differ by < 0.6 % in distance (flattening
    # 1/298.257; the bound is common practice, not from a paper).
    g = make_grid(lon_min=-10, lon_max=10, lat_min=30, lat_max=60, resolution=1.0)
    coords = {"lat": g.lat, "lon": g.lon}
    s = np.zeros((2, g.sizes["lat"], g.sizes["lon"]), np.int8)
    s[0, 2, 3] = 1
    s[1, 25, 17] = 1
    da = xr.DataArray(s, dims=("slice", "lat", "lon"), coords={"slice": ["a", "b"], **coords})
    lat_c, lon_c = centroid(da)
    assert float(lat_c[0]) == pytest.approx(32.5) and float(lon_c[0]) == pytest.approx(-6.5)
    assert float(lat_c[1]) == pytest.approx(55.5) and float(lon_c[1]) == pytest.approx(7.5)
    ds = xr.Dataset({"suitable": da})
    tab = change_table(ds, reference="a")
    _, _, dist_m = WGS84.inv(-6.5, 32.5, 7.5, 55.5)
    assert tab["centroid_shift_km"].iloc[1] == pytest.approx(dist_m / 1000.0, rel=0.006)
    assert tab["centroid_shift_km"].iloc[0] == 0.0


def test_centroid_across_dateline():
    # unit-vector mean: two equal cells at 179.5 E and 179.5 W average to 180, not 0
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-1, lat_max=1, resolution=1.0)
    s = np.zeros((g.sizes["lat"], g.sizes["lon"]), np.int8)
    s[:, 0] = 1
    s[:, -1] = 1
    da = xr.DataArray(s, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    lat_c, lon_c = centroid(da)
    assert abs(abs(float(lon_c)) - 180.0) < 1e-9
    assert float(lat_c) == pytest.approx(0.0, abs=1e-12)


def test_centroid_nothing_suitable_is_nan():
    da = _single(0.0, 0.0) * 0
    lat_c, lon_c = centroid(da)
    assert np.isnan(float(lat_c)) and np.isnan(float(lon_c))


def test_change_table_columns_and_identities(stack_factory):
    ds = stack_factory()
    tab = change_table(ds)
    assert list(tab.columns) == SUMMARY_COLUMNS
    assert list(tab["slice"]) == list(ds["slice"].values)
    ref_area = tab["suitable_area_km2"].iloc[0]
    np.testing.assert_allclose(tab["suitable_area_km2"] - ref_area,
                               tab["gain_km2"] - tab["loss_km2"], rtol=0, atol=1e-6)
    np.testing.assert_allclose(tab["stable_km2"] + tab["loss_km2"], ref_area, rtol=1e-12)
    assert tab["gain_km2"].iloc[0] == 0 and tab["loss_km2"].iloc[0] == 0
    assert (tab["novel_area_km2"] <= tab["suitable_area_km2"] + 1e-9).all()
    # novel area recomputed directly: suitable cells with MESS < 0
    from timeslice.grid import cell_area

    direct = ((ds["suitable"] == 1) & (ds["mess"] < 0)) * cell_area(ds)
    np.testing.assert_allclose(tab["novel_area_km2"], direct.sum(("lat", "lon")).values)
    assert tab["model"].iloc[1] == "alder" and tab["year"].iloc[1] == -19050.0


def test_change_table_other_reference(stack_factory):
    ds = stack_factory()
    tab = change_table(ds, reference="6ka")
    ref_area = tab.loc[tab["slice"] == "6ka", "suitable_area_km2"].item()
    np.testing.assert_allclose(tab["stable_km2"] + tab["loss_km2"], ref_area, rtol=1e-12)


def test_change_table_unknown_reference(stack_factory):
    ds = stack_factory()
    with pytest.raises(DataError, match=r"'present'.*baseline.*21ka"):
        change_table(ds, reference="present")


def test_change_table_without_mess(stack_factory):
    ds = stack_factory().drop_vars("mess")
    assert change_table(ds)["novel_area_km2"].isna().all()


def test_bad_inputs_name_the_argument(stack_factory):
    ds = stack_factory()
    with pytest.raises(DataError, match="`suitable` must be an xarray.DataArray"):
        suitable_area(ds)
    with pytest.raises(DataError, match="no variable 'suitable'"):
        change_table(ds.drop_vars("suitable"))
    with pytest.raises(DataError, match="lacks dimension"):
        suitable_area(ds["suitable"].rename(lat="y"))
    dup = ds.assign_coords(slice=["a", "a", "b", "c"])
    with pytest.raises(DataError, match="not unique"):
        change_table(dup, reference="a")


def test_change_is_lazy(stack_factory, raise_if_dask_computes):
    ds = stack_factory().chunk({"lat": 2})
    with raise_if_dask_computes():
        ch = change_map(ds["suitable"], ds["suitable"].isel(slice=0))
        area = suitable_area(ds["suitable"])
        lat_c, lon_c = centroid(ds["suitable"])
    assert ch.chunks is not None and area.chunks is not None
    eager = change_map(ds["suitable"].load(), ds["suitable"].isel(slice=0).load())
    np.testing.assert_array_equal(ch.values, eager.values)


def test_change_table_dask_equals_numpy(stack_factory, raise_if_dask_computes):
    ds = stack_factory()
    eager = change_table(ds, detail=True)
    with raise_if_dask_computes(max_computes=1):  # one pass over the chunked stack
        lazy = change_table(ds.chunk({"lat": 2, "lon": 3}), detail=True)
    import pandas as pd

    pd.testing.assert_frame_equal(eager, lazy, check_exact=False, rtol=1e-12)


def test_detail_without_optional_layers(stack_factory):
    ds = stack_factory().drop_vars(["elevation", "mess", "nt1", "nt2"])
    tab = change_table(ds, detail=True)
    for col in ("elevation_mean_m", "elevation_q50_m", "novel_any_km2", "gain_novel_share",
                "novel_mess_km2"):
        assert tab[col].isna().all(), col
    assert tab["lat_q50"].notna().any()


def test_novel_climate_over_all_land_and_in_the_loss(stack_factory):
    # a slice wholly outside the calibration climate (MESS < 0 on all land) with nothing
    # suitable: its novel suitable area is 0, but all of its land is novel and all of its loss
    # lies in novel climate
    import numpy as np

    from timeslice.series.table import change_table

    stack = stack_factory()
    land = stack["land"].values
    stack["mess"][3] = np.where(land, -5.0, np.nan)
    stack["nt1"][3] = np.where(land, -0.5, np.nan)
    stack["suitable"][3] = np.where(land, 0, -1).astype(np.int8)
    t = change_table(stack, detail=True).set_index("slice")
    row = t.loc["low_2081-2100"]
    # land area by the sphere formula R^2 dlon (sin phi2 - sin phi1), R = 6371.0072 km
    # (Snyder 1987, USGS PP 1395), computed here without timeslice
    lat = stack["lat"].values
    edges = np.deg2rad(np.stack([lat - 0.5, lat + 0.5], axis=1))
    band = 6371.0072**2 * np.deg2rad(1.0) * (np.sin(edges[:, 1]) - np.sin(edges[:, 0]))
    land_km2 = float((band[:, None] * land).sum())
    assert row["suitable_area_km2"] == 0 and row["novel_area_km2"] == 0
    assert row["land_km2"] == pytest.approx(land_km2, rel=1e-12)
    assert row["novel_land_km2"] == pytest.approx(land_km2, rel=1e-12)
    assert row["novel_land_share"] == pytest.approx(1.0)
    assert row["loss_km2"] > 0 and row["loss_novel_share"] == pytest.approx(1.0)
