"""Niche estimators: scikit-learn contract and the published formulas."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.spatial.distance import mahalanobis
from sklearn.utils.estimator_checks import parametrize_with_checks

from timeslice.errors import ConfigError
from timeslice.niche.models import MODEL_NAMES, EllipsoidNiche, EnvelopeNiche, make_model

# The flexible learners are checked in test_learners.py. No check is skipped here: both
# estimators declare `multi_class=False` (presence/background only), so scikit-learn runs
# its binary-only check instead of the multiclass ones.


@parametrize_with_checks([EllipsoidNiche(), EnvelopeNiche()])
def test_sklearn_contract(estimator, check):
    check(estimator)


def _data(rng, n_p=80, n_b=400, k=3):
    P = rng.normal(0, 1, (n_p, k))
    B = rng.normal(0, 3, (n_b, k))
    X = np.r_[P, B]
    y = np.r_[np.ones(n_p), np.zeros(n_b)].astype(int)
    return X, y


def test_ellipsoid_matches_scipy_mahalanobis_and_chi2(rng):
    X, y = _data(rng)
    m = EllipsoidNiche(ridge=0.0).fit(X, y)
    P = X[y == 1]
    mu, cov = P.mean(0), np.cov(P, rowvar=False)  # numpy's unbiased covariance
    VI = np.linalg.inv(cov)
    x = X[200]
    # Reference: scipy.spatial.distance.mahalanobis and scipy.stats.chi2 (Farber & Kadmon 2003:
    # suitability = 1 - chi2_k CDF of the squared distance)
    d2 = mahalanobis(x, mu, VI) ** 2
    assert m.mahalanobis2(X[200:201])[0] == pytest.approx(d2, rel=1e-9)
    assert m.predict_proba(X[200:201])[0, 1] == pytest.approx(stats.chi2.sf(d2, 3), rel=1e-9)
    np.testing.assert_allclose(m.predict_proba(X).sum(1), 1.0)
    assert m.predict_proba(mu[None])[0, 1] == pytest.approx(1.0)


def test_envelope_graded_and_box(rng):
    X, y = _data(rng, k=2)
    m = EnvelopeNiche(percentile=5).fit(X, y)
    P = X[y == 1]
    s = m.predict_proba(X)[:, 1]
    assert np.all((s >= 0) & (s <= 1))
    # outside the observed presence range of any variable: 0
    far = np.array([[P[:, 0].max() + 1, 0.0]])
    assert m.predict_proba(far)[0, 1] == 0.0
    # the box edge is suitability 2 * percentile / 100: inside the box <=> S >= 0.1 (up to ties)
    inside = m.in_envelope(X)
    np.testing.assert_array_equal(inside, s >= 0.1 - 1e-12)
    # the presence medians score 1
    med = np.median(P, axis=0)[None]
    assert m.predict_proba(med)[0, 1] == pytest.approx(1.0, abs=2.0 / P.shape[0])


def test_dataframe_feature_names(rng):
    X, y = _data(rng, k=2)
    df = pd.DataFrame(X, columns=["bio1", "bio12"])
    m = EllipsoidNiche().fit(df, y)
    assert list(m.feature_names_in_) == ["bio1", "bio12"]
    np.testing.assert_allclose(m.predict_proba(df), m.predict_proba(df))


def test_make_model_names_and_errors():
    from sklearn.base import clone

    for name in MODEL_NAMES:
        est = make_model(name)
        # scikit-learn's contract (BaseEstimator, "developing estimators" guide): every __init__
        # argument is a parameter stored unchanged, so clone() rebuilds an equal estimator
        params = est.get_params(deep=False)
        assert params, name
        twin = clone(est)
        assert type(twin) is type(est) and twin is not est
        assert twin.get_params(deep=False) == params
        changed = {k: v for k, v in make_model(name, random_state=5).get_params(deep=False).items()}
        assert changed["random_state"] == 5 and clone(make_model(name, random_state=5)).random_state == 5
    assert isinstance(make_model("Ellipsoid", ridge=1e-3), EllipsoidNiche)
    with pytest.raises(ConfigError, match="did you mean 'ellipsoid'"):
        make_model("elipsoid")
    with pytest.raises(ConfigError, match="no parameter 'percentil'.*did you mean 'percentile'"):
        make_model("envelope", percentil=3)


def test_envelope_extremes_score_one_over_n(rng):
    X, y = _data(rng, n_p=50, k=2)
    m = EnvelopeNiche().fit(X, y)
    P = X[y == 1]
    s = m.predict_proba(P)[:, 1]
    # plotting positions (j - 0.5)/n: an observed extreme scores 2 * 0.5/n = 1/n, so the
    # minimum training presence is positive
    assert s.min() == pytest.approx(1.0 / 50)


def test_suitability_of_finite_is_predict_proba_exactly():
    """The transfer's fast path for checked rows gives predict_proba's presence column bit for
    bit, for every estimator (self-consistency: the fast path skips only the input checks), on
    C- and F-ordered input (the transfer passes a transposed view)."""
    import pandas as pd

    from timeslice.niche.registry import make_model, names

    rng = np.random.default_rng(7)
    cols = ["a", "b", "c"]
    X = rng.normal(size=(400, 3))
    y = (np.abs(X).sum(axis=1) < 2.0).astype(int)
    target = rng.normal(size=(3, 257))  # (k, n) as the transfer stacks it
    for name in names():
        model = make_model(name).fit(pd.DataFrame(X, columns=cols), y)
        expected = model.predict_proba(pd.DataFrame(target.T, columns=cols))[:, 1]
        assert np.array_equal(model.suitability_of_finite(target.T), expected), name
        assert np.array_equal(model.suitability_of_finite(np.ascontiguousarray(target.T)),
                              expected), name
