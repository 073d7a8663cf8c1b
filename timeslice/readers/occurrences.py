"""Occurrence-record readers: Darwin Core or plain CSV to canonical pandas DataFrames.

Canonical occurrence columns: ``lon``, ``lat`` (decimal degrees, WGS84), ``uncertainty_m``
(coordinate uncertainty in metres), ``status`` (lower-case occurrence status), ``basis``
(basis of record), ``year``, ``count`` (individual count), ``species`` (scientific name) and
``row`` (the 1-based line of the record in the file; the header is line 1).

Values that cannot be parsed become NaN here and are counted by
:func:`timeslice.niche.data.clean_records`; the readers only refuse files they cannot read at all.
"""

from __future__ import annotations

import csv
import difflib
import os
import re
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from timeslice.errors import InputFileError

__all__ = ["OCCURRENCE_COLUMNS", "DATED_COLUMNS", "read_dated_records", "read_occurrences"]

#: Canonical occurrence columns, in output order.
OCCURRENCE_COLUMNS = ("lon", "lat", "uncertainty_m", "status", "basis", "year", "count", "species")

#: Canonical columns of dated (fossil or other past) records.
DATED_COLUMNS = ("lon", "lat", "age_bp", "age_sd")

# File column names recognised for each canonical column, Darwin Core terms first
# (Wieczorek et al. 2012, Darwin Core: an evolving community-developed biodiversity data
# standard, PLoS ONE 7:e29715), then common plain-CSV spellings. Matching ignores case.
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
}

_DATED_ALIASES: dict[str, tuple[str, ...]] = {
    "lon": ("lon", "decimalLongitude", "longitude", "x"),
    "lat": ("lat", "decimalLatitude", "latitude", "y"),
    "age_bp": ("age_bp", "age", "age_cal_bp", "cal_bp"),
    "age_sd": ("age_sd", "age_error", "sd", "error"),
    "id": ("record_id", "id", "occurrenceID"),
    "material": ("material",),
}

_YEAR_RE = re.compile(r"^\s*(-?\d{4})")


def _read_table(path: Path) -> pd.DataFrame:
    """Read a delimited text file as strings, sniffing the delimiter from the header line."""
    if not path.exists():
        raise InputFileError(f"{path}: occurrence file not found; check the path")
    if path.is_dir():
        raise InputFileError(f"{path}: is a folder, expected a CSV file")
    raw = None
    for encoding in ("utf-8-sig", "latin-1"):
        try:
            with open(path, encoding=encoding, newline="") as fh:
                raw = fh.read(65536)
            break
        except UnicodeDecodeError:
            continue
        except OSError as err:
            raise InputFileError(f"{path}: cannot be read ({err.strerror}); check permissions") from err
    if raw is None or not raw.strip():
        raise InputFileError(f"{path}: file is empty; expected a CSV with a header line")
    header = raw.splitlines()[0]
    counts = {sep: header.count(sep) for sep in (",", "\t", ";", "|")}
    sep = max(counts, key=counts.get)
    if counts[sep] == 0:
        sep = ","
    try:
        df = pd.read_csv(
            path,
            sep=sep,
            dtype=str,
            keep_default_na=False,
            encoding=encoding,
            quoting=csv.QUOTE_MINIMAL,
            skip_blank_lines=False,
        )
    except (pd.errors.ParserError, ValueError, UnicodeDecodeError) as err:
        msg = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise InputFileError(f"{path}: not a readable CSV table ({msg}); check the delimiter and quoting") from err
    df.columns = [str(c).strip() for c in df.columns]
    # file line of each row (header = line 1), kept through the removal of blank lines;
    # a quoted field spanning several lines shifts the count
    df["__line__"] = np.arange(2, len(df) + 2, dtype=np.int64)
    blank = (df.drop(columns="__line__") == "").all(axis=1)
    return df.loc[~blank].reset_index(drop=True)


def _resolve_columns(
    df: pd.DataFrame,
    path: Path,
    aliases: Mapping[str, tuple[str, ...]],
    columns: Mapping[str, str] | None,
) -> dict[str, str]:
    """Map canonical names to file columns: the user's mapping first, then the aliases."""
    names = [c for c in df.columns if c != "__line__"]
    lower = {c.lower(): c for c in names}
    found: dict[str, str] = {}
    if columns:
        for canon, file_col in columns.items():
            if canon not in aliases:
                by_alias = {a.lower(): c for c, names in aliases.items() for a in names}
                by_alias.update({c: c for c in aliases})
                close = difflib.get_close_matches(str(canon).lower(), list(by_alias), n=1, cutoff=0.5)
                hint = f"; did you mean {by_alias[close[0]]!r}?" if close else ""
                raise InputFileError(
                    f"{path}: column mapping key {canon!r} is not a canonical column "
                    f"(choose from {', '.join(aliases)}){hint}"
                )
            if file_col not in names:
                by_lower = {c.lower(): c for c in names}
                close = difflib.get_close_matches(str(file_col).lower(), list(by_lower), n=1)
                close = [by_lower[c] for c in close]
                hint = f"did you mean {close[0]!r}? " if close else ""
                raise InputFileError(
                    f"{path}: column mapping {canon!r} -> {file_col!r} names a column that is not "
                    f"in the file; {hint}file columns are: {', '.join(names)}"
                )
            found[canon] = file_col
    for canon, names in aliases.items():
        if canon in found:
            continue
        for name in names:
            if name.lower() in lower:
                found[canon] = lower[name.lower()]
                break
    return found


