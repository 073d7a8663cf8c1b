"""Transfer a fitted niche model onto a prepared climate slice, block by block.

:func:`project` turns the predictor grids of a slice into samples (one row per cell), calls the
estimator's ``predict_proba`` on whole blocks and puts the result back on the grid.
:func:`project_slice` adds the thresholded layer and the novelty layers in the same pass
(:mod:`timeslice.transfer.blocks`): with dask inputs nothing is computed and the result is a lazy
array with the same chunks; with numpy inputs the slice is computed now, by rows, on a few
threads.

Projected suitability is a hypothesis about where the climate resembles the calibrated niche.
Biotic interactions and dispersal limits are outside the climate niche, and cells flagged as
novel (MESS < 0, NT1 < 0, NT2 > 1) rest on extrapolation.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import ConfigError, DataError
from timeslice.transfer.blocks import (
    DEFAULT_CHUNK_BUDGET_MB,
    SUITABILITY,
    SUITABLE,
    BlockPlan,
    auto_chunks,
    block_ufunc,
    row_layers,
)
from timeslice.transfer.metrics import NoveltyMetric, OutputLayer, prepare_metrics
from timeslice.transfer.reference import REFERENCE_DESCRIPTION, ReferenceSet, reference_table

__all__ = [
    "Predictor",
    "auto_chunks",
    "build_plan",
    "check_threshold",
    "layer_attributes",
    "project",
    "project_slice",
    "slice_attributes",
]

#: The clamping effect, a layer of the estimator step with ``clamp=True``.
CLAMP_EFFECT = OutputLayer("clamp_effect", np.float32)


def _check_model(model: Any, variables: Sequence[str]) -> tuple[list[str], int, bool]:
    """Return the column order the estimator expects, the positive-class column, and
    whether to pass a DataFrame."""
    if not hasattr(model, "predict_proba"):
        raise ConfigError(
            f"`model` ({type(model).__name__}) has no predict_proba; pass a fitted "
            "scikit-learn-style classifier"
        )
    names = getattr(model, "feature_names_in_", None)
    if names is not None:
        names = [str(n) for n in names]
        if set(names) != set(variables):
            raise DataError(
                f"`variables` {list(variables)} differ from the predictors the model was fitted "
                f"on {names}; project with the same variables"
            )
        order, as_frame = names, True
    else:
        order, as_frame = list(variables), False
    n_in = getattr(model, "n_features_in_", None)
    if n_in is not None and int(n_in) != len(order):
        raise DataError(
            f"the model was fitted on {n_in} predictors, `variables` has {len(order)} "
            f"({list(variables)}); project with the same variables"
        )
    classes = getattr(model, "classes_", None)
    pos = 1
    if classes is not None:
        classes = list(np.asarray(classes).tolist())
        if len(classes) != 2:
            raise DataError(
                f"the model has classes {classes}; a presence (1) / background (0) "
                "classifier is expected"
            )
        pos = classes.index(1) if 1 in classes else 1
    return order, pos, as_frame


def _probe(
    model: Any, ref: ReferenceSet, columns: Sequence[str], positive: int, as_frame: bool
) -> None:
    """Predict a few reference rows now, so a mismatched estimator fails with one clear line
    before any chunk is computed."""
    x = ref.values[:8][:, [ref.variables.index(c) for c in columns]]
    if as_frame:
        x = pd.DataFrame(x, columns=list(columns))
    try:
        prob = np.asarray(model.predict_proba(x))
    except Exception as err:  # any estimator failure becomes one line naming the model
        raise DataError(
            f"`model` ({type(model).__name__}).predict_proba failed on the reference sample "
            f"with predictors {list(columns)}: {type(err).__name__}: {err}; refit the model on "
            "these predictors"
        ) from err
    if prob.ndim != 2 or prob.shape[0] != len(x) or prob.shape[1] <= positive:
        raise DataError(
            f"`model` ({type(model).__name__}).predict_proba returned shape {prob.shape} for "
            f"{len(x)} rows; expected ({len(x)}, 2) columns [background, presence]"
        )
    p = prob[:, positive]
    if not np.all((p >= -1e-9) & (p <= 1 + 1e-9)):
        raise DataError(
            f"`model` ({type(model).__name__}).predict_proba returned values outside [0, 1] "
            f"(e.g. {p[(p < 0) | (p > 1)][:1]}); pass an estimator whose suitability is in 0..1"
        )


class Predictor:
    """The estimator step of a block: suitability of the finite cells, and the clamping effect.

    Parameters
    ----------
    model : estimator
        Fitted classifier with ``predict_proba``.
    variables : sequence of str
        Predictors in the order of the stacked rows (the reference's order).
    lo, hi : numpy.ndarray, optional
        Calibration range (in the estimator's column order) to clamp to.
    clamp_effect : bool
        With `lo`/`hi`: also return clamped minus unclamped suitability.
    """

    def __init__(self, model: Any, variables: Sequence[str], *, lo: np.ndarray | None = None,
                 hi: np.ndarray | None = None, clamp_effect: bool = False) -> None:
        self.model = model
        self.columns_fitted, self.positive, self.as_frame = _check_model(model, variables)
        self.order = [list(variables).index(c) for c in self.columns_fitted]
        self.lo, self.hi = lo, hi
        self.extra_layers: tuple[OutputLayer, ...] = (CLAMP_EFFECT,) if clamp_effect else ()
        # the estimator's own path for checked rows (x is finite, float64, in fitted order)
        fast = getattr(model, "suitability_of_finite", None)
        self.fast = fast if self.positive == 1 else None

    def predict(self, x: np.ndarray) -> np.ndarray:
        """Suitability (float32) of finite samples `x` of shape (n, k), columns as fitted.

        Parameters
        ----------
        x : numpy.ndarray, shape (n, k)
            Samples in the estimator's column order.

        Returns
        -------
        numpy.ndarray, shape (n,), float32
        """
        if x.shape[0] == 0:
            return np.empty(0, dtype=np.float32)
        if self.fast is not None:
            return np.asarray(self.fast(x)).astype(np.float32)
        if self.as_frame:
            x = pd.DataFrame(x, columns=list(self.columns_fitted), copy=False)
        prob = np.asarray(self.model.predict_proba(x))
        return prob[:, self.positive].astype(np.float32)

    def columns(self, good: np.ndarray) -> tuple[np.ndarray, ...]:
        """Suitability (and the clamping effect) of the stacked finite cells.

        Parameters
        ----------
        good : numpy.ndarray, shape (k, n)
            Finite predictor values in the reference's order.

        Returns
        -------
        tuple of numpy.ndarray
            ``(suitability,)`` or ``(suitability, clamp_effect)``, float32.
        """
        order = self.order
        # (n, k) in the fitted column order; a view when the orders agree
        x = good.T if order == list(range(len(order))) else good[order].T
        if self.lo is None:
            return (self.predict(x),)
        suit = self.predict(np.clip(x, self.lo, self.hi))
        if not self.extra_layers:
            return (suit,)
        delta = np.zeros_like(suit)
        outside = ((x < self.lo) | (x > self.hi)).any(axis=1)
        if outside.any():
            # Only cells with a predictor outside the range can differ; predict those twice.
            delta[outside] = suit[outside] - self.predict(x[outside])
        return suit, delta


def _predictor_arrays(ds: xr.Dataset, variables: Sequence[str], name: str) -> list[xr.DataArray]:
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"`{name}` must be an xarray Dataset, got {type(ds).__name__}")
    if not variables:
        raise ConfigError("`variables` is empty; list the predictors the model was fitted on")
    missing = [v for v in variables if v not in ds.data_vars]
    if missing:
        label = ds.attrs.get("slice_label", name)
        raise DataError(
            f"slice {label!r} has no predictor {missing[0]!r} (has "
            f"{sorted(map(str, ds.data_vars))}); prepare every slice with the model's variables"
        )
    arrays = [ds[v] for v in variables]
    for v, a in zip(variables, arrays):
        if a.dims != arrays[0].dims:
            raise DataError(
                f"predictor {v!r} has dims {a.dims}, expected {arrays[0].dims}; "
                "put every predictor on the same grid"
            )
    return arrays


def _clamp_bounds(
    reference: pd.DataFrame | xr.Dataset | ReferenceSet | None, columns: Sequence[str]
) -> tuple[np.ndarray, np.ndarray]:
    if reference is None:
        raise ConfigError(
            "`clamp=True` needs `reference` (the background sample within the calibration "
            "area) to know the calibration range"
        )
    ref = reference_table(reference, variables=columns)
    return ref.values.min(axis=0), ref.values.max(axis=0)


def _suitability_attrs(model: Any, columns: Sequence[str], clamp: bool) -> dict[str, Any]:
    """The layer table's attributes, with a description naming this run's estimator."""
    return {
        **SUITABILITY.attrs(),
        "description": (
            f"predict_proba of {type(model).__name__} on {', '.join(columns)}"
            + ("; predictors clamped to the calibration range" if clamp else "")
            + ". A hypothesis about climatic suitability: biotic interactions and dispersal "
            "limits are outside the climate niche; novel-climate cells are extrapolated"
        ),
        "valid_min": np.float32(0.0),
        "valid_max": np.float32(1.0),
        "clamped": int(bool(clamp)),
        "model_class": type(model).__name__,
    }


def _suitable_attrs(threshold: float) -> dict[str, Any]:
    """The layer table's attributes and flags, with a description naming the threshold."""
    return {
        **SUITABLE.attrs(),
        "description": (
            f"1 where suitability >= {threshold:g}, 0 below, -1 not land or no prediction; "
            "climatic suitability only (reachability and biotic interactions not included)"
        ),
        "threshold": threshold,
    }


def _clamp_attrs() -> dict[str, Any]:
    # the table's entry has no description yet; this one says how to read the difference
    return {
        **CLAMP_EFFECT.attrs(),
        "description": (
            "suitability with predictors clamped to the calibration range minus suitability "
            "without clamping; non-zero only where a predictor leaves that range"
        ),
    }


def layer_attributes(plan: BlockPlan, ref: ReferenceSet, *, clamp: bool) -> dict[str, dict]:
    """The attributes of every output layer of a transfer.

    Parameters
    ----------
    plan : BlockPlan
        From :func:`build_plan`.
    ref : ReferenceSet
        The reference the metrics were prepared from.
    clamp : bool
        Whether predictors were clamped.

    Returns
    -------
    dict
        ``{layer name: attrs}`` in output order.
    """
    out: dict[str, dict] = {}
    pred = plan.predictor
    if pred is not None:
        out["suitability"] = _suitability_attrs(pred.model, pred.columns_fitted, clamp)
        if plan.threshold is not None:
            out["suitable"] = _suitable_attrs(plan.threshold)
    for m in plan.metrics:
        for layer in m.layers:
            out[layer.name] = m.layer_attrs(layer.name, ref)
    if pred is not None and pred.extra_layers:
        out["clamp_effect"] = _clamp_attrs()
    return out


def slice_attributes(
    source_attrs: Mapping[str, Any], ref: ReferenceSet, model: Any, *, variables: Sequence[str],
    threshold: float, clamp: bool,
) -> dict[str, Any]:
    """Global attributes of a transferred slice.

    Parameters
    ----------
    source_attrs : mapping
        Attributes of the prepared slice (its label, year, period, model and scenario are kept).
    ref : ReferenceSet
        The reference sample.
    model : estimator
        The fitted estimator.
    variables : sequence of str
        Predictors.
    threshold : float
        Suitability threshold.
    clamp : bool
        Whether predictors were clamped.

    Returns
    -------
    dict
    """
    out = {k: source_attrs[k] for k in ("slice_label", "year", "period", "model", "scenario",
                                         "sea_level") if k in source_attrs}
    out.update({
        "reference_set": REFERENCE_DESCRIPTION,
        "reference_points": ref.n_points,
        "variables": " ".join(variables),
        "threshold": threshold,
        "clamped": int(bool(clamp)),
        "model_class": type(model).__name__,
        "caution": (
            "projections are hypotheses; biotic interactions and dispersal limits are "
            "outside the climate niche; novel-climate cells (mess < 0, nt1 < 0, nt2 > 1) "
            "are extrapolated and flagged, not trusted"
        ),
        "history": "timeslice.transfer.project.project_slice",
    })
    return out


def project(
    model: Any,
    ds: xr.Dataset,
    *,
    variables: Sequence[str],
    clamp: bool = False,
    reference: pd.DataFrame | xr.Dataset | ReferenceSet | None = None,
) -> xr.DataArray:
    """Suitability of a fitted estimator on every cell of a slice.

    Parameters
    ----------
    model : estimator
        Fitted scikit-learn-style classifier with ``predict_proba``; column 1 (the class ``1``)
        is suitability in 0..1. If it has ``feature_names_in_`` it gets a DataFrame with those
        column names, otherwise a plain array in the order of `variables`.
    ds : xarray.Dataset
        Prepared slice holding the predictors on ``(lat, lon)`` (any dims work); numpy or dask
        backed. Dask chunks are kept and nothing is computed.
    variables : sequence of str
        Predictors, as fitted.
    clamp : bool
        Clip every predictor to the range of `reference` before predicting.
    reference : pandas.DataFrame or xarray.Dataset, optional
        Calibration sample (needed with ``clamp=True``).

    Returns
    -------
    xarray.DataArray, [1]
        ``suitability`` float32 in 0..1, NaN where any predictor is missing.

    Notes
    -----
    Clamping replaces :math:`x_i` by :math:`\\min(\\max(x_i, m_i), M_i)` with the calibration
    minimum :math:`m_i` and maximum :math:`M_i`; it limits how far a response curve is
    extrapolated but does not make novel cells trustworthy.
    """
    variables = [str(v) for v in variables]
    arrays = _predictor_arrays(ds, variables, "ds")
    lo = hi = None
    pred0 = Predictor(model, variables)
    if reference is not None:
        ref = reference_table(reference, variables=pred0.columns_fitted)
        _probe(model, ref, pred0.columns_fitted, pred0.positive, pred0.as_frame)
    if clamp:
        lo, hi = _clamp_bounds(reference, pred0.columns_fitted)
    plan = BlockPlan(metrics=(), predictor=Predictor(model, variables, lo=lo, hi=hi))
    out = xr.apply_ufunc(
        block_ufunc,
        *arrays,
        kwargs={"plan": plan, "with_land": False},
        dask="parallelized",
        output_dtypes=[np.float32],
        keep_attrs=False,
    )
    out = out.rename("suitability")
    out.attrs = _suitability_attrs(model, pred0.columns_fitted, clamp)
    return out


def _resolve_chunks(
    ds: xr.Dataset,
    chunks: Mapping[str, int] | Literal["auto"] | None,
    n_variables: int,
    budget_mb: float,
) -> xr.Dataset:
    if chunks is None:
        return ds
    if isinstance(chunks, str):
        if chunks != "auto":
            raise ConfigError(
                f"`chunks` must be 'auto', a mapping like {{'lat': 500, 'lon': 500}} or None, "
                f"got {chunks!r}"
            )
        return ds.chunk(auto_chunks(ds.sizes, n_variables=n_variables, budget_mb=budget_mb))
    if not isinstance(chunks, Mapping):
        raise ConfigError(f"`chunks` must be 'auto' or a mapping of dim to size, got {chunks!r}")
    for d, n in chunks.items():
        if d not in ds.dims:
            raise ConfigError(
                f"`chunks` names dim {d!r}, which the slice does not have (dims {list(ds.dims)})"
            )
        if not isinstance(n, (int, np.integer)) or isinstance(n, bool) or (n < 1 and n != -1):
            raise ConfigError(
                f"`chunks[{d!r}]` must be a positive integer (or -1 for the whole dim), got {n!r}"
            )
    return ds.chunk(dict(chunks))


def build_plan(
    model: Any, ref: ReferenceSet, variables: Sequence[str], *, threshold: float, clamp: bool,
    metrics: Sequence[type[NoveltyMetric] | NoveltyMetric] | None = None,
) -> BlockPlan:
    """Check the estimator against the reference and prepare everything a block needs.

    Parameters
    ----------
    model : estimator
        Fitted classifier with ``predict_proba``.
    ref : ReferenceSet
        The reference sample, its variables in the order of `variables`.
    variables : sequence of str
        Predictors.
    threshold : float
        Suitability threshold in [0, 1].
    clamp : bool
        Clamp to the calibration range and add ``clamp_effect``.
    metrics : sequence, optional
        Novelty metrics (default: the registered ones).

    Returns
    -------
    BlockPlan
    """
    pred = Predictor(model, variables)
    _probe(model, ref, pred.columns_fitted, pred.positive, pred.as_frame)
    lo = hi = None
    if clamp:
        lo, hi = _clamp_bounds(ref, pred.columns_fitted)
    pred = Predictor(model, variables, lo=lo, hi=hi, clamp_effect=clamp)
    return BlockPlan(metrics=prepare_metrics(metrics, ref), predictor=pred, threshold=threshold)


def check_threshold(threshold: Any) -> float:
    """`threshold` as a float in [0, 1], or one clear line.

    Parameters
    ----------
    threshold : number
        Suitability threshold.

    Returns
    -------
    float
    """
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float, np.floating)):
        raise ConfigError(f"`threshold` must be a number in [0, 1], got {threshold!r}")
    threshold = float(threshold)
    if not 0.0 <= threshold <= 1.0:
        raise ConfigError(f"`threshold` must be in [0, 1], got {threshold}")
    return threshold


