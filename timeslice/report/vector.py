"""Vector outlines of raster layers: refugium patches and the suitable area of every slice.

Cells are turned into polygons with :func:`rasterio.features.shapes` (GDAL's polygonize: every
polygon edge runs along cell edges, so the polygons cover exactly the cells) and merged with
shapely. Files are GeoJSON (RFC 7946: WGS 84 longitude/latitude, longitudes in
[-180, 180]); a polygon on a grid that runs past 180° (lon 160 ... 200) is cut at the
antimeridian and its eastern part moved by -360°, as RFC 7946 section 3.1.9 asks. GeoJSON is
plain JSON, so no vector driver is needed to write it, and any GIS reads it.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.report._layers import slice_labels
from timeslice.report._output import output_path

__all__ = ["mask_geometry", "patch_features", "suitable_features", "write_geojson",
           "write_vectors"]

#: Decimal places of the coordinates written (1e-7° is about 1 cm).
_DIGITS = 7


def _antimeridian(geom):
    """Cut a geometry on a continuous longitude axis at ±180° and bring every part into
    [-180, 180] (RFC 7946 section 3.1.9)."""
    from shapely import affinity, box, unary_union

    minx, _, maxx, _ = geom.bounds
    if minx >= -180.0 and maxx <= 180.0:
        return geom
    parts = []
    for shift in (-360.0, 0.0, 360.0):
        window = box(-180.0 - shift, -90.0, 180.0 - shift, 90.0)
        piece = geom.intersection(window)
        if not piece.is_empty:
            parts.append(affinity.translate(piece, xoff=shift))
    return unary_union(parts)


def _geometries(values: np.ndarray, da: xr.DataArray) -> dict[int, object]:
    """Every positive value of an integer (lat, lon) array as one merged geometry, from one
    polygonize pass over the grid (not one per value)."""
    from rasterio import features
    from shapely import unary_union
    from shapely.geometry import shape

    from timeslice.report.geotiff import north_up_transform

    # north-up rows: the array is flipped from ascending latitude before polygonizing
    data = np.ascontiguousarray(values[::-1]).astype(np.int32)
    parts: dict[int, list] = {}
    for g, v in features.shapes(data, mask=data > 0, connectivity=4,
                                transform=north_up_transform(da)):
        parts.setdefault(int(v), []).append(shape(g))
    return {v: _antimeridian(unary_union(ps)) for v, ps in parts.items()}


def mask_geometry(mask: xr.DataArray):
    """The cells of a boolean (lat, lon) mask as one shapely (Multi)Polygon in degrees.

    Parameters
    ----------
    mask : xarray.DataArray
        Boolean (or 0/1) on a regular ascending ``(lat, lon)`` grid.

    Returns
    -------
    shapely.geometry.base.BaseGeometry
        A Polygon or MultiPolygon (empty when the mask is empty); holes where the mask has
        them.
    """
    from shapely.geometry import Polygon

    m = mask.transpose("lat", "lon")
    arr = np.asarray(m.values)
    b = arr.astype(bool) if arr.dtype == bool else (np.nan_to_num(arr.astype(float)) > 0.5)
    return _geometries(b.astype(np.int32), m).get(1, Polygon())


def _plain(value: Any) -> Any:
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if np.isfinite(v) else None
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def _feature(geom, properties: dict[str, Any]) -> dict[str, Any]:
    from shapely import set_precision
    from shapely.geometry import mapping

    if not geom.is_empty:
        geom = set_precision(geom, 10.0 ** -_DIGITS)
    return {"type": "Feature", "properties": {k: _plain(v) for k, v in properties.items()},
            "geometry": mapping(geom) if not geom.is_empty else None}


def patch_features(labels: xr.DataArray, table: pd.DataFrame) -> list[dict[str, Any]]:
    """GeoJSON features of the refugium patches: one (Multi)Polygon per patch, largest first,
    with the row of :func:`timeslice.series.patches.patch_table` as its properties.

    Parameters
    ----------
    labels : xarray.DataArray
        Patch labels per cell (0 outside every patch).
    table : pandas.DataFrame
        One row per patch (:func:`timeslice.series.patches.patch_table`).
    """
    from shapely.geometry import Polygon

    lab = labels.transpose("lat", "lon")
    geoms = _geometries(np.asarray(lab.values), lab)
    return [_feature(geoms.get(int(rec["patch"]), Polygon()), rec)
            for rec in table.to_dict(orient="records")]


def suitable_features(series: xr.Dataset, *, variable: str = "suitable") -> list[dict[str, Any]]:
    """GeoJSON features of the suitable area of every slice (``variable`` == 1), with the
    slice's label, year, period, model, scenario and its raster area [km2].

    Parameters
    ----------
    series : xarray.Dataset
        The series.
    variable : str
        The 0/1 layer outlined.
    """
    if variable not in series.data_vars or "slice" not in series[variable].dims:
        raise DataError(f"vector export: the series has no per-slice layer {variable!r}")
    area = cell_area(series).values
    labels = slice_labels(series)
    feats = []
    for i, label in enumerate(labels):
        layer = series[variable].isel(slice=i)
        on = np.asarray(layer.transpose("lat", "lon").values) == 1
        props: dict[str, Any] = {"slice": label}
        for key in ("year", "period", "model", "scenario"):
            if key in series.coords and series[key].dims == ("slice",):
                props[key] = series[key].values[i].item()
        props["area_km2"] = float(area[on].sum())
        feats.append(_feature(mask_geometry(layer == 1), props))
    return feats


def write_geojson(features: Sequence[dict[str, Any]], path: str | os.PathLike, *,
                  description: str = "") -> Path:
    """Write a GeoJSON FeatureCollection (atomically).

    Parameters
    ----------
    features : sequence of dict
        GeoJSON features.
    path : str or os.PathLike
        The file to write.
    description : str
        Text stored in the collection's ``description``.
    """
    doc: dict[str, Any] = {"type": "FeatureCollection", "features": list(features)}
    if description:
        doc["description"] = description
    target = Path(path)
    with output_path(target) as tmp:
        tmp.write_text(json.dumps(doc, allow_nan=False), encoding="utf-8")
    return target


def write_vectors(series: xr.Dataset, out_dir: str | os.PathLike, *,
                  patches: tuple[xr.DataArray, pd.DataFrame] | None = None) -> list[Path]:
    """Write ``suitable.geojson`` (one feature per slice) and, with `patches`,
    ``refugium_patches.geojson`` (one feature per patch) into `out_dir`.

    Parameters
    ----------
    series : xarray.Dataset
        Summarised series with ``suitable``.
    out_dir : path-like
        Target folder (created).
    patches : (labels, table), optional
        From :func:`timeslice.series.patches.refugium_patches`.

    Returns
    -------
    list of pathlib.Path
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    caution = ("climatic suitability only: a hypothesis, not a forecast of occurrence; "
               "biotic interactions and dispersal limits are outside the climate niche")
    written = [write_geojson(suitable_features(series), out / "suitable.geojson",
                             description=f"suitable area per slice; {caution}")]
    if patches is not None:
        labels, table = patches
        written.append(write_geojson(
            patch_features(labels, table), out / "refugium_patches.geojson",
            description=f"connected refugium patches (8-connectivity), largest first; "
                        f"{caution}"))
    return written
