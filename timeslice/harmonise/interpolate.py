"""Intermediate slices by linear interpolation between two slices of one model."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = ["between"]

_VARS = ("tasmin", "tasmax", "tas", "pr")


def _year(ds: xr.Dataset, given, what: str) -> float:
    value = given if given is not None else ds.attrs.get("year")
    if value is None:
        raise DataError(
            f"`{what}` has no `year` attribute; give `{what.replace('slice', 'year')}` "
            "(CE; a slice a years BP has year = 1950 - a)"
        )
    return float(value)


def between(
    slice_a: xr.Dataset,
    slice_b: xr.Dataset,
    year: float,
    *,
    year_a: float | None = None,
    year_b: float | None = None,
    sea_level_a: float | None = None,
    sea_level_b: float | None = None,
) -> xr.Dataset:
    """A slice at `year` linearly interpolated between two slices of the same model.

    Parameters
    ----------
    slice_a, slice_b : xarray.Dataset
        Canonical monthly model fields (``tasmin``, ``tasmax``, ``pr``, optional ``tas``) on one
        grid, e.g. a model's 21 ka and 6 ka runs, or its 6 ka and baseline runs.
    year : float
        Year (CE) of the new slice; must lie between the two slices' years (no extrapolation).
    year_a, year_b : float, optional
        Years of the two slices (default: their ``year`` attributes).
    sea_level_a, sea_level_b : float, optional, [m]
        Sea levels (default: ``sea_level`` attributes, else 0).

    Returns
    -------
    xarray.Dataset
        Monthly fields with attrs ``year`` and ``sea_level`` (interpolated) and a
        ``harmonise_log`` line. Downscale it against the model's baseline like any slice.

    Notes
    -----
    With :math:`w = (t - t_a)/(t_b - t_a)`: :math:`X_t = (1 - w) X_a + w X_b` for every
    variable and for sea level. Against a common model baseline this is exactly a linear
    interpolation of the additive temperature anomalies and of the precipitation change
    ratios (before the floor and truncation of the delta method).

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> def one(v, year):
    ...     da = xr.DataArray(np.full((12, 1, 1), v), dims=("month", "lat", "lon"),
    ...                       coords={"month": np.arange(1, 13), "lat": [0.5], "lon": [0.5]})
    ...     return xr.Dataset({"tasmin": da, "tasmax": da + 8, "pr": da + 50},
    ...                       attrs={"year": year})
    >>> mid = between(one(-10.0, -19050.0), one(0.0, -4050.0), -10050.0)
    >>> float(mid["tasmin"][0, 0, 0])  # w = 0.6
    -4.0
    """
    for what, ds in (("slice_a", slice_a), ("slice_b", slice_b)):
        if not isinstance(ds, xr.Dataset):
            raise DataError(f"`{what}` must be an xarray Dataset, got {type(ds).__name__}")
    ya = _year(slice_a, year_a, "slice_a")
    yb = _year(slice_b, year_b, "slice_b")
    if ya == yb:
        raise DataError(f"`slice_a` and `slice_b` have the same year {ya:g}; give two slices")
    w = (float(year) - ya) / (yb - ya)
    if not -1e-12 <= w <= 1 + 1e-12:
        raise DataError(
            f"`year` {year:g} is outside {min(ya, yb):g}..{max(ya, yb):g}; interpolation does "
            "not extrapolate (give the slices on both sides)"
        )
    same = (
        slice_a.sizes.get("lat") == slice_b.sizes.get("lat")
        and slice_a.sizes.get("lon") == slice_b.sizes.get("lon")
        and np.allclose(slice_a["lat"].values, slice_b["lat"].values)
        and np.allclose(slice_a["lon"].values, slice_b["lon"].values)
    )
    if not same:
        raise DataError(
            "`slice_a` and `slice_b` are on different grids; interpolate between slices of one "
            "model on one grid"
        )
    names = [v for v in _VARS if v in slice_a.data_vars and v in slice_b.data_vars]
    if not names:
        raise DataError(
            f"no common monthly variable to interpolate (slice_a has "
            f"{sorted(map(str, slice_a.data_vars))}, slice_b {sorted(map(str, slice_b.data_vars))})"
        )
    out = xr.Dataset()
    for v in names:
        da = (1.0 - w) * slice_a[v] + w * slice_b[v].assign_coords(
            lat=slice_a["lat"], lon=slice_a["lon"]
        )
        da.attrs = dict(slice_a[v].attrs)
        out[v] = da.astype(slice_a[v].dtype)
    sa = sea_level_a if sea_level_a is not None else float(slice_a.attrs.get("sea_level", 0.0))
    sb = sea_level_b if sea_level_b is not None else float(slice_b.attrs.get("sea_level", 0.0))
    out.attrs = {
        "year": float(year),
        "sea_level": (1.0 - w) * sa + w * sb,
        "harmonise_log": json.dumps(
            [f"interpolated at year {year:g}: weight {1 - w:.4g} on year {ya:g}, {w:.4g} on "
             f"year {yb:g}"]
        ),
    }
    return out
