"""Climate inputs of one slice to one canonical Dataset, whatever their file format.

Canonical output (docs/architecture.md): ``tasmin``, ``tasmax``, ``tas`` in degC and ``pr`` in
mm month-1 on a ``month`` dimension 1..12; or single fields ``elevation`` (m) and ``ice``
(land-ice area fraction, 0..1); or ``bio1``..``bio19``. ``lat`` ascending, ``lon`` in
[-180, 180). ``attrs["source_files"]`` and ``attrs["harmonise_log"]`` are JSON-encoded lists.

:func:`open_climate` opens each file through the reader registry
(:mod:`timeslice.readers.registry`) by its sniffed format, names and converts its fields with the
shared canonicalisation (:mod:`timeslice.readers.canonical`), joins the files of one variable in
time or by month, and checks the result once for the whole slice.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import xarray as xr

from timeslice.errors import DataError, InputFileError, shorten
from timeslice.grid import normalise_lonlat
from timeslice.readers.canonical import (
    DEFAULT_ALIASES,
    convert,
    identify,
    tagged,
    units_for,
    why_not_taken,
)
from timeslice.readers.filesets import input_files, sniff_format, unsupported_message
from timeslice.readers.registry import ReadOptions, get_reader
from timeslice.readers.timeaxis import (
    calendar_of,
    file_period,
    parse_period,
    time_frequency,
    time_name,
)

__all__ = ["NEGATIVE_PR_TOLERANCE", "check_filled", "open_climate"]

#: Negative monthly precipitation above this magnitude (mm month-1) is an input error, below it
#: rounding (float32 fluxes times ~2.6e6 s give errors of a few 0.001 mm).
NEGATIVE_PR_TOLERANCE = 0.05


@dataclass
class _Slice:
    """What the files of one slice gave, gathered file by file."""

    src: str
    log: list[str] = field(default_factory=list)
    global_attrs: dict = field(default_factory=dict)
    found_names: list[str] = field(default_factory=list)
    #: file variable -> why it is not the canonical variable of the same name (for messages)
    not_taken: dict[str, str] = field(default_factory=dict)
    periods: dict[str, str] = field(default_factory=dict)
    calendars: set[str] = field(default_factory=set)
    time_kinds: set[str] = field(default_factory=set)
    #: raw fields to convert, grouped: one group per variable with a time axis (its files are
    #: joined in time), one per variable and file otherwise
    pieces: dict[str, list[tuple]] = field(default_factory=dict)
    #: converted fields (canonical, field, source) in file order
    items: list[tuple[str, xr.DataArray, str]] = field(default_factory=list)


# ----------------------------------------------------------------------------- per file

def _add_canonical(acc: _Slice, ds: xr.Dataset, path: Path, fsrc: str) -> None:
    """A file its reader already converted (e.g. a raster of 12 monthly bands)."""
    acc.found_names.extend(str(v) for v in ds.data_vars)
    acc.log.extend(json.loads(ds.attrs.get("harmonise_log", "[]")))
    if not acc.global_attrs:
        acc.global_attrs = {k: v for k, v in ds.attrs.items()
                            if k not in ("harmonise_log", "source_files")}
    for k, v in ds.data_vars.items():
        v.attrs["source_file"] = str(path)
        acc.items.append((str(k), v, fsrc))


def _add_raw(acc: _Slice, ds: xr.Dataset, entry, fsrc: str, aliases) -> None:
    """A file as stored: identify its fields and queue them for conversion."""
    p = entry.path
    if not acc.global_attrs:
        acc.global_attrs = dict(ds.attrs)
    acc.found_names.extend(str(v) for v in ds.data_vars)
    fp = file_period(ds)
    if fp is not None:
        acc.periods[str(p)] = fp
    mapping = identify(ds, aliases, fsrc)
    if entry.variable is not None:
        mapping = tagged(ds, mapping, entry.variable, fsrc)
    acc.not_taken.update(why_not_taken(ds, mapping))
    for name in mapping.values():
        tn = time_name(ds[name], ds)
        if tn is not None:
            acc.calendars.add(calendar_of(ds, tn))
            freq = time_frequency(ds[tn].values)
            acc.time_kinds.add("12-step climatology" if ds.sizes[tn] == 12 and freq != "daily"
                               else f"{freq}, {ds.sizes[tn]} steps")
    for canon, name in mapping.items():
        da = normalise_lonlat(ds[name], source=fsrc)
        tn = time_name(da, ds)
        if entry.month is not None:
            da = _one_month(da, tn, entry.month, fsrc, canon)
            tn = None
        acc.pieces.setdefault(canon if tn is not None else f"{canon}|{p}", []).append(
            (canon, da, ds, name, fsrc, tn))


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


def _read_files(paths, options: ReadOptions, source: str | None) -> _Slice:
    """Open every file through the registry entry of its format."""
    src = source or (str(paths[0].path) if len(paths) == 1
                     else f"{paths[0].path} (+{len(paths) - 1} files)")
    acc = _Slice(src)
    for entry in paths:
        p = entry.path
        fsrc = source or str(p)
        kind = sniff_format(p)
        msg = unsupported_message(p, kind)
        if msg:
            raise InputFileError(msg)
        reader = get_reader(kind)
        ds = reader.open(entry, replace(options, source=fsrc))
        if reader.canonical:
            _add_canonical(acc, ds, p, fsrc)
        else:
            _add_raw(acc, ds, entry, fsrc, options.aliases)
    return acc


# ----------------------------------------------------------------------------- joining

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
    cals = {calendar_of(g[2], g[5]) for g in group if g[5] is not None}
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


def _damaged(source: str, err: BaseException) -> InputFileError:
    return InputFileError(
        f"{source}: the header reads but the data cannot be read ({type(err).__name__}: "
        f"{shorten(str(err).splitlines()[0] if str(err) else '', 80)}); the file is damaged or "
        "incomplete: copy or download it again")


def _convert_pieces(acc: _Slice, *, period, scale, units) -> None:
    """Join each group of raw fields and convert it to canonical units."""
    for group in acc.pieces.values():
        canon, da, ds, name, fsrc, tn = group[0]
        if len(group) > 1:
            da, fsrc = _join_in_time(group)
        da.attrs["source_file"] = fsrc
        try:
            conv = convert(da, ds, canon, name, period=period, scale=scale, source=fsrc,
                           log=acc.log, declared_units=units_for(units, canon))
        except (OSError, RuntimeError) as err:  # the data past a readable header
            raise _damaged(fsrc, err) from err
        conv.attrs["source_file"] = fsrc
        acc.items.append((canon, conv, fsrc))


def _partial_months(a: xr.DataArray, b: xr.DataArray) -> bool:
    """True when `a` and `b` hold different months of one variable (one file per month)."""
    if "month" not in a.dims or "month" not in b.dims:
        return False
    if a.sizes["month"] + b.sizes["month"] > 12:
        return False
    if a.shape[1:] != b.shape[1:]:
        return False
    return not set(a["month"].values.tolist()) & set(b["month"].values.tolist())


def _merge(items: list[tuple[str, xr.DataArray, str]]) -> dict[str, xr.DataArray]:
    """One field per variable: months of one variable stacked, a variable given twice refused."""
    out_vars: dict[str, xr.DataArray] = {}
    for canon, da, fsrc in items:
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
    return out_vars


# ----------------------------------------------------------------------------- slice checks

def _check_periods(acc: _Slice, period) -> None:
    """The files' climatology bounds agree with each other and with the slice's `period`."""
    if period is not None and acc.periods:
        try:
            want = "{}-{}".format(*parse_period(period, acc.src))
        except DataError:
            want = None  # a label such as "21ka": nothing to compare
        for f, fp in acc.periods.items():
            if want is not None and fp != want:
                raise DataError(
                    f"{f}: the file is a climatology of {fp} but the slice's period is {want}; "
                    "give the file of that period or correct `period`"
                )
    if len(set(acc.periods.values())) > 1:
        raise DataError(
            f"{acc.src}: the files of one slice disagree on the period "
            f"({', '.join(f'{k}: {v}' for k, v in acc.periods.items())}); give files of one period"
        )


def _check_variables(acc: _Slice, out_vars: Mapping[str, xr.DataArray], require) -> None:
    """Twelve months per monthly variable; something recognised; every required variable."""
    src, found_names, not_taken = acc.src, acc.found_names, acc.not_taken
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
        if canon in out_vars:
            continue
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


def _one_grid(out_vars: dict[str, xr.DataArray], src: str) -> xr.DataArray:
    """Refuse variables on different grids; put all on the first one's coordinates."""
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
    return ref


