"""Property tests for the series stage (hypothesis)."""

from __future__ import annotations

import numpy as np
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from timeslice.grid import cell_area, make_grid
from timeslice.series import change_map, change_table, stability, refugium, suitable_area

_SETTINGS = settings(max_examples=40, deadline=None)


@st.composite
def stacks(draw):
    """Random stacked series: 1-5 slices on a random small grid, values in {-1, 0, 1}."""
    ns = draw(st.integers(1, 5))
    ny = draw(st.integers(1, 6))
    nx = draw(st.integers(1, 6))
    res = draw(st.sampled_from([0.1, 0.5, 1.0, 2.5]))
    lat0 = draw(st.floats(-89.0, 89.0 - ny * res, allow_nan=False))
    lon0 = draw(st.floats(-180.0, 180.0 - nx * res, allow_nan=False))
    s = draw(arrays(np.int8, (ns, ny, nx), elements=st.sampled_from([-1, 0, 1])))
    mess = draw(arrays(np.float32, (ns, ny, nx),
                       elements=st.floats(-50, 50, width=32, allow_nan=False)))
    g = make_grid(lon_min=lon0, lon_max=lon0 + nx * res, lat_min=lat0,
                  lat_max=lat0 + ny * res, resolution=res)
    dims = ("slice", "lat", "lon")
    return xr.Dataset(
        {"suitable": (dims, s), "mess": (dims, mess)},
        coords={"slice": [f"s{i}" for i in range(ns)], "lat": g.lat, "lon": g.lon},
    )


@_SETTINGS
@given(stacks(), st.data())
def test_gain_loss_identities(ds, data):
    # area(t) - area(ref) = gain - loss; stable + loss = area(ref) (METHODS.md, series
    # summaries; follows from the partition of cells, so exact up to float rounding)
    ref = data.draw(st.sampled_from(list(ds["slice"].values)))
    tab = change_table(ds, reference=ref)
    ref_area = tab.loc[tab["slice"] == ref, "suitable_area_km2"].item()
    scale = max(ref_area, tab["suitable_area_km2"].max(), 1.0)
    np.testing.assert_allclose(tab["suitable_area_km2"] - ref_area,
                               tab["gain_km2"] - tab["loss_km2"], rtol=0, atol=1e-9 * scale)
    np.testing.assert_allclose(tab["stable_km2"] + tab["loss_km2"], ref_area,
                               rtol=0, atol=1e-9 * scale)
    assert (tab["novel_area_km2"] <= tab["suitable_area_km2"] + 1e-9 * scale).all()


@_SETTINGS
@given(stacks(), st.data())
def test_change_partitions_valid_cells(ds, data):
    # gain + loss + stable + absent areas = area of cells land in either slice
    i = data.draw(st.integers(0, ds.sizes["slice"] - 1))
    ref = ds["suitable"].isel(slice=i)
    code = change_map(ds["suitable"], ref)
    area = cell_area(ds)
    valid = (ds["suitable"] >= 0) | (ref >= 0)
    assert bool(((code >= 0) == valid).all())
    parts = sum((area * (code == c)).sum(("lat", "lon")) for c in (0, 1, 2, 3))
    np.testing.assert_allclose(parts.values, (area * valid).sum(("lat", "lon")).values,
                               rtol=1e-12)
    # each code has its defining meaning
    cur_s, ref_s = ds["suitable"] == 1, ref == 1
    assert bool(((code == 3) == (cur_s & ref_s)).all())
    assert bool(((code == 1) == (cur_s & ~ref_s)).all())
    assert bool(((code == 2) == (~cur_s & ref_s)).all())


@_SETTINGS
@given(stacks())
def test_stability_bounds_and_refugium(ds):
    stab = stability(ds["suitable"])
    v = stab.values[np.isfinite(stab.values)]
    assert ((v >= 0) & (v <= 1)).all()
    never_land = ~(ds["suitable"] >= 0).any("slice")
    assert bool((np.isnan(stab) == never_land).all())
    ref = refugium(ds["suitable"])
    assert bool((ref <= (ds["suitable"] == 1)).all())


@_SETTINGS
@given(stacks(), st.data())
def test_area_additive(ds, data):
    # area of the union of two disjoint sets of cells = sum of their areas
    s = ds["suitable"].isel(slice=0)
    split = data.draw(arrays(bool, s.shape))
    # masks built on `s` keep its coordinates (with their attributes: a one-row grid knows its
    # cell size from them)
    a = ((s == 1) & split).astype("int8")
    b = ((s == 1) & ~split).astype("int8")
    total = float(suitable_area(s))
    np.testing.assert_allclose(float(suitable_area(a)) + float(suitable_area(b)), total,
                               rtol=1e-12, atol=1e-9)


