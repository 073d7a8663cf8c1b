"""Refugia as objects: connected patches of a refugium layer and a table of their properties.

A refugium layer says, cell by cell, where the climate stayed suitable; a reader planning
fieldwork or protection asks *which* places those are, how large each is, how high it lies and
how many climate models and scenarios keep it. This module turns the mask into numbered
patches (8-connectivity, joined across the antimeridian on a grid that wraps) and measures
each one.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area, is_global_lon, wrap_lon
from timeslice.series._checks import check_dataarray

__all__ = ["PATCH_COLUMNS", "label_patches", "patch_table", "refugium_layer", "refugium_patches"]

#: Columns of :func:`patch_table`, in order.
PATCH_COLUMNS = (
    "patch", "name", "area_km2", "n_cells", "centroid_lat", "centroid_lon",
    "lat_min", "lat_max", "lon_min", "lon_max", "elevation_min_m", "elevation_max_m",
    "analog_share", "chains", "chains_keeping_whole", "chains_keeping_part", "kept_share_mean",
    "kept_whole_by",
)

#: 8-connectivity: cells sharing an edge or a corner belong to one patch.
_EIGHT = np.ones((3, 3), dtype=bool)


def _label_kernel(mask: np.ndarray, area: np.ndarray, wrap: bool) -> np.ndarray:
    """Labels 1..n of the 8-connected patches of a 2-D (lat, lon) mask, largest area first.

    With `wrap`, the first and last columns are neighbours (a global grid), so a patch that
    crosses the grid's longitude seam is one patch.
    """
    from scipy import ndimage

    raw, n = ndimage.label(mask, structure=_EIGHT)
    if n == 0:
        return raw.astype(np.int32)
    parent = np.arange(n + 1)

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    if wrap and mask.shape[1] > 2:
        west, east = raw[:, 0], raw[:, -1]
        nrow = mask.shape[0]
        for r in range(nrow):
            if not west[r]:
                continue
            for dr in (-1, 0, 1):  # edge and corner neighbours across the seam
                rr = r + dr
                if 0 <= rr < nrow and east[rr]:
                    a, b = find(int(west[r])), find(int(east[rr]))
                    if a != b:
                        parent[max(a, b)] = min(a, b)
    roots = np.array([find(i) for i in range(n + 1)])
    merged = roots[raw]
    flat = merged.ravel()
    # one pass over the grid, whatever the number of patches
    ids, first = np.unique(flat, return_index=True)
    keep = ids > 0
    ids, first = ids[keep], first[keep]
    sizes = np.bincount(flat, weights=area.ravel(), minlength=int(ids.max()) + 1)[ids]
    order = np.lexsort((first, -sizes))  # largest first; ties by position (deterministic)
    relabel = np.zeros(merged.max() + 1, dtype=np.int32)
    relabel[ids[order]] = np.arange(1, ids.size + 1, dtype=np.int32)
    return relabel[merged]


def label_patches(mask: xr.DataArray, *, wrap: bool | None = None) -> xr.DataArray:
    """Number the connected patches of a boolean (lat, lon) mask.

    Parameters
    ----------
    mask : xarray.DataArray
        Boolean (or 0/1) layer on ``(lat, lon)``, e.g. ``refugium_window``.
    wrap : bool, optional
        Whether the first and last longitude columns are neighbours. Default: True when the
        longitude axis covers 360° (:func:`timeslice.grid.is_global_lon`).

    Returns
    -------
    xarray.DataArray
        ``patch`` int32 (lat, lon): 0 outside the mask, 1..n the patches in order of
        decreasing area (ties by position), with CF ``flag_values`` naming each patch.

    Notes
    -----
    Two cells of the mask belong to one patch when a chain of mask cells joins them, each
    step to one of the 8 neighbours (edge or corner; 8-connectivity). A patch is a place,
    not a population: it says where the climate stayed suitable, not that the species lived
    there.
    """
    check_dataarray(mask, name="mask")
    extra = [d for d in mask.dims if d not in ("lat", "lon")]
    if extra:
        raise DataError(f"label_patches: `mask` must be 2-D (lat, lon), got dims {mask.dims}; "
                        "select one slice or chain first")
    m = mask.transpose("lat", "lon")
    values = np.asarray(m.values)
    b = values.astype(bool) if values.dtype == bool else (np.nan_to_num(values) > 0.5)
    if wrap is None:
        wrap = is_global_lon(m["lon"].values)
    area = cell_area(m).values
    labels = _label_kernel(b, area, bool(wrap))
    n = int(labels.max())
    out = xr.DataArray(labels, dims=("lat", "lon"), coords={"lat": m["lat"], "lon": m["lon"]},
                       name="patch")
    out.attrs = {
        "units": "1",
        "long_name": f"connected patch of {mask.name or 'the mask'}",
        "description": "8-connected patches numbered by decreasing area (1 the largest); "
                       "0 outside" + ("; joined across the longitude seam" if wrap else ""),
        "flag_values": np.arange(0, n + 1, dtype=np.int32),
        "flag_meanings": " ".join(["outside"] + [f"R{i}" for i in range(1, n + 1)]),
    }
    return out


def _centroid(lat: np.ndarray, lon: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """Area-weighted centroid on the sphere: the mean of unit vectors, back to degrees, so a
    patch across 180° gets its centroid there, not half a world away."""
    la, lo = np.deg2rad(lat), np.deg2rad(lon)
    v = np.stack([np.cos(la) * np.cos(lo), np.cos(la) * np.sin(lo), np.sin(la)]) @ w
    norm = float(np.linalg.norm(v))
    if norm == 0:
        return float("nan"), float("nan")
    return (float(np.rad2deg(np.arcsin(v[2] / norm))),
            float(np.rad2deg(np.arctan2(v[1], v[0]))))


def patch_table(
    labels: xr.DataArray,
    *,
    elevation: xr.DataArray | None = None,
    analog: xr.DataArray | None = None,
    keep: xr.DataArray | None = None,
) -> pd.DataFrame:
    """One row per patch: area, centroid, extent, elevation range, analog share, persistence.

    Parameters
    ----------
    labels : xarray.DataArray
        From :func:`label_patches`.
    elevation : xarray.DataArray, optional
        Present-day elevation (lat, lon) [m].
    analog : xarray.DataArray, optional
        Boolean (lat, lon): the refugium in analog climate (e.g. ``refugium_window_analog``).
    keep : xarray.DataArray, optional
        Boolean (chain, lat, lon): the refugium of each chain of slices (one climate model
        under one scenario, ``refugium_chain``) for the persistence counts.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`PATCH_COLUMNS`: ``patch`` (1 the largest), ``name`` ("R1"...),
        ``area_km2`` (sum of the cell areas on the authalic sphere), ``n_cells``,
        ``centroid_lat``/``centroid_lon`` (area-weighted, on the sphere; lon in [-180, 180)),
        the extent of the cell centres, the present-day elevation range [m], ``analog_share``
        (share of the area in analog climate, NaN without `analog`), ``chains`` (number of
        chains), ``chains_keeping_whole`` / ``chains_keeping_part`` (chains whose own refugium
        covers every / at least one cell of the patch), ``kept_share_mean`` (mean over the
        chains of the share of the patch area their refugium covers; NaN without chains) and
        ``kept_whole_by`` (the names of the chains keeping it whole).
    """
    check_dataarray(labels, name="labels")
    lab = np.asarray(labels.transpose("lat", "lon").values)
    area = cell_area(labels).values
    lat2, lon2 = np.meshgrid(labels["lat"].values, labels["lon"].values, indexing="ij")
    elev = (np.asarray(elevation.transpose("lat", "lon").values, dtype=float)
            if elevation is not None else None)
    ana = (np.asarray(analog.transpose("lat", "lon").values).astype(bool)
           if analog is not None else None)
    chains: list[str] = []
    kp = None
    if keep is not None:
        dim = [d for d in keep.dims if d not in ("lat", "lon")]
        if len(dim) != 1:
            raise DataError(f"patch_table: `keep` must be (chain, lat, lon), got {keep.dims}")
        kp = np.asarray(keep.transpose(dim[0], "lat", "lon").values).astype(bool)
        chains = ([str(c) for c in keep[dim[0]].values] if dim[0] in keep.coords
                  else [str(i) for i in range(kp.shape[0])])
    rows = []
    west = float(labels["lon"].values[0]) - 180.0 if labels.sizes["lon"] else -180.0
    # the cells of every patch from one sort (not one pass over the grid per patch)
    flat = lab.ravel()
    inside = np.flatnonzero(flat > 0)
    inside = inside[np.argsort(flat[inside], kind="stable")]
    counts = np.bincount(flat[inside], minlength=int(lab.max(initial=0)) + 1)
    bounds = np.concatenate([[0], np.cumsum(counts[1:])])
    area, lat2, lon2 = area.ravel(), lat2.ravel(), lon2.ravel()
    elev = elev.ravel() if elev is not None else None
    ana = ana.ravel() if ana is not None else None
    kp = kp.reshape(kp.shape[0], -1) if kp is not None else None
    for p in range(1, int(lab.max(initial=0)) + 1):
        cells = inside[bounds[p - 1]:bounds[p]]
        w = area[cells]
        clat, clon = _centroid(lat2[cells], lon2[cells], w)
        lons = wrap_lon(lon2[cells], west=west)
        row = {
            "patch": p, "name": f"R{p}", "area_km2": float(w.sum()), "n_cells": int(cells.size),
            "centroid_lat": clat, "centroid_lon": float(wrap_lon(clon)),
            "lat_min": float(lat2[cells].min()), "lat_max": float(lat2[cells].max()),
            "lon_min": float(wrap_lon(lons.min())), "lon_max": float(wrap_lon(lons.max())),
            "elevation_min_m": float(np.nanmin(elev[cells])) if elev is not None else np.nan,
            "elevation_max_m": float(np.nanmax(elev[cells])) if elev is not None else np.nan,
            "analog_share": (float(w[ana[cells]].sum() / w.sum()) if ana is not None
                             else np.nan),
            "chains": len(chains),
        }
        if kp is not None:
            whole = [c for c, k in zip(chains, kp) if k[cells].all()]
            part = [c for c, k in zip(chains, kp) if k[cells].any()]
            shares = [float(w[k[cells]].sum() / w.sum()) for k in kp]
            row.update(chains_keeping_whole=len(whole), chains_keeping_part=len(part),
                       kept_share_mean=float(np.mean(shares)) if shares else np.nan,
                       kept_whole_by="; ".join(whole))
        else:
            row.update(chains_keeping_whole=0, chains_keeping_part=0, kept_share_mean=np.nan,
                       kept_whole_by="")
        rows.append(row)
    return pd.DataFrame(rows, columns=list(PATCH_COLUMNS))


def refugium_layer(series: xr.Dataset) -> str | None:
    """The refugium layer the report shows: ``refugium_window``, else ``refugium_all_slices``
    (else ``refugium``); None when the series has none.

    Parameters
    ----------
    series : xarray.Dataset
        A summarised series.

    Returns
    -------
    str or None
        Name of the layer.
    """
    for name in ("refugium_window", "refugium_all_slices", "refugium"):
        if name in series.data_vars:
            return name
    return None


def refugium_patches(
    series: xr.Dataset, *, layer: str | None = None, chains: Sequence[str] | None = None,
) -> tuple[xr.DataArray, pd.DataFrame]:
    """Patches of a summarised series' refugium layer and their table.

    Parameters
    ----------
    series : xarray.Dataset
        Summarised series (:func:`timeslice.series.summarise`), with ``elevation`` and, when
        present, ``refugium_window_analog`` / ``refugium_all_slices_analog`` and
        ``refugium_chain``.
    layer : str, optional
        Refugium layer (default :func:`refugium_layer`).
    chains : sequence of str, optional
        Chains counted in the persistence columns. Default: the chains with a slice outside
        the layer's own slices (its ``slices`` attribute), e.g. the future model x scenario
        chains for the window refugium of the past, whose own chains keep it by construction;
        every chain when none lies outside.

    Returns
    -------
    (xarray.DataArray, pandas.DataFrame)
        The patch labels (:func:`label_patches`) and the table (:func:`patch_table`).
    """
    if not isinstance(series, xr.Dataset):
        raise DataError(f"refugium_patches: `series` must be an xarray.Dataset, got "
                        f"{type(series).__name__}")
    layer = layer or refugium_layer(series)
    if layer is None or layer not in series.data_vars:
        raise DataError(f"refugium_patches: no refugium layer {layer!r} in the series; "
                        "summarise the series first (timeslice.series.summarise)")
    labels = label_patches(series[layer])
    analog_name = {"refugium_window": "refugium_window_analog",
                   "refugium_all_slices": "refugium_all_slices_analog"}.get(layer)
    keep = series["refugium_chain"] if "refugium_chain" in series.data_vars else None
    if keep is not None and chains is None and "chain_slices" in keep.coords:
        inside = set(str(series[layer].attrs.get("slices", "")).split())
        outside = [str(c) for c, s in zip(keep["chain"].values, keep["chain_slices"].values)
                   if inside and not set(str(s).split()) <= inside]
        chains = outside or None
    if keep is not None and chains is not None:
        keep = keep.sel(chain=list(chains))
    table = patch_table(
        labels,
        elevation=series["elevation"] if "elevation" in series.data_vars else None,
        analog=series[analog_name] if analog_name in series.data_vars else None,
        keep=keep,
    )
    return labels, table
