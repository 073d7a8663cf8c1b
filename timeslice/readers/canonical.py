"""Shared canonicalisation of climate fields, used by every reader.

A reader hands over fields as the file stores them; this module names them (the user's
``aliases``, then CF standard names, then :data:`DEFAULT_ALIASES`) and converts them to the
canonical units of docs/architecture.md (degC, mm month-1 on ``month`` 1..12, m, fraction),
applying a declared ``scale`` and ``units`` first and reducing a time axis to a 12-month
climatology (:mod:`timeslice.readers.timeaxis`). The NetCDF and raster readers both import it;
it imports neither.
"""

from __future__ import annotations

import re
from collections.abc import Mapping

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.readers.timeaxis import calendar_of, time_name, to_monthly
from timeslice.units import (
    SECONDS_PER_DAY,
    days_in_month,
    fraction_factor,
    length_factor,
    precipitation_conversion,
    temperature_conversion,
)

__all__ = [
    "CANONICAL_ATTRS",
    "DEFAULT_ALIASES",
    "MONTHLY",
    "STANDARD_NAMES",
    "TEMPERATURE",
    "aux_names",
    "canonical_name",
    "convert",
    "identify",
    "scale_for",
    "tagged",
    "units_for",
    "why_not_taken",
]

#: Names tried (after CF standard names) for each canonical variable; a user mapping
#: given as ``aliases`` is tried first.
DEFAULT_ALIASES: dict[str, tuple[str, ...]] = {
    "tasmin": ("tasmin", "tmin", "tn", "tmn", "mn2t", "min_temperature", "tasmin_mean"),
    "tasmax": ("tasmax", "tmax", "tx", "tmx", "mx2t", "max_temperature", "tasmax_mean"),
    "tas": ("tas", "tavg", "tmean", "tg", "t2m", "temperature", "tmp"),
    "pr": ("pr", "prec", "precip", "prcp", "ppt", "tp", "pre", "rain", "precipitation"),
    "elevation": ("elevation", "elev", "orog", "dem", "altitude", "height", "topo", "z",
                  "bathymetry", "topography"),
    "ice": ("ice", "sftgif", "ice_fraction", "icefrac", "glacier"),
    **{f"bio{i}": (f"bio{i}", f"bio_{i}", f"bio{i:02d}", f"bio_{i:02d}") for i in range(1, 20)},
}

#: CF standard name -> canonical variable (``air_temperature`` is told apart by cell_methods).
STANDARD_NAMES: dict[str, str] = {
    "precipitation_flux": "pr",
    "precipitation_amount": "pr",
    "lwe_precipitation_rate": "pr",
    "thickness_of_precipitation_amount": "pr",
    "lwe_thickness_of_precipitation_amount": "pr",
    "surface_altitude": "elevation",
    "height_above_mean_sea_level": "elevation",
    "altitude": "elevation",
    "land_ice_area_fraction": "ice",
}

#: Canonical temperatures (degC) and monthly variables (on ``month`` 1..12).
TEMPERATURE = ("tasmin", "tasmax", "tas")
MONTHLY = ("tasmin", "tasmax", "tas", "pr")

#: CF attributes every canonical variable carries.
CANONICAL_ATTRS = {
    "tasmin": {"standard_name": "air_temperature", "long_name": "monthly mean daily minimum near-surface air temperature", "cell_methods": "time: minimum within days time: mean over days"},
    "tasmax": {"standard_name": "air_temperature", "long_name": "monthly mean daily maximum near-surface air temperature", "cell_methods": "time: maximum within days time: mean over days"},
    "tas": {"standard_name": "air_temperature", "long_name": "monthly mean near-surface air temperature"},
    "pr": {"standard_name": "lwe_thickness_of_precipitation_amount", "long_name": "monthly precipitation total"},
    "elevation": {"standard_name": "height_above_mean_sea_level", "long_name": "elevation relative to present sea level (negative below)"},
    "ice": {"standard_name": "land_ice_area_fraction", "long_name": "land ice area fraction"},
}

_DROPPED_ATTRS = ("units", "scale_factor", "add_offset", "_FillValue", "missing_value",
                  "valid_range", "valid_min", "valid_max", "cell_methods", "standard_name",
                  "source_file")


# ----------------------------------------------------------------------------- names

