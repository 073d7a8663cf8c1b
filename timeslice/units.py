"""Unit parsing and conversion to the canonical units (degC, mm month-1, m, fraction).

The one place units are known: the readers convert every field with it, the config checks
declared units with it before any file is read, and the harmonise stage uses its calendar month
lengths.

Units strings are parsed with pint through the CF-aware registry of ``cf_xarray.units``,
after replacing spellings real files use that the registry does not know
(``degree_C``, ``degrees_K``, ``mm/mon``, ...). Conversions are returned as a linear map
``y = offset + factor * x`` so they can be applied lazily to dask arrays.
"""

from __future__ import annotations

import re
from typing import Literal

import cftime
import numpy as np

from timeslice.errors import DataError

__all__ = [
    "FRACTION_UNITS",
    "PERCENT_UNITS",
    "PRECIPITATION_TABLE",
    "SECONDS_PER_DAY",
    "TEMPERATURE_TABLE",
    "WATER_DENSITY",
    "days_in_month",
    "fraction_factor",
    "length_factor",
    "parse_units",
    "precipitation_conversion",
    "temperature_conversion",
]

#: Density of liquid water used to turn a mass flux into a depth rate, 1000 kg m-3
#: (the convention of climate-model output; CF standard name table, precipitation_flux).
WATER_DENSITY = 1000.0

#: Seconds in a day (definition of the day as 86 400 SI seconds).
SECONDS_PER_DAY = 86400.0

# Spellings found in real files -> spellings the CF/pint registry parses.
_ALIASES: tuple[tuple[str, str], ...] = (
    (r"^(degrees?_?c(elsius)?|deg_?c|celsius|°c|c)$", "degC"),
    (r"^(degrees?_?k(elvin)?|deg_?k|kelvin)$", "K"),
    (r"^(degrees?_?f(ahrenheit)?|deg_?f|fahrenheit|°f|f)$", "degF"),
)
_TOKEN_ALIASES: tuple[tuple[str, str], ...] = (
    (r"\bmon\b", "month"),
    (r"\bmonths\b", "month"),
    (r"\bdays\b", "day"),
    (r"\bd-1\b", "day-1"),
    (r"\bmms\b", "mm"),
)

_CALENDARS = {
    "standard",
    "gregorian",
    "proleptic_gregorian",
    "noleap",
    "365_day",
    "all_leap",
    "366_day",
    "360_day",
    "julian",
}


def _registry():
    from cf_xarray.units import units

    return units


def _clean(text: str) -> str:
    s = str(text).strip()
    low = s.lower()
    for pattern, repl in _ALIASES:
        if re.match(pattern, low):
            return repl
    for pattern, repl in _TOKEN_ALIASES:
        s = re.sub(pattern, repl, s)
    return s


def parse_units(text: str, *, variable: str = "variable", source: str = "input"):
    """Parse a CF units string into a pint Unit, accepting common non-CF spellings.

    Parameters
    ----------
    text : str
        The units attribute (``"K"``, ``"degrees_C"``, ``"kg m-2 s-1"``, ``"mm/mon"``...).
    variable : str
        Variable named in messages.
    source : str
        File (or config key) named in messages.

    Returns
    -------
    pint.Unit
        The unit in the CF-aware registry of ``cf_xarray.units``.

    Raises
    ------
    DataError
        `text` is empty or not a unit, naming `variable` and `source`.
    """
    if text is None or str(text).strip() == "":
        raise DataError(
            f"{source}: variable {variable!r} has no `units` attribute; add one "
            "(e.g. 'K', 'degC', 'kg m-2 s-1', 'mm month-1') or declare it in the config"
        )
    ureg = _registry()
    cleaned = _clean(text)
    try:
        return ureg.parse_units(cleaned)
    except Exception as err:  # pint raises several unrelated types
        raise DataError(
            f"{source}: variable {variable!r} has unknown units {str(text)!r}; use a CF "
            "units string such as 'K', 'degC', 'kg m-2 s-1' or 'mm month-1'"
        ) from err


