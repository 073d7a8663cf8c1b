"""Occurrence-record readers: delivered record files to canonical pandas DataFrames.

Files may be delimited text (comma, tab, semicolon or pipe; optionally gzip-, bzip2- or
xz-compressed), a zip holding one such table (the aggregators' "simple" downloads), or a Darwin
Core Archive (a zip with ``meta.xml``; event- or taxon-core archives are joined to their
occurrences). Text is read as strict UTF-8 (with or without BOM), else Windows-1252 / Latin-1
over the whole file; the encoding used is recorded (see :mod:`timeslice.readers.dwca`).

Canonical occurrence columns: ``lon``, ``lat`` (decimal degrees, WGS84), ``uncertainty_m``
(coordinate uncertainty in metres), ``status`` (lower-case occurrence status), ``basis``
(basis of record), ``year``, ``count`` (individual count), ``species`` (scientific name) and
``row`` (the 1-based line of the record in its file; the header is line 1), plus
``coords_missing`` (True where a coordinate field is empty) and, when the file has them,
``id``, ``accepted_name``, ``taxon_key``, ``accepted_key``, ``species_key``, ``rank``, ``flags``
(the aggregator's issue flags), ``establishment``, ``country``, ``locality``, ``age_bp`` and
``age_sd`` (years before 1950 CE).

Values that cannot be parsed become NaN here and are counted by
:func:`timeslice.niche.data.clean_records`; the readers only refuse files they cannot read at all.
"""

from __future__ import annotations

import difflib
import os
import re
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from timeslice.errors import InputFileError
from timeslice.readers.dwca import load_table, term_name

__all__ = ["OCCURRENCE_COLUMNS", "DATED_COLUMNS", "header_key", "read_dated_records", "read_occurrences"]

#: Canonical occurrence columns, in output order.
OCCURRENCE_COLUMNS = ("lon", "lat", "uncertainty_m", "status", "basis", "year", "count", "species")

#: Canonical columns of dated (fossil or other past) records.
DATED_COLUMNS = ("lon", "lat", "age_bp", "age_sd")

# File column names recognised for each canonical column, Darwin Core terms first
# (Wieczorek et al. 2012, Darwin Core: an evolving community-developed biodiversity data
# standard, PLoS ONE 7:e29715), then the aggregators' own terms (taxon and species keys, issue
# flags) and common plain-CSV spellings. Matching uses :func:`header_key`, so any case, the
# underscore style (DECIMAL_LATITUDE), a ``dwc:`` prefix and full term URIs all match.
_OCC_ALIASES: dict[str, tuple[str, ...]] = {
    "lon": ("decimalLongitude", "lon", "longitude", "long", "lng", "x"),
    "lat": ("decimalLatitude", "lat", "latitude", "y"),
    "uncertainty_m": ("coordinateUncertaintyInMeters", "uncertainty_m", "uncertainty"),
    "status": ("occurrenceStatus", "status"),
    "basis": ("basisOfRecord", "basis"),
    "year": ("year",),
    "event_date": ("eventDate", "date", "event_date"),
    "count": ("individualCount", "count", "abundance"),
    "species": ("scientificName", "species", "taxon", "name"),
    "id": ("occurrenceID", "id", "record_id"),
    "accepted_name": ("acceptedScientificName", "acceptedName", "accepted_name"),
    "taxon_key": ("taxonKey", "taxonID", "taxon_key"),
    "accepted_key": ("acceptedTaxonKey", "acceptedNameUsageID", "accepted_key"),
    "species_key": ("speciesKey", "speciesID", "species_key"),
    "rank": ("taxonRank", "rank"),
    "flags": ("issue", "issues", "flags"),
    "establishment": ("establishmentMeans", "degreeOfEstablishment", "establishment"),
    "country": ("country",),
    "locality": ("locality",),
    "age_bp": ("age_bp", "ageBP", "cal_bp", "age_cal_bp"),
    "age_sd": ("age_sd", "age_error"),
    "max_ma": ("max_ma",),
    "min_ma": ("min_ma",),
}

_DATED_ALIASES: dict[str, tuple[str, ...]] = {
    "lon": ("lon", "decimalLongitude", "longitude", "x"),
    "lat": ("lat", "decimalLatitude", "latitude", "y"),
    "age_bp": ("age_bp", "age", "age_cal_bp", "cal_bp"),
    "age_sd": ("age_sd", "age_error", "sd", "error"),
    "id": ("record_id", "id", "occurrenceID"),
    "material": ("material",),
}

#: Columns kept as text (stripped) when the file has them.
_TEXT = ("id", "accepted_name", "taxon_key", "accepted_key", "species_key", "rank", "flags",
         "establishment", "country", "locality")

