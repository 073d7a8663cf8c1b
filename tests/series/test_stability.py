"""Stability, refugia, static stability and geometric mean."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.series import (
    geometric_mean,
    minimum_suitability,
    refugium,
    stability,
    static_stability,
    summarise,
)


def _series(values, dtype=float):
    arr = np.asarray(values, dtype=dtype)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim == 2:  # one cell per column, no grid needed
        return xr.DataArray(arr[:, 0], dims=("slice",),
                            coords={"slice": [f"s{i}" for i in range(arr.shape[0])]})
    ns, ny, nx = arr.shape
    return xr.DataArray(
        arr,
        dims=("slice", "lat", "lon"),
        coords={"slice": [f"s{i}" for i in range(ns)], "lat": np.arange(ny) + 0.5,
                "lon": np.arange(nx) + 0.5},
    )


def test_static_stability_worked_example():
    # Worked example built from the definition SS = sum_t ln max(S_t, eps) (Graham et al. 2010,
    # Ecography 33:1062): S = (0.8, 0.5, 0.25) -> ln 0.8 + ln 0.5 + ln 0.25 = ln 0.1 = -2.302585
    # [computed]; geometric mean = 0.1 ** (1/3) = 0.464159 [computed].
    s = _series([0.8, 0.5, 0.25])
    assert float(static_stability(s)) == pytest.approx(np.log(0.1), rel=1e-6)
    assert float(geometric_mean(s)) == pytest.approx(0.1 ** (1 / 3), rel=1e-6)
    assert float(minimum_suitability(s)) == pytest.approx(0.25)


def test_static_stability_eps_floor():
    # S = 0 in one slice: ln max(0, 1e-6) = -13.815511 [computed], plus ln 1 = 0
    s = _series([1.0, 0.0])
    assert float(static_stability(s)) == pytest.approx(np.log(1e-6), rel=1e-6)
    assert float(static_stability(s, eps=1e-3)) == pytest.approx(np.log(1e-3), rel=1e-6)
    with pytest.raises(DataError, match="`eps`"):
        static_stability(s, eps=0.0)


def test_not_land_counts_as_unsuitable_and_never_land_is_nan():
    s = _series([[[0.9, np.nan]], [[np.nan, np.nan]]])
    ss = static_stability(s)
    assert float(ss[0, 0]) == pytest.approx(np.log(0.9) + np.log(1e-6), rel=1e-6)
    assert np.isnan(float(ss[0, 1]))
    assert np.isnan(float(geometric_mean(s)[0, 1]))


def test_stability_fraction_and_refugium():
    # 3 slices x 4 cells: suitable in 3, 2, 0 slices; last cell never land
    s = _series(
        [[[1, 1, 0, -1]], [[1, 0, 0, -1]], [[1, 1, -1, -1]]], dtype=np.int8
    )
    st = stability(s)
    np.testing.assert_allclose(st.values[0, :3], [1.0, 2 / 3, 0.0], rtol=1e-6)
    assert np.isnan(st.values[0, 3])
    np.testing.assert_array_equal(refugium(s).values[0], [True, False, False, False])
    assert st.attrs["units"] == "1" and "long_name" in st.attrs


def test_refugium_inside_every_suitable_and_stability_bounds(stack_factory):
    ds = stack_factory()
    ref = refugium(ds["suitable"])
    for i in range(ds.sizes["slice"]):
        assert not bool((ref & (ds["suitable"].isel(slice=i) != 1)).any())
    st = stability(ds["suitable"])
    v = st.values[np.isfinite(st.values)]
    assert (v >= 0).all() and (v <= 1).all()
    assert bool((ref == (st == 1)).all())


def test_bad_dim():
    s = _series([0.5, 0.5])
    with pytest.raises(DataError, match="no dimension 'time'"):
        stability(s, dim="time")


def test_summarise_adds_layers_and_table(stack_factory):
    ds = stack_factory()
    out, table = summarise(ds, chains={"past": ["21ka", "6ka", "baseline"]})
    assert out["change"].dims == ("slice", "lat", "lon")
    assert out["stability_all_slices"].dims == ("lat", "lon")
    assert out["refugium_all_slices"].dtype == bool
    assert out["refugium_chain"].dims == ("chain", "lat", "lon")
    assert out["chain_slices"].values.tolist() == ["21ka 6ka baseline"]
    assert len(table) == ds.sizes["slice"]
    assert "history" in out.attrs
    # the past-chain refugium contains the all-slice refugium
    past = out["refugium_chain"].sel(chain="past")
    assert not bool((out["refugium_all_slices"] & ~past).any())
    for v in ("refugium_all_slices_analog", "static_stability", "geometric_mean_suitability",
              "minimum_suitability", "refugium_analog_chain", "static_stability_chain"):
        assert v in out, v


def test_summarise_unknown_reference_lists_labels(stack_factory):
    ds = stack_factory()
    with pytest.raises(DataError, match=r"choose one of \['baseline', '21ka'"):
        summarise(ds, reference="nope")
    with pytest.raises(DataError, match=r"chains\['x'\].*'99ka'"):
        summarise(ds, chains={"x": ["99ka"]})


def test_stability_is_lazy(stack_factory, raise_if_dask_computes):
    ds = stack_factory().chunk({"lat": 2})
    with raise_if_dask_computes():
        st = stability(ds["suitable"])
        ref = refugium(ds["suitable"])
        ss = static_stability(ds["suitability"])
        gm = geometric_mean(ds["suitability"])
        mn = minimum_suitability(ds["suitability"])
    for layer in (st, ref, ss, gm, mn):
        assert layer.chunks is not None
    # summarise computes the table (one pass) but leaves the layers lazy
    with raise_if_dask_computes(max_computes=1):
        out, _ = summarise(ds)
    assert out["stability_all_slices"].chunks is not None and out["change"].chunks is not None


# ---- dynamic stability, windows, analog refugia -------------------------------------------

from timeslice.grid import make_grid  # noqa: E402
from timeslice.series import dynamic_stability, select_window  # noqa: E402


def _strip(values, years=None):
    """Slices x cells along the equator, 1-degree cells (~111.2 km apart)."""
    arr = np.asarray(values, dtype=float)[:, None, :]
    ns, _, nx = arr.shape
    g = make_grid(lon_min=0, lon_max=nx, lat_min=-0.5, lat_max=0.5, resolution=1.0)
    years = np.arange(ns) * 1000.0 if years is None else np.asarray(years, float)
    return xr.DataArray(arr, dims=("slice", "lat", "lon"),
                        coords={"slice": [f"s{i}" for i in range(ns)], "year": ("slice", years),
                                "lat": g.lat, "lon": g.lon})


def test_dynamic_stability_worked_example():
    # Worked example of the recursion in METHODS.md (a_0 = ln S_0; a_t = ln S_t + max over
    # cells within d of a_(t-1)): a suitable peak (0.9) moves one cell east per slice over a
    # background of 0.1. With d = 120 km (> 111.2 km cell spacing at the equator) the peak's
    # track scores 3 ln 0.9 = -0.316082 [computed]; static stability there is
    # ln 0.1 + ln 0.1 + ln 0.9 = -4.710531 [computed].
    S = np.full((3, 5), 0.1)
    S[0, 1] = S[1, 2] = S[2, 3] = 0.9
    da = _strip(S)
    dyn = dynamic_stability(da, distance_km=120.0)
    assert float(dyn[0, 3]) == pytest.approx(3 * np.log(0.9), rel=1e-6)
    assert float(static_stability(da)[0, 3]) == pytest.approx(2 * np.log(0.1) + np.log(0.9),
                                                              rel=1e-6)
    # cell 0 can only reach back to cell 0/1: ln 0.1 + (ln 0.1 + ln 0.9) = -4.710531 [computed]
    assert float(dyn[0, 0]) == pytest.approx(2 * np.log(0.1) + np.log(0.9), rel=1e-6)
    # with d = 100 km (< cell spacing) no move is possible: equal to static stability
    np.testing.assert_allclose(dynamic_stability(da, distance_km=100.0).values,
                               static_stability(da).values, rtol=1e-6)


def test_dynamic_zero_distance_is_static(stack_factory):
    # METHODS.md: d = 0 reduces to static stability
    ds = stack_factory()
    np.testing.assert_allclose(dynamic_stability(ds["suitability"], distance_km=0.0).values,
                               static_stability(ds["suitability"]).values, rtol=1e-6)


def test_dynamic_stability_bounds(stack_factory):
    # dynamic >= static (more paths), and <= T * ln max S (the best possible path)
    ds = stack_factory()
    s = ds["suitability"]
    dyn = dynamic_stability(s, distance_km=1000.0).values
    sta = static_stability(s).values
    ok = np.isfinite(sta)
    assert (dyn[ok] >= sta[ok] - 1e-5).all()
    # with d covering the whole grid, a_T = ln S_T + sum_t max_j ln S_t(j)
    logs = np.log(np.maximum(s.fillna(0).values, 1e-6))
    expect = logs[-1] + logs[:-1].reshape(s.shape[0] - 1, -1).max(axis=1).sum()
    big = dynamic_stability(s, distance_km=1e5).values
    np.testing.assert_allclose(big[ok], expect[ok], rtol=1e-5)


def test_dynamic_stability_rate_and_errors():
    S = np.full((3, 5), 0.1)
    S[0, 1] = S[1, 2] = S[2, 3] = 0.9
    da = _strip(S, years=[0, 1000, 2000])
    # 150 km/kyr over 1000-year steps = 150 km per step
    by_rate = dynamic_stability(da, rate="150 km/kyr")
    np.testing.assert_allclose(by_rate.values, dynamic_stability(da, distance_km=150).values)
    with pytest.raises(DataError, match="exactly one of"):
        dynamic_stability(da)
    with pytest.raises(DataError, match="`distance_km`"):
        dynamic_stability(da, distance_km=[1, 2])


def test_select_window_labels_and_years(stack_factory):
    ds = stack_factory()
    assert list(select_window(ds, ["6ka", "baseline"])["slice"].values) == ["baseline", "6ka"]
    past = select_window(ds, (-19050, 2000))
    assert list(past["slice"].values) == ["baseline", "21ka", "6ka"]
    with pytest.raises(DataError, match="contain no slice"):
        select_window(ds, (5000.0, 6000.0))
    with pytest.raises(DataError, match=r"unknown slice label\(s\) or period\(s\) \['3ka'\]"):
        select_window(ds, ["3ka"])
    # periods select every slice that has them (the fixture's periods are the years as text)
    assert list(select_window(ds, ["-19050", "6ka"])["slice"].values) == ["21ka", "6ka"]


def test_analog_refugium_is_inside_refugium(stack_factory):
    from timeslice.series import novel_mask

    ds = stack_factory()
    analog = ~novel_mask(ds)
    win = ["21ka", "6ka", "baseline"]
    r = refugium(ds["suitable"], window=win)
    ra = refugium(ds["suitable"], window=win, analog=analog)
    assert not bool((ra & ~r).any())
    # by hand: suitable and analog in every window slice
    sub = ds.sel(slice=win)
    hand = ((sub["suitable"] == 1) & (sub["mess"] >= 0) & (sub["nt1"] >= 0)
            & (sub["nt2"] <= 1)).all("slice")
    np.testing.assert_array_equal(ra.values, hand.values)
    assert ra.name == "refugium_analog" and ra.attrs["slices"] == "baseline 21ka 6ka"


@pytest.mark.parametrize(("lat_min", "lat_max", "lon_min", "lon_max", "res", "d_km"), [
    (40.0, 50.0, -10.0, 0.0, 0.5, 130.0),
    (70.0, 89.0, -20.0, 20.0, 1.0, 400.0),
    (-10.0, 10.0, -180.0, 180.0, 10.0, 2500.0),  # global in longitude: windows wrap
])
def test_neighbour_max_against_brute_force(rng, lat_min, lat_max, lon_min, lon_max, res, d_km):
    # The sparse-table neighbourhood max equals a direct search over all cell pairs with the
    # haversine distance (timeslice.grid.haversine_km; Sinnott 1984, Sky and Telescope 68:159).
    from timeslice.grid import haversine_km
    from timeslice.grid import is_global_lon
    from timeslice.series.stability import _half_widths, _neighbour_max

    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max,
                  resolution=res)
    lat, lon = g.lat.values, g.lon.values
    field = rng.normal(size=(lat.size, lon.size))
    got = _neighbour_max(field, _half_widths(lat, lon, d_km), wrap=is_global_lon(lon))
    LON, LAT = np.meshgrid(lon, lat)
    d = haversine_km(LON.ravel()[:, None], LAT.ravel()[:, None], LON.ravel()[None, :],
                     LAT.ravel()[None, :])
    within = d <= d_km * (1 + 1e-9)
    expect = np.where(within, field.ravel()[None, :], -np.inf).max(axis=1).reshape(field.shape)
    np.testing.assert_array_equal(got, expect)