def _land_input(ds: xr.Dataset, dims: tuple[str, ...]) -> xr.DataArray | None:
    if "land" not in ds.data_vars:
        return None
    land = ds["land"]
    label = ds.attrs.get("slice_label", "ds")
    if land.dtype != bool:
        raise DataError(
            f"slice {label!r} variable `land` must be bool, got {land.dtype}; build it "
            "with timeslice.harmonise.landmask.land_mask"
        )
    if set(land.dims) != set(dims):
        raise DataError(
            f"slice {label!r} variable `land` has dims {land.dims}, the predictors "
            f"{dims}; put the land mask on the predictors' grid"
        )
    return land


def _lazy_layers(inputs: list[xr.DataArray], plan: BlockPlan, with_land: bool) -> list:
    """Every layer as one apply_ufunc over the chunks (lazy for dask inputs)."""
    specs = plan.layers()
    results = xr.apply_ufunc(
        block_ufunc, *inputs, kwargs={"plan": plan, "with_land": with_land},
        output_core_dims=[[]] * len(specs), dask="parallelized",
        output_dtypes=[s.dtype for s in specs], keep_attrs=False,
    )
    return list(results) if isinstance(results, tuple) else [results]


def project_slice(
    model: Any,
    ds: xr.Dataset,
    *,
    variables: Sequence[str],
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    threshold: float,
    clamp: bool = False,
    chunks: Mapping[str, int] | Literal["auto"] | None = None,
    chunk_budget_mb: float = DEFAULT_CHUNK_BUDGET_MB,
    metrics: Sequence[type[NoveltyMetric] | NoveltyMetric] | None = None,
) -> xr.Dataset:
    """Suitability, thresholded suitability and novelty of one prepared slice.

    Parameters
    ----------
    model : estimator
        Fitted classifier with ``predict_proba`` (see :func:`project`).
    ds : xarray.Dataset
        Prepared slice: predictors on ``(lat, lon)``, optionally ``land`` (bool); slice attrs
        (``slice_label``, ``year``, ``period``, ``model``, ``scenario``) are carried over.
    variables : sequence of str
        Predictors, as fitted.
    reference : pandas.DataFrame or xarray.Dataset
        Background sample within the calibration area (reference of MESS, ExDet and clamping).
    threshold : float
        Suitability in [0, 1] at or above which a cell counts as suitable.
    clamp : bool
        Clamp predictors to the calibration range; adds ``clamp_effect``.
    chunks : mapping or "auto", optional
        Re-chunk the slice along lat/lon before projecting: ``{"lat": n, "lon": m}``, or "auto"
        for chunks fitting `chunk_budget_mb`. None keeps the input's chunks (or none).
    chunk_budget_mb : float
        Working-memory budget per chunk for ``chunks="auto"``, MB; for a numpy-backed slice
        without `chunks`, the budget of each row block.
    metrics : sequence of NoveltyMetric classes or instances, optional
        Novelty metrics computed in the same pass (default: every registered one, MESS and
        ExDet; see :mod:`timeslice.transfer.metrics`).

    Returns
    -------
    xarray.Dataset
        ``suitability`` (float32), ``suitable`` (int8: 1 suitable, 0 not, -1 not land or no
        prediction), ``mess`` (float32), ``most_dissimilar`` (int16 flags), ``nt1``, ``nt2``
        (float32) and, with `clamp`, ``clamp_effect`` (float32, clamped − unclamped
        suitability), then the layers of any further metric. Lazy if the input is dask backed
        or `chunks` is given; otherwise computed now by row blocks on
        :func:`row_threads` threads.
    """
    threshold = check_threshold(threshold)
    variables = [str(v) for v in variables]
    _predictor_arrays(ds, variables, "ds")
    eager_rows = chunks is None and not _is_lazy(ds, variables)
    ds = _resolve_chunks(ds, chunks, len(variables), chunk_budget_mb)
    ref = reference_table(reference, variables=variables)
    plan = build_plan(model, ref, variables, threshold=threshold, clamp=clamp, metrics=metrics)
    inputs = _predictor_arrays(ds, variables, "ds")
    land = _land_input(ds, inputs[0].dims)
    if eager_rows and inputs[0].ndim == 2:
        results = row_layers(inputs, land, plan, chunk_budget_mb)
    else:
        results = _lazy_layers(inputs + ([land] if land is not None else []), plan,
                               land is not None)
    attrs = layer_attributes(plan, ref, clamp=clamp)
    layers = {}
    for spec, da in zip(plan.layers(), results):
        da = da.rename(spec.name)
        da.attrs = attrs[spec.name]
        if not np.issubdtype(np.dtype(spec.dtype), np.floating):
            da.encoding["_FillValue"] = spec.fill
        layers[spec.name] = da
    out = xr.Dataset(layers)
    out.attrs = slice_attributes(ds.attrs, ref, model, variables=variables, threshold=threshold,
                                 clamp=clamp)
    return out


def _is_lazy(ds: xr.Dataset, variables: Sequence[str]) -> bool:
    names = list(variables) + (["land"] if "land" in ds.data_vars else [])
    return any(ds[v].chunks is not None for v in names)
