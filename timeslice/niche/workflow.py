"""The niche stage in one call: records and a baseline slice to a fitted, evaluated niche model."""

from __future__ import annotations

import dataclasses
import inspect
import os
import warnings
from collections.abc import Mapping, Sequence
from types import SimpleNamespace
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from sklearn.inspection import permutation_importance

from timeslice.errors import ConfigError, DataError, TimesliceWarning
from timeslice.niche import data as ndata
from timeslice.niche import evaluate as nev
from timeslice.niche.models import make_model
from timeslice.niche.select import screen
from timeslice.progress import Progress, no_progress

__all__ = ["MIN_RECORDS", "NicheFit", "fit_niche", "permutation_table", "response_curves"]

#: Fewest records left after cleaning and thinning for a fit (common practice puts reliable
#: presence-only models at a few tens of records; Pearson et al. 2007 tested down to 5).
MIN_RECORDS = 10


@dataclasses.dataclass
class NicheFit:
    """A fitted niche model and everything needed to report and transfer it.

    Parameters
    ----------
    model, variables, threshold, presence, background, calibration_area
        See Attributes.
    cleaning, screening, evaluation, response, importance, params, dated
        See Attributes.

    Attributes
    ----------
    model : estimator
        Fitted on all presences and background; ``model.predict_proba(X)[:, 1]`` is suitability.
    variables : list of str
        Predictors used, in the column order the model expects.
    threshold : float
        Suitable when suitability >= threshold.
    presence, background : pandas.DataFrame
        ``lon, lat`` and the predictors; `background` is the novelty reference set.
    calibration_area : xarray.DataArray
        Boolean (lat, lon).
    cleaning, screening, evaluation, response, importance : pandas.DataFrame
        Tables for the report (see :func:`fit_niche`).
    params : dict
        Every choice made, for the methods paragraph and the manifest.
    dated : pandas.DataFrame or None
        Fossil records of the taxon with ages (:func:`timeslice.niche.data.dated_fossils`):
        dropped from the calibration, offered to the hindcast check.
"""

    model: Any
    variables: list[str]
    threshold: float
    presence: pd.DataFrame
    background: pd.DataFrame
    calibration_area: xr.DataArray
    cleaning: pd.DataFrame
    screening: pd.DataFrame
    evaluation: pd.DataFrame
    response: pd.DataFrame
    importance: pd.DataFrame
    params: dict = dataclasses.field(default_factory=dict)
    dated: pd.DataFrame | None = None

    def tables(self) -> dict[str, pd.DataFrame]:
        """The report tables by name: cleaning, screening, evaluation, response, importance."""
        return {
            "cleaning": self.cleaning,
            "screening": self.screening,
            "evaluation": self.evaluation,
            "response": self.response,
            "importance": self.importance,
        }

    def suitability(self, X) -> np.ndarray:
        """Suitability of rows of `X` (DataFrame with the model's variables, or array).

        Parameters
        ----------
        X : pandas.DataFrame or array-like
            Rows with the model's variables (a DataFrame is reordered to them).

        Returns
        -------
        ndarray of shape (n,)
            Suitability.
        """
        if isinstance(X, pd.DataFrame):
            X = X[self.variables]
        return self.model.predict_proba(X)[:, 1]


def response_curves(
    model,
    background: pd.DataFrame,
    variables: Sequence[str],
    *,
    n_points: int = 60,
    widen: float = 0.25,
) -> pd.DataFrame:
    """Marginal response curves over a range wider than the calibration data.

    Each predictor is varied over ``[min - widen*range, max + widen*range]`` of the background
    while the others are held at their background medians.

    Parameters
    ----------
    model : estimator
        Fitted niche estimator.
    background : pandas.DataFrame
        Background points with the predictors.
    variables : sequence of str
        Predictors, in the model's column order.
    n_points : int
        Points per curve (the background minimum and maximum are added).
    widen : float
        Extension beyond the background range, as a fraction of it.

    Returns
    -------
    pandas.DataFrame
        ``variable, value, suitability, inside_calibration`` (True within the background range).
"""
    variables = list(variables)
    B = background[variables].to_numpy(dtype=float)
    med = np.nanmedian(B, axis=0)
    rows = []
    for j, v in enumerate(variables):
        lo, hi = np.nanmin(B[:, j]), np.nanmax(B[:, j])
        span = hi - lo if hi > lo else max(abs(lo), 1.0)
        grid = np.linspace(lo - widen * span, hi + widen * span, int(n_points))
        grid = np.unique(np.concatenate([grid, [lo, hi]]))
        Xg = np.tile(med, (grid.size, 1))
        Xg[:, j] = grid
        s = model.predict_proba(pd.DataFrame(Xg, columns=variables))[:, 1]
        rows.append(
            pd.DataFrame(
                {"variable": v, "value": grid, "suitability": s, "inside_calibration": (grid >= lo) & (grid <= hi)}
            )
        )
    return pd.concat(rows, ignore_index=True)


