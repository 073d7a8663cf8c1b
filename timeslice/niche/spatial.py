"""Geometry on the sphere, grid-cell look-up and spatial thinning of records.

Distances are great-circle distances on the authalic sphere (:data:`timeslice.grid.AUTHALIC_RADIUS_KM`).
Neighbour searches run in a :class:`scipy.spatial.cKDTree` on unit-sphere xyz coordinates,
where a great-circle distance :math:`d` corresponds to the chord :math:`2\\sin(d / 2R)`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from timeslice.errors import ConfigError, DataError
from timeslice.grid import AUTHALIC_RADIUS_KM, grid_edges, wrap_lon

__all__ = ["arc_km", "cell_index", "chord", "land_of", "nearest_index", "parse_thin", "thin", "unit_xyz"]


def unit_xyz(lon, lat) -> np.ndarray:
    """Unit-sphere Cartesian coordinates, shape (n, 3).

    Parameters
    ----------
    lon, lat : array-like
        Degrees.

    Returns
    -------
    ndarray of shape (n, 3)
        x, y, z on the unit sphere.
    """
    lam = np.deg2rad(np.asarray(lon, dtype=float))
    phi = np.deg2rad(np.asarray(lat, dtype=float))
    c = np.cos(phi)
    return np.column_stack([c * np.cos(lam), c * np.sin(lam), np.sin(phi)])


def chord(distance_km: float) -> float:
    """Chord length on the unit sphere for a great-circle distance in km.

    Parameters
    ----------
    distance_km : float
        Great-circle distance [km] on the authalic sphere.

    Returns
    -------
    float
        Chord length (unit sphere).
    """
    angle = min(float(distance_km) / AUTHALIC_RADIUS_KM, np.pi)
    return 2.0 * np.sin(angle / 2.0)


def arc_km(chord: np.ndarray) -> np.ndarray:
    """Great-circle distance in km for unit-sphere chord lengths.

    Parameters
    ----------
    chord : array-like
        Chord lengths on the unit sphere.

    Returns
    -------
    ndarray
        Great-circle distances [km].
    """
    return 2.0 * AUTHALIC_RADIUS_KM * np.arcsin(np.clip(np.asarray(chord) / 2.0, 0.0, 1.0))


def land_of(land: xr.DataArray | xr.Dataset) -> xr.DataArray:
    """The usable-land mask of a prepared slice: ``land`` and not ``ice`` (bool, lat x lon).

    Accepts the mask itself (a boolean DataArray) or a prepared slice Dataset.

    Parameters
    ----------
    land : xarray.DataArray or Dataset
        A boolean mask, or a prepared slice with ``land`` (and ``ice``).

    Returns
    -------
    xarray.DataArray
        Boolean (lat, lon).
    """
    if isinstance(land, xr.Dataset):
        if "land" not in land:
            raise DataError(
                "baseline slice has no `land` variable; prepare it with the harmonise stage "
                "(land mask from DEM, sea level and ice)"
            )
        mask = land["land"].astype(bool)
        if "ice" in land:
            mask = mask & ~land["ice"].astype(bool)
    elif isinstance(land, xr.DataArray):
        mask = land.astype(bool)
    else:
        raise DataError(f"`land` must be an xarray DataArray or Dataset, got {type(land).__name__}")
    for dim in ("lat", "lon"):
        if dim not in mask.dims:
            raise DataError(f"`land` mask needs dims (lat, lon), got {mask.dims}")
    return mask.transpose("lat", "lon")


def nearest_index(coord: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Index of the nearest coordinate (ascending 1-D `coord`) for each value.

    Parameters
    ----------
    coord : ndarray
        Ascending 1-D coordinate.
    values : ndarray
        Values to look up.

    Returns
    -------
    ndarray of int64
        Index into `coord` of the nearest coordinate.
    """
    idx = np.searchsorted(coord, values)
    idx = np.clip(idx, 1, coord.size - 1) if coord.size > 1 else np.zeros_like(idx)
    if coord.size > 1:
        left = coord[idx - 1]
        right = coord[idx]
        idx = np.where(np.abs(values - left) <= np.abs(right - values), idx - 1, idx)
    return idx.astype(np.int64)


