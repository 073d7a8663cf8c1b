"""Change-factor downscaling: worked examples of the published formulas."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.harmonise.downscale import anomalies, delta


def _monthly(grid, tmin, tmax, pr):
    shape = (12, grid.sizes["lat"], grid.sizes["lon"])
    dims = ("month", "lat", "lon")
    return xr.Dataset(
        {
            "tasmin": (dims, np.broadcast_to(tmin, shape).astype(float), {"units": "degC"}),
            "tasmax": (dims, np.broadcast_to(tmax, shape).astype(float), {"units": "degC"}),
            "pr": (dims, np.broadcast_to(pr, shape).astype(float), {"units": "mm month-1"}),
        },
        coords={"month": np.arange(1, 13), "lat": grid.lat, "lon": grid.lon},
    )


@pytest.fixture
def grids():
    coarse = make_grid(lon_min=-45, lon_max=-15, lat_min=35, lat_max=60, resolution=1.0)
    fine = make_grid(lon_min=-40, lon_max=-20, lat_min=40, lat_max=55, resolution=0.25)
    return coarse, fine


def test_uniform_change_factors(grids):
    # Worked example of T = T_obs + (T_slice - T_base), P = P_obs * P_slice / P_base
    # (Hay, Wilby & Leavesley 2000; Ramirez-Villegas & Jarvis 2010):
    # base 10/18 degC, slice 7/14 degC -> anomalies -3 and -4 K; base P 80, slice 60 -> 0.75
    coarse, fine = grids
    base = _monthly(coarse, 10.0, 18.0, 80.0)
    sl = _monthly(coarse, 7.0, 14.0, 60.0)
    obs = _monthly(fine, 2.0, 9.0, 120.0)
    out = delta(sl, base, obs)
    np.testing.assert_allclose(out["tasmin"].values, -1.0)
    np.testing.assert_allclose(out["tasmax"].values, 5.0)
    np.testing.assert_allclose(out["pr"].values, 90.0)
    assert out.attrs["n_swapped"] == 0
    assert out["tasmin"].attrs["units"] == "degC"


def test_precipitation_floor_and_truncation(grids):
    # Navarro-Racines et al. 2020 safeguards: floor 0.1 mm/month on both, ratios above the
    # 98th percentile of each month's grid truncated to it.
    coarse, _ = grids
    base = _monthly(coarse, 0.0, 1.0, 50.0)
    sl = _monthly(coarse, 0.0, 1.0, 50.0)
    base["pr"][:, 0, 0] = 0.0        # dry baseline cell: 0 -> floor 0.1
    sl["pr"][:, 0, 0] = 0.05         # 0.05 -> 0.1, ratio 1 (not 0.5, not inf)
    base["pr"][:, 1, 1] = 0.0
    sl["pr"][:, 1, 1] = 10.0         # ratio 100 before truncation
    sl["pr"][:, 2, 2] = 100.0        # ratio 2
    an = anomalies(sl, base)
    assert float(an["pr"][0, 0, 0]) == pytest.approx(1.0)
    r = np.maximum(sl["pr"].values[0], 0.1) / np.maximum(base["pr"].values[0], 0.1)
    cap = np.quantile(r, 0.98)  # numpy linear quantile of the month's ratio grid
    assert float(an["pr"][0, 1, 1]) == pytest.approx(cap)
    assert float(an["pr"].max()) == pytest.approx(cap)


def test_min_le_max_rule(grids):
    # a slice whose diurnal range shrinks by more than the observed range: tasmin > tasmax
    coarse, fine = grids
    base = _monthly(coarse, 0.0, 10.0, 50.0)
    sl = _monthly(coarse, 4.0, 6.0, 50.0)      # +4 on tasmin, -4 on tasmax
    obs = _monthly(fine, 0.0, 6.0, 50.0)       # -> 4 and 2: inverted
    out = delta(sl, base, obs)
    np.testing.assert_allclose(out["tasmin"].values, 3.0)   # midpoint of 4 and 2
    np.testing.assert_allclose(out["tasmax"].values, 3.0)
    assert out.attrs["n_swapped"] == 12 * fine.sizes["lat"] * fine.sizes["lon"]
    assert any("midpoint" in x for x in json.loads(out.attrs["harmonise_log"]))


def test_anomaly_interpolated_bilinearly(grids):
    # an anomaly linear in longitude is reproduced exactly by bilinear interpolation
    coarse, fine = grids
    base = _monthly(coarse, 0.0, 10.0, 50.0)
    sl = base.copy(deep=True)
    sl["tasmin"] = sl["tasmin"] + 0.1 * sl["lon"]
    obs = _monthly(fine, 0.0, 10.0, 50.0)
    out = delta(sl, base, obs)
    expected = 0.1 * fine["lon"].values
    np.testing.assert_allclose(out["tasmin"].isel(month=0, lat=3).values, expected, atol=1e-9)


def test_grid_mismatch_and_missing(grids):
    coarse, fine = grids
    base = _monthly(coarse, 0.0, 10.0, 50.0)
    sl = _monthly(fine, 0.0, 10.0, 50.0)
    with pytest.raises(DataError, match="different grids"):
        delta(sl, base, sl)
    with pytest.raises(DataError, match="pr"):
        delta(base.drop_vars("pr"), base, sl)
