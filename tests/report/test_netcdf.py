"""CF NetCDF writer: compliance, round trip, flags, chunking, atomicity."""

from __future__ import annotations

import json

import netCDF4
import numpy as np
import pytest
import xarray as xr

# compliance-checker announces the deprecation of a checker suite we do not use
pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning:compliance_checker.*")

from timeslice.errors import DataError, InputFileError
from timeslice.grid import cell_area
from timeslice.report.netcdf import open_series, write_series


def _cf_errors(path, tmp_path):
    """High-priority failures of the offline CF 1.8 checker (compliance-checker >= 5.1)."""
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf_report.json"
    passed, had_errors = ComplianceChecker.run_checker(
        str(path), ["cf:1.8"], 0, "normal", output_filename=str(report), output_format="json"
    )
    result = json.loads(report.read_text())["cf:1.8"]
    high = [(i["name"], i["msgs"]) for i in result["high_priorities"] if i["msgs"]]
    medium = [(i["name"], i["msgs"]) for i in result["medium_priorities"] if i["msgs"]]
    return passed, had_errors, high, medium


def test_series_passes_cf_checker(series_ds, tmp_path):
    # Reference: compliance-checker's "cf:1.8" suite (IOOS), run offline on the file.
    path = write_series(series_ds, tmp_path / "series.nc", source="unit test")
    passed, had_errors, high, medium = _cf_errors(path, tmp_path)
    assert not had_errors, "the checker itself raised on this file"
    assert high == []
    assert medium == []
    assert passed


def test_ensemble_without_slice_dim_passes_cf_checker(series_ds, tmp_path):
    # An ensemble summary has (lat, lon) layers only; the same writer must stay CF-clean.
    ens = series_ds[["stability", "refugium", "elevation"]]
    path = write_series(ens, tmp_path / "ensemble.nc")
    passed, had_errors, high, _ = _cf_errors(path, tmp_path)
    assert not had_errors and high == [] and passed


def test_round_trip_values_and_types(series_ds, tmp_path):
    path = write_series(series_ds, tmp_path / "series.nc")
    back = open_series(path)
    assert list(back["slice"].values) == list(series_ds["slice"].values)
    for name in ("year", "period", "model", "scenario"):
        assert list(back[name].values) == list(series_ds[name].values)
    np.testing.assert_array_equal(back["suitability"].values, series_ds["suitability"].values)
    assert back["suitable"].dtype == np.int8
    np.testing.assert_array_equal(back["suitable"].values, series_ds["suitable"].values)
    assert back["change"].dtype == np.int8
    assert back["land"].dtype == bool and back["refugium"].dtype == bool
    np.testing.assert_array_equal(back["refugium"].values, series_ds["refugium"].values)
    # cell areas stored are the spherical formula of timeslice.grid (checked there vs pyproj)
    np.testing.assert_allclose(back["cell_area"].values, cell_area(series_ds).values)


def test_cf_attributes_and_encoding(series_ds, tmp_path):
    path = write_series(series_ds, tmp_path / "series.nc", history="made in a test")
    with netCDF4.Dataset(path) as nc:
        assert nc.Conventions == "CF-1.8"
        assert "made in a test" in nc.history
        assert nc.variables["crs"].grid_mapping_name == "latitude_longitude"
        # WGS84 defining constants (NIMA TR8350.2, 2000, table 3.1)
        assert nc.variables["crs"].semi_major_axis == 6378137.0
        assert nc.variables["crs"].inverse_flattening == 298.257223563
        assert nc.variables["lat"].bounds == "lat_bnds"
        assert nc.variables["lon"].bounds == "lon_bnds"
        for name in ("suitability", "suitable", "mess", "most_dissimilar", "nt1", "nt2", "change",
                     "land", "elevation", "calibration_area", "stability", "refugium"):
            v = nc.variables[name]
            assert v.grid_mapping == "crs", name
            assert hasattr(v, "units") and hasattr(v, "long_name"), name
            filters = v.filters()
            assert filters["zlib"], name
        s = nc.variables["suitability"]
        assert s.chunking() == [1, series_ds.sizes["lat"], series_ds.sizes["lon"]]
        assert "year" in s.coordinates and "slice_label" in s.coordinates
        land = nc.variables["land"]
        assert land.dtype == np.int8
        assert list(land.flag_values) == [0, 1]
        assert nc.variables["elevation"].standard_name == "surface_altitude"
        chg = nc.variables["change"]
        assert chg.flag_meanings == "not_land absent gain loss stable"
        assert chg.flag_values.dtype == np.int8
        mod = nc.variables["most_dissimilar"]
        assert mod.flag_values.dtype == np.int16
        # the fixture marks not-land with -1, which becomes a named flag
        assert mod.flag_meanings == "no_data bio1 bio12 bio6"
        assert list(mod.flag_values) == [-1, 0, 1, 2]


