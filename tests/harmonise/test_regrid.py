"""Conservative and bilinear regridding against independent computations."""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from scipy.interpolate import RegularGridInterpolator

from timeslice.grid import AUTHALIC_RADIUS_KM, cell_area, make_grid
from timeslice.harmonise.regrid import regrid


def _field(grid, values, name="f", **attrs):
    return xr.DataArray(values, dims=("lat", "lon"), coords={"lat": grid.lat, "lon": grid.lon},
                        name=name, attrs=attrs)


def _exact_overlap_mean(src, values, dst):
    """Independent exact computation: loop over every pair of cells, overlap area on the
    sphere R^2 * dlon * (sin phi2 - sin phi1) (spherical zone formula; Snyder 1987, USGS
    Prof. Paper 1395), NaN cells excluded."""
    def edges(c):
        c = np.asarray(c, float)
        h = (c[1] - c[0]) / 2
        return [(x - h, x + h) for x in c]
    out = np.full((dst.sizes["lat"], dst.sizes["lon"]), np.nan)
    se_lat, se_lon = edges(src.lat.values), edges(src.lon.values)
    for i, (a0, a1) in enumerate(edges(dst.lat.values)):
        for j, (b0, b1) in enumerate(edges(dst.lon.values)):
            num = den = 0.0
            for k, (c0, c1) in enumerate(se_lat):
                lo, hi = max(a0, c0), min(a1, c1)
                if hi <= lo:
                    continue
                zone = math.sin(math.radians(hi)) - math.sin(math.radians(lo))
                for m, (d0, d1) in enumerate(se_lon):
                    w = min(b1, d1) - max(b0, d0)
                    if w <= 0 or not np.isfinite(values[k, m]):
                        continue
                    area = AUTHALIC_RADIUS_KM**2 * math.radians(w) * zone
                    num += area * values[k, m]
                    den += area
            if den > 0:
                out[i, j] = num / den
    return out


@pytest.mark.parametrize("dst_res", [5.0, 0.5])
def test_conservative_matches_exact_overlap_and_conserves_integral(rng, dst_res):
    # regional 2-degree source; 5 degrees does not nest in 2, 0.5 refines
    src = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=2.0)
    dst = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=dst_res)
    vals = rng.normal(10, 3, (src.sizes["lat"], src.sizes["lon"]))
    f = _field(src, vals)
    out = regrid(f, dst, method="conservative")
    expected = _exact_overlap_mean(src, vals, dst) if dst_res == 5.0 else None
    if expected is not None:
        np.testing.assert_allclose(out.values, expected, rtol=1e-12)
    # integral conserved: sum(A_src f) == sum(A_dst g) (both grids cover the same area)
    i_src = float((cell_area(f) * f).sum())
    i_dst = float((cell_area(out) * out).sum())
    assert i_dst == pytest.approx(i_src, rel=1e-12)


def test_conservative_global_offset_grids_with_nan(rng):
    # global 2-degree source onto a global 5-degree grid shifted by 2.5 degrees in longitude
    src = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=2.0)
    dst = make_grid(lon_min=-177.5, lon_max=182.5, lat_min=-90, lat_max=90, resolution=5.0)
    vals = rng.normal(0, 1, (90, 180))
    f = _field(src, vals)
    out = regrid(f, dst, method="conservative")
    assert np.isfinite(out.values).all()
    i_src = float((cell_area(f) * f).sum())
    i_dst = float((cell_area(out) * out).sum())
    assert i_dst == pytest.approx(i_src, rel=1e-10, abs=1e-6 * float(cell_area(f).sum()))


def test_constant_stays_constant_with_holes(rng):
    src = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=1.0)
    dst = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=3.0)
    vals = np.full((40, 30), 7.25)
    vals[rng.random(vals.shape) < 0.2] = np.nan
    out = regrid(_field(src, vals), dst, method="conservative", min_valid_fraction=0.0)
    np.testing.assert_allclose(out.values[np.isfinite(out.values)], 7.25, rtol=1e-12)
    out_b = regrid(_field(src, vals), make_grid(lon_min=-40, lon_max=-10, lat_min=30,
                                                lat_max=70, resolution=0.25),
                   method="bilinear", min_valid_fraction=0.0)
    np.testing.assert_allclose(out_b.values[np.isfinite(out_b.values)], 7.25, rtol=1e-12)


