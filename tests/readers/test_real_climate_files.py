"""Real climate-model files as they ship, read against an independent xarray computation.

The files (tests/data/*.nc, provenance and licence in the .source.md beside each) are small
subsets of CMIP3, CMIP5 and CMIP6 output. Each check recomputes the expected value from the raw
file with plain xarray (its own calendar-aware ``time.dt`` accessors), not with timeslice.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.readers import open_climate

DATA = Path(__file__).resolve().parents[1] / "data"
DAILY = DATA / "tas.sresb1.giss_model_e_r.run1.atm.da.nc"
CANESM = DATA / "tas_Amon_CanESM2_rcp85_r1i1p1_200701-200712.nc"
MPI = DATA / "tasmin_Amon_MPI-ESM1-2-HR_historical_r1i1p1f1_gn_201001-201412.nc"
CMCC = DATA / "pr_Amon_CMCC-CM2-SR5_dcppA-hindcast_s1960-r10i1p1f1_gn_196011-197012.nc"


def _raw(path):
    # float64 reference: a float32 mean of 620 daily values is itself off by ~4e-4 K
    ds = xr.open_dataset(path, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True))
    for v in list(ds.data_vars):
        if ds[v].dtype.kind == "f":
            ds[v] = ds[v].astype("f8")
    return ds


def _wrapped(da: xr.DataArray) -> xr.DataArray:
    """Independent lon wrap to [-180, 180) and ascending sort (the CF-common convention)."""
    da = da.assign_coords(lon=((da["lon"] + 180.0) % 360.0) - 180.0)
    return da.sortby("lon").sortby("lat")


def test_daily_cmip3_file_is_named_daily_and_averaged_by_calendar_month():
    ds = open_climate(DAILY, period="2046-2065")
    info = json.loads(ds.attrs["source_info"])
    log = json.loads(ds.attrs["harmonise_log"])
    # the file is daily: 20 years x 365 days (noleap) = 7,300 steps
    assert info["time"] == ["daily, 7300 steps"]
    assert any("daily, 7300 steps, noleap, averaged to 12 monthly means over 2046-2065" in l
               for l in log), log
    raw = _raw(DAILY)["tas"]
    # independent: mean of all daily values of each calendar month, K -> degC (offset 273.15,
    # BIPM SI brochure, 9th ed., 2.3.1)
    expected = _wrapped(raw.groupby("time.month").mean("time") - 273.15)
    np.testing.assert_allclose(ds["tas"].values, expected.transpose("month", "lat", "lon").values,
                               atol=1e-4)
    assert ds["lon"].values.tolist() == [-77.5, -72.5, -67.5, -62.5, -57.5]


def test_daily_file_of_one_year():
    ds = open_climate(DAILY, period="2065-2065")
    log = json.loads(ds.attrs["harmonise_log"])
    assert any("daily, 365 steps, noleap, averaged to 12 monthly means over 2065" in l for l in log)


def test_cmip5_global_gaussian_grid_orientation_and_units():
    ds = open_climate(CANESM)
    raw = _raw(CANESM)["tas"]
    assert ds.sizes == {"month": 12, "lat": 64, "lon": 128}
    # the 12 steps run Dec 2006 .. Nov 2007: month 1 is January 2007 (step 1 of the file)
    expected = _wrapped(raw.isel(time=1) - 273.15)
    np.testing.assert_allclose(ds["tas"].sel(month=1).values, expected.values, atol=1e-4)
    assert np.all(np.diff(ds["lat"].values) > 0) and np.all(np.diff(ds["lon"].values) > 0)
    assert ds["lon"].values.min() == pytest.approx(-180.0) and ds["lon"].values.max() < 180.0


def test_cmip6_tasmin_climatology_over_period():
    ds = open_climate(MPI, period="2010-2014")
    raw = _raw(MPI)["tasmin"]
    assert raw.time.dt.calendar == "proleptic_gregorian"
    expected = _wrapped(raw.groupby("time.month").mean("time") - 273.15)
    np.testing.assert_allclose(ds["tasmin"].values, expected.values, atol=1e-4)
    log = " ".join(json.loads(ds.attrs["harmonise_log"]))
    assert "monthly, 60 steps, proleptic_gregorian" in log


def test_cmip6_precipitation_flux_to_monthly_totals_in_365_day_calendar():
    ds = open_climate(CMCC, period="1961-1970")
    raw = _raw(CMCC)["pr"].sel(time=slice("1961-01-01", "1970-12-31"))
    # independent: flux (kg m-2 s-1) / 1000 kg m-3 x 1000 mm/m = mm s-1, times the seconds of
    # each month from xarray's own calendar-aware days_in_month (365_day: February 28)
    seconds = raw.time.dt.days_in_month * 86400.0
    assert int(raw.time.dt.days_in_month.sel(time="1964-02").item()) == 28
    expected = _wrapped((raw * seconds).groupby("time.month").mean("time"))
    np.testing.assert_allclose(ds["pr"].values, expected.values, rtol=1e-5, atol=1e-3)
    assert ds["pr"].attrs["units"] == "mm month-1"


def test_period_outside_file_is_refused():
    with pytest.raises(DataError, match=r"period 1950-1960 is outside the file's time range 1960-1970"):
        open_climate(CMCC, period="1950-1960")


def test_one_variable_in_files_of_several_years_is_joined(tmp_path):
    # archives ship one file per variable and per few years: split the CMIP6 file in two and
    # read both as one input
    raw = xr.open_dataset(CMCC, decode_times=False)
    a, b = raw.isel(time=slice(0, 62)), raw.isel(time=slice(62, None))
    a.to_netcdf(tmp_path / "pr_part1.nc")
    b.to_netcdf(tmp_path / "pr_part2.nc")
    joined = open_climate(str(tmp_path / "pr_part*.nc"), period="1961-1970")
    whole = open_climate(CMCC, period="1961-1970")
    np.testing.assert_allclose(joined["pr"].values, whole["pr"].values, rtol=1e-6)


def test_overlapping_files_of_one_variable_are_refused(tmp_path):
    raw = xr.open_dataset(CMCC, decode_times=False)
    raw.isel(time=slice(0, 70)).to_netcdf(tmp_path / "pr_a.nc")
    raw.isel(time=slice(60, None)).to_netcdf(tmp_path / "pr_b.nc")
    with pytest.raises(DataError, match=r"overlap in time"):
        open_climate(str(tmp_path / "pr_*.nc"), period="1961-1970")


def test_annual_file_is_called_annual(tmp_path):
    import cftime

    times = [cftime.DatetimeNoLeap(y, 7, 2) for y in range(2000, 2010)]
    ds = xr.Dataset(
        {"tas": (("time", "lat", "lon"), np.full((10, 2, 2), 280.0, dtype="f4"), {"units": "K"})},
        coords={"time": times, "lat": [10.0, 11.0], "lon": [20.0, 21.0]},
    )
    ds["lat"].attrs["units"] = "degrees_north"
    ds["lon"].attrs["units"] = "degrees_east"
    ds.to_netcdf(tmp_path / "tas_yr.nc")
    with pytest.raises(DataError, match=r"is annual \(10 yearly steps, 2000-2009\).*monthly"):
        open_climate(tmp_path / "tas_yr.nc", period="2000-2009")
