"""Range change through a series: suitable area, gain/loss/stable, range centroid.

All areas are sums of spherical cell areas (:func:`timeslice.grid.cell_area`), never cell
counts. A *suitable* layer holds 1 (suitable), 0 (land, not suitable) and -1 or NaN (not land).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area, haversine_km
from timeslice.series._checks import (
    check_dataarray,
    check_label,
    check_stack,
    drop_nondim,
    is_suitable,
    slice_labels,
    suitable_mask,
    valid_mask,
)

__all__ = [
    "CHANGE_FLAG_MEANINGS",
    "CHANGE_FLAG_VALUES",
    "SUMMARY_COLUMNS",
    "centroid",
    "change_map",
    "change_table",
    "suitable_area",
]

#: Codes of the change layer (CF ``flag_values``) and their ``flag_meanings``.
CHANGE_FLAG_VALUES = np.array([-1, 0, 1, 2, 3], dtype=np.int8)
CHANGE_FLAG_MEANINGS = "not_land absent gain loss stable"

#: Columns of the per-slice summary table (``summary.csv``), in order.
SUMMARY_COLUMNS = [
    "slice",
    "year",
    "model",
    "scenario",
    "suitable_area_km2",
    "gain_km2",
    "loss_km2",
    "stable_km2",
    "novel_area_km2",
    "centroid_lat",
    "centroid_lon",
    "centroid_shift_km",
]


def suitable_area(
    suitable: xr.DataArray,
    *,
    land: xr.DataArray | None = None,
    dim: str = "slice",
) -> xr.DataArray:
    """Suitable area: the sum of cell areas over suitable cells.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layer on ``(lat, lon)`` with any other dims (usually `dim`); 1 suitable,
        0 not suitable, -1 or NaN not land.
    land : xarray.DataArray of bool, optional
        If given, only cells where `land` is true count.
    dim : str, default "slice"
        Dimension kept in the result (all other non-grid dims are kept too).

    Returns
    -------
    xarray.DataArray, [km2]
        Suitable area per `dim` (a scalar for a single map). Lazy if the input is lazy.

    Notes
    -----
    .. math:: A_t = \\sum_j a_j \\, [s_t(j) = 1], \\qquad
              a_j = R^2 \\Delta\\lambda (\\sin\\varphi_{j,2} - \\sin\\varphi_{j,1})

    with :math:`R` = 6371.0072 km (authalic radius).

    References
    ----------
    Snyder, J. P. (1987). Map Projections: A Working Manual. USGS Professional Paper 1395.
    """
    check_dataarray(suitable, name="suitable")
    area = cell_area(suitable)
    mask = is_suitable(suitable)
    if land is not None:
        check_dataarray(land, name="land")
        mask = mask & land.astype(bool)
    out = (area * mask).sum(("lat", "lon"))
    out.name = "suitable_area"
    out.attrs = {
        "units": "km2",
        "long_name": "suitable area",
        "description": "sum of spherical cell areas (R = 6371.0072 km) over cells with suitable == 1",
    }
    return out


def _change_kernel(current: np.ndarray, reference: np.ndarray, either: bool) -> np.ndarray:
    cur_s, ref_s = suitable_mask(current), suitable_mask(reference)
    cur_v, ref_v = valid_mask(current), valid_mask(reference)
    code = np.zeros(np.broadcast_shapes(cur_s.shape, ref_s.shape), dtype=np.int8)
    code[cur_s & ~ref_s] = 1
    code[~cur_s & ref_s] = 2
    code[cur_s & ref_s] = 3
    invalid = (~cur_v | ~ref_v) if either else (~cur_v & ~ref_v)
    code[invalid] = -1
    return code


def change_map(
    suitable: xr.DataArray,
    reference: xr.DataArray,
    *,
    invalid: Literal["both", "either"] = "both",
) -> xr.DataArray:
    """Categorical change of each cell against a reference map.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layer(s), dims ``(..., lat, lon)``: 1 suitable, 0 not, -1/NaN not land.
    reference : xarray.DataArray
        Reference suitable map on the same ``(lat, lon)`` grid.
    invalid : {"both", "either"}, default "both"
        ``"both"``: a cell is -1 only where it is land in neither map; a cell that is land in one
        map only counts as not suitable where it is not land (land exposed by a sea-level drop
        can be gained, drowned land is lost), which keeps the area identities exact.
        ``"either"``: -1 wherever either map is not land.

    Returns
    -------
    xarray.DataArray of int8
        ``change`` with codes 0 absent, 1 gain, 2 loss, 3 stable, -1 not land (CF
        ``flag_values``/``flag_meanings``). -1 is a flag value, not a ``_FillValue``, so the
        layer stays int8 when written and read back.

    Notes
    -----
    With :math:`s_t, s_r \\in \\{0, 1\\}`: gain :math:`s_t=1, s_r=0`; loss :math:`s_t=0, s_r=1`;
    stable :math:`s_t = s_r = 1`; absent :math:`s_t = s_r = 0`. Hence
    :math:`A_t - A_r = A_{gain} - A_{loss}` and :math:`A_{stable} + A_{loss} = A_r`.
    """
    check_dataarray(suitable, name="suitable")
    check_dataarray(reference, name="reference")
    if invalid not in ("both", "either"):
        raise DataError(f"`invalid` must be 'both' or 'either', got {invalid!r}")
    reference = drop_nondim(reference)
    extra = [d for d in reference.dims if d not in ("lat", "lon")]
    if extra:
        raise DataError(
            f"`reference` must be one (lat, lon) map, got extra dims {extra}; select one slice"
        )
    _check_same_grid(suitable, reference)
    reference = reference.assign_coords(lat=suitable["lat"], lon=suitable["lon"])
    out = xr.apply_ufunc(
        _change_kernel,
        suitable,
        reference,
        kwargs={"either": invalid == "either"},
        dask="parallelized",
        output_dtypes=[np.int8],
    )
    out.name = "change"
    out.attrs = {
        "units": "1",
        "long_name": "change of suitability class against the reference slice",
        "description": (
            "0 absent (not suitable in either), 1 gain (suitable now, not in reference), "
            "2 loss (suitable in reference, not now), 3 stable (suitable in both), "
            f"-1 not land ({'in neither slice' if invalid == 'both' else 'in either slice'})"
        ),
        "flag_values": CHANGE_FLAG_VALUES,
        "flag_meanings": CHANGE_FLAG_MEANINGS,
    }
    return out


def _check_same_grid(a: xr.DataArray, b: xr.DataArray, *, names=("suitable", "reference")) -> None:
    for c in ("lat", "lon"):
        va, vb = np.asarray(a[c].values, float), np.asarray(b[c].values, float)
        if va.shape != vb.shape or not np.allclose(va, vb, rtol=0, atol=1e-6):
            raise DataError(
                f"`{names[0]}` and `{names[1]}` are on different grids ({c}: {va.size} vs "
                f"{vb.size} points or different values); regrid them onto one grid first"
            )


def centroid(suitable: xr.DataArray) -> tuple[xr.DataArray, xr.DataArray]:
    """Area-weighted centroid of the suitable cells.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layer(s), dims ``(..., lat, lon)``.

    Returns
    -------
    (xarray.DataArray, xarray.DataArray), [degrees_north], [degrees_east]
        Centroid latitude and longitude per remaining dim; NaN where nothing is suitable.

    Notes
    -----
    With cell areas :math:`a_j` over suitable cells,

    .. math:: \\bar\\varphi = \\frac{\\sum_j a_j \\varphi_j}{\\sum_j a_j}, \\qquad
              \\bar\\lambda = \\operatorname{atan2}\\Big(\\sum_j a_j \\sin\\lambda_j,
              \\sum_j a_j \\cos\\lambda_j\\Big)

    The longitude is the area-weighted circular (unit-vector) mean, so a range across the
    dateline gets a centroid near ±180 and not near 0 (Mardia & Jupp 2000, Directional
    Statistics, Wiley, section 2.2.1). The latitude is the plain area-weighted mean, i.e. the
    mean latitude of the range.
    """
    check_dataarray(suitable, name="suitable")
    w = cell_area(suitable) * is_suitable(suitable)
    total = w.sum(("lat", "lon"))
    total = total.where(total > 0)
    lat_c = (w * suitable["lat"]).sum(("lat", "lon")) / total
    lam = np.deg2rad(suitable["lon"])
    sin_m = (w * np.sin(lam)).sum(("lat", "lon"))
    cos_m = (w * np.cos(lam)).sum(("lat", "lon"))
    lon_c = np.rad2deg(np.arctan2(sin_m, cos_m)).where(total.notnull())
    lon_c = ((lon_c + 180.0) % 360.0) - 180.0
    lat_c.name, lon_c.name = "centroid_lat", "centroid_lon"
    lat_c.attrs = {
        "units": "degrees_north",
        "long_name": "latitude of the range centroid",
        "description": "area-weighted mean latitude of suitable cells",
    }
    lon_c.attrs = {
        "units": "degrees_east",
        "long_name": "longitude of the range centroid",
        "description": "area-weighted circular (unit-vector) mean longitude of suitable cells",
    }
    return lat_c, lon_c


def _slice_meta(meta: xr.Dataset, name: str, n: int, fill) -> list:
    if name in meta:
        vals = np.asarray(meta[name].values)
        if vals.ndim == 1 and vals.size == n:
            return vals.tolist()
        if vals.ndim == 0:
            return [vals.item()] * n
    return [fill] * n


def change_table(stack: xr.Dataset, *, reference: str = "baseline") -> pd.DataFrame:
    """Per-slice summary: suitable area, gain/loss/stable, novel area, centroid and its shift.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitable(slice, lat, lon)``; ``mess(slice, lat, lon)`` is used
        for the novel area when present (NaN column otherwise); slice coords ``year``,
        ``model``, ``scenario``.
    reference : str, default "baseline"
        Label of the reference slice.

    Returns
    -------
    pandas.DataFrame
        One row per slice with exactly the columns of :data:`SUMMARY_COLUMNS` (areas in km²,
        centroid in degrees, shift in km).

    Notes
    -----
    Gain, loss and stable areas come from :func:`change_map` with ``invalid="both"``, so
    ``suitable_area_km2 - A_ref == gain_km2 - loss_km2`` and
    ``stable_km2 + loss_km2 == A_ref`` hold to float rounding. ``novel_area_km2`` is the area of
    suitable cells with MESS < 0 (Elith, Kearney & Phillips 2010, Methods Ecol. Evol. 1:330).
    ``centroid_shift_km`` is the great-circle distance on the authalic sphere from the reference
    centroid (Sinnott 1984, Sky and Telescope 68:159).
    """
    check_stack(stack)
    suitable = stack["suitable"]
    check_dataarray(suitable, name="suitable", dims=("slice", "lat", "lon"))
    iref = check_label(stack, reference)
    labels = slice_labels(stack)
    n = len(labels)
    ref = suitable.isel(slice=iref)
    change = change_map(suitable, ref)
    area = cell_area(suitable)
    sums = {
        "suitable_area_km2": (area * is_suitable(suitable)).sum(("lat", "lon")),
        "gain_km2": (area * (change == 1)).sum(("lat", "lon")),
        "loss_km2": (area * (change == 2)).sum(("lat", "lon")),
        "stable_km2": (area * (change == 3)).sum(("lat", "lon")),
    }
    if "mess" in stack.data_vars:
        novel = is_suitable(suitable) & (stack["mess"] < 0)
        sums["novel_area_km2"] = (area * novel).sum(("lat", "lon"))
    lat_c, lon_c = centroid(suitable)
    sums["centroid_lat"], sums["centroid_lon"] = lat_c, lon_c
    meta = {
        k: stack[k].variable
        for k in ("year", "model", "scenario")
        if k in stack.coords or k in stack.data_vars
    }
    computed = xr.Dataset({**{k: drop_nondim(v) for k, v in sums.items()},
                           **{f"meta_{k}": v for k, v in meta.items()}})
    computed = computed.compute()  # one pass over the stack
    meta = xr.Dataset({k: computed[f"meta_{k}"] for k in meta})
    table = pd.DataFrame(
        {
            "slice": labels,
            "year": np.asarray(_slice_meta(meta, "year", n, np.nan), dtype=float),
            "model": [str(v) for v in _slice_meta(meta, "model", n, "")],
            "scenario": [str(v) for v in _slice_meta(meta, "scenario", n, "")],
        }
    )
    for k in ("suitable_area_km2", "gain_km2", "loss_km2", "stable_km2"):
        table[k] = computed[k].values.astype(float)
    table["novel_area_km2"] = (
        computed["novel_area_km2"].values.astype(float)
        if "novel_area_km2" in computed
        else np.nan
    )
    table["centroid_lat"] = computed["centroid_lat"].values.astype(float)
    table["centroid_lon"] = computed["centroid_lon"].values.astype(float)
    table["centroid_shift_km"] = haversine_km(
        table["centroid_lon"].iloc[iref],
        table["centroid_lat"].iloc[iref],
        table["centroid_lon"].to_numpy(),
        table["centroid_lat"].to_numpy(),
    )
    return table[SUMMARY_COLUMNS]
