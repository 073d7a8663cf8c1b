"""CF NetCDF files: the opener of the ``"netcdf"`` format in the reader registry.

Opens one file as xarray decodes it (cftime dates, "months since" axes decoded here) and refuses
grids timeslice cannot read as a regular latitude-longitude grid. Naming and unit conversion are
shared by every format (:mod:`timeslice.readers.canonical`); assembling the files of one slice is
:func:`timeslice.readers.open_climate`.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError, shorten

__all__ = ["decode_months_since", "grid_problem", "header_grid", "open_netcdf", "open_netcdf_file"]

_REMAP = ("regrid it to a regular latitude-longitude grid first, e.g. `cdo remapbil,r720x360 "
          "in.nc out.nc` (or a grid description of your region), then give that file")


def _projection_problem(ds: xr.Dataset, source: str) -> str | None:
    """Rotated-pole, projected and curvilinear grids, from grid mappings and coordinates."""
    for name, var in ds.variables.items():
        gm = str(var.attrs.get("grid_mapping_name", "")).lower()
        if gm == "rotated_latitude_longitude":
            return (f"{source}: the file is on a rotated-pole grid (typical of regional climate "
                    f"models); {_REMAP}")
        if gm and gm != "latitude_longitude":
            return f"{source}: the file is on a projected grid ({gm!r}); {_REMAP}"
    for name, var in ds.variables.items():
        sn = str(var.attrs.get("standard_name", "")).lower()
        if sn in ("grid_latitude", "grid_longitude") or str(name) in ("rlat", "rlon"):
            return f"{source}: the file is on a rotated-pole grid ({name!r}); {_REMAP}"
    for name, var in ds.variables.items():
        sn = str(var.attrs.get("standard_name", "")).lower()
        low = str(name).lower()
        if (sn in ("latitude", "longitude") or low in ("lat", "lon", "latitude", "longitude",
                                                      "nav_lat", "nav_lon")) and var.ndim == 2:
            return f"{source}: the file is on a curvilinear grid (2-D {name!r}); {_REMAP}"
    return None


def grid_problem(ds: xr.Dataset, *, source: str) -> str | None:
    """One-line refusal for a grid timeslice cannot read as a regular lat-lon grid, else None.

    Rotated-pole and projected grids (regional climate models) and curvilinear grids (2-D
    latitude/longitude) must be remapped to a regular latitude-longitude grid first.

    Parameters
    ----------
    ds : xarray.Dataset
        The file (its header is enough).
    source : str
        File named in the message.

    Returns
    -------
    str or None
        The message, or None for a regular latitude-longitude grid.
    """
    problem = _projection_problem(ds, source)
    if problem:
        return problem
    from timeslice.grid import find_lonlat

    try:
        names = find_lonlat(ds, source=source)
        # a dimension named x/lat without a coordinate variable has no positions: its
        # indices 0, 1, 2 ... must not be taken for degrees
        if any(n not in ds.variables for n in names):
            raise DataError(source)
    except DataError:
        dims = ", ".join(f"{k}={v}" for k, v in ds.sizes.items()) or "none"
        return (f"{source}: no latitude/longitude coordinates found (dimensions {dims}); give "
                "a file on a regular lat-lon grid with CF coordinates (units degrees_north / "
                "degrees_east)")
    return None


def decode_months_since(ds: xr.Dataset) -> xr.Dataset:
    """Decode time axes in "months since ..." (not decodable by cftime outside 360_day).

    Parameters
    ----------
    ds : xarray.Dataset
        Opened with ``decode_times=False``.

    Returns
    -------
    xarray.Dataset
        Step k is month k after the reference, dated on the 15th.
    """
    import cftime

    for name in list(ds.coords):
        units = str(ds[name].attrs.get("units", ""))
        m = re.match(r"\s*months?\s+since\s+(-?\d+)-(\d+)", units)
        if not m or not np.issubdtype(ds[name].dtype, np.number):
            continue
        cal = str(ds[name].attrs.get("calendar", "standard")).lower()
        y0, m0 = int(m.group(1)), int(m.group(2))
        steps = np.floor(np.asarray(ds[name].values, dtype=float)).astype(int) + (m0 - 1)
        dates = [cftime.datetime(y0 + int(k) // 12, int(k) % 12 + 1, 15, calendar=cal)
                 for k in steps]
        attrs = {k: v for k, v in ds[name].attrs.items() if k not in ("units", "calendar")}
        ds = ds.assign_coords({name: (ds[name].dims, dates, attrs)})
        ds[name].encoding.update(units=units, calendar=cal)
    return ds


def _unreadable(path: Path, err: BaseException) -> InputFileError:
    return InputFileError(
        f"{path}: cannot be read as NetCDF ({shorten(str(err).splitlines()[0], 120)}); "
        "give a CF NetCDF file"
    )


def open_netcdf_file(path: Path, chunks=None) -> xr.Dataset:
    """Open one NetCDF file with decoded (cftime) times, refusing grids it cannot read.

    Parameters
    ----------
    path : pathlib.Path
    chunks : optional
        Passed to :func:`xarray.open_dataset`.

    Returns
    -------
    xarray.Dataset
        The file as stored (names, units), times decoded.
    """
    import netCDF4

    netCDF4.set_chunk_cache(4 * 2**20)  # small per-variable cache: bounded memory (DESIGN.md)
    try:
        ds = xr.open_dataset(
            path,
            decode_times=xr.coders.CFDatetimeCoder(use_cftime=True),
            chunks=chunks,
        )
    except ValueError as err:
        if "decode time" not in str(err):
            raise _unreadable(path, err) from err
        # e.g. "months since" in a standard calendar: decode those axes ourselves
        try:
            ds = xr.open_dataset(path, decode_times=False, chunks=chunks)
        except (OSError, ValueError, RuntimeError) as err2:
            raise _unreadable(path, err2) from err2
        ds = decode_months_since(ds)
    except (OSError, RuntimeError) as err:
        raise InputFileError(
            f"{path}: cannot be read as NetCDF ({type(err).__name__}: "
            f"{shorten(str(err).splitlines()[0] if str(err) else '', 120)}); the file may be "
            "damaged or incomplete: copy or download it again"
        ) from err
    problem = grid_problem(ds, source=str(path))
    if problem:
        ds.close()
        raise DataError(problem)
    return ds


def open_netcdf(entry, options) -> xr.Dataset:
    """The registry opener of the ``"netcdf"`` format.

    Parameters
    ----------
    entry : timeslice.readers.filesets.InputFile
    options : timeslice.readers.registry.ReadOptions
        Only ``chunks`` is used here; names and units are the shared canonicalisation's.

    Returns
    -------
    xarray.Dataset
        The file as stored.
    """
    return open_netcdf_file(entry.path, options.chunks)


def header_grid(path: Path):
    """``(lat, lon)`` centres from a NetCDF file's header, or a one-line refusal.

    Parameters
    ----------
    path : pathlib.Path

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)

    Raises
    ------
    InputFileError
        The file is unreadable or not on a regular lat-lon grid.
    """
    try:
        with xr.open_dataset(path, decode_times=False, decode_cf=False, cache=False) as ds:
            problem = grid_problem(ds, source=str(path))
            if problem:
                raise InputFileError(problem)
            from timeslice.grid import find_lonlat

            lon, lat = find_lonlat(ds, source=str(path))
            return ds[lat].values, ds[lon].values
    except InputFileError:
        raise
    except Exception as err:  # netCDF-C raises OSError/RuntimeError with HDF details
        first = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise InputFileError(
            f"{path}: cannot be read as NetCDF ({shorten(first, 100)}); the file may be damaged "
            "or incomplete: download or copy it again"
        ) from err
