"""Which panel of a map figure each slice goes to: rows of scenario and period, columns of a
slice coordinate such as the climate model, or a plain grid of panels."""

from __future__ import annotations

from collections.abc import Sequence

import xarray as xr

from timeslice.errors import DataError
from timeslice.report._layers import slice_labels, slice_title

__all__ = ["grid_places", "panel_places", "slice_indices"]


def slice_indices(ds: xr.Dataset, slices: Sequence[str] | None) -> list[int]:
    """Positions of the chosen slices in the series (all when `slices` is None); one line
    naming the missing labels otherwise.

    Parameters
    ----------
    ds : xarray.Dataset
        The series.
    slices : sequence of str or None
        Slice labels to draw.
    """
    if "slice" not in ds.dims:
        return []
    labels = slice_labels(ds)
    if slices is None:
        return list(range(len(labels)))
    missing = [s for s in slices if s not in labels]
    if missing:
        raise DataError(f"maps: slices {missing} are not in the series; choose from {labels}")
    return [labels.index(s) for s in slices]


def grid_places(ds: xr.Dataset, idx: list[int], columns: str
                 ) -> tuple[dict[int, tuple[int, int]], list[str], list[str]]:
    """Panel (row, column) of every slice: columns are the values of slice coordinate
    `columns` (e.g. the climate model), rows the other slice metadata (scenario, period), both
    in order of first appearance; also the row and column labels.

    Parameters
    ----------
    ds : xarray.Dataset
        The series.
    idx : list of int
        Positions of the slices drawn.
    columns : str
        Slice coordinate laid out as columns.
    """
    keys = [k for k in ("scenario", "period", "model") if k != columns and k in ds.coords
            and ds[k].dims == ("slice",)]

    def row_of(i: int) -> str:
        return " ".join(str(ds[k].values[i]) for k in keys) if keys else slice_labels(ds)[i]

    rows = list(dict.fromkeys(row_of(i) for i in idx))
    cols = list(dict.fromkeys(str(ds[columns].values[i]) for i in idx))
    places: dict[int, tuple[int, int]] = {}
    taken: set[tuple[int, int]] = set()
    for i in idx:
        r = rows.index(row_of(i))
        c = cols.index(str(ds[columns].values[i]))
        if (r, c) in taken:  # two slices share row and column: the grid cannot hold them
            return {}, rows, cols
        taken.add((r, c))
        places[i] = (r, c)
    # every row starts at the left (the baseline's one panel, the past's periods): full rows
    # keep their columns aligned, shorter rows leave no gap at the left
    for r in range(len(rows)):
        mine = sorted((c, i) for i, (rr, c) in places.items() if rr == r)
        for k, (_, i) in enumerate(mine):
            places[i] = (r, k)
    return places, rows, cols


def panel_places(ds: xr.Dataset, idx: list[int], columns: str | None, ncols: int | None):
    """(places, row labels or None, panel titles) of a panel figure.

    Parameters
    ----------
    ds : xarray.Dataset
        The series.
    idx : list of int
        Positions of the slices drawn.
    columns : str or None
        Slice coordinate laid out as columns (None: a plain grid).
    ncols : int or None
        Panels per row of a plain grid (default up to 3).
    """
    if columns is not None and columns in ds.coords and ds[columns].dims == ("slice",):
        places, rows, _ = grid_places(ds, idx, columns)
        if places:
            titles = {i: str(ds[columns].values[i]) for i in idx}
            return places, rows, titles
    ncols = ncols or min(len(idx), 3)
    places = {i: (k // ncols, k % ncols) for k, i in enumerate(idx)}
    return places, None, {i: slice_title(ds, i) for i in idx}