def aux_names(ds: xr.Dataset) -> set[str]:
    """Variables that describe others (bounds, climatology bounds, CRS), not fields.

    Parameters
    ----------
    ds : xarray.Dataset

    Returns
    -------
    set of str
    """
    aux: set[str] = set()
    for name in list(ds.variables):
        for key in ("bounds", "climatology"):
            ref = ds[name].attrs.get(key) or ds[name].encoding.get(key)
            if ref:
                aux.add(str(ref))
    for name in ds.data_vars:
        if re.search(r"(_bnds|_bounds|_bnd)$", str(name)) or str(name) in {"crs", "spatial_ref"}:
            aux.add(str(name))
    return aux


def _air_temperature(da: xr.DataArray, name: str) -> str:
    """tasmin, tasmax or tas for a field of standard name air_temperature."""
    cm = str(da.attrs.get("cell_methods", "")).lower()
    low = name.lower()
    if "minimum" in cm or low in DEFAULT_ALIASES["tasmin"]:
        return "tasmin"
    if "maximum" in cm or low in DEFAULT_ALIASES["tasmax"]:
        return "tasmax"
    return "tas"


def identify(ds: xr.Dataset, aliases: Mapping[str, object] | None, source: str) -> dict[str, str]:
    """Map canonical name -> file variable name.

    Parameters
    ----------
    ds : xarray.Dataset
        The fields as the file stores them.
    aliases : mapping, optional
        Canonical name -> file variable name(s), tried first.
    source : str
        File named in messages.

    Returns
    -------
    dict
        Canonical name -> variable of `ds`: the user's `aliases` first, then CF standard names
        (tasmin/tasmax told apart by cell_methods), then :data:`DEFAULT_ALIASES`.
    """
    aux = aux_names(ds)
    candidates = [str(v) for v in ds.data_vars if str(v) not in aux and ds[v].ndim >= 2]
    found: dict[str, str] = {}
    for canon, names in (aliases or {}).items():
        names = [names] if isinstance(names, str) else list(names)  # type: ignore[arg-type]
        for n in names:
            if n in ds.data_vars:
                found[canon] = n
                break
    taken = set(found.values())
    for v in candidates:
        if v in taken:
            continue
        sn = str(ds[v].attrs.get("standard_name", "")).lower()
        canon = _air_temperature(ds[v], v) if sn == "air_temperature" else STANDARD_NAMES.get(sn)
        if canon and canon not in found:
            found[canon] = v
            taken.add(v)
    for canon, names in DEFAULT_ALIASES.items():
        if canon in found:
            continue
        for v in candidates:
            if v not in taken and v.lower() in names:
                found[canon] = v
                taken.add(v)
                break
    return found


def why_not_taken(ds: xr.Dataset, mapping: Mapping[str, str]) -> dict[str, str]:
    """For file variables not read as the canonical variable of their own name: why.

    Parameters
    ----------
    ds : xarray.Dataset
    mapping : mapping
        The result of :func:`identify`.

    Returns
    -------
    dict
        File variable -> the end of a message sentence ("is read as 'tasmax' ...; fix ...").
    """
    used = {name: canon for canon, name in mapping.items()}
    aux = aux_names(ds)
    why: dict[str, str] = {}
    for v in map(str, ds.data_vars):
        if v in used:
            if used[v].lower() != v.lower():
                why[v] = (f"is read as {used[v]!r} (by `aliases` or its standard_name and "
                          "cell_methods); fix the mapping")
        elif v in aux or ds[v].ndim < 2:
            why[v] = (f"has dimensions {tuple(map(str, ds[v].dims))}, not a latitude-longitude "
                      "field; give the gridded variable")
        else:
            why[v] = ("was not recognised (its standard_name or units say otherwise); map it "
                      "with `aliases`")
    return why


def tagged(ds: xr.Dataset, mapping: dict[str, str], canon: str, source: str) -> dict[str, str]:
    """Keep only the variable a ``{variable}`` pattern says the file holds.

    Parameters
    ----------
    ds : xarray.Dataset
    mapping : dict
        The result of :func:`identify`.
    canon : str
        The canonical variable the file pattern names.
    source : str
        File named in messages.

    Returns
    -------
    dict
        ``{canon: file variable}``; the only field of the file when none was identified.
    """
    if canon in mapping:
        return {canon: mapping[canon]}
    aux = aux_names(ds)
    data = [str(v) for v in ds.data_vars if str(v) not in aux and ds[v].ndim >= 2]
    if len(data) == 1:
        return {canon: data[0]}
    raise DataError(
        f"{source}: the file pattern says it holds {canon!r}, but none of its variables "
        f"({', '.join(data) or 'none'}) is recognisable as {canon!r}; map it with "
        f"aliases = {{{canon} = \"NAME\"}}"
    )


