"""The reader registry: a throwaway format registered in one call reads like NetCDF.

The format (".npz" archives of plain arrays: lat, lon, days since 2001-01-01 in a noleap
calendar, and one array per field with a "<name>__units" entry) exists only in this file. Its
opener returns the fields as stored; naming (aliases, defaults), unit conversion, joining files
in time and the file-set checks are the shared ones, so the result must equal what the same data
written as CF NetCDF give.
"""

from __future__ import annotations

import ast
import json
import subprocess
import sys
from pathlib import Path

import cftime
import numpy as np
import pytest
import xarray as xr

from timeslice.errors import InputFileError
from timeslice.readers import open_climate
from timeslice.readers.filesets import InputFile, check_file_set, sniff_format
from timeslice.readers.registry import Reader, format_names, get_reader, register, unregister

READERS = Path(__file__).resolve().parents[2] / "timeslice" / "readers"


def _write_npz(path: Path, ds: xr.Dataset) -> Path:
    """The throwaway format: bare arrays, times as numbers, units as text entries."""
    days = cftime.date2num(list(ds["time"].values), "days since 2001-01-01", calendar="noleap")
    arrays = {"lat": ds["lat"].values, "lon": ds["lon"].values, "time": np.asarray(days)}
    for name, da in ds.data_vars.items():
        arrays[name] = da.values
        arrays[f"{name}__units"] = np.array(da.attrs["units"])
    with open(path, "wb") as fh:
        np.savez(fh, **arrays)
    return path


def open_npz(entry, options) -> xr.Dataset:
    """Opener of the throwaway format: the fields as stored, as xarray would give a NetCDF."""
    with np.load(entry.path) as z:
        times = cftime.num2date(z["time"], "days since 2001-01-01", calendar="noleap")
        fields = {k: (("time", "lat", "lon"), z[k], {"units": str(z[f"{k}__units"])})
                  for k in z.files if k not in ("lat", "lon", "time") and "__" not in k}
        coords = {"time": ("time", times), "lat": ("lat", z["lat"], {"units": "degrees_north"}),
                  "lon": ("lon", z["lon"], {"units": "degrees_east"})}
        return xr.Dataset(fields, coords=coords)


@pytest.fixture
def npz_format():
    reader = register(Reader("npz", open_npz, names=("NumPy grid archive",), suffixes=(".npz",)))
    yield reader
    unregister("npz")


def _series(years=(2001, 2002), lon=np.arange(-9.5, -4.0, 1.0)) -> xr.Dataset:
    """Two invented monthly fields in model conventions: tn in K, precip as a mass flux."""
    rng = np.random.default_rng(7)
    lat = np.array([40.5, 41.5, 42.5])
    times = [cftime.datetime(y, m, 15, calendar="noleap") for y in years for m in range(1, 13)]
    shape = (len(times), lat.size, lon.size)
    tn = (278.0 + rng.normal(0, 2, shape)).astype("f4")
    precip = (rng.gamma(2.0, 1.0, shape) / 86400.0).astype("f4")
    ds = xr.Dataset(
        {"tn": (("time", "lat", "lon"), tn, {"units": "K"}),
         "precip": (("time", "lat", "lon"), precip, {"units": "kg m-2 s-1"})},
        coords={"time": ("time", times), "lat": ("lat", lat, {"units": "degrees_north"}),
                "lon": ("lon", lon, {"units": "degrees_east"})},
    )
    ds["time"].encoding.update(units="days since 2001-01-01", calendar="noleap")
    return ds


