"""The calibration area (buffer, hull buffer or mask), background points and predictor values
at points.
"""

from __future__ import annotations

import os
import warnings
from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from timeslice.errors import ConfigError, DataError, InputFileError, TimesliceWarning
from timeslice.grid import AUTHALIC_RADIUS_KM, cell_area
from timeslice.niche.spatial import arc_km, cell_index, chord, land_of, unit_xyz

__all__ = ["calibration_area", "calibration_area_from_mask", "extract", "read_background_file", "sample_background"]


# ---------------------------------------------------------------------------------------------
# calibration area
# ---------------------------------------------------------------------------------------------
def _gnomonic(lon, lat, lon0: float, lat0: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gnomonic projection about (lon0, lat0): great circles become straight lines.

    Returns x, y and cos c (c = angular distance from the centre; cos c <= 0 is the far
    hemisphere, where the projection is undefined). Snyder (1987), Map Projections: A Working
    Manual, USGS Prof. Paper 1395, eqs. 22-3 to 22-5.
    """
    lam = np.deg2rad(np.asarray(lon, dtype=float) - lon0)
    phi = np.deg2rad(np.asarray(lat, dtype=float))
    phi0 = np.deg2rad(lat0)
    cos_c = np.sin(phi0) * np.sin(phi) + np.cos(phi0) * np.cos(phi) * np.cos(lam)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.cos(phi) * np.sin(lam) / cos_c
        y = (np.cos(phi0) * np.sin(phi) - np.sin(phi0) * np.cos(phi) * np.cos(lam)) / cos_c
    return x, y, cos_c


def _slerp_edge(p: np.ndarray, q: np.ndarray, step_km: float) -> np.ndarray:
    """Points every <= step_km along the great-circle arc from unit vector p to q."""
    omega = np.arccos(np.clip(np.dot(p, q), -1.0, 1.0))
    n = max(int(np.ceil(omega * AUTHALIC_RADIUS_KM / step_km)), 1)
    t = np.linspace(0.0, 1.0, n + 1)[:, None]
    if omega < 1e-12:
        return np.repeat(p[None, :], n + 1, axis=0)
    return (np.sin((1 - t) * omega) * p + np.sin(t * omega) * q) / np.sin(omega)


def _hull(lon: np.ndarray, lat: np.ndarray):
    """Spherical convex hull of points as (vertex xyz array, inside-test function or None)."""
    from scipy.spatial import ConvexHull, Delaunay, QhullError

    xyz = unit_xyz(lon, lat)
    centre = xyz.mean(axis=0)
    norm = np.linalg.norm(centre)
    if norm < 1e-9:
        raise DataError("records are spread over the whole sphere; use method='buffer'")
    centre /= norm
    lon0 = float(np.rad2deg(np.arctan2(centre[1], centre[0])))
    lat0 = float(np.rad2deg(np.arcsin(np.clip(centre[2], -1, 1))))
    x, y, cos_c = _gnomonic(lon, lat, lon0, lat0)
    if np.any(cos_c <= 0.05):
        raise DataError(
            "records span more than a hemisphere, so their convex hull is undefined; "
            "use calibration method 'buffer'"
        )
    pts = np.column_stack([x, y])
    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        return xyz, None  # collinear or too few points: the buffer of the points/segment
    verts = hull.vertices
    tri = Delaunay(pts[verts])

    def inside(qlon, qlat):
        qx, qy, qc = _gnomonic(qlon, qlat, lon0, lat0)
        ok = qc > 0
        res = np.zeros(qx.shape, dtype=bool)
        res[ok] = tri.find_simplex(np.column_stack([qx[ok], qy[ok]])) >= 0
        return res

    return xyz[verts], inside


def calibration_area(
    records: pd.DataFrame, land: xr.DataArray | xr.Dataset, *, buffer_km: float,
    method: Literal["buffer", "hull_buffer"] = "buffer",
) -> xr.DataArray:
    """Calibration (accessible) area: land cells within a geodesic buffer of the records.

    Parameters
    ----------
    records : pandas.DataFrame
        Cleaned records with ``lon``, ``lat``.
    land : xarray.DataArray or Dataset
        Baseline land mask (or prepared baseline slice; then ``land & ~ice``).
    buffer_km : float
        Buffer radius [km], great-circle.
    method : {"buffer", "hull_buffer"}
        ``buffer``: cells whose centre lies within `buffer_km` of a record. ``hull_buffer``:
        cells inside the spherical convex hull of the records or within `buffer_km` of it.

    Returns
    -------
    xarray.DataArray
        ``calibration_area(lat, lon)`` bool, on land only.

    Raises
    ------
    DataError
        No records, or the area holds no land cell.

    Notes
    -----
    The spherical convex hull is the planar hull in a gnomonic projection centred on the
    records' mean direction, where great circles are straight lines (Snyder 1987, p. 164);
    its edges are densified along great circles every ``buffer_km / 20`` so that the
    buffer of the edges is exact to within that step.
    """
    if method not in ("buffer", "hull_buffer"):
        import difflib
        close = difflib.get_close_matches(str(method), ["buffer", "hull_buffer"], n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"calibration `method` must be 'buffer' or 'hull_buffer', got {method!r}{hint}")
    if not (np.isfinite(buffer_km) and buffer_km > 0):
        raise ConfigError(f"`buffer_km` must be a positive number of km, got {buffer_km}")
    mask_land = land_of(land)
    if len(records) == 0:
        raise DataError("calibration area: no records left to buffer; check the cleaning table")
    lon = records["lon"].to_numpy(dtype=float)
    lat = records["lat"].to_numpy(dtype=float)
    sources = unit_xyz(lon, lat)
    inside = None
    if method == "hull_buffer" and len(records) >= 2:
        verts, inside = _hull(lon, lat)
        step = max(buffer_km / 20.0, 1e-3)
        if inside is None:
            # collinear records: buffer the great-circle path through them in order
            order = np.lexsort((lat, lon))
            ring = sources[order]
        else:
            ring = np.vstack([verts, verts[:1]])
        edges = [_slerp_edge(ring[i], ring[i + 1], step) for i in range(len(ring) - 1)]
        sources = np.vstack([sources] + edges)
    # only the latitude band the buffer can reach is searched (great-circle hull edges may bulge
    # poleward of the records, so the band comes from the densified edges); this bounds memory
    reach = float(np.rad2deg(buffer_km / AUTHALIC_RADIUS_KM))
    src_lat = np.rad2deg(np.arcsin(np.clip(sources[:, 2], -1.0, 1.0)))
    glat_all = np.asarray(mask_land["lat"].values, dtype=float)
    band = (glat_all >= src_lat.min() - reach - 1e-6) & (glat_all <= src_lat.max() + reach + 1e-6)
    glon, glat = np.meshgrid(mask_land["lon"].values, glat_all[band])
    cells = unit_xyz(glon.ravel(), glat.ravel())
    inside_hull = inside(glon.ravel(), glat.ravel()) if inside is not None else np.zeros(cells.shape[0], dtype=bool)
    tree = cKDTree(sources)
    dist, _ = tree.query(cells, k=1, distance_upper_bound=chord(buffer_km) * (1 + 1e-12))
    near = np.isfinite(dist) & (arc_km(np.where(np.isfinite(dist), dist, 0)) <= buffer_km)
    area = np.zeros(mask_land.shape, dtype=bool)
    area[band] = (near | inside_hull).reshape(glat.shape)
    area &= np.asarray(mask_land.values, dtype=bool)
    if not area.any():
        raise DataError(
            f"calibration area ({method}, buffer_km={buffer_km:g}) around {len(records)} record(s) "
            "contains no land cell; increase buffer_km or check the records' coordinates"
        )
    out = xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": mask_land["lat"], "lon": mask_land["lon"]},
        name="calibration_area",
        attrs={
            "long_name": "calibration area",
            "description": (
                f"land cells whose centre lies within {buffer_km:g} km (great-circle) of "
                + ("a record" if method == "buffer" else "the records' spherical convex hull")
            ),
            "method": method,
            "buffer_km": float(buffer_km),
            "n_records": int(len(records)),
        },
    )
    return out


def calibration_area_from_mask(
    mask: xr.DataArray | str | os.PathLike,
    land: xr.DataArray | xr.Dataset,
    *,
    variable: str | None = None,
) -> xr.DataArray:
    """Calibration area from a user mask (a DataArray or a NetCDF file) on the model grid.

    Nonzero, non-missing mask cells count as inside; the result is intersected with land.
    The mask must be on the same lat/lon grid as `land` (within 1e-6 degrees).

    Parameters
    ----------
    mask : xarray.DataArray, str or path
        The mask, or a NetCDF file holding it.
    land : xarray.DataArray or Dataset
        Baseline land mask (or prepared baseline slice; then ``land & ~ice``).
    variable : str, optional
        Variable of the file to read (default: its only data variable).

    Returns
    -------
    xarray.DataArray
        ``calibration_area(lat, lon)`` bool, on land only.

    Raises
    ------
    InputFileError
        The file is missing or unreadable, or `variable` is not in it.
    DataError
        The grid differs from the model grid, or the mask holds no land.
"""
    source = "calibration mask"
    if not isinstance(mask, xr.DataArray):
        path = os.fspath(mask)
        source = path
        if not os.path.exists(path):
            raise InputFileError(f"{path}: calibration mask file not found; check the path")
        try:
            with xr.open_dataset(path) as ds:
                names = list(ds.data_vars)
                name = variable or (names[0] if len(names) == 1 else None)
                if name is None or name not in ds:
                    raise InputFileError(
                        f"{path}: choose the mask variable with `variable` (file has: {', '.join(names)})"
                    )
                mask = ds[name].load()
        except (OSError, ValueError) as err:
            raise InputFileError(f"{path}: not a readable NetCDF mask ({err}); check the file") from err
        from timeslice.grid import normalise_lonlat

        mask = normalise_lonlat(mask, source=path)
    mask_land = land_of(land)
    if "lat" not in mask.dims or "lon" not in mask.dims:
        raise DataError(f"{source}: mask needs dims (lat, lon), got {mask.dims}")
    mask = mask.transpose("lat", "lon")
    same = mask.sizes["lat"] == mask_land.sizes["lat"] and mask.sizes["lon"] == mask_land.sizes["lon"]
    if same:
        same = np.allclose(mask["lat"].values, mask_land["lat"].values, atol=1e-6) and np.allclose(
            mask["lon"].values, mask_land["lon"].values, atol=1e-6
        )
    if not same:
        raise DataError(
            f"{source}: mask grid ({mask.sizes['lat']} x {mask.sizes['lon']}) differs from the model "
            f"grid ({mask_land.sizes['lat']} x {mask_land.sizes['lon']}); regrid it onto the baseline grid"
        )
    values = np.asarray(mask.values)
    inside = np.where(np.isnan(values.astype(float)), False, values.astype(float) != 0)
    area = inside & np.asarray(mask_land.values, dtype=bool)
    if not area.any():
        raise DataError(f"{source}: calibration mask contains no land cell; check the mask values")
    return xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": mask_land["lat"], "lon": mask_land["lon"]},
        name="calibration_area",
        attrs={
            "long_name": "calibration area",
            "description": f"nonzero cells of {source}, on land",
            "method": "mask",
        },
    )


# ---------------------------------------------------------------------------------------------
# background
# ---------------------------------------------------------------------------------------------
def sample_background(
    area: xr.DataArray,
    *,
    n: int = 10000,
    seed: int | np.random.Generator | None,
) -> pd.DataFrame:
    """Background points: cell centres drawn within `area` with probability proportional to area.

    Parameters
    ----------
    area : xarray.DataArray
        Boolean ``(lat, lon)`` calibration area.
    n : int
        Number of points; when the area has fewer cells, every cell is used once (with a
        :class:`TimesliceWarning`).
    seed : int or numpy.random.Generator
        Seed.

    Returns
    -------
    pandas.DataFrame
        ``lon``, ``lat`` [degrees] of distinct cell centres.

    Notes
    -----
    Cells are drawn without replacement, each draw with probability proportional to the
    spherical cell area :math:`R^2\\Delta\\lambda(\\sin\\varphi_2-\\sin\\varphi_1)` among the cells
    not yet drawn (successive sampling), so that on a lat-lon grid high-latitude cells are not
    over-represented.
    """
    if not isinstance(area, xr.DataArray):
        raise DataError(f"`area` must be a boolean DataArray (lat, lon), got {type(area).__name__}")
    n = int(n)
    if n < 1:
        raise ConfigError(f"background `n` must be >= 1, got {n}")
    area = area.transpose("lat", "lon")
    mask = np.asarray(area.values, dtype=bool)
    idx = np.flatnonzero(mask.ravel())
    if idx.size == 0:
        raise DataError("calibration area has no cells to sample background points from")
    rng = np.random.default_rng(seed)
    if n >= idx.size:
        if n > idx.size:
            warnings.warn(
                f"background: asked for {n} points but the calibration area has only {idx.size} "
                "cells; using every cell once",
                TimesliceWarning,
                stacklevel=2,
            )
        chosen = idx
    else:
        w = np.asarray(cell_area(area).values, dtype=float).ravel()[idx]
        chosen = np.sort(rng.choice(idx, size=n, replace=False, p=w / w.sum()))
    rows, cols = np.unravel_index(chosen, mask.shape)
    out = pd.DataFrame(
        {
            "lon": np.asarray(area["lon"].values, dtype=float)[cols],
            "lat": np.asarray(area["lat"].values, dtype=float)[rows],
        }
    )
    out.attrs["sampling"] = "cell centres by cell area, without replacement"
    return out


def read_background_file(
    path: str | os.PathLike,
    area: xr.DataArray,
    *,
    columns: dict[str, str] | None = None,
    n: int | None = None,
    seed: int | np.random.Generator | None = 0,
) -> pd.DataFrame:
    """Target-group background: records of related species from a file, kept inside `area`.

    The records carry the sampling effort of the observers (Phillips et al. 2009, Ecol. Appl.
    19:181), so background drawn from them shares the bias of the presences. Records are
    snapped to their cell, one per cell, and only cells inside `area` are kept; with `n`, at most
    `n` cells are drawn at random.

    Parameters
    ----------
    path : str or path
        CSV or other occurrence file (:func:`timeslice.readers.read_occurrences`).
    area : xarray.DataArray
        Calibration area (bool, lat x lon).
    columns : dict, optional
        Column names of the file (as for the occurrence reader).
    n : int, optional
        Most cells to keep (a seeded random choice); None keeps them all.
    seed : int, Generator or None
        Seed of that choice.

    Returns
    -------
    pandas.DataFrame
        ``lon, lat`` of the cell centres, one row per cell, and their ``area_km2``.

    Raises
    ------
    InputFileError
        Missing or unreadable file, or no coordinate columns.
    DataError
        No record of the file falls inside the calibration area.
"""
    from timeslice.readers.occurrences import read_occurrences

    recs = read_occurrences(path, columns=columns)
    lon = recs["lon"].to_numpy(dtype=float)
    lat = recs["lat"].to_numpy(dtype=float)
    ok = np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90) & (np.abs(lon) <= 180)
    lon, lat = (((lon[ok] + 180) % 360) - 180), lat[ok]
    area = area.transpose("lat", "lon")
    rows, cols, inside = cell_index(area, lon, lat)
    mask = np.asarray(area.values, dtype=bool)
    good = inside & mask[rows, cols]
    cell = np.unique(rows[good] * mask.shape[1] + cols[good])
    if cell.size == 0:
        raise DataError(
            f"{path}: none of the {int(ok.sum())} target-group records lies inside the calibration "
            "area; check the file or widen the area"
        )
    if n is not None and cell.size > int(n):
        cell = np.sort(np.random.default_rng(seed).choice(cell, size=int(n), replace=False))
    r, c = np.unravel_index(cell, mask.shape)
    out = pd.DataFrame(
        {"lon": np.asarray(area["lon"].values, dtype=float)[c], "lat": np.asarray(area["lat"].values, dtype=float)[r]}
    )
    out.attrs["sampling"] = f"target-group records from {path}, one per cell"
    return out


# ---------------------------------------------------------------------------------------------
# extraction
# ---------------------------------------------------------------------------------------------
def extract(ds: xr.Dataset, points: pd.DataFrame, *, variables: Sequence[str]) -> pd.DataFrame:
    """Values of `variables` at the grid cell nearest to each point.

    Parameters
    ----------
    ds : xarray.Dataset
        Gridded predictors on (lat, lon).
    points : pandas.DataFrame
        ``lon``, ``lat`` in degrees.
    variables : sequence of str
        Variable names in `ds`.

    Returns
    -------
    pandas.DataFrame
        ``lon``, ``lat`` (of the points, unchanged) and one column per variable (NaN off land).
    """
    variables = list(variables)
    missing = [v for v in variables if v not in ds.data_vars]
    if missing:
        raise DataError(
            f"baseline has no variable(s) {', '.join(missing)} (it has: {', '.join(map(str, ds.data_vars))}); "
            "fix the variable list"
        )
    lon = points["lon"].to_numpy(dtype=float)
    lat = points["lat"].to_numpy(dtype=float)
    rows, cols, _ = cell_index(ds, lon, lat)
    out = pd.DataFrame({"lon": lon, "lat": lat})
    ir = xr.DataArray(rows, dims="point")
    ic = xr.DataArray(cols, dims="point")
    for v in variables:
        da = ds[v]
        extra = [d for d in da.dims if d not in ("lat", "lon")]
        if extra:
            raise DataError(f"predictor {v!r} has extra dimension(s) {extra}; select one slice first")
        # pointwise selection reads only the chunks holding points when `ds` is dask-backed
        out[v] = np.asarray(da.isel(lat=ir, lon=ic).values, dtype=float)
    return out
