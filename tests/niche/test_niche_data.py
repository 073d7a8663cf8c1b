"""Cleaning, thinning, calibration area, background sampling and extraction."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from pyproj import Geod
from scipy import stats

from timeslice.errors import ConfigError, DataError, TimesliceWarning
from timeslice.grid import haversine_km, make_grid
from timeslice.niche import data as nd


def _land(lon_min=-10, lon_max=10, lat_min=40, lat_max=50, res=1.0, sea_cols=0):
    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max, resolution=res)
    m = np.ones((g.sizes["lat"], g.sizes["lon"]), dtype=bool)
    if sea_cols:
        m[:, :sea_cols] = False
    return xr.DataArray(m, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon}, name="land")


def test_clean_records_counts_every_reason():
    land = _land(sea_cols=2)  # lon -10..-8 is sea
    rec = pd.DataFrame(
        {
            "lon": [np.nan, 200.0, 0.0, 1.5, 1.5, 50.0, -9.5, 2.5, 3.5, 4.5, 5.5, 6.5],
            "lat": [45.0, 45.0, 0.0, 45.5, 45.5, 45.0, 45.0, 46.0, 46.0, 46.0, 47.0, 47.0],
            "uncertainty_m": [1, 1, 1, 1, 1, 1, 1, 1, 1e6, 1, 1, np.nan],
            "status": ["present"] * 9 + ["absent", "present", "present"],
            "year": [2000.0] * 10 + [1850.0, 2001.0],
        }
    )
    kept, table = nd.clean_records(rec, land=land, uncertainty_max_m=10_000, years=(1900, 2020))
    counts = dict(zip(table["reason"], table["n_dropped"]))
    assert list(table["reason"]) == list(nd.CLEANING_REASONS)  # every reason, in order
    assert counts == {
        "unparseable coordinates": 1,
        "out-of-range coordinates": 1,
        "zero coordinates (0, 0)": 1,
        "exact duplicate": 1,
        "outside grid": 1,
        "on water or ice": 1,
        "uncertainty above limit": 1,
        "status absent": 1,
        "year outside window": 1,
    }
    assert len(kept) == 3 and table.attrs["n_kept"] == 3 and table.attrs["n_input"] == 12
    assert sorted(kept["lon"]) == [1.5, 2.5, 6.5]  # unknown uncertainty is kept


def test_clean_records_zeros_listed_when_nothing_dropped():
    land = _land()
    rec = pd.DataFrame({"lon": [1.0], "lat": [45.0]})
    kept, table = nd.clean_records(rec, land=land)
    assert len(table) == len(nd.CLEANING_REASONS) and table["n_dropped"].sum() == 0
    assert len(kept) == 1


def test_clean_records_uses_ice_of_prepared_slice():
    land = _land()
    ice = xr.zeros_like(land)
    ice[5, 10] = True
    ds = xr.Dataset({"land": land, "ice": ice})
    rec = pd.DataFrame({"lon": [float(land.lon[10])], "lat": [float(land.lat[5])]})
    kept, table = nd.clean_records(rec, land=ds)
    assert len(kept) == 0
    assert table.set_index("reason").loc["on water or ice", "n_dropped"] == 1


def test_clean_records_bad_options():
    land = _land()
    rec = pd.DataFrame({"lon": [1.0], "lat": [45.0]})
    with pytest.raises(ConfigError, match="years"):
        nd.clean_records(rec, land=land, years=(2000, 1990))
    with pytest.raises(DataError, match="no 'lat' column"):
        nd.clean_records(pd.DataFrame({"lon": [1.0]}), land=land)


def test_thin_distance_matches_pyproj(rng):
    n = 400
    rec = pd.DataFrame({"lon": rng.uniform(-5, 5, n), "lat": rng.uniform(40, 48, n)})
    d = 50.0
    out = nd.thin(rec, min_distance_km=d, seed=1, repeats=5)
    assert 10 < len(out) < n
    lon, lat = out["lon"].to_numpy(), out["lat"].to_numpy()
    i, j = np.triu_indices(len(out), 1)
    # Reference: pyproj 3.x Geod(ellps="WGS84").inv (Karney 2013 geodesics on the ellipsoid).
    # Thinning works on the authalic sphere; sphere vs ellipsoid distances differ by at most
    # ~0.5 % at these latitudes, so allow that margin.
    _, _, dist_m = Geod(ellps="WGS84").inv(lon[i], lat[i], lon[j], lat[j])
    assert np.min(dist_m) / 1000.0 >= d * (1 - 0.005)
    assert np.min(haversine_km(lon[i], lat[i], lon[j], lat[j])) >= d
    # the greedy set is maximal: every dropped record is within d of a kept one
    dropped = rec.merge(out, how="left", indicator=True).query("_merge == 'left_only'")
    dmin = haversine_km(dropped["lon"].to_numpy()[:, None], dropped["lat"].to_numpy()[:, None], lon[None], lat[None]).min(1)
    assert np.all(dmin <= d * (1 + 1e-9))


def test_thin_is_seeded_and_more_repeats_do_not_shrink(rng):
    rec = pd.DataFrame({"lon": rng.uniform(-2, 2, 200), "lat": rng.uniform(44, 46, 200)})
    a = nd.thin(rec, min_distance_km=20, seed=3, repeats=1)
    b = nd.thin(rec, min_distance_km=20, seed=3, repeats=1)
    c = nd.thin(rec, min_distance_km=20, seed=3, repeats=20)
    pd.testing.assert_frame_equal(a, b)
    assert len(c) >= len(a)


def test_thin_one_per_cell():
    land = _land()
    rec = pd.DataFrame({"lon": [0.1, 0.2, 0.3, 1.6, -3.5], "lat": [45.1, 45.2, 45.3, 45.6, 41.5]})
    out = nd.thin(rec, grid=land, seed=0)
    assert len(out) == 3
    with pytest.raises(ConfigError, match="exactly one"):
        nd.thin(rec, seed=0)


def test_calibration_buffer_matches_great_circle():
    land = _land(res=0.5)
    rec = pd.DataFrame({"lon": [0.0], "lat": [45.0]})
    area = nd.calibration_area(rec, land, buffer_km=150)
    lon2, lat2 = np.meshgrid(land.lon, land.lat)
    expect = haversine_km(0.0, 45.0, lon2, lat2) <= 150
    np.testing.assert_array_equal(area.values, expect)
    assert area.dtype == bool and area.attrs["buffer_km"] == 150
    # Reference: pyproj Geod(ellps="WGS84").inv geodesic distances; sphere and ellipsoid differ
    # by < 0.5 % here, so cells clearly inside (< 99.5 % of the buffer) must be in the area and
    # cells clearly outside (> 100.5 %) must not
    _, _, d_m = Geod(ellps="WGS84").inv(np.zeros(lon2.size), np.full(lon2.size, 45.0), lon2.ravel(), lat2.ravel())
    d_km = d_m.reshape(lon2.shape) / 1000.0
    assert area.values[d_km < 150 * 0.995].all()
    assert not area.values[d_km > 150 * 1.005].any()


def test_calibration_hull_contains_buffer_and_interior():
    land = _land(res=0.25)
    rec = pd.DataFrame({"lon": [-6.0, 6.0, 0.0], "lat": [41.5, 41.5, 48.5]})
    buf = nd.calibration_area(rec, land, buffer_km=50)
    hull = nd.calibration_area(rec, land, buffer_km=50, method="hull_buffer")
    assert bool((hull | ~buf).all())  # hull buffer contains point buffer
    # the triangle's centroid is far from every record but inside the hull
    c = hull.sel(lon=0.0, lat=43.8, method="nearest")
    assert bool(c) and not bool(buf.sel(lon=0.0, lat=43.8, method="nearest"))
    # a cell 100 km outside the hull edge is out
    assert not bool(hull.sel(lon=0.0, lat=40.2, method="nearest"))


def test_calibration_no_land_is_error():
    land = _land(sea_cols=20)
    rec = pd.DataFrame({"lon": [0.0], "lat": [45.0]})
    with pytest.raises(DataError, match="contains no land cell.*increase buffer_km"):
        nd.calibration_area(rec, land, buffer_km=100)
    with pytest.raises(ConfigError, match="did you mean 'hull_buffer'"):
        nd.calibration_area(rec, _land(), buffer_km=100, method="hull-buffer")


def test_background_follows_cell_area(rng):
    # Reference: on a regular lat-lon grid, cell area is proportional to
    # sin(phi2) - sin(phi1), so area-proportional sampling gives latitudes with density
    # proportional to cos(phi) (spherical geometry). Kolmogorov-Smirnov test against that
    # distribution with scipy.stats.kstest; a cell-uniform sample must fail the same test.
    land = _land(lon_min=0, lon_max=20, lat_min=0, lat_max=80, res=0.25)
    bg = nd.sample_background(land, n=1500, seed=11)
    lo, hi = np.deg2rad(0.0), np.deg2rad(80.0)

    def cdf(lat_deg):
        phi = np.deg2rad(lat_deg)
        return (np.sin(phi) - np.sin(lo)) / (np.sin(hi) - np.sin(lo))

    # cell centres are discrete (0.25 deg apart): jitter within the cell band by the same law
    # is unnecessary at this resolution (max CDF step 0.006 << KS critical value 0.035)
    assert stats.kstest(bg["lat"], cdf).pvalue > 1e-3
    uniform = land.lat.values[rng.integers(0, land.sizes["lat"], 1500)]
    assert stats.kstest(uniform, cdf).pvalue < 1e-3
    assert len(bg) == 1500 and not bg.duplicated().any()


def test_background_all_cells_warns():
    land = _land()
    with pytest.warns(TimesliceWarning, match="only 200 cells"):
        bg = nd.sample_background(land, n=500, seed=0)
    assert len(bg) == 200
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert len(nd.sample_background(land, n=200, seed=0)) == 200


def test_extract_nearest_cell():
    land = _land()
    v = xr.DataArray(np.arange(200.0).reshape(10, 20), dims=("lat", "lon"), coords=land.coords)
    ds = xr.Dataset({"bio1": v})
    pts = pd.DataFrame({"lon": [-9.6, 9.4], "lat": [40.1, 49.9]})
    out = nd.extract(ds, pts, variables=["bio1"])
    assert list(out["bio1"]) == [0.0, 199.0]
    with pytest.raises(DataError, match="no variable.*bio2"):
        nd.extract(ds, pts, variables=["bio2"])
