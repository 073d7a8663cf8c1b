"""A single gridded layer (a partner's presence, a competitor's suitability, a mask) from a
NetCDF or GeoTIFF file, on its own lat-lon grid."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.readers.filesets import InputFile, sniff_format, unsupported_message
from timeslice.readers.registry import ReadOptions, get_reader

__all__ = ["open_layer"]


def _only_field(ds: xr.Dataset, p: Path, what: str) -> xr.DataArray:
    """The one gridded variable of a file, loaded, its length-1 dimensions squeezed."""
    names = [v for v in ds.data_vars if ds[v].ndim >= 2
             and not str(v).endswith(("_bnds", "_bounds"))]
    if len(names) != 1:
        raise DataError(f"{p}: {what} needs one gridded variable, found {names}; give a "
                        "file with one layer")
    da = ds[names[0]].load()
    extra = [d for d in da.dims if da.sizes[d] == 1 and d not in ("lat", "lon")]
    return da.isel({d: 0 for d in extra}, drop=True) if extra else da


def open_layer(path: str | os.PathLike, *, what: str = "layer") -> xr.DataArray:
    """Read one (lat, lon) field: the only data variable of a NetCDF file (a single time step
    or band is squeezed), or band 1 of a GeoTIFF; ``lat``/``lon`` normalised. A format added
    to the reader registry (:mod:`timeslice.readers.registry`) is opened by its opener and
    read like a NetCDF file.

    Parameters
    ----------
    path : path-like
        A NetCDF or GeoTIFF file.
    what : str
        What the layer is, for messages (e.g. ``"biotic.partner"``).

    Returns
    -------
    xarray.DataArray
        Float ``(lat, lon)`` field named `what`, lat ascending, lon in [-180, 180).
    """
    from timeslice.grid import normalise_lonlat

    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{what} = {str(p)!r}: file not found; fix the path")
    kind = sniff_format(p)
    msg = unsupported_message(p, kind)
    if msg:
        raise InputFileError(msg)
    if kind == "raster":
        import rioxarray

        da = rioxarray.open_rasterio(p, masked=True).isel(band=0, drop=True)
        da = da.drop_vars([c for c in ("spatial_ref",) if c in da.coords])
        da = da.rename({"x": "lon", "y": "lat"})
        da["lon"].attrs.update(units="degrees_east")
        da["lat"].attrs.update(units="degrees_north")
    elif kind == "netcdf":
        with xr.open_dataset(p) as ds:
            da = _only_field(ds, p, what)
    else:  # a format added to the reader registry
        da = _only_field(get_reader(kind).open(InputFile(p), ReadOptions(source=str(p))), p, what)
    da = normalise_lonlat(da, source=str(p))
    if set(da.dims) != {"lat", "lon"}:
        raise DataError(f"{p}: {what} has dims {da.dims}; give one (lat, lon) field per file")
    da = da.astype(float).transpose("lat", "lon")
    if not np.isfinite(da.values).any():
        raise DataError(f"{p}: {what} has no valid value")
    da.name = what
    return da
