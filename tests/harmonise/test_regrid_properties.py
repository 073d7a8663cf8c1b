"""Property tests of the regridder (hypothesis)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from timeslice.grid import cell_area, make_grid  # noqa: E402
from timeslice.harmonise.regrid import regrid  # noqa: E402

RES = st.sampled_from([0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0])


@settings(max_examples=25, deadline=None)
@given(src_res=RES, dst_res=RES, value=st.floats(-1e4, 1e4, allow_nan=False),
       method=st.sampled_from(["auto", "conservative", "bilinear"]))
def test_constant_field_stays_constant(src_res, dst_res, value, method):
    src = make_grid(lon_min=-30, lon_max=0, lat_min=30, lat_max=60, resolution=src_res)
    dst = make_grid(lon_min=-30, lon_max=0, lat_min=30, lat_max=60, resolution=dst_res)
    f = xr.DataArray(np.full((src.sizes["lat"], src.sizes["lon"]), value),
                     dims=("lat", "lon"), coords={"lat": src.lat, "lon": src.lon})
    out = regrid(f, dst, method=method)
    assert np.isfinite(out.values).all()
    np.testing.assert_allclose(out.values, value, rtol=1e-12, atol=1e-9)


@settings(max_examples=20, deadline=None)
@given(src_res=st.sampled_from([0.5, 1.0, 2.0, 3.0]),
       dst_res=st.sampled_from([1.0, 2.5, 5.0, 6.0]), seed=st.integers(0, 2**31 - 1))
def test_conservative_integral_on_the_globe(src_res, dst_res, seed):
    # global grids cover the same sphere, so the area integral must not change
    rng = np.random.default_rng(seed)
    src = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=src_res)
    dst = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=dst_res)
    f = xr.DataArray(rng.normal(size=(src.sizes["lat"], src.sizes["lon"])),
                     dims=("lat", "lon"), coords={"lat": src.lat, "lon": src.lon})
    out = regrid(f, dst, method="conservative")
    a = float((cell_area(f) * f).sum())
    b = float((cell_area(out) * out).sum())
    scale = float((cell_area(f) * abs(f)).sum())
    assert abs(a - b) <= 1e-10 * scale


@settings(max_examples=25, deadline=None)
@given(west=st.integers(-180, 179), width=st.integers(10, 60), split=st.booleans(),
       dst_res=RES, value=st.floats(-1e4, 1e4, allow_nan=False),
       method=st.sampled_from(["conservative", "bilinear"]))
def test_constant_stays_constant_anywhere_in_longitude(west, width, split, dst_res, value,
                                                        method):
    # any region (across 180 or not), the source on its continuous axis or split at 180 as a
    # reader returns it, the target on the continuous axis: the constant comes back everywhere
    src = make_grid(lon_min=west - 2, lon_max=west + width + 2, lat_min=50, lat_max=60,
                    resolution=1.0)
    lon = src.lon.values
    if split:
        lon = ((lon + 180.0) % 360.0) - 180.0
    f = xr.DataArray(np.full((src.sizes["lat"], lon.size), value), dims=("lat", "lon"),
                     coords={"lat": src.lat, "lon": lon}).sortby("lon")
    dst = make_grid(lon_min=west, lon_max=west + width, lat_min=51, lat_max=59,
                    resolution=dst_res)
    out = regrid(f, dst, method=method)
    assert np.isfinite(out.values).all()
    np.testing.assert_allclose(out.values, value, rtol=1e-12, atol=1e-9)


@settings(max_examples=15, deadline=None)
@given(seam=st.sampled_from([-180, -90, 0, 37, 180]), src_res=st.sampled_from([2.0, 2.5, 5.0]),
       dst_res=st.sampled_from([0.5, 1.0, 3.0]), method=st.sampled_from(["conservative",
                                                                          "bilinear"]))
def test_global_refinement_leaves_no_nan_at_the_poles(seam, src_res, dst_res, method):
    # a global source in 0..360 onto a global target starting at any seam: no NaN anywhere
    src = make_grid(lon_min=0, lon_max=360, lat_min=-90, lat_max=90, resolution=src_res)
    lat = np.linspace(-90 + src_res * 0.7, 90 - src_res * 0.7, src.sizes["lat"])  # Gaussian-like
    f = xr.DataArray(np.cos(np.deg2rad(lat))[:, None] * np.ones(src.sizes["lon"]),
                     dims=("lat", "lon"), coords={"lat": lat, "lon": src.lon})
    dst = make_grid(lon_min=seam, lon_max=seam + 360, lat_min=-90, lat_max=90, resolution=dst_res)
    out = regrid(f, dst, method=method)
    assert np.isfinite(out.values).all()
