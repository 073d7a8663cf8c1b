"""Metrics, thresholds and spatial cross-validation against published definitions."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from timeslice.errors import ConfigError, DataError
from timeslice.niche import evaluate as ev
from timeslice.niche.models import EllipsoidNiche


def test_auc_equals_sklearn(rng):
    p = rng.normal(1, 1, 57).round(1)  # rounding makes ties
    b = rng.normal(0, 1, 300).round(1)
    y = np.r_[np.ones(p.size), np.zeros(b.size)]
    # Reference: sklearn.metrics.roc_auc_score (scikit-learn 1.x), trapezoidal ROC area
    assert ev.auc(p, b) == pytest.approx(roc_auc_score(y, np.r_[p, b]), abs=1e-12)


def test_auc_hanley_mcneil_ct_example():
    # Hanley & McNeil (1982), Radiology 143:29, Table 1: CT ratings of 109 images on a
    # 5-point scale (1 definitely normal ... 5 definitely abnormal). Counts from memory:
    # normal 33, 6, 6, 11, 2 (n = 58); abnormal 3, 2, 2, 11, 33 (n = 51). The paper reports
    # AUC = 0.893 and SE = 0.032, both reproduced here, which checks the recalled counts.
    normal = np.repeat([1, 2, 3, 4, 5], [33, 6, 6, 11, 2])
    abnormal = np.repeat([1, 2, 3, 4, 5], [3, 2, 2, 11, 33])
    a = ev.auc(abnormal, normal)
    assert a == pytest.approx(0.893, abs=5e-4)
    # their eq. 1-3 standard error
    q1, q2 = a / (2 - a), 2 * a * a / (1 + a)
    n1, n0 = abnormal.size, normal.size
    se = np.sqrt((a * (1 - a) + (n1 - 1) * (q1 - a * a) + (n0 - 1) * (q2 - a * a)) / (n1 * n0))
    assert se == pytest.approx(0.032, abs=5e-4)


PRES = np.array([0.9, 0.8, 0.4, 0.2])
BACK = np.array([0.7, 0.6, 0.3, 0.1, 0.05])


def test_tss_worked_example():
    # Allouche et al. (2006), J. Appl. Ecol. 43:1223: TSS = sensitivity + specificity - 1.
    # At t = 0.5: 2 of 4 presences >= t (sens 0.5), 3 of 5 background < t (spec 0.6) -> 0.1.
    assert ev.tss(PRES, BACK, 0.5) == pytest.approx(0.1)
    assert ev.tss(PRES, BACK, 0.0) == pytest.approx(0.0)  # everything suitable


def test_threshold_rules_worked_example():
    # Pearson et al. (2007): minimum training presence
    assert ev.threshold(PRES, rule="mtp") == 0.2
    # 10th-percentile training presence, numpy.quantile(..., method="higher") (METHODS.md);
    # with 10 presences the virtual index is 0.9, so "higher" takes the 2nd smallest
    ten = np.arange(1, 11) / 10.0
    assert ev.threshold(ten, rule="p10") == 0.2
    assert np.mean(ten < 0.2) <= 0.1
    # Liu et al. (2005): max(sens + spec). By hand over the candidate thresholds:
    # t=0.05:1.0 0.1:1.2 0.2:1.4 0.3:1.15 0.4:1.35 0.6:1.1 0.7:1.3 0.8:1.5 0.9:1.25 -> 0.8
    assert ev.threshold(PRES, BACK, rule="max_sss") == 0.8
    # ties go to the lowest threshold: t=0.5 and t=0.9 both give 1.5
    assert ev.threshold([0.5, 0.9], [0.1, 0.7], rule="max_sss") == 0.5
    assert ev.threshold(PRES, rule="fixed", value=0.3) == 0.3


def test_threshold_bad_rule_suggests():
    with pytest.raises(ConfigError, match="did you mean 'p10'"):
        ev.threshold(PRES, rule="p1O")
    with pytest.raises(ConfigError, match=r"value.*\[0, 1\]"):
        ev.threshold(PRES, rule="fixed", value=1.5)
    with pytest.raises(ConfigError, match="needs background"):
        ev.threshold(PRES, rule="max_sss")


def _boyce_bruteforce(p, b, w=0.1, n=100):
    """Independent loop over the windows of Hirzel et al. (2006) under METHODS.md conventions."""
    from scipy.stats import spearmanr

    lo, hi = min(p.min(), b.min()), max(p.max(), b.max())
    W = w * (hi - lo)
    F, C = [], []
    for s in np.linspace(lo, hi - W, n):
        e = np.mean((b >= s) & (b <= s + W))
        if e == 0:
            continue
        F.append(np.mean((p >= s) & (p <= s + W)) / e)
        C.append(s + W / 2)
    return spearmanr(F, C).statistic


def test_boyce_worked_examples(rng):
    b = np.linspace(0, 1, 1001)
    # presences with density proportional to the score: F = P/E rises in every window -> 1
    p_up = np.repeat(b, np.round(b * 20).astype(int))
    assert ev.boyce(p_up, b) == pytest.approx(1.0)
    p_down = np.repeat(b, np.round((1 - b) * 20).astype(int))
    assert ev.boyce(p_down, b) == pytest.approx(-1.0)
    # random case against the brute-force loop
    pr, br = rng.beta(3, 2, 80), rng.uniform(0, 1, 500)
    assert ev.boyce(pr, br) == pytest.approx(_boyce_bruteforce(pr, br), abs=1e-12)
    rho, curve = ev.boyce(pr, br, return_curve=True)
    assert list(curve.columns) == ["centre", "P", "E", "F"] and len(curve) <= 100


def test_spatial_folds_random_blocks_are_whole(rng):
    lon, lat = rng.uniform(-10, 10, 3000), rng.uniform(40, 50, 3000)
    f1 = ev.spatial_folds(lon, lat, block_km=100, n_folds=5, seed=4)
    f2 = ev.spatial_folds(lon, lat, block_km=100, n_folds=5, seed=4)
    np.testing.assert_array_equal(f1, f2)
    assert set(np.unique(f1)) == {0, 1, 2, 3, 4}
    # points in the same ~100 km block share a fold: nearby pairs mostly agree
    close = (np.abs(lon[:, None] - lon[None, :]) < 0.05) & (np.abs(lat[:, None] - lat[None, :]) < 0.05)
    agree = (f1[:, None] == f1[None, :])[close].mean()
    assert agree > 0.9


def test_spatial_folds_checkerboard():
    # block centres 1 block apart in latitude alternate between folds with 2 folds
    dlat = 100 / (np.pi * 6371.0072 / 180)
    lat = 45 + dlat * np.arange(6) + dlat / 2 - ((45 + 90) % dlat)
    f = ev.spatial_folds(np.zeros(6), lat, block_km=100, n_folds=2, scheme="checkerboard")
    assert np.all(np.abs(np.diff(f)) == 1)


def test_spatial_folds_errors():
    with pytest.raises(DataError, match="reduce the block size"):
        ev.spatial_folds([0, 0.1], [45, 45.1], block_km=500, n_folds=5)
    with pytest.raises(ConfigError, match="did you mean 'checkerboard'"):
        ev.spatial_folds([0], [45], block_km=10, scheme="checker")


def test_cross_validate_per_fold_auc_matches_sklearn(world):
    from timeslice.niche.data import extract, sample_background, calibration_area

    ds, rec, _ = world
    area = calibration_area(rec, ds["land"], buffer_km=100)
    bg = sample_background(area, n=800, seed=0)
    v = ["bio1", "bio12"]
    P, B = extract(ds, rec, variables=v), extract(ds, bg, variables=v)
    X = np.r_[P[v].to_numpy(), B[v].to_numpy()]
    y = np.r_[np.ones(len(P)), np.zeros(len(B))].astype(int)
    lon, lat = np.r_[P.lon, B.lon], np.r_[P.lat, B.lat]
    folds = ev.spatial_folds(lon, lat, block_km=100, n_folds=4, seed=0)
    table = ev.cross_validate(EllipsoidNiche(), X, y, folds)
    assert list(table.columns) == [
        "fold", "n_train_presence", "n_train_background", "n_test_presence",
        "n_test_background", "threshold", "auc", "boyce", "tss", "omission",
    ]
    assert len(table) == 4
    f0 = table.iloc[0]
    tr, te = folds != f0["fold"], folds == f0["fold"]
    m = EllipsoidNiche().fit(X[tr], y[tr])
    # Reference: sklearn.metrics.roc_auc_score on the held-out fold
    assert f0["auc"] == pytest.approx(roc_auc_score(y[te], m.predict_proba(X[te])[:, 1]), abs=1e-12)
    assert table["auc"].mean() > 0.7
