"""Inputs timeslice does not read are refused in one line that says what the file is and what to
do (GRIB, rotated-pole, projected and curvilinear grids, no latitude/longitude, damaged files)."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError, InputFileError, TimesliceError
from timeslice.readers import open_climate
from timeslice.readers.filesets import InputFile, check_file_set, sniff_format


def _rotated(path):
    ds = xr.Dataset(
        {"tas": (("time", "rlat", "rlon"), np.full((12, 3, 4), 280.0), {"units": "K",
                                                                        "grid_mapping": "rotated_pole"}),
         "rotated_pole": ((), 0, {"grid_mapping_name": "rotated_latitude_longitude",
                                  "grid_north_pole_latitude": 39.25,
                                  "grid_north_pole_longitude": -162.0})},
        coords={"time": ("time", np.arange(12) * 30.0 + 15, {"units": "days since 2001-01-01",
                                                             "calendar": "360_day"}),
                "rlat": ("rlat", [-1.0, 0.0, 1.0], {"standard_name": "grid_latitude",
                                                   "units": "degrees"}),
                "rlon": ("rlon", [-1.0, 0.0, 1.0, 2.0], {"standard_name": "grid_longitude",
                                                        "units": "degrees"})},
    )
    ds.to_netcdf(path)
    return path


def test_grib_is_named_and_the_conversion_given(tmp_path):
    p = tmp_path / "era.grib"
    p.write_bytes(b"GRIB" + b"\x00" * 200)
    assert sniff_format(p) == "grib"  # GRIB edition 1/2 messages start with "GRIB" (WMO FM 92)
    with pytest.raises(InputFileError, match=r"era\.grib: this is a GRIB file.*cdo -f nc4 copy"):
        open_climate(p)


def test_rotated_pole_grid(tmp_path):
    p = _rotated(tmp_path / "rcm.nc")
    with pytest.raises(DataError, match=r"rcm\.nc: the file is on a rotated-pole grid.*regular latitude-longitude"):
        open_climate(p)


def test_projected_grid(tmp_path):
    ds = xr.Dataset(
        {"tas": (("y", "x"), np.zeros((2, 2)), {"units": "K", "grid_mapping": "crs"}),
         "crs": ((), 0, {"grid_mapping_name": "lambert_conformal_conic"})},
        coords={"y": [0.0, 1000.0], "x": [0.0, 1000.0]},
    )
    ds.to_netcdf(tmp_path / "lcc.nc")
    with pytest.raises(DataError, match=r"lcc\.nc: the file is on a projected grid \('lambert_conformal_conic'\)"):
        open_climate(tmp_path / "lcc.nc")


def test_no_latitude_longitude(tmp_path):
    xr.Dataset({"tas": (("station", "time"), np.zeros((3, 2)), {"units": "K"})}).to_netcdf(
        tmp_path / "stations.nc")
    with pytest.raises(DataError, match=r"stations\.nc: no latitude/longitude coordinates found \(dimensions station=3, time=2\)"):
        open_climate(tmp_path / "stations.nc")


def test_damaged_netcdf(tmp_path):
    src = tmp_path / "ok.nc"
    xr.Dataset({"tas": (("lat", "lon"), np.zeros((40, 40)), {"units": "K"})},
               coords={"lat": ("lat", np.arange(40.0), {"units": "degrees_north"}),
                       "lon": ("lon", np.arange(40.0), {"units": "degrees_east"})}).to_netcdf(
        src, engine="netcdf4")
    raw = bytearray(src.read_bytes())
    mid = len(raw) // 2
    raw[mid:mid + 4096] = b"\xff" * min(4096, len(raw) - mid)
    bad = tmp_path / "damaged.nc"
    bad.write_bytes(bytes(raw))
    with pytest.raises(TimesliceError) as info:
        open_climate(bad)["tas"].values  # noqa: B018  (reading the data is what fails)
    text = str(info.value)
    assert "damaged.nc" in text and "\n" not in text and len(text) < 400


def test_not_a_climate_file(tmp_path):
    p = tmp_path / "notes.txt"
    p.write_text("hello")
    with pytest.raises(InputFileError, match=r"notes\.txt: not a NetCDF, GeoTIFF or ESRI ASCII grid"):
        open_climate(p)


def test_header_check_refuses_unsupported_before_any_work(tmp_path):
    p = _rotated(tmp_path / "rcm.nc")
    with pytest.raises(InputFileError, match=r"rotated-pole"):
        check_file_set([InputFile(p)], key="climate.baseline")


def test_files_on_different_grids_are_refused_naming_the_pattern(tmp_path):
    for name, n in (("tas_a.nc", 3), ("tas_b.nc", 4)):
        xr.Dataset({"tas": (("lat", "lon"), np.zeros((n, n)), {"units": "K"})},
                   coords={"lat": ("lat", np.arange(n) + 0.5, {"units": "degrees_north"}),
                           "lon": ("lon", np.arange(n) + 0.5, {"units": "degrees_east"})}
                   ).to_netcdf(tmp_path / name)
    files = [InputFile(tmp_path / "tas_a.nc"), InputFile(tmp_path / "tas_b.nc")]
    with pytest.raises(InputFileError, match=r"climate.models.m = 'tas_\*\.nc': the files disagree on the grid \(tas_a\.nc: 3 x 3.*tas_b\.nc: 4 x 4"):
        check_file_set(files, key="climate.models.m", pattern="tas_*.nc")


def test_same_grid_in_0_360_and_180_conventions_agree(tmp_path):
    lon360 = np.arange(0.0, 360.0, 90.0) + 45.0
    for name, lon in (("a.nc", lon360), ("b.nc", ((lon360 + 180) % 360) - 180)):
        xr.Dataset({"tas": (("lat", "lon"), np.zeros((2, 4)), {"units": "K"})},
                   coords={"lat": ("lat", [-45.0, 45.0], {"units": "degrees_north"}),
                           "lon": ("lon", np.sort(lon), {"units": "degrees_east"})}
                   ).to_netcdf(tmp_path / name)
    check_file_set([InputFile(tmp_path / "a.nc"), InputFile(tmp_path / "b.nc")], key="k")
