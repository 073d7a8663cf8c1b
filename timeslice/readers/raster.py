"""GeoTIFF and ESRI ASCII grids (through rioxarray/rasterio): the ``"raster"`` format of the
reader registry.

Bands become months or variables here (rasters carry no time axis, rarely units); the fields are
then named and converted by the shared canonicalisation (:mod:`timeslice.readers.canonical`).
"""

from __future__ import annotations

import json
import os
import re
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError, shorten
from timeslice.readers.canonical import MONTHLY, canonical_name, convert

__all__ = ["DEFAULT_UNITS", "header_grid", "open_raster", "open_raster_file"]

_MONTH_ABBR = ("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec")

#: Units assumed (with a log line) for a layer whose file does not say.
DEFAULT_UNITS = {"tasmin": "degC", "tasmax": "degC", "tas": "degC", "pr": "mm month-1",
                 "elevation": "m", "ice": "1"}


def _month_of(label: str) -> int | None:
    text = str(label).strip().lower()
    if re.fullmatch(r"(m|month_?)?0?([1-9]|1[0-2])", text):
        return int(re.sub(r"\D", "", text))
    for i, abbr in enumerate(_MONTH_ABBR):
        if text.startswith(abbr):
            return i + 1
    return None


def _month_file(stem: str, variable: str | None, aliases) -> tuple[str, int] | None:
    """(canonical monthly variable, month) for names like ``tmin_01``, ``prec-7``, ``tx12``."""
    m = re.fullmatch(r"(.*?)[_\-. ]?(0?[1-9]|1[0-2])", stem.lower())
    if not m:
        return None
    canon = variable or canonical_name(m.group(1), aliases)
    if canon not in MONTHLY:
        return None
    return canon, int(m.group(2))


def _read(p: Path) -> xr.DataArray:
    """The bands of one raster file (loaded when small)."""
    import rioxarray  # optional dependency, imported only when a raster is read

    if not p.is_file():
        raise InputFileError(f"{p}: file not found; check the path in the config")
    try:
        with warnings.catch_warnings():
            # affine's matmul deprecation notice, raised inside rioxarray, is not the user's concern
            warnings.simplefilter("ignore", PendingDeprecationWarning)
            da = rioxarray.open_rasterio(p, masked=True, mask_and_scale=True)
            da = da.load() if da.size <= 50_000_000 else da
    except Exception as err:  # rasterio raises its own error types
        raise InputFileError(
            f"{p}: cannot be read as a GeoTIFF or ESRI ASCII grid ({type(err).__name__}); "
            "give a valid raster file"
        ) from err
    if isinstance(da, list):
        raise InputFileError(f"{p}: holds several sub-datasets; give one raster per file")
    return da


def _geographic(da: xr.DataArray, p: Path, src: str, log: list[str]) -> xr.DataArray:
    """Refuse a projected CRS; rename x/y to lon/lat."""
    crs = da.rio.crs
    xs = da["x"].values
    ys = da["y"].values
    if crs is None:
        if xs.min() < -180.5 or xs.max() > 360.5 or ys.min() < -90.5 or ys.max() > 90.5:
            raise DataError(
                f"{src}: the raster has no CRS and its coordinates are not longitude/latitude; "
                "reproject it to a geographic CRS (EPSG:4326)"
            )
        log.append(f"{p.name}: no CRS in the file; taken as geographic lon/lat")
    elif not crs.is_geographic:
        raise DataError(
            f"{src}: the raster is on a projected CRS ({shorten(crs.to_string(), 60)}); reproject it to a "
            "geographic lon/lat CRS (EPSG:4326), e.g. with gdalwarp -t_srs EPSG:4326"
        )
    da = da.drop_vars([c for c in ("spatial_ref",) if c in da.coords])
    da = da.rename({"x": "lon", "y": "lat"})
    da["lon"].attrs.update(units="degrees_east", standard_name="longitude")
    da["lat"].attrs.update(units="degrees_north", standard_name="latitude")
    return da


