"""A compiled evaluator for forests of depth-limited trees.

Each tree of depth at most ``D`` is laid out as a complete binary tree: internal node ``i`` has
children ``2i + 1`` (``x <= threshold``) and ``2i + 2``; a leaf above depth ``D`` is padded with
an infinite threshold (every cell goes left) down to depth ``D``, where the ``2**D`` leaves hold
the tree's presence fraction. A cell then walks exactly ``D`` levels of every tree with no
branch to mispredict, and the per-tree sums are added in tree order, so the mean is bit-identical
to averaging scikit-learn's ``predict_proba`` over the trees (tested).

Thresholds are stored as float32, rounded down: for a float32 value ``x`` and a float64
threshold ``t``, ``x <= t`` exactly when ``x <= t32`` with ``t32`` the largest float32 not above
``t``, so the comparisons are the ones scikit-learn makes (it compares the float32 input with
the float64 threshold). Eight cells walk each tree side by side (independent chains the processor
overlaps). The loop is compiled by numba (``nogil``: transfer row blocks run it on several
threads; cached on disk; no ``fastmath``). This module imports numba: the forest imports it only
when it is fitted or predicts.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["MAX_COMPLETE_DEPTH", "CompleteForest", "complete_forest", "forest_sum"]

#: Deepest trees laid out as complete trees (2**12 leaves per tree); deeper forests are
#: evaluated tree by tree by scikit-learn.
MAX_COMPLETE_DEPTH = 12


class CompleteForest:
    """Arrays of a forest laid out as complete trees of one depth.

    Parameters
    ----------
    feature : ndarray of int8 (int32 beyond 127 predictors), shape (n_trees, 2**depth - 1)
        Predictor tested at each internal node (0 at padding nodes).
    threshold : ndarray of float32, shape (n_trees, 2**depth - 1)
        Go left when ``x <= threshold`` (+inf at padding nodes).
    value : ndarray of float64, shape (n_trees, 2**depth)
        Presence fraction of each leaf.
    depth : int
        Levels walked per tree.
    """

    def __init__(self, feature: np.ndarray, threshold: np.ndarray, value: np.ndarray, depth: int):
        self.feature = feature
        self.threshold = threshold
        self.value = value
        self.depth = int(depth)

    def mean(self, X32: np.ndarray) -> np.ndarray:
        """Mean over the trees of the leaf presence fraction of each row.

        Parameters
        ----------
        X32 : ndarray of float32, shape (n, k)
            Predictors, C-contiguous.

        Returns
        -------
        ndarray of float64, shape (n,)
            The forest's suitability.
        """
        out = np.empty(X32.shape[0])
        forest_sum(np.ascontiguousarray(X32, dtype=np.float32), self.feature, self.threshold, self.value,
                   self.depth, out)
        return out / self.feature.shape[0]


def complete_forest(trees) -> CompleteForest | None:
    """The complete-tree layout of fitted scikit-learn decision trees (None when too deep).

    Parameters
    ----------
    trees : sequence of sklearn.tree.DecisionTreeClassifier
        Fitted binary trees.

    Returns
    -------
    CompleteForest or None
        None when a tree is deeper than :data:`MAX_COMPLETE_DEPTH`.
    """
    depth = max(max(int(t.get_depth()) for t in trees), 1)
    if depth > MAX_COMPLETE_DEPTH:
        return None
    n_int = 2**depth - 1
    feature = np.zeros((len(trees), n_int), dtype=np.int32)
    threshold = np.full((len(trees), n_int), np.inf)
    value = np.zeros((len(trees), 2**depth))
    for k, est in enumerate(trees):
        t = est.tree_
        p = t.value[:, 0, :].copy()  # presence fraction exactly as predict_proba normalises it
        norm = p.sum(axis=1)
        norm[norm == 0.0] = 1.0
        leaf_value = p[:, 1] / norm
        stack = [(0, 0, 0)]  # (node of the fitted tree, complete-tree index, level)
        while stack:
            node, i, level = stack.pop()
            if level == depth:
                value[k, i - n_int] = leaf_value[node]
                continue
            left, right = t.children_left[node], t.children_right[node]
            if left < 0:  # a leaf above the last level: pad, both children are the same leaf
                stack += [(node, 2 * i + 1, level + 1), (node, 2 * i + 2, level + 1)]
            else:
                feature[k, i] = t.feature[node]
                threshold[k, i] = t.threshold[node]
                stack += [(left, 2 * i + 1, level + 1), (right, 2 * i + 2, level + 1)]
    t32 = threshold.astype(np.float32)
    above = t32.astype(np.float64) > threshold
    t32[above] = np.nextafter(t32[above], np.float32(-np.inf))
    small = feature.max(initial=0) < 128
    return CompleteForest(feature.astype(np.int8 if small else np.int32), t32, value, depth)


@njit(nogil=True, cache=True, fastmath=False, boundscheck=False)
def forest_sum(X, feature, threshold, value, depth, out):  # pragma: no cover - compiled
    """Sum over the trees of each row's leaf value, in tree order.

    Parameters
    ----------
    X : ndarray of float32, shape (n, k)
        Predictors, C-contiguous.
    feature, threshold, value, depth
        The arrays of a :class:`CompleteForest`.
    out : ndarray of float64, shape (n,)
        Filled with the sums.
    """
    n = X.shape[0]
    n_trees, n_int = feature.shape
    n8 = n - n % 8
    for b in range(0, n8, 8):  # eight independent walks side by side
        x0, x1, x2, x3 = X[b], X[b + 1], X[b + 2], X[b + 3]
        x4, x5, x6, x7 = X[b + 4], X[b + 5], X[b + 6], X[b + 7]
        a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = 0.0
        for t in range(n_trees):
            f, th, v = feature[t], threshold[t], value[t]
            i0 = i1 = i2 = i3 = i4 = i5 = i6 = i7 = 0
            for _ in range(depth):
                i0 = 2 * i0 + 1 + (x0[f[i0]] > th[i0])
                i1 = 2 * i1 + 1 + (x1[f[i1]] > th[i1])
                i2 = 2 * i2 + 1 + (x2[f[i2]] > th[i2])
                i3 = 2 * i3 + 1 + (x3[f[i3]] > th[i3])
                i4 = 2 * i4 + 1 + (x4[f[i4]] > th[i4])
                i5 = 2 * i5 + 1 + (x5[f[i5]] > th[i5])
                i6 = 2 * i6 + 1 + (x6[f[i6]] > th[i6])
                i7 = 2 * i7 + 1 + (x7[f[i7]] > th[i7])
            a0 += v[i0 - n_int]
            a1 += v[i1 - n_int]
            a2 += v[i2 - n_int]
            a3 += v[i3 - n_int]
            a4 += v[i4 - n_int]
            a5 += v[i5 - n_int]
            a6 += v[i6 - n_int]
            a7 += v[i7 - n_int]
        out[b], out[b + 1], out[b + 2], out[b + 3] = a0, a1, a2, a3
        out[b + 4], out[b + 5], out[b + 6], out[b + 7] = a4, a5, a6, a7
    for r in range(n8, n):
        a = 0.0
        for t in range(n_trees):
            i = 0
            for _ in range(depth):
                i = 2 * i + 1 + (X[r, feature[t, i]] > threshold[t, i])
            a += value[t, i - n_int]
        out[r] = a