def permutation_table(
    model, X: pd.DataFrame, y, *, n_repeats: int = 5, seed=0, max_background: int = 5000
) -> pd.DataFrame:
    """Permutation importance: drop in training AUC when one predictor is shuffled.

    Breiman (2001), Random forests, Machine Learning 45:5-32 (the permutation idea), computed
    with :func:`sklearn.inspection.permutation_importance` and ``scoring="roc_auc"`` on all
    presences and at most `max_background` background rows (a seeded random subset).

    Parameters
    ----------
    model : estimator
        Fitted niche estimator.
    X : pandas.DataFrame
        Training predictors.
    y : array-like
        1 presence, 0 background.
    n_repeats : int
        Shuffles per predictor.
    seed : int or Generator
        Seed of the subset and the shuffles.
    max_background : int
        Most background rows used.

    Returns
    -------
    pandas.DataFrame
        ``variable, importance_mean, importance_sd`` sorted by decreasing importance.
"""
    y = np.asarray(y)
    bg = np.flatnonzero(y == 0)
    if bg.size > int(max_background):
        rng = np.random.default_rng(_int_seed(seed))
        keep = np.sort(np.concatenate([np.flatnonzero(y != 0), rng.choice(bg, int(max_background), replace=False)]))
        X, y = X.iloc[keep], y[keep]
    res = permutation_importance(
        model, X, y, scoring="roc_auc", n_repeats=int(n_repeats), random_state=_int_seed(seed)
    )
    out = pd.DataFrame(
        {"variable": list(X.columns), "importance_mean": res.importances_mean, "importance_sd": res.importances_std}
    )
    return out.sort_values("importance_mean", ascending=False, kind="stable").reset_index(drop=True)


def _int_seed(seed) -> int:
    if isinstance(seed, np.random.Generator):
        return int(seed.integers(0, 2**31 - 1))
    return int(seed) if seed is not None else 0


def _summary_rows(evaluation: pd.DataFrame) -> pd.DataFrame:
    metrics = ["threshold", "auc", "boyce", "tss", "omission"]
    counts = ["n_train_presence", "n_train_background", "n_test_presence", "n_test_background"]
    per = evaluation.copy()
    per.insert(0, "summary", "fold")
    mean = {"summary": "mean", "fold": -1, **{c: float(per[c].mean()) for c in counts}}
    sd = {"summary": "sd", "fold": -1, **{c: np.nan for c in counts}}
    for m in metrics:
        mean[m] = float(per[m].mean(skipna=True)) if per[m].notna().any() else np.nan
        sd[m] = float(per[m].std(ddof=1, skipna=True)) if per[m].notna().sum() > 1 else np.nan
    out = pd.concat([per, pd.DataFrame([mean, sd])], ignore_index=True)
    for c in counts:  # whole numbers per fold; the mean row keeps its fraction
        if (out[c].dropna() % 1 == 0).all():
            out[c] = out[c].astype("Int64")
    return out