# leading (signed) integer of an ISO 8601 date or interval: "2001-06-03", "1999-07/2000-01",
# "-12000/-10000" (astronomical year numbering, ISO 8601:2019 expanded years); "20010603" is the
# basic format, whose year is its first four digits
_YEAR_RE = re.compile(r"^\s*(-?\d+)(?=$|[-/T\s])")
_END_RE = re.compile(r"/\s*(-?\d+)(?=$|[-T\s])")

#: A calendar date range ending before this year (CE) is an age, not a collection date.
PAST_YEAR_CE = 1500.0


def header_key(name: str) -> str:
    """Spelling-free key of a column name: term URI and ``dwc:`` prefix removed, lower case,
    letters and digits only (``DECIMAL_LATITUDE``, ``dwc:decimalLatitude`` -> ``decimallatitude``).

    Parameters
    ----------
    name : str
        A column name as the file spells it.

    Returns
    -------
    str
    """
    return re.sub(r"[^a-z0-9]", "", term_name(str(name).strip().lstrip("\ufeff")).lower())


def _clip(items, n: int = 8, width: int = 40) -> str:
    # a column name is quoted only in part: the header of an arbitrary file can be one long line
    items = [str(x) if len(str(x)) <= width else str(x)[: width - 1] + "…" for x in items]
    return ", ".join(items[:n]) + (f" and {len(items) - n} more" if len(items) > n else "")


def _columns(df: pd.DataFrame) -> list[str]:
    """The file's own column names (without the line-number helper)."""
    return [c for c in df.columns if c != "__line__"]


def _nearest(wanted: tuple[str, ...], names: list[str]) -> str | None:
    """The file column whose spelling is nearest to any of `wanted` (None if none is close)."""
    keys = {header_key(n): n for n in names}
    best, score = None, 0.0
    for w in wanted:
        for k, n in keys.items():
            r = difflib.SequenceMatcher(None, header_key(w), k).ratio()
            if r > score:
                best, score = n, r
    return best if score >= 0.6 else None


def _resolve_columns(
    df: pd.DataFrame,
    path,
    aliases: Mapping[str, tuple[str, ...]],
    columns: Mapping[str, str] | None,
) -> dict[str, str]:
    """Map canonical names to file columns: the user's mapping first (exact names), then the
    aliases (by :func:`header_key`)."""
    names = _columns(df)
    found: dict[str, str] = {}
    if columns:
        for canon, file_col in columns.items():
            if canon not in aliases:
                by_alias = {a.lower(): c for c, names_ in aliases.items() for a in names_}
                by_alias.update({c: c for c in aliases})
                close = difflib.get_close_matches(str(canon).lower(), list(by_alias), n=1, cutoff=0.5)
                hint = f"; did you mean {by_alias[close[0]]!r}?" if close else ""
                raise InputFileError(
                    f"{path}: column mapping key {canon!r} is not a canonical column "
                    f"(choose from {_clip(aliases, 12)}){hint}"
                )
            if file_col not in names:
                by_lower = {c.lower(): c for c in names}
                close = difflib.get_close_matches(str(file_col).lower(), list(by_lower), n=1)
                close = [by_lower[c] for c in close]
                hint = f"did you mean {close[0]!r}? " if close else ""
                raise InputFileError(
                    f"{path}: column mapping {canon!r} -> {file_col!r} names a column that is not "
                    f"in the file; {hint}file columns are: {_clip(names)}"
                )
            found[canon] = file_col
    keyed: dict[str, str] = {}
    for c in names:
        keyed.setdefault(header_key(c), c)
    taken = set(found.values())
    for canon, names_ in aliases.items():
        if canon in found:
            continue
        for name in names_:
            col = keyed.get(header_key(name))
            if col is not None and col not in taken:
                found[canon] = col
                taken.add(col)
                break
    return found


def _numeric(series: pd.Series) -> np.ndarray:
    return pd.to_numeric(series.astype(str).str.strip(), errors="coerce").to_numpy(dtype=float)


_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+\s*$")


def _coordinate(series: pd.Series) -> tuple[np.ndarray, int]:
    """Decimal degrees of a coordinate column, and how many were written with a decimal comma
    ("48,6563", the convention of semicolon-separated exports in many locales): one comma
    between digits cannot be a thousands separator in a coordinate, so it is read as the
    decimal point."""
    values = _numeric(series).copy()
    text = series.astype(str)
    comma = np.isnan(values) & text.str.match(_DECIMAL_COMMA).to_numpy()
    if comma.any():
        values[comma] = _numeric(text[comma].str.replace(",", ".", regex=False))
    return values, int(comma.sum())


