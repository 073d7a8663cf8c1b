"""A prepared slice in the pinned format, from model-convention files."""

from __future__ import annotations

import json
import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.harmonise import prepare_slice

from harmonise_factories import model_dataset


@pytest.fixture
def inputs(tmp_path):
    fine = make_grid(lon_min=-40, lon_max=-20, lat_min=40, lat_max=55, resolution=0.5)
    lon, lat = np.meshgrid(fine.lon.values, fine.lat.values)
    z = 1500 * np.exp(-((lon + 30) ** 2 + (lat - 47.5) ** 2) / 20) - 200  # island + shelf
    elev = xr.DataArray(z.astype("f4"), dims=("lat", "lon"),
                        coords={"lat": fine.lat, "lon": fine.lon}, name="elevation",
                        attrs={"units": "m"})
    land = z > 0
    month = np.arange(1, 13)
    season = 8 * np.sin(2 * np.pi * (month - 4) / 12)[:, None, None]
    tmin = np.where(land, 5 - 0.0065 * z, np.nan)[None] + season
    dims = ("month", "lat", "lon")
    fb = xr.Dataset(
        {"tasmin": (dims, tmin.astype("f4"), {"units": "degC"}),
         "tasmax": (dims, (tmin + 9).astype("f4"), {"units": "degC"}),
         "pr": (dims, np.where(land, 60.0, np.nan)[None].repeat(12, 0).astype("f4"),
                {"units": "mm month-1"})},
        coords={"month": month, "lat": fine.lat, "lon": fine.lon},
    )
    mb = tmp_path / "model_baseline.nc"
    ms = tmp_path / "model_21ka.nc"
    model_dataset(calendar="360_day", descending=True, seed=5).to_netcdf(mb)
    cold = model_dataset(calendar="360_day", descending=True, seed=5)
    cold["tasmin"] = cold["tasmin"] - 6
    cold["tasmax"] = cold["tasmax"] - 6
    cold.to_netcdf(ms)
    return fb, elev, mb, ms


def test_baseline_slice_format(inputs):
    fb, elev, _, _ = inputs
    out = prepare_slice(fine_baseline=fb, elevation=elev, label="baseline", year=1985.0,
                        period="1971-2000", model="observed", scenario="baseline")
    for i in range(1, 20):
        assert out[f"bio{i}"].dtype == np.float32
        assert out[f"bio{i}"].dims == ("lat", "lon")
    for v in ("land", "ice", "exposed_shelf", "filled"):
        assert out[v].dtype == bool
    assert out["elevation"].dtype == np.float32
    assert bool(out["bio1"].isnull().where(~out["land"], True).all())
    assert bool(out["bio1"].notnull().where(out["land"], True).all())
    assert out.attrs["model"] == "observed" and out.attrs["scenario"] == "baseline"
    assert isinstance(json.loads(out.attrs["harmonise_log"]), list)
    assert not out["filled"].any()


def test_glacial_slice_from_model_files(inputs):
    fb, elev, mb, ms = inputs
    base = prepare_slice(fine_baseline=fb, elevation=elev, label="baseline", year=1985.0,
                         period="1971-2000", model="observed", scenario="baseline")
    lgm = prepare_slice(fine_baseline=fb, elevation=elev, model_slice=ms, model_baseline=mb,
                        sea_level=-120.0, label="alder_21ka", year=1950 - 21000,
                        period="21ka", model="alder", scenario="past")
    assert lgm["land"].sum() > base["land"].sum()
    assert bool((lgm["filled"] == lgm["exposed_shelf"]).all())
    # uniform -6 K change factor on both temperatures (worked example of the delta method)
    both = base["land"] & lgm["land"]
    diff = (lgm["bio1"] - base["bio1"]).where(both)
    np.testing.assert_allclose(diff.values[np.isfinite(diff.values)], -6.0, atol=1e-3)
    log = json.loads(lgm.attrs["harmonise_log"])
    assert any("delta" in line for line in log)
    assert any("K -> degC" in line for line in log)
    assert lgm.attrs["sea_level"] == -120.0 and lgm.attrs["year"] == -19050.0


def test_delta_needs_both_model_files(inputs):
    fb, elev, mb, _ = inputs
    with pytest.raises(DataError, match="model_slice"):
        prepare_slice(fine_baseline=fb, elevation=elev, model_baseline=mb, label="x",
                      year=2050.0, period="2041-2060", model="m", scenario="s")


