"""Time axes of climate fields: which dimension is time, its calendar and frequency, the years a
climatology describes, and the reduction of a monthly (or daily) series to 12 monthly means.

Format-neutral: works on any decoded xarray time axis (cftime dates or datetime64), so every
reader shares it.
"""

from __future__ import annotations

import re

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.units import SECONDS_PER_DAY, days_in_month

__all__ = [
    "calendar_of",
    "file_period",
    "parse_period",
    "time_frequency",
    "time_name",
    "to_monthly",
]


def time_name(da: xr.DataArray, ds: xr.Dataset | None) -> str | None:
    """The time dimension of a field, or None.

    Parameters
    ----------
    da : xarray.DataArray
    ds : xarray.Dataset or None
        The dataset holding the coordinates of `da`; None: no time axis.

    Returns
    -------
    str or None
    """
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


def calendar_of(ds: xr.Dataset, tname: str) -> str:
    """The CF calendar of a time axis (lower case; ``"standard"`` when none is given).

    Parameters
    ----------
    ds : xarray.Dataset
    tname : str
        The time coordinate.

    Returns
    -------
    str
    """
    t = ds[tname]
    cal = t.encoding.get("calendar") or t.attrs.get("calendar")
    if cal is None and t.size and hasattr(t.values.flat[0], "calendar"):
        cal = t.values.flat[0].calendar
    return str(cal or "standard").lower()


def _bound_dates(ds: xr.Dataset, name: str, ref: str):
    """The decoded climatology bounds of coordinate `name` (None when undecodable)."""
    import cftime

    c = ds[name]
    vals = np.asarray(ds[ref].values).ravel()
    cal = calendar_of(ds, name)
    if np.issubdtype(vals.dtype, np.number):
        t_units = ds[ref].attrs.get("units") or c.encoding.get("units")
        if not t_units:
            return None
        vals = cftime.num2date(vals, t_units, calendar=cal)
    first = vals[0] if vals.size else None
    if getattr(first, "calendar", cal) not in (cal, "") and ds[ref].encoding.get("units"):
        # bounds decoded without the parent's calendar: redo it with the right one
        units_b = ds[ref].encoding["units"]
        nums = cftime.date2num(list(vals), units_b, calendar=first.calendar)
        vals = np.asarray(cftime.num2date(nums, units_b, calendar=cal)).ravel()
    return vals


def file_period(ds: xr.Dataset) -> str | None:
    """The years a file's climatology describes, from CF climatology bounds.

    Parameters
    ----------
    ds : xarray.Dataset

    Returns
    -------
    str or None
        ``"YYYY-YYYY"``, or None when the file has no climatology bounds.
    """
    for name in ds.coords:
        c = ds[name]
        ref = c.attrs.get("climatology") or c.encoding.get("climatology")
        if not (ref and ref in ds.variables):
            continue
        vals = _bound_dates(ds, str(name), ref)
        if vals is None:
            return None
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


def parse_period(period, source: str) -> tuple[int, int]:
    """``(first, last)`` year of a slice's ``period``.

    Parameters
    ----------
    period : str or (int, int)
        ``"YYYY-YYYY"`` (also ``/`` or ``:``), or two years.
    source : str
        Named in messages.

    Returns
    -------
    (int, int)
    """
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


def time_frequency(times) -> str:
    """The step of a decoded time axis from its median spacing.

    Parameters
    ----------
    times : sequence of cftime dates or numpy.datetime64

    Returns
    -------
    str
        ``"daily"``, ``"sub-daily"``, ``"monthly"``, ``"annual"``, ``"irregular"`` or
        ``"single-step"``.
    """
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


def _too_few_months(n, freq, months, years, source, variable) -> None:
    """Fewer steps than a year has months: incomplete, whatever `period` says."""
    if n < 12 and freq != "daily":
        missing = sorted(set(range(1, 13)) - set(months.tolist()))
        raise DataError(
            f"{source}: {variable!r} has only {n} monthly step{'s' if n != 1 else ''} "
            f"({years.min()}-{months[0]:02d} to {years[-1]}-{months[-1]:02d}), missing months "
            f"{missing}, so not a 12-month climatology; give the file with all twelve months"
        )


def _climatology(da, tname, calendar, months, *, kind, factor, offset, source, variable, log):
    """A 12-step climatology: the unit map with the calendar's non-leap month lengths."""
    if kind == "per_second":
        secs = days_in_month(calendar, source=source)[months - 1] * SECONDS_PER_DAY
        da = da * xr.DataArray(secs * factor, dims=(tname,))
        log.append(
            f"{variable}: rate x days per month of calendar {calendar!r} "
            f"(12-step climatology, {int(days_in_month(calendar).sum())}-day year)"
        )
    else:
        da = offset + factor * da if (factor != 1.0 or offset != 0.0) else da
    da = da.assign_coords(month=(tname, months)).swap_dims({tname: "month"})
    return da.drop_vars(tname).sortby("month")


def _period_mean(da, tname, calendar, months, years, freq, *, period, kind, factor, offset,
                 source, variable, log):
    """A multi-year series: each step's own month length, then the mean over `period`."""
    n = months.size
    if period is None:
        _too_few_months(n, freq, months, years, source, variable)
        raise DataError(
            f"{source}: {variable!r} is a {freq} series of {n} steps ({years.min()}-"
            f"{years.max()}), not a 12-month climatology; give the slice's `period` (e.g. "
            "'1971-2000') to average over"
        )
    y0, y1 = parse_period(period, source)
    if years.min() > y0 or years.max() < y1:
        _too_few_months(n, freq, months, years, source, variable)
        raise DataError(
            f"{source}: period {y0}-{y1} is outside the file's time range "
            f"{years.min()}-{years.max()}; choose a period inside it"
        )
    sel = (years >= y0) & (years <= y1)
    sub = da.isel({tname: np.nonzero(sel)[0]})
    m_sel, y_sel = months[sel], years[sel]
    missing = sorted(set(range(1, 13)) - set(m_sel.tolist()))
    if missing:
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


def to_monthly(
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
    """Reduce a time axis to a 12-month climatology and apply the unit map.

    Parameters
    ----------
    da : xarray.DataArray
        A field with time axis `tname` (decoded dates).
    tname : str
        Its time dimension.
    calendar : str
        The CF calendar of the axis (month lengths of a rate).
    period : str, (int, int) or None
        Years to average a multi-year series over; None for a 12-step climatology.
    kind : {"per_second", "per_month"} or None
        ``"per_second"``: a rate, multiplied by the seconds of each month.
    factor, offset : float
        The linear unit map ``offset + factor * value``.
    source, variable : str
        Named in messages and log lines.
    log : list of str
        One line on the reduction is appended.

    Returns
    -------
    xarray.DataArray
        On ``month`` 1..12 instead of `tname`.
    """
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
    unit_map = dict(kind=kind, factor=factor, offset=offset, source=source, variable=variable,
                    log=log)
    if is_clim:
        return _climatology(da, tname, calendar, months, **unit_map)
    return _period_mean(da, tname, calendar, months, years, freq, period=period, **unit_map)
