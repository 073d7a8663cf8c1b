"""The writers on layers made by the real upstream stages (contract check between stages).

A tiny invented landscape is projected with the transfer stage and summarised with the series
stage, stacked the way the pipeline stacks slices; the report writers must then produce
CF-clean NetCDF and readable GeoTIFFs without any repair by hand.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import xarray as xr

# compliance-checker announces the deprecation of a checker suite we do not use
pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning:compliance_checker.*")

from timeslice.grid import make_grid

pytest.importorskip("timeslice.transfer.project")
pytest.importorskip("timeslice.series.summary")


def _slice(label, year, model, scenario, shift, rng, land):
    g = make_grid(lon_min=-40, lon_max=-34, lat_min=40, lat_max=45, resolution=0.5)
    shape = (g.sizes["lat"], g.sizes["lon"])
    lat2 = np.broadcast_to(g.lat.values[:, None], shape)
    bio1 = (20.0 - 0.8 * (lat2 - 40.0) + shift + rng.normal(0, 0.2, shape)).astype("float32")
    bio12 = (800.0 + 30.0 * (lat2 - 40.0) + rng.normal(0, 5, shape)).astype("float32")
    bio1 = np.where(land, bio1, np.nan).astype("float32")
    bio12 = np.where(land, bio12, np.nan).astype("float32")
    return xr.Dataset(
        {"bio1": (("lat", "lon"), bio1, {"units": "degC"}),
         "bio12": (("lat", "lon"), bio12, {"units": "mm"}),
         "land": (("lat", "lon"), land)},
        coords={"lat": g.lat, "lon": g.lon},
        attrs={"slice_label": label, "year": year, "period": str(int(year)), "model": model,
               "scenario": scenario, "sea_level": 0.0},
    )


@pytest.fixture
def stage_series():
    from timeslice.niche.models import EllipsoidNiche
    from timeslice.series.summary import summarise
    from timeslice.transfer.project import project_slice

    rng = np.random.default_rng(11)
    g = make_grid(lon_min=-40, lon_max=-34, lat_min=40, lat_max=45, resolution=0.5)
    land = np.ones((g.sizes["lat"], g.sizes["lon"]), dtype=bool)
    land[:, -2:] = False
    slices = [_slice("baseline", 1995.0, "observed", "baseline", 0.0, rng, land),
              _slice("m1_2050", 2050.0, "m1", "warm", 2.0, rng, land),
              _slice("m1_2090", 2090.0, "m1", "warm", 4.0, rng, land)]
    base = slices[0]
    X = base[["bio1", "bio12"]].to_dataframe().dropna()[["bio1", "bio12"]]
    y = (np.abs(X["bio1"] - 17.0) < 1.5).astype(int).to_numpy()
    model = EllipsoidNiche().fit(X.to_numpy(), y)
    reference = X.iloc[::2]
    outs = []
    for ds in slices:
        res = project_slice(model, ds, variables=["bio1", "bio12"], reference=reference,
                            threshold=0.2).compute()
        res = res.assign(land=ds["land"].astype(bool)).expand_dims(slice=[ds.attrs["slice_label"]])
        res = res.assign_coords(
            year=("slice", [ds.attrs["year"]]), period=("slice", [ds.attrs["period"]]),
            model=("slice", [ds.attrs["model"]]), scenario=("slice", [ds.attrs["scenario"]]),
            sea_level=("slice", [0.0]))
        outs.append(res)
    stack = xr.concat(outs, dim="slice", combine_attrs="drop_conflicts")
    stack["elevation"] = xr.full_like(base["bio1"], 100.0).astype("float32").assign_attrs(
        units="m")
    stack["calibration_area"] = base["land"]
    series, table = summarise(stack, reference="baseline")
    try:
        from timeslice.series.dispersal import reachable
    except ImportError:  # pragma: no cover - the dispersal layer is optional here
        return series, table
    start = series["suitable"].isel(slice=0) == 1
    series["reachable"] = reachable(series["suitable"], start, distance_km=60.0)
    return series, table


def test_stage_layers_write_cf_clean_netcdf(stage_series, tmp_path):
    from compliance_checker.runner import CheckSuite, ComplianceChecker

    from timeslice.report.netcdf import open_series, write_series

    series, _ = stage_series
    path = write_series(series, tmp_path / "series.nc")
    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    passed, had_errors = ComplianceChecker.run_checker(
        str(path), ["cf:1.8"], 0, "normal", output_filename=str(report), output_format="json")
    result = json.loads(report.read_text())["cf:1.8"]
    failures = [(i["name"], i["msgs"]) for k in ("high_priorities", "medium_priorities")
                for i in result[k] if i["msgs"]]
    assert not had_errors and failures == [] and passed
    back = open_series(path)
    for name in ("suitable", "change"):
        np.testing.assert_array_equal(back[name].values, series[name].values)
        assert back[name].dtype == series[name].dtype
    np.testing.assert_array_equal(back["most_dissimilar"].values, series["most_dissimilar"].values)
    if "reachable" in series:
        np.testing.assert_array_equal(back["reachable"].values, series["reachable"].values)


def test_stage_layers_to_maps_and_geotiff(stage_series, tmp_path):
    from timeslice.report import export, maps, plots

    series, table = stage_series
    assert export(series, tmp_path / "tif")
    assert maps.slice_maps(series, tmp_path / "maps", dpi=40)
    assert maps.change_map(series, tmp_path / "c.png", dpi=40).exists()
    if "reachable" in series:
        assert maps.reach_map(series, tmp_path / "r.png", dpi=40).exists()
    assert plots.area_through_time(pd.DataFrame(table), tmp_path / "a.png", dpi=40).exists()
