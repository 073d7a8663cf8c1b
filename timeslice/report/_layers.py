"""Shared descriptions of the output layers: units, names, CF flags and slice labels.

One table so that the NetCDF writer, the GeoTIFF exporter, the maps and the HTML report
describe every layer in the same words.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr

#: CF attributes of the known layers. ``flags`` gives (values, meanings) for categorical
#: layers; ``bool_flags`` gives the meanings of 0 and 1 for boolean masks.
LAYERS: dict[str, dict[str, Any]] = {
    "suitability": {
        "units": "1",
        "long_name": "climatic suitability",
        "description": "relative suitability of the cell's climate for the species, 0..1, "
        "from the niche model fitted on the baseline climate",
    },
    "suitable": {
        "units": "1",
        "long_name": "climatically suitable (suitability at or above the threshold)",
        "flags": ([-1, 0, 1], "not_land unsuitable suitable"),
        "description": "suitability >= threshold on land; -1 marks cells that are not land "
        "in the slice",
    },
    "mess": {
        "units": "1",
        "long_name": "multivariate environmental similarity surface",
        "description": "MESS (Elith, Kearney & Phillips 2010): negative values mean at least "
        "one variable lies outside the reference range (novel climate)",
    },
    "most_dissimilar": {
        "units": "1",
        "long_name": "most dissimilar variable",
        "description": "variable with the lowest univariate similarity in MESS",
    },
    "nt1": {
        "units": "1",
        "long_name": "ExDet univariate extrapolation (NT1)",
        "description": "NT1 (Mesgaran, Cousens & Webber 2014): 0 inside every univariate "
        "reference range, negative outside",
    },
    "nt2": {
        "units": "1",
        "long_name": "ExDet combination novelty (NT2)",
        "description": "NT2 (Mesgaran, Cousens & Webber 2014): squared Mahalanobis distance "
        "over its largest reference value; > 1 is a novel combination",
    },
    "change": {
        "units": "1",
        "long_name": "range change against the reference slice",
        "flags": ([-1, 0, 1, 2, 3], "not_land absent gain loss stable"),
        "description": "0 unsuitable in both, 1 gained, 2 lost, 3 suitable in both the "
        "slice and the reference slice; -1 not land",
    },
    "land": {
        "units": "1",
        "standard_name": "land_binary_mask",
        "long_name": "land in the slice",
        "bool_flags": "sea_or_ice land",
        "description": "1 where the cell is land in the slice (elevation above the slice's sea "
        "level and not under an ice sheet)",
    },
    "ice": {
        "units": "1",
        "long_name": "ice sheet in the slice",
        "bool_flags": "no_ice ice",
        "description": "1 where an ice sheet covers the cell in the slice (not land for the niche)",
    },
    "exposed_shelf": {
        "units": "1",
        "long_name": "exposed continental shelf",
        "bool_flags": "not_exposed exposed",
        "description": "land in the slice that lies below present sea level",
    },
    "reachable": {
        "units": "1",
        "long_name": "suitable and reachable",
        "flags": ([-1, 0, 1], "not_land not_reached reached"),
    },
    "clamp_effect": {
        "units": "1",
        "long_name": "effect of clamping on suitability",
    },
    "elevation": {
        "units": "m",
        "standard_name": "surface_altitude",
        "long_name": "present-day surface elevation",
        "cell_methods": "area: mean",
        "description": "elevation relative to present mean sea level; negative below it",
    },
    "calibration_area": {
        "units": "1",
        "long_name": "calibration area of the niche model",
        "bool_flags": "outside inside",
        "description": "cells the background sample and the novelty reference were drawn from",
    },
    "stability": {
        "units": "1",
        "long_name": "fraction of slices suitable",
        "description": "share of the slices in which the cell is suitable (0..1)",
    },
    "refugium": {
        "units": "1",
        "long_name": "climatic refugium (suitable in every slice)",
        "bool_flags": "not_refugium refugium",
        "description": "1 where the cell is land and suitable in every slice of the series "
        "(a hypothesis of climatic stability, not of occupancy)",
    },
    "stability_all_slices": {
        "units": "1",
        "long_name": "fraction of all slices suitable (past and future together)",
        "description": "share of every slice of the series, past and future, in which the cell "
        "is suitable (0..1)",
    },
    "refugium_all_slices": {
        "units": "1",
        "long_name": "climatic refugium over all slices (past and future together)",
        "bool_flags": "not_refugium refugium",
        "description": "1 where the cell is land and suitable in every slice of the series, "
        "past and future together (a hypothesis of climatic stability, not of occupancy)",
    },
    "refugium_all_slices_analog": {
        "units": "1",
        "long_name": "climatic refugium over all slices, in analog climate",
        "bool_flags": "not_refugium refugium",
        "description": "as refugium_all_slices, and in analog climate in every slice",
    },
    "stability_window": {
        "units": "1",
        "long_name": "fraction of the refugium window's slices suitable",
        "description": "share of the slices of the refugium window in which the cell is "
        "suitable (0..1)",
    },
    "refugium_window": {
        "units": "1",
        "long_name": "climatic refugium over the refugium window",
        "bool_flags": "not_refugium refugium",
        "description": "1 where the cell is land and suitable in every slice of the refugium "
        "window, in every model (a hypothesis of climatic stability, not of occupancy)",
    },
    "refugium_window_analog": {
        "units": "1",
        "long_name": "climatic refugium over the refugium window, in analog climate",
        "bool_flags": "not_refugium refugium",
        "description": "as refugium_window, and in analog climate in every slice of the window",
    },
    "refugium_patch": {
        "units": "1",
        "long_name": "connected patch of the refugium",
        "description": "8-connected patches of the report's refugium layer numbered by "
        "decreasing area (1 the largest, named R1); 0 outside; see tables/refugium_patches.csv",
    },
    "static_stability": {
        "units": "1",
        "long_name": "static stability (sum of log suitability)",
    },
    "cell_area": {
        "units": "km2",
        "standard_name": "cell_area",
        "long_name": "grid cell area",
        "description": "area on the authalic sphere, R = 6371.0072 km",
    },
}

SLICE_COORDS = ("year", "period", "model", "scenario")

#: Layers whose -1 means "not land" (or "no prediction") by the stage contracts.
NOT_LAND_FLAG = {"suitable": "not_land", "change": "not_land", "reachable": "not_land",
                 "most_dissimilar": "no_data"}

#: Attributes a mask may inherit from the field it was derived from that would mislabel it.
INHERITED_NOISE = ("standard_name", "positive", "source_units", "source_variable",
                   "regrid_method", "valid_min", "valid_max", "valid_range", "axis")


def layer_spec(name: str) -> dict[str, Any]:
    """Table entry of a layer; ``stability_<chain>`` / ``refugium_<chain>`` use the base entry."""
    key = str(name)
    if key in LAYERS:
        return LAYERS[key]
    # the longest table name that `key` extends (refugium_window_alder -> refugium_window)
    bases = sorted((b for b in LAYERS if key.startswith(b + "_")), key=len, reverse=True)
    if bases and bases[0].split("_")[0] in ("stability", "refugium", "static", "reachable"):
        return LAYERS[bases[0]]
    return {}


def slice_labels(ds: xr.Dataset) -> list[str]:
    """Text labels of the slices: the ``slice`` coordinate, else ``slice_label`` (a file
    opened without :func:`timeslice.report.netcdf.open_series`), else ``slice 0``, ``slice 1``."""
    if "slice" not in ds.dims:
        return []
    for name in ("slice", "slice_label"):
        if name in ds.coords and ds[name].dims == ("slice",):
            return [str(v) for v in ds[name].values]
    return [f"slice {i}" for i in range(ds.sizes["slice"])]


def slice_title(ds: xr.Dataset, i: int) -> str:
    """Human title of slice `i`: "label (model, scenario, period)"."""
    labels = slice_labels(ds)
    label = labels[i] if labels else ""
    parts = []
    for key in ("model", "scenario", "period"):
        if key in ds.coords and "slice" in ds[key].dims:
            parts.append(str(ds[key].values[i]))
    return f"{label} ({', '.join(parts)})" if parts else label


def flag_pairs(da: xr.DataArray) -> list[tuple[int, str]]:
    """(value, meaning) pairs of a categorical layer from its attrs or the table above."""
    attrs = da.attrs
    values = attrs.get("flag_values")
    meanings = attrs.get("flag_meanings")
    if values is None or meanings is None:
        spec = layer_spec(str(da.name))
        if "flags" in spec:
            values, meanings = spec["flags"]
        elif "bool_flags" in spec:
            values, meanings = [0, 1], spec["bool_flags"]
        else:
            return []
    values = np.atleast_1d(np.asarray(values)).tolist()
    return list(zip((int(v) for v in values), str(meanings).split()))
