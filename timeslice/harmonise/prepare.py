"""One prepared slice: downscaled climate, land/ice masks, exposed-shelf fill, bio1..bio19."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.harmonise.bioclim import BIO_ATTRS, BIO_NAMES, from_monthly
from timeslice.harmonise.downscale import delta
from timeslice.harmonise.landmask import STANDARD_LAPSE_RATE, fill_exposed, land_mask
from timeslice.harmonise.regrid import regrid

__all__ = ["prepare_slice", "write_prepared"]


def _load(obj, what: str, require=None) -> xr.Dataset:
    if isinstance(obj, (str, os.PathLike)):
        from timeslice.readers import open_climate

        return open_climate(obj, require=require)
    if isinstance(obj, xr.DataArray):
        return obj.to_dataset(name=str(obj.name or what))
    if isinstance(obj, xr.Dataset):
        return obj
    raise DataError(f"`{what}` must be a path or an xarray Dataset, got {type(obj).__name__}")


def _log_of(ds: xr.Dataset) -> list[str]:
    raw = ds.attrs.get("harmonise_log")
    if raw is None:
        return []
    if isinstance(raw, (list, tuple)):
        return [str(x) for x in raw]
    try:
        val = json.loads(raw)
        return [str(x) for x in val] if isinstance(val, list) else [str(raw)]
    except (TypeError, ValueError):
        return [str(raw)]


def _same_grid(a, b) -> bool:
    return (
        a.sizes["lat"] == b.sizes["lat"] and a.sizes["lon"] == b.sizes["lon"]
        and np.allclose(a["lat"].values, b["lat"].values, atol=1e-6)
        and np.allclose(a["lon"].values, b["lon"].values, atol=1e-6)
    )


def _materialise(ds: xr.Dataset) -> xr.Dataset:
    """Compute a lazy Dataset into preallocated contiguous arrays in one pass (variables that
    share a graph, like the 19 slices of one bioclimatic stack, are computed once)."""
    import dask.array as dsa

    names = [v for v in ds.data_vars if ds[v].chunks is not None]
    targets = [np.empty(ds[v].shape, dtype=ds[v].dtype) for v in names]
    if names:
        dsa.store([ds[v].data for v in names], targets, lock=False)
    out = ds.copy()
    for v, arr in zip(names, targets):
        out[v] = ds[v].copy(data=arr)
    return out


def _rows(chunks, target) -> int | None:
    if chunks is None:
        return None
    nlat, nlon = target.sizes["lat"], target.sizes["lon"]
    if chunks == "auto":
        return max(8, 2**18 // nlon) if nlat * nlon > 2**20 else None
    if not isinstance(chunks, int) or chunks < 1:
        raise DataError(f"`chunks` must be a positive number of latitude rows, got {chunks!r}")
    return chunks


def prepare_slice(
    *,
    fine_baseline,
    elevation,
    model_slice=None,
    model_baseline=None,
    sea_level: float = 0.0,
    ice=None,
    ice_threshold: float = 0.5,
    label: str,
    year: float,
    period: str,
    model: str,
    scenario: str,
    bio=None,
    regrid_method: str | dict[str, str] = "auto",
    pr_floor: float = 0.1,
    ratio_quantile: float = 0.98,
    lapse_rate: float = STANDARD_LAPSE_RATE,
    chunks: int | Literal["auto"] | None = "auto",
) -> xr.Dataset:
    """Prepare one slice in the pinned "prepared slice" format.

    Parameters
    ----------
    fine_baseline : xarray.Dataset or path
        Observed monthly ``tasmin``, ``tasmax``, ``pr`` on the fine (target) grid. May be None
        when `bio` is given (the target grid is then the elevation grid).
    elevation : xarray.DataArray, Dataset or path, [m]
        Present-day elevation relative to present sea level; regridded to the fine grid if
        it is on another grid.
    model_slice, model_baseline : xarray.Dataset or path, optional
        A model's slice and its own baseline (both or neither). Without them the observed
        baseline itself is prepared.
    sea_level : float, [m]
        Slice sea level relative to present.
    ice : xarray.DataArray, Dataset or path, optional
        Land-ice fraction (any grid).
    ice_threshold : float
        Ice fraction at and above which a cell is ice.
    label, year, period, model, scenario
        Slice metadata (year in CE; a slice `a` years BP has year = 1950 - a).
    bio : xarray.Dataset or path, optional
        Pre-computed ``bio1``..``bio19`` of this slice on any grid (regridded onto the target
        grid); replaces the monthly path (no downscaling, no bioclimatic computation).
    regrid_method : str or mapping
        Method for inputs that need regridding onto the target grid ("auto",
        "conservative", "bilinear"), or one per variable.
    pr_floor, ratio_quantile : float
        Delta-method safeguards (see :func:`timeslice.harmonise.downscale.delta`).
    lapse_rate : float, [K m-1]
        For filling land without baseline climate.
    chunks : int, "auto" or None
        Latitude rows per block for downscaling and the bioclimatic variables ("auto": blocks
        of about 2**18 cells on grids over 2**20 cells, else one block). Bounds peak memory.

    Returns
    -------
    xarray.Dataset
        ``bio1..bio19`` (float32, NaN off land), ``land``, ``elevation``, ``ice``,
        ``exposed_shelf``, ``filled``; attrs ``slice_label``, ``year``, ``period``, ``model``,
        ``scenario``, ``sea_level``, ``n_swapped``, ``land_km2``, ``ice_km2``,
        ``exposed_shelf_km2``, ``harmonise_log`` (JSON list of lines).
    """
    if (model_slice is None) != (model_baseline is None):
        which = "model_baseline" if model_baseline is None else "model_slice"
        raise DataError(
            f"slice {label!r}: `{which}` is missing; a downscaled slice needs both the model's "
            "slice and the same model's baseline run"
        )
    if bio is not None and model_slice is not None:
        raise DataError(
            f"slice {label!r}: give either pre-computed `bio` layers or model files, not both"
        )
    if fine_baseline is None and bio is None:
        raise DataError(f"slice {label!r}: `fine_baseline` is required for monthly slices")
    elev_ds = _load(elevation, "elevation")
    if "elevation" in elev_ds.data_vars:
        elev = elev_ds["elevation"]
    elif len(elev_ds.data_vars) == 1:
        elev = next(iter(elev_ds.data_vars.values()))
    else:
        raise DataError(
            f"`elevation` input has no variable 'elevation' (found {sorted(elev_ds.data_vars)})"
        )
    fb = None
    if fine_baseline is not None:
        fb = _load(fine_baseline, "fine_baseline", require=("tasmin", "tasmax", "pr"))
        target = fb
        log = list(_log_of(fb))
    else:
        target = elev
        log = []
    if not _same_grid(elev, target):
        elev = regrid(elev, target, method="auto", source="elevation")
        log.append(f"elevation regridded onto the fine grid ({elev.attrs.get('regrid_method')})")
    elev = elev.astype(np.float32)

    rows = _rows(chunks, target)
    n_swapped = 0
    owned = False
    if bio is not None:
        bds = _load(bio, "bio")
        missing = [b for b in BIO_NAMES if b not in bds.data_vars]
        if missing:
            raise DataError(
                f"slice {label!r}: pre-computed `bio` layers lack {missing} (found "
                f"{sorted(map(str, bds.data_vars))}); give all of bio1..bio19"
            )
        log += [f"bio layers: {line}" for line in _log_of(bds)]
        clim = bds[list(BIO_NAMES)]
        if not _same_grid(clim, target):
            clim = regrid(clim, target, method=regrid_method, source=f"slice {label!r} bio")
            methods = sorted({str(clim[b].attrs.get("regrid_method")) for b in BIO_NAMES})
            log.append(f"bio layers regridded onto the target grid ({', '.join(methods)})")
        clim = clim.assign_coords(lat=target["lat"], lon=target["lon"])
    elif model_slice is not None:
        ms = _load(model_slice, "model_slice", require=("tasmin", "tasmax", "pr"))
        mb = _load(model_baseline, "model_baseline", require=("tasmin", "tasmax", "pr"))
        log += [f"model slice: {line}" for line in _log_of(ms)]
        log += [f"model baseline: {line}" for line in _log_of(mb)]
        if not _same_grid(ms, mb):
            ms = regrid(ms, mb, method=regrid_method, source=f"slice {label!r} model slice")
            log.append("model slice regridded onto its model baseline grid")
        clim = delta(ms, mb, fb, pr_floor=pr_floor, ratio_quantile=ratio_quantile,
                     chunks=rows)
        ms_log = set(_log_of(ms))
        log += [line for line in _log_of(clim) if line not in ms_log]
        n_swapped = int(clim.attrs.get("n_swapped", 0))
        owned = True  # delta returns fresh numpy arrays: fill them in place
    else:
        clim = fb[["tasmin", "tasmax", "pr"]]
        log.append("observed baseline: no downscaling")

    ice_da = None
    if ice is not None:
        ice_ds = _load(ice, "ice")
        ice_da = ice_ds["ice"] if "ice" in ice_ds.data_vars else next(iter(ice_ds.data_vars.values()))
    masks = land_mask(elev, sea_level=sea_level, ice=ice_da, ice_threshold=ice_threshold)
    log.append(
        f"land = elevation > {sea_level:g} m"
        + (f" and ice fraction < {ice_threshold:g}" if ice is not None else "")
        + f": land {masks.attrs['land_km2']:.0f} km2, ice {masks.attrs['ice_km2']:.0f} km2, "
        f"exposed shelf {masks.attrs['exposed_shelf_km2']:.0f} km2"
    )
    land = masks["land"]
    if bio is None:
        clim = clim.transpose("month", "lat", "lon")
    land_np = np.asarray(land.values)
    for v in clim.data_vars:
        first = clim[v].isel(month=0) if "month" in clim[v].dims else clim[v]
        if land_np.any() and not np.isfinite(np.asarray(first.values)[land_np]).any():
            raise DataError(
                f"slice {label!r}: variable {v!r} has no value on any land cell of the target "
                "grid; check that the input covers the target area"
            )
    clim = fill_exposed(clim, land, elev, lapse_rate=lapse_rate, inplace=owned)
    n_filled = int(clim["filled"].sum())
    if n_filled:
        log.append(
            f"{n_filled} land cells without baseline climate filled from the nearest baseline "
            f"cell ({lapse_rate * 1000:g} K/km lapse-rate correction)"
        )
    if bio is None:
        neg = int((clim["pr"].values < -1e-6).sum())
        if neg:
            log.append(f"{neg} cell-months of negative precipitation set to 0")
        if owned and neg:
            np.maximum(clim["pr"].values, 0.0, out=clim["pr"].values)
        elif neg:
            clim["pr"] = clim["pr"].clip(min=0.0)
        if rows is not None:
            # smaller blocks here: the kernel holds ~15 float64 copies of its block
            bio_rows = max(1, rows // 4)
            bio_ds = from_monthly(clim, block_rows=bio_rows)
        else:
            bio_ds = from_monthly(clim)
    else:
        bio_ds = clim
    out = xr.Dataset()
    sea = ~land_np
    for name in BIO_NAMES:
        src = bio_ds[name]
        if bio is None and src.dtype == np.float32:
            arr = np.asarray(src.values)  # computed here: ours to mask in place
            if not arr.flags.writeable or not arr.flags.c_contiguous:
                arr = np.ascontiguousarray(arr).copy()
            arr[sea] = np.nan
            da = src.copy(data=arr)
        else:
            da = src.where(land).astype(np.float32)
        attrs = dict(src.attrs)
        attrs.pop("regrid_method", None)
        if not attrs.get("long_name") and name in BIO_ATTRS:
            u, ln, desc = BIO_ATTRS[name]
            attrs.update(units=attrs.get("units") or u, long_name=ln, description=desc)
        da.attrs = attrs
        out[name] = da
    out["land"] = land
    out["elevation"] = elev.assign_attrs(
        units="m", standard_name="height_above_mean_sea_level",
        long_name="elevation relative to present sea level",
    )
    out["ice"] = masks["ice"]
    out["exposed_shelf"] = masks["exposed_shelf"]
    out["filled"] = (clim["filled"] & land).assign_attrs(clim["filled"].attrs)
    for c in ("lat", "lon"):
        out[c].attrs.update(target[c].attrs)
    out.attrs = {
        "slice_label": str(label),
        "year": float(year),
        "period": str(period),
        "model": str(model),
        "scenario": str(scenario),
        "sea_level": float(sea_level),
        "n_swapped": n_swapped,
        "land_km2": masks.attrs["land_km2"],
        "ice_km2": masks.attrs["ice_km2"],
        "exposed_shelf_km2": masks.attrs["exposed_shelf_km2"],
        "harmonise_log": json.dumps(log),
    }
    return out


def write_prepared(ds: xr.Dataset, path) -> Path:
    """Write a prepared slice as compressed CF NetCDF, atomically (temporary name, rename).

    Boolean masks are stored as int8 0/1 with CF ``flag_values``/``flag_meanings`` (xarray
    reads them back as bool).
    """
    from timeslice.io import atomic_path

    out = ds.copy()
    encoding = {}
    for v in out.data_vars:
        if out[v].dtype == bool:
            # stored as int8 0/1 (xarray reads it back as bool) with CF flag attributes
            attrs = dict(out[v].attrs)
            attrs.pop("units", None)
            out[v].attrs = {**attrs, "flag_values": np.array([0, 1], dtype=np.int8),
                            "flag_meanings": f"not_{v} {v}"}
            encoding[v] = {"zlib": True, "complevel": 4}
        elif np.issubdtype(out[v].dtype, np.floating):
            encoding[v] = {"zlib": True, "complevel": 4, "_FillValue": np.float32(np.nan)}
    for c in ("lat", "lon"):
        if c in out.coords:
            encoding[c] = {"_FillValue": None}  # CF 2.5.1: coordinates carry no fill value
    out.attrs.setdefault("Conventions", "CF-1.8")
    out.attrs.setdefault(
        "title", f"timeslice prepared slice {out.attrs.get('slice_label', '')}".strip()
    )
    out.attrs["history"] = (str(out.attrs.get("history", "")) + "\n").lstrip() + \
        "prepared by timeslice.harmonise.prepare_slice"
    target = Path(path)
    with atomic_path(target) as tmp:
        out.to_netcdf(tmp, encoding=encoding, format="NETCDF4")
    return target
