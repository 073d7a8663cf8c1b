"""GeoTIFF export: one (Cloud-Optimised) GeoTIFF per layer and slice, WGS84."""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError
from timeslice.grid import grid_edges
from timeslice.report._layers import flag_pairs, slice_labels
from timeslice.report._output import file_stem, output_path

__all__ = ["check_regular", "export", "export_file", "north_up_transform"]

_DEFAULT_VARIABLES = (
    "suitability", "suitable", "mess", "most_dissimilar", "nt1", "nt2", "change",
    "stability", "refugium", "calibration_area", "elevation",
)


def check_regular(coord: np.ndarray, name: str) -> None:
    """Refuse an axis that is not ascending with equal steps.

    An affine transform places every cell only on an ascending axis of equal steps: a grid
    split at 180° (wrapped to [-180, 180)) would put the cells past the jump in the wrong
    place, so it is refused rather than written misplaced.

    Parameters
    ----------
    coord : numpy.ndarray
        Coordinate values (degrees).
    name : str
        Name of the axis for the message.

    Returns
    -------
    None
        Raises :class:`timeslice.errors.DataError` naming the first irregular step.
    """
    c = np.asarray(coord, dtype=float)
    if c.size < 2:
        return
    steps = np.diff(c)
    if np.any(steps <= 0) or not np.allclose(steps, steps[0], rtol=1e-6, atol=1e-9):
        i = int(np.argmax(np.abs(steps - steps[0])))
        raise DataError(
            f"geotiff.export: `{name}` is not ascending with equal steps ({c[i]:g} -> "
            f"{c[i + 1]:g}); put the grid on a continuous axis first "
            "(timeslice.grid.continuous_lon for a region across 180°)"
        )


def _driver() -> str:
    import rasterio

    with rasterio.Env() as env:
        return "COG" if "COG" in env.drivers() else "GTiff"


def _write_one(array: np.ndarray, path: Path, *, transform, nodata, description: str,
               tags: dict[str, str], driver: str) -> None:
    import rasterio

    height, width = array.shape
    profile = {
        "driver": driver, "height": height, "width": width, "count": 1,
        "dtype": array.dtype.name, "crs": "EPSG:4326", "transform": transform,
        "nodata": nodata,
    }
    if driver == "COG":
        profile.update(compress="DEFLATE", blocksize=256, overview_resampling="nearest")
    else:
        profile.update(compress="deflate", tiled=width >= 256 and height >= 256)
    with output_path(path) as tmp:
        # GDAL picks the format from the driver, not the temporary file's suffix.
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(array, 1)
            dst.set_band_description(1, description)
            dst.update_tags(**tags)
            dst.update_tags(1, **tags)


def export(
    ds: xr.Dataset,
    out_dir: str | os.PathLike,
    *,
    variables: Sequence[str] | None = None,
) -> list[Path]:
    """Write one single-band GeoTIFF per layer and slice.

    Parameters
    ----------
    ds : xarray.Dataset
        Stacked series (``(slice, lat, lon)`` and ``(lat, lon)`` layers).
    out_dir : path-like
        Folder for the files ``<variable>_<slice>.tif`` (``<variable>.tif`` for layers
        without a slice dimension).
    variables : sequence of str, optional
        Layers to export; default every known output layer present in `ds`.

    Returns
    -------
    list of pathlib.Path
        The files written, in order.

    Notes
    -----
    Rows run north to south (GDAL's convention), so the data are flipped from the ascending
    latitude of the series. Float layers use NaN as nodata; integer flag layers use -1
    ("not land"), booleans become uint8 with nodata 255. The CRS is EPSG:4326 (WGS 84); the
    affine transform comes from the cell bounds of the continuous longitude axis, so a region
    across the 180° meridian is one raster whose eastern columns lie past 180° (e.g.
    160 ... 200; GDAL reads x > 180 in EPSG:4326 as the same meridians, x - 360). The "COG"
    driver (GDAL >= 3.1) is used when available, else tiled GeoTIFF. Each layer's units and
    flags are checked against the layer table (:func:`timeslice.layers.check`) first.
    """
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"geotiff.export: `ds` must be an xarray.Dataset, got {type(ds).__name__}")
    names = _layer_names(ds, variables)
    layers.check(ds[names], where="geotiff.export", keys=layers.WRITER_KEYS)
    transform = north_up_transform(ds)
    driver = _driver()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []
    for name in names:
        written += _export_layer(ds, str(name), out, transform=transform, driver=driver)
    return written


def _layer_names(ds: xr.Dataset, variables: Sequence[str] | None) -> list[str]:
    """The layers to write: `variables` (each must be in `ds`), else every layer on the grid,
    the usual ones first."""
    if variables is None:
        # every layer on the grid: per-slice layers, window and all-slice refugia and
        # stability, reachable layers, land, ice, exposed shelf, ensemble layers
        first = [v for v in _DEFAULT_VARIABLES if v in ds.data_vars]
        rest = sorted(str(v) for v in ds.data_vars
                      if str(v) not in first and {"lat", "lon"} <= set(ds[v].dims)
                      and len(ds[v].dims) <= 4 and not str(v).endswith(("_bnds", "_bounds")))
        return first + rest
    names = list(variables)
    missing = [v for v in names if v not in ds.data_vars]
    if missing:
        raise DataError(
            f"geotiff.export: variables {missing} are not in the dataset; "
            f"choose from {sorted(map(str, ds.data_vars))}"
        )
    return names


