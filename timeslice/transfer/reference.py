"""The reference (calibration) sample of the novelty metrics, and the stacking of a block's
finite cells that every metric and the estimator share.

The *reference set* is the background sample drawn within the model's calibration area (one row
per point, one column per predictor). :func:`reference_table` validates it once; every metric
prepares from the :class:`ReferenceSet` it returns.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError

__all__ = [
    "REFERENCE_DESCRIPTION",
    "ReferenceSet",
    "reference_table",
    "scatter",
    "target_arrays",
    "valid_columns",
]

#: Text written into output attributes to say what the reference set is.
REFERENCE_DESCRIPTION = "background sample within the calibration area"


class ReferenceSet:
    """A validated reference sample: variable names and a float64 ``(n_points, n_vars)`` array.

    Built by :func:`reference_table`; carried between the public functions so that validation
    happens once.

    Parameters
    ----------
    values : numpy.ndarray, shape (n_points, n_vars), float64
        The reference values, C-contiguous.
    variables : tuple of str
        Variable names, one per column.
    """

    __slots__ = ("values", "variables")

    def __init__(self, values: np.ndarray, variables: tuple[str, ...]) -> None:
        self.values = values
        self.variables = variables

    @property
    def n_points(self) -> int:
        """Number of reference points."""
        return int(self.values.shape[0])


def reference_table(
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    *,
    variables: Sequence[str] | None = None,
    name: str = "reference",
) -> ReferenceSet:
    """Validate a reference sample and return it as a :class:`ReferenceSet`.

    Parameters
    ----------
    reference : pandas.DataFrame or xarray.Dataset or ReferenceSet
        One column per variable (DataFrame), or one data variable per predictor along a single
        ``point`` dimension (Dataset).
    variables : sequence of str, optional
        Variables to use, in this order. Default: every column (DataFrame) or every data
        variable (Dataset) of `reference`.
    name : str
        How to call the argument in error messages.

    Returns
    -------
    ReferenceSet

    Raises
    ------
    DataError
        A variable is missing, not numeric or holds NaN/inf; fewer than 2 points; or a variable
        has zero range (every reference point has the same value).
    """
    if isinstance(reference, ReferenceSet):
        if variables is None or tuple(variables) == reference.variables:
            return reference
        reference = pd.DataFrame(reference.values, columns=list(reference.variables))
    if isinstance(reference, xr.Dataset):
        dims = set(reference.dims)
        if dims != {"point"}:
            raise DataError(
                f"`{name}` Dataset must have exactly one dimension `point`, got {sorted(dims)}; "
                "pass a DataFrame with one column per variable instead"
            )
        available = list(reference.data_vars)
        getter = lambda v: np.asarray(reference[v].values)  # noqa: E731 - reference is small
    elif isinstance(reference, pd.DataFrame):
        available = [str(c) for c in reference.columns]
        getter = lambda v: reference[v].to_numpy()  # noqa: E731
    else:
        raise DataError(
            f"`{name}` must be a pandas DataFrame (one column per variable) or an xarray Dataset "
            f"with a `point` dimension, got {type(reference).__name__}"
        )
    if variables is None:
        variables = available
    variables = tuple(str(v) for v in variables)
    if not variables:
        raise DataError(f"`{name}` has no variables; pass at least one predictor column")
    missing = [v for v in variables if v not in available]
    if missing:
        raise DataError(
            f"`{name}` has no variable {missing[0]!r} (has {available}); "
            "sample the background for every predictor of the model"
        )
    columns = []
    for v in variables:
        col = getter(v)
        if not np.issubdtype(col.dtype, np.number) or np.issubdtype(col.dtype, np.complexfloating):
            raise DataError(f"`{name}` variable {v!r} must be numeric, got dtype {col.dtype}")
        col = col.astype(np.float64)
        bad = int(np.count_nonzero(~np.isfinite(col)))
        if bad:
            raise DataError(
                f"`{name}` variable {v!r} has {bad} missing or infinite values; "
                "drop background points without climate before using them as reference"
            )
        columns.append(col)
    values = np.stack(columns, axis=1) if columns else np.empty((0, 0))
    if values.shape[0] < 2:
        raise DataError(
            f"`{name}` has {values.shape[0]} points; at least 2 are needed (more than "
            "1,000 background points are common practice)"
        )
    span = values.max(axis=0) - values.min(axis=0)
    for v, s in zip(variables, span):
        if not s > 0:
            raise DataError(
                f"`{name}` variable {v!r} has zero range (every reference value is "
                f"{values[0, variables.index(v)]:g}); drop it from the predictors"
            )
    return ReferenceSet(np.ascontiguousarray(values), variables)


def target_arrays(target: xr.Dataset, variables: Sequence[str], name: str) -> list[xr.DataArray]:
    """The predictors of `target` in the order of `variables`, checked to share one grid.

    Parameters
    ----------
    target : xarray.Dataset
        Slice holding one data variable per predictor.
    variables : sequence of str
        Predictors, in order.
    name : str
        How to call `target` in error messages.

    Returns
    -------
    list of xarray.DataArray
    """
    if not isinstance(target, xr.Dataset):
        raise DataError(
            f"`{name}` must be an xarray Dataset with one data variable per predictor, "
            f"got {type(target).__name__}"
        )
    missing = [v for v in variables if v not in target.data_vars]
    if missing:
        raise DataError(
            f"`{name}` has no variable {missing[0]!r} (has {sorted(map(str, target.data_vars))}); "
            "every reference variable must be present in the target slice"
        )
    arrays = [target[v] for v in variables]
    dims0 = arrays[0].dims
    for v, a in zip(variables, arrays):
        if set(a.dims) != set(dims0):
            raise DataError(
                f"`{name}` variable {v!r} has dims {a.dims}, expected {dims0} like "
                f"{variables[0]!r}; put every predictor on the same grid"
            )
    return arrays


def valid_columns(blocks: Sequence[np.ndarray] | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Finite cells of same-shape blocks as a float64 ``(k, n_valid)`` matrix, and their mask.

    Parameters
    ----------
    blocks : sequence of numpy.ndarray, or numpy.ndarray of shape (k, ...)
        One array per predictor, all of one shape.

    Returns
    -------
    good : numpy.ndarray, shape (k, n_valid), float64
        C-contiguous, cells in their order; cells with any missing predictor are never copied.
    valid : numpy.ndarray, shape (n,), bool
        True where every predictor is finite (``n`` cells of one block, flattened).
    """
    from timeslice.transfer.kernels import stack_finite

    if isinstance(blocks, np.ndarray):
        x = blocks.reshape(blocks.shape[0], -1)
    else:
        x = np.stack([np.asarray(b).reshape(-1) for b in blocks])
    if x.dtype not in (np.float32, np.float64):
        x = x.astype(np.float64)
    return stack_finite(np.ascontiguousarray(x))


def scatter(values: np.ndarray, valid: np.ndarray, fill: Any) -> np.ndarray:
    """Values of the valid cells back onto all cells.

    Parameters
    ----------
    values : numpy.ndarray, shape (n_valid,)
        One value per valid cell, in cell order.
    valid : numpy.ndarray, shape (n,), bool
        The mask from :func:`valid_columns`.
    fill : scalar
        Value of the other cells.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Of the dtype of `values`.
    """
    if values.shape[0] == valid.shape[0]:
        return values
    out = np.full(valid.shape, fill, dtype=values.dtype)
    out[valid] = values
    return out