def test_lat_lon_bounds_contiguous(series_ds, tmp_path):
    path = write_series(series_ds, tmp_path / "series.nc")
    with xr.open_dataset(path) as ds:
        lb = ds["lat_bnds"].values
        np.testing.assert_allclose(lb[1:, 0], lb[:-1, 1])
        np.testing.assert_allclose(lb.mean(axis=1), ds["lat"].values)
        ob = ds["lon_bnds"].values
        np.testing.assert_allclose(ob[:, 1] - ob[:, 0], 0.5)


def test_dask_input_is_written(series_ds, tmp_path):
    lazy = series_ds.chunk({"slice": 1})
    path = write_series(lazy, tmp_path / "series.nc")
    back = open_series(path)
    np.testing.assert_array_equal(back["mess"].values, series_ds["mess"].values)


def test_failed_write_keeps_previous_file(series_ds, tmp_path, monkeypatch):
    path = write_series(series_ds, tmp_path / "series.nc")
    before = path.read_bytes()

    def boom(self, *a, **k):
        raise RuntimeError("disk full")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", boom)
    with pytest.raises(RuntimeError):
        write_series(series_ds, path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir() if p.suffix == ".part"] == []


def test_bad_inputs(series_ds, tmp_path):
    with pytest.raises(DataError, match="xarray.Dataset"):
        write_series(series_ds["suitability"], tmp_path / "x.nc")
    with pytest.raises(DataError, match="`lat`"):
        write_series(series_ds.drop_vars("lat"), tmp_path / "x.nc")
    with pytest.raises(DataError, match="complevel"):
        write_series(series_ds, tmp_path / "x.nc", complevel=11)
    with pytest.raises(InputFileError, match="is a folder"):
        write_series(series_ds, tmp_path)
    with pytest.raises(InputFileError, match="no such file"):
        open_series(tmp_path / "missing.nc")
    bad = tmp_path / "bad.nc"
    bad.write_text("not netcdf")
    with pytest.raises(InputFileError, match="bad.nc"):
        open_series(bad)


def test_stage_conventions_become_named_flags(series_ds, tmp_path):
    # As the transfer stage hands it over: flags 0/1 and -1 as an encoding fill value;
    # a land mask that inherited the attributes of the elevation it came from.
    ds = series_ds.copy()
    ds["suitable"].attrs = {"flag_values": np.array([0, 1], dtype="int8"),
                            "flag_meanings": "unsuitable suitable", "units": "1"}
    ds["suitable"].encoding["_FillValue"] = np.int8(-1)
    ds["land"].attrs = {"standard_name": "height_above_mean_sea_level", "positive": "up",
                        "source_units": "%", "long_name": "land"}
    ds = ds.assign_coords(sea_level=("slice", np.zeros(ds.sizes["slice"])))
    path = write_series(ds, tmp_path / "series.nc")
    with netCDF4.Dataset(path) as nc:
        s = nc.variables["suitable"]
        assert list(s.flag_values) == [-1, 0, 1]
        assert s.flag_meanings == "not_land unsuitable suitable"
        assert "_FillValue" not in s.ncattrs()
        land = nc.variables["land"]
        assert land.standard_name == "land_binary_mask"
        assert "positive" not in land.ncattrs() and "source_units" not in land.ncattrs()
        assert nc.variables["sea_level"].units == "m"
        assert "coordinates" not in nc.ncattrs()
    passed, had_errors, high, medium = _cf_errors(path, tmp_path)
    assert not had_errors and high == [] and medium == [] and passed
    back = open_series(path)
    assert back["suitable"].dtype == np.int8 and int(back["suitable"].min()) == -1


def test_ensemble_with_text_dimensions(series_ds, tmp_path):
    # An ensemble summary indexed by scenario and period labels (text dimensions).
    rng = np.random.default_rng(3)
    shape = (2, 2, series_ds.sizes["lat"], series_ds.sizes["lon"])
    ens = xr.Dataset(
        {
            "agreement": (("scenario", "period", "lat", "lon"),
                          rng.uniform(0, 1, shape).astype("float32"),
                          {"units": "1", "long_name": "share of models projecting suitable"}),
            "elevation": series_ds["elevation"],
        },
        coords={"scenario": ["low-forcing", "high-forcing"],
                "period": ["2041-2060", "2081-2100"],
                "lat": series_ds.lat, "lon": series_ds.lon},
    )
    path = write_series(ens, tmp_path / "ensemble.nc")
    passed, had_errors, high, medium = _cf_errors(path, tmp_path)
    assert not had_errors and high == [] and medium == [] and passed
    with netCDF4.Dataset(path) as nc:
        assert nc.variables["agreement"].chunking() == [1, 1, *shape[2:]]
    back = open_series(path)
    assert list(back["scenario"].values) == ["low-forcing", "high-forcing"]
    np.testing.assert_array_equal(back["agreement"].values, ens["agreement"].values)


def test_reading_one_slice_at_a_time_is_warning_free(series_ds, tmp_path):
    import warnings

    ds = series_ds.assign(area=("slice", np.arange(series_ds.sizes["slice"], dtype=float),
                                {"units": "km2"}))
    path = write_series(ds, tmp_path / "series.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        back = open_series(path, chunks={"slice": 1})
    assert back["suitability"].chunks[0] == (1,) * series_ds.sizes["slice"]
