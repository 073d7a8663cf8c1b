"""CF NetCDF reader: canonical names, units, calendars and coordinates."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.units import (
    days_in_month,
    precipitation_conversion,
    temperature_conversion,
)
from timeslice.readers import open_climate


def test_flux_definition():
    # definition of the units: 1 kg m-2 s-1 of water / 1000 kg m-3 = 1 mm s-1 = 86 400 mm/day
    kind, f = precipitation_conversion("kg m-2 s-1")
    assert kind == "per_second"
    assert f * 86400 == pytest.approx(86400.0, rel=1e-12)
    kind, f = precipitation_conversion("mm day-1")
    assert kind == "per_second" and f == pytest.approx(1 / 86400, rel=1e-12)
    assert precipitation_conversion("mm/mon") == ("per_month", pytest.approx(1.0))
    assert precipitation_conversion("cm month-1") == ("per_month", pytest.approx(10.0))


@pytest.mark.parametrize(
    ("calendar", "year", "total"),
    [
        # definition of the units and the calendars: 1e-5 kg m-2 s-1 = 0.864 mm/day
        ("standard", 2000, 316.224),   # 366 days
        ("noleap", None, 315.360),     # 365 days
        ("360_day", None, 311.040),    # 360 days
        ("all_leap", None, 316.224),
        ("standard", None, 315.360),   # climatology: non-leap month lengths
    ],
)
def test_days_per_month_by_calendar(calendar, year, total):
    days = days_in_month(calendar, year)
    assert 1e-5 * 86400 * days.sum() == pytest.approx(total, abs=1e-9)


def test_temperature_aliases():
    # definitions: T[degC] = T[K] - 273.15; T[degC] = (T[degF] - 32) * 5/9
    assert temperature_conversion("K") == pytest.approx((-273.15, 1.0))
    for spelling in ("degree_C", "degrees_C", "degC", "Celsius"):
        assert temperature_conversion(spelling) == pytest.approx((0.0, 1.0))
    assert temperature_conversion("degrees_K") == pytest.approx((-273.15, 1.0))
    off, fac = temperature_conversion("degF")
    assert off + fac * 212 == pytest.approx(100.0)


def test_model_conventions_to_canonical(tmp_path, model_file):
    path = model_file(calendar="noleap", descending=True, tmin_c=2.0, pr_mm_day=1.0)
    raw = xr.open_dataset(path)
    raw["tasmin"].attrs["comment"] = "kept through harmonising"
    raw.to_netcdf(tmp_path / "with_comment.nc")
    path = tmp_path / "with_comment.nc"
    ds = open_climate(path)
    assert ds["tasmin"].attrs["comment"] == "kept through harmonising"
    assert ds["tasmin"].attrs["source_units"] == "K"
    assert ds.attrs["title"] == "invented test model"
    assert set(ds.data_vars) == {"tasmin", "tasmax", "pr"}
    assert ds["tasmin"].dims == ("month", "lat", "lon")
    assert list(ds["month"].values) == list(range(1, 13))
    assert np.all(np.diff(ds["lat"].values) > 0)
    assert ds["lon"].min() >= -180 and ds["lon"].max() < 180
    assert ds["lon"].values[0] == pytest.approx(-44.5)
    np.testing.assert_allclose(ds["tasmin"].values, 2.0, atol=1e-4)
    assert ds["tasmin"].attrs["units"] == "degC"
    assert ds["pr"].attrs["units"] == "mm month-1"
    # 1 mm/day x noleap month lengths (31, 28, 31, ...)
    np.testing.assert_allclose(ds["pr"].isel(lat=0, lon=0).values,
                               days_in_month("noleap"), rtol=1e-5)
    assert json.loads(ds.attrs["source_files"]) == [str(path)]
    assert any("degC" in line for line in json.loads(ds.attrs["harmonise_log"]))


def test_360_day_multi_year_series_period(model_file):
    path = model_file(calendar="360_day", years=range(1995, 2005), pr_mm_day=2.0, seed=3)
    ds = open_climate(path, period="1999-2002")
    raw = xr.open_dataset(path, decode_times=xr.coders.CFDatetimeCoder(use_cftime=True))
    yrs = np.array([t.year for t in raw.time.values])
    jan = raw["tasmin"].values[(yrs >= 1999) & (yrs <= 2002)][::12].mean(0) - 273.15
    np.testing.assert_allclose(ds["tasmin"].sel(month=1).values, jan, atol=1e-4)
    np.testing.assert_allclose(ds["pr"].values, 60.0, rtol=1e-5)  # 2 mm/day x 30 days
    with pytest.raises(DataError, match="outside the file's time range"):
        open_climate(path, period="1990-2000")
    with pytest.raises(DataError, match="period"):
        open_climate(path)


def test_scale_and_aliases(tmp_path, model_file):
    path = model_file(t_units="degC", pr_units="mm/mon", tmin_c=2.0, pr_mm_day=50.0)
    ds = xr.open_dataset(path).rename({"tasmin": "tn", "tasmax": "tx", "pr": "rain"})
    for v in ds.data_vars:
        ds[v].attrs.pop("standard_name", None)
    ds["tn"] = ds["tn"] * 10
    p2 = tmp_path / "renamed.nc"
    ds.to_netcdf(p2)
    out = open_climate(p2, scale={"tasmin": 0.1})
    np.testing.assert_allclose(out["tasmin"].values, 2.0, atol=1e-4)
    np.testing.assert_allclose(out["pr"].values, 50.0, rtol=1e-6)


def test_single_fields(tmp_path):
    lat = np.arange(40.25, 55, 0.5)
    lon = np.arange(-39.75, -20, 0.5)
    ice = xr.Dataset(
        {"sftgif": (("lat", "lon"), np.full((lat.size, lon.size), 80.0),
                    {"units": "%", "standard_name": "land_ice_area_fraction"})},
        coords={"lat": lat, "lon": lon},
    )
    ice.to_netcdf(tmp_path / "ice.nc")
    out = open_climate(tmp_path / "ice.nc")
    assert out["ice"].attrs["units"] == "1"
    np.testing.assert_allclose(out["ice"].values, 0.8)


def test_errors(tmp_path, model_file):
    with pytest.raises(InputFileError, match="file not found"):
        open_climate(tmp_path / "nope.nc")
    bad = tmp_path / "bad.nc"
    bad.write_text("not netcdf")
    with pytest.raises(InputFileError, match="bad.nc"):
        open_climate(bad)
    p = model_file(pr_units="kg m-2 s-1")
    ds = xr.open_dataset(p)
    ds["pr"].attrs["units"] = "K"
    ds.to_netcdf(tmp_path / "prk.nc")
    with pytest.raises(DataError, match="not a precipitation rate"):
        open_climate(tmp_path / "prk.nc")
    ds["pr"].attrs["units"] = "wibbles"
    ds.to_netcdf(tmp_path / "pru.nc")
    with pytest.raises(DataError, match="unknown units"):
        open_climate(tmp_path / "pru.nc")
    with pytest.raises(DataError, match="required variable 'tas'.*found"):
        open_climate(p, require=["tas"])


def test_one_file_per_variable_by_glob(tmp_path, model_file):
    path = model_file(tmin_c=1.0, pr_mm_day=1.0)
    ds = xr.open_dataset(path)
    for v in ("tasmin", "tasmax", "pr"):
        ds[[v]].to_netcdf(tmp_path / f"part_{v}.nc")
    out = open_climate(str(tmp_path / "part_*.nc"))
    ref = open_climate(path)
    xr.testing.assert_allclose(out, ref)
    assert len(json.loads(out.attrs["source_files"])) == 3


def test_packed_int16(tmp_path, model_file):
    path = model_file(tmin_c=1.5, pr_mm_day=2.0)
    ds = xr.open_dataset(path)
    enc = {"tasmin": {"dtype": "int16", "scale_factor": 0.01, "add_offset": 273.15,
                      "_FillValue": -32768}}
    ds.to_netcdf(tmp_path / "packed.nc", encoding=enc)
    out = open_climate(tmp_path / "packed.nc")
    np.testing.assert_allclose(out["tasmin"].values, 1.5, atol=0.006)  # packing step 0.01 K


def test_curvilinear_grid_is_refused(tmp_path):
    y, x = np.meshgrid(np.arange(3.0), np.arange(4.0), indexing="ij")
    ds = xr.Dataset(
        {"elevation": (("y", "x"), np.zeros((3, 4)), {"units": "m"})},
        coords={"nav_lat": (("y", "x"), 40 + y, {"standard_name": "latitude"}),
                "nav_lon": (("y", "x"), -30 + x + 0.1 * y, {"standard_name": "longitude"})},
    )
    ds.to_netcdf(tmp_path / "curvi.nc")
    with pytest.raises(DataError, match=r"curvi\.nc.*curvilinear grid.*2-D.*regular latitude-longitude"):
        open_climate(tmp_path / "curvi.nc")


def test_non_monotonic_longitude(tmp_path, model_file):
    path = model_file()
    ds = xr.open_dataset(path)
    lon = ds["lon"].values.copy()
    lon[[3, 4]] = lon[[4, 3]]
    ds.assign_coords(lon=lon).to_netcdf(tmp_path / "shuffled.nc")
    with pytest.raises(DataError, match="'lon' is not monotonic"):
        open_climate(tmp_path / "shuffled.nc")


def test_time_axis_without_12_months(tmp_path, model_file):
    path = model_file()
    ds = xr.open_dataset(path, decode_times=False)
    ds.isel(time=slice(0, 6)).to_netcdf(tmp_path / "half.nc")
    with pytest.raises(DataError, match="not a 12-month climatology"):
        open_climate(tmp_path / "half.nc")
    with pytest.raises(DataError, match=r"no data for months \[7, 8, 9, 10, 11, 12\]"):
        open_climate(tmp_path / "half.nc", period="2001-2001")
    ds2 = ds.copy()
    ds2["time"].attrs = {"units": "steps", "standard_name": "time"}
    ds2.to_netcdf(tmp_path / "undated.nc")
    with pytest.raises(DataError, match="cannot be decoded into dates"):
        open_climate(tmp_path / "undated.nc")


def test_files_disagreeing_on_period(tmp_path, model_file):
    import cftime

    paths = []
    for v, (y0, y1) in (("tasmin", (1971, 2000)), ("tasmax", (1981, 2010))):
        ds = xr.open_dataset(model_file(name=f"src_{v}.nc"), decode_times=False)[[v, "time"]]
        b0 = [cftime.date2num(cftime.datetime(y0, m, 1, calendar="noleap"),
                              "days since 1900-01-01", calendar="noleap") for m in range(1, 13)]
        b1 = [cftime.date2num(cftime.datetime(y1 + (m == 12), m % 12 + 1, 1, calendar="noleap"),
                              "days since 1900-01-01", calendar="noleap") for m in range(1, 13)]
        ds["climatology_bnds"] = (("time", "nv"), np.stack([b0, b1], 1),
                                  {"units": "days since 1900-01-01"})
        ds["time"].attrs["climatology"] = "climatology_bnds"
        p = tmp_path / f"{v}.nc"
        ds.to_netcdf(p)
        paths.append(p)
    with pytest.raises(DataError, match="disagree on the period"):
        open_climate(paths)
    one = open_climate(paths[0])
    assert json.loads(one.attrs["source_info"])["period"] == "1971-2000"
    assert open_climate(paths[0], period="1971-2000")["tasmin"].sizes["month"] == 12
    with pytest.raises(DataError, match="climatology of 1971-2000 but the slice's period is 1981-2010"):
        open_climate(paths[0], period="1981-2010")


def test_negative_precipitation(tmp_path, model_file):
    path = model_file(pr_mm_day=-1.0)
    # 12 months x 25 x 30 cells
    with pytest.raises(DataError, match="negative beyond rounding in 9000 cell-months"):
        open_climate(path)
    ds = xr.open_dataset(model_file(name="tiny.nc", pr_mm_day=1.0))
    ds["pr"][0, 0, 0] = -1e-9  # rounding-size negative flux
    ds.to_netcdf(tmp_path / "tiny_neg.nc")
    out = open_climate(tmp_path / "tiny_neg.nc")
    assert float(out["pr"].min()) == 0.0
    assert any("rounding" in x for x in json.loads(out.attrs["harmonise_log"]))


def test_missing_variable_lists_found(tmp_path):
    ds = xr.Dataset({"foo": (("lat", "lon"), np.zeros((2, 2)))},
                    coords={"lat": [1.0, 2.0], "lon": [1.0, 2.0]})
    ds.to_netcdf(tmp_path / "foo.nc")
    with pytest.raises(DataError, match=r"no climate variable recognised \(found \['foo'\]\)"):
        open_climate(tmp_path / "foo.nc")


def test_more_precipitation_units():
    # definitions: 1 m = 1000 mm, 1 cm = 10 mm; per-month units need no calendar
    assert precipitation_conversion("m/month") == ("per_month", pytest.approx(1000.0))
    assert precipitation_conversion("cm/month") == ("per_month", pytest.approx(10.0))
    assert precipitation_conversion("kg m-2 month-1") == ("per_month", pytest.approx(1.0))
    kind, f = precipitation_conversion("mm/d")
    assert kind == "per_second" and f * 86400 == pytest.approx(1.0)


def test_unsupported_calendar():
    with pytest.raises(DataError, match="calendar 'martian' is not supported"):
        days_in_month("martian")


def test_variables_disagreeing_on_grid(tmp_path, model_file):
    a = xr.open_dataset(model_file(name="a.nc"))[["tasmin", "time"]]
    b = xr.open_dataset(model_file(name="b.nc", lon=np.arange(315.25, 345.0, 0.5)))[["pr", "time"]]
    a.to_netcdf(tmp_path / "tmin_only.nc")
    b.to_netcdf(tmp_path / "pr_only.nc")
    with pytest.raises(DataError, match="disagree on the grid"):
        open_climate([tmp_path / "tmin_only.nc", tmp_path / "pr_only.nc"])


def test_months_since_time_axis(tmp_path):
    # "months since" in a standard calendar is not decodable by cftime; step k is month k
    ds = xr.Dataset(
        {"pr": (("time", "lat", "lon"), np.full((12, 2, 2), 2.0), {"units": "mm/day"})},
        coords={"time": ("time", np.arange(12) + 0.5,
                         {"units": "months since 2001-01-01", "calendar": "standard"}),
                "lat": ("lat", [40.5, 41.5], {"units": "degrees_north"}),
                "lon": ("lon", [-30.5, -29.5], {"units": "degrees_east"})},
    )
    ds.to_netcdf(tmp_path / "months.nc")
    out = open_climate(tmp_path / "months.nc")
    # 2 mm/day x standard non-leap month lengths (definition of the units)
    np.testing.assert_allclose(out["pr"].isel(lat=0, lon=0).values,
                               2.0 * days_in_month("standard"))