def _date_years(text: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Start and end year of ISO 8601 dates or intervals (end = start for a single date)."""
    def year(m: pd.Series) -> np.ndarray:
        digits = m.fillna("")
        basic = digits.str.fullmatch(r"\d{8}")
        digits = digits.where(~basic, digits.str[:4])
        return pd.to_numeric(digits, errors="coerce").to_numpy(dtype=float)

    s = text.astype(str)
    start = year(s.str.extract(_YEAR_RE, expand=False))
    end = year(s.str.extract(_END_RE, expand=False))
    return start, np.where(np.isfinite(end), end, start)


def _require_coordinates(df: pd.DataFrame, src: str, found: Mapping[str, str]) -> None:
    """Refuse a table without longitude and latitude columns, naming the nearest column."""
    missing = [c for c in ("lon", "lat") if c not in found]
    if missing:
        free = [c for c in _columns(df) if c not in found.values()]
        near = _nearest(tuple(a for c in missing for a in _OCC_ALIASES[c]), free)
        hint = f"nearest file column {near!r}; " if near else ""
        raise InputFileError(
            f"{src}: no coordinate column for {', '.join(missing)} (looked for decimalLongitude / "
            f"lon / decimalLatitude / lat, any spelling); {hint}file columns are: "
            f"{_clip(_columns(df), 4 if near else 8)}; map them with [species] columns"
        )


def _ages(df: pd.DataFrame, found: Mapping[str, str], start: np.ndarray,
          end: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``age_bp`` and ``age_sd``: an age column, else min_ma/max_ma, else a past date interval."""
    n = len(df)
    age = _numeric(df[found["age_bp"]]) if "age_bp" in found else np.full(n, np.nan)
    sd = _numeric(df[found["age_sd"]]) if "age_sd" in found else np.full(n, np.nan)
    if "max_ma" in found or "min_ma" in found:
        hi = _numeric(df[found["max_ma"]]) if "max_ma" in found else np.full(n, np.nan)
        lo = _numeric(df[found["min_ma"]]) if "min_ma" in found else np.full(n, np.nan)
        hi, lo = np.where(np.isnan(hi), lo, hi), np.where(np.isnan(lo), hi, lo)
        fill = np.isnan(age) & np.isfinite(hi)
        age = np.where(fill, (hi + lo) / 2.0 * 1e6, age)
        sd = np.where(fill & (hi > lo), (hi - lo) / 4.0 * 1e6, sd)
    with np.errstate(invalid="ignore"):
        past = np.isnan(age) & np.isfinite(end) & (end < PAST_YEAR_CE)
    age = np.where(past, 1950.0 - (start + end) / 2.0, age)
    sd = np.where(past & (end > start), (end - start) / 4.0, sd)
    return age, sd


def read_occurrences(path: str | os.PathLike, *, columns: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Read occurrence records from a Darwin Core Archive, an aggregator download or a CSV.

    Parameters
    ----------
    path : str or path-like
        Delimited text (comma, tab, semicolon or pipe, sniffed from the header line after any
        decompression), ``.gz``/``.bz2``/``.xz`` of it, a zip holding one such table, or a
        Darwin Core Archive zip (``meta.xml`` says which file is the core, its delimiter, quote,
        encoding, header lines and the term of each column).
    columns : mapping, optional
        Canonical name -> file column name (exact spelling), for files that do not use Darwin
        Core terms (e.g. ``{"lon": "X_WGS84", "lat": "Y_WGS84"}``). Unmapped columns are found
        by their Darwin Core term or a common spelling in any case, underscore style, with a
        ``dwc:`` prefix or as a full term URI.

    Returns
    -------
    pandas.DataFrame
        Columns ``lon``, ``lat`` [degrees], ``uncertainty_m`` [m], ``status`` (lower case),
        ``basis``, ``year``, ``count``, ``species``, ``row`` (1-based file line),
        ``coords_missing``, and the optional columns listed in the module docstring when the
        file has them. Missing optional columns are filled with NaN (numbers) or empty strings
        (text). Unparseable numbers are NaN. ``attrs`` holds ``source_file``, ``columns``
        (canonical -> file column) and ``read`` (format, encoding and delimiter, one line).

    Raises
    ------
    InputFileError
        The file is missing or unreadable (the message names the encoding, delimiter or archive
        problem), has no coordinate columns (the message names the nearest column), or `columns`
        names a column that is not in the file.

    Notes
    -----
    ``year`` comes from the ``year`` column, or else from the leading year of an ISO 8601
    ``eventDate`` (the start of an interval such as ``2001-05/2002-06``). ``age_bp`` comes from
    an age column (``age_bp``, ``ageBP``, ``cal_bp``), else from ``min_ma``/``max_ma`` (their
    mean; ``age_sd`` a quarter of the range), else from an ``eventDate`` interval that ends
    before :data:`PAST_YEAR_CE` (its midpoint, 1950 − year; ``age_sd`` a quarter of the range).
    """
    table = load_table(path)
    df, src = table.data, table.source
    found = _resolve_columns(df, src, _OCC_ALIASES, columns)
    _require_coordinates(df, src, found)
    n = len(df)
    out = pd.DataFrame(index=pd.RangeIndex(n))
    out["lon"], n_lon = _coordinate(df[found["lon"]])
    out["lat"], n_lat = _coordinate(df[found["lat"]])
    out["uncertainty_m"] = _numeric(df[found["uncertainty_m"]]) if "uncertainty_m" in found else np.nan
    out["status"] = (
        df[found["status"]].str.strip().str.lower().to_numpy() if "status" in found else ""
    )
    out["basis"] = df[found["basis"]].str.strip().to_numpy() if "basis" in found else ""
    year = np.full(n, np.nan)
    if "year" in found:
        year = _numeric(df[found["year"]])
    start = end = np.full(n, np.nan)
    if "event_date" in found:
        start, end = _date_years(df[found["event_date"]])
        year = np.where(np.isnan(year), start, year)
    out["year"] = year
    out["count"] = _numeric(df[found["count"]]) if "count" in found else np.nan
    out["species"] = df[found["species"]].str.strip().to_numpy() if "species" in found else ""
    out["row"] = df["__line__"].to_numpy()
    out["coords_missing"] = (
        (df[found["lon"]].str.strip() == "") | (df[found["lat"]].str.strip() == "")
    ).to_numpy()
    for canon in _TEXT:
        if canon in found:
            out[canon] = df[found[canon]].astype(str).str.strip().to_numpy()
    age, sd = _ages(df, found, start, end)
    if np.isfinite(age).any():
        out["age_bp"] = age
        out["age_sd"] = sd
    out.attrs["source_file"] = str(path)
    out.attrs["columns"] = {k: v for k, v in found.items()}
    comma = (f"; {max(n_lon, n_lat)} coordinates with a decimal comma read as decimal points"
             if n_lon or n_lat else "")
    out.attrs["read"] = f"{Path(path).name}: {table.describe()}; {n} records{comma}"
    return out


def read_dated_records(
    path: str | os.PathLike, *, columns: Mapping[str, str] | None = None
) -> pd.DataFrame:
    """Read dated (fossil, pollen or other past) records.

    Parameters
    ----------
    path : str or path-like
        CSV with longitude, latitude and age columns (``record_id, lon, lat, age_bp, age_sd,
        material`` or mapped through `columns`); any format :func:`read_occurrences` reads.
    columns : mapping, optional
        Canonical name (``lon``, ``lat``, ``age_bp``, ``age_sd``, ``id``, ``material``) -> file
        column name.

    Returns
    -------
    pandas.DataFrame
        ``lon``, ``lat`` [degrees], ``age_bp`` [years before 1950 CE], ``age_sd`` [years, NaN when
        not given], plus ``id`` and ``material`` when present, and ``row`` (1-based file line).

    Raises
    ------
    InputFileError
        Missing file, no coordinate or age column, or a coordinate or age that is not a number
        (the message names the line).
    """
    table = load_table(path)
    df, src = table.data, table.source
    found = _resolve_columns(df, src, _DATED_ALIASES, columns)
    missing = [c for c in ("lon", "lat", "age_bp") if c not in found]
    if missing:
        raise InputFileError(
            f"{src}: no column for {', '.join(missing)} in the dated records; file columns are: "
            f"{_clip(_columns(df))}; rename them or map them with `columns`"
        )
    out = pd.DataFrame(index=pd.RangeIndex(len(df)))
    for canon in ("lon", "lat", "age_bp"):
        values = _numeric(df[found[canon]])
        bad = np.flatnonzero(np.isnan(values))
        if bad.size:
            line = int(df["__line__"].iloc[bad[0]])
            shown = _clip([repr(df[found[canon]].iloc[bad[0]])], 1)
            raise InputFileError(
                f"{src}: line {line}: column {found[canon]!r} is not a number "
                f"({shown}); {bad.size} such line(s); fix or remove them"
            )
        out[canon] = values
    bad_range = (out["lat"] < -90) | (out["lat"] > 90) | (out["lon"] < -180) | (out["lon"] > 360)
    if bad_range.any():
        line = int(df["__line__"].iloc[int(np.flatnonzero(bad_range.to_numpy())[0])])
        raise InputFileError(
            f"{src}: line {line}: coordinates out of range (lat in [-90, 90], lon in [-180, 360]); "
            "check for swapped columns"
        )
    out["lon"] = ((out["lon"] + 180.0) % 360.0) - 180.0
    out["age_sd"] = _numeric(df[found["age_sd"]]) if "age_sd" in found else np.nan
    if "id" in found:
        out["id"] = df[found["id"]].str.strip().to_numpy()
    if "material" in found:
        out["material"] = df[found["material"]].str.strip().to_numpy()
    out["row"] = df["__line__"].to_numpy()
    out.attrs["source_file"] = str(path)
    return out
