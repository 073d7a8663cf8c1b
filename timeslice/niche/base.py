"""The shared base of every niche estimator: scikit-learn validation for presence/background
classifiers. The estimator modules (:mod:`timeslice.niche.models`,
:mod:`timeslice.niche.learners`) both build on it and on nothing of each other's.
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import _check_sample_weight, check_is_fitted, validate_data

__all__ = ["NicheBase"]


class NicheBase(ClassifierMixin, BaseEstimator):
    """Shared validation for presence/background classifiers.

    Subclasses implement ``fit(X, y, sample_weight=None)`` and ``predict_proba(X)``; they call
    :meth:`validate_fit` and :meth:`validate_predict` for the scikit-learn input checks, and
    :meth:`two_columns` to return ``[1 - S, S]``.
    """

    def __sklearn_tags__(self):
        """scikit-learn tags: binary only, and a low score on its generic checks is expected."""
        tags = super().__sklearn_tags__()
        tags.classifier_tags.multi_class = False
        tags.classifier_tags.poor_score = True
        return tags

    def validate_fit(self, X, y, sample_weight):
        """Check the training data and set ``classes_``.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors.
        y : array-like of shape (n,)
            Two classes; the greater one is presence.
        sample_weight : array-like of shape (n,) or None
            Frequency weights (None: all 1).

        Returns
        -------
        X : ndarray of float64, shape (n, k)
            The checked predictors.
        presence : ndarray of bool, shape (n,)
            True for presence rows.
        sample_weight : ndarray of float64, shape (n,)
            The checked weights.
        """
        X, y = validate_data(self, X, y, dtype=np.float64, ensure_min_samples=2)
        check_classification_targets(y)
        classes = np.unique(y)
        if classes.size > 2:
            raise ValueError(
                "Only binary classification is supported: "
                f"{type(self).__name__} is a presence/background classifier; y has "
                f"{classes.size} classes, expected 2 (1 = presence, 0 = background)"
            )
        if classes.size < 2:
            raise ValueError(
                f"{type(self).__name__} needs presence and background rows; y has only the class "
                f"{classes.tolist()}"
            )
        self.classes_ = classes
        presence = y == classes[-1]
        sw = _check_sample_weight(sample_weight, X, dtype=np.float64)
        return X, presence, sw

    def validate_predict(self, X):
        """Check that the estimator is fitted and `X` has its features.

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors, in the columns the estimator was fitted on.

        Returns
        -------
        ndarray of float64, shape (n, k)
            The checked predictors.
        """
        check_is_fitted(self)
        return validate_data(self, X, dtype=np.float64, reset=False)

    def suitability(self, X) -> np.ndarray:
        """Suitability in [0, 1] of each row (the presence column of :meth:`predict_proba`).

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors.

        Returns
        -------
        ndarray of shape (n,)
            Suitability.
        """
        return self.predict_proba(X)[:, 1]

    def suitability_of_finite(self, X: np.ndarray) -> np.ndarray:
        """Suitability of rows already checked: float64, all finite, in the fitted columns.

        The transfer's fast path (it has stacked only finite cells, in the order the estimator
        was fitted on), so the per-block feature-name and finiteness checks of
        :meth:`predict_proba` are not repeated. The default is :meth:`predict_proba` itself on
        a frame with the fitted feature names; estimators with a closed form override it with
        that form, returning the same values.

        Parameters
        ----------
        X : numpy.ndarray of shape (n, k), float64
            Finite predictors, columns in the fitted order.

        Returns
        -------
        ndarray of shape (n,)
            Suitability in [0, 1], as ``predict_proba(X)[:, 1]``.
        """
        names = getattr(self, "feature_names_in_", None)
        if names is not None:
            import pandas as pd

            X = pd.DataFrame(X, columns=list(names), copy=False)
        return np.asarray(self.predict_proba(X))[:, -1]

    def predict(self, X) -> np.ndarray:
        """Class with the larger probability (presence when suitability >= 0.5).

        Parameters
        ----------
        X : array-like of shape (n, k)
            Predictors.

        Returns
        -------
        ndarray of shape (n,)
            Predicted class labels (values of ``classes_``).
        """
        proba = self.predict_proba(X)
        return self.classes_[(proba[:, 1] >= 0.5).astype(int)]

    @staticmethod
    def two_columns(s: np.ndarray) -> np.ndarray:
        """``[1 - S, S]`` with `S` clipped to [0, 1].

        Parameters
        ----------
        s : ndarray of shape (n,)
            Suitability.

        Returns
        -------
        ndarray of shape (n, 2)
            Background and presence columns.
        """
        s = np.clip(s, 0.0, 1.0)
        return np.column_stack([1.0 - s, s])
