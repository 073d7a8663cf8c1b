"""Evaluation: AUC, TSS, continuous Boyce index, thresholds and spatial block cross-validation.

Convention throughout: a cell or point is *suitable* when its score is >= the threshold.
"""

from __future__ import annotations

import difflib
import inspect
from typing import Literal

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import clone

from timeslice.errors import ConfigError, DataError
from timeslice.grid import AUTHALIC_RADIUS_KM
from timeslice.progress import Progress, no_progress

__all__ = [
    "THRESHOLD_RULES",
    "auc",
    "boyce",
    "cross_validate",
    "omission",
    "spatial_folds",
    "threshold",
    "training_scores",
    "tss",
    "weak_model_message",
]

#: Threshold rules accepted by :func:`threshold`.
THRESHOLD_RULES = ("equal_ss", "fixed", "max_sss", "mtp", "p10")

#: Mean spatial-CV AUC below which a model is reported as weak: Swets (1988, Science 240:1285)
#: calls 0.5-0.7 "low accuracy" (band limits from memory).
WEAK_AUC = 0.7
#: Mean spatial-CV TSS below which a model is reported as weak: common practice (no single
#: published cut-off; TSS is often read against the kappa bands of Landis & Koch 1977,
#: Biometrics 33:159, where 0.21-0.40 is "fair"; from memory).
WEAK_TSS = 0.3

#: km per degree of latitude on the authalic sphere.
_KM_PER_DEG = np.pi * AUTHALIC_RADIUS_KM / 180.0


def _scores(x, name: str) -> np.ndarray:
    a = np.asarray(x, dtype=float).ravel()
    if a.size == 0:
        raise DataError(f"`{name}` is empty; need at least one score")
    if not np.all(np.isfinite(a)):
        raise DataError(f"`{name}` has {int((~np.isfinite(a)).sum())} missing or infinite score(s)")
    return a


def auc(scores_presence, scores_background) -> float:
    """Area under the ROC curve of presence against background scores.

    Parameters
    ----------
    scores_presence, scores_background : array-like
        Scores of the presence and the background (or absence) points.

    Returns
    -------
    float
        AUC in [0, 1].

    Notes
    -----
    The Mann-Whitney form, ties counted one half:

    .. math:: \\mathrm{AUC} = \\frac{U}{n_1 n_0}, \\qquad
              U = R_1 - \\frac{n_1 (n_1 + 1)}{2},

    with :math:`R_1` the sum of the average ranks of the presences in the pooled sample.

    References
    ----------
    Hanley, J. A., & McNeil, B. J. (1982). The meaning and use of the area under a receiver
    operating characteristic (ROC) curve. Radiology 143:29-36.
    """
    p = _scores(scores_presence, "scores_presence")
    b = _scores(scores_background, "scores_background")
    ranks = stats.rankdata(np.concatenate([p, b]), method="average")
    u = ranks[: p.size].sum() - p.size * (p.size + 1) / 2.0
    return float(u / (p.size * b.size))


def _sens_spec(p: np.ndarray, b: np.ndarray, t: float) -> tuple[float, float]:
    return float(np.mean(p >= t)), float(np.mean(b < t))


def tss(scores_presence, scores_background, threshold: float) -> float:
    """True skill statistic at a threshold: sensitivity + specificity - 1.

    Sensitivity is the share of presences with score >= `threshold`; specificity the share of
    background (absence) points with score < `threshold`.

    Parameters
    ----------
    scores_presence, scores_background : array-like
        Scores of the presences and of the background points.
    threshold : float
        Suitability threshold.

    Returns
    -------
    float
        TSS in [-1, 1].

    References
    ----------
    Allouche, O., Tsoar, A., & Kadmon, R. (2006). Assessing the accuracy of species distribution
    models: prevalence, kappa and the true skill statistic (TSS). J. Appl. Ecol. 43:1223-1232.
"""
    p = _scores(scores_presence, "scores_presence")
    b = _scores(scores_background, "scores_background")
    se, sp = _sens_spec(p, b, float(threshold))
    return se + sp - 1.0


def omission(scores_presence, threshold: float) -> float:
    """Share of presences with score below `threshold` (omission rate).

    Parameters
    ----------
    scores_presence : array-like
        Scores of the presences.
    threshold : float
        Suitability threshold.

    Returns
    -------
    float
        Omission rate in [0, 1].
    """
    p = _scores(scores_presence, "scores_presence")
    return float(np.mean(p < float(threshold)))


