"""Predictor screening by correlation and variance inflation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from timeslice.errors import ConfigError, DataError
from timeslice.niche.select import screen, vif


def _frame(rng, n=500):
    a = rng.normal(size=n)
    b = rng.normal(size=n)
    c = rng.normal(size=n)
    return pd.DataFrame(
        {
            "a": a,
            "a_twin": a + rng.normal(0, 0.1, n),  # |r| about 0.995 with a
            "b": b,
            "c": c,
            "mix": a + b + c + rng.normal(0, 0.3, n),  # |r| ~ 0.55 with each, high VIF
        }
    )


def test_vif_matches_statsmodels(rng):
    # Reference: statsmodels.stats.outliers_influence.variance_inflation_factor (statsmodels
    # 0.14) on the design with a constant column, i.e. 1/(1 - R^2) of each column on the others.
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    X = _frame(rng)[["a", "b", "c", "mix"]]
    design = np.column_stack([np.ones(len(X)), X.to_numpy()])
    ref = [variance_inflation_factor(design, j) for j in range(1, design.shape[1])]
    np.testing.assert_allclose(vif(X), ref, rtol=1e-8)


def test_screen_correlation_honours_priority(rng):
    X = _frame(rng)
    kept, table = screen(X, max_abs_r=0.7, max_vif=None)
    assert "a" in kept and "a_twin" not in kept
    kept2, table2 = screen(X, max_abs_r=0.7, max_vif=None, priority=["a_twin"])
    assert "a_twin" in kept2 and "a" not in kept2
    reason = table2.set_index("variable").loc["a", "reason"]
    assert reason.startswith("|r| = ") and "with a_twin (> 0.7)" in reason
    assert list(table.columns) == ["variable", "kept", "reason", "max_abs_r", "vif"]


def test_screen_vif_drops_lowest_priority(rng):
    X = _frame(rng)[["a", "b", "c", "mix"]]
    # every VIF exceeds 5 here (mix is the sum of the others); the lowest-priority one goes first
    kept, table = screen(X, max_abs_r=None, max_vif=5.0, priority=["mix", "c", "b", "a"])
    assert "a" not in kept and "mix" in kept
    assert table.set_index("variable").loc["a", "reason"].startswith("VIF")
    assert (table.loc[table.kept, "vif"] <= 5.0).all()


def test_screen_errors(rng):
    X = _frame(rng)
    with pytest.raises(ConfigError, match="priority names 'bio99'"):
        screen(X, priority=["bio99"])
    with pytest.raises(DataError, match="every candidate predictor is .near-.constant"):
        screen(pd.DataFrame({"flat": np.full(50, 3.0), "flat2": 7.0 + 1e-7 * rng.random(50)}))
    X3 = X.assign(gone=np.nan)
    with pytest.raises(DataError, match="predictor 'gone' is missing everywhere"):
        screen(X3)
    with pytest.raises(ConfigError, match="screen_max_r"):
        screen(X, max_abs_r=1.5)


def test_near_constant_predictor_is_dropped_with_its_reason(rng):
    # a predictor constant to 1e-6 would put every future cell outside its calibration range;
    # it is dropped, the others are screened as before (same result as without it)
    X = _frame(rng)
    kept0, _ = screen(X)
    for extra in (np.full(len(X), 3.0), 5.0 + 1e-6 * rng.random(len(X))):
        kept, table = screen(X.assign(flat=extra))
        assert kept == kept0
        row = table.set_index("variable").loc["flat"]
        assert not row["kept"] and row["reason"].startswith("near-constant")
        assert list(table["variable"]) == [*X.columns, "flat"]
