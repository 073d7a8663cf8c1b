"""Input checks shared by the series functions (public within the series package)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from timeslice.errors import DataError

SLICE_META = ("year", "period", "model", "scenario")


def check_dataarray(obj, *, name: str, dims: Sequence[str] = ("lat", "lon")) -> xr.DataArray:
    """`obj` must be a DataArray with at least `dims`.

    Parameters
    ----------
    obj : object
        The argument to check.
    name : str
        Its name in the message.
    dims : sequence of str, default ("lat", "lon")
        Dimensions it must have.

    Returns
    -------
    xarray.DataArray
        `obj`; a :class:`~timeslice.errors.DataError` naming it otherwise.
    """
    if not isinstance(obj, xr.DataArray):
        raise DataError(
            f"`{name}` must be an xarray.DataArray, got {type(obj).__name__}; "
            f"pass a single variable such as stack[{name!r}]"
        )
    missing = [d for d in dims if d not in obj.dims]
    if missing:
        raise DataError(
            f"`{name}` lacks dimension(s) {missing} (has {list(obj.dims)}); "
            "give it dims (slice, lat, lon) or (lat, lon)"
        )
    return obj


def check_stack(
    stack, *, required: Sequence[str] = ("suitable",), name: str = "stack"
) -> xr.Dataset:
    """`stack` must be a stacked-series Dataset holding `required` with a `slice` dim.

    Parameters
    ----------
    stack : object
        The argument to check.
    required : sequence of str, default ("suitable",)
        Variables it must hold.
    name : str, default "stack"
        Its name in the message.

    Returns
    -------
    xarray.Dataset
        `stack`, its slice labels unique; a :class:`~timeslice.errors.DataError` otherwise.
    """
    if not isinstance(stack, xr.Dataset):
        raise DataError(
            f"`{name}` must be an xarray.Dataset (stacked series), got {type(stack).__name__}"
        )
    for var in required:
        if var not in stack.data_vars:
            raise DataError(
                f"`{name}` has no variable {var!r} (has {sorted(map(str, stack.data_vars))}); "
                "run the transfer step first or add it"
            )
    if "slice" not in stack.dims:
        raise DataError(f"`{name}` has no 'slice' dimension; stack the slices along 'slice'")
    labels = [str(v) for v in stack["slice"].values]
    dupes = sorted({lab for lab in labels if labels.count(lab) > 1})
    if dupes:
        raise DataError(
            f"`{name}`: slice labels are not unique: {dupes}; give each slice its own label"
        )
    return stack


def slice_labels(obj: xr.Dataset | xr.DataArray, *, dim: str = "slice") -> list[str]:
    """Slice labels as strings (positions when the dim has no coordinate).

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        A series.
    dim : str, default "slice"
        The slice dimension.

    Returns
    -------
    list of str
    """
    if dim in obj.coords:
        return [str(v) for v in obj[dim].values]
    return [str(i) for i in range(obj.sizes[dim])]


def check_label(obj: xr.Dataset | xr.DataArray, label: str, *, what: str = "reference",
                dim: str = "slice") -> int:
    """Position of slice `label`; DataError listing the labels otherwise.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        A series.
    label : str
        The slice label.
    what : str, default "reference"
        What the label is for, in the message.
    dim : str, default "slice"
        The slice dimension.

    Returns
    -------
    int
    """
    labels = slice_labels(obj, dim=dim)
    if str(label) not in labels:
        raise DataError(
            f"`{what}` slice {label!r} is not in the series; choose one of {labels}"
        )
    return labels.index(str(label))


def check_labels(obj: xr.Dataset | xr.DataArray, labels: Sequence[str], *, what: str,
                 dim: str = "slice") -> list[str]:
    """All `labels` must exist; DataError naming the missing ones.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        A series.
    labels : str or sequence of str
        Slice labels.
    what : str
        What the labels are for, in the message.
    dim : str, default "slice"
        The slice dimension.

    Returns
    -------
    list of str
        The labels as strings.
    """
    known = slice_labels(obj, dim=dim)
    if isinstance(labels, str):
        labels = [labels]
    missing = [str(lab) for lab in labels if str(lab) not in known]
    if missing:
        raise DataError(f"`{what}`: unknown slice label(s) {missing}; choose from {known}")
    if not labels:
        raise DataError(f"`{what}` is empty; give at least one slice label")
    return [str(lab) for lab in labels]


def valid_mask(x: np.ndarray) -> np.ndarray:
    """Valid (land) cells of a suitable layer: 0/1 values; -1 or NaN are not land.

    Parameters
    ----------
    x : array_like
        Suitable codes (or a boolean mask, every cell valid).

    Returns
    -------
    numpy.ndarray of bool
    """
    x = np.asarray(x)
    if x.dtype == bool:
        return np.ones(x.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        return x >= 0


def suitable_mask(x: np.ndarray) -> np.ndarray:
    """Suitable cells (value 1) of a suitable layer.

    Parameters
    ----------
    x : array_like
        Suitable codes (or a boolean mask, returned as it is).

    Returns
    -------
    numpy.ndarray of bool
    """
    x = np.asarray(x)
    if x.dtype == bool:
        return x
    with np.errstate(invalid="ignore"):
        return x == 1


def is_suitable(suitable: xr.DataArray) -> xr.DataArray:
    """Lazy boolean DataArray: suitable == 1.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable codes, or a boolean mask.

    Returns
    -------
    xarray.DataArray of bool
    """
    if suitable.dtype == bool:
        return suitable
    return suitable == 1


def is_valid(suitable: xr.DataArray) -> xr.DataArray:
    """Lazy boolean DataArray: land / valid cells (value 0 or 1).

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable codes, or a boolean mask (every cell valid).

    Returns
    -------
    xarray.DataArray of bool
    """
    if suitable.dtype == bool:
        return xr.ones_like(suitable, dtype=bool)
    return suitable >= 0


def drop_nondim(da: xr.DataArray) -> xr.DataArray:
    """Drop scalar / non-dimension coordinates (e.g. a selected slice label).

    Parameters
    ----------
    da : xarray.DataArray
        Any array.

    Returns
    -------
    xarray.DataArray
        Only its dimension coordinates left.
    """
    extra = [c for c in da.coords if c not in da.dims]
    return da.drop_vars(extra)
