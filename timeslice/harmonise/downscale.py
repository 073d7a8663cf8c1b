"""Change-factor (delta) downscaling of a model slice onto a fine baseline climatology."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.harmonise.regrid import regrid

__all__ = ["ChangeFactors", "anomalies", "check_monthly", "delta", "delta_log", "swap_to_midpoint"]

_VARS = ("tasmin", "tasmax", "pr")


def check_monthly(ds: xr.Dataset, what: str) -> None:
    """Stop with one line unless `ds` is a Dataset of monthly tasmin, tasmax and pr.

    Parameters
    ----------
    ds : xarray.Dataset
        The input to check.
    what : str
        Its name in the message.

    Returns
    -------
    None
    """
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"`{what}` must be an xarray Dataset, got {type(ds).__name__}")
    missing = [v for v in _VARS if v not in ds.data_vars]
    if missing:
        raise DataError(
            f"`{what}` lacks {missing} (found {sorted(map(str, ds.data_vars))}); give monthly "
            "tasmin, tasmax and pr"
        )
    if "month" not in ds.dims or ds.sizes["month"] != 12:
        raise DataError(f"`{what}` needs a `month` dimension of length 12, got {dict(ds.sizes)}")


def _same_grid(a: xr.Dataset, b: xr.Dataset) -> bool:
    return (
        a.sizes["lat"] == b.sizes["lat"]
        and a.sizes["lon"] == b.sizes["lon"]
        and np.allclose(a["lat"].values, b["lat"].values, atol=1e-6)
        and np.allclose(a["lon"].values, b["lon"].values, atol=1e-6)
    )


def _ratio_kernel(p_slice: np.ndarray, p_base: np.ndarray, floor: float, q: float) -> np.ndarray:
    """Precipitation ratio with a floor, truncated at the `q` quantile of each month's grid.

    Arrays have the month on the first axis and space on the last two.
    """
    num = np.maximum(p_slice, floor)
    den = np.maximum(p_base, floor)
    r = num / den
    flat = r.reshape(r.shape[0], -1)
    cap = np.nanquantile(flat, q, axis=1) if np.isfinite(flat).any() else np.full(r.shape[0], np.nan)
    cap = cap.reshape((r.shape[0],) + (1,) * (r.ndim - 1))
    return np.where(r > cap, cap, r)


def anomalies(
    slice_ds: xr.Dataset,
    model_baseline_ds: xr.Dataset,
    *,
    pr_floor: float = 0.1,
    ratio_quantile: float = 0.98,
) -> xr.Dataset:
    """Change factors on the model grid.

    Parameters
    ----------
    slice_ds, model_baseline_ds : xarray.Dataset
        The model's slice and its own baseline run: monthly ``tasmin``, ``tasmax`` (degC),
        ``pr`` (mm month-1) on the same grid.
    pr_floor : float, [mm month-1]
        Floor applied to both precipitations before the ratio.
    ratio_quantile : float
        Ratios above this quantile of each month's ratio grid are truncated to it.

    Returns
    -------
    xarray.Dataset
        ``tasmin``, ``tasmax`` (additive anomalies, K) and ``pr`` (ratio, 1).

    Notes
    -----
    .. math::

        \\Delta T = T_{slice} - T_{base}, \\qquad
        r = \\min\\left(\\frac{\\max(P_{slice}, 0.1)}{\\max(P_{base}, 0.1)}, r_{q98}\\right)

    with :math:`r_{q98}` the 98th percentile of the month's ratio grid.
    """
    check_monthly(slice_ds, "slice_ds")
    check_monthly(model_baseline_ds, "model_baseline_ds")
    if not _same_grid(slice_ds, model_baseline_ds):
        raise DataError(
            "`slice_ds` and `model_baseline_ds` are on different grids "
            f"({slice_ds.sizes['lat']}x{slice_ds.sizes['lon']} vs "
            f"{model_baseline_ds.sizes['lat']}x{model_baseline_ds.sizes['lon']}); "
            "a slice's change factors need that model's own baseline on the same grid"
        )
    if not 0.0 < ratio_quantile <= 1.0:
        raise DataError(f"`ratio_quantile` must be in (0, 1], got {ratio_quantile}")
    if pr_floor < 0:
        raise DataError(f"`pr_floor` must be >= 0 mm month-1, got {pr_floor}")
    base = model_baseline_ds.assign_coords(lat=slice_ds["lat"], lon=slice_ds["lon"])
    out = xr.Dataset()
    for v in ("tasmin", "tasmax"):
        d = (slice_ds[v] - base[v]).transpose("month", "lat", "lon")
        d.attrs = {"units": "K", "long_name": f"{v} change factor (slice - baseline)",
                   "description": "additive anomaly of the model slice against the same "
                   "model's baseline run, per month, on the model grid"}
        out[v] = d
    ps = slice_ds["pr"].transpose("month", "lat", "lon")
    pb = base["pr"].transpose("month", "lat", "lon")
    r = xr.apply_ufunc(
        _ratio_kernel, ps, pb,
        input_core_dims=[["month", "lat", "lon"]] * 2,
        output_core_dims=[["month", "lat", "lon"]],
        kwargs={"floor": float(pr_floor), "q": float(ratio_quantile)},
        dask="parallelized", output_dtypes=[np.float64],
        dask_gufunc_kwargs={"allow_rechunk": True},  # the quantile needs the whole month
    )
    r.attrs = {
        "units": "1",
        "long_name": "precipitation change factor (slice / baseline)",
        "description": f"floor {pr_floor} mm month-1 on both, truncated at the "
        f"{ratio_quantile:g} quantile of each month",
    }
    out["pr"] = r
    return out


class ChangeFactors:
    """Change factors of one model slice, interpolated onto blocks of fine-grid rows.

    Parameters
    ----------
    anom : xarray.Dataset
        Output of :func:`anomalies` (model grid).
    fine_lat, fine_lon : array-like
        Coordinates of the fine grid.

    Notes
    -----
    Bilinear interpolation; any valid neighbour is enough for an anomaly (the fine baseline
    decides where land is). Each fine row depends only on its own interpolation weights, so
    a block of rows gives the same numbers as the whole grid.
    """

    def __init__(self, anom: xr.Dataset, fine_lat, fine_lon):
        from timeslice.harmonise.regrid import bilinear_weights

        alat, alon = anom["lat"].values, anom["lon"].values
        self.w_lat, self.w_lon = bilinear_weights(alat, alon, fine_lat, fine_lon)
        if self.w_lat.nnz == 0 or self.w_lon.nnz == 0:
            flat, flon = np.asarray(fine_lat), np.asarray(fine_lon)
            raise DataError(
                f"model slice: grid (lon {alon.min():g}..{alon.max():g}, lat {alat.min():g}.."
                f"{alat.max():g}) does not overlap the target area (lon {flon.min():g}.."
                f"{flon.max():g}, lat {flat.min():g}..{flat.max():g}); give model files that "
                "cover the target area"
            )
        order = ("month", "lat", "lon")
        self.factors = {n: np.asarray(anom[n].transpose(*order).values, dtype=np.float64)
                        for n in _VARS}

    def apply(self, base: dict[str, np.ndarray], r0: int, r1: int, *,
              cast_first: bool = False) -> dict[str, np.ndarray]:
        """Downscaled fields of fine rows ``r0:r1``.

        Parameters
        ----------
        base : dict of str to numpy.ndarray, shape (12, r1 - r0, n_lon)
            Fine-baseline ``tasmin``, ``tasmax``, ``pr`` of those rows.
        r0, r1 : int
            First and one-past-last fine row.
        cast_first : bool
            Round the interpolated factor to float32 before applying it (the whole-grid
            arithmetic of :func:`delta` without `chunks`); else apply it in float64.

        Returns
        -------
        dict of str to numpy.ndarray
            New arrays of the dtype of `base`: ``T_obs + I(dT)``, ``P_obs * I(r)``.
        """
        from timeslice.harmonise.regrid import apply_weights

        out = {}
        for n in _VARS:
            a = apply_weights(self.factors[n], self.w_lat[r0:r1], self.w_lon, None, 1e-6)
            if cast_first:
                a = a.astype(np.float32)
            b = base[n]
            out[n] = (b * a if n == "pr" else b + a).astype(b.dtype, copy=False)
        return out


def swap_to_midpoint(tmin: np.ndarray, tmax: np.ndarray) -> int:
    """Set both to their midpoint where tmin > tmax, in place.

    Parameters
    ----------
    tmin, tmax : numpy.ndarray
        Downscaled monthly temperatures (same shape).

    Returns
    -------
    int
        Number of cell-months changed.
    """
    bad = tmin > tmax
    n_fixed = int(bad.sum())
    if n_fixed:
        mid = 0.5 * (tmin[bad] + tmax[bad])
        tmin[bad] = mid
        tmax[bad] = mid
    return n_fixed


def delta_log(slice_attrs: dict, *, pr_floor: float, ratio_quantile: float, shape,
              n_fixed: int, n_uncovered: int) -> list[str]:
    """The log lines of one delta downscaling, after the slice's own lines.

    Parameters
    ----------
    slice_attrs : dict
        Attributes of the model slice (its ``harmonise_log``, JSON, comes first).
    pr_floor, ratio_quantile : float
        As given to :func:`delta`.
    shape : (int, int)
        Fine grid rows and columns.
    n_fixed, n_uncovered : int
        Cell-months swapped to the midpoint; fine cell-months left NaN outside the model.

    Returns
    -------
    list of str
    """
    try:
        log = list(json.loads(slice_attrs.get("harmonise_log", "[]")))
    except (TypeError, ValueError):
        log = []
    log.append(
        f"delta downscaling: additive tasmin/tasmax, ratio pr (floor {pr_floor} mm month-1, "
        f"truncated at the {ratio_quantile:g} quantile per month), bilinear to "
        f"{shape[0]}x{shape[1]} fine grid"
    )
    log.append(f"tasmin > tasmax after downscaling in {n_fixed} cell-months: set to midpoint")
    if n_uncovered:
        log.append(f"{n_uncovered} fine cell-months outside model coverage left NaN")
    return log


def _blocked_fields(anom: xr.Dataset, fb: xr.Dataset, rows: int):
    """Interpolate the change factors and apply them block by block of fine rows, writing
    into preallocated arrays (no full-grid float64 intermediates, no dask copy of `fb`)."""
    from timeslice.harmonise.rowblocks import map_rows

    factors = ChangeFactors(anom, fb["lat"].values, fb["lon"].values)
    order = ("month", "lat", "lon")
    base = {n: np.asarray(fb[n].transpose(*order).values) for n in _VARS}
    outs = {n: np.empty(base[n].shape, dtype=base[n].dtype) for n in _VARS}

    def block(r0: int, r1: int) -> None:
        res = factors.apply({n: base[n][:, r0:r1, :] for n in _VARS}, r0, r1)
        for n in _VARS:
            outs[n][:, r0:r1, :] = res[n]

    map_rows(block, base["tasmin"].shape[1], rows)
    coords = {"month": fb["month"], "lat": fb["lat"], "lon": fb["lon"]}
    return outs, {n: order for n in _VARS}, {n: coords for n in _VARS}


def delta(
    slice_ds: xr.Dataset,
    model_baseline_ds: xr.Dataset,
    fine_baseline_ds: xr.Dataset,
    *,
    pr_floor: float = 0.1,
    ratio_quantile: float = 0.98,
    chunks: int | None = None,
) -> xr.Dataset:
    """Change-factor downscaling of one model slice onto the fine baseline.

    Parameters
    ----------
    slice_ds, model_baseline_ds : xarray.Dataset
        The model's slice and its own baseline run, canonical monthly ``tasmin``, ``tasmax``
        (degC), ``pr`` (mm month-1) on the same (coarse) grid.
    fine_baseline_ds : xarray.Dataset
        Observed fine-grid baseline climatology, same variables.
    pr_floor : float, [mm month-1]
        Floor applied to both model precipitations before the ratio.
    ratio_quantile : float
        Ratios above this quantile of each month's ratio grid are truncated to it.
    chunks : int, optional
        Work in blocks of this many fine-grid latitude rows (bounded memory on large grids;
        default: the fine baseline's dask chunks, else the whole grid at once). The result
        is computed (numpy-backed) either way, because ``n_swapped`` must be known.

    Returns
    -------
    xarray.Dataset
        ``tasmin``, ``tasmax``, ``pr`` on the fine grid; ``attrs["n_swapped"]`` the number of
        (cell, month) pairs where tasmin > tasmax after downscaling and both were set to
        their midpoint.

    Notes
    -----
    Anomalies are computed on the model grid, interpolated bilinearly to the fine grid,
    then applied:

    .. math::

        T = T_{obs} + I(T_{slice} - T_{base}), \\qquad P = P_{obs} \\cdot I(r)

    References
    ----------
    Hay, L. E., Wilby, R. L. & Leavesley, G. H. (2000). A comparison of delta change and
    downscaled GCM scenarios for three mountainous basins in the United States. JAWRA
    36:387-397.
    Ramirez-Villegas, J. & Jarvis, A. (2010). Downscaling global circulation model outputs:
    the delta method. CIAT Decision and Policy Analysis Working Paper 1.
    Navarro-Racines, C., Tarapues, J., Thornton, P., Jarvis, A. & Ramirez-Villegas, J.
    (2020). High-resolution and bias-corrected CMIP5 projections for climate change impact
    assessments. Scientific Data 7:7.
    """
    check_monthly(fine_baseline_ds, "fine_baseline_ds")
    anom = anomalies(slice_ds, model_baseline_ds, pr_floor=pr_floor,
                     ratio_quantile=ratio_quantile)
    fb = fine_baseline_ds
    rows = chunks
    if rows is None and fb["tasmin"].chunks is not None:
        rows = int(fb["tasmin"].chunksizes["lat"][0])
    if rows is not None:
        values, dims, coords = _blocked_fields(anom, fb, int(rows))
    else:
        # any valid neighbour is enough for an anomaly; the fine baseline decides where land is
        fine_anom = regrid(anom, fb, method="bilinear", min_valid_fraction=1e-6,
                           source="model slice")
        values = {}
        for name in _VARS:
            a = fine_anom[name].astype(np.float32).transpose(*fb[name].dims)
            raw = fb[name] + a if name != "pr" else fb[name] * a
            values[name] = np.array(raw.astype(fb[name].dtype).values)
        dims = {n: fb[n].dims for n in _VARS}
        coords = {n: fb[n].coords for n in _VARS}
    n_fixed = swap_to_midpoint(values["tasmin"], values["tasmax"])
    out = xr.Dataset()
    for name in _VARS:
        da = xr.DataArray(values[name], dims=dims[name], coords=coords[name],
                          attrs=dict(fb[name].attrs))
        out[name] = da
    n_uncovered = int((fb["tasmin"].transpose(*dims["tasmin"]).notnull().values
                       & np.isnan(values["tasmin"])).sum())
    attrs = {k: v for k, v in slice_ds.attrs.items() if k not in ("harmonise_log",)}
    log = delta_log(slice_ds.attrs, pr_floor=pr_floor, ratio_quantile=ratio_quantile,
                    shape=(fb.sizes["lat"], fb.sizes["lon"]), n_fixed=n_fixed,
                    n_uncovered=n_uncovered)
    attrs.update(n_swapped=n_fixed, harmonise_log=json.dumps(log))
    out.attrs = attrs
    return out