def cell_index(grid: xr.Dataset | xr.DataArray, lon, lat) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row/column of the grid cell holding each point, and whether it is inside the grid.

    Parameters
    ----------
    grid : xarray.Dataset or DataArray
        Regular lat-lon grid.
    lon, lat : array-like
        Points [degrees]; longitudes are wrapped onto the grid's range.

    Returns
    -------
    rows, cols : ndarray of int64
        Nearest row and column.
    inside : ndarray of bool
        Whether the point lies inside the grid's edges.
    """
    glat = np.asarray(grid["lat"].values, dtype=float)
    glon = np.asarray(grid["lon"].values, dtype=float)
    lat_b, lon_b = grid_edges(grid)
    # records come in [-180, 180); a grid across 180 runs on past it (e.g. 165..195)
    lon = wrap_lon(np.asarray(lon, dtype=float), west=lon_b[0, 0])
    lat = np.asarray(lat, dtype=float)
    inside = (
        (lat >= lat_b[0, 0]) & (lat <= lat_b[-1, 1]) & (lon >= lon_b[0, 0]) & (lon <= lon_b[-1, 1])
    )
    return nearest_index(glat, lat), nearest_index(glon, lon), inside


# ---------------------------------------------------------------------------------------------
# thinning
# ---------------------------------------------------------------------------------------------
def _greedy_independent(neighbours: list[list[int]], order: np.ndarray) -> np.ndarray:
    """Keep points in `order` unless a kept point is a neighbour (a maximal independent set)."""
    blocked = np.zeros(len(neighbours), dtype=bool)
    keep = []
    for i in order:
        if blocked[i]:
            continue
        keep.append(i)
        blocked[neighbours[i]] = True
    return np.sort(np.asarray(keep, dtype=np.int64))


def parse_thin(value) -> str | float | None:
    """The thinning rule of a setting: ``"cell"``, a distance in km, or None (no thinning).

    The one place a thinning setting is checked (:func:`timeslice.niche.workflow.fit_niche`
    calls it before any work; :func:`thin` for its distance).

    Parameters
    ----------
    value : "cell", "none", float, str or None
        ``"cell"`` (one record per grid cell), a positive distance in km (a number or its
        text), or ``None`` / ``"none"`` / ``"off"`` / ``"no"`` / ``""`` for no thinning.

    Returns
    -------
    "cell", float or None
        The rule.

    Raises
    ------
    ConfigError
        Not one of these, or a distance that is not more than 0 km.
    """
    if value is None or (isinstance(value, str) and value.strip().lower() in ("none", "off", "no", "")):
        return None
    if isinstance(value, str) and value.strip().lower() == "cell":
        return "cell"
    try:
        distance = float(value)
    except (TypeError, ValueError) as err:
        raise ConfigError(f"`thin` must be 'cell', a distance in km or 'none', got {value!r}") from err
    if not distance > 0:
        raise ConfigError(f"`thin` distance must be > 0 km, got {value}")
    return distance


def thin(
    records: pd.DataFrame,
    *,
    grid: xr.Dataset | xr.DataArray | None = None,
    min_distance_km: float | None = None,
    seed: int | np.random.Generator | None,
    repeats: int = 10,
) -> pd.DataFrame:
    """Spatially thin records: one per grid cell, or no pair closer than a distance.

    Parameters
    ----------
    records : pandas.DataFrame
        Records with ``lon``, ``lat`` in degrees.
    grid : xarray.Dataset or DataArray, optional
        Keep one record per cell of this grid (chosen at random, seeded).
    min_distance_km : float, optional
        Keep a set of records with no two closer than this great-circle distance [km].
    seed : int or numpy.random.Generator
        Seed of the random choices.
    repeats : int
        Randomised greedy passes for `min_distance_km`; the largest set found is kept (the first
        of equal size).

    Returns
    -------
    pandas.DataFrame
        The kept records in their input order, index reset; ``attrs["thinning"]`` says how.

    Notes
    -----
    The distance rule is a randomised greedy maximal independent set of the graph joining
    records closer than :math:`d`: records are visited in a random order and kept unless a kept
    record lies within :math:`d` (pairs at exactly :math:`d` count as too close). Several passes
    approach the largest such set, which is NP-hard to find exactly.
    """
    if (grid is None) == (min_distance_km is None):
        raise ConfigError("thin: give exactly one of `grid` (one record per cell) or `min_distance_km`")
    rng = np.random.default_rng(seed)
    n = len(records)
    if n == 0:
        out = records.reset_index(drop=True)
        out.attrs = dict(records.attrs)
        return out
    lon = records["lon"].to_numpy(dtype=float)
    lat = records["lat"].to_numpy(dtype=float)
    if grid is not None:
        rows, cols, _ = cell_index(grid, lon, lat)
        cell = rows * max(int(np.asarray(grid["lon"]).size), 1) + cols
        order = rng.permutation(n)
        _, first = np.unique(cell[order], return_index=True)
        keep = np.sort(order[first])
        how = "one record per grid cell (random choice within a cell)"
    else:
        d = parse_thin(min_distance_km)
        if not isinstance(d, float):
            raise ConfigError(f"`min_distance_km` must be a distance > 0 km, got {min_distance_km!r}")
        if int(repeats) < 1:
            raise ConfigError(f"`repeats` must be >= 1, got {repeats}")
        tree = cKDTree(unit_xyz(lon, lat))
        # a tiny relative margin so that pairs at the distance (up to rounding) count as too close
        neighbours = tree.query_ball_point(unit_xyz(lon, lat), r=chord(d) * (1 + 1e-9))
        neighbours = [[j for j in nb if j != i] for i, nb in enumerate(neighbours)]
        best = None
        for _ in range(int(repeats)):
            kept = _greedy_independent(neighbours, rng.permutation(n))
            if best is None or kept.size > best.size:
                best = kept
        keep = best
        how = f"no pair closer than {d:g} km (randomised greedy, best of {int(repeats)} passes)"
    out = records.iloc[keep].reset_index(drop=True)
    out.attrs = dict(records.attrs)
    out.attrs["thinning"] = how
    return out

