"""Chunked projection against scikit-learn's own predict_proba on the same cells."""

from __future__ import annotations

import warnings

import dask
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from sklearn.linear_model import LogisticRegression

from timeslice.errors import ConfigError, DataError
from timeslice.transfer import auto_chunks, exdet, mess, project, project_slice
from timeslice.transfer.blocks import BYTES_PER_CELL_FIXED, BYTES_PER_CELL_PER_VAR

VARS = ["bio1", "bio5", "bio12"]  # same as the fixtures in conftest.py


def _cells(ds, variables):
    x = np.stack([ds[v].values.ravel() for v in variables], axis=1).astype(np.float64)
    return x, np.isfinite(x).all(axis=1)


def test_project_equals_sklearn_predict_proba(fitted_logistic, slice_factory):
    # Reference: LogisticRegression.predict_proba (scikit-learn) on the same cells.
    ds = slice_factory()
    got = project(fitted_logistic, ds, variables=VARS)
    x, ok = _cells(ds, VARS)
    exp = np.full(x.shape[0], np.nan, dtype=np.float32)
    exp[ok] = fitted_logistic.predict_proba(pd.DataFrame(x[ok], columns=VARS))[:, 1]
    np.testing.assert_array_equal(got.values.ravel(), exp)
    assert got.dtype == np.float32 and got.dims == ("lat", "lon") and got.name == "suitability"
    assert np.isnan(got.values[~ds["land"].values]).all()
    for key in ("units", "long_name", "description"):
        assert key in got.attrs


def test_project_reorders_to_fitted_feature_names(fitted_logistic, slice_factory):
    ds = slice_factory()
    a = project(fitted_logistic, ds, variables=VARS)
    b = project(fitted_logistic, ds, variables=list(reversed(VARS)))
    xr.testing.assert_identical(a, b)


def test_project_plain_array_estimator_no_feature_name_warning(reference_df, slice_factory, rng):
    x = reference_df.to_numpy()
    y = (x[:, 0] > 0).astype(int)
    model = LogisticRegression().fit(x, y)  # fitted on an array: no feature_names_in_
    ds = slice_factory()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # sklearn warns when names are given but not fitted
        got = project(model, ds, variables=VARS)
    xc, ok = _cells(ds, VARS)
    np.testing.assert_array_equal(got.values.ravel()[ok], model.predict_proba(xc[ok])[:, 1].astype(np.float32))


def test_project_lazy_and_chunked_equals_numpy(fitted_logistic, slice_factory, no_compute):
    ds = slice_factory(ny=20, nx=24)
    eager = project(fitted_logistic, ds, variables=VARS)
    with no_compute():
        lazy = project(fitted_logistic, ds.chunk({"lat": 7, "lon": 9}), variables=VARS)
    assert lazy.chunks == ((7, 7, 6), (9, 9, 6))
    np.testing.assert_allclose(lazy.values, eager.values, rtol=1e-6, equal_nan=True)


def test_project_slice_layers(fitted_logistic, reference_df, slice_factory, no_compute):
    ds = slice_factory(ny=14, nx=18, shift=0.4, scale=1.6)
    with no_compute():
        out = project_slice(
            fitted_logistic, ds, variables=VARS, reference=reference_df, threshold=0.4,
            chunks={"lat": 5, "lon": 6},
        )
    assert set(out.data_vars) == {"suitability", "suitable", "mess", "most_dissimilar", "nt1",
                                  "nt2"}
    out = out.compute()
    suit = out["suitability"].values
    land = ds["land"].values
    np.testing.assert_array_equal(out["suitable"].values[~land], -1)
    np.testing.assert_array_equal(out["suitable"].values[land], (suit[land] >= 0.4).astype(np.int8))
    assert out["suitable"].dtype == np.int8 and out["suitable"].encoding["_FillValue"] == -1
    xr.testing.assert_allclose(out[["mess", "most_dissimilar"]], mess(reference_df[VARS], ds))
    xr.testing.assert_allclose(out[["nt1", "nt2"]], exdet(reference_df[VARS], ds))
    assert out.attrs["reference_set"] == "background sample within the calibration area"
    assert out.attrs["slice_label"] == "test" and out.attrs["year"] == 1990.0
    for v in out.data_vars:
        for key in ("units", "long_name", "description"):
            assert key in out[v].attrs, (v, key)


