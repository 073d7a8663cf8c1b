"""Adding a novelty metric: one class and one layer-table entry (docs/extending.md, "A novelty
metric"). A throwaway metric — the number of predictors outside the reference range — is
registered, computed in the same pass as the built-in ones and written with its attributes."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice import layers
from timeslice.errors import ConfigError
from timeslice.transfer import (
    NoveltyMetric,
    OutputLayer,
    project_slice,
    register_metric,
    registered_metrics,
    unregister_metric,
)
from timeslice.transfer.files import project_file

VARS = ["bio1", "bio5", "bio12"]


class CountOutside(NoveltyMetric):
    """Number of predictors outside the reference range (a throwaway metric for the test)."""

    name = "count_outside"
    layers = (OutputLayer("n_outside", np.int16, np.int16(-1)),)
    blocks_seen: list[int] = []  # cells per call, to see the single pass

    def prepare(self, ref):
        self.lo = ref.values.min(axis=0)[:, None]
        self.hi = ref.values.max(axis=0)[:, None]

    def columns(self, good):
        CountOutside.blocks_seen.append(good.shape[1])
        return (((good < self.lo) | (good > self.hi)).sum(axis=0),)


@pytest.fixture
def count_outside():
    layers.register(layers.LayerSpec(
        "n_outside", "1", "predictors outside the reference range",
        "number of predictors whose value lies outside the reference range"), replace=True)
    register_metric(CountOutside)
    CountOutside.blocks_seen = []
    yield CountOutside
    unregister_metric("count_outside")
    layers.LAYERS.pop("n_outside", None)


def _expected(ds, reference_df):
    x = np.stack([ds[v].values for v in VARS]).astype(np.float64)
    lo = reference_df[VARS].min().to_numpy()[:, None, None]
    hi = reference_df[VARS].max().to_numpy()[:, None, None]
    n = ((x < lo) | (x > hi)).sum(axis=0).astype(np.int16)
    return np.where(np.isfinite(x).all(axis=0), n, np.int16(-1))


def test_registered_metric_is_computed_and_written(count_outside, fitted_logistic, reference_df,
                                                   slice_factory, tmp_path):
    ds = slice_factory(ny=20, nx=16, scale=2.0)
    assert count_outside in registered_metrics()
    out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                        threshold=0.5)
    # the built-in layers, then the new one, from one pass: every valid cell seen once
    assert list(out.data_vars) == ["suitability", "suitable", "mess", "most_dissimilar", "nt1",
                                   "nt2", "n_outside"]
    n_valid = int(np.isfinite(np.stack([ds[v].values for v in VARS])).all(axis=0).sum())
    assert sum(CountOutside.blocks_seen) == n_valid
    # reference: the definition, in plain numpy on the grid
    np.testing.assert_array_equal(out["n_outside"].values, _expected(ds, reference_df))
    attrs = out["n_outside"].attrs
    assert attrs["long_name"] == "predictors outside the reference range"
    assert attrs["units"] == "1" and attrs["reference_points"] == len(reference_df)
    # written by the file path with the same values and attributes
    src = tmp_path / "slice.nc"
    ds.drop_vars("land").to_netcdf(src)
    project_file(fitted_logistic, src, tmp_path / "out.nc", variables=VARS,
                 reference=reference_df, threshold=0.5)
    with xr.open_dataset(tmp_path / "out.nc", mask_and_scale=False) as back:
        np.testing.assert_array_equal(back["n_outside"].values, _expected(ds, reference_df))
        assert back["n_outside"].attrs["long_name"] == attrs["long_name"]
        assert back["n_outside"].attrs["_FillValue"] == -1


def test_metrics_argument_selects(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory()
    layers.register(layers.LayerSpec("n_outside", "1", "predictors outside the reference range"),
                    replace=True)
    try:
        out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                            threshold=0.5, metrics=[CountOutside])
    finally:
        layers.LAYERS.pop("n_outside", None)
    assert list(out.data_vars) == ["suitability", "suitable", "n_outside"]
    np.testing.assert_array_equal(out["n_outside"].values, _expected(ds, reference_df))


def test_metric_without_table_entry_is_one_clear_line():
    class Unlisted(NoveltyMetric):
        name = "unlisted"
        layers = (OutputLayer("no_such_layer", np.float32),)

    with pytest.raises(ConfigError, match="'no_such_layer' is not in the layer table"):
        register_metric(Unlisted)
    assert Unlisted not in registered_metrics()