def _named_bands(da, canon, band_names, src) -> dict[str, xr.DataArray]:
    """Bands named by `band_names`: twelve month labels, or one variable per band."""
    months = [_month_of(b) for b in band_names]
    if all(m is not None for m in months) and da.sizes["band"] == 12:
        if canon is None:
            raise DataError(f"{src}: monthly bands but no `variable`; say which variable it is")
        return {canon: da.assign_coords(band=months).rename(band="month").sortby("month")}
    return {str(name): da.isel(band=i, drop=True) for i, name in enumerate(band_names)}


def _month_layer(da, mcanon, month, src) -> dict[str, xr.DataArray]:
    """A one-band file of the month a ``{month}`` pattern names."""
    nb = da.sizes["band"]
    if nb != 1:
        raise DataError(
            f"{src}: a {{month}} pattern names month {month}, but the file has {nb} bands; give "
            "one single-band file per month or drop {month}"
        )
    if mcanon not in MONTHLY:
        raise DataError(
            f"{src}: a {{month}} pattern names month {month}, but the variable "
            f"{mcanon!r} is not monthly; give tasmin, tasmax, tas or pr files per month"
        )
    return {mcanon: da.assign_coords(band=[int(month)]).rename(band="month")}


def _layers(da: xr.DataArray, p: Path, src: str, *, variable, band_names, aliases,
            month) -> dict[str, xr.DataArray]:
    """Bands as named layers: months of one variable, variables, or one field."""
    nb = da.sizes["band"]
    canon = variable or canonical_name(p.stem, aliases)
    if band_names is not None and len(band_names) != nb:
        raise DataError(
            f"{src}: `band_names` has {len(band_names)} names but the file has {nb} bands; "
            "give one name per band"
        )
    if band_names is not None:
        return _named_bands(da, canon, band_names, src)
    if month is not None:
        return _month_layer(da, variable or canon, month, src)
    if nb == 1 and _month_file(p.stem, variable, aliases) is not None:
        # one file per month, e.g. tmin_01.tif ... tmin_12.tif: a one-month layer; the
        # reader stacks the twelve files
        mcanon, month = _month_file(p.stem, variable, aliases)
        return {mcanon: da.assign_coords(band=[month]).rename(band="month")}
    if nb == 1:
        if canon is None:
            raise DataError(
                f"{src}: cannot tell which variable the file holds from its name; give "
                "`variable` (e.g. 'tasmin', 'pr', 'elevation', 'bio1')"
            )
        return {canon: da.isel(band=0, drop=True)}
    if nb == 12 and canon in MONTHLY:
        return {canon: da.assign_coords(band=np.arange(1, 13)).rename(band="month")}
    if nb == 19 and (canon in (None, "bio") or str(canon).startswith("bio")):
        return {f"bio{i + 1}": da.isel(band=i, drop=True) for i in range(19)}
    raise DataError(
        f"{src}: {nb} bands for variable {canon!r}; give `band_names` (12 months or one "
        "variable name per band)"
    )


