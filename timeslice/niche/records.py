"""Occurrence records to presences: taxon choice, basis of record, coordinate checks, duplicates,
grid and land, uncertainty, status and years, each drop counted under its reason.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import ConfigError, DataError
from timeslice.niche.spatial import cell_index, land_of

__all__ = [
    "BASIS_KINDS",
    "CLEANING_REASONS",
    "CONDITIONAL_REASONS",
    "INVALID_COORDINATE_FLAGS",
    "RECORD_REASONS",
    "basis_kind",
    "centroid_like",
    "clean_records",
    "dated_fossils",
    "select_taxon",
    "taxon_name",
]


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

    Parameters
    ----------
    name : str
        A scientific name, possibly with authorship and rank markers.
    fold : bool
        Keep genus and specific epithet only.

    Returns
    -------
    str
        The normalised name.
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

    Parameters
    ----------
    records : pandas.DataFrame
        Canonical records (``basis``, ``establishment``, ``country``, ``locality`` when present).

    Returns
    -------
    ndarray of object, shape (n,)
        The kind of each record.
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

    Parameters
    ----------
    records : pandas.DataFrame
        Canonical records with ``lon``, ``lat`` (and ``uncertainty_m``).
    min_records : int
        Fewest records sharing a coordinate pair.
    min_uncertainty_m : float
        Smallest median stated uncertainty [m] of those records.

    Returns
    -------
    ndarray of bool, shape (n,)
        True for centroid-like records.
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
    _check_clean_args(records, uncertainty_max_m, years)
    keep = _check_kinds(keep_basis)
    mask_land = land_of(land)
    df = records.copy()
    df["lon"] = pd.to_numeric(df["lon"], errors="coerce").astype(float)
    df["lat"] = pd.to_numeric(df["lat"], errors="coerce").astype(float)
    drops = _Drops(len(df))
    _drop_taxon_and_basis(df, drops, taxon=taxon, taxon_field=taxon_field,
                          fold_subspecies=fold_subspecies, keep=keep)
    dropset = {str(f).strip().upper() for f in (INVALID_COORDINATE_FLAGS if drop_flags is None else drop_flags)}
    flag_sets = _drop_bad_coordinates(df, drops, dropset=dropset, centroid_min_records=centroid_min_records,
                                      centroid_min_uncertainty_m=centroid_min_uncertainty_m)
    df["lon"] = np.where(drops.alive, ((df["lon"].to_numpy() + 180.0) % 360.0) - 180.0, df["lon"].to_numpy())
    _drop_duplicates(df, drops)
    _drop_off_land(df, drops, mask_land)
    _drop_by_record_fields(df, drops, uncertainty_max_m=uncertainty_max_m, years=years)
    if flag_sets is not None:
        other = pd.Series([f for s in flag_sets[drops.alive] for f in sorted(s - dropset)], dtype=object)
        listed = ", ".join(f"{k} {v}" for k, v in other.value_counts().items()) if len(other) else "none"
        drops.notes["aggregator flag: invalid coordinates"] += f"; other flags on kept records (kept): {listed}"
    table = _cleaning_table(records, drops)
    kept = df.loc[drops.alive].reset_index(drop=True)
    kept.attrs = dict(records.attrs)
    return kept, table


class _Drops:
    """Which records are still in, and how many each reason dropped (a record counts once, under
    the first reason that applies)."""

    def __init__(self, n: int):
        self.n = n
        self.alive = np.ones(n, dtype=bool)
        self.counts: dict[str, int] = {}
        self.notes: dict[str, str] = {}

    def none(self) -> np.ndarray:
        return np.zeros(self.n, dtype=bool)

    def drop(self, reason: str, bad: np.ndarray, note: str = "") -> None:
        bad = np.asarray(bad, dtype=bool) & self.alive
        self.counts[reason] = int(bad.sum())
        self.notes[reason] = note
        self.alive[bad] = False


def _check_clean_args(records, uncertainty_max_m, years) -> None:
    """The arguments of :func:`clean_records` that can be judged before any work."""
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


def _drop_taxon_and_basis(df, drops: _Drops, *, taxon, taxon_field, fold_subspecies, keep: set[str]) -> None:
    """Other taxa; fossil and living (captive, cultivated) specimens unless kept."""
    chosen = select_taxon(df, taxon, taxon_field=taxon_field, fold_subspecies=fold_subspecies)
    if taxon is not None:
        drops.drop("other taxon", ~chosen, f"kept: {taxon if not isinstance(taxon, (list, tuple)) else ', '.join(map(str, taxon))}"
                   + (" with subspecies" if fold_subspecies else ""))
    if not any(c in df.columns for c in ("basis", "establishment", "country", "locality")):
        return
    alive, none = drops.alive, drops.none()
    kind = basis_kind(df)
    fossil = (kind == "fossil") & alive
    dated = 0
    if "age_bp" in df.columns:
        _, _, ok = _coordinate_checks(df)
        dated = int((fossil & ok & np.isfinite(pd.to_numeric(df["age_bp"], errors="coerce"))).sum())
    if "fossil" in keep:
        drops.drop("fossil specimen", none, f"kept as presences (keep_basis); {int(fossil.sum())} in the file")
    else:
        n_fossil = int(fossil.sum())
        drops.drop("fossil specimen", kind == "fossil",
                   "" if not n_fossil else
                   f"{dated} with an age and coordinates offered to the hindcast check as dated records"
                   if dated else "none carries an age, so none is offered to the hindcast check")
    living = kind == "living"
    drops.drop("living specimen (captive or cultivated)", none if "living" in keep else living,
               f"kept as presences (keep_basis); {int((living & drops.alive).sum())} in the file"
               if "living" in keep else "")


def _drop_bad_coordinates(df, drops: _Drops, *, dropset: set[str], centroid_min_records,
                          centroid_min_uncertainty_m) -> pd.Series | None:
    """Missing, unparseable, out-of-range and (0, 0) coordinates, aggregator flags and
    centroid-like points; returns the flag sets of the records (None without a flags column)."""
    lon = df["lon"].to_numpy()
    lat = df["lat"].to_numpy()
    if "coords_missing" in df.columns:
        drops.drop("no coordinates", df["coords_missing"].fillna(False).astype(bool).to_numpy())
    drops.drop("unparseable coordinates", ~np.isfinite(lon) | ~np.isfinite(lat))
    with np.errstate(invalid="ignore"):
        drops.drop("out-of-range coordinates", (np.abs(lat) > 90) | (lon < -180) | (lon > 180))
        drops.drop("zero coordinates (0, 0)", (lon == 0) & (lat == 0))
    flag_sets = None
    if "flags" in df.columns:
        flag_sets = _split_flags(_text(df, "flags"))
        drops.drop("aggregator flag: invalid coordinates", flag_sets.map(lambda s: bool(s & dropset)).to_numpy(),
                   f"flags dropped: {', '.join(sorted(dropset)) or 'none'}")
    if centroid_min_records is not None:
        drops.drop("centroid-like repeated coordinates",
                   centroid_like(df, min_records=centroid_min_records, min_uncertainty_m=centroid_min_uncertainty_m),
                   f"{int(centroid_min_records)}+ records at one point with median uncertainty >= "
                   f"{float(centroid_min_uncertainty_m):g} m (or none stated and whole degrees)")
    return flag_sets


def _drop_duplicates(df, drops: _Drops) -> None:
    """Records equal in every canonical column; the first is kept."""
    key_cols = [c for c in ("species", "accepted_name", "taxon_key", "accepted_key", "species_key", "lon", "lat",
                            "uncertainty_m", "status", "basis", "year", "count") if c in df.columns]
    dup = drops.none()
    if drops.alive.any():
        live = df.loc[drops.alive, key_cols]
        dup[np.flatnonzero(drops.alive)] = live.duplicated(keep="first").to_numpy()
    drops.drop("exact duplicate", dup, "judged within each taxon" if "species" in df.columns else "")


def _drop_off_land(df, drops: _Drops, mask_land: xr.DataArray) -> None:
    """Outside the grid, or in a cell of water or ice (nearest cell)."""
    lon, lat = df["lon"].to_numpy(), df["lat"].to_numpy()
    rows, cols, inside = cell_index(mask_land, np.nan_to_num(lon), np.nan_to_num(lat))
    drops.drop("outside grid", ~inside)
    on_land = np.asarray(mask_land.values, dtype=bool)[rows, cols]
    drops.drop("on water or ice", ~on_land)


def _drop_by_record_fields(df, drops: _Drops, *, uncertainty_max_m, years) -> None:
    """Coordinate uncertainty above the limit, absences, years outside the window."""
    none = drops.none()
    if uncertainty_max_m is not None and "uncertainty_m" in df.columns:
        unc = pd.to_numeric(df["uncertainty_m"], errors="coerce").to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            drops.drop("uncertainty above limit", unc > float(uncertainty_max_m))
    else:
        drops.drop("uncertainty above limit", none)
    if "status" in df.columns:
        status = df["status"].fillna("").astype(str).str.strip().str.lower()
        absent = status.isin(list(_ABSENT)).to_numpy().copy()
        if "count" in df.columns:
            zero = pd.to_numeric(df["count"], errors="coerce").to_numpy(dtype=float) == 0
            absent |= zero & (status == "").to_numpy()
        drops.drop("status absent", absent)
    else:
        drops.drop("status absent", none)
    if years is None:
        drops.drop("year outside window", none)
        return
    lo, hi = years
    yr = (pd.to_numeric(df["year"], errors="coerce").to_numpy(dtype=float) if "year" in df.columns
          else np.full(len(df), np.nan))
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(yr)
        if lo is not None:
            bad |= yr < lo
        if hi is not None:
            bad |= yr > hi
    drops.drop("year outside window", bad)


def _cleaning_table(records: pd.DataFrame, drops: _Drops) -> pd.DataFrame:
    """``reason, n_dropped, note`` in test order, with the reader's "records read" row first."""
    reasons = [r for r in RECORD_REASONS if r in drops.counts]
    table = pd.DataFrame(
        {"reason": reasons, "n_dropped": [drops.counts[r] for r in reasons], "note": [drops.notes[r] for r in reasons]}
    )
    if records.attrs.get("read"):
        head = pd.DataFrame({"reason": ["records read"], "n_dropped": [0], "note": [str(records.attrs["read"])]})
        table = pd.concat([head, table], ignore_index=True)
    table.attrs["n_input"] = drops.n
    table.attrs["n_kept"] = int(drops.alive.sum())
    return table


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

    Parameters
    ----------
    records : pandas.DataFrame
        Canonical records (``age_bp``, ``age_sd`` when present).
    taxon, taxon_field, fold_subspecies
        The taxon (:func:`select_taxon`).
    keep_basis : sequence of {"fossil", "living"}
        As for :func:`clean_records`.

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