def fit_niche(
    records: pd.DataFrame, baseline: xr.Dataset, *, variables: Sequence[str] | None = None,
    algorithm: str = "envelope", algorithm_params: Mapping[str, Any] | None = None,
    buffer_km: float = 200.0, calibration: str = "buffer",
    calibration_mask: xr.DataArray | str | os.PathLike | None = None, n_background: int = 10000,
    background_file: str | os.PathLike | None = None, thin: str | float | None = "cell",
    uncertainty_max_m: float | None = None, years: tuple[float | None, float | None] | None = None,
    taxon: str | int | Sequence[str | int] | None = None, taxon_field: str = "auto",
    fold_subspecies: bool = False, keep_basis: Sequence[str] = (), drop_flags: Sequence[str] | None = None,
    centroid_min_records: int | None = 5, centroid_min_uncertainty_m: float = 10_000.0,
    screen_max_r: float | None = 0.7, screen_max_vif: float | None = 10.0,
    priority: Sequence[str] | None = None, cv_block_km: float = 100.0, cv_folds: int = 5,
    cv_scheme: str = "random", threshold_rule: str = "max_sss", threshold_value: float | None = None,
    min_records: int = MIN_RECORDS, importance_repeats: int = 5, seed: int = 0,
    progress: Progress = no_progress,
) -> NicheFit:
    """Clean, thin, delimit, sample, screen, fit, validate and threshold a niche model.

    Parameters
    ----------
    records : pandas.DataFrame
        Occurrence records (:func:`timeslice.readers.read_occurrences`).
    baseline : xarray.Dataset
        Prepared baseline slice: ``bio*`` predictors, ``land`` (and ``ice``) on (lat, lon).
    variables : sequence of str, optional
        Candidate predictors (default every ``bio1``..``bio19`` present); screening may drop some.
    algorithm, algorithm_params
        A name of :data:`timeslice.niche.models.MODEL_NAMES` and its hyperparameters.
    buffer_km, calibration, calibration_mask
        Calibration area: buffer radius [km], ``"buffer"``, ``"hull_buffer"`` or ``"mask"``
        (with `calibration_mask`, a DataArray or file).
    n_background, background_file
        Background points (all calibration cells if fewer); target-group records to use instead
        of random cells.
    thin : "cell", float or None
        One record per cell, a minimum distance in km, or no thinning.
    uncertainty_max_m, years, keep_basis, drop_flags, centroid_min_records, centroid_min_uncertainty_m
        Record rules of :func:`timeslice.niche.records.clean_records`.
    taxon, taxon_field, fold_subspecies
        Which taxon of the records to model (:func:`timeslice.niche.records.select_taxon`).
    screen_max_r, screen_max_vif, priority
        Predictor screening (:func:`timeslice.niche.select.screen`); both limits None skips it.
    cv_block_km, cv_folds, cv_scheme
        Spatial block cross-validation (:func:`timeslice.niche.evaluate.spatial_folds`).
    threshold_rule, threshold_value
        Threshold (:func:`timeslice.niche.evaluate.threshold`) on the full-data fit.
    min_records : int
        Fewest records needed after cleaning and thinning.
    importance_repeats : int
        Repeats of permutation importance (0 skips it).
    seed : int
        Seed of every random step (thinning, background, folds, algorithms, importance).
    progress : callable
        ``progress(stage, done, total)``: ``progress("fit", k, n_folds)`` with k = 0 before the
        first cross-validation fold and k after fold k, and ``(n_folds, n_folds)`` once more when
        the whole fit is done. Default: nothing.

    Returns
    -------
    NicheFit
        The fitted model, its tables and the choices made.

    Raises
    ------
    DataError
        Too few records (the message gives the drops per reason), no record in the grid, no land
        in the calibration area, constant or missing predictors.
    ConfigError
        Unknown algorithm, threshold rule or option value.
    """
    o = SimpleNamespace(**{k: v for k, v in locals().items() if k not in ("records", "baseline", "progress")})
    o.thin = _check_options(baseline, o)
    variables = _candidates(baseline, o.variables)
    model = _model(o)
    land = ndata.land_of(baseline)
    kept, cleaning, n_thinned = _usable_records(records, land, o)
    dated = ndata.dated_fossils(records, **_choice(o))
    area, bg_pts = _calibration(kept, land, o)
    pres, back, cleaning = _predictor_values(baseline, kept, bg_pts, variables, cleaning,
                                             n_thinned=n_thinned, min_records=o.min_records)
    chosen, screening = _screening(back, variables, o)
    X, y, lon, lat = _training_rows(pres, back, chosen)
    folds, evaluation = _block_cross_validation(model, X, y, lon, lat, o, progress)
    s, thr = _final_fit(model, X, y, folds, o)
    response, importance = _explanations(model, back, X, y, chosen, repeats=o.importance_repeats, seed=o.seed)
    params = _run_params(model, o, variables=variables, chosen=chosen, back=back, pres=pres, dated=dated,
                         cleaning=cleaning, threshold=thr, training_auc=float(nev.auc(s[y == 1], s[y == 0])))
    n_cv = int(np.unique(folds).size)
    progress("fit", n_cv, n_cv)
    return NicheFit(
        model=model, variables=list(chosen), threshold=float(thr),
        presence=pres[["lon", "lat", *chosen]], background=back[["lon", "lat", *chosen]],
        calibration_area=area, cleaning=cleaning, screening=screening, evaluation=evaluation,
        response=response, importance=importance, params=params, dated=dated if len(dated) else None,
    )