def canonical_name(name: str, aliases: Mapping[str, object] | None = None) -> str | None:
    """The canonical variable a bare name stands for (a file stem such as ``tmin_2041-2060``).

    Parameters
    ----------
    name : str
        A variable or file name.
    aliases : mapping, optional
        Canonical name -> name(s), tried first.

    Returns
    -------
    str or None
        The canonical name, or None when the name says nothing.
    """
    low = name.lower()
    for canon, names in (aliases or {}).items():
        names = [names] if isinstance(names, str) else list(names)  # type: ignore[arg-type]
        if low in [n.lower() for n in names]:
            return canon
    for canon, names in DEFAULT_ALIASES.items():
        if low in names:
            return canon
    # names like "tmin_2041-2060" or "bio_01"
    m = re.match(r"([a-z]+_?\d*)", low)
    if m:
        head = m.group(1)
        for canon, names in DEFAULT_ALIASES.items():
            if head in names or head.rstrip("_") in names:
                return canon
    return None


# ----------------------------------------------------------------------------- units

def units_for(units: str | Mapping[str, str] | None, canon: str) -> str | None:
    """Declared units of one canonical variable (a mapping per variable, or one string).

    Parameters
    ----------
    units : str, mapping or None
    canon : str

    Returns
    -------
    str or None
    """
    if units is None:
        return None
    if isinstance(units, Mapping):
        value = units.get(canon)
        return None if value is None else str(value)
    return str(units)


def scale_for(scale: float | Mapping[str, float] | None, canon: str) -> float:
    """Declared multiplier of one canonical variable (a mapping per variable, or one number).

    Parameters
    ----------
    scale : float, mapping or None
    canon : str

    Returns
    -------
    float
        1.0 when nothing is declared.
    """
    if scale is None:
        return 1.0
    if isinstance(scale, Mapping):
        return float(scale.get(canon, 1.0))
    return float(scale)


def _unit_map(canon: str, units, name: str, source: str,
              log: list[str]) -> tuple[str | None, float, float, str]:
    """``(kind, factor, offset, canonical units)`` of one variable's stored units."""
    kind, factor, offset = None, 1.0, 0.0
    if canon in TEMPERATURE:
        offset, factor = temperature_conversion(units, variable=name, source=source)
        if (offset, factor) != (0.0, 1.0):
            log.append(f"{canon} ({name}): {units} -> degC")
        return kind, factor, offset, "degC"
    if canon == "pr":
        kind, factor = precipitation_conversion(units, variable=name, source=source)
        if (kind == "per_month" and factor != 1.0) or kind == "per_second":
            log.append(f"{canon} ({name}): {units} -> mm month-1")
        return kind, factor, offset, "mm month-1"
    if canon == "elevation":
        return kind, length_factor(units, variable=name, source=source), offset, "m"
    if canon == "ice":
        factor = fraction_factor(units, variable=name, source=source)
        if factor != 1.0:
            log.append(f"ice ({name}): % -> fraction")
        return kind, factor, offset, "1"
    # bio layers and anything else: keep units
    return kind, factor, offset, units if units is not None else ""


def _drop_single_dims(da: xr.DataArray, tname: str | None, name: str,
                      source: str) -> xr.DataArray:
    """Drop length-1 dimensions other than lat, lon, time and month (e.g. a height level)."""
    for d in [d for d in da.dims if d not in ("lat", "lon", tname, "month")]:
        if da.sizes[d] == 1:
            da = da.isel({d: 0}, drop=True)
        else:
            raise DataError(
                f"{source}: variable {name!r} has an extra dimension {d!r} of size "
                f"{da.sizes[d]}; select one level before reading"
            )
    return da