def test_min_valid_fraction():
    src = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=2, resolution=1.0)
    dst = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=2, resolution=2.0)
    vals = np.ones((2, 4))
    vals[:, 0] = np.nan           # first target cell 50 % valid
    vals[0, 2:] = np.nan
    vals[1, 2] = np.nan           # second target cell 25 % valid
    out = regrid(_field(src, vals), dst, method="conservative", min_valid_fraction=0.5)
    assert out.values[0, 0] == pytest.approx(1.0)
    assert np.isnan(out.values[0, 1])


def test_bilinear_matches_scipy_inside_and_has_no_nan_edges(rng):
    src = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=5.0)
    dst = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=1.0)
    vals = rng.normal(0, 1, (36, 72))
    out = regrid(_field(src, vals), dst, method="bilinear")
    assert np.isfinite(out.values).all()  # polar rows and the dateline are filled
    # reference: scipy.interpolate.RegularGridInterpolator (linear) on the interior
    interp = RegularGridInterpolator((src.lat.values, src.lon.values), vals)
    la, lo = np.meshgrid(dst.lat.values, dst.lon.values, indexing="ij")
    inside = (la >= src.lat.values[0]) & (la <= src.lat.values[-1]) & \
        (lo >= src.lon.values[0]) & (lo <= src.lon.values[-1])
    ref = interp(np.stack([la[inside], lo[inside]], -1))
    np.testing.assert_allclose(out.values[inside], ref, rtol=1e-10, atol=1e-12)
    # across the dateline: halfway between the last and first column
    x = dst.lon.values
    j = np.argmin(np.abs(x - 179.5))
    expected = vals[:, -1] + (179.5 - 177.5) / 5 * (vals[:, 0] - vals[:, -1])
    ii = np.argmin(np.abs(dst.lat.values[:, None] - src.lat.values[None, :]), axis=0)
    np.testing.assert_allclose(out.values[ii, j], expected, rtol=1e-10)


def test_auto_method_and_attrs_kept():
    src = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=1.0)
    coarse = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=2.0)
    fine = make_grid(lon_min=-40, lon_max=-10, lat_min=30, lat_max=70, resolution=0.5)
    f = _field(src, np.ones((40, 30)), units="degC", long_name="test field")
    ds = f.to_dataset().assign_attrs(title="t")
    a = regrid(ds, coarse)
    b = regrid(ds, fine)
    assert a["f"].attrs["regrid_method"] == "conservative"
    assert b["f"].attrs["regrid_method"] == "bilinear"
    for r in (a, b):
        assert r.attrs["title"] == "t"
        assert r["f"].attrs["units"] == "degC"
        assert r["f"].attrs["long_name"] == "test field"


def test_monthly_dask_stays_lazy_and_matches(monthly_factory):
    ds = monthly_factory(resolution=1.0)
    dst = make_grid(lon_min=-10, lon_max=10, lat_min=40, lat_max=50, resolution=2.5)
    lazy = regrid(ds.chunk({"month": 3}), dst)
    assert lazy["tasmin"].chunks is not None
    xr.testing.assert_allclose(lazy.compute(), regrid(ds, dst))
    assert lazy["tasmin"].dims == ("month", "lat", "lon")


def test_gap_in_the_longitudes_is_refused():
    # 170.5..172.5 and 187.5..188.5: a gap of 15 degrees that crossing 180 does not explain
    # (a region across 180 without a gap is regridded: tests/harmonise/test_regrid_globe.py)
    from timeslice.errors import DataError

    lon = np.array([170.5, 171.5, 172.5, 187.5, 188.5])
    f = xr.DataArray(np.zeros((2, 5)), dims=("lat", "lon"),
                     coords={"lat": [0.5, 1.5], "lon": lon})
    dst = make_grid(lon_min=-180, lon_max=180, lat_min=0, lat_max=2, resolution=1.0)
    with pytest.raises(DataError, match="pacific.nc: longitudes jump .* gap in the grid"):
        regrid(f, dst, source="pacific.nc")
