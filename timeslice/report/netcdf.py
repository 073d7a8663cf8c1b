"""CF-1.8 NetCDF writer for stacked series, ensemble summaries and any gridded output.

The writer fills in what CF asks of every variable (``units``, ``long_name``,
``standard_name`` where the standard name table has one, ``grid_mapping``, ``cell_measures``,
``flag_values``/``flag_meanings`` for categorical layers), adds a WGS84 ``crs`` grid-mapping
variable, ``lat_bnds``/``lon_bnds`` and the grid-cell areas, turns boolean masks into int8
flags (NetCDF has no boolean type), compresses with zlib and chunks one slice at a time.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError
from timeslice.grid import cell_area, grid_edges
from timeslice.report._output import output_path
from timeslice import layers

__all__ = ["open_series", "prepare_cf", "restore_series", "write_series"]

#: WGS84 ellipsoid (NIMA TR8350.2, 3rd ed., 2000): semi-major axis and inverse flattening.
_WGS84_A = 6378137.0
_WGS84_RF = 298.257223563
_WGS84_WKT = (
    'GEOGCRS["WGS 84",DATUM["World Geodetic System 1984",ELLIPSOID["WGS 84",6378137,'
    '298.257223563,LENGTHUNIT["metre",1]]],PRIMEM["Greenwich",0,ANGLEUNIT["degree",'
    '0.0174532925199433]],CS[ellipsoidal,2],AXIS["geodetic latitude (Lat)",north,ORDER[1],'
    'ANGLEUNIT["degree",0.0174532925199433]],AXIS["geodetic longitude (Lon)",east,ORDER[2],'
    'ANGLEUNIT["degree",0.0174532925199433]],ID["EPSG",4326]]'
)

_SLICE_COORD_ATTRS = {
    "slice_label": {"long_name": "time-slice label", "cf_role": "timeseries_id"},
    "year": {
        "long_name": "representative calendar year of the slice (CE; a slice a years before "
        "present has year = 1950 - a)",
        "units": "1",
    },
    "period": {"long_name": "period the slice climatology describes"},
    "model": {"long_name": "climate model (observed for the baseline)"},
    "scenario": {"long_name": "scenario (baseline, past, or a forcing scenario label)"},
    "sea_level": {"long_name": "sea level of the slice relative to present mean sea level",
                  "units": "m"},
}


def _clean_attr(value: Any) -> Any:
    """Turn an attribute value into something netCDF4 can store (str, number, 1-D array)."""
    if isinstance(value, (bool, np.bool_)):
        return np.int8(value)
    if isinstance(value, (str, int, float, np.integer, np.floating)):
        return value
    if isinstance(value, np.ndarray) and value.dtype.kind in "iuf" and value.ndim <= 1:
        return value
    if isinstance(value, (list, tuple)) and value and all(
        isinstance(v, (int, float)) and not isinstance(v, bool) for v in value
    ):
        return np.asarray(value)
    return json.dumps(value, default=str)


def _clean_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    return {str(k): _clean_attr(v) for k, v in attrs.items() if v is not None}


def _check_grid_input(ds) -> None:
    """Refuse anything but a Dataset with 1-D lat and lon, before any work."""
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"write_series: `ds` must be an xarray.Dataset, got {type(ds).__name__}")
    for name in ("lat", "lon"):
        if name not in ds.coords or ds[name].ndim != 1:
            raise DataError(
                f"write_series: the dataset needs a 1-D `{name}` coordinate "
                "(normalise it with timeslice.grid.normalise_lonlat first)"
            )


def _flag_attrs(attrs: dict, da: xr.DataArray, entry, fill) -> None:
    """CF flags of an integer layer: the stages' fill value (or -1) becomes a named flag."""
    values = np.atleast_1d(np.asarray(attrs["flag_values"])).tolist()
    meanings = str(attrs.get("flag_meanings", "")).split()
    missing = None
    if fill is not None and np.isfinite(float(fill)) and int(fill) not in values:
        missing = int(fill)
    elif (entry is not None and entry.meaning(-1) and -1 not in values
          and da.dtype.kind == "i"):
        missing = -1
    if missing is not None and len(meanings) == len(values):
        # The stages mark "not land / no prediction" with a fill value; here it is a
        # named flag instead, so the layer stays an integer when read back.
        values = [missing, *values]
        meanings = [(entry.meaning(-1) if entry is not None else None) or "no_data",
                    *meanings]
        attrs["flag_meanings"] = " ".join(meanings)
    # CF 1.8 section 3.5: flag_values must have the variable's type.
    attrs["flag_values"] = np.asarray(values).astype(da.dtype)