#: The commonest spellings, so a run need not build the pint registry (about a second) for
#: them; tests check every entry against pint (tests/readers/test_units.py).
TEMPERATURE_TABLE: dict[str, tuple[float, float]] = {
    "K": (-273.15, 1.0),
    "degC": (0.0, 1.0),
}
#: As :data:`TEMPERATURE_TABLE`, for precipitation.
PRECIPITATION_TABLE: dict[str, tuple[str, float]] = {
    "kg m-2 s-1": ("per_second", 1.0),
    "mm s-1": ("per_second", 1.0),
    "mm day-1": ("per_second", 1.0 / 86400.0),
    "mm/day": ("per_second", 1.0 / 86400.0),
    "mm month-1": ("per_month", 1.0),
    "mm/month": ("per_month", 1.0),
}


def temperature_conversion(
    text: str, *, variable: str = "temperature", source: str = "input", use_table: bool = True
) -> tuple[float, float]:
    """``(offset, factor)`` such that ``degC = offset + factor * value``.

    Parameters
    ----------
    text : str
        Units of the stored values.
    variable, source : str
        Named in messages.
    use_table : bool, default True
        Look the commonest spellings up in :data:`TEMPERATURE_TABLE` instead of pint.

    Returns
    -------
    offset, factor : float
        The linear map to degC.

    Raises
    ------
    DataError
        The units are not a temperature.

    Examples
    --------
    >>> temperature_conversion("K")
    (-273.15, 1.0)
    >>> off, fac = temperature_conversion("degrees_F", use_table=False)
    >>> round(off + fac * 212.0, 9)
    100.0
    """
    if use_table and text is not None and _clean(text) in TEMPERATURE_TABLE:
        return TEMPERATURE_TABLE[_clean(text)]
    ureg = _registry()
    unit = parse_units(text, variable=variable, source=source)
    if unit.dimensionality != ureg.kelvin.dimensionality:
        raise DataError(
            f"{source}: variable {variable!r} has units {str(text)!r}, which are not a "
            "temperature; expected K, degC or degF (check the variable mapping)"
        )
    q0 = ureg.Quantity(0.0, unit).to("degC").magnitude
    q1 = ureg.Quantity(1.0, unit).to("degC").magnitude
    return float(q0), float(q1 - q0)


def precipitation_conversion(
    text: str, *, variable: str = "pr", source: str = "input", use_table: bool = True
) -> tuple[Literal["per_month", "per_second"], float]:
    """Classify a precipitation unit and give its scale factor.

    Parameters
    ----------
    text : str
        Units of the stored values.
    variable, source : str
        Named in messages.
    use_table : bool, default True
        Look the commonest spellings up in :data:`PRECIPITATION_TABLE` instead of pint.

    Returns
    -------
    kind, factor
        ``("per_month", f)``: ``mm month-1 = f * value`` (the unit is already per month; no
        calendar needed). ``("per_second", f)``: ``mm s-1 = f * value``; the caller
        multiplies by the seconds in each month of the file's calendar.

    Notes
    -----
    A mass flux (kg m-2 s-1) is turned into a depth rate by dividing by the density of
    water, 1000 kg m-3, so 1 kg m-2 s-1 = 1 mm s-1 = 86 400 mm day-1.

    Examples
    --------
    >>> kind, factor = precipitation_conversion("kg m-2 s-1")
    >>> kind, factor * 86400
    ('per_second', 86400.0)
    >>> precipitation_conversion("cm/month", use_table=False)
    ('per_month', 10.0)
    """
    if use_table and text is not None and _clean(text) in PRECIPITATION_TABLE:
        return PRECIPITATION_TABLE[_clean(text)]  # type: ignore[return-value]
    ureg = _registry()
    unit = parse_units(text, variable=variable, source=source)
    q = ureg.Quantity(1.0, unit)
    mass_flux = ureg.parse_units("kg m-2 s-1").dimensionality
    depth_rate = ureg.parse_units("mm s-1").dimensionality
    if q.dimensionality == mass_flux:
        q = q / ureg.Quantity(WATER_DENSITY, "kg m-3")
    elif q.dimensionality != depth_rate:
        raise DataError(
            f"{source}: variable {variable!r} has units {str(text)!r}, which are not a "
            "precipitation rate; expected kg m-2 s-1, mm day-1 or mm month-1 "
            "(check the variable mapping)"
        )
    if "month" in str(unit):
        return "per_month", float(q.to("mm month-1").magnitude)
    return "per_second", float(q.to("mm s-1").magnitude)