def boyce(
    scores_presence,
    scores_background,
    *,
    window: float = 0.1,
    n_windows: int = 100,
    return_curve: bool = False,
):
    """Continuous Boyce index.

    Parameters
    ----------
    scores_presence : array-like
        Scores at the evaluation presences.
    scores_background : array-like
        Scores of the evaluation area (background points or all cells).
    window : float
        Window width as a fraction of the score range (0.1).
    n_windows : int
        Number of evenly spaced window starts (100).
    return_curve : bool
        Also return a DataFrame ``centre, P, E, F`` of the kept windows.

    Returns
    -------
    float (or (float, DataFrame))
        Spearman rank correlation of F = P/E against the window centres; NaN when fewer than
        two windows remain or F is constant.

    Notes
    -----
    The score range :math:`[a, b]` is that of the pooled presence and background scores.
    With :math:`W = w(b - a)`, windows start at :math:`n` evenly spaced points from :math:`a`
    to :math:`b - W` and are closed, :math:`[s, s + W]`. In window :math:`i`, :math:`P_i` is
    the share of presences and :math:`E_i` the share of background points; windows with
    :math:`E_i = 0` are dropped; :math:`F_i = P_i / E_i`; the index is Spearman's
    :math:`\\rho` (average ranks on ties) between :math:`F_i` and the window centres.

    References
    ----------
    Hirzel, A. H., Le Lay, G., Helfer, V., Randin, C., & Guisan, A. (2006). Evaluating the
    ability of habitat suitability models to predict species presences. Ecol. Model.
    199:142-152.
    """
    p = _scores(scores_presence, "scores_presence")
    b = _scores(scores_background, "scores_background")
    if not (0 < window < 1):
        raise ConfigError(f"Boyce `window` must be a fraction in (0, 1), got {window}")
    if int(n_windows) < 2:
        raise ConfigError(f"Boyce `n_windows` must be >= 2, got {n_windows}")
    lo = min(p.min(), b.min())
    hi = max(p.max(), b.max())
    width = window * (hi - lo)
    starts = np.linspace(lo, hi - width, int(n_windows))
    ends = starts + width
    # counts in closed windows via sorted searches
    ps, bs = np.sort(p), np.sort(b)
    n_p = np.searchsorted(ps, ends, side="right") - np.searchsorted(ps, starts, side="left")
    n_b = np.searchsorted(bs, ends, side="right") - np.searchsorted(bs, starts, side="left")
    keep = n_b > 0
    P = n_p[keep] / p.size
    E = n_b[keep] / b.size
    F = P / E
    centres = (starts + width / 2.0)[keep]
    if F.size < 2 or np.all(F == F[0]) or hi == lo:
        rho = float("nan")
    else:
        rho = float(stats.spearmanr(F, centres).statistic)
    if return_curve:
        return rho, pd.DataFrame({"centre": centres, "P": P, "E": E, "F": F})
    return rho


