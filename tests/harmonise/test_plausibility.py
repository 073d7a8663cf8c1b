"""Every plausibility check fires on the unit and scale mistakes it exists for, and names the
file, the variable, the offending value and the likely cause.

Reference limits: lowest measured air temperature -89.2 degC (Vostok, 1983), wettest calendar
month 9,300 mm (Cherrapunji, 1861): WMO Weather and Climate Extremes Archive, from memory. The
tolerance of 0.5 degC for tasmin > tasmax is common practice.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.harmonise.plausibility import check_change, check_fields
from timeslice.readers import open_climate


def _write(path, *, tasmin, tasmax, pr, t_units="degC", pr_units="mm month-1", calendar="noleap"):
    lat = np.array([40.5, 41.5, 42.5])
    lon = np.array([10.5, 11.5])
    shape = (12, 3, 2)
    days = np.cumsum([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30])[:12] + 15.0
    ds = xr.Dataset(
        {
            "tasmin": (("time", "lat", "lon"), np.broadcast_to(tasmin, shape).astype("f4"),
                       {"units": t_units}),
            "tasmax": (("time", "lat", "lon"), np.broadcast_to(tasmax, shape).astype("f4"),
                       {"units": t_units}),
            "pr": (("time", "lat", "lon"), np.broadcast_to(pr, shape).astype("f4"),
                   {"units": pr_units}),
        },
        coords={"time": ("time", days, {"units": "days since 2001-01-01", "calendar": calendar}),
                "lat": ("lat", lat, {"units": "degrees_north"}),
                "lon": ("lon", lon, {"units": "degrees_east"})},
    )
    ds.to_netcdf(path)
    return path


def test_plausible_field_passes(tmp_path):
    p = _write(tmp_path / "ok.nc", tasmin=5.0, tasmax=15.0, pr=80.0)
    ds = open_climate(p)
    assert float(ds["tasmin"].min()) == pytest.approx(5.0)


def test_kelvin_labelled_celsius(tmp_path):
    p = _write(tmp_path / "k_as_c.nc", tasmin=278.0, tasmax=288.0, pr=80.0)
    with pytest.raises(DataError, match=r"k_as_c\.nc: 'tasmin'.*278 degC.*look like Kelvin.*units = \"K\""):
        open_climate(p)


def test_fahrenheit_labelled_celsius(tmp_path):
    p = _write(tmp_path / "f_as_c.nc", tasmin=40.0, tasmax=95.0, pr=80.0)
    with pytest.raises(DataError, match=r"f_as_c\.nc: 'tasmax'.*95 degC.*Fahrenheit"):
        open_climate(p)


def test_integer_coded_without_scale(tmp_path):
    p = _write(tmp_path / "x10.nc", tasmin=-150.0, tasmax=250.0, pr=80.0)
    with pytest.raises(DataError, match=r"x10\.nc: 'tasmin'.*-150 degC.*ten times too large.*scale = 0\.1"):
        open_climate(p)


def test_scale_meant_for_another_file(tmp_path):
    # a model file in K read with a scale of 0.1 meant for an integer-coded baseline:
    # 288 K x 0.1 = 28.8 K = -244 degC
    p = _write(tmp_path / "model.nc", tasmin=278.0, tasmax=288.0, pr=80.0, t_units="K")
    with pytest.raises(DataError, match=r"model\.nc: 'tasmin'.*-245.*declared scale 0\.1 was applied"):
        open_climate(p, scale={"tasmin": 0.1, "tasmax": 0.1})


def test_missing_value_code(tmp_path):
    tmin = np.full((12, 3, 2), 5.0)
    tmin[:, 0, 0] = -9999.0
    p = _write(tmp_path / "fill.nc", tasmin=tmin, tasmax=15.0, pr=80.0)
    with pytest.raises(DataError, match=r"fill\.nc: 'tasmin'.*-9999.*at lat 40\.50, lon 10\.50.*missing-value code"):
        open_climate(p)


def test_monthly_totals_labelled_as_flux(tmp_path):
    # 80 mm per month labelled kg m-2 s-1: x 2.6 million seconds per month
    p = _write(tmp_path / "pr_flux.nc", tasmin=5.0, tasmax=15.0, pr=80.0, pr_units="kg m-2 s-1")
    with pytest.raises(DataError, match=r"pr_flux\.nc: 'pr'.*above the plausible 5000 mm.*rate per second.*mm month-1"):
        open_climate(p)


def test_flux_labelled_as_monthly_totals(tmp_path):
    p = _write(tmp_path / "pr_tiny.nc", tasmin=5.0, tasmax=15.0, pr=3e-5)
    with pytest.raises(DataError, match=r"pr_tiny\.nc: 'pr'.*only 3e-05 mm.*flux"):
        open_climate(p)


def test_negative_precipitation(tmp_path):
    p = _write(tmp_path / "pr_neg.nc", tasmin=5.0, tasmax=15.0, pr=-3.0)
    with pytest.raises(DataError, match=r"negative beyond rounding"):
        open_climate(p)


def test_tasmin_above_tasmax(tmp_path):
    p = _write(tmp_path / "swapped.nc", tasmin=15.0, tasmax=5.0, pr=80.0)
    with pytest.raises(DataError, match=r"swapped\.nc: 'tasmin'.*exceeds tasmax by up to 10 degC in 72 cell-months.*swapped"):
        open_climate(p)


def test_declared_units_apply_to_netcdf(tmp_path):
    # a file without units attributes, with the units declared for this input
    p = _write(tmp_path / "nounits.nc", tasmin=278.0, tasmax=288.0, pr=80.0)
    ds = xr.open_dataset(p)
    for v in ("tasmin", "tasmax", "pr"):
        del ds[v].attrs["units"]
    ds.to_netcdf(tmp_path / "nounits2.nc")
    out = open_climate(tmp_path / "nounits2.nc",
                       units={"tasmin": "K", "tasmax": "K", "pr": "mm month-1"})
    # 278 K = 4.85 degC (offset 273.15, BIPM SI brochure 9th ed.)
    assert float(out["tasmin"].mean()) == pytest.approx(4.85, abs=1e-4)


def test_elevation_in_wrong_units():
    ds = xr.Dataset({"elevation": (("lat", "lon"), np.array([[0.0, 30000.0]]),
                                   {"source_file": "dem_ft.tif"})},
                    coords={"lat": [1.0], "lon": [1.0, 2.0]})
    with pytest.raises(DataError, match=r"dem_ft\.tif: 'elevation'.*30000 m.*feet"):
        check_fields(ds, source="x")


def _clim(t, pr):
    return xr.Dataset(
        {"tas": (("month", "lat", "lon"), np.full((12, 2, 2), t)),
         "pr": (("month", "lat", "lon"), np.full((12, 2, 2), pr))},
        coords={"month": np.arange(1, 13), "lat": [0.0, 1.0], "lon": [0.0, 1.0]},
    )


def test_change_factor_beyond_any_model():
    base = _clim(-30.0, 50.0)
    with pytest.raises(DataError, match=r"slice\.nc: 'tas' differs from the model baseline base\.nc by \+55 K"):
        check_change(_clim(25.0, 50.0), base, slice_source="slice.nc", baseline_source="base.nc")


def test_precipitation_ratio_of_a_unit_mismatch():
    # mm month-1 read as mm day-1 in the slice: about 30 times the baseline
    base = _clim(10.0, 50.0)
    with pytest.raises(DataError, match=r"slice\.nc: annual domain-mean precipitation is 30\.4 times"):
        check_change(_clim(10.0, 50.0 * 30.4), base, slice_source="slice.nc",
                     baseline_source="base.nc")


def test_plausible_change_passes():
    # a glacial cooling of 8 K and 30 % less precipitation is well inside the limits
    check_change(_clim(2.0, 35.0), _clim(10.0, 50.0), slice_source="s", baseline_source="b")
