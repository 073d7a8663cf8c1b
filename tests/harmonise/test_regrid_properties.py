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