def days_in_month(calendar: str, year: int | None = None, *, source: str = "input") -> np.ndarray:
    """Days in each of the 12 months for a CF calendar.

    Parameters
    ----------
    calendar : str
        CF calendar name (standard, gregorian, proleptic_gregorian, noleap/365_day,
        all_leap/366_day, 360_day, julian).
    year : int, optional
        A year for a real monthly series. Without it (a 12-step climatology) the calendar's
        non-leap month lengths are used (February 28) except in all_leap/366_day (29) and
        360_day (30 for every month).
    source : str
        File named in messages.

    Returns
    -------
    numpy.ndarray of int, shape (12,)

    Examples
    --------
    >>> int(days_in_month("360_day").sum()), int(days_in_month("noleap").sum())
    (360, 365)
    >>> int(days_in_month("standard", 2000)[1])  # February of a leap year
    29
    """
    cal = str(calendar).lower()
    if cal not in _CALENDARS:
        raise DataError(
            f"{source}: calendar {calendar!r} is not supported; use one of "
            f"{', '.join(sorted(_CALENDARS))}"
        )
    y = 2001 if year is None else int(year)  # 2001 is not a leap year in any calendar
    out = np.empty(12, dtype=int)
    for m in range(1, 13):
        start = cftime.datetime(y, m, 1, calendar=cal)
        stop = cftime.datetime(y + (m == 12), m % 12 + 1, 1, calendar=cal)
        out[m - 1] = (stop - start).days
    return out


#: Units strings read as a fraction 0..1 and as percent (land-ice cover).
FRACTION_UNITS = frozenset({"1", "", "fraction", "0-1"})
PERCENT_UNITS = frozenset({"%", "percent"})


def length_factor(text: str | None, *, variable: str = "elevation", source: str = "input") -> float:
    """Factor from a length unit to metres (no units: metres).

    Parameters
    ----------
    text : str or None
        Units of the stored values.
    variable, source : str
        Named in messages.

    Returns
    -------
    float
        ``metres = factor * value``.

    Raises
    ------
    DataError
        The units are not a length.

    Examples
    --------
    >>> length_factor("km")
    1000.0
    """
    ureg = _registry()
    unit = parse_units(text or "m", variable=variable, source=source)
    if unit.dimensionality != ureg.m.dimensionality:
        raise DataError(
            f"{source}: variable {variable!r} has units {text!r}, not a length; expected m"
        )
    return float(ureg.Quantity(1.0, unit).to("m").magnitude)


def fraction_factor(text: str | None, *, variable: str = "ice", source: str = "input") -> float:
    """Factor from a fraction or percent unit to a fraction 0..1 (no units: a fraction).

    Parameters
    ----------
    text : str or None
        Units of the stored values: one of :data:`FRACTION_UNITS` or :data:`PERCENT_UNITS`.
    variable, source : str
        Named in messages.

    Returns
    -------
    float
        0.01 for percent, else 1.0.

    Raises
    ------
    DataError
        The units are neither a fraction nor percent.

    Examples
    --------
    >>> fraction_factor("%"), fraction_factor("1")
    (0.01, 1.0)
    """
    value = str(text or "1").strip()
    if value in PERCENT_UNITS:
        return 0.01
    if value not in FRACTION_UNITS:
        raise DataError(
            f"{source}: variable {variable!r} has units {text!r}; expected '%' or '1' (fraction)"
        )
    return 1.0
