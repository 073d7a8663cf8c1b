"""Flexible niche learners: penalised point process, regression splines and the weighted
ensemble (the down-sampled random forest is :mod:`timeslice.niche.forest`, re-exported here). Names and options are the project's own; the methods are
the published ones cited in each docstring (see docs/methods/niche.md).
"""

from __future__ import annotations

import inspect
import warnings
from collections.abc import Mapping, Sequence

import numpy as np
import sklearn
from sklearn.base import clone
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import StratifiedKFold
from sklearn.preprocessing import SplineTransformer
from sklearn.utils.validation import check_is_fitted

from timeslice.niche.base import NicheBase
from timeslice.niche.evaluate import auc, training_scores
from timeslice.niche.forest import ForestNiche
from timeslice.niche.registry import make_model

__all__ = ["EnsembleNiche", "ForestNiche", "PointProcessNiche", "SplineNiche"]

_FEATURE_KINDS = ("linear", "quadratic", "hinge", "interaction")
_SK_NEW_PENALTY = tuple(int(p) for p in sklearn.__version__.split(".")[:2]) >= (1, 8)


def _logistic(*, C: float, l1: bool, max_iter: int = 1000, random_state=None) -> LogisticRegression:
    """LogisticRegression with an L1 (liblinear) or L2 (lbfgs) penalty on any scikit-learn >= 1.4."""
    if l1:
        kw = {"l1_ratio": 1.0} if _SK_NEW_PENALTY else {"penalty": "l1"}
        # a large intercept scaling leaves the intercept effectively unpenalised in liblinear
        # tol 1e-6: at liblinear's default 1e-4 the lasso path is visibly unconverged with
        # heavily weighted background (too many active features, slopes off by 10-20 %)
        return LogisticRegression(
            C=C, solver="liblinear", intercept_scaling=100.0, tol=1e-6, max_iter=max_iter,
            random_state=random_state, **kw
        )
    kw = {"l1_ratio": 0.0} if _SK_NEW_PENALTY else {"penalty": "l2"}
    return LogisticRegression(C=C, solver="lbfgs", max_iter=max_iter, **kw)


def _inner_folds(y: np.ndarray, groups, n_folds: int, rng) -> list[tuple[np.ndarray, np.ndarray]]:
    """Train/test index pairs: by the given groups (spatial folds) or stratified random folds."""
    if groups is not None:
        groups = np.asarray(groups).ravel()
        labels = np.unique(groups)
        if labels.size > int(n_folds):  # merge spatial groups into n_folds folds, whole groups only
            groups = np.searchsorted(labels, groups) % int(n_folds)
        out = []
        for g in np.unique(groups):
            te = np.flatnonzero(groups == g)
            tr = np.flatnonzero(groups != g)
            if (y[te] == 1).any() and (y[te] == 0).any() and (y[tr] == 1).sum() >= 2:
                out.append((tr, te))
        if len(out) >= 2:
            return out
    n_min = int(min((y == 1).sum(), (y == 0).sum()))
    k = max(2, min(int(n_folds), n_min))
    skf = StratifiedKFold(n_splits=k, shuffle=True, random_state=int(rng.integers(0, 2**31 - 1)))
    return list(skf.split(np.zeros(y.size), y))


def _auc(s: np.ndarray, y: np.ndarray) -> float:
    return auc(s[y == 1], s[y == 0])


def _accepts_groups(est) -> bool:
    return "groups" in inspect.signature(est.fit).parameters