def open_raster(
    path: str | os.PathLike,
    *,
    variable: str | None = None,
    band_names: Sequence[str] | None = None,
    units: str | Mapping[str, str] | None = None,
    scale: float | Mapping[str, float] | None = None,
    source: str | None = None,
    aliases: Mapping[str, str | Sequence[str]] | None = None,
    month: int | None = None,
) -> xr.Dataset:
    """Read a GeoTIFF or ESRI ASCII grid as a canonical Dataset.

    Parameters
    ----------
    path : path-like
        ``.tif``/``.tiff`` or ``.asc`` file on a geographic (lon/lat) CRS. An ASCII grid
        without a ``.prj`` is taken as geographic when its coordinates fit lon/lat ranges.
    variable : str, optional
        Canonical name of the layer (``tasmin``, ``pr``, ``elevation``, ``bio``...). Default:
        from the file name (``tmin.tif`` -> ``tasmin``).
    band_names : sequence of str, optional
        One name per band: month labels (``1``..``12``, ``jan``..``dec``) for a monthly
        variable, or variable names (``bio1``..``bio19``) for one variable per band. Without
        it, 12 bands of a monthly variable are months 1..12 and 19 bands of ``bio`` are
        ``bio1``..``bio19``.
    units : str or mapping, optional
        Units of the stored values when the file does not say (rasters rarely do).
    scale : float or mapping, optional
        Multiplier for integer-scaled layers (e.g. 0.1 for degC x 10).
    source : str, optional
        Name used in messages (default: the file path).
    aliases : mapping, optional
        Canonical name -> name(s), for telling the variable from the file name.
    month : int, optional
        The month (1..12) a one-band file holds, as named by a ``{month}`` file pattern;
        without it the month is read from the end of the file name (``tmin_01.tif``).

    Returns
    -------
    xarray.Dataset
        As :func:`timeslice.readers.open_climate`.
    """
    from timeslice.grid import normalise_lonlat

    p = Path(path)
    src = source or str(p)
    da = _read(p)
    log: list[str] = []
    crs = da.rio.crs
    da = _geographic(da, p, src, log)
    layers = _layers(da, p, src, variable=variable, band_names=band_names, aliases=aliases,
                     month=month)
    base_attrs = {k: v for k, v in da.attrs.items()
                  if k not in ("scale_factor", "add_offset", "_FillValue", "AREA_OR_POINT")}
    out: dict[str, xr.DataArray] = {}
    for name, layer in layers.items():
        layer = normalise_lonlat(layer, source=src)
        u = units.get(name) if isinstance(units, Mapping) else units
        attrs = dict(base_attrs)
        if u is not None:
            attrs["units"] = u
            attrs["units_declared"] = 1
        elif name in DEFAULT_UNITS and "units" not in attrs:
            attrs["units"] = DEFAULT_UNITS[name]
            log.append(f"{name}: no units in {p.name}; assumed {DEFAULT_UNITS[name]}")
        layer.attrs = attrs
        out[name] = convert(layer, None, name, name, period=None, scale=scale, source=src, log=log)
    ds = xr.Dataset(out)
    ds.attrs["source_files"] = json.dumps([str(p)])
    ds.attrs["harmonise_log"] = json.dumps(log)
    if crs is not None:
        ds.attrs["source_crs"] = crs.to_string()
    return ds


def open_raster_file(entry, options) -> xr.Dataset:
    """The registry opener of the ``"raster"`` format.

    Parameters
    ----------
    entry : timeslice.readers.filesets.InputFile
        The file; its ``variable`` and ``month`` (from a path pattern) win over the options'.
    options : timeslice.readers.registry.ReadOptions

    Returns
    -------
    xarray.Dataset
        Canonical fields (:func:`open_raster`).
    """
    return open_raster(
        entry.path, variable=entry.variable or options.variable,
        band_names=options.band_names, units=options.units, scale=options.scale,
        source=options.source, aliases=options.aliases, month=entry.month,
    )


def header_grid(path: Path):
    """``(lat, lon)`` cell centres of a raster, from its header.

    Parameters
    ----------
    path : pathlib.Path

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)

    Raises
    ------
    InputFileError
        rasterio cannot read the file.
    """
    import rasterio

    try:
        with rasterio.open(path) as src:
            b = src.bounds
            dy, dx = (b.top - b.bottom) / src.height, (b.right - b.left) / src.width
            # cell centres, as in a NetCDF file's coordinates
            lat = b.bottom + dy * (np.arange(src.height) + 0.5)
            lon = b.left + dx * (np.arange(src.width) + 0.5)
            return lat, lon
    except rasterio.errors.RasterioError as err:
        raise InputFileError(
            f"{path}: cannot be read as a GeoTIFF or ESRI ASCII grid "
            f"({shorten(str(err), 100)}); the file may be damaged: copy it again"
        ) from err
