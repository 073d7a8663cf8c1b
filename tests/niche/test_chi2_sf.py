"""Closed-form chi-squared survival function against scipy.stats.chi2.sf (reference library)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from timeslice.niche.models import EllipsoidNiche, chi2_sf


@pytest.mark.parametrize("k", range(1, 20))
def test_matches_scipy(k, rng):
    x = np.concatenate([rng.gamma(2.0, 5.0, 5000), [0.0, 1e-12, 0.5, 50.0, 200.0, 1e4]])
    # scipy.stats.chi2.sf is the reference; closed forms of Abramowitz & Stegun 26.4.4-5
    np.testing.assert_allclose(chi2_sf(x, k), stats.chi2.sf(x, k), rtol=0, atol=1e-14)


def test_nan_passes_through():
    assert np.isnan(chi2_sf(np.array([np.nan]), 3)[0])


def test_ellipsoid_distance_matches_direct_form(rng):
    X = rng.normal(size=(300, 4)) @ rng.normal(size=(4, 4))
    y = np.r_[np.ones(100), np.zeros(200)]
    m = EllipsoidNiche().fit(X, y)
    diff = X - m.centroid_
    direct = np.einsum("ij,jk,ik->i", diff, m.precision_, diff)
    np.testing.assert_allclose(m.mahalanobis2(X), direct, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(m.predict_proba(X)[:, 1], stats.chi2.sf(direct, 4), atol=1e-12)