def _weighted_mean_sd(X: np.ndarray, w: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Column means and (population) standard deviations with frequency weights; sd 0 -> 1."""
    w = np.ones(X.shape[0]) if w is None else np.asarray(w, dtype=float)
    tot = w.sum() if w.sum() > 0 else 1.0
    mean = (w @ X) / tot
    sd = np.sqrt(np.maximum((w @ (X - mean) ** 2) / tot, 0.0))
    return mean, np.where(sd > 0, sd, 1.0)


def _weighted_quantiles(x: np.ndarray, qs: np.ndarray, w: np.ndarray | None) -> np.ndarray:
    """Quantiles of x with frequency weights (inverted weighted CDF, midpoint rule)."""
    if w is None:
        return np.quantile(x, qs)
    keep = w > 0
    x, w = x[keep], w[keep]
    order = np.argsort(x, kind="stable")
    x, w = x[order], w[order]
    cdf = (np.cumsum(w) - 0.5 * w) / w.sum()
    return np.interp(qs, cdf, x)


class _FeatureMap:
    """Linear, quadratic, hinge and pairwise-interaction features of standardised predictors."""

    def __init__(self, kinds: Sequence[str], n_knots: int):
        self.kinds = tuple(kinds)
        self.n_knots = int(n_knots)

    def fit(self, X: np.ndarray, w: np.ndarray | None = None) -> _FeatureMap:
        self.mean_, self.sd_ = _weighted_mean_sd(X, w)
        Z = (X - self.mean_) / self.sd_
        used = Z if w is None else Z[np.asarray(w) > 0]
        self.lo_, self.hi_ = used.min(axis=0), used.max(axis=0)
        qs = np.linspace(0, 1, self.n_knots + 2)[1:-1]
        self.knots_ = [np.unique(_weighted_quantiles(Z[:, j], qs, w)) for j in range(Z.shape[1])]
        return self

    def transform(self, X: np.ndarray) -> np.ndarray:
        Z = (X - self.mean_) / self.sd_
        cols = []
        k = Z.shape[1]
        if "linear" in self.kinds:
            cols.append(Z)
        if "quadratic" in self.kinds:
            cols.append(Z**2)
        if "hinge" in self.kinds:
            for j in range(k):
                for t in self.knots_[j]:
                    up = max(self.hi_[j] - t, 1e-9)
                    dn = max(t - self.lo_[j], 1e-9)
                    cols.append((np.maximum(Z[:, j] - t, 0.0) / up)[:, None])
                    cols.append((np.maximum(t - Z[:, j], 0.0) / dn)[:, None])
        if "interaction" in self.kinds and k > 1:
            i, j = np.triu_indices(k, 1)
            cols.append(Z[:, i] * Z[:, j])
        return np.hstack(cols) if cols else Z

    def dot(self, X: np.ndarray, coef: np.ndarray) -> np.ndarray:
        """``transform(X) @ coef`` without building the feature matrix.

        Only features with a nonzero coefficient are computed, one column at a time, and added
        into one accumulator: the lasso leaves most of them at zero, so a transfer costs a few
        passes per active feature instead of the whole expansion (equal to the matrix product to
        rounding; tested to 1e-12).
        """
        coef = np.asarray(coef, dtype=np.float64).ravel()
        Z = (X - self.mean_) / self.sd_
        n, k = Z.shape
        eta = np.zeros(n)
        tmp = np.empty(n)
        col = 0

        def add(c: float, values: np.ndarray) -> None:
            np.multiply(values, c, out=tmp)
            np.add(eta, tmp, out=eta)

        if "linear" in self.kinds:
            for j in range(k):
                if coef[col + j] != 0.0:
                    add(coef[col + j], Z[:, j])
            col += k
        if "quadratic" in self.kinds:
            for j in range(k):
                if coef[col + j] != 0.0:
                    add(coef[col + j], Z[:, j] ** 2)
            col += k
        if "hinge" in self.kinds:
            for j in range(k):
                for t in self.knots_[j]:
                    c_up, c_dn = coef[col], coef[col + 1]
                    if c_up != 0.0:
                        add(c_up, np.maximum(Z[:, j] - t, 0.0) / max(self.hi_[j] - t, 1e-9))
                    if c_dn != 0.0:
                        add(c_dn, np.maximum(t - Z[:, j], 0.0) / max(t - self.lo_[j], 1e-9))
                    col += 2
        if "interaction" in self.kinds and k > 1:
            for a, b in zip(*np.triu_indices(k, 1)):
                if coef[col] != 0.0:
                    add(coef[col], Z[:, a] * Z[:, b])
                col += 1
        if col != coef.size:  # pragma: no cover - a feature map and coefficients out of step
            raise ValueError(f"{coef.size} coefficients for {col} features")
        return eta


class PointProcessNiche(NicheBase):
    """Lasso-penalised Poisson point-process niche, fitted as weighted logistic regression.

    Parameters
    ----------
    features : sequence of {"linear", "quadratic", "hinge", "interaction"}
        Feature families built from the standardised predictors.
    n_knots : int
        Hinge knots per predictor, at evenly spaced quantiles of the training data.
    penalties : sequence of float
        Candidate lasso strengths :math:`\\lambda` (per presence); the one with the best mean
        AUC over the inner folds is used. A single value skips the search.
    background_weight : float
        Weight :math:`W` of each background point relative to a presence.
    n_folds : int
        Inner folds of the penalty search: random stratified folds when ``fit`` gets no
        `groups`, else the spatial groups merged into at most `n_folds` folds.
    search_background : int or None
        The penalty search uses all presences and at most this many background rows (a seeded
        subset, weights scaled so the total background weight is kept); None uses all.
    random_state : int, Generator or None
        Seed of the inner random folds.

    Attributes
    ----------
    penalty_ : float
        The chosen :math:`\\lambda`.
    cv_scores_ : ndarray
        Mean inner-fold AUC for each candidate.
    eta_max_ : float
        Largest linear predictor over the training points (the 1.0 of the output scale).

    Notes
    -----
    For a Poisson point process with intensity :math:`\\lambda(x) = \\exp(\\beta_0 + \\beta^\\top
    f(x))`, logistic regression of presences (weight 1) against background points (weight
    :math:`W`) converges to the maximum-likelihood slopes :math:`\\beta` as :math:`W \\to \\infty`
    (Warton & Shepherd 2010; Fithian & Hastie 2013). The fit minimises

    .. math:: -\\sum_i w_i \\ell_i(\\beta_0, \\beta) + \\lambda\\, n_1 \\lVert \\beta \\rVert_1,

    with :math:`n_1` presences (scikit-learn's ``C = 1 / (\\lambda n_1)``; the intercept is left
    practically unpenalised), so the lasso selects features (Renner & Warton 2013).
    Presence-only data fix :math:`\\lambda(x)` only up to a constant, so the output is a
    relative suitability

    .. math:: S(x) = \\min\\{1, \\exp(\\eta(x) - \\eta^*)\\},

    :math:`\\eta = \\beta^\\top f(x)` and :math:`\\eta^*` its maximum over the training points:
    1 at the most suitable calibration conditions, the intensity ratio elsewhere, and capped at 1
    where a transfer extrapolates above the calibration maximum. It is not a probability of
    presence.

    References
    ----------
    Warton, D. I., & Shepherd, L. C. (2010). Poisson point process models solve the "pseudo-absence
    problem" for presence-only data in ecology. Ann. Appl. Stat. 4:1383-1402.
    Fithian, W., & Hastie, T. (2013). Finite-sample equivalence in statistical models for
    presence-only data. Ann. Appl. Stat. 7:1917-1939.
    Renner, I. W., & Warton, D. I. (2013). Biometrics 69:274-281 (equivalence of penalised
    presence-background regression and Poisson point process models).
    """

    def __init__(
        self,
        *,
        features: Sequence[str] = ("linear", "quadratic", "hinge", "interaction"),
        n_knots: int = 8,
        penalties: Sequence[float] = (3e-3, 1e-2, 3e-2, 1e-1),
        background_weight: float = 100.0,
        n_folds: int = 3,
        search_background: int | None = 5000,
        random_state=None,
    ):
        self.features = features
        self.n_knots = n_knots
        self.penalties = penalties
        self.background_weight = background_weight
        self.n_folds = n_folds
        self.search_background = search_background
        self.random_state = random_state

    def _fit_one(self, F, y, w, lam, n1):
        model = _logistic(C=1.0 / (lam * max(n1, 1e-12)), l1=True, random_state=0)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            model.fit(F, y, sample_weight=w)
        return model

    def fit(self, X, y, sample_weight=None, groups=None):
        """Fit; `groups` (fold labels, e.g. spatial blocks) drive the penalty search.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors of presences and background.
        y : array-like of shape (n,)
            1 presence, 0 background (the greater label is presence).
        sample_weight : array-like of shape (n,), optional
            Frequency weights (None: all 1).
        groups : array-like of shape (n,), optional
            Fold labels (e.g. spatial blocks) for the inner cross-validation.

        Returns
        -------
        PointProcessNiche
            The fitted estimator.
        """
        X, presence, sw = self.validate_fit(X, y, sample_weight)
        kinds = tuple(self.features)
        bad = [k for k in kinds if k not in _FEATURE_KINDS]
        if bad or not kinds:
            raise ValueError(f"`features` must be drawn from {_FEATURE_KINDS}, got {list(kinds)}")
        penalties = np.atleast_1d(np.asarray(self.penalties, dtype=float))
        if penalties.size == 0 or np.any(penalties <= 0):
            raise ValueError(f"`penalties` must be positive numbers, got {list(penalties)}")
        if not float(self.background_weight) > 0:
            raise ValueError(f"`background_weight` must be > 0, got {self.background_weight}")
        rng = np.random.default_rng(self.random_state)
        yy = presence.astype(int)
        w = sw * np.where(presence, 1.0, float(self.background_weight))
        self.features_ = _FeatureMap(kinds, self.n_knots).fit(X, sw)
        F = self.features_.transform(X)
        scores = np.full(penalties.size, np.nan)
        if penalties.size > 1:
            # the search runs on all presences and at most `search_background` background rows,
            # their weights scaled up so the total background weight is unchanged
            Xs, ys, ws, sws, gs = X, yy, w, sw, None if groups is None else np.asarray(groups).ravel()
            bg = np.flatnonzero(yy == 0)
            if self.search_background is not None and bg.size > int(self.search_background):
                pick = np.sort(np.concatenate([
                    np.flatnonzero(yy == 1), rng.choice(bg, int(self.search_background), replace=False)
                ]))
                scale = np.where(yy[pick] == 0, w[bg].sum() / w[np.intersect1d(pick, bg)].sum(), 1.0)
                Xs, ys, ws, sws = X[pick], yy[pick], w[pick] * scale, sw[pick]
                gs = None if gs is None else gs[pick]
            splits = _inner_folds(ys, gs, self.n_folds, rng)
            for i, lam in enumerate(penalties):
                fold_auc = []
                for tr, te in splits:
                    fmap = _FeatureMap(kinds, self.n_knots).fit(Xs[tr], sws[tr])
                    n1 = float(sws[tr][ys[tr] == 1].sum())
                    m = self._fit_one(fmap.transform(Xs[tr]), ys[tr], ws[tr], lam, n1)
                    eta = fmap.transform(Xs[te]) @ m.coef_.ravel()
                    fold_auc.append(_auc(eta, ys[te]))
                scores[i] = float(np.mean(fold_auc))
            best = int(np.nanargmax(scores))
        else:
            best = 0
        self.cv_scores_ = scores
        self.penalty_ = float(penalties[best])
        # held-out AUC at the chosen penalty (NaN without a search); slightly optimistic, as the
        # best of the candidates
        self.heldout_auc_ = float(scores[best])
        self.model_ = self._fit_one(F, yy, w, self.penalty_, float(sw[presence].sum()))
        self.coef_ = self.model_.coef_.ravel()
        self.n_active_ = int(np.count_nonzero(self.coef_))
        self.eta_max_ = float(np.max((F @ self.coef_)[sw > 0]))
        return self

    def fitted_summary(self) -> dict:
        """Plain summary of the fit for reports: chosen penalty, active features, search AUCs.

        Returns
        -------
        dict
            ``penalty``, ``n_features``, ``n_active_features``, ``search_auc``.
        """
        check_is_fitted(self)
        return {
            "penalty": self.penalty_,
            "n_features": int(self.coef_.size),
            "n_active_features": self.n_active_,
            "search_auc": [None if not np.isfinite(v) else float(v) for v in self.cv_scores_],
        }

    def tuned_params(self) -> dict:
        """Hyperparameters that reproduce this fit without the penalty search.

        Returns
        -------
        dict
            ``{"penalties": (chosen,)}``.
        """
        check_is_fitted(self)
        return {"penalties": (self.penalty_,)}

    def linear_predictor(self, X) -> np.ndarray:
        """:math:`\\eta(x) = \\beta^\\top f(x)` (log relative intensity, without the intercept).

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors, in the columns the estimator was fitted on.

        Returns
        -------
        ndarray of shape (n,)
            The linear predictor.
        """
        X = self.validate_predict(X)
        return self.features_.dot(X, self.coef_)

    def predict_proba(self, X) -> np.ndarray:
        """Columns follow ``classes_``: [1 - S, S] with S the relative suitability.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors, in the columns the estimator was fitted on.

        Returns
        -------
        ndarray of shape (n, 2)
            Columns follow ``classes_``: [1 - S, S].
        """
        eta = self.linear_predictor(X)
        with np.errstate(over="ignore"):
            s = np.exp(np.minimum(eta - self.eta_max_, 0.0))
        return self.two_columns(s)


class SplineNiche(NicheBase):
    """Additive penalised regression-spline model (a GLM on B-spline bases).

    Parameters
    ----------
    n_knots : int
        Knots per predictor (at quantiles of the training data).
    degree : int
        Spline degree (3: cubic).
    C : float
        Inverse ridge strength on the spline coefficients.
    extrapolation : {"constant", "linear"}
        Beyond the training range, hold each basis at its boundary value (``constant``, the
        default: responses flatten out) or continue linearly.
    random_state : int, Generator or None
        Unused (deterministic); kept for a common interface.

    Notes
    -----
    :math:`\\operatorname{logit} S(x) = \\beta_0 + \\sum_j \\sum_m \\beta_{jm} B_{jm}(x_j)`, with
    cubic B-spline bases :math:`B_{jm}` (scikit-learn ``SplineTransformer``) and an L2 penalty
    :math:`\\lVert\\beta\\rVert^2/(2C)` (penalised regression splines; Eilers & Marx 1996 for the
    B-spline penalty idea, here the ridge form). Background points are down-weighted so that
    presences and background carry equal total weight, as recommended for presence-background
    regression by Valavi et al. (2021, from memory), which makes the output a balanced
    probability: 0.5 where presence and background are equally likely.

    References
    ----------
    Eilers, P. H. C., & Marx, B. D. (1996). Flexible smoothing with B-splines and penalties.
    Statistical Science 11:89-121.
    Valavi, R., Guillera-Arroita, G., Lahoz-Monfort, J. J., & Elith, J. (2021). Predictive
    performance of presence-only species distribution models: a benchmark study with
    reproducible code. Ecological Monographs 92:e01486.
    """

    def __init__(self, *, n_knots: int = 6, degree: int = 3, C: float = 1.0, extrapolation: str = "constant", random_state=None):
        self.n_knots = n_knots
        self.degree = degree
        self.C = C
        self.extrapolation = extrapolation
        self.random_state = random_state

    def fit(self, X, y, sample_weight=None):
        """Fit the spline bases and the penalised logistic regression.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors of presences and background.
        y : array-like of shape (n,)
            1 presence, 0 background (the greater label is presence).
        sample_weight : array-like of shape (n,), optional
            Frequency weights (None: all 1).

        Returns
        -------
        SplineNiche
            The fitted estimator.
        """
        X, presence, sw = self.validate_fit(X, y, sample_weight)
        if self.extrapolation not in ("constant", "linear"):
            raise ValueError(f"`extrapolation` must be 'constant' or 'linear', got {self.extrapolation!r}")
        n1, n0 = sw[presence].sum(), sw[~presence].sum()
        w = sw * np.where(presence, 1.0, n1 / n0 if n0 > 0 else 1.0)
        self.mean_, self.sd_ = _weighted_mean_sd(X, sw)
        Z = (X - self.mean_) / self.sd_
        self.spline_ = SplineTransformer(
            n_knots=int(self.n_knots), degree=int(self.degree), knots="quantile", extrapolation=self.extrapolation
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # few distinct values -> fewer knots
            B = self.spline_.fit_transform(Z, sample_weight=sw)
        self.model_ = _logistic(C=float(self.C), l1=False, max_iter=2000)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            self.model_.fit(B, presence.astype(int), sample_weight=w)
        return self

    def predict_proba(self, X) -> np.ndarray:
        """Columns follow ``classes_``: [1 - S, S].

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors, in the columns the estimator was fitted on.

        Returns
        -------
        ndarray of shape (n, 2)
            Columns follow ``classes_``: [1 - S, S].
        """
        X = self.validate_predict(X)
        B = self.spline_.transform((X - self.mean_) / self.sd_)
        return self.two_columns(self.model_.predict_proba(B)[:, 1])


class EnsembleNiche(NicheBase):
    """Weighted mean of member niche models, weighted by their cross-validated AUC.

    Parameters
    ----------
    members : sequence of str
        Algorithm names (``make_model``) of the members.
    member_params : mapping, optional
        Name -> hyperparameters of that member.
    n_folds : int
        Folds of the weighting cross-validation when ``fit`` gets no `groups`.
    random_state : int, Generator or None
        Seed passed to the members and the folds.

    Attributes
    ----------
    members_ : list of (str, estimator)
        Members fitted on all data.
    weights_ : ndarray
        Normalised weights, :math:`w_m \\propto \\max(\\mathrm{AUC}_m - 0.5, 0)`.
    cv_auc_ : ndarray
        Mean held-out AUC of each member.
    oob_suitability_ : ndarray
        Weighted mean of the members' training scores (out-of-bag for the forest), used for
        thresholds.

    Notes
    -----
    :math:`S(x) = \\sum_m w_m S_m(x)`, a weighted mean of the members' suitabilities with
    weights proportional to their skill above random on held-out data: a member no better than
    random gets weight 0. The held-out AUC is the member's own estimate where it has one (the
    point process: its inner spatial CV at the chosen penalty; the forest: out-of-bag), else
    the mean over `n_folds` inner folds (spatial blocks when `groups` is given). Members keep their own
    output scales (relative intensity, balanced probability, chi-square tail), so the ensemble is
    a relative suitability; threshold it with a rule on its own training scores. Weighted
    averaging follows Marmion et al. (2009).

    References
    ----------
    Marmion, M., Parviainen, M., Luoto, M., Heikkinen, R. K., & Thuiller, W. (2009). Evaluation of
    consensus methods in predictive species distribution modelling. Diversity and Distributions
    15:59-69.
    """

    def __init__(
        self,
        *,
        members: Sequence[str] = ("ellipsoid", "envelope", "point_process", "spline", "forest"),
        member_params: Mapping[str, Mapping] | None = None,
        n_folds: int = 3,
        random_state=None,
    ):
        self.members = members
        self.member_params = member_params
        self.n_folds = n_folds
        self.random_state = random_state

    def _build(self):
        params = dict(self.member_params or {})
        names = list(self.members)
        if not names:
            raise ValueError("`members` is empty; name at least one algorithm")
        if "ensemble" in names:
            raise ValueError("an ensemble cannot contain another ensemble")
        out = []
        for name in names:
            est = make_model(name, **dict(params.get(name, {})))
            if "random_state" in est.get_params(deep=False):
                est.set_params(random_state=self.random_state)
            out.append((name, est))
        return out

    def fit(self, X, y, sample_weight=None, groups=None):
        """Score every member by held-out AUC, then refit each on all data.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors of presences and background.
        y : array-like of shape (n,)
            1 presence, 0 background (the greater label is presence).
        sample_weight : array-like of shape (n,), optional
            Frequency weights (None: all 1).
        groups : array-like of shape (n,), optional
            Fold labels (e.g. spatial blocks) for the inner cross-validation.

        Returns
        -------
        EnsembleNiche
            The fitted estimator.
        """
        X, presence, sw = self.validate_fit(X, y, sample_weight)
        yy = presence.astype(int)
        rng = np.random.default_rng(self.random_state)
        proto = self._build()
        # members tune themselves once on all data; the weighting folds reuse those settings
        self.members_ = []
        for name, est in proto:
            e = clone(est)
            kw = {"groups": groups} if groups is not None and _accepts_groups(e) else {}
            e.fit(X, yy, sample_weight=sw, **kw)
            self.members_.append((name, e))
        splits = None
        aucs = np.zeros(len(proto))
        for m, (_, fitted) in enumerate(self.members_):
            own = getattr(fitted, "heldout_auc_", float("nan"))
            if np.isfinite(own):  # the member's own held-out estimate (out-of-bag, inner CV)
                aucs[m] = float(own)
                continue
            if splits is None:
                splits = _inner_folds(yy, groups, self.n_folds, rng)
            est = clone(fitted)
            if hasattr(fitted, "tuned_params"):
                est.set_params(**fitted.tuned_params())
            vals = []
            for tr, te in splits:
                e = clone(est)
                e.fit(X[tr], yy[tr], sample_weight=sw[tr])
                vals.append(_auc(e.predict_proba(X[te])[:, 1], yy[te]))
            aucs[m] = float(np.mean(vals))
        skill = np.clip(aucs - 0.5, 0.0, None)
        weights = skill / skill.sum() if skill.sum() > 0 else np.full(len(proto), 1.0 / len(proto))
        self.cv_auc_ = aucs
        self.weights_ = weights
        # training scores for thresholds: out-of-bag where a member has them
        self.oob_suitability_ = sum(
            w * training_scores(e, X) for (_, e), w in zip(self.members_, weights)
        )
        return self

    def predict_proba(self, X) -> np.ndarray:
        """Columns follow ``classes_``: [1 - S, S].

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors, in the columns the estimator was fitted on.

        Returns
        -------
        ndarray of shape (n, 2)
            Columns follow ``classes_``: [1 - S, S].
        """
        X = self.validate_predict(X)
        s = np.zeros(X.shape[0])
        for (_, e), w in zip(self.members_, self.weights_):
            if w > 0:
                s += w * e.predict_proba(X)[:, 1]
        return self.two_columns(s)

    def fitted_summary(self) -> dict:
        """Plain summary of the fit for reports: members, their held-out AUC and weights.

        Returns
        -------
        dict
            ``members``: one dict per member with ``member``, ``heldout_auc``, ``weight``.
        """
        check_is_fitted(self)
        return {
            "members": [
                {"member": n, "heldout_auc": float(a), "weight": float(w)}
                for (n, _), a, w in zip(self.members_, self.cv_auc_, self.weights_)
            ]
        }

    def member_table(self):
        """DataFrame ``member, cv_auc, weight``.

        Returns
        -------
        pandas.DataFrame
            ``member, cv_auc, weight``.
        """
        import pandas as pd
        from sklearn.utils.validation import check_is_fitted

        check_is_fitted(self)
        return pd.DataFrame(
            {"member": [n for n, _ in self.members_], "cv_auc": self.cv_auc_, "weight": self.weights_}
        )