def _check_options(baseline, o) -> str | float | None:
    """The options of :func:`fit_niche` that can be judged before any work; returns the
    thinning rule (:func:`timeslice.niche.spatial.parse_thin`, the one place it is checked)."""
    if not isinstance(baseline, xr.Dataset):
        raise DataError(f"`baseline` must be a prepared slice Dataset, got {type(baseline).__name__}")
    thin = ndata.parse_thin(o.thin)
    if o.calibration not in ("buffer", "hull_buffer", "mask"):
        raise ConfigError(f"`calibration` must be 'buffer', 'hull_buffer' or 'mask', got {o.calibration!r}")
    if int(o.min_records) < 2:
        raise ConfigError(f"`min_records` must be >= 2, got {o.min_records}")
    return thin


def _choice(o) -> dict:
    """The taxon choice and the basis kinds kept, as :func:`clean_records` takes them."""
    return dict(taxon=o.taxon, taxon_field=o.taxon_field, fold_subspecies=o.fold_subspecies,
                keep_basis=tuple(o.keep_basis))


def _model(o):
    """The unfitted estimator, built first so that a bad name or rule fails before any work."""
    model = make_model(o.algorithm, **dict(o.algorithm_params or {}))
    if "random_state" in model.get_params(deep=False):
        model.set_params(random_state=o.seed)
    nev.threshold([0.5], [0.5], rule=o.threshold_rule, value=o.threshold_value)  # validate the rule early
    return model


def _training_rows(pres: pd.DataFrame, back: pd.DataFrame, chosen: list[str]):
    """Predictors, labels (1 presence, 0 background) and coordinates of every training row."""
    X = pd.concat([pres[chosen], back[chosen]], ignore_index=True)
    y = np.concatenate([np.ones(len(pres), dtype=int), np.zeros(len(back), dtype=int)])
    lon = np.concatenate([pres["lon"].to_numpy(), back["lon"].to_numpy()])
    lat = np.concatenate([pres["lat"].to_numpy(), back["lat"].to_numpy()])
    return X, y, lon, lat


def _explanations(model, back, X, y, chosen, *, repeats, seed):
    """Response curves and permutation importance (NaN rows when `repeats` is 0)."""
    response = response_curves(model, back, chosen)
    if int(repeats) > 0:
        return response, permutation_table(model, X, y, n_repeats=repeats, seed=seed)
    return response, pd.DataFrame({"variable": chosen, "importance_mean": np.nan, "importance_sd": np.nan})


def _candidates(baseline: xr.Dataset, variables) -> list[str]:
    """The candidate predictors: the ones asked for (all present), else every bio1..bio19."""
    if variables is None:
        variables = [f"bio{i}" for i in range(1, 20) if f"bio{i}" in baseline.data_vars]
        if not variables:
            raise DataError("baseline has no bio1..bio19 variables; pass `variables` or run the bioclim step")
    variables = list(variables)
    missing = [v for v in variables if v not in baseline.data_vars]
    if missing:
        raise DataError(
            f"baseline slice has no predictor(s) {', '.join(missing)}; available: "
            f"{', '.join(map(str, baseline.data_vars))}"
        )
    return variables


