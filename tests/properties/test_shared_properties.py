"""Property tests of the shared building blocks the series stage relies on (hypothesis):
spherical cell areas, regridding a constant, and novelty of the reference itself."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from timeslice.grid import cell_area, make_grid

_SETTINGS = settings(max_examples=25, deadline=None)
SPHERE_KM2 = 510_065_625.0  # 4 pi R^2, R = 6371.0072 km [computed; METHODS.md geometry]


@_SETTINGS
@given(st.sampled_from([0.5, 1.0, 2.0, 2.5, 5.0, 10.0, 30.0]))
def test_global_cell_areas_sum_to_the_sphere(res):
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=res)
    assert float(cell_area(g).sum()) == pytest.approx(SPHERE_KM2, rel=1e-9)


@_SETTINGS
@given(st.floats(-80, 70), st.floats(-170, 150), st.integers(2, 8), st.integers(2, 8),
       st.sampled_from([0.25, 0.5, 1.0]))
def test_cell_areas_additive_under_refinement(lat0, lon0, ny, nx, res):
    # a cell's area equals the sum of its four half-size sub-cells (the zone formula is exact);
    # at least 2 cells per axis: see test_single_cell_grid_area below
    coarse = make_grid(lon_min=lon0, lon_max=lon0 + nx * res, lat_min=lat0,
                       lat_max=lat0 + ny * res, resolution=res)
    fine = make_grid(lon_min=lon0, lon_max=lon0 + nx * res, lat_min=lat0,
                     lat_max=lat0 + ny * res, resolution=res / 2)
    np.testing.assert_allclose(float(cell_area(fine).sum()), float(cell_area(coarse).sum()),
                               rtol=1e-9)


@_SETTINGS
@given(st.floats(-30.0, 40.0), st.sampled_from(["conservative", "bilinear"]))
def test_regridding_a_constant_returns_the_constant(value, method):
    from timeslice.harmonise.regrid import regrid

    src = make_grid(lon_min=-20, lon_max=10, lat_min=30, lat_max=60, resolution=1.0)
    dst = make_grid(lon_min=-15, lon_max=5, lat_min=35, lat_max=55, resolution=0.25)
    da = xr.DataArray(np.full((src.sizes["lat"], src.sizes["lon"]), value), name="tas",
                      dims=("lat", "lon"), coords={"lat": src.lat, "lon": src.lon},
                      attrs={"units": "degC"})
    out = regrid(da, dst, method=method)
    vals = np.asarray(out.values, dtype=float)
    assert np.isfinite(vals).all()
    np.testing.assert_allclose(vals, value, rtol=1e-6, atol=1e-9)


@_SETTINGS
@given(st.integers(0, 2**32 - 1), st.integers(5, 40))
def test_reference_points_are_never_novel(seed, n):
    # Elith et al. 2010 (Methods Ecol. Evol. 1:330): every reference point lies inside every
    # univariate range, so its MESS is >= 0; NT1 of a reference point is 0 (Mesgaran et al.
    # 2014, Divers. Distrib. 20:1147) and NT2 <= 1 by its definition as a ratio to the largest
    # reference distance.
    from timeslice.transfer.novelty import exdet, mess

    rng = np.random.default_rng(seed)
    ref = pd.DataFrame({"bio1": rng.normal(5, 3, n), "bio12": rng.gamma(5, 100, n)})
    tgt = xr.Dataset({k: ("point", ref[k].to_numpy()) for k in ref})
    m = mess(ref, tgt)["mess"].values
    e = exdet(ref, tgt)
    assert (m >= -1e-9).all()
    np.testing.assert_allclose(e["nt1"].values, 0.0, atol=1e-12)
    assert (e["nt2"].values <= 1 + 1e-9).all()


def test_single_cell_grid_area():
    # a 0.25 x 0.25 degree cell at the equator: R^2 * dlambda * sin(0.25 deg) = 772.77 km^2
    # [computed from the zone formula, Snyder 1987]
    g = make_grid(lon_min=0, lon_max=0.25, lat_min=0, lat_max=0.25, resolution=0.25)
    r = 6371.0072
    expect = r**2 * np.deg2rad(0.25) * np.sin(np.deg2rad(0.25))
    assert float(cell_area(g).sum()) == pytest.approx(expect, rel=1e-9)