def _columns(df: pd.DataFrame) -> list[str]:
    """The file's own column names (without the line-number helper)."""
    return [c for c in df.columns if c != "__line__"]


def _numeric(series: pd.Series) -> np.ndarray:
    return pd.to_numeric(series.str.strip(), errors="coerce").to_numpy(dtype=float)


def read_occurrences(path: str | os.PathLike, *, columns: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Read occurrence records from a Darwin Core or plain CSV file.

    Parameters
    ----------
    path : str or path-like
        CSV (comma, tab, semicolon or pipe delimited; the delimiter is taken from the header).
    columns : mapping, optional
        Canonical name -> file column name, for files that do not use Darwin Core terms
        (e.g. ``{"lon": "X_WGS84", "lat": "Y_WGS84"}``). Unmapped columns are found by their
        Darwin Core term or a common spelling, ignoring case.

    Returns
    -------
    pandas.DataFrame
        Columns ``lon``, ``lat`` [degrees], ``uncertainty_m`` [m], ``status`` (lower case),
        ``basis``, ``year``, ``count``, ``species``, ``row`` (1-based file line), and ``id``
        when the file has an identifier column. Missing optional columns are filled with NaN
        (numbers) or empty strings (text). Unparseable numbers are NaN.

    Raises
    ------
    InputFileError
        The file is missing, unreadable, has no coordinate columns, or `columns` names a column
        that is not in the file.

    Notes
    -----
    ``year`` comes from the ``year`` column, or else from the leading four digits of an ISO 8601
    ``eventDate`` (the start of an interval such as ``2001-05/2002-06``).
    """
    path = Path(path)
    df = _read_table(path)
    found = _resolve_columns(df, path, _OCC_ALIASES, columns)
    missing = [c for c in ("lon", "lat") if c not in found]
    if missing:
        wanted = " / ".join(_OCC_ALIASES["lon"][:2] + _OCC_ALIASES["lat"][:2])
        raise InputFileError(
            f"{path}: no coordinate column(s) for {', '.join(missing)} (looked for {wanted}); "
            f"file columns are: {', '.join(_columns(df))}; rename them or map them with the "
            "`columns` option (canonical name -> file column)"
        )
    n = len(df)
    out = pd.DataFrame(index=pd.RangeIndex(n))
    out["lon"] = _numeric(df[found["lon"]])
    out["lat"] = _numeric(df[found["lat"]])
    out["uncertainty_m"] = _numeric(df[found["uncertainty_m"]]) if "uncertainty_m" in found else np.nan
    out["status"] = (
        df[found["status"]].str.strip().str.lower().to_numpy() if "status" in found else ""
    )
    out["basis"] = df[found["basis"]].str.strip().to_numpy() if "basis" in found else ""
    year = np.full(n, np.nan)
    if "year" in found:
        year = _numeric(df[found["year"]])
    if "event_date" in found:
        from_date = pd.to_numeric(
            df[found["event_date"]].str.extract(_YEAR_RE, expand=False), errors="coerce"
        ).to_numpy(dtype=float)
        year = np.where(np.isnan(year), from_date, year)
    out["year"] = year
    out["count"] = _numeric(df[found["count"]]) if "count" in found else np.nan
    out["species"] = df[found["species"]].str.strip().to_numpy() if "species" in found else ""
    out["row"] = df["__line__"].to_numpy()
    if "id" in found:
        out["id"] = df[found["id"]].str.strip().to_numpy()
    out.attrs["source_file"] = str(path)
    out.attrs["columns"] = {k: v for k, v in found.items()}
    return out


def read_dated_records(
    path: str | os.PathLike, *, columns: Mapping[str, str] | None = None
) -> pd.DataFrame:
    """Read dated (fossil, pollen or other past) records.

    Parameters
    ----------
    path : str or path-like
        CSV with longitude, latitude and age columns (``record_id, lon, lat, age_bp, age_sd,
        material`` or mapped through `columns`).
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
    path = Path(path)
    df = _read_table(path)
    found = _resolve_columns(df, path, _DATED_ALIASES, columns)
    missing = [c for c in ("lon", "lat", "age_bp") if c not in found]
    if missing:
        raise InputFileError(
            f"{path}: no column for {', '.join(missing)} in the dated records; file columns are: "
            f"{', '.join(_columns(df))}; rename them or map them with `columns`"
        )
    out = pd.DataFrame(index=pd.RangeIndex(len(df)))
    for canon in ("lon", "lat", "age_bp"):
        values = _numeric(df[found[canon]])
        bad = np.flatnonzero(np.isnan(values))
        if bad.size:
            line = int(df["__line__"].iloc[bad[0]])
            raise InputFileError(
                f"{path}: line {line}: column {found[canon]!r} is not a number "
                f"({df[found[canon]].iloc[bad[0]]!r}); {bad.size} such line(s); fix or remove them"
            )
        out[canon] = values
    if ((out["lat"] < -90) | (out["lat"] > 90) | (out["lon"] < -180) | (out["lon"] > 360)).any():
        bad_range = (out["lat"] < -90) | (out["lat"] > 90) | (out["lon"] < -180) | (out["lon"] > 360)
        line = int(df["__line__"].iloc[int(np.flatnonzero(bad_range.to_numpy())[0])])
        raise InputFileError(
            f"{path}: line {line}: coordinates out of range (lat in [-90, 90], lon in [-180, 360]); "
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