def _usable_records(records, land, o):
    """Cleaned and thinned records, the cleaning table and the number thinned out; stops with
    the drops per reason when no record lies in the grid or too few are left."""
    kept, cleaning = ndata.clean_records(
        records, land=land, uncertainty_max_m=o.uncertainty_max_m, years=o.years, drop_flags=o.drop_flags,
        centroid_min_records=o.centroid_min_records, centroid_min_uncertainty_m=o.centroid_min_uncertainty_m,
        **_choice(o),
    )
    n_in = cleaning.attrs["n_input"]
    by_reason = "; ".join(f"{r}: {n}" for r, n in zip(cleaning["reason"], cleaning["n_dropped"]) if n)
    drops = dict(zip(cleaning["reason"], cleaning["n_dropped"]))
    order = list(cleaning["reason"])
    before_grid = order[: order.index("outside grid")]
    reached_grid = n_in - sum(drops[r] for r in before_grid)
    if reached_grid > 0 and drops["outside grid"] == reached_grid:
        raise DataError(
            f"no record lies inside the model grid (lon {float(land.lon.min()):g}..{float(land.lon.max()):g}, "
            f"lat {float(land.lat.min()):g}..{float(land.lat.max()):g}); drops per reason: {by_reason}; "
            "check the coordinate columns (swapped lon/lat?) or the grid extent"
        )
    n_clean = len(kept)
    if o.thin == "cell":
        kept = ndata.thin(kept, grid=land, seed=o.seed)
    elif o.thin is not None:
        kept = ndata.thin(kept, min_distance_km=o.thin, seed=o.seed)
    n_thinned = n_clean - len(kept)
    if len(kept) < int(o.min_records):
        raise DataError(
            f"only {len(kept)} of {n_in} records left after cleaning and thinning, need at least "
            f"{int(o.min_records)}; drops per reason: {by_reason or 'none'}"
            + (f"; thinning: {n_thinned}" if n_thinned else "")
            + "; add records, relax the cleaning limits or thin less"
        )
    return kept, cleaning, n_thinned


def _calibration(kept, land, o):
    """The calibration area and the background points in it."""
    if o.calibration == "mask":
        if o.calibration_mask is None:
            raise ConfigError("calibration 'mask' needs a `calibration_mask` (file or DataArray)")
        area = ndata.calibration_area_from_mask(o.calibration_mask, land)
    else:
        area = ndata.calibration_area(kept, land, buffer_km=o.buffer_km, method=o.calibration)
    if o.background_file is not None:
        return area, ndata.read_background_file(o.background_file, area, n=o.n_background, seed=o.seed)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", TimesliceWarning)
        bg_pts = ndata.sample_background(area, n=o.n_background, seed=o.seed)
    for w in caught:  # re-issue at the caller of fit_niche
        warnings.warn(str(w.message), w.category, stacklevel=3)
    return area, bg_pts


def _predictor_values(baseline, kept, bg_pts, variables, cleaning, *, n_thinned, min_records):
    """Predictor values at the presences and background, rows with a missing value dropped (and
    counted in the cleaning table, with the thinning)."""
    pres = ndata.extract(baseline, kept, variables=variables)
    back = ndata.extract(baseline, bg_pts, variables=variables)
    for v in variables:
        col = back[v].to_numpy(dtype=float)
        if not np.isfinite(col).any():
            raise DataError(f"predictor {v!r} is missing everywhere in the calibration area; drop it or fix the baseline")
        # a (near-)constant predictor is dropped by the screening, with its reason
    ok_p = np.all(np.isfinite(pres[variables].to_numpy(dtype=float)), axis=1)
    ok_b = np.all(np.isfinite(back[variables].to_numpy(dtype=float)), axis=1)
    pres, back = pres[ok_p].reset_index(drop=True), back[ok_b].reset_index(drop=True)
    thin_how = kept.attrs.get("thinning", "")
    extra = pd.DataFrame({
        "reason": ["spatial thinning", "missing predictor values"],
        "n_dropped": [int(n_thinned), int((~ok_p).sum())],
        "note": [thin_how or "off", ""],
    })
    n_in = cleaning.attrs["n_input"]
    cleaning = pd.concat([cleaning, extra], ignore_index=True)
    cleaning.attrs.update(n_input=n_in, n_kept=len(pres), n_thinned=n_thinned)
    if len(pres) < int(min_records):
        raise DataError(
            f"only {len(pres)} records have every predictor, need at least {int(min_records)}; "
            "check the baseline predictors at the record locations"
        )
    return pres, back, cleaning


