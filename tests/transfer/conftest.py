"""Fixtures of the transfer tests: tiny prepared slices, reference samples, a fitted estimator,
and a dask scheduler that fails on any compute (proves laziness)."""

from __future__ import annotations

import contextlib

import dask
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from sklearn.linear_model import LogisticRegression

VARS = ["bio1", "bio5", "bio12"]


class _ComputeForbidden(RuntimeError):
    pass


def _raising_scheduler(dsk, keys, **kwargs):
    raise _ComputeForbidden("a dask graph was computed where the code should stay lazy")


@pytest.fixture
def no_compute():
    """Context manager: any dask compute inside it raises (like xarray's raise_if_dask_computes)."""

    @contextlib.contextmanager
    def _ctx():
        with dask.config.set(scheduler=_raising_scheduler):
            yield

    return _ctx


@pytest.fixture
def slice_factory(rng):
    """Return a function making a prepared slice with bio variables, land, NaN off land."""

    def _make(ny=12, nx=16, variables=VARS, shift=0.0, scale=1.0, sea_frac=0.15):
        lat = 40.0 + 0.5 * np.arange(ny) + 0.25
        lon = -20.0 + 0.5 * np.arange(nx) + 0.25
        land = rng.uniform(size=(ny, nx)) > sea_frac
        data = {}
        for v in variables:
            a = (rng.normal(shift, scale, size=(ny, nx))).astype(np.float32)
            a[~land] = np.nan
            data[v] = (("lat", "lon"), a, {"units": "1", "long_name": v})
        data["land"] = (("lat", "lon"), land)
        ds = xr.Dataset(data, coords={"lat": lat, "lon": lon})
        ds.attrs = {
            "slice_label": "test", "year": 1990.0, "period": "1981-2010",
            "model": "observed", "scenario": "baseline", "sea_level": 0.0,
        }
        return ds

    return _make


@pytest.fixture
def reference_df(rng):
    """Background-like reference sample with correlated columns."""
    n = 400
    a = rng.normal(0, 1, n)
    b = 0.5 * a + rng.normal(0, 0.8, n)
    c = rng.normal(0, 1.2, n)
    return pd.DataFrame({"bio1": a, "bio5": b, "bio12": c})


@pytest.fixture
def fitted_logistic(reference_df, rng):
    """A scikit-learn LogisticRegression fitted on a DataFrame (so it has feature_names_in_)."""
    x = reference_df
    y = (x["bio1"] - 0.3 * x["bio12"] + rng.normal(0, 0.5, len(x)) > 0).astype(int)
    return LogisticRegression().fit(x, y)
