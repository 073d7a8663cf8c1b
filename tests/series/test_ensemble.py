"""Model agreement and uncertainty partitioning."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.series.ensemble import (
    agreement,
    agreement_table,
    factorial,
    partition,
    partition_table,
)

MODELS = ("alder", "birch", "cedar")
SCEN = ("low", "high")
PERIODS = ("2041-2060", "2081-2100")


def _ensemble_stack(make_stack, *, models=MODELS, scenarios=SCEN, periods=PERIODS):
    labels, years, mods = ["baseline"], [1990.0], ["observed"]
    scens, pers = ["baseline"], ["1971-2000"]
    for m, s, p in itertools.product(models, scenarios, periods):
        labels.append(f"{m}_{s}_{p}")
        years.append(2050.0 if p.startswith("2041") else 2090.0)
        mods.append(m)
        scens.append(s)
        pers.append(p)
    ds = make_stack(labels=labels, years=years, models=mods, scenarios=scens)
    return ds.assign_coords(period=("slice", pers))


def test_agreement_by_hand(stack_factory):
    ds = _ensemble_stack(stack_factory)
    ag = agreement(ds)
    assert ag.sizes["group"] == len(SCEN) * len(PERIODS)
    assert set(ag["n_models"].values) == {3}
    g = 1
    scen, per = str(ag["scenario"].values[g]), str(ag["period"].values[g])
    sel = ds.where((ds["scenario"] == scen) & (ds["period"] == per), drop=True)
    s = sel["suitable"].values
    land = (s >= 0).sum(0)
    hits = (s == 1).sum(0)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(land > 0, hits / land, np.nan)
    np.testing.assert_allclose(ag["agreement"].values[g], frac, rtol=1e-6)
    np.testing.assert_array_equal(ag["consensus"].values[g],
                                  np.where(land > 0, (2 * hits > land).astype(int), -1))
    c = sel["suitability"].values
    # mean and SD with divisor n against numpy (nanmean / nanstd, ddof=0)
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):
        np.testing.assert_allclose(ag["suitability_mean"].values[g], np.nanmean(c, 0), rtol=1e-5)
        np.testing.assert_allclose(ag["suitability_sd"].values[g], np.nanstd(c, 0), rtol=1e-4,
                                   atol=1e-6)
    assert ag["consensus"].attrs["flag_meanings"] == "not_land no_majority majority_suitable"
    tab = agreement_table(ag)
    assert (tab["all_models_km2"] <= tab["majority_km2"] + 1e-9).all()
    assert (tab["majority_km2"] <= tab["any_model_km2"] + 1e-9).all()


def test_agreement_unknown_group_key(stack_factory):
    ds = _ensemble_stack(stack_factory)
    with pytest.raises(DataError, match="no slice coordinate 'decade'"):
        agreement(ds, by=("scenario", "decade"))


def _statsmodels_shares(cell: np.ndarray, names):
    smf = pytest.importorskip("statsmodels.formula.api")
    from statsmodels.stats.anova import anova_lm

    k = cell.ndim
    cols = [f"f{i}" for i in range(k)]
    rows = [dict(zip(cols, idx), y=cell[idx]) for idx in itertools.product(*map(range, cell.shape))]
    df = pd.DataFrame(rows)
    terms = [":".join(f"C({cols[a]})" for a in s)
             for r in range(1, k) for s in itertools.combinations(range(k), r)]
    fit = smf.ols("y ~ " + " + ".join(terms), data=df).fit()
    table = anova_lm(fit)  # type I SS; equal to type II/III on a balanced design
    return (table["sum_sq"] / table["sum_sq"].sum()).to_numpy()


@pytest.mark.parametrize("shape", [(2, 3, 2), (3, 2), (2, 2, 2, 2)])
def test_partition_against_statsmodels(rng, shape):
    # Reference: statsmodels OLS + anova_lm with every effect except the highest-order
    # interaction, whose SS is then the residual SS (no replication).
    names = ["algorithm", "model", "scenario", "period"][: len(shape)]
    y = rng.random((*shape, 2, 3))
    da = xr.DataArray(y, dims=(*names, "lat", "lon"),
                      coords={"lat": [0.5, 1.5], "lon": [0.5, 1.5, 2.5]})
    parts = partition(da, factors=names)
    assert parts["share"].sizes["source"] == 2 ** len(shape) - 1
    assert parts.attrs["residual_source"] == ":".join(names)
    for i, j in [(0, 0), (1, 2)]:
        ref = _statsmodels_shares(y[..., i, j], names)
        np.testing.assert_allclose(parts["share"].values[:, i, j], ref, rtol=1e-5, atol=1e-7)
    np.testing.assert_allclose(parts["share"].sum("source").values, 1.0, rtol=1e-5)
    tab = partition_table(parts)
    assert tab["mean_share"].sum() == pytest.approx(1.0, rel=1e-5)


def test_partition_pure_main_effect():
    # y = model effect only: the model share is 1 exactly
    y = np.array([0.1, 0.5, 0.9])[None, :, None, None, None] + np.zeros((2, 3, 2, 1, 1))
    da = xr.DataArray(y, dims=("algorithm", "model", "scenario", "lat", "lon"),
                      coords={"lat": [0.5], "lon": [0.5]})
    parts = partition(da)
    share = dict(zip(parts["source"].values, parts["share"].values[:, 0, 0]))
    assert share["model"] == pytest.approx(1.0)
    assert int(parts["dominant"].values[0, 0]) == list(parts["source"].values).index("model")


def test_partition_single_level_error():
    da = xr.DataArray(np.zeros((1, 3, 2, 1, 1)), dims=("algorithm", "model", "scenario", "lat",
                                                        "lon"),
                      coords={"algorithm": ["ellipsoid"]})
    with pytest.raises(DataError, match=r"'algorithm' has a single level \['ellipsoid'\].*at "
                                        "least 2 levels"):
        partition(da)


def test_factorial_from_stack(stack_factory):
    ds = _ensemble_stack(stack_factory)
    f = factorial(ds, factors=("model", "scenario"), select={"period": "2081-2100"})
    assert f.dims == ("model", "scenario", "lat", "lon")
    assert list(f["model"].values) == list(MODELS)
    lab = "birch_high_2081-2100"
    np.testing.assert_array_equal(f.sel(model="birch", scenario="high").values,
                                  ds["suitability"].sel(slice=lab).values)
    parts = partition(f.fillna(0.0), factors=("model", "scenario"))
    assert list(parts["source"].values) == ["model", "scenario", "model:scenario"]


def test_factorial_unbalanced_and_duplicate(stack_factory):
    ds = _ensemble_stack(stack_factory)
    with pytest.raises(DataError, match="appears twice"):
        factorial(ds.sel(slice=ds["model"] != "observed"), factors=("model", "scenario"))
    drop = ds.sel(slice=[s for s in ds["slice"].values if s != "cedar_low_2081-2100"])
    with pytest.raises(DataError, match="unbalanced design"):
        factorial(drop, factors=("model", "scenario"), select={"period": "2081-2100"})