def _apply_map(da: xr.DataArray, ds: xr.Dataset | None, tname: str | None, *, canon: str,
               name: str, units, kind: str | None, factor: float, offset: float, period,
               source: str, log: list[str]) -> xr.DataArray:
    """Apply the unit map, reducing a time axis to a 12-month climatology on the way."""
    if tname is not None and canon not in MONTHLY and da.sizes[tname] == 1:
        da = da.isel({tname: 0}, drop=True)  # e.g. a fixed field (orography) with one time step
        tname = None
    if tname is not None:
        return to_monthly(
            da, tname, calendar_of(ds, tname), period=period, kind=kind, factor=factor,
            offset=offset, source=source, variable=canon, log=log,
        )
    if "month" in da.dims and kind == "per_second":
        secs = days_in_month("standard", source=source) * SECONDS_PER_DAY
        log.append(f"{canon}: no time axis; standard-calendar month lengths assumed")
        return da * xr.DataArray(secs * factor, dims=("month",), coords={"month": da["month"]})
    if "month" not in da.dims and canon in MONTHLY and kind == "per_second":
        raise DataError(
            f"{source}: variable {name!r} is a rate ({units}) without a time axis; "
            "give a monthly time axis or units per month"
        )
    if factor != 1.0 or offset != 0.0:
        da = offset + factor * da
    return da


def _finish(da: xr.DataArray, attrs: dict, *, canon: str, name: str, units,
            new_units: str) -> xr.DataArray:
    """Canonical dimension order, dtype and attributes."""
    if "month" in da.dims:
        da = da.assign_coords(month=np.asarray(da["month"].values, dtype=int))
        da = da.transpose("month", "lat", "lon")
    else:
        da = da.transpose("lat", "lon")
    if np.issubdtype(da.dtype, np.floating) and da.dtype != np.float64:
        da = da.astype(np.float32)
    for k in _DROPPED_ATTRS:
        attrs.pop(k, None)
    attrs.update(CANONICAL_ATTRS.get(canon, {}))
    attrs["units"] = new_units
    if units is not None and str(units) != new_units:
        attrs["source_units"] = str(units)
    attrs["source_variable"] = name
    da.attrs = attrs
    da.name = canon
    return da


def convert(da: xr.DataArray, ds: xr.Dataset | None, canon: str, name: str, *, period,
            scale: float | Mapping[str, float] | None, source: str, log: list[str],
            declared_units: str | None = None) -> xr.DataArray:
    """One field, as stored, to its canonical units, dimensions and attributes.

    Parameters
    ----------
    da : xarray.DataArray
        The field on ``lat``/``lon`` (normalised), with an optional time axis or ``month``
        dimension and its ``units`` attribute.
    ds : xarray.Dataset or None
        The file's dataset (for the time axis and its calendar); None for a field without one.
    canon : str
        Canonical variable the field is read as.
    name : str
        Its name in the file, for messages and the ``source_variable`` attribute.
    period : str, (int, int) or None
        Years to average a multi-year series over (:func:`~timeslice.readers.timeaxis.to_monthly`).
    scale : float, mapping or None
        Declared multiplier of the stored values (:func:`scale_for`).
    source : str
        File named in messages.
    log : list of str
        Conversion lines are appended to it.
    declared_units : str, optional
        Units used instead of the field's own ``units`` attribute.

    Returns
    -------
    xarray.DataArray
        Named `canon`, ``(month,) lat, lon``, float32 (or float64), in canonical units with
        ``source_units`` and ``source_variable`` attributes.
    """
    attrs = dict(da.attrs)
    units = attrs.get("units")
    if declared_units is not None:
        if units is not None and str(units).strip() != declared_units.strip():
            log.append(f"{canon} ({name}): declared units {declared_units!r} used instead of the "
                       f"file's {str(units)!r}")
        units = declared_units
        attrs["units_declared"] = 1
    s = scale_for(scale, canon)
    if s != 1.0:
        da = da * s
        log.append(f"{canon} ({name}): stored values x {s} (declared scale)")
        attrs["scale_applied"] = s
    tname = time_name(da, ds)
    da = _drop_single_dims(da, tname, name, source)
    kind, factor, offset, new_units = _unit_map(canon, units, name, source, log)
    da = _apply_map(da, ds, tname, canon=canon, name=name, units=units, kind=kind,
                    factor=factor, offset=offset, period=period, source=source, log=log)
    return _finish(da, attrs, canon=canon, name=name, units=units, new_units=new_units)
