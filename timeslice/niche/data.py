"""Records to model inputs: cleaning, spatial thinning, calibration area, background, extraction.

Distances are great-circle distances on the authalic sphere (:data:`timeslice.grid.AUTHALIC_RADIUS_KM`).
Neighbour searches run in a :class:`scipy.spatial.cKDTree` on unit-sphere xyz coordinates,
where a great-circle distance :math:`d` corresponds to the chord :math:`2\\sin(d / 2R)`.
"""

from __future__ import annotations

import os
import re
import warnings
from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from timeslice.errors import ConfigError, DataError, InputFileError, TimesliceWarning
from timeslice.grid import AUTHALIC_RADIUS_KM, cell_area, grid_edges, wrap_lon

__all__ = [
    "BASIS_KINDS",
    "CLEANING_REASONS",
    "INVALID_COORDINATE_FLAGS",
    "RECORD_REASONS",
    "basis_kind",
    "calibration_area",
    "calibration_area_from_mask",
    "centroid_like",
    "clean_records",
    "dated_fossils",
    "extract",
    "land_of",
    "read_background_file",
    "sample_background",
    "select_taxon",
    "taxon_name",
    "thin",
]


# ---------------------------------------------------------------------------------------------
# geometry helpers
# ---------------------------------------------------------------------------------------------
def _xyz(lon, lat) -> np.ndarray:
    """Unit-sphere Cartesian coordinates, shape (n, 3)."""
    lam = np.deg2rad(np.asarray(lon, dtype=float))
    phi = np.deg2rad(np.asarray(lat, dtype=float))
    c = np.cos(phi)
    return np.column_stack([c * np.cos(lam), c * np.sin(lam), np.sin(phi)])


def _chord(distance_km: float) -> float:
    """Chord length on the unit sphere for a great-circle distance in km."""
    angle = min(float(distance_km) / AUTHALIC_RADIUS_KM, np.pi)
    return 2.0 * np.sin(angle / 2.0)


def _arc_km(chord: np.ndarray) -> np.ndarray:
    """Great-circle distance in km for unit-sphere chord lengths."""
    return 2.0 * AUTHALIC_RADIUS_KM * np.arcsin(np.clip(np.asarray(chord) / 2.0, 0.0, 1.0))


def land_of(land: xr.DataArray | xr.Dataset) -> xr.DataArray:
    """The usable-land mask of a prepared slice: ``land`` and not ``ice`` (bool, lat x lon).

    Accepts the mask itself (a boolean DataArray) or a prepared slice Dataset.
    """
    if isinstance(land, xr.Dataset):
        if "land" not in land:
            raise DataError(
                "baseline slice has no `land` variable; prepare it with the harmonise stage "
                "(land mask from DEM, sea level and ice)"
            )
        mask = land["land"].astype(bool)
        if "ice" in land:
            mask = mask & ~land["ice"].astype(bool)
    elif isinstance(land, xr.DataArray):
        mask = land.astype(bool)
    else:
        raise DataError(f"`land` must be an xarray DataArray or Dataset, got {type(land).__name__}")
    for dim in ("lat", "lon"):
        if dim not in mask.dims:
            raise DataError(f"`land` mask needs dims (lat, lon), got {mask.dims}")
    return mask.transpose("lat", "lon")


