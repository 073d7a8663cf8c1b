"""Report helpers on top of the layer table: slice labels and titles, flags, colour maps.

The layer attributes themselves live in :mod:`timeslice.layers` (one table for every stage
and writer); this module keeps what only the report needs.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping

import numpy as np
import xarray as xr

from timeslice import layers

__all__ = ["COLOUR_MAPS", "SLICE_COORDS", "flag_pairs", "slice_labels", "slice_title"]

SLICE_COORDS = ("year", "period", "model", "scenario")


class _ColourMaps(Mapping):
    """Live view of the table's colour maps: layer name -> (colour map, colour-bar label).

    Only layers whose own entry names a colour map are in it (a per-chain layer such as
    ``stability_glacial_only`` is not: its maps use the default colour map).
    """

    def __getitem__(self, name: str) -> tuple[str, str]:
        entry = layers.LAYERS.get(str(name))
        if entry is None or entry.cmap is None:
            raise KeyError(name)
        return entry.cmap, entry.colorbar_label or entry.long_name

    def __iter__(self) -> Iterator[str]:
        return (n for n, e in layers.LAYERS.items() if e.cmap is not None)

    def __len__(self) -> int:
        return sum(1 for _ in self)


#: (colour map, colour-bar label) of the continuous layers, read from the layer table.
COLOUR_MAPS: Mapping[str, tuple[str, str]] = _ColourMaps()


def slice_labels(ds: xr.Dataset) -> list[str]:
    """Text labels of the slices.

    Parameters
    ----------
    ds : xarray.Dataset
        A series; the ``slice`` coordinate, else ``slice_label`` (a file opened without
        :func:`timeslice.report.netcdf.open_series`) names the slices.

    Returns
    -------
    list of str
        One label per slice (``slice 0``, ``slice 1`` ... without either coordinate); empty
        without a ``slice`` dimension.
    """
    if "slice" not in ds.dims:
        return []
    for name in ("slice", "slice_label"):
        if name in ds.coords and ds[name].dims == ("slice",):
            return [str(v) for v in ds[name].values]
    return [f"slice {i}" for i in range(ds.sizes["slice"])]


def slice_title(ds: xr.Dataset, i: int) -> str:
    """Human title of slice `i`.

    Parameters
    ----------
    ds : xarray.Dataset
        A series.
    i : int
        Position of the slice.

    Returns
    -------
    str
        "label (model, scenario, period)".
    """
    labels = slice_labels(ds)
    label = labels[i] if labels else ""
    parts = []
    for key in ("model", "scenario", "period"):
        if key in ds.coords and "slice" in ds[key].dims:
            parts.append(str(ds[key].values[i]))
    return f"{label} ({', '.join(parts)})" if parts else label


def flag_pairs(da: xr.DataArray) -> list[tuple[int, str]]:
    """(value, meaning) pairs of a categorical layer from its attrs, else the layer table.

    Parameters
    ----------
    da : xarray.DataArray
        A layer.

    Returns
    -------
    list of (int, str)
        Empty for a continuous layer.
    """
    pairs = layers.flag_list(da.attrs)
    if pairs:
        return pairs
    entry = layers.spec(str(da.name))
    return entry.flags if entry is not None else []