def _fields(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy()
    for v in out.data_vars.values():
        v.attrs.pop("source_file", None)
    out.attrs = {}
    return out


def test_registered_format_reads_exactly_like_netcdf(npz_format, tmp_path):
    ds = _series()
    npz = _write_npz(tmp_path / "slice.npz", ds)
    nc = tmp_path / "slice.nc"
    ds.to_netcdf(nc)
    assert sniff_format(npz) == "npz" and get_reader("npz") is npz_format
    got = open_climate(npz, aliases={"pr": "precip"}, period="2001-2002")
    ref = open_climate(nc, aliases={"pr": "precip"}, period="2001-2002")
    xr.testing.assert_identical(_fields(got), _fields(ref))
    assert json.loads(got.attrs["harmonise_log"]) == json.loads(ref.attrs["harmonise_log"])
    # independent of the reader: degC = K - 273.15 (definition of the Celsius scale, SI
    # Brochure 9th ed., 2.3.1); 1 kg m-2 of water is 1 mm (density 1000 kg m-3), so a monthly
    # total is flux x 86 400 s x the month's days, here January of the noleap calendar (31)
    january = ds.isel(time=[0, 12]).astype("f8")
    np.testing.assert_allclose(got["tasmin"].sel(month=1),
                               january["tn"].mean("time") - 273.15, atol=1e-4)
    np.testing.assert_allclose(got["pr"].sel(month=1),
                               (january["precip"] * 86400.0 * 31).mean("time"), rtol=1e-5)
    assert got["tasmin"].attrs["units"] == "degC" and got["pr"].attrs["units"] == "mm month-1"
    assert got["tasmin"].attrs["source_variable"] == "tn"  # found by the default aliases


def test_files_of_the_new_format_join_in_time_and_pass_the_file_set_checks(npz_format, tmp_path):
    ds = _series()
    parts = [_write_npz(tmp_path / f"part{i}.npz", ds.isel(time=slice(12 * i, 12 * i + 12)))
             for i in range(2)]
    whole = open_climate(parts, aliases={"pr": "precip"}, period="2001-2002")
    nc = tmp_path / "whole.nc"
    ds.to_netcdf(nc)
    xr.testing.assert_identical(
        _fields(whole), _fields(open_climate(nc, aliases={"pr": "precip"}, period="2001-2002")))
    # the header check before a run reads the new format's grid through the registry
    check_file_set([InputFile(p) for p in parts] + [InputFile(nc)], key="climate.baseline")
    shifted = _write_npz(tmp_path / "shifted.npz", _series(lon=np.arange(0.5, 6.0, 1.0)))
    with pytest.raises(InputFileError, match="climate.baseline: the files disagree on the grid"):
        check_file_set([InputFile(parts[0]), InputFile(shifted)], key="climate.baseline")


def test_a_single_layer_of_the_new_format_reads_like_netcdf(npz_format, tmp_path):
    from timeslice.readers.layers import open_layer

    one = _series(years=(2001,)).isel(time=[0])[["tn"]]
    nc = tmp_path / "partner.nc"
    one.to_netcdf(nc)
    got = open_layer(_write_npz(tmp_path / "partner.npz", one), what="biotic.partner")
    xr.testing.assert_identical(got.reset_coords(drop=True),
                                open_layer(nc, what="biotic.partner").reset_coords(drop=True))


def test_refusal_of_an_unknown_file_lists_the_registered_formats(npz_format, tmp_path):
    note = tmp_path / "notes.txt"
    note.write_text("not climate")
    assert format_names() == "NetCDF, GeoTIFF, ESRI ASCII grid or NumPy grid archive"
    with pytest.raises(InputFileError, match=r"notes\.txt: not a NetCDF, GeoTIFF, ESRI ASCII "
                                             r"grid or NumPy grid archive"):
        open_climate(note)


def test_a_taken_key_or_suffix_is_refused(npz_format):
    with pytest.raises(ValueError, match="already registered"):
        register(Reader("npz", open_npz, names=("again",)))
    with pytest.raises(ValueError, match="'.nc' already belongs to 'netcdf'"):
        register(Reader("other", open_npz, names=("other",), suffixes=(".nc",)))


@pytest.mark.parametrize("module, other", [("netcdf", "raster"), ("raster", "netcdf")])
def test_one_reader_imports_without_the_other(module, other):
    code = (f"import sys, timeslice.readers.{module}; "
            f"print('timeslice.readers.{other}' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_no_private_name_crosses_a_readers_module():
    # common practice (PEP 8): a leading underscore is internal to its module
    for path in sorted(READERS.glob("*.py")) + [READERS.parent / "units.py"]:
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("timeslice"):
                private = [a.name for a in node.names if a.name.startswith("_")]
                assert not private and "._" not in node.module, (path.name, node.module, private)