@_SETTINGS
@given(stacks(), st.floats(0.0, 3000.0), st.sampled_from(["land", "suitable", "any"]))
def test_movement_nested(ds, d_km, through):
    # none (d = 0) <= limited <= unlimited, and everything reached is suitable
    from timeslice.series.dispersal import reachable

    s = ds["suitable"]
    start = s.isel(slice=0) == 1
    none = reachable(s, start, assumption="none").values
    lim = reachable(s, start, distance_km=d_km, through=through).values
    unl = reachable(s, start, assumption="unlimited").values
    assert (none <= lim).all() and (lim <= unl).all()
    assert ((lim == 1) <= (s.values == 1)).all()
    assert ((lim == -1) == (s.values == -1)).all()


@_SETTINGS
@given(stacks(), st.floats(0.0, 5000.0))
def test_dynamic_stability_between_static_and_best(ds, d_km):
    # static <= dynamic <= sum_t max_j ln max(S_t, eps)  (more freedom never lowers the score)
    from timeslice.series.stability import dynamic_stability, static_stability

    suit = xr.where(ds["suitable"] >= 0, (ds["mess"] + 50) / 100, np.nan)
    dyn = dynamic_stability(suit, distance_km=d_km).values
    sta = static_stability(suit).values
    ok = np.isfinite(sta)
    assert (dyn[ok] >= sta[ok] - 1e-4).all()
    logs = np.log(np.maximum(suit.fillna(0).values, 1e-6))
    best = logs.reshape(logs.shape[0], -1).max(axis=1).sum()
    assert (dyn[ok] <= best + 1e-4).all()


@_SETTINGS
@given(st.integers(2, 3), st.integers(2, 3), st.integers(2, 3), st.integers(0, 2**32 - 1))
def test_partition_shares_sum_to_one(na, nb, nc, seed):
    from timeslice.series.ensemble import partition

    rng = np.random.default_rng(seed)
    y = rng.random((na, nb, nc, 2, 2))
    parts = partition(xr.DataArray(y, dims=("algorithm", "model", "scenario", "lat", "lon")))
    share = parts["share"].values
    assert np.all(share >= -1e-6)
    np.testing.assert_allclose(share.sum(axis=0), 1.0, rtol=1e-5)


@_SETTINGS
@given(stacks(), st.data(), st.sampled_from([8, 16]))
def test_path_distance_symmetric_and_triangle(ds, data, neighbours):
    # shortest paths on an undirected graph: d(a, b) = d(b, a), d(a, c) <= d(a, b) + d(b, c),
    # and never shorter than the great-circle distance between the centres
    from timeslice.grid import haversine_km
    from timeslice.series.dispersal import distance_from

    s = ds["suitable"].isel(slice=0)
    pas = s >= 0
    land = [tuple(map(int, ij)) for ij in np.argwhere(pas.values)]
    if not land:
        return
    # sources are always passable, so symmetry holds between passable cells
    cells = [data.draw(st.sampled_from(land)) for _ in range(3)]

    def dist_from(c):
        src = xr.zeros_like(s, dtype=bool)
        src[c] = True
        return distance_from(src, passable=pas, neighbours=neighbours).values

    d = [dist_from(c) for c in cells]
    a, b, c = cells
    # equal up to the order in which edge lengths are added
    assert np.isinf(d[0][b]) == np.isinf(d[1][a])
    if np.isfinite(d[0][b]):
        assert abs(d[0][b] - d[1][a]) <= 1e-9 * max(d[0][b], 1.0)
    if np.isfinite(d[0][b]) and np.isfinite(d[1][c]):
        assert d[0][c] <= d[0][b] + d[1][c] + 1e-6
    if np.isfinite(d[0][b]):
        gc = haversine_km(s["lon"].values[a[1]], s["lat"].values[a[0]],
                          s["lon"].values[b[1]], s["lat"].values[b[0]])
        assert d[0][b] >= float(gc) * (1 - 1e-9) - 1e-9


@_SETTINGS
@given(stacks())
def test_limited_without_bounds_is_unlimited(ds):
    # through any cell with a distance larger than the grid, limited movement reaches every
    # suitable cell once something is occupied
    from timeslice.series.dispersal import reachable

    s = ds["suitable"]
    start = s.isel(slice=0) == 1
    lim = reachable(s, start, distance_km=1e5, through="any").values
    unl = reachable(s, start, assumption="unlimited").values
    for t in range(1, s.sizes["slice"]):
        if (lim[t - 1] == 1).any():
            np.testing.assert_array_equal(lim[t], unl[t])
