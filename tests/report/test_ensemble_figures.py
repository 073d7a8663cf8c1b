"""Agreement, consensus, dominant source of uncertainty and most-dissimilar-variable figures,
the importance and threshold plots, and the GeoTIFF export of the ensemble layers with their
CF attributes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rasterio
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.report import (
    agreement_map,
    dominant_source_map,
    export,
    importance_bars,
    most_dissimilar_map,
    novelty_map,
    threshold_plot,
)
from timeslice.report.maps import _flag_colours
from timeslice.report.panelgrid import grid_places as _grid_places
from timeslice.series.ensemble import agreement, factorial, partition

PNG = b"\x89PNG\r\n\x1a\n"


def _ensemble_stack(seed: int = 3) -> xr.Dataset:
    """Baseline plus 2 models x 2 scenarios x 2 periods (a balanced design), invented values."""
    rng = np.random.default_rng(seed)
    g = make_grid(lon_min=-10.0, lon_max=-4.0, lat_min=40.0, lat_max=45.0, resolution=0.5)
    rows = [("baseline", "observed", "baseline", "1981-2010", 1995.0)]
    for per, year in (("2041-2060", 2050.0), ("2081-2100", 2090.0)):
        for scen in ("low", "high"):
            for model in ("m1", "m2"):
                rows.append((f"{model}_{scen}_{per}", model, scen, per, year))
    shape = (len(rows), g.sizes["lat"], g.sizes["lon"])
    land = np.ones(shape, dtype=bool)
    land[:, 0, :] = False
    suit = rng.random(shape).astype("float32")
    suit[~land] = np.nan
    suitable = np.where(land, (suit >= 0.5).astype("int8"), np.int8(-1))
    return xr.Dataset(
        {"suitability": (("slice", "lat", "lon"), suit),
         "suitable": (("slice", "lat", "lon"), suitable),
         "land": (("slice", "lat", "lon"), land)},
        coords={"slice": [r[0] for r in rows], "model": ("slice", [r[1] for r in rows]),
                "scenario": ("slice", [r[2] for r in rows]),
                "period": ("slice", [r[3] for r in rows]),
                "year": ("slice", [r[4] for r in rows]), "lat": g.lat, "lon": g.lon})


@pytest.fixture
def ensemble() -> xr.Dataset:
    stack = _ensemble_stack()
    agree = agreement(stack)
    parts = []
    for per in ("2041-2060", "2081-2100"):
        sub = stack.isel(slice=np.flatnonzero(stack["period"].values == per))
        parts.append(partition(factorial(sub, factors=["model", "scenario"]),
                               factors=["model", "scenario"]))
    parts = xr.concat(parts, dim=xr.DataArray(["2041-2060", "2081-2100"],
                                              dims="partition_period"),
                      combine_attrs="override")
    return xr.merge([agree, parts.rename({"share": "variance_share"})],
                    combine_attrs="drop_conflicts")


def test_agreement_and_dominant_maps_are_drawn(ensemble, tmp_path):
    for fn, name in ((agreement_map, "agree.png"), (dominant_source_map, "dominant.png")):
        path = fn(ensemble, tmp_path / name)
        assert path.read_bytes().startswith(PNG)
    with pytest.raises(DataError, match="agreement"):
        agreement_map(ensemble.drop_vars("agreement"), tmp_path / "x.png")
    with pytest.raises(DataError, match="dominant"):
        dominant_source_map(ensemble.drop_vars("dominant"), tmp_path / "x.png")


def test_dominant_classes_named_by_their_flags(ensemble):
    ds = ensemble[["dominant"]]
    colours = _flag_colours(ds, "dominant")
    # the partition's own flags: -1 undefined, then the sources in order
    assert [c[0] for c in colours.values()] == ["model", "scenario", "model × scenario"]
    assert sorted(colours) == [0, 1, 2]


def test_ensemble_geotiffs_per_scenario_and_period_with_cf_tags(ensemble, tmp_path):
    files = export(ensemble, tmp_path)
    names = {p.name for p in files}
    for scen in ("low", "high"):
        for per in ("2041-2060", "2081-2100"):
            for layer in ("agreement", "consensus"):
                assert f"{layer}_{scen}_{per}.tif" in names
    assert "variance_share_2041-2060_model_scenario.tif" in names
    assert "dominant_2081-2100.tif" in names
    with rasterio.open(tmp_path / "consensus_high_2081-2100.tif") as r:
        tags = r.tags()
        assert tags["scenario"] == "high" and tags["period"] == "2081-2100"
        assert tags["flag_values"] == "-1 0 1"
        assert tags["flag_meanings"] == "not_land no_majority majority_suitable"
        assert tags["units"] == "1" and tags["long_name"]
        got = r.read(1)[::-1]  # rows north to south in the file
    want = ensemble["consensus"].sel(group="high 2081-2100").values
    np.testing.assert_array_equal(got, want)
    with rasterio.open(tmp_path / "variance_share_2041-2060_scenario.tif") as r:
        tags = r.tags()
        assert tags["source"] == "scenario" and tags["partition_period"] == "2041-2060"
        assert tags["units"] == "1" and "ANOVA" in tags["description"]
        got = r.read(1)[::-1]
    want = ensemble["variance_share"].sel(partition_period="2041-2060",
                                          source="scenario").values
    np.testing.assert_allclose(got, want, equal_nan=True)


def test_most_dissimilar_map_in_a_model_grid(series_big, tmp_path):
    path = most_dissimilar_map(series_big, tmp_path / "md.png")
    assert path.read_bytes().startswith(PNG)
    idx = list(range(series_big.sizes["slice"]))
    places, rows, cols = _grid_places(series_big, idx, "model")
    # one row per scenario and period, each row filled from the left, no two on one place
    assert len(set(places.values())) == len(idx)
    labels = list(series_big.slice.values)
    assert places[labels.index("baseline")] == (0, 0)
    for i, (r, c) in places.items():
        same_row = [cc for ii, (rr, cc) in places.items() if rr == r]
        assert sorted(same_row) == list(range(len(same_row)))
    assert novelty_map(series_big, tmp_path / "exdet.png", variable="exdet",
                       columns="model").read_bytes().startswith(PNG)


def test_importance_and_threshold_plots(tmp_path):
    imp = pd.DataFrame({"variable": ["bio1", "bio12", "bio6"],
                        "importance_mean": [0.02, 0.15, 0.07],
                        "importance_sd": [0.01, 0.02, 0.01]})
    assert importance_bars(imp, tmp_path / "imp.png").read_bytes().startswith(PNG)
    with pytest.raises(DataError, match="no importance"):
        importance_bars(imp.assign(importance_mean=np.nan), tmp_path / "x.png")
    thr = pd.DataFrame({
        "rule": ["p10"] * 3 + ["mtp"] * 3, "threshold": [0.3] * 3 + [0.1] * 3,
        "rule_of_run": [True] * 3 + [False] * 3, "slice": ["ref", "a", "b"] * 2,
        "scenario": ["baseline", "s", "s"] * 2, "period": ["p0", "p1", "p1"] * 2,
        "change_pct": [0.0, -10.0, -20.0, 0.0, -5.0, -8.0]})
    path = threshold_plot(thr, tmp_path / "thr.png", reference="ref")
    assert path.read_bytes().startswith(PNG)
