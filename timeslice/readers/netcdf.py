"""CF NetCDF climate reader: any regular lat-lon CF file to canonical names and units.

Canonical output (docs/architecture.md): ``tasmin``, ``tasmax``, ``tas`` in degC and ``pr`` in
mm month-1 on a ``month`` dimension 1..12; or single fields ``elevation`` (m) and ``ice``
(land-ice area fraction, 0..1); or ``bio1``..``bio19``. ``lat`` ascending, ``lon`` in
[-180, 180). ``attrs["source_files"]`` and ``attrs["harmonise_log"]`` are JSON-encoded lists.
"""

from __future__ import annotations

import glob as _glob
import json
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError, shorten
from timeslice.grid import normalise_lonlat
from timeslice.readers.filesets import InputFile, sniff_format, unsupported_message
from timeslice.harmonise.units import (
    SECONDS_PER_DAY,
    days_in_month,
    parse_units,
    precipitation_conversion,
    temperature_conversion,
)

__all__ = ["DEFAULT_ALIASES", "grid_problem", "open_climate"]

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

_STANDARD_NAMES: dict[str, str] = {
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

_TEMPERATURE = ("tasmin", "tasmax", "tas")
_RASTER_SUFFIXES = {".tif", ".tiff", ".asc", ".gtiff"}
_MONTHLY = ("tasmin", "tasmax", "tas", "pr")

_CANONICAL_ATTRS = {
    "tasmin": {"standard_name": "air_temperature", "long_name": "monthly mean daily minimum near-surface air temperature", "cell_methods": "time: minimum within days time: mean over days"},
    "tasmax": {"standard_name": "air_temperature", "long_name": "monthly mean daily maximum near-surface air temperature", "cell_methods": "time: maximum within days time: mean over days"},
    "tas": {"standard_name": "air_temperature", "long_name": "monthly mean near-surface air temperature"},
    "pr": {"standard_name": "lwe_thickness_of_precipitation_amount", "long_name": "monthly precipitation total"},
    "elevation": {"standard_name": "height_above_mean_sea_level", "long_name": "elevation relative to present sea level (negative below)"},
    "ice": {"standard_name": "land_ice_area_fraction", "long_name": "land ice area fraction"},
}


def _expand_paths(path) -> list[InputFile]:
    """Files of one input: a path, a glob, a list of them, or :class:`InputFile` entries."""
    if isinstance(path, InputFile):
        return [path]
    if isinstance(path, (str, os.PathLike)):
        items = [path]
    elif isinstance(path, Sequence):
        items = list(path)
    else:
        raise InputFileError(f"climate input {path!r}: expected a path, a glob or a list of paths")
    out: list[InputFile] = []
    for item in items:
        if isinstance(item, InputFile):
            out.append(item)
            continue
        text = os.fspath(item)
        if any(ch in text for ch in "*?["):
            found = sorted(_glob.glob(text))
            if not found:
                raise InputFileError(f"{text}: the pattern matches no file; check the path")
            out.extend(InputFile(Path(f)) for f in found)
        else:
            p = Path(text)
            if p.is_dir():
                raise InputFileError(f"{text}: is a folder; give the files in it (e.g. '{text}/*.nc')")
            if not p.is_file():
                raise InputFileError(f"{text}: file not found; check the path in the config")
            out.append(InputFile(p))
    return out


def grid_problem(ds: xr.Dataset, *, source: str) -> str | None:
    """One-line refusal for a grid timeslice cannot read as a regular lat-lon grid, else None.

    Rotated-pole and projected grids (regional climate models) and curvilinear grids (2-D
    latitude/longitude) must be remapped to a regular latitude-longitude grid first.
    """
    remap = ("regrid it to a regular latitude-longitude grid first, e.g. `cdo remapbil,r720x360 "
             "in.nc out.nc` (or a grid description of your region), then give that file")
    for name, var in ds.variables.items():
        gm = str(var.attrs.get("grid_mapping_name", "")).lower()
        if gm == "rotated_latitude_longitude":
            return f"{source}: the file is on a rotated-pole grid (typical of regional climate models); {remap}"
        if gm and gm != "latitude_longitude":
            return f"{source}: the file is on a projected grid ({gm!r}); {remap}"
    for name, var in ds.variables.items():
        sn = str(var.attrs.get("standard_name", "")).lower()
        if sn in ("grid_latitude", "grid_longitude") or str(name) in ("rlat", "rlon"):
            return f"{source}: the file is on a rotated-pole grid ({name!r}); {remap}"
    for name, var in ds.variables.items():
        sn = str(var.attrs.get("standard_name", "")).lower()
        low = str(name).lower()
        if (sn in ("latitude", "longitude") or low in ("lat", "lon", "latitude", "longitude",
                                                      "nav_lat", "nav_lon")) and var.ndim == 2:
            return (f"{source}: the file is on a curvilinear grid (2-D {name!r}); {remap}")
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


def _decode_months_since(ds: xr.Dataset) -> xr.Dataset:
    """Decode time axes in "months since ..." (not decodable by cftime outside 360_day):
    step k is month k after the reference, dated on the 15th."""
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


def _open_one(path: Path, chunks) -> xr.Dataset:
    msg = unsupported_message(path, sniff_format(path))
    if msg:
        raise InputFileError(msg)
    try:
        ds = xr.open_dataset(
            path,
            decode_times=xr.coders.CFDatetimeCoder(use_cftime=True),
            chunks=chunks,
        )
    except ValueError as err:
        if "decode time" not in str(err):
            raise InputFileError(
                f"{path}: cannot be read as NetCDF ({shorten(str(err).splitlines()[0], 120)}); "
                "give a CF NetCDF file"
            ) from err
        # e.g. "months since" in a standard calendar: decode those axes ourselves
        try:
            ds = xr.open_dataset(path, decode_times=False, chunks=chunks)
        except (OSError, ValueError, RuntimeError) as err2:
            raise InputFileError(
                f"{path}: cannot be read as NetCDF ({shorten(str(err2).splitlines()[0], 120)}); "
                "give a CF NetCDF file"
            ) from err2
        ds = _decode_months_since(ds)
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


def _aux_names(ds: xr.Dataset) -> set[str]:
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


def _identify(ds: xr.Dataset, aliases: Mapping[str, object] | None, source: str) -> dict[str, str]:
    """Map canonical name -> file variable name."""
    aux = _aux_names(ds)
    candidates = [str(v) for v in ds.data_vars if str(v) not in aux and ds[v].ndim >= 2]
    found: dict[str, str] = {}
    # 1. explicit user mapping
    for canon, names in (aliases or {}).items():
        names = [names] if isinstance(names, str) else list(names)  # type: ignore[arg-type]
        for n in names:
            if n in ds.data_vars:
                found[canon] = n
                break
    taken = set(found.values())
    # 2. CF standard names (tasmin/tasmax told apart by cell_methods)
    for v in candidates:
        if v in taken:
            continue
        sn = str(ds[v].attrs.get("standard_name", "")).lower()
        canon = _STANDARD_NAMES.get(sn)
        if sn == "air_temperature":
            cm = str(ds[v].attrs.get("cell_methods", "")).lower()
            low = v.lower()
            if "minimum" in cm or low in DEFAULT_ALIASES["tasmin"]:
                canon = "tasmin"
            elif "maximum" in cm or low in DEFAULT_ALIASES["tasmax"]:
                canon = "tasmax"
            else:
                canon = "tas"
        if canon and canon not in found:
            found[canon] = v
            taken.add(v)
    # 3. default aliases on names
    for canon, names in DEFAULT_ALIASES.items():
        if canon in found:
            continue
        for v in candidates:
            if v not in taken and v.lower() in names:
                found[canon] = v
                taken.add(v)
                break
    return found


def _why_not_taken(ds: xr.Dataset, mapping: Mapping[str, str]) -> dict[str, str]:
    """For file variables not read as the canonical variable of their own name: why."""
    used = {name: canon for canon, name in mapping.items()}
    aux = _aux_names(ds)
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


def _time_name(da: xr.DataArray, ds: xr.Dataset | None) -> str | None:
    if ds is None:
        return None
    for d in da.dims:
        if d in ds.coords:
            c = ds[d]
            if c.attrs.get("standard_name") == "time" or c.attrs.get("axis") == "T" or d == "time":
                return str(d)
            if c.dtype == object or np.issubdtype(c.dtype, np.datetime64):
                return str(d)
        elif d == "time":
            return str(d)
    return None


def _calendar(ds: xr.Dataset, tname: str) -> str:
    t = ds[tname]
    cal = t.encoding.get("calendar") or t.attrs.get("calendar")
    if cal is None and t.size and hasattr(t.values.flat[0], "calendar"):
        cal = t.values.flat[0].calendar
    return str(cal or "standard").lower()


def _file_period(ds: xr.Dataset) -> str | None:
    """The years a file's climatology describes, from CF climatology bounds (or None)."""
    for name in ds.coords:
        c = ds[name]
        ref = c.attrs.get("climatology") or c.encoding.get("climatology")
        if ref and ref in ds.variables:
            vals = np.asarray(ds[ref].values).ravel()
            if np.issubdtype(vals.dtype, np.number):
                import cftime

                t_units = ds[ref].attrs.get("units") or c.encoding.get("units")
                if not t_units:
                    return None
                vals = cftime.num2date(vals, t_units, calendar=_calendar(ds, str(name)))
            cal = _calendar(ds, str(name))
            first = vals[0] if vals.size else None
            if getattr(first, "calendar", cal) not in (cal, "") and ds[ref].encoding.get("units"):
                # bounds decoded without the parent's calendar: redo it with the right one
                import cftime

                units_b = ds[ref].encoding["units"]
                nums = cftime.date2num(list(vals), units_b, calendar=first.calendar)
                vals = np.asarray(cftime.num2date(nums, units_b, calendar=cal)).ravel()
            try:
                years = [v.year for v in vals]
                months = [v.month for v in vals]
                days = [v.day for v in vals]
            except AttributeError:
                return None
            y0 = min(years)
            iy = int(np.argmax(years))
            # an end bound of 1 January closes the previous year
            y1 = years[iy] - (1 if (months[iy], days[iy]) == (1, 1) else 0)
            return f"{y0}-{y1}"
    return None


def _parse_period(period, source: str) -> tuple[int, int]:
    if isinstance(period, (tuple, list)) and len(period) == 2:
        return int(period[0]), int(period[1])
    m = re.fullmatch(r"\s*(-?\d+)\s*[-/:]\s*(-?\d+)\s*", str(period))
    if not m:
        raise DataError(
            f"{source}: `period` {period!r} is not of the form 'YYYY-YYYY' (e.g. '2041-2060')"
        )
    a, b = int(m.group(1)), int(m.group(2))
    if b < a:
        raise DataError(f"{source}: `period` {period!r} ends before it starts; give 'first-last'")
    return a, b


def _to_monthly(
    da: xr.DataArray,
    tname: str,
    calendar: str,
    *,
    period,
    kind: str | None,
    factor: float,
    offset: float,
    source: str,
    variable: str,
    log: list[str],
) -> xr.DataArray:
    """Reduce a time axis to a 12-month climatology and apply the unit map."""
    times = da[tname].values
    try:
        months = np.array([t.month for t in times])
        years = np.array([t.year for t in times])
    except AttributeError as err:
        raise DataError(
            f"{source}: time axis {tname!r} of {variable!r} cannot be decoded into dates; "
            "give CF `units` ('days since ...') and `calendar` attributes"
        ) from err
    n = times.size
    freq = time_frequency(times)
    is_clim = n == 12 and sorted(months.tolist()) == list(range(1, 13)) and freq != "daily"
    if freq == "annual" and not is_clim:
        raise DataError(
            f"{source}: {variable!r} is annual ({n} yearly steps, {years.min()}-{years.max()}); "
            "monthly climatologies and bioclimatic variables need monthly (or daily) values: "
            "give the monthly file of this variable"
        )
    if is_clim:
        if kind == "per_second":
            secs = days_in_month(calendar, source=source)[months - 1] * SECONDS_PER_DAY
            mult = xr.DataArray(secs * factor, dims=(tname,))
            da = da * mult
            log.append(
                f"{variable}: rate x days per month of calendar {calendar!r} "
                f"(12-step climatology, {int(days_in_month(calendar).sum())}-day year)"
            )
        else:
            da = offset + factor * da if (factor != 1.0 or offset != 0.0) else da
        da = da.assign_coords(month=(tname, months)).swap_dims({tname: "month"})
        da = da.drop_vars(tname).sortby("month")
        return da
    if period is None:
        _too_few_months(n, freq, months, years, source, variable)
        raise DataError(
            f"{source}: {variable!r} is a {freq} series of {n} steps ({years.min()}-"
            f"{years.max()}), not a 12-month climatology; give the slice's `period` (e.g. "
            "'1971-2000') to average over"
        )
    y0, y1 = _parse_period(period, source)
    if years.min() > y0 or years.max() < y1:
        _too_few_months(n, freq, months, years, source, variable)
        raise DataError(
            f"{source}: period {y0}-{y1} is outside the file's time range "
            f"{years.min()}-{years.max()}; choose a period inside it"
        )
    sel = (years >= y0) & (years <= y1)
    sub = da.isel({tname: np.nonzero(sel)[0]})
    m_sel, y_sel = months[sel], years[sel]
    present = set(m_sel.tolist())
    if present != set(range(1, 13)):
        missing = sorted(set(range(1, 13)) - present)
        raise DataError(
            f"{source}: {variable!r} has no data for months {missing} in period {y0}-{y1}; "
            "the time axis must give all 12 months"
        )
    if kind == "per_second":
        secs = np.array(
            [days_in_month(calendar, int(y), source=source)[m - 1] for y, m in zip(y_sel, m_sel)]
        ) * SECONDS_PER_DAY
        sub = sub * xr.DataArray(secs * factor, dims=(tname,))
    else:
        sub = offset + factor * sub if (factor != 1.0 or offset != 0.0) else sub
    sub = sub.assign_coords(month=(tname, m_sel))
    clim = sub.groupby("month").mean(tname, keep_attrs=True)
    span = f"{y0}" if y0 == y1 else f"{y0}-{y1}"
    log.append(
        f"{variable}: {freq}, {int(sel.sum())} steps, {calendar}, averaged to 12 monthly means "
        f"over {span}"
    )
    return clim


def _too_few_months(n, freq, months, years, source, variable) -> None:
    """Fewer steps than a year has months: incomplete, whatever `period` says."""
    if n < 12 and freq != "daily":
        missing = sorted(set(range(1, 13)) - set(months.tolist()))
        raise DataError(
            f"{source}: {variable!r} has only {n} monthly step{'s' if n != 1 else ''} "
            f"({years.min()}-{months[0]:02d} to {years[-1]}-{months[-1]:02d}), missing months "
            f"{missing}, so not a 12-month climatology; give the file with all twelve months"
        )


def time_frequency(times) -> str:
    """``"daily"``, ``"sub-daily"``, ``"monthly"``, ``"annual"`` or ``"irregular"`` from the
    median spacing of a decoded time axis (cftime or datetime64)."""
    n = len(times)
    if n < 2:
        return "single-step"
    try:
        diffs = np.array([(b - a).total_seconds() for a, b in zip(times[:-1], times[1:])])
    except (AttributeError, TypeError):
        diffs = np.diff(np.asarray(times, dtype="datetime64[s]")).astype(float)
    days = float(np.median(np.abs(diffs))) / 86400.0
    if days < 0.9:
        return "sub-daily"
    if days < 1.5:
        return "daily"
    if 27.0 <= days <= 32.0:
        return "monthly"
    if 359.0 <= days <= 367.0:
        return "annual"
    return "irregular"


def open_climate(
    path,
    *,
    aliases: Mapping[str, str | Sequence[str]] | None = None,
    period=None,
    scale: float | Mapping[str, float] | None = None,
    source: str | None = None,
    require: Sequence[str] | None = None,
    chunks=None,
    variable: str | None = None,
    units: str | Mapping[str, str] | None = None,
    band_names: Sequence[str] | None = None,
    check: bool = True,
) -> xr.Dataset:
    """Open CF NetCDF climate data as a canonical Dataset.

    Parameters
    ----------
    path : str, path-like, glob pattern or list of those
        One file per slice, or one file per variable.
    aliases : mapping, optional
        Canonical name -> variable name(s) in the file, tried before CF standard names and
        the built-in aliases (:data:`DEFAULT_ALIASES`).
    period : str or (int, int), optional
        ``"YYYY-YYYY"``: average a multi-year monthly series over these years (inclusive).
    scale : float or mapping, optional
        Multiplier applied to the stored values before unit conversion (for integer-scaled
        layers, e.g. 0.1 for degC x 10); a mapping gives one per canonical variable.
    source : str, optional
        Name used in messages (default: the file path).
    require : sequence of str, optional
        Canonical variables that must be present.
    chunks : optional
        Passed to :func:`xarray.open_dataset` (e.g. ``{}`` or ``{"lat": 256}`` for dask).
    units : str or mapping, optional
        Units of the stored values per canonical variable, used instead of the file's own
        ``units`` attribute (with a log line when they differ): for files that do not say, or
        say wrongly.
    variable, band_names : optional
        For GeoTIFF / ESRI ASCII inputs only; see :func:`timeslice.readers.open_raster`.
    check : bool, default True
        Stop when a converted field is physically implausible
        (:func:`timeslice.harmonise.plausibility.check_fields`).

    Returns
    -------
    xarray.Dataset
        Canonical variables, degC and mm month-1 on ``month`` 1..12, ``elevation`` in m,
        ``ice`` as a fraction 0..1, lat ascending, lon in [-180, 180).

    Notes
    -----
    Precipitation mass flux is divided by the density of water (1000 kg m-3) and multiplied
    by the seconds of each month in the file's calendar. A 12-step climatology uses the
    calendar's non-leap month lengths (all_leap: February 29; 360_day: 30 days); a multi-year
    series uses each year's own month lengths before averaging.
    """
    paths = _expand_paths(path)
    src = source or (str(paths[0].path) if len(paths) == 1
                     else f"{paths[0].path} (+{len(paths) - 1} files)")
    log: list[str] = []
    import netCDF4

    netCDF4.set_chunk_cache(4 * 2**20)  # small per-variable cache: bounded memory (DESIGN.md)
    out_vars: dict[str, xr.DataArray] = {}
    global_attrs: dict = {}
    found_names: list[str] = []
    #: file variable -> why it is not the canonical variable of the same name (for messages)
    not_taken: dict[str, str] = {}
    periods: dict[str, str] = {}
    calendars: set[str] = set()
    time_kinds: set[str] = set()
    pieces: dict[str, list[tuple]] = {}
    items_all: list[tuple[str, xr.DataArray, str]] = []
    for entry in paths:
        p = entry.path
        fsrc = source or str(p)
        kind = sniff_format(p)
        msg = unsupported_message(p, kind)
        if msg:
            raise InputFileError(msg)
        if kind == "raster":
            from timeslice.readers.raster import open_raster

            canon_ds = open_raster(
                p, variable=entry.variable or variable, band_names=band_names, units=units,
                scale=scale, source=fsrc, aliases=aliases, month=entry.month,
            )
            found_names.extend(str(v) for v in canon_ds.data_vars)
            log.extend(json.loads(canon_ds.attrs.get("harmonise_log", "[]")))
            if not global_attrs:
                global_attrs = {k: v for k, v in canon_ds.attrs.items()
                                if k not in ("harmonise_log", "source_files")}
            for k, v in canon_ds.data_vars.items():
                v.attrs["source_file"] = str(p)
                items_all.append((str(k), v, fsrc))
            continue
        ds = _open_one(p, chunks)
        if not global_attrs:
            global_attrs = dict(ds.attrs)
        found_names.extend(str(v) for v in ds.data_vars)
        fp = _file_period(ds)
        if fp is not None:
            periods[str(p)] = fp
        mapping = _identify(ds, aliases, fsrc)
        if entry.variable is not None:
            mapping = _tagged(ds, mapping, entry.variable, fsrc)
        not_taken.update(_why_not_taken(ds, mapping))
        for name in mapping.values():
            tn = _time_name(ds[name], ds)
            if tn is not None:
                calendars.add(_calendar(ds, tn))
                freq = time_frequency(ds[tn].values)
                time_kinds.add("12-step climatology" if ds.sizes[tn] == 12 and freq != "daily"
                               else f"{freq}, {ds.sizes[tn]} steps")
        for canon, name in mapping.items():
            da = normalise_lonlat(ds[name], source=fsrc)
            tn = _time_name(da, ds)
            if entry.month is not None:
                da = _one_month(da, tn, entry.month, fsrc, canon)
                tn = None
            pieces.setdefault(canon if tn is not None else f"{canon}|{p}", []).append(
                (canon, da, ds, name, fsrc, tn))
    for group in pieces.values():
        canon, da, ds, name, fsrc, tn = group[0]
        if len(group) > 1:
            da, fsrc = _join_in_time(group)
        da.attrs["source_file"] = fsrc
        try:
            conv = _convert(da, ds, canon, name, period=period, scale=scale, source=fsrc,
                            log=log, declared_units=_units_for(units, canon))
        except (OSError, RuntimeError) as err:  # the data past a readable header
            raise _damaged(fsrc, err) from err
        conv.attrs["source_file"] = fsrc
        items_all.append((canon, conv, fsrc))
    for canon, da, fsrc in items_all:
        if canon in out_vars and _partial_months(out_vars[canon], da):
            out_vars[canon] = xr.concat(
                [out_vars[canon], da.assign_coords(lat=out_vars[canon]["lat"],
                                                   lon=out_vars[canon]["lon"])],
                dim="month", combine_attrs="override",
            ).sortby("month")
            continue
        if canon in out_vars:
            raise DataError(
                f"{fsrc}: variable {canon!r} is given twice (also in "
                f"{out_vars[canon].attrs.get('source_file', 'an earlier file')}); give each "
                "variable once (or each month once)"
            )
        out_vars[canon] = da
    if period is not None and periods:
        try:
            want = "{}-{}".format(*_parse_period(period, src))
        except DataError:
            want = None  # a label such as "21ka": nothing to compare
        for f, fp in periods.items():
            if want is not None and fp != want:
                raise DataError(
                    f"{f}: the file is a climatology of {fp} but the slice's period is {want}; "
                    "give the file of that period or correct `period`"
                )
    if len(set(periods.values())) > 1:
        raise DataError(
            f"{src}: the files of one slice disagree on the period "
            f"({', '.join(f'{k}: {v}' for k, v in periods.items())}); give files of one period"
        )
    for canon, da in out_vars.items():
        if "month" in da.dims and da.sizes["month"] != 12:
            missing = sorted(set(range(1, 13)) - set(int(m) for m in da["month"].values))
            raise DataError(
                f"{src}: {canon!r} has {da.sizes['month']} months, missing {missing}; give "
                "all twelve monthly files"
            )
    if not out_vars:
        raise DataError(
            f"{src}: no climate variable recognised (found "
            f"{shorten(str(sorted(set(found_names))), 120) if found_names else 'none'}); "
            "map them with `aliases`, e.g. tasmin = 'tn'"
        )
    for canon in require or ():
        if canon not in out_vars:
            near = [v for v in dict.fromkeys(found_names)
                    if v.lower() in (canon, *DEFAULT_ALIASES.get(canon, ())) and v in not_taken]
            if near:
                raise DataError(
                    f"{src}: required variable {canon!r} is not usable: the file variable "
                    f"{near[0]!r} {not_taken[near[0]]}"
                )
            raise DataError(
                f"{src}: required variable {canon!r} is missing (found "
                f"{shorten(str(sorted(set(found_names))), 120)}); add it or map it with "
                "`aliases`"
            )
    grids = {k: (v["lat"].size, v["lon"].size) for k, v in out_vars.items()}
    ref = next(iter(out_vars.values()))
    for k, v in out_vars.items():
        if grids[k] != grids[next(iter(out_vars))] or not (
            np.allclose(v["lat"].values, ref["lat"].values)
            and np.allclose(v["lon"].values, ref["lon"].values)
        ):
            raise DataError(
                f"{src}: variables disagree on the grid ({grids}); give all variables of a "
                "slice on one grid"
            )
        out_vars[k] = v.assign_coords(lat=ref["lat"], lon=ref["lon"])
    out = xr.Dataset(out_vars)
    if "pr" in out:
        out["pr"] = _check_negative_pr(out["pr"], src, log)
    if check:
        from timeslice.harmonise.plausibility import check_fields

        _check_filled(out, src)
        check_fields(out, source=src)
    info = {
        "files": [str(p.path) for p in paths],
        "grid": f"{ref['lat'].size} x {ref['lon'].size}",
        "lat_range": [float(ref["lat"].min()), float(ref["lat"].max())],
        "lon_range": [float(ref["lon"].min()), float(ref["lon"].max())],
        "resolution": _res_text(ref),
        "units": {k: v.attrs.get("source_units", v.attrs.get("units", "")) for k, v in out_vars.items()},
        "calendar": sorted(calendars) if calendars else None,
        "time": sorted(time_kinds) if time_kinds else "none",
        "period": (str(period) if period is not None else
                   (next(iter(periods.values())) if periods else None)),
        "variables": {k: v.attrs.get("source_variable", k) for k, v in out_vars.items()},
    }
    keep = {k: v for k, v in global_attrs.items() if isinstance(v, (str, int, float))}
    out.attrs.update(keep)
    out.attrs["source_files"] = json.dumps([str(p.path) for p in paths])
    out.attrs["harmonise_log"] = json.dumps(log)
    out.attrs["source_info"] = json.dumps(info)
    return out


def _damaged(source: str, err: BaseException) -> InputFileError:
    return InputFileError(
        f"{source}: the header reads but the data cannot be read ({type(err).__name__}: "
        f"{shorten(str(err).splitlines()[0] if str(err) else '', 80)}); the file is damaged or "
        "incomplete: copy or download it again")


def _check_filled(ds: xr.Dataset, source: str) -> None:
    """Refuse a field without one valid value, and an ice fraction outside 0..1 after its unit
    conversion, naming the file (checked where it is read, so no later stage misreads it)."""
    for canon, da in ds.data_vars.items():
        try:
            values = np.asarray(da.values, dtype=float)
        except (OSError, RuntimeError) as err:  # the data past a readable header
            raise _damaged(da.attrs.get("source_file", source), err) from err
        shown = da.attrs.get("source_variable", canon)
        name = f"{canon!r}" if shown == canon else f"{canon!r} ({shown!r})"
        if not np.isfinite(values).any():
            raise DataError(
                f"{da.attrs.get('source_file', source)}: {name} has no valid value (every cell "
                "is missing or equals the fill value); check the file's _FillValue / "
                "missing_value, or give another file")
        if canon == "ice":
            vmax = float(np.nanmax(values))
            vmin = float(np.nanmin(values))
            if vmax > 1.0 + 1e-6 or vmin < -1e-6:
                was = da.attrs.get("source_units", da.attrs.get("units", ""))
                stored = f"{vmin * 100:g}..{vmax * 100:g} %" if was in ("%", "percent") else \
                    f"{vmin:g}..{vmax:g}"
                fix = ("fix the values" if was in ("%", "percent") else
                       "if the file is in percent, declare it (`units = {ice = \"%\"}`)")
                raise DataError(
                    f"{da.attrs.get('source_file', source)}: ice cover {name} runs {stored} "
                    f"(units {was or 'none'!r}), outside 0..100 % (fraction 0..1); {fix}")


#: Negative monthly precipitation above this magnitude (mm month-1) is an input error, below it
#: rounding (float32 fluxes times ~2.6e6 s give errors of a few 0.001 mm).
NEGATIVE_PR_TOLERANCE = 0.05


def _check_negative_pr(pr: xr.DataArray, source: str, log: list[str]) -> xr.DataArray:
    n_bad = int((pr < -NEGATIVE_PR_TOLERANCE).sum())
    if n_bad:
        raise DataError(
            f"{source}: precipitation is negative beyond rounding in {n_bad} cell-months "
            f"(min {float(pr.min()):.3g} mm month-1); check the units and sign convention of 'pr'"
        )
    n_small = int((pr < 0).sum())
    if n_small:
        log.append(f"pr: {n_small} cell-months of small negative values (rounding) set to 0")
        attrs = dict(pr.attrs)
        pr = pr.clip(min=0.0)
        pr.attrs = attrs
    return pr


def _res_text(da: xr.DataArray) -> str:
    from timeslice.grid import resolution

    try:
        return f"{resolution(da['lat']):g} x {resolution(da['lon']):g} deg"
    except DataError:
        return "single cell"


def _partial_months(a: xr.DataArray, b: xr.DataArray) -> bool:
    """True when `a` and `b` hold different months of one variable (one file per month)."""
    if "month" not in a.dims or "month" not in b.dims:
        return False
    if a.sizes["month"] + b.sizes["month"] > 12:
        return False
    if a.shape[1:] != b.shape[1:]:
        return False
    return not set(a["month"].values.tolist()) & set(b["month"].values.tolist())


def _units_for(units, canon: str) -> str | None:
    """Declared units of one canonical variable (a mapping per variable, or one string)."""
    if units is None:
        return None
    if isinstance(units, Mapping):
        value = units.get(canon)
        return None if value is None else str(value)
    return str(units)


def _tagged(ds: xr.Dataset, mapping: dict[str, str], canon: str, source: str) -> dict[str, str]:
    """Keep only the variable a ``{variable}`` pattern says the file holds."""
    if canon in mapping:
        return {canon: mapping[canon]}
    aux = _aux_names(ds)
    data = [str(v) for v in ds.data_vars if str(v) not in aux and ds[v].ndim >= 2]
    if len(data) == 1:
        return {canon: data[0]}
    raise DataError(
        f"{source}: the file pattern says it holds {canon!r}, but none of its variables "
        f"({', '.join(data) or 'none'}) is recognisable as {canon!r}; map it with "
        f"aliases = {{{canon} = \"NAME\"}}"
    )


def _one_month(da: xr.DataArray, tname: str | None, month: int, source: str,
               canon: str) -> xr.DataArray:
    """A file of one month (named by a ``{month}`` pattern) as a one-month layer."""
    if "month" in da.dims:
        if da.sizes["month"] != 1:
            raise DataError(
                f"{source}: the pattern names month {month} but {canon!r} has "
                f"{da.sizes['month']} months; give one file per month or drop {{month}}"
            )
        return da.assign_coords(month=[month])
    if tname is not None:
        if da.sizes[tname] != 1:
            raise DataError(
                f"{source}: the pattern names month {month} but {canon!r} has "
                f"{da.sizes[tname]} time steps; give one file per month or drop {{month}}"
            )
        da = da.isel({tname: 0}, drop=True)
    return da.expand_dims(month=[month])


def _join_in_time(group: list[tuple]) -> tuple[xr.DataArray, str]:
    """Concatenate the files of one variable (one per 5-20 years, as archives ship them)."""
    canon, first, ds0, name0, src0, tn = group[0]
    names = [g[4] for g in group]
    shown = f"{Path(names[0]).name} (+{len(names) - 1} files)"
    units = {str(g[1].attrs.get("units")) for g in group}
    if len(units) > 1:
        raise DataError(
            f"{shown}: the files of {canon!r} disagree on units ({', '.join(sorted(units))}); "
            "give files of one units convention per input"
        )
    cals = {_calendar(g[2], g[5]) for g in group if g[5] is not None}
    if len(cals) > 1:
        raise DataError(
            f"{shown}: the files of {canon!r} use different calendars ({', '.join(sorted(cals))}); "
            "give files of one model run"
        )
    for g in group[1:]:
        same = (g[1].sizes.get("lat") == first.sizes.get("lat")
                and g[1].sizes.get("lon") == first.sizes.get("lon")
                and np.allclose(g[1]["lat"].values, first["lat"].values, atol=1e-4)
                and np.allclose(g[1]["lon"].values, first["lon"].values, atol=1e-4))
        if not same:
            raise DataError(
                f"{g[4]}: its grid differs from {Path(src0).name} ({canon!r}); give the files of "
                "one variable on one grid"
            )
    parts = [g[1].rename({g[5]: tn}) if g[5] != tn else g[1] for g in group]
    joined = xr.concat(parts, dim=tn, combine_attrs="override", coords="minimal",
                       compat="override", join="override")
    order = np.argsort(np.array([t for t in joined[tn].values]), kind="stable")
    joined = joined.isel({tn: order})
    times = joined[tn].values
    dup = [str(a) for a, b in zip(times[:-1], times[1:]) if a == b]
    if dup:
        raise DataError(
            f"{shown}: the files of {canon!r} overlap in time (e.g. {dup[0]} twice); give each "
            "period once"
        )
    return joined, shown


def _scale_for(scale, canon: str) -> float:
    if scale is None:
        return 1.0
    if isinstance(scale, Mapping):
        return float(scale.get(canon, 1.0))
    return float(scale)


def _convert(da, ds, canon, name, *, period, scale, source, log,
             declared_units: str | None = None) -> xr.DataArray:
    attrs = dict(da.attrs)
    units = attrs.get("units")
    if declared_units is not None:
        if units is not None and str(units).strip() != declared_units.strip():
            log.append(f"{canon} ({name}): declared units {declared_units!r} used instead of the "
                       f"file's {str(units)!r}")
        units = declared_units
        attrs["units_declared"] = 1
    s = _scale_for(scale, canon)
    if s != 1.0:
        da = da * s
        log.append(f"{canon} ({name}): stored values x {s} (declared scale)")
        attrs["scale_applied"] = s
    tname = _time_name(da, ds)
    extra = [d for d in da.dims if d not in ("lat", "lon", tname, "month")]
    for d in extra:
        if da.sizes[d] == 1:
            da = da.isel({d: 0}, drop=True)
        else:
            raise DataError(
                f"{source}: variable {name!r} has an extra dimension {d!r} of size "
                f"{da.sizes[d]}; select one level before reading"
            )
    kind, factor, offset = None, 1.0, 0.0
    if canon in _TEMPERATURE:
        offset, factor = temperature_conversion(units, variable=name, source=source)
        new_units = "degC"
        if (offset, factor) != (0.0, 1.0):
            log.append(f"{canon} ({name}): {units} -> degC")
    elif canon == "pr":
        kind, factor = precipitation_conversion(units, variable=name, source=source)
        new_units = "mm month-1"
        if kind == "per_month" and factor != 1.0:
            log.append(f"{canon} ({name}): {units} -> mm month-1")
        elif kind == "per_second":
            log.append(f"{canon} ({name}): {units} -> mm month-1")
    elif canon == "elevation":
        u = parse_units(units or "m", variable=name, source=source)
        from cf_xarray.units import units as ureg

        if u.dimensionality != ureg.m.dimensionality:
            raise DataError(
                f"{source}: variable {name!r} has units {units!r}, not a length; expected m"
            )
        factor = float(ureg.Quantity(1.0, u).to("m").magnitude)
        new_units = "m"
    elif canon == "ice":
        text = str(units or "1").strip()
        if text in {"%", "percent"}:
            factor = 0.01
            log.append(f"ice ({name}): % -> fraction")
        elif text not in {"1", "", "fraction", "0-1"}:
            raise DataError(
                f"{source}: variable {name!r} has units {units!r}; expected '%' or '1' (fraction)"
            )
        new_units = "1"
    else:  # bio layers and anything else: keep units
        new_units = units if units is not None else ""
    if tname is not None and canon not in _MONTHLY and da.sizes[tname] == 1:
        da = da.isel({tname: 0}, drop=True)  # e.g. a fixed field (orography) with one time step
        tname = None
    if tname is not None:
        da = _to_monthly(
            da, tname, _calendar(ds, tname), period=period, kind=kind, factor=factor,
            offset=offset, source=source, variable=canon, log=log,
        )
    elif "month" in da.dims:
        if kind == "per_second":
            secs = days_in_month("standard", source=source) * SECONDS_PER_DAY
            da = da * xr.DataArray(secs * factor, dims=("month",),
                                   coords={"month": da["month"]})
            log.append(f"{canon}: no time axis; standard-calendar month lengths assumed")
        elif factor != 1.0 or offset != 0.0:
            da = offset + factor * da
    elif canon in _MONTHLY:
        if kind == "per_second":
            raise DataError(
                f"{source}: variable {name!r} is a rate ({units}) without a time axis; "
                "give a monthly time axis or units per month"
            )
        if factor != 1.0 or offset != 0.0:
            da = offset + factor * da
    elif factor != 1.0 or offset != 0.0:
        da = offset + factor * da
    if "month" in da.dims:
        da = da.assign_coords(month=np.asarray(da["month"].values, dtype=int))
        da = da.transpose("month", "lat", "lon")
    else:
        da = da.transpose("lat", "lon")
    if np.issubdtype(da.dtype, np.floating) and da.dtype != np.float64:
        da = da.astype(np.float32)
    for k in ("units", "scale_factor", "add_offset", "_FillValue", "missing_value",
              "valid_range", "valid_min", "valid_max", "cell_methods", "standard_name",
              "source_file"):
        attrs.pop(k, None)
    attrs.update(_CANONICAL_ATTRS.get(canon, {}))
    attrs["units"] = new_units
    if units is not None and str(units) != new_units:
        attrs["source_units"] = str(units)
    attrs["source_variable"] = name
    da.attrs = attrs
    da.name = canon
    return da
