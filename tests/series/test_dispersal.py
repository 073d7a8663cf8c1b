"""Movement: rate parsing, shortest-path distances, the three assumptions."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import Geod

from timeslice.errors import ConfigError, DataError
from timeslice.grid import make_grid
from timeslice.series.dispersal import (
    distance_from,
    grid_graph,
    movement,
    parse_rate,
    reachable,
    step_distances,
)

WGS84 = Geod(ellps="WGS84")
# Sphere (R = 6371.0072 km) against the WGS84 geodesic: a degree of meridian is 110.57 km at
# the equator and 111.69 km at the poles on the ellipsoid [handbook values, from memory], vs
# 111.195 km on the sphere, so distances along meridians agree within ~0.6 %; along parallels
# the sphere's radius of the parallel differs from the ellipsoid's by < 0.35 % [computed].
SPHERE_TOL = 0.006


def _grid(lon_min=0.0, lon_max=10.0, lat_min=40.0, lat_max=60.0, res=0.5):
    return make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max,
                     resolution=res)


def _map(g, arr):
    return xr.DataArray(arr, dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})


@pytest.mark.parametrize(
    ("text", "km_per_year"),
    [("2 km/yr", 2.0), ("500 km/kyr", 0.5), ("10 km/decade", 1.0), ("10 km per decade", 1.0),
     ("300 m/yr", 0.3), ("1 km yr-1", 1.0), ("0.5 km/year", 0.5), ("50 km/century", 0.5),
     ("3 km/ka", 0.003)],
)
def test_parse_rate(text, km_per_year):
    assert parse_rate(text) == pytest.approx(km_per_year)


@pytest.mark.parametrize(
    ("value", "match"),
    [("2", "has no unit"), (2.0, "has no unit"), ("2 km", "unknown unit"),
     ("2 miles/yr", "unknown unit 'miles/yr'"), ("km/yr", "not a number"),
     ("-1 km/yr", ">= 0"), ("2 km/fortnight", "unknown unit")],
)
def test_parse_rate_errors(value, match):
    with pytest.raises(ConfigError, match=match):
        parse_rate(value, name="movement.rate")


def test_step_distances():
    np.testing.assert_allclose(step_distances([-19050, -4050, 1990], 0.5),
                               [0.0, 7500.0, 3020.0])


def test_distance_along_meridian_against_pyproj():
    # A meridian is a great circle: the graph path along a column is the exact great-circle
    # distance on the sphere; pyproj Geod.inv gives the WGS84 geodesic.
    g = _grid()
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[0, 3] = True
    d = distance_from(_map(g, src))
    lon0, lat0 = float(g.lon[3]), float(g.lat[0])
    for i in (1, 10, 39):
        _, _, m = WGS84.inv(lon0, lat0, lon0, float(g.lat[i]))
        assert float(d[i, 3]) == pytest.approx(m / 1000.0, rel=SPHERE_TOL)


def test_distance_along_parallel_against_pyproj():
    # Along a row the path follows the parallel; pyproj Geod.line_length of the points on the
    # parallel is the same route on the ellipsoid (for far points the geodesic is shorter).
    g = _grid()
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[20, 0] = True
    d = distance_from(_map(g, src))
    lat0 = float(g.lat[20])
    for j in (1, 7, 19):
        lons = g.lon.values[: j + 1]
        m = WGS84.line_length(lons, np.full(lons.size, lat0))
        assert float(d[20, j]) == pytest.approx(m / 1000.0, rel=SPHERE_TOL)
        # and the great circle between the ends is never longer than the path
        _, _, gc = WGS84.inv(float(g.lon[0]), lat0, float(g.lon[j]), lat0)
        assert gc / 1000 <= float(d[20, j]) * (1 + SPHERE_TOL)


def test_diagonal_overestimate_bounded():
    # With moves whose unit vectors lie on the unit circle, the path length is the gauge of
    # their polygon: the worst ratio to the straight distance is 1/cos(half the largest angle
    # between neighbouring moves) [computed, plane geometry]: 8 neighbours (45 deg apart)
    # 1/cos(22.5 deg) = 1.0824; 16 neighbours (0, 26.57, 45 deg) 1/cos(13.28 deg) = 1.0275.
    # Checked on near-square equatorial cells, with the sphere/ellipsoid tolerance on top.
    g = _grid(lon_min=0, lon_max=10, lat_min=-5, lat_max=5, res=0.25)
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[0, 0] = True
    d8 = distance_from(_map(g, src)).values
    d16 = distance_from(_map(g, src), neighbours=16).values
    lon2, lat2 = np.meshgrid(g.lon.values, g.lat.values)
    _, _, m = WGS84.inv(np.full(lon2.shape, float(g.lon[0])), np.full(lat2.shape, float(g.lat[0])),
                        lon2, lat2)
    gc = m / 1000.0
    mask = gc > 0
    r8 = d8[mask] / gc[mask]
    r16 = d16[mask] / gc[mask]
    assert r8.max() < 1.0824 + SPHERE_TOL
    assert r16.max() < 1.0276 + SPHERE_TOL
    assert r16.max() < r8.max()


def test_graph_wraps_on_global_grid():
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-1, lat_max=1, resolution=1.0)
    rows, cols, km = grid_graph(g.lat.values, g.lon.values)
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[0, 0] = True  # at -179.5
    d = distance_from(_map(g, src))
    # one step west across the dateline, not 359 steps east
    assert float(d[0, -1]) == pytest.approx(float(d[0, 1]), rel=1e-9)


def test_barrier_forces_detour():
    g = _grid(lon_min=0, lon_max=5, lat_min=0, lat_max=5, res=1.0)
    ny, nx = g.sizes["lat"], g.sizes["lon"]
    pas = np.ones((ny, nx), bool)
    pas[:4, 2] = False  # a wall with a gap at the top row
    src = np.zeros((ny, nx), bool)
    src[0, 0] = True
    free = distance_from(_map(g, src)).values
    walled = distance_from(_map(g, src), passable=_map(g, pas)).values
    assert walled[0, 4] > free[0, 4] * 1.5
    assert np.isinf(walled[0, 2])  # a wall cell is never entered
    limited = distance_from(_map(g, src), limit_km=150.0).values
    assert np.isinf(limited[0, 4]) and np.isfinite(limited[0, 1])


def _chain(g, suit_list, years):
    arr = np.stack(suit_list).astype(np.int8)
    return xr.DataArray(arr, dims=("slice", "lat", "lon"),
                        coords={"slice": [f"s{i}" for i in range(len(years))],
                                "year": ("slice", np.asarray(years, float)),
                                "lat": g.lat, "lon": g.lon})


def test_three_assumptions_on_a_moving_band():
    # a suitable band moving east by 2 cells (~222 km at the equator) per step
    g = _grid(lon_min=0, lon_max=10, lat_min=-0.5, lat_max=0.5, res=1.0)
    s = []
    for t in range(3):
        row = np.zeros((1, 10), np.int8)
        row[0, 2 * t: 2 * t + 3] = 1
        s.append(row)
    chain = _chain(g, s, [2000, 2050, 2100])
    start = chain.isel(slice=0) == 1
    none = reachable(chain, start, assumption="none")
    lim = reachable(chain, start, rate="3 km/yr")  # 150 km per 50-yr step: one cell
    unl = reachable(chain, start, assumption="unlimited")
    np.testing.assert_array_equal(none.values[:, 0], [[1, 1, 1, 0, 0, 0, 0, 0, 0, 0],
                                                      [0, 0, 1, 0, 0, 0, 0, 0, 0, 0],
                                                      [0, 0, 0, 0, 0, 0, 0, 0, 0, 0]])
    np.testing.assert_array_equal(lim.values[:, 0], [[1, 1, 1, 0, 0, 0, 0, 0, 0, 0],
                                                     [0, 0, 1, 1, 0, 0, 0, 0, 0, 0],
                                                     [0, 0, 0, 0, 1, 0, 0, 0, 0, 0]])
    np.testing.assert_array_equal(unl.values, chain.values)
    # each level of freedom reaches at least as much
    assert bool((none.values <= lim.values).all() and (lim.values <= unl.values).all())
    assert lim.attrs["flag_meanings"] == "not_land not_reached reached"
    np.testing.assert_allclose(lim.attrs["step_distance_km"], [0, 150, 150])


def test_sea_blocks_limited_spread_unless_any():
    g = _grid(lon_min=0, lon_max=6, lat_min=-0.5, lat_max=0.5, res=1.0)
    a = np.array([[1, 0, -1, 0, 0, 0]], np.int8)
    b = np.array([[1, 0, -1, 1, 0, 0]], np.int8)
    chain = _chain(g, [a, b], [0, 100])
    start = chain.isel(slice=0) == 1
    land = reachable(chain, start, distance_km=500.0)
    anyc = reachable(chain, start, distance_km=500.0, through="any")
    assert land.values[1, 0, 3] == 0 and anyc.values[1, 0, 3] == 1
    assert land.values[1, 0, 2] == -1


def test_reachable_errors():
    g = _grid(lon_min=0, lon_max=3, lat_min=0, lat_max=1, res=1.0)
    chain = _chain(g, [np.ones((1, 3)), np.ones((1, 3))], [0, 10])
    start = chain.isel(slice=0) == 1
    with pytest.raises(DataError, match="exactly one of `distance_km` or `rate`"):
        reachable(chain, start)
    with pytest.raises(DataError, match="`assumption`"):
        reachable(chain, start, assumption="some")
    with pytest.raises(ConfigError, match="no unit"):
        reachable(chain, start, rate="5")
    with pytest.raises(DataError, match="3 values for 2 slices"):
        reachable(chain, start, distance_km=[0, 1, 2])
    ds = movement(chain, start)
    assert set(ds.data_vars) == {"reachable_none", "reachable_unlimited"}


@pytest.mark.parametrize("neighbours", [8, 16])
def test_tiny_global_grid_has_single_edges(neighbours):
    # 4 columns of 90 degrees: offsets +-2 wrap onto the same cell pair; edges must be unique
    # and keep their own length (the sparse format would otherwise add duplicates)
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-45, lat_max=45, resolution=90.0)
    rows, cols, km = grid_graph(g.lat.values, g.lon.values, neighbours=neighbours)
    pairs = set(zip(rows.tolist(), cols.tolist()))
    assert len(pairs) == rows.size and all(a < b for a, b in pairs)
    src = np.zeros((g.sizes["lat"], g.sizes["lon"]), bool)
    src[0, 0] = True
    d = distance_from(_map(g, src), neighbours=neighbours).values
    # one column over: the haversine distance between the two centres
    from timeslice.grid import haversine_km

    expect = haversine_km(g.lon.values[0], g.lat.values[0], g.lon.values[1], g.lat.values[0])
    assert d[0, 1] == pytest.approx(float(expect), rel=1e-12)
    assert d[0, 3] == pytest.approx(float(expect), rel=1e-12)  # across the dateline