def _cf_variable(da: xr.DataArray, name: str, fill) -> xr.DataArray:
    """One data variable with its attributes checked against and completed from the layer
    table, booleans as int8 flags, and its grid mapping and cell measures."""
    entry = layers.spec(name)
    if entry is not None:
        if da.dtype == bool:
            # A mask built from another field inherits that field's attributes
            # (e.g. `land` carrying elevation's standard_name); the table's words win.
            da = layers.stamp(da.copy(), str(name))
        layers.check(da, where=f"write_series ({name})", keys=layers.WRITER_KEYS)
        da = layers.stamp(da, str(name), missing_only=True)  # completes what it lacks
    attrs = dict(da.attrs)
    if da.dtype == bool:
        da = da.astype("int8")
        if "flag_values" not in attrs:
            attrs["flag_values"] = np.array([0, 1], dtype="int8")
            attrs["flag_meanings"] = (entry.bool_flags if entry is not None
                                      and entry.bool_flags else "false true")
    if "flag_values" in attrs and da.dtype.kind in "iu":
        _flag_attrs(attrs, da, entry, fill)
    if "units" not in attrs and da.dtype.kind == "f":
        attrs["units"] = "1"
    if "long_name" not in attrs:
        attrs["long_name"] = str(name).replace("_", " ")
    if "lat" in da.dims and "lon" in da.dims:
        attrs["grid_mapping"] = "crs"
        attrs["cell_measures"] = "area: cell_area"
    # xarray owns these two keys (it writes them from the encoding).
    attrs.pop("_FillValue", None)
    attrs.pop("coordinates", None)
    da.attrs = _clean_attrs(attrs)
    return da


def _add_grid(out: xr.Dataset) -> None:
    """Cell areas, the WGS 84 grid mapping, and lat/lon with their CF bounds (in place)."""
    if "cell_area" not in out:
        area = cell_area(out)
        out["cell_area"] = layers.stamp(area.astype("float64").rename("cell_area"))
        out["cell_area"].attrs["grid_mapping"] = "crs"
    out["crs"] = xr.DataArray(
        np.int32(0),
        attrs={
            "grid_mapping_name": "latitude_longitude",
            "semi_major_axis": _WGS84_A,
            "inverse_flattening": _WGS84_RF,
            "longitude_of_prime_meridian": 0.0,
            "crs_wkt": _WGS84_WKT,
            "long_name": "WGS 84 (EPSG:4326)",
        },
    )
    edges = dict(zip(("lat", "lon"), grid_edges(out)))
    for name in ("lat", "lon"):
        bnds = edges[name]
        # Bounds are data variables: CF bounds are not coordinates of anything.
        out[f"{name}_bnds"] = xr.DataArray(bnds, dims=(name, "bnds"),
                                           coords={name: out[name]})
        attrs = dict(out[name].attrs)
        attrs.update(
            standard_name="latitude" if name == "lat" else "longitude",
            units="degrees_north" if name == "lat" else "degrees_east",
            axis="Y" if name == "lat" else "X",
            long_name="latitude" if name == "lat" else "longitude",
            bounds=f"{name}_bnds",
        )
        out[name].attrs = attrs
        out[f"{name}_bnds"].attrs = {}


def _cf_coordinates(out: xr.Dataset) -> xr.Dataset:
    """Text dimensions as ``<dim>_label`` auxiliary coordinates, slice coordinates with their
    attributes, and a long_name on every other coordinate."""
    for dim in [d for d in out.dims if d not in ("lat", "lon", "bnds")]:
        if dim in out.coords and out[dim].dtype.kind in "OUS":
            # CF coordinate variables are numeric and monotonic; text labels go into an
            # auxiliary coordinate `<dim>_label` (CF 1.8 section 6.1); `open_series`
            # restores the index.
            labels = np.asarray(out[dim].values).astype(str).astype(object)
            attrs = dict(out[dim].attrs)
            attrs.setdefault("long_name", f"{dim} label")
            out = out.drop_vars(dim).assign_coords({f"{dim}_label": (dim, labels)})
            out[f"{dim}_label"].attrs = attrs
    for name, extra in _SLICE_COORD_ATTRS.items():
        if name in out.coords:
            attrs = dict(out[name].attrs)
            for k, v in extra.items():
                attrs.setdefault(k, v)
            if out[name].dtype.kind in "OUS":
                # Text labels are tiny: load them (a lazy object array makes xarray warn).
                text = np.asarray(out[name].values).astype(str).astype(object)
                out = out.assign_coords({name: (out[name].dims, text)})
                attrs.pop("units", None)
            out[name].attrs = _clean_attrs(attrs)
    for name in out.coords:
        if name not in out.dims and "long_name" not in out[name].attrs and name not in (
                "lat_bnds", "lon_bnds"):
            out[name].attrs["long_name"] = str(name).replace("_", " ")
    return out


