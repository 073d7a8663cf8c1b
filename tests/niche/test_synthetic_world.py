"""A synthetic world with a known niche: every algorithm must recover it.

The world (conftest.make_world) is an island with a lapse-rate temperature field and a
west-east precipitation gradient; the true suitability is a Gaussian in (bio1, bio12) and the
records are drawn in proportion to it. Acceptance criteria: spatial-block cross-validated
AUC >= 0.8 for every algorithm, and the ensemble's thresholded suitable area within +-25 % of
the true niche area.

The true niche area is defined to match the 10th-percentile threshold: the smallest set of the
most suitable land cells that holds 90 % of the sampling mass (so 90 % of records are expected
inside it).
"""

from __future__ import annotations

import numpy as np
import pytest

from timeslice.grid import cell_area
from timeslice.niche import fit_niche

from niche_world import make_world


@pytest.fixture(scope="module")
def sharp_world():
    return make_world(niche_sd=(1.2, 180.0), n_records=200, seed=7)


def _fit(world, algorithm):
    ds, rec, _ = world
    return fit_niche(
        rec, ds, algorithm=algorithm, n_background=2000, buffer_km=200, cv_block_km=100,
        cv_folds=5, importance_repeats=0, seed=0,
    )


def _true_area(ds, truth) -> float:
    land = ds["land"].values
    a = cell_area(ds).values.ravel()
    t = np.where(land, truth.values, 0.0).ravel()
    order = np.argsort(-t, kind="stable")
    k = int(np.searchsorted(np.cumsum(t[order]) / t.sum(), 0.9)) + 1
    return float(a[order[:k]].sum())


def _suitable_area(fit, ds) -> float:
    X = ds[fit.variables].to_dataframe()[fit.variables]
    ok = np.isfinite(X.to_numpy()).all(axis=1)
    s = np.full(X.shape[0], np.nan)
    s[ok] = fit.suitability(X[ok])
    suitable = (s >= fit.threshold).reshape(ds["land"].shape) & ds["land"].values
    return float(cell_area(ds).values[suitable].sum())


def _cv_auc(fit) -> float:
    return float(fit.evaluation.query("summary == 'mean'")["auc"].iloc[0])


@pytest.mark.parametrize("algorithm", ["ellipsoid", "envelope", "spline", "forest", "point_process"])
def test_algorithms_recover_the_niche(sharp_world, algorithm):
    assert _cv_auc(_fit(sharp_world, algorithm)) >= 0.8


@pytest.mark.slow
def test_ensemble_area_matches_true_niche(sharp_world):
    ds, _, truth = sharp_world
    fit = _fit(sharp_world, "ensemble")
    assert _cv_auc(fit) >= 0.8
    ratio = _suitable_area(fit, ds) / _true_area(ds, truth)
    assert 0.75 <= ratio <= 1.25, ratio