def threshold(
    scores_presence,
    scores_background=None,
    *,
    rule: Literal["p10", "mtp", "max_sss", "equal_ss", "fixed"] = "p10",
    value: float | None = None,
) -> float:
    """Binarisation threshold from training scores.

    Parameters
    ----------
    scores_presence : array-like
        Training presence scores.
    scores_background : array-like, optional
        Training background scores (needed by ``max_sss`` and ``equal_ss``).
    rule : {"p10", "mtp", "max_sss", "equal_ss", "fixed"}
        ``mtp`` minimum training presence (Pearson et al. 2007); ``p10`` the 10th-percentile
        training presence, ``numpy.quantile(scores, 0.1, method="higher")``: the
        :math:`(\\lceil 0.1(n-1) \\rceil + 1)`-th smallest of :math:`n` scores, so about 10 % of
        training presences (:math:`\\lceil 0.1(n-1) \\rceil` of them) fall below it; ``max_sss`` the threshold maximising
        sensitivity + specificity over the candidate values (every distinct score), lowest on
        ties (Liu et al. 2005, 2013); ``equal_ss`` the candidate value where sensitivity and
        specificity are closest to equal, the lowest of the closest (Cantor et al. 1999;
        Liu et al. 2005, "Sens=Spec"); ``fixed`` the given `value`.
    value : float, optional
        The threshold for ``fixed``, in [0, 1].

    Returns
    -------
    float

    References
    ----------
    Pearson, R. G., Raxworthy, C. J., Nakamura, M., & Peterson, A. T. (2007). Predicting species
    distributions from small numbers of occurrence records. J. Biogeogr. 34:102-117.
    Liu, C., Berry, P. M., Dawson, T. P., & Pearson, R. G. (2005). Selecting thresholds of
    occurrence in the prediction of species distributions. Ecography 28:385-393.
    Cantor, S. B., Sun, C. C., Tortolero-Luna, G., Richards-Kortum, R., & Follen, M. (1999). A
    comparison of C/B ratios from studies using receiver operating characteristic curve
    analysis. J. Clin. Epidemiol. 52:885-892.
    Liu, C., White, M., & Newell, G. (2013). Selecting thresholds for the prediction of species
    occurrence with presence-only data. J. Biogeogr. 40:778-789.
    """
    if rule not in THRESHOLD_RULES:
        close = difflib.get_close_matches(str(rule), THRESHOLD_RULES, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        raise ConfigError(f"unknown threshold rule {rule!r}; {hint}choose one of {', '.join(THRESHOLD_RULES)}")
    if rule == "fixed":
        if value is None or not (0.0 <= float(value) <= 1.0):
            raise ConfigError(f"threshold rule 'fixed' needs `value` in [0, 1], got {value}")
        return float(value)
    p = _scores(scores_presence, "scores_presence")
    if rule == "mtp":
        return float(p.min())
    if rule == "p10":
        return float(np.quantile(p, 0.1, method="higher"))
    if scores_background is None:
        raise ConfigError(f"threshold rule {rule!r} needs background scores (`scores_background`)")
    b = _scores(scores_background, "scores_background")
    cand = np.unique(np.concatenate([p, b]))
    ps, bs = np.sort(p), np.sort(b)
    sens = 1.0 - np.searchsorted(ps, cand, side="left") / p.size  # share >= t
    spec = np.searchsorted(bs, cand, side="left") / b.size  # share < t
    if rule == "equal_ss":
        # sensitivity falls and specificity rises with t: the closest crossing, lowest on ties
        gap = np.abs(sens - spec)
        return float(cand[np.flatnonzero(gap <= gap.min() + 1e-12)[0]])
    total = sens + spec
    best = np.flatnonzero(total >= total.max() - 1e-12)[0]  # lowest t on ties
    return float(cand[best])


def spatial_folds(
    lon,
    lat,
    *,
    block_km: float,
    n_folds: int = 5,
    seed: int | np.random.Generator | None = 0,
    scheme: Literal["random", "checkerboard"] = "random",
) -> np.ndarray:
    """Assign points to cross-validation folds by spatial blocks.

    Parameters
    ----------
    lon, lat : array-like
        Point coordinates [degrees].
    block_km : float
        Block side [km].
    n_folds : int
        Number of folds.
    seed : int or Generator
        Seed of the random block-to-fold assignment.
    scheme : {"random", "checkerboard"}
        ``random``: blocks are shuffled and dealt to folds in turn (so folds hold equal numbers
        of occupied blocks, +-1). ``checkerboard``: fold = (row + column) mod `n_folds` (with 2
        folds the classic checkerboard; with more, diagonal bands).

    Returns
    -------
    numpy.ndarray of int
        Fold number 0 .. n_folds-1 of each point.

    Notes
    -----
    Blocks form a regular lat-lon lattice anchored at (-180, -90): rows are
    :math:`b/(\\pi R/180)` degrees of latitude high, columns :math:`b` km wide at the middle
    latitude :math:`\\varphi_m` of the points, i.e. :math:`b/(\\pi R \\cos\\varphi_m/180)` degrees,
    so blocks are square in km at :math:`\\varphi_m` and the checkerboard stays regular.

    References
    ----------
    Roberts, D. R., et al. (2017). Cross-validation strategies for data with temporal, spatial,
    hierarchical, or phylogenetic structure. Ecography 40:913-929.
    """
    lon = np.asarray(lon, dtype=float).ravel()
    lat = np.asarray(lat, dtype=float).ravel()
    if lon.shape != lat.shape:
        raise DataError(f"`lon` and `lat` differ in length ({lon.size} vs {lat.size})")
    if not (np.isfinite(block_km) and block_km > 0):
        raise ConfigError(f"cross-validation `block_km` must be > 0, got {block_km}")
    n_folds = int(n_folds)
    if n_folds < 2:
        raise ConfigError(f"cross-validation needs `n_folds` >= 2, got {n_folds}")
    if scheme not in ("random", "checkerboard"):
        close = difflib.get_close_matches(str(scheme), ["random", "checkerboard"], n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"fold `scheme` must be 'random' or 'checkerboard', got {scheme!r}{hint}")
    if lon.size == 0:
        return np.zeros(0, dtype=np.int64)
    dlat = block_km / _KM_PER_DEG
    row = np.floor((lat + 90.0) / dlat).astype(np.int64)
    lat_ref = float(np.clip(0.5 * (np.nanmin(lat) + np.nanmax(lat)), -89.0, 89.0))
    dlon = min(block_km / (_KM_PER_DEG * np.cos(np.deg2rad(lat_ref))), 360.0)
    col = np.floor(((lon + 180.0) % 360.0) / dlon).astype(np.int64)
    if scheme == "checkerboard":
        return ((row + col) % n_folds).astype(np.int64)
    blocks, inverse = np.unique(np.column_stack([row, col]), axis=0, return_inverse=True)
    inverse = np.asarray(inverse).ravel()
    if blocks.shape[0] < n_folds:
        raise DataError(
            f"only {blocks.shape[0]} spatial block(s) of {block_km:g} km hold points, fewer than "
            f"n_folds={n_folds}; reduce the block size or the number of folds"
        )
    rng = np.random.default_rng(seed)
    order = rng.permutation(blocks.shape[0])
    fold_of_block = np.empty(blocks.shape[0], dtype=np.int64)
    fold_of_block[order] = np.arange(blocks.shape[0]) % n_folds
    return fold_of_block[inverse]


def training_scores(model, X) -> np.ndarray:
    """Suitability of the training rows for threshold rules.

    Out-of-bag scores where the estimator provides them (``oob_suitability_``, e.g. the forest,
    whose in-sample scores are optimistic), else ``predict_proba(X)[:, 1]``.

    Parameters
    ----------
    model : estimator
        Fitted niche estimator.
    X : array-like of shape (n, k)
        The rows it was fitted on.

    Returns
    -------
    ndarray of shape (n,)
        Training scores.
    """
    s = model.predict_proba(X)[:, 1]
    oob = getattr(model, "oob_suitability_", None)
    if oob is not None and np.shape(oob) == s.shape:
        s = np.where(np.isfinite(oob), oob, s)
    return s


def cross_validate(
    model,
    X,
    y,
    folds,
    *,
    threshold_rule: str = "p10",
    threshold_value: float | None = None,
    sample_weight=None,
    progress: Progress = no_progress,
) -> pd.DataFrame:
    """Fit a clone of `model` per fold and score it on the held-out fold.

    Parameters
    ----------
    model : estimator
        Unfitted niche estimator (it is cloned).
    X : array-like or DataFrame, shape (n, k)
    y : array-like of 0/1
        1 presence, 0 background.
    folds : array-like of int
        Fold of each row (:func:`spatial_folds`).
    threshold_rule, threshold_value
        Threshold from the training fold (:func:`threshold`) on :func:`training_scores`.
    sample_weight : array-like, optional
        Passed to ``fit``.
    progress : callable, optional
        ``progress("fit", k, n_folds)``: with k = 0 before the first fold and k after fold k.

    Notes
    -----
    Estimators whose ``fit`` takes ``groups`` (those that tune themselves by inner
    cross-validation) get the fold labels of the training rows, so their tuning is itself
    spatially blocked and never sees the held-out fold.

    Returns
    -------
    pandas.DataFrame
        One row per fold: ``fold, n_train_presence, n_train_background, n_test_presence,
        n_test_background, threshold, auc, boyce, tss, omission``. Metrics are NaN in a fold
        whose test part lacks presences or background.
    """
    y = np.asarray(y).ravel()
    folds = np.asarray(folds).ravel()
    if folds.size != y.size:
        raise DataError(f"`folds` has {folds.size} entries but y has {y.size}")
    Xa = X
    rows = []
    take = (lambda idx: Xa.iloc[idx]) if isinstance(Xa, pd.DataFrame) else (lambda idx: np.asarray(Xa)[idx])
    sw = None if sample_weight is None else np.asarray(sample_weight, dtype=float).ravel()
    labels = np.unique(folds)
    progress("fit", 0, int(labels.size))
    for k, f in enumerate(labels, start=1):
        rows.append(_fold_scores(model, take, y, folds, f, sw, threshold_rule, threshold_value))
        progress("fit", k, int(labels.size))
    return pd.DataFrame(rows)


def _fold_scores(model, take, y, folds, f, sw, threshold_rule, threshold_value) -> dict:
    """Train on every fold but `f`, score on `f`: one row of :func:`cross_validate`."""
    test = folds == f
    tr, te = np.flatnonzero(~test), np.flatnonzero(test)
    rec = {
        "fold": int(f),
        "n_train_presence": int((y[tr] == 1).sum()),
        "n_train_background": int((y[tr] == 0).sum()),
        "n_test_presence": int((y[te] == 1).sum()),
        "n_test_background": int((y[te] == 0).sum()),
    }
    nan = dict(threshold=np.nan, auc=np.nan, boyce=np.nan, tss=np.nan, omission=np.nan)
    if rec["n_train_presence"] < 2 or rec["n_train_background"] < 1:
        return {**rec, **nan}
    est = clone(model)
    kw = {} if sw is None else {"sample_weight": sw[tr]}
    if "groups" in inspect.signature(est.fit).parameters:
        kw["groups"] = folds[tr]  # nested: inner tuning on the remaining spatial folds
    est.fit(take(tr), y[tr], **kw)
    s_tr = training_scores(est, take(tr))
    t = threshold(s_tr[y[tr] == 1], s_tr[y[tr] == 0], rule=threshold_rule, value=threshold_value)
    if rec["n_test_presence"] == 0 or rec["n_test_background"] == 0:
        return {**rec, **nan, "threshold": t}
    s_te = est.predict_proba(take(te))[:, 1]
    sp, sb = s_te[y[te] == 1], s_te[y[te] == 0]
    return {
        **rec,
        "threshold": t,
        "auc": auc(sp, sb),
        "boyce": boyce(sp, sb),
        "tss": tss(sp, sb, t),
        "omission": omission(sp, t),
    }


def weak_model_message(
    evaluation: pd.DataFrame, *, min_auc: float = WEAK_AUC, min_tss: float = WEAK_TSS
) -> str | None:
    """One-line warning when a model is weak on spatial block cross-validation, else None.

    Returns
    -------
    str or None
        The warning, or None when the model passes.

    Parameters
    ----------
    evaluation : pandas.DataFrame
        The evaluation table of :func:`timeslice.niche.workflow.fit_niche` (a ``summary`` column
        with a ``mean`` row), or the per-fold table of :func:`cross_validate`.
    min_auc, min_tss : float
        Weak when the mean held-out AUC is below `min_auc` or the mean TSS below `min_tss`
        (defaults :data:`WEAK_AUC`, :data:`WEAK_TSS`).

    Notes
    -----
    The rule is ours: mean AUC < 0.7 (the "low accuracy" band of Swets 1988, from memory) or
    mean TSS < 0.3 (common practice). With presence-background data the attainable AUC falls as
    the species occupies more of the calibration area (about 1 - a/2 for a share a; Phillips,
    Anderson & Schapire 2006, Ecol. Model. 190:231, from memory), so a wide-ranging species can
    be flagged with a sound model; the message says so. The truth benchmark (docs/truth.md)
    found that a model this weak can give a change of the wrong sign.
"""
    if evaluation is None or len(evaluation) == 0:
        return None
    ev = evaluation
    if "summary" in ev.columns and (ev["summary"] == "mean").any():
        row = ev[ev["summary"] == "mean"].iloc[0]
        auc_m, tss_m = float(row.get("auc", np.nan)), float(row.get("tss", np.nan))
    else:
        auc_m = float(np.nanmean(ev["auc"])) if "auc" in ev and ev["auc"].notna().any() else np.nan
        tss_m = float(np.nanmean(ev["tss"])) if "tss" in ev and ev["tss"].notna().any() else np.nan
    weak = []
    if np.isfinite(auc_m) and auc_m < float(min_auc):
        weak.append(f"AUC {auc_m:.2f} < {float(min_auc):g}")
    if np.isfinite(tss_m) and tss_m < float(min_tss):
        weak.append(f"TSS {tss_m:.2f} < {float(min_tss):g}")
    if not np.isfinite(auc_m) and not np.isfinite(tss_m):
        return ("model not evaluated: spatial cross-validation gave no AUC or TSS; "
                "treat every projected change as unverified")
    if not weak:
        return None
    return (
        f"weak model on spatial block cross-validation ({' and '.join(weak)}): projected "
        "changes may be wrong in size or even sign; check predictors and records (a wide "
        "range also lowers AUC)"
    )
