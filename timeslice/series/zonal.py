"""Zonal summaries against the user's polygons (protected areas, regions, ecoregions).

Polygons are rasterised exactly on the grid: each cell counts with the fraction of it that the
polygon covers (not by its centre point), and every area is a sum of those fractions times the
cell areas on the authalic sphere.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError, InputFileError

__all__ = ["cell_fractions", "read_zones", "zonal_table"]

_LONLAT_CRS = {"EPSG:4326", "urn:ogc:def:crs:OGC:1.3:CRS84", "urn:ogc:def:crs:EPSG::4326",
               "OGC:CRS84", "CRS84"}


def read_zones(path: str | os.PathLike, *, name_field: str | None = None) -> list[tuple[str, object]]:
    """Read polygons from a GeoJSON file as ``[(name, shapely geometry), ...]``.

    Parameters
    ----------
    path : path-like
        A GeoJSON FeatureCollection (RFC 7946: longitude/latitude on WGS 84) of Polygon and
        MultiPolygon features. GeoPackage and shapefiles: convert to GeoJSON first (e.g.
        ``ogr2ogr -f GeoJSON -t_srs EPSG:4326 zones.geojson zones.gpkg``).
    name_field : str, optional
        Feature property holding the zone name; default ``name``, else the feature number.

    Returns
    -------
    list of (str, shapely geometry)
        Zone name and polygon, in file order.
    """
    import shapely.geometry

    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{p}: zones file not found; check series.zones")
    if p.suffix.lower() in (".gpkg", ".shp", ".kml", ".gml", ".fgb"):
        return _read_with_gdal(p, name_field=name_field)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as err:
        raise InputFileError(f"{p}: not a GeoJSON file ({type(err).__name__}); give a "
                             "FeatureCollection of polygons") from err
    crs = (((data.get("crs") or {}).get("properties") or {}).get("name")) if isinstance(data, dict) else None
    if crs is not None and str(crs) not in _LONLAT_CRS:
        raise DataError(f"{p}: the polygons are in {crs!r}; give them in longitude/latitude "
                        "(EPSG:4326), e.g. with ogr2ogr -t_srs EPSG:4326")
    feats = data.get("features") if isinstance(data, dict) else None
    if not feats:
        raise DataError(f"{p}: no features; give a GeoJSON FeatureCollection of polygons")
    out = []
    for i, f in enumerate(feats):
        geom = shapely.geometry.shape(f.get("geometry") or {})
        if geom.geom_type not in ("Polygon", "MultiPolygon") or geom.is_empty:
            raise DataError(f"{p}: feature {i + 1} is a {geom.geom_type}, not a polygon")
        if not geom.is_valid:
            geom = geom.buffer(0)
        props = f.get("properties") or {}
        key = name_field or ("name" if "name" in props else None)
        if name_field and name_field not in props:
            raise DataError(f"{p}: feature {i + 1} has no property {name_field!r} "
                            f"(has {sorted(props)[:10]})")
        out.append((str(props.get(key)) if key else str(i + 1), geom))
    names = [n for n, _ in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise DataError(f"{p}: zone names repeat ({dup[:5]}); give series.zones_name_field "
                        "with a unique property")
    return out


def _read_with_gdal(p: Path, *, name_field: str | None) -> list[tuple[str, object]]:
    """GeoPackage, shapefile and other GDAL vector formats through pyogrio (optional)."""
    try:
        import pyogrio
    except ImportError as err:
        raise InputFileError(
            f"{p}: reading {p.suffix} zones needs the optional package pyogrio (pip install "
            f"pyogrio), or convert the file to GeoJSON: `ogr2ogr -f GeoJSON -t_srs EPSG:4326 "
            f"{p.stem}.geojson {p.name}`") from err
    import shapely

    try:
        meta = pyogrio.read_info(p)
        arrays = pyogrio.raw.read(p)
    except Exception as err:  # GDAL's own error types
        raise InputFileError(f"{p}: cannot be read as a vector file ({type(err).__name__}); "
                             "give a GeoPackage, shapefile or GeoJSON of polygons") from err
    crs = str(meta.get("crs") or "")
    if crs and crs.upper() not in {c.upper() for c in _LONLAT_CRS}:
        raise DataError(f"{p}: the polygons are in {crs!r}; give them in longitude/latitude "
                        f"(EPSG:4326), e.g. `ogr2ogr -t_srs EPSG:4326 out.gpkg {p.name}`")
    _meta, _fids, geometry, fields = arrays
    names = list(_meta.get("fields", []))
    geoms = shapely.from_wkb(geometry)
    key = name_field or ("name" if "name" in names else None)
    if name_field and name_field not in names:
        raise DataError(f"{p}: no field {name_field!r} (has {names[:10]})")
    labels = ([str(v) for v in fields[names.index(key)]] if key
              else [str(i + 1) for i in range(len(geoms))])
    out = []
    for i, (label, g) in enumerate(zip(labels, geoms)):
        if g is None or g.geom_type not in ("Polygon", "MultiPolygon"):
            raise DataError(f"{p}: feature {i + 1} is not a polygon")
        out.append((label, g if g.is_valid else g.buffer(0)))
    if len({n for n, _ in out}) != len(out):
        raise DataError(f"{p}: zone names repeat; give series.zones_name_field with a unique field")
    return out


def cell_fractions(geom, grid: xr.Dataset | xr.DataArray) -> xr.DataArray:
    """Fraction (0..1) of every grid cell covered by `geom` (lon/lat degrees).

    The fraction is taken in the cell's longitude-latitude plane, so inside one cell the
    latitude change of the area scale is neglected (relative error of the order of the cell
    height in radians times tan(latitude)). A grid running past 180° (e.g. 160..200) meets
    polygons given in [-180, 180) through copies shifted by ±360°.

    Parameters
    ----------
    geom : shapely geometry
        A polygon in longitude/latitude degrees.
    grid : xarray.Dataset or xarray.DataArray
        The grid (``lat``, ``lon``).

    Returns
    -------
    xarray.DataArray, [1]
        Covered fraction of every (lat, lon) cell.
    """
    import shapely
    from shapely import affinity

    from timeslice.grid import grid_edges

    lat_b, lon_b = grid_edges(grid)
    ny, nx = lat_b.shape[0], lon_b.shape[0]
    out = np.zeros((ny, nx))
    shapes = [geom, affinity.translate(geom, xoff=360.0), affinity.translate(geom, xoff=-360.0)]
    for g in shapes:
        minx, miny, maxx, maxy = g.bounds
        rows = np.flatnonzero((lat_b[:, 1] > miny) & (lat_b[:, 0] < maxy))
        cols = np.flatnonzero((lon_b[:, 1] > minx) & (lon_b[:, 0] < maxx))
        if not rows.size or not cols.size:
            continue
        r2, c2 = np.meshgrid(rows, cols, indexing="ij")
        boxes = shapely.box(lon_b[c2, 0], lat_b[r2, 0], lon_b[c2, 1], lat_b[r2, 1])
        inter = shapely.area(shapely.intersection(boxes, g))
        full = shapely.area(boxes)
        out[r2, c2] += np.where(full > 0, inter / full, 0.0)
    return xr.DataArray(np.clip(out, 0.0, 1.0), dims=("lat", "lon"),
                        coords={"lat": grid["lat"], "lon": grid["lon"]}, name="zone_fraction")


def zonal_table(series: xr.Dataset, zones: list[tuple[str, object]]) -> pd.DataFrame:
    """Per zone and slice: zone area, land, suitable area, gain, loss, refugium and novel shares.

    Parameters
    ----------
    series : xarray.Dataset
        A summarised series (``suitable``, ``change``, ``land`` per slice; a refugium layer;
        ``mess``/``nt1``/``nt2`` for novelty).
    zones : list of (name, geometry)
        From :func:`read_zones`.

    Returns
    -------
    pandas.DataFrame
        ``zone, slice, zone_km2, land_km2, suitable_km2, gain_km2, loss_km2, refugium_km2,
        refugium_share, novel_land_share``; areas are sums of covered fractions times cell
        areas on the authalic sphere.
    """
    from timeslice.grid import cell_area
    from timeslice.series.change import novel_mask

    area = cell_area(series).values
    labels = [str(s) for s in series["slice"].values]
    refuge = next((v for v in ("refugium_window", "refugium_all_slices") if v in series), None)
    has_novelty = any(v in series for v in ("mess", "nt1", "nt2"))
    novel = novel_mask(series).transpose("slice", "lat", "lon").values if has_novelty else None
    suitable = series["suitable"].transpose("slice", "lat", "lon").values
    change = (series["change"].transpose("slice", "lat", "lon").values
              if "change" in series else None)
    land = (series["land"].transpose("slice", "lat", "lon").values.astype(bool)
            if "land" in series and "slice" in series["land"].dims else suitable >= 0)
    ref = (np.asarray(series[refuge].transpose("lat", "lon").values).astype(bool)
           if refuge else None)
    rows = []
    for name, geom in zones:
        w = cell_fractions(geom, series).values * area
        zone_km2 = float(w.sum())
        ref_km2 = float((w * ref).sum()) if ref is not None else np.nan
        for t, label in enumerate(labels):
            lnd = float((w * land[t]).sum())
            rows.append({
                "zone": name, "slice": label, "zone_km2": zone_km2, "land_km2": lnd,
                "suitable_km2": float((w * (suitable[t] == 1)).sum()),
                "gain_km2": float((w * (change[t] == 1)).sum()) if change is not None else np.nan,
                "loss_km2": float((w * (change[t] == 2)).sum()) if change is not None else np.nan,
                "refugium_km2": ref_km2,
                "refugium_share": ref_km2 / zone_km2 if zone_km2 > 0 else np.nan,
                "novel_land_share": (float((w * (land[t] & novel[t])).sum()) / lnd
                                     if novel is not None and lnd > 0 else np.nan),
            })
    if not any(r["zone_km2"] > 0 for r in rows):
        raise DataError("zones: no zone overlaps the grid; check that the polygons are in "
                        "longitude/latitude and lie in the study region")
    out = pd.DataFrame(rows)
    out.attrs["refugium_layer"] = refuge
    return out