def _nearest_index(coord: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Index of the nearest coordinate (ascending 1-D `coord`) for each value."""
    idx = np.searchsorted(coord, values)
    idx = np.clip(idx, 1, coord.size - 1) if coord.size > 1 else np.zeros_like(idx)
    if coord.size > 1:
        left = coord[idx - 1]
        right = coord[idx]
        idx = np.where(np.abs(values - left) <= np.abs(right - values), idx - 1, idx)
    return idx.astype(np.int64)


def _cell_index(grid: xr.Dataset | xr.DataArray, lon, lat) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row/column of the grid cell holding each point, and whether it is inside the grid."""
    glat = np.asarray(grid["lat"].values, dtype=float)
    glon = np.asarray(grid["lon"].values, dtype=float)
    lat_b, lon_b = grid_edges(grid)
    # records come in [-180, 180); a grid across 180 runs on past it (e.g. 165..195)
    lon = wrap_lon(np.asarray(lon, dtype=float), west=lon_b[0, 0])
    lat = np.asarray(lat, dtype=float)
    inside = (
        (lat >= lat_b[0, 0]) & (lat <= lat_b[-1, 1]) & (lon >= lon_b[0, 0]) & (lon <= lon_b[-1, 1])
    )
    return _nearest_index(glat, lat), _nearest_index(glon, lon), inside


# ---------------------------------------------------------------------------------------------
# cleaning
# ---------------------------------------------------------------------------------------------
#: Every reason a record is dropped, in the order they are tested (a record counts once, under
#: the first reason that applies). The record rules in :data:`CONDITIONAL_REASONS` are rows
#: only when the records carry what they judge (a basis, establishment, country or locality
#: column; the reader's ``coords_missing``; the aggregator's ``flags``) or when they are asked
#: for (a taxon choice; ``centroid_min_records``).
RECORD_REASONS = (
    "other taxon",
    "fossil specimen",
    "living specimen (captive or cultivated)",
    "no coordinates",
    "unparseable coordinates",
    "out-of-range coordinates",
    "zero coordinates (0, 0)",
    "aggregator flag: invalid coordinates",
    "centroid-like repeated coordinates",
    "exact duplicate",
    "outside grid",
    "on water or ice",
    "uncertainty above limit",
    "status absent",
    "year outside window",
)

#: The record rules that are rows only when they apply (see :data:`RECORD_REASONS`).
CONDITIONAL_REASONS = frozenset({
    "other taxon", "fossil specimen", "living specimen (captive or cultivated)",
    "no coordinates", "aggregator flag: invalid coordinates", "centroid-like repeated coordinates",
})

#: Reasons that are always rows of the cleaning table, in test order (the rows a plain lon/lat
#: table gets).
CLEANING_REASONS = tuple(r for r in RECORD_REASONS if r not in CONDITIONAL_REASONS)

_ABSENT = {"absent", "absence", "0", "false", "not detected"}

#: The aggregator's issue flags that say the coordinates are invalid or were zeroed; records
#: carrying one are dropped, other flags are listed. Names as in the GBIF occurrence-issue
#: vocabulary (from memory of its documentation).
INVALID_COORDINATE_FLAGS = (
    "ZERO_COORDINATE",
    "COORDINATE_INVALID",
    "COORDINATE_OUT_OF_RANGE",
    "COORDINATE_REPROJECTION_FAILED",
)

#: Kinds of basis of record that are not present-day wild presences, dropped unless kept.
BASIS_KINDS = ("fossil", "living")

# basisOfRecord values, lower case, letters only: Darwin Core's FossilSpecimen / LivingSpecimen,
# the aggregators' FOSSIL_SPECIMEN / LIVING_SPECIMEN, and older free-text spellings
_FOSSIL_BASIS = {"fossilspecimen", "fossil", "fossils", "subfossil", "subfossilspecimen"}
_LIVING_BASIS = {"livingspecimen", "living", "captive", "captivespecimen", "cultivated", "zoo",
                 "zoospecimen", "garden", "botanicgarden", "botanicalgarden"}
# establishmentMeans "managed" (Darwin Core, and the aggregators' MANAGED), degreeOfEstablishment
# "captive" / "cultivated" (Darwin Core degree-of-establishment vocabulary)
_CAPTIVE_MEANS = {"managed", "captive", "cultivated"}
# a country or locality field that names a zoo, a garden or captivity instead of a place
_CAPTIVE_TEXT = (r"\b(?:zoo|zoological (?:garden|park)|botanic(?:al)? garden|captive|captivity|"
                 r"in cultivation|cultivated)\b")

_RANK_MARKERS = {"subsp.", "subsp", "ssp.", "ssp", "var.", "var", "f.", "forma", "subvar.",
                 "subf.", "cv.", "morph", "nothosubsp.", "nothovar.", "agg."}
_PARTICLES = {"de", "van", "von", "der", "den", "la", "le", "du", "da", "di", "ex", "et", "in"}
_EPITHET = re.compile(r"[a-z][a-z\-]*")


def taxon_name(name: str, *, fold: bool = False) -> str:
    """Lower-case scientific name without authorship or rank markers.

    ``"Puma concolor couguar (Kerr, 1792)"`` -> ``"puma concolor couguar"``; with `fold`, the
    species (genus and specific epithet): ``"puma concolor"``. Epithets are the lower-case words
    after the genus (International Code of Zoological Nomenclature art. 11.9, and of Nomenclature
    for algae, fungi and plants art. 23); the first capitalised, bracketed or numeric word starts
    the authorship.
    """
    tokens = str(name).replace("×", " × ").split()
    out: list[str] = []
    for i, t in enumerate(tokens):
        low = t.lower()
        if i == 0:
            out.append(low)
        elif low in _RANK_MARKERS:
            continue
        elif t == "×":
            out.append(t)
        elif _EPITHET.fullmatch(t) and low not in _PARTICLES:
            out.append(low)
        else:
            break
    if fold:
        n = 3 if len(out) > 1 and out[1] == "×" else 2
        out = out[:n]
    return " ".join(out)


def _names(series: pd.Series, *, fold: bool = False) -> pd.Series:
    """:func:`taxon_name` of every value, computed once per distinct value."""
    uniq = pd.unique(series)
    return series.map(dict(zip(uniq, (taxon_name(u, fold=fold) for u in uniq))))


def _shown(name: str) -> str:
    return name[:1].upper() + name[1:] if name else "(no name)"


def _text(df: pd.DataFrame, col: str) -> pd.Series:
    if col not in df.columns:
        return pd.Series("", index=df.index, dtype=object)
    return df[col].fillna("").astype(str).str.strip()


def _taxon_groups(df: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    """Species identity of each record (species key, else accepted name, else scientific name,
    at species level) and a readable name per identity."""
    names = _names(_text(df, "species"), fold=True)
    if "species_key" in df.columns and (_text(df, "species_key") != "").all() and len(df):
        key = _text(df, "species_key")
        label = names.groupby(key).agg(lambda s: s.mode().iloc[0] if len(s.mode()) else "")
        return key, key.map(lambda k: f"{_shown(label[k])} (key {k})")
    acc = _text(df, "accepted_name")
    if (acc != "").any():
        key = _names(acc, fold=True)
        return key, key.map(_shown)
    return names, names.map(_shown)


def _listing(labels: pd.Series, n: int = 5) -> str:
    counts = labels.value_counts()
    parts = [f"{name[:40]} ({c})" for name, c in counts.head(n).items()]
    more = f" and {len(counts) - n} more" if len(counts) > n else ""
    return ", ".join(parts) + more


def select_taxon(
    records: pd.DataFrame,
    taxon: str | int | Sequence[str | int] | None,
    *,
    taxon_field: Literal["auto", "scientific_name", "accepted_name", "taxon_key"] = "auto",
    fold_subspecies: bool = False,
) -> np.ndarray:
    """Which records are the chosen taxon (all of them when the file holds one species).

    Parameters
    ----------
    records : pandas.DataFrame
        Canonical records (:func:`timeslice.readers.read_occurrences`).
    taxon : str, int, sequence of them, or None
        Scientific or accepted name(s) (authorship ignored), or taxon key(s). None: the records
        must be of one species.
    taxon_field : {"auto", "scientific_name", "accepted_name", "taxon_key"}
        What `taxon` names; "auto": keys when every choice is a whole number, else scientific names.
    fold_subspecies : bool
        Count records of subspecies (and varieties, forms) of a chosen species as that species.

    Returns
    -------
    numpy.ndarray of bool

    Raises
    ------
    DataError
        No choice and several species in the records (the message lists them with their record
        counts), or a choice that matches no record (the message lists what there is).
    ConfigError
        A choice by accepted name or key when the records have no such column.
    """
    n = len(records)
    if taxon is None:
        key, label = _taxon_groups(records)
        named = key != ""
        if key[named].nunique() > 1:
            raise DataError(
                f"the records hold {key[named].nunique()} species: {_listing(label[named])}; "
                f"choose with [species] taxon = \"{label[named].value_counts().index[0].split(' (key')[0][:40]}\" "
                "(or a list of names or taxon keys)"
            )
        return np.ones(n, dtype=bool)
    choices = [str(c).strip() for c in (taxon if isinstance(taxon, (list, tuple)) else [taxon])]
    choices = [c for c in choices if c]
    if not choices:
        raise ConfigError("`taxon` is empty; give a name, a taxon key or a list of them")
    field = taxon_field
    if field == "auto":
        field = "taxon_key" if all(re.fullmatch(r"\d+", c) for c in choices) else "scientific_name"
    if field not in ("scientific_name", "accepted_name", "taxon_key"):
        raise ConfigError(f"`taxon_field` must be 'auto', 'scientific_name', 'accepted_name' or "
                          f"'taxon_key', got {taxon_field!r}")
    if field == "taxon_key":
        cols = [c for c in ("taxon_key", "accepted_key") + (("species_key",) if fold_subspecies else ())
                if c in records.columns]
        if not cols:
            raise ConfigError("[species] taxon names taxon keys, but the records have no key "
                              "column (taxonKey, taxonID, acceptedTaxonKey, speciesKey); choose by name")
        match = np.zeros(n, dtype=bool)
        for c in cols:
            match |= _text(records, c).isin(choices).to_numpy()
        what, shown = "taxon key", _text(records, cols[0])
    else:
        col = "species" if field == "scientific_name" else "accepted_name"
        if col not in records.columns:
            raise ConfigError(f"[species] taxon_field = {field!r}, but the records have no "
                              f"{'acceptedScientificName' if col == 'accepted_name' else 'scientificName'} "
                              "column; choose by another field or map the column")
        raw = _text(records, col)
        full = _names(raw)
        want = {taxon_name(c) for c in choices}
        match = full.isin(want).to_numpy().copy()
        if fold_subspecies:
            match |= _names(raw, fold=True).isin(want).to_numpy()
        what, shown = field.replace("_", " "), full.map(_shown)
    if n and not match.any():
        raise DataError(
            f"no record has the {what} {', '.join(map(repr, choices))[:80]}; the records hold: "
            f"{_listing(shown)}; check the spelling, taxon_field or fold_subspecies"
        )
    return match


def basis_kind(records: pd.DataFrame) -> np.ndarray:
    """``"fossil"``, ``"living"`` or ``""`` per record.

    Fossil: basis of record FossilSpecimen (any spelling, also "Fossil", "subfossil"). Living
    (zoo, garden, captive): basis LivingSpecimen, establishment means "managed" or degree of
    establishment "captive"/"cultivated", or a country or locality field naming a zoo, a botanic
    garden, captivity or cultivation.
    """
    n = len(records)
    kind = np.full(n, "", dtype=object)
    basis = _text(records, "basis").str.lower().str.replace(r"[^a-z]", "", regex=True)
    living = basis.isin(_LIVING_BASIS).to_numpy().copy()
    means = _text(records, "establishment").str.lower().str.replace(r"[^a-z]", "", regex=True)
    living |= means.isin(_CAPTIVE_MEANS).to_numpy()
    for col in ("country", "locality"):
        if col in records.columns:
            living |= _text(records, col).str.contains(_CAPTIVE_TEXT, case=False, regex=True).to_numpy()
    kind[living] = "living"
    kind[basis.isin(_FOSSIL_BASIS).to_numpy()] = "fossil"
    return kind


def _check_kinds(keep_basis: Sequence[str]) -> set[str]:
    keep = {str(k).strip().lower() for k in keep_basis}
    bad = keep - set(BASIS_KINDS)
    if bad:
        raise ConfigError(f"`keep_basis` entries must be {' or '.join(map(repr, BASIS_KINDS))}, "
                          f"got {sorted(bad)}")
    return keep


def _split_flags(flags: pd.Series) -> pd.Series:
    uniq = pd.unique(flags)
    sets = {u: frozenset(x for x in re.split(r"[;,|\s]+", str(u).upper()) if x) for u in uniq}
    return flags.map(sets)


def _coordinate_checks(df: pd.DataFrame) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    lon = pd.to_numeric(df["lon"], errors="coerce").to_numpy(dtype=float)
    lat = pd.to_numeric(df["lat"], errors="coerce").to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90) & (lon >= -180) & (lon <= 180)
        ok &= ~((lon == 0) & (lat == 0))
    return lon, lat, ok


def centroid_like(
    records: pd.DataFrame, *, min_records: int = 5, min_uncertainty_m: float = 10_000.0
) -> np.ndarray:
    """Records at a coordinate that looks like a country or grid centroid, not a locality.

    A coordinate pair shared exactly (to 1e-6 degrees) by at least `min_records` records of the
    file is centroid-like when the median stated coordinate uncertainty of those records is at
    least `min_uncertainty_m`, or, when none of them states an uncertainty, when both coordinates
    are whole degrees. Records georeferenced to the centre of a country, a province or an atlas
    grid square share their coordinates and carry a large uncertainty; a common practice check
    that needs no gazetteer download.
    """
    if int(min_records) < 2:
        raise ConfigError(f"`centroid_min_records` must be >= 2, got {min_records}")
    lon, lat, ok = _coordinate_checks(records)
    out = np.zeros(len(records), dtype=bool)
    if not ok.any():
        return out
    unc = (pd.to_numeric(records["uncertainty_m"], errors="coerce").to_numpy(dtype=float)
           if "uncertainty_m" in records.columns else np.full(len(records), np.nan))
    g = pd.DataFrame({"lon": np.round(lon[ok], 6), "lat": np.round(lat[ok], 6), "unc": unc[ok]})
    grouped = g.groupby(["lon", "lat"], sort=False)
    size = grouped["lon"].transform("size").to_numpy()
    med = grouped["unc"].transform("median").to_numpy(dtype=float)
    whole = ((g["lon"] % 1 == 0) & (g["lat"] % 1 == 0)).to_numpy()
    with np.errstate(invalid="ignore"):
        flag = (size >= int(min_records)) & ((med >= float(min_uncertainty_m)) | (np.isnan(med) & whole))
    out[np.flatnonzero(ok)] = flag
    return out


def clean_records(
    records: pd.DataFrame,
    *,
    land: xr.DataArray | xr.Dataset,
    uncertainty_max_m: float | None = None,
    years: tuple[float | None, float | None] | None = None,
    taxon: str | int | Sequence[str | int] | None = None,
    taxon_field: Literal["auto", "scientific_name", "accepted_name", "taxon_key"] = "auto",
    fold_subspecies: bool = False,
    keep_basis: Sequence[str] = (),
    drop_flags: Sequence[str] | None = None,
    centroid_min_records: int | None = None,
    centroid_min_uncertainty_m: float = 10_000.0,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Drop unusable occurrence records and count the drops per reason.

    Parameters
    ----------
    records : pandas.DataFrame
        Canonical records (:func:`timeslice.readers.read_occurrences`): at least ``lon`` and
        ``lat``; ``uncertainty_m``, ``status``, ``year``, ``basis``, ``species`` (and the taxon
        keys, ``flags``, ``establishment``, ``country``, ``locality``) are used when present.
    land : xarray.DataArray or xarray.Dataset
        Boolean land mask of the baseline on the model grid, or the prepared baseline slice
        (then usable land is ``land & ~ice``).
    uncertainty_max_m : float, optional
        Drop records whose coordinate uncertainty exceeds this many metres. Records without an
        uncertainty are kept.
    years : (float or None, float or None), optional
        Inclusive window of collection years; either end may be None (open). When a window is
        given, records without a year are dropped under the same reason.
    taxon, taxon_field, fold_subspecies
        The taxon to keep (:func:`select_taxon`); without a choice the records must hold one
        species.
    keep_basis : sequence of {"fossil", "living"}
        Kinds of :func:`basis_kind` to keep; by default fossil and living (zoo, garden, captive)
        specimens are dropped.
    drop_flags : sequence of str, optional
        Aggregator issue flags that drop a record (default :data:`INVALID_COORDINATE_FLAGS`).
    centroid_min_records, centroid_min_uncertainty_m
        Drop centroid-like coordinates (:func:`centroid_like`); off when `centroid_min_records`
        is None.

    Returns
    -------
    kept : pandas.DataFrame
        The usable records, longitudes wrapped to [-180, 180), index reset.
    table : pandas.DataFrame
        ``reason, n_dropped, note``: every reason of :data:`CLEANING_REASONS` and the record
        rules that apply (:data:`RECORD_REASONS`), in test order, with 0 where nothing was
        dropped; a first row "records read" (0 dropped) names the file's format and encoding when
        the reader recorded them. ``table.attrs`` holds ``n_input`` and ``n_kept``; ``n_input``
        equals the sum of ``n_dropped`` plus ``n_kept``.

    Raises
    ------
    DataError
        The records hold several species and no `taxon` is chosen, or the choice matches none.

    Notes
    -----
    Reasons are tested in order and a record counts under the first that applies. Exact
    duplicates are records equal in every canonical column (species and taxon keys,
    coordinates, uncertainty, status, basis, year, count) after the preceding tests, so records
    of different taxa are never duplicates; the first is kept. "On water or ice" uses the
    nearest grid cell of the baseline mask. A record whose status is empty and whose individual
    count is 0 is an absence.
    """
    if not isinstance(records, pd.DataFrame):
        raise DataError(f"`records` must be a pandas DataFrame, got {type(records).__name__}")
    for col in ("lon", "lat"):
        if col not in records.columns:
            raise DataError(
                f"`records` has no {col!r} column (columns: {', '.join(map(str, records.columns))}); "
                "read the file with timeslice.readers.read_occurrences"
            )
    if uncertainty_max_m is not None and not (float(uncertainty_max_m) > 0):
        raise ConfigError(f"`uncertainty_max_m` must be > 0 metres, got {uncertainty_max_m}")
    if years is not None:
        if len(years) != 2:
            raise ConfigError(f"`years` must be a pair (first, last), got {years!r}")
        lo, hi = years
        if lo is not None and hi is not None and lo > hi:
            raise ConfigError(f"`years` window is empty: first {lo} > last {hi}; swap them")
    keep = _check_kinds(keep_basis)
    mask_land = land_of(land)

    df = records.copy()
    df["lon"] = pd.to_numeric(df["lon"], errors="coerce").astype(float)
    df["lat"] = pd.to_numeric(df["lat"], errors="coerce").astype(float)
    n_input = len(df)
    alive = np.ones(n_input, dtype=bool)
    counts: dict[str, int] = {}
    notes: dict[str, str] = {}
    none = np.zeros(n_input, dtype=bool)

    def drop(reason: str, bad: np.ndarray, note: str = "") -> None:
        bad = np.asarray(bad, dtype=bool) & alive
        counts[reason] = int(bad.sum())
        notes[reason] = note
        alive[bad] = False

    chosen = select_taxon(df, taxon, taxon_field=taxon_field, fold_subspecies=fold_subspecies)
    if taxon is not None:
        drop("other taxon", ~chosen, f"kept: {taxon if not isinstance(taxon, (list, tuple)) else ', '.join(map(str, taxon))}"
             + (" with subspecies" if fold_subspecies else ""))
    if any(c in df.columns for c in ("basis", "establishment", "country", "locality")):
        kind = basis_kind(df)
        fossil = (kind == "fossil") & alive
        dated = 0
        if "age_bp" in df.columns:
            _, _, ok = _coordinate_checks(df)
            dated = int((fossil & ok & np.isfinite(pd.to_numeric(df["age_bp"], errors="coerce"))).sum())
        if "fossil" in keep:
            drop("fossil specimen", none, f"kept as presences (keep_basis); {int(fossil.sum())} in the file")
        else:
            n_fossil = int(fossil.sum())
            drop("fossil specimen", kind == "fossil",
                 "" if not n_fossil else
                 f"{dated} with an age and coordinates offered to the hindcast check as dated records"
                 if dated else "none carries an age, so none is offered to the hindcast check")
        living = kind == "living"
        drop("living specimen (captive or cultivated)", none if "living" in keep else living,
             f"kept as presences (keep_basis); {int((living & alive).sum())} in the file" if "living" in keep else "")

    lon = df["lon"].to_numpy()
    lat = df["lat"].to_numpy()
    if "coords_missing" in df.columns:
        drop("no coordinates", df["coords_missing"].fillna(False).astype(bool).to_numpy())
    drop("unparseable coordinates", ~np.isfinite(lon) | ~np.isfinite(lat))
    with np.errstate(invalid="ignore"):
        drop("out-of-range coordinates", (np.abs(lat) > 90) | (lon < -180) | (lon > 180))
        drop("zero coordinates (0, 0)", (lon == 0) & (lat == 0))
    flag_sets = None
    if "flags" in df.columns:
        dropset = {str(f).strip().upper() for f in (INVALID_COORDINATE_FLAGS if drop_flags is None else drop_flags)}
        flag_sets = _split_flags(_text(df, "flags"))
        drop("aggregator flag: invalid coordinates", flag_sets.map(lambda s: bool(s & dropset)).to_numpy(),
             f"flags dropped: {', '.join(sorted(dropset)) or 'none'}")
    if centroid_min_records is not None:
        drop("centroid-like repeated coordinates",
             centroid_like(df, min_records=centroid_min_records, min_uncertainty_m=centroid_min_uncertainty_m),
             f"{int(centroid_min_records)}+ records at one point with median uncertainty >= "
             f"{float(centroid_min_uncertainty_m):g} m (or none stated and whole degrees)")
    lon = np.where(alive, ((lon + 180.0) % 360.0) - 180.0, lon)
    df["lon"] = lon
    key_cols = [c for c in ("species", "accepted_name", "taxon_key", "accepted_key", "species_key", "lon", "lat",
                            "uncertainty_m", "status", "basis", "year", "count") if c in df.columns]
    dup = np.zeros(n_input, dtype=bool)
    if alive.any():
        live = df.loc[alive, key_cols]
        dup[np.flatnonzero(alive)] = live.duplicated(keep="first").to_numpy()
    drop("exact duplicate", dup, "judged within each taxon" if "species" in df.columns else "")

    rows, cols, inside = _cell_index(mask_land, np.nan_to_num(lon), np.nan_to_num(lat))
    drop("outside grid", ~inside)
    on_land = np.asarray(mask_land.values, dtype=bool)[rows, cols]
    drop("on water or ice", ~on_land)

    if uncertainty_max_m is not None and "uncertainty_m" in df.columns:
        unc = pd.to_numeric(df["uncertainty_m"], errors="coerce").to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            drop("uncertainty above limit", unc > float(uncertainty_max_m))
    else:
        drop("uncertainty above limit", none)

    if "status" in df.columns:
        status = df["status"].fillna("").astype(str).str.strip().str.lower()
        absent = status.isin(list(_ABSENT)).to_numpy().copy()
        if "count" in df.columns:
            zero = pd.to_numeric(df["count"], errors="coerce").to_numpy(dtype=float) == 0
            absent |= zero & (status == "").to_numpy()
        drop("status absent", absent)
    else:
        drop("status absent", none)

    if years is not None:
        lo, hi = years
        if "year" in df.columns:
            yr = pd.to_numeric(df["year"], errors="coerce").to_numpy(dtype=float)
        else:
            yr = np.full(n_input, np.nan)
        with np.errstate(invalid="ignore"):
            bad = ~np.isfinite(yr)
            if lo is not None:
                bad |= yr < lo
            if hi is not None:
                bad |= yr > hi
        drop("year outside window", bad)
    else:
        drop("year outside window", none)

    if flag_sets is not None:
        dropset_all = {str(f).strip().upper() for f in (INVALID_COORDINATE_FLAGS if drop_flags is None else drop_flags)}
        other = pd.Series([f for s in flag_sets[alive] for f in sorted(s - dropset_all)], dtype=object)
        listed = ", ".join(f"{k} {v}" for k, v in other.value_counts().items()) if len(other) else "none"
        notes["aggregator flag: invalid coordinates"] += f"; other flags on kept records (kept): {listed}"

    reasons = [r for r in RECORD_REASONS if r in counts]
    table = pd.DataFrame(
        {"reason": reasons, "n_dropped": [counts[r] for r in reasons], "note": [notes[r] for r in reasons]}
    )
    if records.attrs.get("read"):
        head = pd.DataFrame({"reason": ["records read"], "n_dropped": [0], "note": [str(records.attrs["read"])]})
        table = pd.concat([head, table], ignore_index=True)
    table.attrs["n_input"] = n_input
    table.attrs["n_kept"] = int(alive.sum())
    kept = df.loc[alive].reset_index(drop=True)
    kept.attrs = dict(records.attrs)
    return kept, table


def dated_fossils(
    records: pd.DataFrame,
    *,
    taxon: str | int | Sequence[str | int] | None = None,
    taxon_field: Literal["auto", "scientific_name", "accepted_name", "taxon_key"] = "auto",
    fold_subspecies: bool = False,
    keep_basis: Sequence[str] = (),
) -> pd.DataFrame:
    """Fossil records of the chosen taxon that carry an age, as dated records for the hindcast.

    These are the records :func:`clean_records` drops as "fossil specimen" that have usable
    coordinates (finite, in range, not (0, 0)) and an ``age_bp``. None when fossils are kept as
    presences (`keep_basis` holds "fossil").

    Returns
    -------
    pandas.DataFrame
        ``lon`` (wrapped to [-180, 180)), ``lat``, ``age_bp``, ``age_sd``, ``material``
        ("fossil specimen"), ``row`` and ``id`` when present; empty when there are none.
    """
    cols = ["lon", "lat", "age_bp", "age_sd", "material", "row"]
    if "fossil" in _check_kinds(keep_basis) or "age_bp" not in records.columns or not len(records):
        return pd.DataFrame({c: pd.Series(dtype=float if c not in ("material",) else object) for c in cols})
    chosen = select_taxon(records, taxon, taxon_field=taxon_field, fold_subspecies=fold_subspecies)
    lon, lat, ok = _coordinate_checks(records)
    age = pd.to_numeric(records["age_bp"], errors="coerce").to_numpy(dtype=float)
    sel = chosen & (basis_kind(records) == "fossil") & ok & np.isfinite(age)
    out = pd.DataFrame({
        "lon": ((lon[sel] + 180.0) % 360.0) - 180.0,
        "lat": lat[sel],
        "age_bp": age[sel],
        "age_sd": (pd.to_numeric(records["age_sd"], errors="coerce").to_numpy(dtype=float)[sel]
                   if "age_sd" in records.columns else np.nan),
        "material": "fossil specimen",
        "row": records["row"].to_numpy()[sel] if "row" in records.columns else np.flatnonzero(sel) + 1,
    })
    if "id" in records.columns:
        out["id"] = records["id"].to_numpy()[sel]
    out.attrs["source_file"] = records.attrs.get("source_file", "")
    return out.reset_index(drop=True)

# ---------------------------------------------------------------------------------------------
# thinning
# ---------------------------------------------------------------------------------------------
def _greedy_independent(neighbours: list[list[int]], order: np.ndarray) -> np.ndarray:
    """Keep points in `order` unless a kept point is a neighbour (a maximal independent set)."""
    blocked = np.zeros(len(neighbours), dtype=bool)
    keep = []
    for i in order:
        if blocked[i]:
            continue
        keep.append(i)
        blocked[neighbours[i]] = True
    return np.sort(np.asarray(keep, dtype=np.int64))


def thin(
    records: pd.DataFrame,
    *,
    grid: xr.Dataset | xr.DataArray | None = None,
    min_distance_km: float | None = None,
    seed: int | np.random.Generator | None,
    repeats: int = 10,
) -> pd.DataFrame:
    """Spatially thin records: one per grid cell, or no pair closer than a distance.

    Parameters
    ----------
    records : pandas.DataFrame
        Records with ``lon``, ``lat`` in degrees.
    grid : xarray.Dataset or DataArray, optional
        Keep one record per cell of this grid (chosen at random, seeded).
    min_distance_km : float, optional
        Keep a set of records with no two closer than this great-circle distance [km].
    seed : int or numpy.random.Generator
        Seed of the random choices.
    repeats : int
        Randomised greedy passes for `min_distance_km`; the largest set found is kept (the first
        of equal size).

    Returns
    -------
    pandas.DataFrame
        The kept records in their input order, index reset; ``attrs["thinning"]`` says how.

    Notes
    -----
    The distance rule is a randomised greedy maximal independent set of the graph joining
    records closer than :math:`d`: records are visited in a random order and kept unless a kept
    record lies within :math:`d` (pairs at exactly :math:`d` count as too close). Several passes
    approach the largest such set, which is NP-hard to find exactly.
    """
    if (grid is None) == (min_distance_km is None):
        raise ConfigError("thin: give exactly one of `grid` (one record per cell) or `min_distance_km`")
    rng = np.random.default_rng(seed)
    n = len(records)
    if n == 0:
        out = records.reset_index(drop=True)
        out.attrs = dict(records.attrs)
        return out
    lon = records["lon"].to_numpy(dtype=float)
    lat = records["lat"].to_numpy(dtype=float)
    if grid is not None:
        rows, cols, _ = _cell_index(grid, lon, lat)
        cell = rows * max(int(np.asarray(grid["lon"]).size), 1) + cols
        order = rng.permutation(n)
        _, first = np.unique(cell[order], return_index=True)
        keep = np.sort(order[first])
        how = "one record per grid cell (random choice within a cell)"
    else:
        d = float(min_distance_km)
        if not d > 0:
            raise ConfigError(f"`min_distance_km` must be > 0, got {min_distance_km}")
        if int(repeats) < 1:
            raise ConfigError(f"`repeats` must be >= 1, got {repeats}")
        tree = cKDTree(_xyz(lon, lat))
        # a tiny relative margin so that pairs at the distance (up to rounding) count as too close
        neighbours = tree.query_ball_point(_xyz(lon, lat), r=_chord(d) * (1 + 1e-9))
        neighbours = [[j for j in nb if j != i] for i, nb in enumerate(neighbours)]
        best = None
        for _ in range(int(repeats)):
            kept = _greedy_independent(neighbours, rng.permutation(n))
            if best is None or kept.size > best.size:
                best = kept
        keep = best
        how = f"no pair closer than {d:g} km (randomised greedy, best of {int(repeats)} passes)"
    out = records.iloc[keep].reset_index(drop=True)
    out.attrs = dict(records.attrs)
    out.attrs["thinning"] = how
    return out


# ---------------------------------------------------------------------------------------------
# calibration area
# ---------------------------------------------------------------------------------------------
def _gnomonic(lon, lat, lon0: float, lat0: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gnomonic projection about (lon0, lat0): great circles become straight lines.

    Returns x, y and cos c (c = angular distance from the centre; cos c <= 0 is the far
    hemisphere, where the projection is undefined). Snyder (1987), Map Projections: A Working
    Manual, USGS Prof. Paper 1395, eqs. 22-3 to 22-5.
    """
    lam = np.deg2rad(np.asarray(lon, dtype=float) - lon0)
    phi = np.deg2rad(np.asarray(lat, dtype=float))
    phi0 = np.deg2rad(lat0)
    cos_c = np.sin(phi0) * np.sin(phi) + np.cos(phi0) * np.cos(phi) * np.cos(lam)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.cos(phi) * np.sin(lam) / cos_c
        y = (np.cos(phi0) * np.sin(phi) - np.sin(phi0) * np.cos(phi) * np.cos(lam)) / cos_c
    return x, y, cos_c


def _slerp_edge(p: np.ndarray, q: np.ndarray, step_km: float) -> np.ndarray:
    """Points every <= step_km along the great-circle arc from unit vector p to q."""
    omega = np.arccos(np.clip(np.dot(p, q), -1.0, 1.0))
    n = max(int(np.ceil(omega * AUTHALIC_RADIUS_KM / step_km)), 1)
    t = np.linspace(0.0, 1.0, n + 1)[:, None]
    if omega < 1e-12:
        return np.repeat(p[None, :], n + 1, axis=0)
    return (np.sin((1 - t) * omega) * p + np.sin(t * omega) * q) / np.sin(omega)


def _hull(lon: np.ndarray, lat: np.ndarray):
    """Spherical convex hull of points as (vertex xyz array, inside-test function or None)."""
    from scipy.spatial import ConvexHull, Delaunay, QhullError

    xyz = _xyz(lon, lat)
    centre = xyz.mean(axis=0)
    norm = np.linalg.norm(centre)
    if norm < 1e-9:
        raise DataError("records are spread over the whole sphere; use method='buffer'")
    centre /= norm
    lon0 = float(np.rad2deg(np.arctan2(centre[1], centre[0])))
    lat0 = float(np.rad2deg(np.arcsin(np.clip(centre[2], -1, 1))))
    x, y, cos_c = _gnomonic(lon, lat, lon0, lat0)
    if np.any(cos_c <= 0.05):
        raise DataError(
            "records span more than a hemisphere, so their convex hull is undefined; "
            "use calibration method 'buffer'"
        )
    pts = np.column_stack([x, y])
    try:
        hull = ConvexHull(pts)
    except (QhullError, ValueError):
        return xyz, None  # collinear or too few points: the buffer of the points/segment
    verts = hull.vertices
    tri = Delaunay(pts[verts])

    def inside(qlon, qlat):
        qx, qy, qc = _gnomonic(qlon, qlat, lon0, lat0)
        ok = qc > 0
        res = np.zeros(qx.shape, dtype=bool)
        res[ok] = tri.find_simplex(np.column_stack([qx[ok], qy[ok]])) >= 0
        return res

    return xyz[verts], inside


def calibration_area(
    records: pd.DataFrame,
    land: xr.DataArray | xr.Dataset,
    *,
    buffer_km: float,
    method: Literal["buffer", "hull_buffer"] = "buffer",
) -> xr.DataArray:
    """Calibration (accessible) area: land cells within a geodesic buffer of the records.

    Parameters
    ----------
    records : pandas.DataFrame
        Cleaned records with ``lon``, ``lat``.
    land : xarray.DataArray or Dataset
        Baseline land mask (or prepared baseline slice; then ``land & ~ice``).
    buffer_km : float
        Buffer radius [km], great-circle.
    method : {"buffer", "hull_buffer"}
        ``buffer``: cells whose centre lies within `buffer_km` of a record. ``hull_buffer``:
        cells inside the spherical convex hull of the records or within `buffer_km` of it.

    Returns
    -------
    xarray.DataArray
        ``calibration_area(lat, lon)`` bool, on land only.

    Raises
    ------
    DataError
        No records, or the area holds no land cell.

    Notes
    -----
    The spherical convex hull is the planar hull in a gnomonic projection centred on the
    records' mean direction, where great circles are straight lines (Snyder 1987, p. 164);
    its edges are densified along great circles every ``buffer_km / 20`` so that the
    buffer of the edges is exact to within that step.
    """
    if method not in ("buffer", "hull_buffer"):
        import difflib

        close = difflib.get_close_matches(str(method), ["buffer", "hull_buffer"], n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise ConfigError(f"calibration `method` must be 'buffer' or 'hull_buffer', got {method!r}{hint}")
    if not (np.isfinite(buffer_km) and buffer_km > 0):
        raise ConfigError(f"`buffer_km` must be a positive number of km, got {buffer_km}")
    mask_land = land_of(land)
    if len(records) == 0:
        raise DataError("calibration area: no records left to buffer; check the cleaning table")
    lon = records["lon"].to_numpy(dtype=float)
    lat = records["lat"].to_numpy(dtype=float)
    sources = _xyz(lon, lat)
    inside = None
    if method == "hull_buffer" and len(records) >= 2:
        verts, inside = _hull(lon, lat)
        step = max(buffer_km / 20.0, 1e-3)
        if inside is None:
            # collinear records: buffer the great-circle path through them in order
            order = np.lexsort((lat, lon))
            ring = sources[order]
        else:
            ring = np.vstack([verts, verts[:1]])
        edges = [_slerp_edge(ring[i], ring[i + 1], step) for i in range(len(ring) - 1)]
        sources = np.vstack([sources] + edges)
    # only the latitude band the buffer can reach is searched (great-circle hull edges may bulge
    # poleward of the records, so the band comes from the densified edges); this bounds memory
    reach = float(np.rad2deg(buffer_km / AUTHALIC_RADIUS_KM))
    src_lat = np.rad2deg(np.arcsin(np.clip(sources[:, 2], -1.0, 1.0)))
    glat_all = np.asarray(mask_land["lat"].values, dtype=float)
    band = (glat_all >= src_lat.min() - reach - 1e-6) & (glat_all <= src_lat.max() + reach + 1e-6)
    glon, glat = np.meshgrid(mask_land["lon"].values, glat_all[band])
    cells = _xyz(glon.ravel(), glat.ravel())
    inside_hull = inside(glon.ravel(), glat.ravel()) if inside is not None else np.zeros(cells.shape[0], dtype=bool)
    tree = cKDTree(sources)
    dist, _ = tree.query(cells, k=1, distance_upper_bound=_chord(buffer_km) * (1 + 1e-12))
    near = np.isfinite(dist) & (_arc_km(np.where(np.isfinite(dist), dist, 0)) <= buffer_km)
    area = np.zeros(mask_land.shape, dtype=bool)
    area[band] = (near | inside_hull).reshape(glat.shape)
    area &= np.asarray(mask_land.values, dtype=bool)
    if not area.any():
        raise DataError(
            f"calibration area ({method}, buffer_km={buffer_km:g}) around {len(records)} record(s) "
            "contains no land cell; increase buffer_km or check the records' coordinates"
        )
    out = xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": mask_land["lat"], "lon": mask_land["lon"]},
        name="calibration_area",
        attrs={
            "long_name": "calibration area",
            "description": (
                f"land cells whose centre lies within {buffer_km:g} km (great-circle) of "
                + ("a record" if method == "buffer" else "the records' spherical convex hull")
            ),
            "method": method,
            "buffer_km": float(buffer_km),
            "n_records": int(len(records)),
        },
    )
    return out


def calibration_area_from_mask(
    mask: xr.DataArray | str | os.PathLike,
    land: xr.DataArray | xr.Dataset,
    *,
    variable: str | None = None,
) -> xr.DataArray:
    """Calibration area from a user mask (a DataArray or a NetCDF file) on the model grid.

    Nonzero, non-missing mask cells count as inside; the result is intersected with land.
    The mask must be on the same lat/lon grid as `land` (within 1e-6 degrees).

    Raises
    ------
    InputFileError
        The file is missing or unreadable, or `variable` is not in it.
    DataError
        The grid differs from the model grid, or the mask holds no land.
    """
    source = "calibration mask"
    if not isinstance(mask, xr.DataArray):
        path = os.fspath(mask)
        source = path
        if not os.path.exists(path):
            raise InputFileError(f"{path}: calibration mask file not found; check the path")
        try:
            with xr.open_dataset(path) as ds:
                names = list(ds.data_vars)
                name = variable or (names[0] if len(names) == 1 else None)
                if name is None or name not in ds:
                    raise InputFileError(
                        f"{path}: choose the mask variable with `variable` (file has: {', '.join(names)})"
                    )
                mask = ds[name].load()
        except (OSError, ValueError) as err:
            raise InputFileError(f"{path}: not a readable NetCDF mask ({err}); check the file") from err
        from timeslice.grid import normalise_lonlat

        mask = normalise_lonlat(mask, source=path)
    mask_land = land_of(land)
    if "lat" not in mask.dims or "lon" not in mask.dims:
        raise DataError(f"{source}: mask needs dims (lat, lon), got {mask.dims}")
    mask = mask.transpose("lat", "lon")
    same = mask.sizes["lat"] == mask_land.sizes["lat"] and mask.sizes["lon"] == mask_land.sizes["lon"]
    if same:
        same = np.allclose(mask["lat"].values, mask_land["lat"].values, atol=1e-6) and np.allclose(
            mask["lon"].values, mask_land["lon"].values, atol=1e-6
        )
    if not same:
        raise DataError(
            f"{source}: mask grid ({mask.sizes['lat']} x {mask.sizes['lon']}) differs from the model "
            f"grid ({mask_land.sizes['lat']} x {mask_land.sizes['lon']}); regrid it onto the baseline grid"
        )
    values = np.asarray(mask.values)
    inside = np.where(np.isnan(values.astype(float)), False, values.astype(float) != 0)
    area = inside & np.asarray(mask_land.values, dtype=bool)
    if not area.any():
        raise DataError(f"{source}: calibration mask contains no land cell; check the mask values")
    return xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": mask_land["lat"], "lon": mask_land["lon"]},
        name="calibration_area",
        attrs={
            "long_name": "calibration area",
            "description": f"nonzero cells of {source}, on land",
            "method": "mask",
        },
    )


# ---------------------------------------------------------------------------------------------
# background
# ---------------------------------------------------------------------------------------------
def sample_background(
    area: xr.DataArray,
    *,
    n: int = 10000,
    seed: int | np.random.Generator | None,
) -> pd.DataFrame:
    """Background points: cell centres drawn within `area` with probability proportional to area.

    Parameters
    ----------
    area : xarray.DataArray
        Boolean ``(lat, lon)`` calibration area.
    n : int
        Number of points; when the area has fewer cells, every cell is used once (with a
        :class:`TimesliceWarning`).
    seed : int or numpy.random.Generator
        Seed.

    Returns
    -------
    pandas.DataFrame
        ``lon``, ``lat`` [degrees] of distinct cell centres.

    Notes
    -----
    Cells are drawn without replacement, each draw with probability proportional to the
    spherical cell area :math:`R^2\\Delta\\lambda(\\sin\\varphi_2-\\sin\\varphi_1)` among the cells
    not yet drawn (successive sampling), so that on a lat-lon grid high-latitude cells are not
    over-represented.
    """
    if not isinstance(area, xr.DataArray):
        raise DataError(f"`area` must be a boolean DataArray (lat, lon), got {type(area).__name__}")
    n = int(n)
    if n < 1:
        raise ConfigError(f"background `n` must be >= 1, got {n}")
    area = area.transpose("lat", "lon")
    mask = np.asarray(area.values, dtype=bool)
    idx = np.flatnonzero(mask.ravel())
    if idx.size == 0:
        raise DataError("calibration area has no cells to sample background points from")
    rng = np.random.default_rng(seed)
    if n >= idx.size:
        if n > idx.size:
            warnings.warn(
                f"background: asked for {n} points but the calibration area has only {idx.size} "
                "cells; using every cell once",
                TimesliceWarning,
                stacklevel=2,
            )
        chosen = idx
    else:
        w = np.asarray(cell_area(area).values, dtype=float).ravel()[idx]
        chosen = np.sort(rng.choice(idx, size=n, replace=False, p=w / w.sum()))
    rows, cols = np.unravel_index(chosen, mask.shape)
    out = pd.DataFrame(
        {
            "lon": np.asarray(area["lon"].values, dtype=float)[cols],
            "lat": np.asarray(area["lat"].values, dtype=float)[rows],
        }
    )
    out.attrs["sampling"] = "cell centres by cell area, without replacement"
    return out


def read_background_file(
    path: str | os.PathLike,
    area: xr.DataArray,
    *,
    columns: dict[str, str] | None = None,
    n: int | None = None,
    seed: int | np.random.Generator | None = 0,
) -> pd.DataFrame:
    """Target-group background: records of related species from a file, kept inside `area`.

    The records carry the sampling effort of the observers (Phillips et al. 2009, Ecol. Appl.
    19:181), so background drawn from them shares the bias of the presences. Records are
    snapped to their cell, one per cell, and only cells inside `area` are kept; with `n`, at most
    `n` cells are drawn at random.

    Raises
    ------
    InputFileError
        Missing or unreadable file, or no coordinate columns.
    DataError
        No record of the file falls inside the calibration area.
    """
    from timeslice.readers.occurrences import read_occurrences

    recs = read_occurrences(path, columns=columns)
    lon = recs["lon"].to_numpy(dtype=float)
    lat = recs["lat"].to_numpy(dtype=float)
    ok = np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90) & (np.abs(lon) <= 180)
    lon, lat = (((lon[ok] + 180) % 360) - 180), lat[ok]
    area = area.transpose("lat", "lon")
    rows, cols, inside = _cell_index(area, lon, lat)
    mask = np.asarray(area.values, dtype=bool)
    good = inside & mask[rows, cols]
    cell = np.unique(rows[good] * mask.shape[1] + cols[good])
    if cell.size == 0:
        raise DataError(
            f"{path}: none of the {int(ok.sum())} target-group records lies inside the calibration "
            "area; check the file or widen the area"
        )
    if n is not None and cell.size > int(n):
        cell = np.sort(np.random.default_rng(seed).choice(cell, size=int(n), replace=False))
    r, c = np.unravel_index(cell, mask.shape)
    out = pd.DataFrame(
        {"lon": np.asarray(area["lon"].values, dtype=float)[c], "lat": np.asarray(area["lat"].values, dtype=float)[r]}
    )
    out.attrs["sampling"] = f"target-group records from {path}, one per cell"
    return out


