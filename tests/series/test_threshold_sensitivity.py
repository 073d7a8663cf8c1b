"""Threshold sensitivity and threshold-free change, checked against the published rule
definitions written out here and areas from the spherical-zone formula."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from sklearn.linear_model import LogisticRegression

from timeslice.errors import DataError
from timeslice.grid import make_grid
from timeslice.series.thresholds import (
    CONTINUOUS_COLUMNS,
    THRESHOLD_COLUMNS,
    continuous_change_table,
    rule_thresholds,
    sensitivity_summary,
    threshold_table,
)

#: Authalic radius of WGS 84 (Snyder 1987, USGS Prof. Paper 1395, p. 16), km.
R_KM = 6371.0072


def _zone_area(lat: np.ndarray, lon: np.ndarray) -> np.ndarray:
    """A = R² Δλ (sin φ2 − sin φ1) per cell (area of a spherical zone segment), written out
    here independently of timeslice.grid."""
    d = lat[1] - lat[0]
    s = np.sin(np.deg2rad(lat + d / 2)) - np.sin(np.deg2rad(lat - d / 2))
    return R_KM**2 * np.deg2rad(lon[1] - lon[0]) * np.outer(s, np.ones(lon.size))


def _stack(rng, n_slices=5):
    g = make_grid(lon_min=10.0, lon_max=20.0, lat_min=40.0, lat_max=48.0, resolution=0.5)
    shape = (n_slices, g.sizes["lat"], g.sizes["lon"])
    land = np.ones(shape, dtype=bool)
    land[:, :2, :] = False  # sea rows
    land[2, :, :3] = False  # a slice with less land
    suit = rng.random(shape).astype("float32")
    suit[~land] = np.nan
    calib = np.zeros(shape[1:], dtype=bool)
    calib[4:12, 5:15] = True
    rows = [("ref", "observed", "baseline", "1981-2010"), ("a1", "a", "s1", "2050"),
            ("b1", "b", "s1", "2050"), ("c1", "c", "s1", "2050"), ("a2", "a", "s2", "2090")]
    rows = rows[:n_slices]
    return xr.Dataset(
        {"suitability": (("slice", "lat", "lon"), suit),
         "land": (("slice", "lat", "lon"), land),
         "calibration_area": (("lat", "lon"), calib)},
        coords={"slice": [r[0] for r in rows], "model": ("slice", [r[1] for r in rows]),
                "scenario": ("slice", [r[2] for r in rows]),
                "period": ("slice", [r[3] for r in rows]),
                "year": ("slice", np.arange(n_slices, dtype=float)),
                "lat": g.lat, "lon": g.lon})


def test_rule_thresholds_follow_the_published_definitions(rng):
    X = pd.DataFrame({"t": rng.normal(0, 1, 400), "p": rng.normal(0, 1, 400)})
    y = (X["t"] + 0.5 * rng.normal(0, 1, 400) > 0.8).astype(int).to_numpy()
    model = LogisticRegression().fit(X, y)
    fit = SimpleNamespace(model=model, variables=["t", "p"], presence=X[y == 1],
                          background=X[y == 0])
    got = rule_thresholds(fit, value=0.42)
    pres = model.predict_proba(X[y == 1])[:, 1]
    back = model.predict_proba(X[y == 0])[:, 1]
    # minimum training presence (Pearson et al. 2007, J. Biogeogr. 34:102): the lowest score
    assert got["mtp"] == pytest.approx(pres.min(), abs=0)
    # 10th percentile training presence: the (ceil(0.1 (n-1)) + 1)-th smallest score, the
    # "higher" quantile (Hyndman & Fan 1996 type with no interpolation; as documented in
    # timeslice.niche.evaluate.threshold)
    n = pres.size
    assert got["p10"] == np.sort(pres)[math.ceil(0.1 * (n - 1))]
    # maximum of sensitivity + specificity over every distinct score, lowest on ties
    # (Liu et al. 2005, Ecography 28:385; 2013, J. Biogeogr. 40:778), by brute force
    best, arg = -1.0, None
    for t in np.unique(np.concatenate([pres, back])):
        v = np.mean(pres >= t) + np.mean(back < t)
        if v > best + 1e-12:
            best, arg = v, t
    assert got["max_sss"] == arg
    assert got["fixed"] == 0.42
    assert "fixed" not in rule_thresholds(fit)


def test_threshold_table_reproduces_each_rules_area(rng):
    ds = _stack(rng)
    rules = {"p10": 0.3, "mtp": 0.05, "max_sss": 0.55, "fixed": 0.9}
    t = threshold_table(ds, rules, reference="ref", rule_of_run="max_sss")
    assert list(t.columns) == list(THRESHOLD_COLUMNS)
    assert len(t) == len(rules) * ds.sizes["slice"]
    area = _zone_area(ds.lat.values, ds.lon.values)
    s = ds["suitability"].values
    land = ds["land"].values
    for rule, thr in rules.items():
        on = land & (np.nan_to_num(s, nan=-1.0) >= thr)
        a_ref = area[on[0]].sum()
        sub = t[t["rule"] == rule].reset_index(drop=True)
        for i in range(ds.sizes["slice"]):
            np.testing.assert_allclose(sub.loc[i, "suitable_area_km2"], area[on[i]].sum(),
                                       rtol=1e-12)
            # identities: change = gain - loss, in % of the reference area
            np.testing.assert_allclose(sub.loc[i, "change_km2"],
                                       sub.loc[i, "gain_km2"] - sub.loc[i, "loss_km2"],
                                       rtol=1e-9, atol=1e-6)
            np.testing.assert_allclose(sub.loc[i, "change_pct"],
                                       100 * (area[on[i]].sum() - a_ref) / a_ref, rtol=1e-12)
    assert t.loc[t["rule"] == "max_sss", "rule_of_run"].all()
    assert not t.loc[t["rule"] != "max_sss", "rule_of_run"].any()
    # a lower threshold never gives a smaller area (monotone in t)
    by = t.pivot(index="slice", columns="rule", values="suitable_area_km2")
    assert (by["mtp"] >= by["p10"]).all() and (by["p10"] >= by["max_sss"]).all()


def test_continuous_change_over_the_calibration_area(rng):
    ds = _stack(rng)
    c = continuous_change_table(ds, reference="ref")
    assert list(c.columns) == list(CONTINUOUS_COLUMNS)
    area = _zone_area(ds.lat.values, ds.lon.values)
    s = ds["suitability"].values.astype(float)
    calib = ds["calibration_area"].values
    for i in range(ds.sizes["slice"]):
        here = calib & np.isfinite(s[i])
        both = here & np.isfinite(s[0])
        np.testing.assert_allclose(c.loc[i, "mean_suitability_calibration"],
                                   np.average(s[i][here], weights=area[here]), rtol=1e-6)
        np.testing.assert_allclose(c.loc[i, "mean_change_calibration"],
                                   np.average((s[i] - s[0])[both], weights=area[both]),
                                   rtol=1e-6, atol=1e-9)
        w = np.nansum(s[i] * area)
        np.testing.assert_allclose(c.loc[i, "weighted_area_km2"], w, rtol=1e-6)
    assert c.loc[0, "mean_change_calibration"] == 0.0
    assert c.loc[0, "weighted_area_change_pct"] == 0.0
    # slice 2 has less land inside the calibration area: the paired mean uses fewer cells
    assert np.isfinite(c.loc[2, "mean_change_calibration"])


def test_summary_is_the_median_over_models(rng):
    ds = _stack(rng)
    rules = {"p10": 0.3, "mtp": 0.05}
    t = threshold_table(ds, rules, reference="ref", rule_of_run="p10")
    c = continuous_change_table(ds, reference="ref")
    s = sensitivity_summary(t, c, reference="ref")
    assert list(zip(s["scenario"], s["period"])) == [("s1", "2050"), ("s2", "2090")]
    row = s.iloc[0]
    assert row["models"] == 3
    col = [k for k in s.columns if k.startswith("change % (p10") and k.endswith(", run)")][0]
    want = np.median(t[(t["rule"] == "p10") & (t["scenario"] == "s1")]["change_pct"])
    assert row[col] == pytest.approx(want)
    meds = [row[k] for k in s.columns if k.startswith("change % (")]
    assert row["spread over rules (pp)"] == pytest.approx(max(meds) - min(meds))
    assert row["mean suitability change (calibration area)"] == pytest.approx(
        np.median(c.loc[c["scenario"] == "s1", "mean_change_calibration"]))


def test_bad_thresholds_are_refused(rng):
    ds = _stack(rng)
    with pytest.raises(DataError, match="must be in"):
        threshold_table(ds, {"p10": 1.5}, reference="ref")
    with pytest.raises(DataError, match="reference"):
        threshold_table(ds, {"p10": 0.5}, reference="nope")
    with pytest.raises(DataError, match="at least one"):
        threshold_table(ds, {}, reference="ref")