def north_up_transform(ds: xr.Dataset | xr.DataArray):
    """Affine transform of the grid with rows running north to south (GDAL's convention).

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        On ascending, equally spaced ``lat`` and continuous ``lon``.

    Returns
    -------
    affine.Affine
        Origin at the north-west corner of the grid, cell size from the cell bounds.
    """
    from affine import Affine

    check_regular(ds["lon"].values, "lon")
    check_regular(ds["lat"].values, "lat")
    lat_b, lon_b = grid_edges(ds)
    dx = float(np.median(np.diff(lon_b, axis=1)))
    dy = float(np.median(np.diff(lat_b, axis=1)))
    # North-up: origin at the north-west corner, rows stepping south.
    return Affine(dx, 0.0, float(lon_b[0, 0]), 0.0, -dy, float(lat_b[-1, 1]))


def _storage(kind: np.dtype) -> tuple[str, float | int | None]:
    """(GeoTIFF data type, nodata) of a layer of dtype `kind`."""
    if kind == bool:
        return "uint8", 255
    if kind.kind in "iu":
        return kind.name, (-1 if kind.kind == "i" else None)
    return "float32", float("nan")


def _tags(ds: xr.Dataset, name: str) -> tuple[str, dict[str, str]]:
    """(band description, metadata tags) of a layer: its own attributes (checked against the
    layer table), else the table's words."""
    da = ds[name]
    entry = layers.LAYERS.get(name)
    table = entry.attrs() if entry is not None else {}
    desc = str(da.attrs.get("long_name", table.get("long_name", name)))
    tags = {"units": str(da.attrs.get("units", table.get("units", "1"))), "long_name": desc}
    if da.attrs.get("description", table.get("description")):
        tags["description"] = str(da.attrs.get("description", table.get("description")))
    for key in ("reference_slice", "slices"):  # what a change or window layer is against
        if da.attrs.get(key):
            tags[key] = str(da.attrs[key])
    pairs = flag_pairs(da)
    if pairs:
        tags["flag_values"] = " ".join(str(v) for v, _ in pairs)
        tags["flag_meanings"] = " ".join(m for _, m in pairs)
    return desc, tags


def _export_layer(ds: xr.Dataset, name: str, out: Path, *, transform,
                  driver: str) -> list[Path]:
    """The files of one layer: one per slice (and per value of a second extra dimension)."""
    import itertools

    da = ds[name]
    extra = [d for d in da.dims if d not in ("lat", "lon")]
    if set(da.dims) - set(extra) != {"lat", "lon"} or len(extra) > 2:
        raise DataError(
            f"geotiff.export: layer {name!r} has dims {da.dims}; expected (lat, lon) "
            "with at most two more dimensions such as slice (or period and source)"
        )
    da = da.transpose(*extra, "lat", "lon")
    out_dtype, nodata = _storage(da.dtype)
    desc, tags = _tags(ds, name)
    if not extra:
        path = out / f"{file_stem(name)}.tif"
        band = np.asarray(da.values).astype(out_dtype)
        _write_one(band[::-1].copy(), path, transform=transform, nodata=nodata,
                   description=desc, tags=tags, driver=driver)
        return [path]

    def labels_of(dim):
        return [str(v) for v in (slice_labels(ds) if dim == "slice" else
                ds[dim].values if dim in ds.coords else np.arange(da.sizes[dim]))]

    written = []
    axes = [list(enumerate(labels_of(d))) for d in extra]
    for combo in itertools.product(*axes):
        label = " ".join(lab for _, lab in combo)
        path = out / ("_".join([file_stem(name), *(file_stem(lab) for _, lab in combo)]) + ".tif")
        t = dict(tags, slice=label)
        for dim, (i, lab) in zip(extra, combo):
            if dim != "slice":
                t[dim] = lab  # e.g. the group, or the variance share's source
            for key in ("year", "period", "model", "scenario"):
                if key in ds.coords and ds[key].dims == (dim,):
                    t[key] = str(ds[key].values[i])
        # one slice in memory at a time (lazy layers are computed slice by slice)
        band = np.asarray(da.isel({d: i for d, (i, _) in zip(extra, combo)})
                          .values).astype(out_dtype)
        _write_one(band[::-1].copy(), path, transform=transform, nodata=nodata,
                   description=f"{desc} ({label})", tags=t, driver=driver)
        written.append(path)
    return written


def export_file(
    series_path: str | os.PathLike,
    out_dir: str | os.PathLike | None = None,
    *,
    variables: Sequence[str] | None = None,
) -> list[Path]:
    """Export the layers of a written ``series.nc`` (or ``ensemble.nc``) as GeoTIFFs.

    Parameters
    ----------
    series_path : path-like
        A NetCDF file from :func:`timeslice.report.netcdf.write_series`, or a run folder
        holding ``series.nc``.
    out_dir : path-like, optional
        Target folder; default ``geotiff/`` beside the NetCDF file.
    variables : sequence of str, optional
        Layers to export (default: every known layer present).

    Returns
    -------
    list of pathlib.Path
        The files written, in order.
    """
    from timeslice.report.netcdf import open_series

    src = Path(series_path)
    if src.is_dir():
        src = src / "series.nc"
    target = Path(out_dir) if out_dir is not None else src.parent / "geotiff"
    ds = open_series(src, chunks={})
    try:
        return export(ds, target, variables=variables)
    finally:
        ds.close()
