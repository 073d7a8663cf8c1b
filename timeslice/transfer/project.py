"""Transfer a fitted niche model onto a prepared climate slice, chunk by chunk.

:func:`project` turns the predictor grids of a slice into samples (one row per cell), calls the
estimator's ``predict_proba`` on whole chunks and puts the result back on the grid. With dask
inputs nothing is computed: the result is a lazy array with the same chunks. :func:`project_slice`
adds the thresholded layer and the novelty layers (MESS, ExDet) a series needs.

Projected suitability is a hypothesis about where the climate resembles the calibrated niche.
Biotic interactions and dispersal limits are outside the climate niche, and cells flagged as
novel (MESS < 0, NT1 < 0, NT2 > 1) rest on extrapolation.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any, Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import ConfigError, DataError
from timeslice.transfer.novelty import (
    DISSIMILAR_FILL,
    REFERENCE_DESCRIPTION,
    ReferenceSet,
    _CountTable,
    _count_table_cached,
    _exdet_columns,
    _exdet_params,
    _mess_columns,
    _set_exdet_attrs,
    _set_mess_attrs,
    _scatter,
    _valid_columns,
    reference_table,
)

__all__ = ["auto_chunks", "project", "project_slice"]

#: Code written into ``suitable`` where the cell is not land or has no prediction.
SUITABLE_FILL = np.int8(-1)

#: Default memory budget per chunk for ``chunks="auto"``, MB (our choice).
DEFAULT_CHUNK_BUDGET_MB = 64.0

# Working memory per cell of one chunk in the fused slice kernel: about 32 bytes per predictor
# (float64 stacks, the valid-cell copy, the estimator's input copy, MESS temporaries) plus
# about 35 bytes of outputs and masks, measured with tracemalloc for 2-16 predictors and the
# ellipsoid estimator (bench/transfer.py prints it first). Rounded up: estimators that expand
# features (splines, hinges) need a larger budget.
_BYTES_PER_CELL_PER_VAR = 40
_BYTES_PER_CELL_FIXED = 64


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


def _predict_rows(
    x: np.ndarray,
    *,
    model: Any,
    columns: Sequence[str],
    positive: int,
    as_frame: bool,
) -> np.ndarray:
    """Suitability (float32) of finite samples ``x`` of shape (n, k), columns as fitted."""
    if x.shape[0] == 0:
        return np.empty(0, dtype=np.float32)
    if as_frame:
        x = pd.DataFrame(x, columns=list(columns), copy=False)
    prob = np.asarray(model.predict_proba(x))
    return prob[:, positive].astype(np.float32)


def _predict_block(
    *blocks: np.ndarray,
    order: Sequence[int],
    lo: np.ndarray | None = None,
    hi: np.ndarray | None = None,
    **kw: Any,
) -> np.ndarray:
    """Suitability of one chunk; `order` maps fitted columns to the blocks."""
    shape = np.shape(blocks[0])
    good, valid = _valid_columns([blocks[j] for j in order])
    x = good.T
    if lo is not None:
        x = np.clip(x, lo, hi)
    suit = _predict_rows(x, **kw)
    return _scatter(suit, valid, np.float32(np.nan)).reshape(shape)


def _slice_block(
    *blocks: np.ndarray,
    order: Sequence[int],
    predict: dict[str, Any],
    table: _CountTable,
    exdet_params: dict[str, Any],
    lo: np.ndarray | None,
    hi: np.ndarray | None,
    threshold: float,
    with_land: bool,
) -> tuple[np.ndarray, ...]:
    """Every per-slice layer of one chunk from one pass over its predictors.

    `blocks` are the predictors (reference order), then the land mask if `with_land`.
    Returns suitability, suitable, MESS, most_dissimilar, NT1, NT2 and, when `lo` is given, the
    clamping effect. The predictors are stacked once; the estimator gets them in its fitted order.
    """
    land = None
    if with_land:
        *blocks, land = blocks
    shape = np.shape(blocks[0])
    good, valid = _valid_columns(blocks)
    order = list(order)
    # (n_valid, k) in the fitted column order; a view when the orders agree
    x = good.T if order == list(range(len(order))) else good[order].T
    nan32 = np.float32(np.nan)
    if lo is None:
        suit = _predict_rows(x, **predict)
        extra: tuple[np.ndarray, ...] = ()
    else:
        suit = _predict_rows(np.clip(x, lo, hi), **predict)
        delta = np.zeros_like(suit)
        outside = ((x < lo) | (x > hi)).any(axis=1)
        if outside.any():
            # Only cells with a predictor outside the range can differ; predict those twice.
            delta[outside] = suit[outside] - _predict_rows(x[outside], **predict)
        extra = (_scatter(delta, valid, nan32).reshape(shape),)
    mess_v, dissimilar_v = _mess_columns(table, good)
    nt1, nt2 = _exdet_columns(exdet_params, good)
    suitable = _scatter((suit >= threshold).astype(np.int8), valid, SUITABLE_FILL).reshape(shape)
    if land is not None:
        np.copyto(suitable, SUITABLE_FILL, where=~np.asarray(land, dtype=bool))
    return (
        _scatter(suit, valid, nan32).reshape(shape),
        suitable,
        _scatter(mess_v.astype(np.float32), valid, nan32).reshape(shape),
        _scatter(dissimilar_v, valid, DISSIMILAR_FILL).reshape(shape),
        _scatter(nt1.astype(np.float32), valid, nan32).reshape(shape),
        _scatter(nt2.astype(np.float32), valid, nan32).reshape(shape),
        *extra,
    )


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
    return {
        "units": "1",
        "long_name": "climatic suitability",
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
    columns, positive, as_frame = _check_model(model, variables)
    kw: dict[str, Any] = {
        "model": model, "columns": columns, "positive": positive, "as_frame": as_frame,
        "order": [variables.index(c) for c in columns],
    }
    if reference is not None:
        ref = reference_table(reference, variables=columns)
        _probe(model, ref, columns, positive, as_frame)
    if clamp:
        kw["lo"], kw["hi"] = _clamp_bounds(reference, columns)
    out = xr.apply_ufunc(
        _predict_block,
        *arrays,
        kwargs=kw,
        dask="parallelized",
        output_dtypes=[np.float32],
        keep_attrs=False,
    )
    out = out.rename("suitability")
    out.attrs = _suitability_attrs(model, columns, clamp)
    return out


def auto_chunks(
    sizes: Mapping[str, int],
    *,
    n_variables: int,
    budget_mb: float = DEFAULT_CHUNK_BUDGET_MB,
    dims: tuple[str, str] = ("lat", "lon"),
) -> dict[str, int]:
    """Chunk sizes along `dims` so that one chunk's working memory fits `budget_mb`.

    Parameters
    ----------
    sizes : mapping of str to int
        Dimension sizes of the slice (e.g. ``ds.sizes``).
    n_variables : int
        Number of predictors processed together.
    budget_mb : float
        Working-memory budget per chunk in MB (10⁶ bytes). Each dask thread holds one chunk.
    dims : tuple of str
        The two spatial dims; other dims are kept whole.

    Returns
    -------
    dict
        ``{dim: size}`` for each of `dims` present in `sizes`; whole rows of longitude where they
        fit (rows are contiguous in NetCDF files), otherwise square-ish tiles.
    """
    if not budget_mb > 0:
        raise ConfigError(f"chunk memory budget must be > 0 MB, got {budget_mb}")
    other = 1
    for d, n in sizes.items():
        if d not in dims:
            other *= int(n)
    per_cell = (_BYTES_PER_CELL_PER_VAR * max(int(n_variables), 1) + _BYTES_PER_CELL_FIXED) * other
    cells = max(int(budget_mb * 1e6 // per_cell), 1)
    ydim, xdim = dims
    ny, nx = int(sizes.get(ydim, 1)), int(sizes.get(xdim, 1))
    if cells >= nx:
        cy, cx = max(min(cells // nx, ny), 1), nx
    else:
        side = max(int(math.isqrt(cells)), 1)
        cy, cx = min(side, ny), min(max(cells // side, 1), nx)
    out = {}
    if ydim in sizes:
        out[ydim] = cy
    if xdim in sizes:
        out[xdim] = cx
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
        Working-memory budget per chunk for ``chunks="auto"``, MB.

    Returns
    -------
    xarray.Dataset
        ``suitability`` (float32), ``suitable`` (int8: 1 suitable, 0 not, -1 not land or no
        prediction), ``mess`` (float32), ``most_dissimilar`` (int16 flags), ``nt1``, ``nt2``
        (float32) and, with `clamp`, ``clamp_effect`` (float32, clamped − unclamped
        suitability). Lazy if the input is dask backed or `chunks` is given.
    """
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float, np.floating)):
        raise ConfigError(f"`threshold` must be a number in [0, 1], got {threshold!r}")
    threshold = float(threshold)
    if not 0.0 <= threshold <= 1.0:
        raise ConfigError(f"`threshold` must be in [0, 1], got {threshold}")
    variables = [str(v) for v in variables]
    _predictor_arrays(ds, variables, "ds")
    ds = _resolve_chunks(ds, chunks, len(variables), chunk_budget_mb)
    ref = reference_table(reference, variables=variables)

    columns, positive, as_frame = _check_model(model, variables)
    _probe(model, ref, columns, positive, as_frame)
    lo = hi = None
    if clamp:
        lo, hi = _clamp_bounds(ref, columns)
    inputs = _predictor_arrays(ds, variables, "ds")
    with_land = "land" in ds.data_vars
    if with_land:
        land = ds["land"]
        label = ds.attrs.get("slice_label", "ds")
        if land.dtype != bool:
            raise DataError(
                f"slice {label!r} variable `land` must be bool, got {land.dtype}; build it "
                "with timeslice.harmonise.landmask.land_mask"
            )
        if set(land.dims) != set(inputs[0].dims):
            raise DataError(
                f"slice {label!r} variable `land` has dims {land.dims}, the predictors "
                f"{inputs[0].dims}; put the land mask on the predictors' grid"
            )
        inputs.append(land)
    n_out = 7 if clamp else 6
    results = xr.apply_ufunc(
        _slice_block,
        *inputs,
        kwargs={
            "order": [variables.index(c) for c in columns],
            "predict": {
                "model": model, "columns": columns, "positive": positive, "as_frame": as_frame,
            },
            "table": _count_table_cached(np.sort(ref.values, axis=0)),
            "exdet_params": _exdet_params(ref),
            "lo": lo,
            "hi": hi,
            "threshold": threshold,
            "with_land": with_land,
        },
        output_core_dims=[[]] * n_out,
        dask="parallelized",
        output_dtypes=[np.float32, np.int8, np.float32, np.int16, np.float32, np.float32]
        + ([np.float32] if clamp else []),
        keep_attrs=False,
    )
    suit, suitable, mess_da, dissimilar_da, nt1, nt2 = (r.rename(k) for r, k in zip(
        results, ("suitability", "suitable", "mess", "most_dissimilar", "nt1", "nt2")))
    suit.attrs = _suitability_attrs(model, columns, clamp)
    _set_mess_attrs(mess_da, dissimilar_da, ref)
    _set_exdet_attrs(nt1, nt2, ref)
    delta = None
    if clamp:
        delta = results[6].rename("clamp_effect")
        delta.attrs = {
            "units": "1",
            "long_name": "effect of clamping on suitability",
            "description": (
                "suitability with predictors clamped to the calibration range minus suitability "
                "without clamping; non-zero only where a predictor leaves that range"
            ),
        }
    suitable.attrs = {
        "units": "1",
        "long_name": "suitable climate",
        "description": (
            f"1 where suitability >= {threshold:g}, 0 below, -1 not land or no prediction; "
            "climatic suitability only (reachability and biotic interactions not included)"
        ),
        "flag_values": np.array([0, 1], dtype=np.int8),
        "flag_meanings": "unsuitable suitable",
        "threshold": threshold,
    }
    suitable.encoding["_FillValue"] = SUITABLE_FILL

    layers = {
        "suitability": suit, "suitable": suitable, "mess": mess_da,
        "most_dissimilar": dissimilar_da,
        "nt1": nt1, "nt2": nt2,
    }
    if delta is not None:
        layers["clamp_effect"] = delta

    out = xr.Dataset(layers)
    for key in ("slice_label", "year", "period", "model", "scenario", "sea_level"):
        if key in ds.attrs:
            out.attrs[key] = ds.attrs[key]
    out.attrs.update(
        {
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
        }
    )
    return out