def test_areas_input_table_and_atomic_write(inputs, tmp_path):
    from timeslice.grid import cell_area
    from timeslice.harmonise import input_table, write_prepared
    from timeslice.readers import open_climate

    fb, elev, mb, ms = inputs
    mb_ds, ms_ds = open_climate(mb), open_climate(ms)
    lgm = prepare_slice(fine_baseline=fb, elevation=elev, model_slice=ms_ds,
                        model_baseline=mb_ds, sea_level=-120.0, label="a_21ka",
                        year=-19050.0, period="21ka", model="a", scenario="past")
    area = cell_area(lgm)
    # areas are sums of spherical cell areas (docs/methods.md), never cell counts
    assert lgm.attrs["exposed_shelf_km2"] == pytest.approx(
        float(area.where(lgm["exposed_shelf"]).sum()))
    table = input_table(
        [{"slice": "a_21ka", "role": "model_slice", "data": ms_ds},
         {"slice": "a_21ka", "role": "model_baseline", "data": mb_ds}],
        prepared={"a_21ka": lgm},
    )
    assert list(table["role"]) == ["model_slice", "model_baseline"]
    row = table.iloc[0]
    assert row["calendar"] == "360_day"
    assert "K -> degC" in row["converted"]
    assert row["grid"] == "25 x 30" and row["resolution"] == "1 x 1 deg"
    assert "delta" in row["downscaled"]
    out = tmp_path / "slices" / "a_21ka.nc"
    write_prepared(lgm, out)
    back = xr.open_dataset(out)
    assert back["land"].dtype == bool and back["land"].attrs["flag_meanings"] == "not_land land"
    assert np.dtype(back["land"].encoding["dtype"]) == bool  # on disk: int8 0/1
    np.testing.assert_allclose(back["bio1"].values, lgm["bio1"].values, equal_nan=True)
    assert json.loads(back.attrs["harmonise_log"]) == json.loads(lgm.attrs["harmonise_log"])
    assert not [p for p in out.parent.iterdir() if p.suffix == ".part"]


def test_no_overlap_is_an_error(inputs):
    from timeslice.harmonise import regrid

    fb, elev, _, _ = inputs
    far = elev.assign_coords(lon=elev["lon"] + 100)
    with pytest.raises(DataError, match="does not overlap the target area"):
        regrid(far, fb, source="elevation.nc")


def test_blocked_equals_whole_grid(inputs):
    fb, elev, mb, ms = inputs
    kw = dict(fine_baseline=fb, elevation=elev, model_slice=ms, model_baseline=mb,
              sea_level=-120.0, label="x", year=-19050.0, period="21ka", model="a",
              scenario="past")
    whole = prepare_slice(chunks=None, **kw)
    blocked = prepare_slice(chunks=7, **kw)
    xr.testing.assert_allclose(whole, blocked)
    assert blocked.attrs["n_swapped"] == whole.attrs["n_swapped"]


def test_input_all_nan_on_land_is_an_error(inputs):
    from timeslice.harmonise import BIO_NAMES

    fb, elev, _, _ = inputs
    base = prepare_slice(fine_baseline=fb, elevation=elev, label="b", year=1985.0,
                         period="p", model="observed", scenario="baseline")
    bio = base[list(BIO_NAMES)].copy(deep=True)
    bio["bio7"] = bio["bio7"] * np.nan
    with pytest.raises(DataError, match="'bio7' has no value on any land cell"):
        prepare_slice(fine_baseline=None, elevation=elev, bio=bio, label="x", year=1985.0,
                      period="p", model="m", scenario="s")


@pytest.mark.filterwarnings("ignore::DeprecationWarning")
def test_written_slice_passes_cf_checker(inputs, tmp_path):
    """Reference: IOOS compliance-checker, "cf:1.8" suite, run offline on the file."""
    pytest.importorskip("compliance_checker")
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    from timeslice.harmonise import write_prepared

    fb, elev, _, _ = inputs
    base = prepare_slice(fine_baseline=fb, elevation=elev, label="baseline", year=1985.0,
                         period="1971-2000", model="observed", scenario="baseline")
    path = write_prepared(base, tmp_path / "baseline.nc")
    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    passed, had_errors = ComplianceChecker.run_checker(
        str(path), ["cf:1.8"], 0, "normal", output_filename=str(report), output_format="json")
    res = json.loads(report.read_text())["cf:1.8"]
    failed = [(p["name"], p["msgs"]) for lvl in ("high_priorities", "medium_priorities")
              for p in res[lvl] if p["msgs"]]
    assert not had_errors and passed, failed
    assert failed == []