def _screening(back, variables, o):
    """The predictors kept by the correlation and VIF screening, and its table."""
    if o.screen_max_r is None and o.screen_max_vif is None:
        screening = pd.DataFrame(
            {"variable": variables, "kept": True, "reason": "kept (screening off)", "max_abs_r": np.nan, "vif": np.nan}
        )
        return list(variables), screening
    return screen(back[variables], max_abs_r=o.screen_max_r, max_vif=o.screen_max_vif, priority=o.priority)


def _block_cross_validation(model, X, y, lon, lat, o, progress):
    """Spatial block folds and the evaluation table (per fold, mean and sd)."""
    try:
        folds = nev.spatial_folds(lon, lat, block_km=o.cv_block_km, n_folds=o.cv_folds, seed=o.seed,
                                  scheme=o.cv_scheme)
        evaluation = nev.cross_validate(model, X, y, folds, threshold_rule=o.threshold_rule,
                                        threshold_value=o.threshold_value, progress=progress)
    except DataError as err:
        raise DataError(f"cross-validation: {err}") from err
    except ValueError as err:  # estimators reject bad hyperparameters with ValueError
        raise ConfigError(f"algorithm {o.algorithm!r}: {err}; check algorithm_params") from err
    return folds, _summary_rows(evaluation)


def _final_fit(model, X, y, folds, o):
    """Fit on all presences and background; the training scores and the threshold."""
    fit_kw = {"groups": folds} if "groups" in inspect.signature(model.fit).parameters else {}
    try:
        model.fit(X, y, **fit_kw)
    except ValueError as err:
        raise ConfigError(f"algorithm {o.algorithm!r}: {err}; check algorithm_params") from err
    s = nev.training_scores(model, X)
    return s, nev.threshold(s[y == 1], s[y == 0], rule=o.threshold_rule, value=o.threshold_value)


def _run_params(model, o, *, variables, chosen, back, pres, dated, cleaning, threshold, training_auc) -> dict:
    """Every choice made, for the methods paragraph and the manifest (plain JSON values)."""
    from timeslice import __version__

    return {
        "timeslice_version": __version__,
        "algorithm": str(o.algorithm),
        "algorithm_params": {k: _plain(v) for k, v in model.get_params(deep=False).items()},
        "candidate_variables": list(variables),
        "variables": list(chosen),
        "buffer_km": float(o.buffer_km),
        "calibration": o.calibration,
        "n_background": int(len(back)),
        "n_background_requested": int(o.n_background),
        "background": "target-group file" if o.background_file is not None else "random cells by area",
        "thin": o.thin,
        "uncertainty_max_m": o.uncertainty_max_m,
        "years": list(o.years) if o.years is not None else None,
        "taxon": list(o.taxon) if isinstance(o.taxon, (list, tuple)) else o.taxon,
        "taxon_field": o.taxon_field,
        "fold_subspecies": bool(o.fold_subspecies),
        "keep_basis": sorted(tuple(o.keep_basis)),
        "n_dated_fossils": int(len(dated)),
        "screen_max_r": o.screen_max_r,
        "screen_max_vif": o.screen_max_vif,
        "priority": list(o.priority or []),
        "cv_block_km": float(o.cv_block_km),
        "cv_folds": int(o.cv_folds),
        "cv_scheme": o.cv_scheme,
        "threshold_rule": o.threshold_rule,
        "threshold_value": o.threshold_value,
        "threshold": float(threshold),
        "min_records": int(o.min_records),
        "n_records_input": int(cleaning.attrs["n_input"]),
        "n_records_used": int(len(pres)),
        "seed": int(o.seed),
        "training_auc": training_auc,
        "fitted": model.fitted_summary() if hasattr(model, "fitted_summary") else {},
    }


def _plain(v):
    """JSON-friendly representation of a hyperparameter."""
    if isinstance(v, (str, int, float, bool)) or v is None:
        return v
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    return repr(v)