def _global_attrs(ds: xr.Dataset, *, history, source, title) -> dict[str, Any]:
    """CF-1.8 global attributes: the history line appended, title, source and the caution."""
    from timeslice import __version__

    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    line = history or f"{now} written by timeslice {__version__}"
    old = str(ds.attrs.get("history", "")).strip()
    gattrs = _clean_attrs({k: v for k, v in ds.attrs.items() if k != "history"})
    gattrs.update(
        Conventions="CF-1.8",
        title=title or str(ds.attrs.get("title", "timeslice climatic suitability series")),
        history=f"{old}\n{line}" if old else line,
        source=source or str(ds.attrs.get("source", f"timeslice {__version__}")),
    )
    gattrs.setdefault(
        "comment",
        "Projections are hypotheses about climatic suitability; biotic interactions and "
        "dispersal limits are outside the climate niche; areas with novel climate (mess < 0) "
        "are extrapolations and flagged, not trusted.",
    )
    return gattrs


def prepare_cf(
    ds: xr.Dataset,
    *,
    history: str | None = None,
    source: str | None = None,
    title: str | None = None,
) -> xr.Dataset:
    """Return a copy of `ds` with the CF-1.8 metadata the writer needs (no I/O).

    Parameters
    ----------
    ds : xarray.Dataset
        Gridded output with 1-D ``lat`` and ``lon`` (ascending), optionally a ``slice``
        dimension with ``year``, ``period``, ``model``, ``scenario`` coordinates.
    history, source, title : str, optional
        Global attributes; defaults name the tool and its version.

    Returns
    -------
    xarray.Dataset
        Booleans as int8 with flags, ``crs``, ``lat_bnds``, ``lon_bnds``, ``cell_area``
        added, attributes completed from the project's layer table.
    """
    _check_grid_input(ds)
    out = ds.copy()
    fills = {name: out[name].encoding.get("_FillValue") for name in out.data_vars}
    # Encodings from files read earlier (chunk sizes, fill values, dtypes) must not leak in.
    for name in out.variables:
        out[name].encoding = {}
    for name in list(out.data_vars):
        out[name] = _cf_variable(out[name], name, fills.get(name))
    _add_grid(out)
    out = _cf_coordinates(out)
    out.attrs = _global_attrs(ds, history=history, source=source, title=title)
    return out


def _encoding(ds: xr.Dataset, *, complevel: int) -> dict[str, dict[str, Any]]:
    enc: dict[str, dict[str, Any]] = {}
    for name in list(ds.data_vars) + list(ds.coords):
        da = ds[name]
        e: dict[str, Any] = {}
        if da.dtype.kind == "O":
            e["dtype"] = str
        elif set(da.dims) >= {"lat", "lon"}:
            e.update(zlib=True, complevel=complevel, shuffle=True)
            # One slice (or one ensemble member) per chunk, the whole grid in it.
            e["chunksizes"] = tuple(
                1 if d not in ("lat", "lon", "bnds") else ds.sizes[d] for d in da.dims
            )
        else:
            # Small 1-D variables stay contiguous: no chunk boundaries for readers to respect.
            e["contiguous"] = True
        is_coord = name in ds.coords or name in ("lat_bnds", "lon_bnds")
        if da.dtype.kind == "f" and not is_coord:
            e["_FillValue"] = np.array(np.nan, dtype=da.dtype)
        elif da.dtype.kind in "iub" or is_coord:
            e["_FillValue"] = None
        enc[str(name)] = e
    return enc