# ---------------------------------------------------------------------------------------------
# extraction
# ---------------------------------------------------------------------------------------------
def extract(ds: xr.Dataset, points: pd.DataFrame, *, variables: Sequence[str]) -> pd.DataFrame:
    """Values of `variables` at the grid cell nearest to each point.

    Parameters
    ----------
    ds : xarray.Dataset
        Gridded predictors on (lat, lon).
    points : pandas.DataFrame
        ``lon``, ``lat`` in degrees.
    variables : sequence of str
        Variable names in `ds`.

    Returns
    -------
    pandas.DataFrame
        ``lon``, ``lat`` (of the points, unchanged) and one column per variable (NaN off land).
    """
    variables = list(variables)
    missing = [v for v in variables if v not in ds.data_vars]
    if missing:
        raise DataError(
            f"baseline has no variable(s) {', '.join(missing)} (it has: {', '.join(map(str, ds.data_vars))}); "
            "fix the variable list"
        )
    lon = points["lon"].to_numpy(dtype=float)
    lat = points["lat"].to_numpy(dtype=float)
    rows, cols, _ = _cell_index(ds, lon, lat)
    out = pd.DataFrame({"lon": lon, "lat": lat})
    ir = xr.DataArray(rows, dims="point")
    ic = xr.DataArray(cols, dims="point")
    for v in variables:
        da = ds[v]
        extra = [d for d in da.dims if d not in ("lat", "lon")]
        if extra:
            raise DataError(f"predictor {v!r} has extra dimension(s) {extra}; select one slice first")
        # pointwise selection reads only the chunks holding points when `ds` is dask-backed
        out[v] = np.asarray(da.isel(lat=ir, lon=ic).values, dtype=float)
    return out