def check_filled(ds: xr.Dataset, source: str) -> None:
    """Refuse a field without one valid value, and an ice fraction outside 0..1.

    Checked where the data are read, after unit conversion, so no later stage misreads them.

    Parameters
    ----------
    ds : xarray.Dataset
        Canonical fields (``source_file``/``source_variable`` attributes name them).
    source : str
        Named in messages for a field without a ``source_file``.

    Returns
    -------
    None
    """
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


# ----------------------------------------------------------------------------- result

def _res_text(da: xr.DataArray) -> str:
    from timeslice.grid import resolution

    try:
        return f"{resolution(da['lat']):g} x {resolution(da['lon']):g} deg"
    except DataError:
        return "single cell"


def _source_info(acc: _Slice, paths, out_vars, ref, period) -> dict:
    """The ``source_info`` attribute: what was read, for the input table of the report."""
    return {
        "files": [str(p.path) for p in paths],
        "grid": f"{ref['lat'].size} x {ref['lon'].size}",
        "lat_range": [float(ref["lat"].min()), float(ref["lat"].max())],
        "lon_range": [float(ref["lon"].min()), float(ref["lon"].max())],
        "resolution": _res_text(ref),
        "units": {k: v.attrs.get("source_units", v.attrs.get("units", "")) for k, v in out_vars.items()},
        "calendar": sorted(acc.calendars) if acc.calendars else None,
        "time": sorted(acc.time_kinds) if acc.time_kinds else "none",
        "period": (str(period) if period is not None else
                   (next(iter(acc.periods.values())) if acc.periods else None)),
        "variables": {k: v.attrs.get("source_variable", k) for k, v in out_vars.items()},
    }


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
    """Open the climate files of one slice as a canonical Dataset.

    Each file is opened through the reader registry by its format (CF NetCDF, GeoTIFF, ESRI
    ASCII grid, or any registered one); its fields are named and converted by the shared
    canonicalisation.

    Parameters
    ----------
    path : str, path-like, glob pattern or list of those
        One file per slice, or one file per variable.
    aliases : mapping, optional
        Canonical name -> variable name(s) in the file, tried before CF standard names and
        the built-in aliases (:data:`~timeslice.readers.canonical.DEFAULT_ALIASES`).
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
    variable : str, optional
        For GeoTIFF / ESRI ASCII inputs only; see :func:`timeslice.readers.open_raster`.
    units : str or mapping, optional
        Units of the stored values per canonical variable, used instead of the file's own
        ``units`` attribute (with a log line when they differ): for files that do not say, or
        say wrongly.
    band_names : sequence of str, optional
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
    paths = input_files(path)
    options = ReadOptions(aliases=aliases, scale=scale, units=units, variable=variable,
                          band_names=band_names, chunks=chunks)
    acc = _read_files(paths, options, source)
    _convert_pieces(acc, period=period, scale=scale, units=units)
    out_vars = _merge(acc.items)
    _check_periods(acc, period)
    _check_variables(acc, out_vars, require)
    ref = _one_grid(out_vars, acc.src)
    out = xr.Dataset(out_vars)
    if "pr" in out:
        out["pr"] = _check_negative_pr(out["pr"], acc.src, acc.log)
    if check:
        from timeslice.harmonise.plausibility import check_fields

        check_filled(out, acc.src)
        check_fields(out, source=acc.src)
    keep = {k: v for k, v in acc.global_attrs.items() if isinstance(v, (str, int, float))}
    out.attrs.update(keep)
    out.attrs["source_files"] = json.dumps([str(p.path) for p in paths])
    out.attrs["harmonise_log"] = json.dumps(acc.log)
    out.attrs["source_info"] = json.dumps(_source_info(acc, paths, out_vars, ref, period))
    return out