def write_series(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    history: str | None = None,
    source: str | None = None,
    title: str | None = None,
    complevel: int = 4,
) -> Path:
    """Write a stacked series (or any gridded output) as compressed CF-1.8 NetCDF-4.

    Parameters
    ----------
    ds : xarray.Dataset
        Layers on ``(lat, lon)`` or ``(slice, lat, lon)`` (any leading dimensions work).
    path : path-like
        Target file; written to a temporary name beside it and renamed when complete.
    history, source, title : str, optional
        Global attributes (CF 1.8 section 2.6.2). `history` is appended to any existing line.
    complevel : int, default 4
        zlib level 1..9.

    Returns
    -------
    pathlib.Path
        The written file.

    Notes
    -----
    Chunks hold one slice (the whole lat-lon grid each), so reading one slice reads one chunk
    per variable. Boolean masks are int8 with ``flag_values = 0, 1``. The ``suitable`` and
    ``change`` layers keep -1 as a flag value ("not_land") rather than a fill value, so they
    stay integers when read back.

    References
    ----------
    Eaton, B. et al. (2020). NetCDF Climate and Forecast (CF) Metadata Conventions, version 1.8.
    https://cfconventions.org/Data/cf-conventions/cf-conventions-1.8/cf-conventions.html
    """
    if not 1 <= int(complevel) <= 9:
        raise DataError(f"write_series: `complevel` must be in 1..9, got {complevel}")
    target = Path(path)
    if target.exists() and target.is_dir():
        raise InputFileError(f"{target}: is a folder; give a file name ending in .nc")
    out = prepare_cf(ds, history=history, source=source, title=title)
    enc = _encoding(out, complevel=int(complevel))
    with output_path(target) as tmp:
        out.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=enc)
    return target


def open_series(path: str | os.PathLike, **kwargs: Any) -> xr.Dataset:
    """Open a file written by :func:`write_series` with the ``slice`` labels as its index.

    Parameters
    ----------
    path : path-like
        A NetCDF file from :func:`write_series`.
    **kwargs
        Passed to :func:`xarray.open_dataset` (e.g. ``chunks={"slice": 1}``).

    Returns
    -------
    xarray.Dataset
        ``slice`` coordinate restored from ``slice_label``; the flag layers stay integers.
    """
    target = Path(path)
    if not target.is_file():
        raise InputFileError(f"{target}: no such file; give the path of a series NetCDF file")
    try:
        ds = xr.open_dataset(target, engine="netcdf4", **kwargs)
    except (OSError, ValueError) as err:
        raise InputFileError(f"{target}: not a readable NetCDF file ({err})") from err
    return restore_series(ds)


def restore_series(ds: xr.Dataset) -> xr.Dataset:
    """Undo the on-disk encoding of a written series: text labels back as the dimension index,
    boolean masks back as booleans, text coordinates as numpy strings.

    Parameters
    ----------
    ds : xarray.Dataset
        A series as stored (NetCDF or Zarr).

    Returns
    -------
    xarray.Dataset
        ``slice`` (and any other labelled dimension) indexed by its labels, masks boolean.
    """
    for name in list(ds.coords):
        if ds[name].dtype.kind == "T" or (ds[name].dtype.kind == "U" and name not in ds.dims):
            # numpy's variable-width strings (Zarr v3): the fixed-width strings NetCDF gives
            attrs = dict(ds[name].attrs)
            text = np.asarray([str(x) for x in np.asarray(ds[name].values).ravel()]
                              ).reshape(ds[name].shape)
            ds = ds.assign_coords({name: (ds[name].dims, text)})
            ds[name].attrs = attrs
    for dim in list(ds.dims):
        label = f"{dim}_label"
        if label in ds.variables and ds[label].dims == (dim,) and dim not in ds.coords:
            attrs = dict(ds[label].attrs)
            ds = ds.assign_coords({dim: (dim, np.asarray([str(x) for x in ds[label].values]))})
            ds = ds.drop_vars(label)
            ds[dim].attrs = attrs
    for name in list(ds.data_vars):
        entry = layers.spec(name)
        flags = np.asarray(ds[name].attrs.get("flag_values", [])).tolist()
        if entry is not None and entry.bool_flags is not None and flags == [0, 1]:
            attrs = {k: v for k, v in ds[name].attrs.items()
                     if k not in ("flag_values", "flag_meanings")}
            ds[name] = (ds[name] == 1).assign_attrs(attrs)
    if "mod" in ds.data_vars and "most_dissimilar" not in ds.data_vars:
        # files written before the layer got its self-explaining name
        ds = ds.rename({"mod": "most_dissimilar"})
    return ds
