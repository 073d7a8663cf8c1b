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
    assert out["stability"].dims == ("lat", "lon")
    assert out["refugium"].dtype == bool
    assert "refugium_past" in out and out["refugium_past"].attrs["slices"] == "21ka 6ka baseline"
    assert len(table) == ds.sizes["slice"]
    assert "history" in out.attrs
    # the past-window refugium contains the all-slice refugium
    assert not bool((out["refugium"] & ~out["refugium_past"]).any())


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
    assert out["stability"].chunks is not None and out["change"].chunks is not None
