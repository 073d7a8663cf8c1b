"""Refugium patches: connectivity, areas, centroids and the per-patch table against outside
references (scipy.ndimage.label, a breadth-first search on a cylinder, the spherical-zone area
formula)."""

from __future__ import annotations

from collections import deque

import numpy as np
import pytest
import xarray as xr
from scipy import ndimage

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.series.patches import (
    PATCH_COLUMNS,
    label_patches,
    patch_table,
    refugium_patches,
)

#: Authalic radius of WGS 84 (Snyder 1987, USGS Prof. Paper 1395, p. 16), km.
R_KM = 6371.0072


def _mask(values: np.ndarray, **grid) -> xr.DataArray:
    g = make_grid(**grid)
    return xr.DataArray(values.astype(bool), dims=("lat", "lon"),
                        coords={"lat": g.lat, "lon": g.lon}, name="refugium_window")


def _zone_area(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """Cell areas from the area of a spherical zone, A = R² Δλ (sin φ2 − sin φ1) (Snyder 1987,
    eq. for the authalic sphere), written out here independently of timeslice.grid."""
    dlat = lat[1] - lat[0]
    dlon = lon[1] - lon[0]
    s = np.sin(np.deg2rad(lat + dlat / 2)) - np.sin(np.deg2rad(lat - dlat / 2))
    return R_KM**2 * np.deg2rad(dlon) * np.outer(s, np.ones(lon.size))


def _same_partition(a: np.ndarray, b: np.ndarray) -> bool:
    """Two labelings describe the same patches (labels may differ)."""
    if not np.array_equal(a > 0, b > 0):
        return False
    pairs = set(zip(a[a > 0].tolist(), b[b > 0].tolist()))
    return len(pairs) == len({p for p, _ in pairs}) == len({q for _, q in pairs})


def _bfs_cylinder(mask: np.ndarray) -> np.ndarray:
    """Reference: 8-connected components by breadth-first search, the column index taken
    modulo the number of columns (the grid wraps east-west); textbook flood fill."""
    nr, nc = mask.shape
    out = np.zeros(mask.shape, dtype=int)
    k = 0
    for r0 in range(nr):
        for c0 in range(nc):
            if not mask[r0, c0] or out[r0, c0]:
                continue
            k += 1
            out[r0, c0] = k
            q = deque([(r0, c0)])
            while q:
                r, c = q.popleft()
                for dr in (-1, 0, 1):
                    for dc in (-1, 0, 1):
                        rr, cc = r + dr, (c + dc) % nc
                        if 0 <= rr < nr and mask[rr, cc] and not out[rr, cc]:
                            out[rr, cc] = k
                            q.append((rr, cc))
    return out


def test_patches_match_scipy_label_with_8_connectivity(rng):
    m = rng.random((20, 30)) < 0.35
    da = _mask(m, lon_min=-40.0, lon_max=-25.0, lat_min=40.0, lat_max=50.0, resolution=0.5)
    got = label_patches(da).values
    # reference: scipy.ndimage.label with the full 3x3 structure (8-connectivity)
    ref, n = ndimage.label(m, structure=np.ones((3, 3)))
    assert got.max() == n
    assert _same_partition(got, ref)


def test_diagonal_cells_are_one_patch():
    m = np.zeros((6, 6), dtype=bool)
    m[1, 1] = m[2, 2] = m[3, 3] = True  # corner to corner only
    da = _mask(m, lon_min=0.0, lon_max=6.0, lat_min=0.0, lat_max=6.0, resolution=1.0)
    assert label_patches(da).values.max() == 1


def test_global_grid_joins_patches_across_the_seam(rng):
    m = rng.random((18, 36)) < 0.3
    m[5:8, 0] = True
    m[6:9, -1] = True  # touches column 0 across the seam
    da = _mask(m, lon_min=-180.0, lon_max=180.0, lat_min=-90.0, lat_max=90.0, resolution=10.0)
    got = label_patches(da)
    assert "seam" in got.attrs["description"]
    assert _same_partition(got.values, _bfs_cylinder(m))
    assert got.values[6, 0] == got.values[6, -1]
    # a regional grid does not wrap: the same mask on a grid that is not global
    reg = _mask(m, lon_min=0.0, lon_max=36.0, lat_min=0.0, lat_max=18.0, resolution=1.0)
    ref, _ = ndimage.label(m, structure=np.ones((3, 3)))
    assert _same_partition(label_patches(reg).values, ref)


def test_patches_numbered_largest_first_and_flagged(rng):
    m = np.zeros((10, 12), dtype=bool)
    m[1:3, 1:3] = True  # 4 cells
    m[6:9, 6:11] = True  # 15 cells
    m[1, 9] = True  # 1 cell
    da = _mask(m, lon_min=0.0, lon_max=12.0, lat_min=0.0, lat_max=10.0, resolution=1.0)
    lab = label_patches(da)
    assert lab.values[7, 7] == 1 and lab.values[1, 1] == 2 and lab.values[1, 9] == 3
    assert list(lab.attrs["flag_values"]) == [0, 1, 2, 3]
    assert lab.attrs["flag_meanings"] == "outside R1 R2 R3"
    assert lab.attrs["units"] == "1" and lab.attrs["long_name"]


def test_patch_areas_equal_the_sum_of_their_cell_areas(rng):
    m = rng.random((24, 30)) < 0.3
    da = _mask(m, lon_min=-40.0, lon_max=-25.0, lat_min=40.0, lat_max=52.0, resolution=0.5)
    lab = label_patches(da)
    table = patch_table(lab)
    assert list(table.columns) == list(PATCH_COLUMNS)
    area = _zone_area(da["lat"].values, da["lon"].values)
    for r in table.itertuples(index=False):
        cells = lab.values == r.patch
        np.testing.assert_allclose(r.area_km2, area[cells].sum(), rtol=1e-12)
        assert r.n_cells == cells.sum()
    assert (np.diff(table["area_km2"]) <= 0).all()
    # areas are additive: the patches together are the whole mask
    np.testing.assert_allclose(table["area_km2"].sum(), area[m].sum(), rtol=1e-12)


def test_centroid_on_the_sphere_across_the_seam():
    m = np.zeros((18, 36), dtype=bool)
    m[12:14, 0:2] = True
    m[12:14, -2:] = True  # a square centred on 180°, 35° N
    da = _mask(m, lon_min=-180.0, lon_max=180.0, lat_min=-90.0, lat_max=90.0, resolution=10.0)
    t = patch_table(label_patches(da))
    assert len(t) == 1
    # symmetric about the 180° meridian: the centroid lies on it (a plain mean of the
    # longitudes would give 0°, the wrong side of the globe)
    assert abs(abs(t["centroid_lon"].iloc[0]) - 180.0) < 1e-9
    # rows centred on 35° N and 45° N with equal-width bands: the area-weighted mean of unit
    # vectors lies between them
    assert 35.0 < t["centroid_lat"].iloc[0] < 45.0


def test_table_elevation_analog_and_chains():
    m = np.zeros((6, 8), dtype=bool)
    m[1:3, 1:3] = True  # patch of 4 cells
    m[4, 6] = True  # patch of 1 cell
    da = _mask(m, lon_min=0.0, lon_max=8.0, lat_min=0.0, lat_max=6.0, resolution=1.0)
    elev = xr.full_like(da, 0.0, dtype=float) + np.arange(48.0).reshape(6, 8)
    analog = da.copy(data=m.copy())
    analog.values[1, 1] = False  # one cell of the big patch in novel climate
    keep = xr.DataArray(np.stack([m, np.zeros_like(m), m & (np.arange(8) < 2)]),
                        dims=("chain", "lat", "lon"),
                        coords={"chain": ["a", "b", "c"], "lat": da.lat, "lon": da.lon})
    t = patch_table(label_patches(da), elevation=elev, analog=analog, keep=keep)
    big = t.iloc[0]
    assert big["elevation_min_m"] == 9.0 and big["elevation_max_m"] == 18.0
    area = _zone_area(da["lat"].values, da["lon"].values)
    cells = np.zeros_like(m)
    cells[1:3, 1:3] = True
    np.testing.assert_allclose(big["analog_share"], 1 - area[1, 1] / area[cells].sum())
    assert big["chains"] == 3 and big["chains_keeping_whole"] == 1
    assert big["chains_keeping_part"] == 2 and big["kept_whole_by"] == "a"
    kept_c = area[1:3, 1].sum() / area[cells].sum()
    np.testing.assert_allclose(big["kept_share_mean"], (1.0 + 0.0 + kept_c) / 3)
    assert t.iloc[1]["n_cells"] == 1 and t.iloc[1]["analog_share"] == 1.0


def test_refugium_patches_counts_chains_beyond_the_window():
    m = np.zeros((6, 8), dtype=bool)
    m[1:3, 1:3] = True
    da = _mask(m, lon_min=0.0, lon_max=8.0, lat_min=0.0, lat_max=6.0, resolution=1.0)
    da.attrs["slices"] = "base past1"
    keep = xr.DataArray(np.stack([m, m, np.zeros_like(m)]), dims=("chain", "lat", "lon"),
                        coords={"chain": ["x past", "x future", "y future"],
                                "chain_slices": ("chain", ["past1 base", "base f1", "base f2"]),
                                "lat": da.lat, "lon": da.lon})
    series = xr.Dataset({"refugium_window": da, "refugium_chain": keep})
    _, t = refugium_patches(series)
    # the past chain keeps the window refugium by construction: only the two others count
    assert t["chains"].iloc[0] == 2 and t["chains_keeping_whole"].iloc[0] == 1
    assert t["kept_whole_by"].iloc[0] == "x future"


def test_bad_inputs_name_the_problem():
    da = _mask(np.ones((3, 4)), lon_min=0.0, lon_max=4.0, lat_min=0.0, lat_max=3.0,
               resolution=1.0)
    with pytest.raises(DataError, match="2-D"):
        label_patches(da.expand_dims(slice=2))
    with pytest.raises(DataError, match="no refugium layer"):
        refugium_patches(xr.Dataset({"x": da}))
