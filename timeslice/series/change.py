"""Range change through a series: suitable area, gain/loss/stable, range centroid.

All areas are sums of spherical cell areas (:func:`timeslice.grid.cell_area`), never cell
counts. A *suitable* layer holds 1 (suitable), 0 (land, not suitable) and -1 or NaN (not land).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.series._checks import (
    check_dataarray,
    drop_nondim,
    is_suitable,
    suitable_mask,
    valid_mask,
)

__all__ = [
    "CHANGE_FLAG_MEANINGS",
    "CHANGE_FLAG_VALUES",
    "bearing_deg",
    "centroid",
    "change_codes",
    "change_map",
    "novel_mask",
    "suitable_area",
]

#: Codes of the change layer (CF ``flag_values``) and their ``flag_meanings``, read from the
#: layer table (:mod:`timeslice.layers`, the one place they are defined).
CHANGE_FLAG_VALUES = np.asarray(layers.LAYERS["change"].flag_values, dtype=np.int8)
CHANGE_FLAG_MEANINGS = str(layers.LAYERS["change"].flag_meanings)

def _area_like(da: xr.DataArray) -> xr.DataArray:
    """Cell areas, chunked like `da` when `da` is a dask array (one small graph key per chunk
    instead of the whole numpy array embedded in every operation)."""
    area = cell_area(da)
    if da.chunks is not None:
        sizes = da.chunksizes
        area = area.chunk({d: sizes[d] for d in ("lat", "lon") if d in sizes})
    return area


def _wsum(mask: xr.DataArray, weights: xr.DataArray, dims=("lat", "lon")) -> xr.DataArray:
    """Σ mask·weights over `dims` as one fused contraction per chunk (no full-size
    float temporaries held by dask between several reductions of the same mask)."""
    return xr.dot(mask.astype(np.float32) if mask.dtype == bool else mask, weights, dim=dims)


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
    area = _area_like(suitable)
    mask = is_suitable(suitable)
    if land is not None:
        check_dataarray(land, name="land")
        mask = mask & land.astype(bool)
    out = _wsum(mask, area)
    out.name = "suitable_area"
    out.attrs = {
        "units": "km2",
        "long_name": "suitable area",
        "description": (
            "sum of spherical cell areas (R = 6371.0072 km) over cells with suitable == 1"
        ),
    }
    return out


def change_codes(current: np.ndarray, reference: np.ndarray, either: bool) -> np.ndarray:
    """Change codes of two suitable arrays (numpy kernel of :func:`change_map`).

    Parameters
    ----------
    current, reference : numpy.ndarray
        Suitable codes (1 suitable, 0 not, -1 or NaN not land); they broadcast.
    either : bool
        -1 where either is not land (else only where both are not).

    Returns
    -------
    numpy.ndarray of int8
        0 absent, 1 gain, 2 loss, 3 stable, -1 not land.
    """
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
        change_codes,
        suitable,
        reference,
        kwargs={"either": invalid == "either"},
        dask="parallelized",
        output_dtypes=[np.int8],
    )
    out.name = "change"
    out.attrs = {}
    return layers.stamp(out, description=(
        "0 absent (not suitable in either), 1 gain (suitable now, not in reference), "
        "2 loss (suitable in reference, not now), 3 stable (suitable in both), "
        f"-1 not land ({'in neither slice' if invalid == 'both' else 'in either slice'})"))


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
    area = _area_like(suitable)
    mask = is_suitable(suitable)
    lam = np.deg2rad(suitable["lon"])
    total = _wsum(mask, area)
    total = total.where(total > 0)
    lat_c = _wsum(mask, area * suitable["lat"]) / total
    sin_m = _wsum(mask, area * np.sin(lam))
    cos_m = _wsum(mask, area * np.cos(lam))
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


#: Novelty criteria: variable -> (test, description).
NOVELTY_RULES = {
    "mess": (lambda x: x < 0, "MESS < 0"),
    "nt1": (lambda x: x < 0, "NT1 < 0"),
    "nt2": (lambda x: x > 1, "NT2 > 1"),
}


def novel_mask(stack: xr.Dataset, *, criteria=("mess", "nt1", "nt2")) -> xr.DataArray:
    """Cells whose climate is novel by any of `criteria` present in `stack` (lazy, bool).

    MESS < 0 (Elith, Kearney & Phillips 2010, Methods Ecol. Evol. 1:330); NT1 < 0 (outside a
    univariate range) or NT2 > 1 (novel combination) (Mesgaran, Cousens & Webber 2014,
    Divers. Distrib. 20:1147). Criteria whose variable is missing are skipped; with none present
    this is a DataError naming them.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with some of ``mess``, ``nt1``, ``nt2``.
    criteria : sequence of str, default ("mess", "nt1", "nt2")
        Novelty variables to combine (keys of :data:`NOVELTY_RULES`).

    Returns
    -------
    xarray.DataArray of bool
        ``novel``: true where any present criterion marks novel climate.
    """
    unknown = [c for c in criteria if c not in NOVELTY_RULES]
    if unknown:
        raise DataError(f"unknown novelty criteria {unknown}; use some of {list(NOVELTY_RULES)}")
    present = [c for c in criteria if c in stack.data_vars]
    if not present:
        raise DataError(
            f"the stack has none of the novelty variables {list(criteria)}; run the novelty "
            "step of transfer first"
        )
    out = None
    for c in present:
        m = NOVELTY_RULES[c][0](stack[c])
        out = m if out is None else (out | m)
    out.name = "novel"
    out.attrs = {
        "units": "1",
        "long_name": "novel climate",
        "description": "true where " + " or ".join(NOVELTY_RULES[c][1] for c in present),
    }
    return out


def bearing_deg(lon1, lat1, lon2, lat2) -> np.ndarray:
    """Initial great-circle bearing from point 1 to point 2, degrees clockwise from north.

    Parameters
    ----------
    lon1, lat1 : array_like
        Start point(s), degrees.
    lon2, lat2 : array_like
        End point(s), degrees.

    Returns
    -------
    numpy.ndarray, [degrees]
        Bearing in [0, 360); NaN where undefined.

    Notes
    -----
    .. math:: \\theta = \\operatorname{atan2}\\big(\\sin\\Delta\\lambda\\cos\\varphi_2,\\;
              \\cos\\varphi_1\\sin\\varphi_2
              - \\sin\\varphi_1\\cos\\varphi_2\\cos\\Delta\\lambda\\big)

    in [0, 360); NaN where the points coincide or either is NaN.

    References
    ----------
    Snyder, J. P. (1987). Map Projections: A Working Manual. USGS Professional Paper 1395,
    azimuth on the sphere (eq. 5-4b, equation number from memory).

    Examples
    --------
    >>> float(bearing_deg(0.0, 0.0, 1.0, 0.0))  # due east along the equator
    90.0

    """
    lon1, lat1, lon2, lat2 = (np.deg2rad(np.asarray(a, dtype=float))
                              for a in (lon1, lat1, lon2, lat2))
    dl = lon2 - lon1
    y = np.sin(dl) * np.cos(lat2)
    x = np.cos(lat1) * np.sin(lat2) - np.sin(lat1) * np.cos(lat2) * np.cos(dl)
    theta = np.rad2deg(np.arctan2(y, x)) % 360.0
    same = (np.abs(y) < 1e-15) & (np.abs(x) < 1e-15)
    return np.where(same, np.nan, theta)


def __getattr__(name: str):
    # the per-slice table moved to timeslice.series.table; old imports keep working
    if name in ("change_table", "SUMMARY_COLUMNS", "DETAIL_COLUMNS"):
        from timeslice.series import table

        return getattr(table, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
