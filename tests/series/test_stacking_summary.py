"""Stacking slices, chains, and summarise with movement."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.series import (
    DETAIL_COLUMNS,
    SUMMARY_COLUMNS,
    bearing_deg,
    chains,
    change_table,
    movement_table,
    stack_slices,
    summarise,
)


def _slice(label, year, model, scenario, *, res=1.0, seed=0):
    g = make_grid(lon_min=-10, lon_max=-5, lat_min=40, lat_max=44, resolution=res)
    rng = np.random.default_rng(seed)
    shape = (g.sizes["lat"], g.sizes["lon"])
    s = rng.random(shape).astype(np.float32)
    ds = xr.Dataset({"suitability": (("lat", "lon"), s),
                     "suitable": (("lat", "lon"), (s > 0.5).astype(np.int8))},
                    coords={"lat": g.lat, "lon": g.lon})
    ds.attrs.update(slice_label=label, year=year, period=str(year), model=model,
                    scenario=scenario)
    return ds


def test_stack_slices_builds_the_contract():
    sl = [_slice("baseline", 1990.0, "observed", "baseline"),
          _slice("6ka", -4050.0, "alder", "past", seed=1)]
    st = stack_slices(sl, static={"land": sl[0]["suitable"] >= 0})
    assert st["suitable"].dims == ("slice", "lat", "lon")
    assert list(st["slice"].values) == ["baseline", "6ka"]
    assert st["year"].values.tolist() == [1990.0, -4050.0]
    assert st["model"].values.tolist() == ["observed", "alder"]
    assert st["land"].dims == ("lat", "lon")


def test_stack_slices_different_grids_error():
    sl = [_slice("baseline", 1990.0, "observed", "baseline"),
          _slice("21ka", -19050.0, "alder", "past", res=0.5)]
    with pytest.raises(DataError, match=r"slice '21ka' is on a different grid from 'baseline'"):
        stack_slices(sl)


def test_stack_slices_missing_variable():
    a = _slice("baseline", 1990.0, "observed", "baseline")
    b = _slice("6ka", -4050.0, "alder", "past").drop_vars("suitability")
    with pytest.raises(DataError, match=r"'6ka' lacks variable\(s\) \['suitability'\]"):
        stack_slices([a, b])


def test_chains_order(stack_factory):
    ds = stack_factory(labels=("baseline", "6ka", "21ka", "low_2050", "low_2090"),
                       years=(1990, -4050, -19050, 2050, 2090),
                       models=("observed", "alder", "alder", "alder", "alder"),
                       scenarios=("baseline", "past", "past", "low", "low"))
    ch = chains(ds)
    assert ch == {"alder past": ["21ka", "6ka", "baseline"],
                  "alder low": ["baseline", "low_2050", "low_2090"]}


def test_bearing_against_pyproj():
    # initial azimuth on the sphere vs the WGS84 geodesic azimuth of pyproj Geod.inv: they
    # differ by a few tenths of a degree at mid-latitudes for ~1000 km [computed with pyproj]
    from pyproj import Geod

    pts = [(-5.0, 40.0, 3.0, 48.0), (10.0, 50.0, 10.0, 55.0), (0.0, 45.0, 8.0, 45.0),
           (20.0, 60.0, 10.0, 52.0)]
    for lon1, lat1, lon2, lat2 in pts:
        az, _, _ = Geod(ellps="WGS84").inv(lon1, lat1, lon2, lat2)
        diff = (float(bearing_deg(lon1, lat1, lon2, lat2)) - az % 360 + 180) % 360 - 180
        assert abs(diff) < 0.3
    assert float(bearing_deg(0, 0, 0, 1)) == pytest.approx(0.0)
    assert float(bearing_deg(0, 0, 1, 0)) == pytest.approx(90.0)
    assert np.isnan(bearing_deg(1, 1, 1, 1))


def test_detail_columns(stack_factory):
    ds = stack_factory()
    tab = change_table(ds, detail=True)
    assert list(tab.columns) == SUMMARY_COLUMNS + DETAIL_COLUMNS
    ref = tab["suitable_area_km2"].iloc[0]
    np.testing.assert_allclose(tab["stable_pct"] + tab["loss_pct"], 100.0)
    np.testing.assert_allclose(tab["analog_area_km2"] + tab["novel_any_km2"],
                               tab["suitable_area_km2"], rtol=1e-9)
    assert (tab["novel_mess_km2"] <= tab["novel_any_km2"] + 1e-9).all()
    np.testing.assert_allclose(tab["novel_mess_km2"], tab["novel_area_km2"])
    assert (tab["gain_novel_km2"] <= tab["gain_km2"] + 1e-9).all()
    assert ((tab["lat_q10"] <= tab["lat_q50"]) & (tab["lat_q50"] <= tab["lat_q90"])).all()
    assert ref > 0
    # area-weighted quantiles against numpy's weighted inverted-CDF quantile (numpy >= 2.0)
    from timeslice.grid import cell_area

    s = ds["suitable"].isel(slice=1).values == 1
    w = cell_area(ds).values[s]
    e = np.broadcast_to(ds["elevation"].values, s.shape)[s]
    for q, col in ((0.1, "elevation_q10_m"), (0.5, "elevation_q50_m"), (0.9, "elevation_q90_m")):
        ref_q = np.quantile(e, q, weights=w, method="inverted_cdf")
        assert tab[col].iloc[1] == pytest.approx(float(ref_q), rel=1e-6)
    assert tab["elevation_mean_m"].iloc[1] == pytest.approx(float(np.average(e, weights=w)),
                                                            rel=1e-5)


def test_summarise_with_movement(stack_factory):
    ds = stack_factory(labels=("baseline", "21ka", "6ka", "low_2050", "low_2090"),
                       years=(1990, -19050, -4050, 2050, 2090),
                       models=("observed", "alder", "alder", "alder", "alder"),
                       scenarios=("baseline", "past", "past", "low", "low"))
    out, tab = summarise(ds, rate="2 km/yr", window=(-19050, 2000), detail=True)
    for v in ("reachable_none", "reachable_limited", "reachable_unlimited",
              "dynamic_stability_chain", "refugium_window", "refugium_window_analog"):
        assert v in out, v
    assert list(out["chain"].values) == ["alder past", "alder low"]
    # none <= limited <= unlimited, everywhere
    n, lim, u = (out[f"reachable_{a}"].values for a in ("none", "limited", "unlimited"))
    assert (n <= lim).all() and (lim <= u).all()
    assert (u == np.where(ds["suitable"].values == -1, -1, ds["suitable"].values)).all()
    for a in ("none", "limited", "unlimited"):
        assert (tab[f"{a}_area_km2"] <= tab["suitable_area_km2"] + 1e-6).all()
    assert tab.loc[tab["slice"] == "baseline", "chain"].item() == "start"
    mt = movement_table(ds, rate="2 km/yr")
    low = mt[mt["chain"] == "alder low"].set_index("slice")
    row = tab.set_index("slice").loc["low_2090"]
    assert row["limited_loss_km2"] == pytest.approx(low.loc["low_2090", "limited_loss_km2"])
    # identity per assumption: area(t) - area(start) = gain - loss
    for a in ("none", "limited", "unlimited"):
        d = low[f"{a}_area_km2"] - low.loc["baseline", f"{a}_area_km2"]
        np.testing.assert_allclose(d, low[f"{a}_gain_km2"] - low[f"{a}_loss_km2"], atol=1e-6)


def test_summarise_bad_window_and_chains(stack_factory):
    ds = stack_factory()
    with pytest.raises(DataError, match="contain no slice"):
        summarise(ds, window=(3000.0, 4000.0))
    with pytest.raises(DataError, match="`chains` must be 'auto'"):
        summarise(ds, chains="all")


def test_summarise_again_with_other_chains(stack_factory):
    ds = stack_factory()
    first, _ = summarise(ds, chains="auto")
    again, tab = summarise(first, chains={"only": ["baseline", "6ka"]})
    assert list(again["chain"].values) == ["only"]
    plain, _ = summarise(first)
    assert "chain" not in plain.dims and "refugium_chain" not in plain