def test_clamping(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory(shift=0.0, scale=3.0)  # wide spread: many cells outside the range
    lo, hi = reference_df[VARS].min().to_numpy(), reference_df[VARS].max().to_numpy()
    clamped = project(fitted_logistic, ds, variables=VARS, clamp=True, reference=reference_df)
    raw = project(fitted_logistic, ds, variables=VARS)
    x, ok = _cells(ds, VARS)
    exp = fitted_logistic.predict_proba(pd.DataFrame(np.clip(x[ok], lo, hi), columns=VARS))[:, 1]
    np.testing.assert_array_equal(clamped.values.ravel()[ok], exp.astype(np.float32))
    out = project_slice(
        fitted_logistic, ds, variables=VARS, reference=reference_df, threshold=0.5, clamp=True,
    )
    xr.testing.assert_identical(out["suitability"], clamped)
    eff = out["clamp_effect"].values.ravel()
    np.testing.assert_allclose(eff[ok], (clamped - raw).values.ravel()[ok], atol=1e-7)
    inside = ok & ((x >= lo) & (x <= hi)).all(axis=1)
    assert (eff[inside] == 0).all()
    assert np.abs(eff[ok & ~inside]).max() > 0
    assert np.isnan(eff[~ok]).all()


def test_determinism_across_thread_counts(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory(ny=30, nx=30).chunk({"lat": 8, "lon": 8})
    out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df, threshold=0.5)
    with dask.config.set(scheduler="threads", num_workers=1):
        a = out.compute()
    with dask.config.set(scheduler="threads", num_workers=2):
        b = out.compute()
    with dask.config.set(scheduler="synchronous"):
        c = out.compute()
    for v in a.data_vars:
        assert a[v].values.tobytes() == b[v].values.tobytes() == c[v].values.tobytes(), v


def test_project_errors(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory()
    with pytest.raises(DataError, match="slice 'test' has no predictor 'bio7'"):
        project(fitted_logistic, ds, variables=["bio1", "bio5", "bio7"])
    with pytest.raises(DataError, match="differ from the predictors the model was fitted on"):
        project(fitted_logistic, ds.assign(bio7=ds.bio1), variables=["bio1", "bio5", "bio7"])
    with pytest.raises(ConfigError, match="no predict_proba"):
        project(object(), ds, variables=VARS)
    with pytest.raises(ConfigError, match="needs `reference`"):
        project(fitted_logistic, ds, variables=VARS, clamp=True)
    with pytest.raises(ConfigError, match=r"`threshold` must be in \[0, 1\], got 1.5"):
        project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df, threshold=1.5)
    with pytest.raises(ConfigError, match="`chunks`"):
        project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                      threshold=0.5, chunks="big")
    with pytest.raises(ConfigError, match=r"`chunks\['lat'\]` must be a positive integer"):
        project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                      threshold=0.5, chunks={"lat": 0})
    whole = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                          threshold=0.5, chunks={"lat": -1, "lon": 5})
    assert whole["mess"].chunks[0] == (ds.sizes["lat"],)
    with pytest.raises(ConfigError, match="dim 'time'"):
        project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                      threshold=0.5, chunks={"time": 3})
    with pytest.raises(DataError, match="`land` must be bool"):
        project_slice(fitted_logistic, ds.assign(land=ds.land.astype(int)), variables=VARS,
                      reference=reference_df, threshold=0.5)


def test_auto_chunks_budget():
    sizes = {"lat": 2160, "lon": 4320}
    c = auto_chunks(sizes, n_variables=8, budget_mb=64)
    per_cell = BYTES_PER_CELL_PER_VAR * 8 + BYTES_PER_CELL_FIXED  # our measured estimate
    assert c["lat"] * c["lon"] * per_cell <= 64e6
    assert c["lon"] == 4320  # whole rows fit
    small = auto_chunks(sizes, n_variables=8, budget_mb=1)
    assert small["lon"] < 4320 and small["lat"] * small["lon"] * per_cell <= 1e6
    with pytest.raises(ConfigError, match="budget"):
        auto_chunks(sizes, n_variables=8, budget_mb=0)


class _BrokenModel:
    """Has predict_proba but returns something unusable."""

    def __init__(self, mode):
        self.mode = mode

    def predict_proba(self, x):
        if self.mode == "raise":
            raise ValueError("X has 3 features, but the model expects 4")
        if self.mode == "shape":
            return np.ones(len(x))
        return np.column_stack([np.zeros(len(x)), np.full(len(x), 3.0)])


@pytest.mark.parametrize(("mode", "match"), [
    ("raise", "predict_proba failed on the reference sample"),
    ("shape", "returned shape"),
    ("range", r"outside \[0, 1\]"),
])
def test_broken_estimator_fails_before_compute(mode, match, reference_df, slice_factory):
    ds = slice_factory().chunk({"lat": 4})
    with pytest.raises(DataError, match=match):
        project_slice(_BrokenModel(mode), ds, variables=VARS, reference=reference_df,
                      threshold=0.5)


def test_netcdf_round_trip(fitted_logistic, reference_df, slice_factory, tmp_path):
    # The layers and their CF encodings survive a write/read through netCDF4.
    from timeslice.io import atomic_path

    ds = slice_factory()
    out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                        threshold=0.5, clamp=True, chunks={"lat": 5})
    path = tmp_path / "slice.nc"
    with atomic_path(path) as tmp:
        out.to_netcdf(tmp, engine="netcdf4")
    with xr.open_dataset(path, mask_and_scale=False) as back:
        assert back["suitable"].dtype == np.int8 and back["most_dissimilar"].dtype == np.int16
        np.testing.assert_array_equal(back["suitable"].values, out["suitable"].values)
        np.testing.assert_array_equal(back["most_dissimilar"].values, out["most_dissimilar"].values)
        np.testing.assert_array_equal(back["most_dissimilar"].attrs["flag_values"], [0, 1, 2])
        assert back["most_dissimilar"].attrs["flag_meanings"] == "bio1 bio5 bio12"
        assert back["suitable"].attrs["_FillValue"] == -1
        for v in ("suitability", "mess", "nt1", "nt2", "clamp_effect"):
            np.testing.assert_array_equal(back[v].values, out[v].values)
        assert back.attrs["reference_set"] == "background sample within the calibration area"


def test_all_sea_chunk(fitted_logistic, reference_df, slice_factory):
    # A chunk with no land at all (polar rows, open ocean) gives fill values, not an error.
    ds = slice_factory(ny=10, nx=8)
    for v in VARS:
        ds[v][:5] = np.nan
    ds["land"][:5] = False
    out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                        threshold=0.5, clamp=True, chunks={"lat": 5}).compute()
    assert np.isnan(out["suitability"].values[:5]).all()
    assert (out["suitable"].values[:5] == -1).all()
    assert (out["most_dissimilar"].values[:5] == -1).all()
    for v in ("mess", "nt1", "nt2", "clamp_effect"):
        assert np.isnan(out[v].values[:5]).all()
    assert np.isfinite(out["suitability"].values[5:][ds["land"].values[5:]]).all()
