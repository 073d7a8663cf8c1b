"""Record rules of the cleaning step: taxon choice, basis of record, missing and zero coordinates,
aggregator flags, centroid-like coordinates, duplicates per taxon, absences; every rule with its
expected counts, on the real files of tests/data/occurrences where they exercise it.

Expected counts on the real files are computed a second time here with plain pandas on the raw
bytes, so the cleaning rules are checked against a reading that shares no code with the reader.
"""

from __future__ import annotations

import csv
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from timeslice.errors import ConfigError, DataError
from timeslice.grid import make_grid
from timeslice.niche import data as nd
from timeslice.niche import fit_niche
from timeslice.readers import read_occurrences

DATA = Path(__file__).resolve().parents[1] / "data" / "occurrences"
ARCHIVE, PUMA, EBIRD = DATA / "gbif-results.zip", DATA / "csv_optional_quotes_puma.csv", DATA / "ebird.tab.txt"


@pytest.fixture(scope="module")
def globe():
    """All-land 1-degree globe, so that only the record rules drop records."""
    g = make_grid(lon_min=-180, lon_max=180, lat_min=-90, lat_max=90, resolution=1.0)
    return xr.DataArray(np.ones((g.sizes["lat"], g.sizes["lon"]), dtype=bool), dims=("lat", "lon"),
                        coords={"lat": g.lat, "lon": g.lon}, name="land")


def _counts(table: pd.DataFrame) -> dict[str, int]:
    return {r: int(n) for r, n in zip(table["reason"], table["n_dropped"]) if r != "records read"}


def _adds_up(table: pd.DataFrame) -> None:
    assert int(table["n_dropped"].sum()) + table.attrs["n_kept"] == table.attrs["n_input"]


def _frame(**cols) -> pd.DataFrame:
    n = len(next(iter(cols.values())))
    base = {"lon": np.linspace(1, 2, n), "lat": np.linspace(45, 46, n), "species": ["Nivalia demonstrata"] * n}
    base.update(cols)
    return pd.DataFrame(base)


# ---------------------------------------------------------------------------- real files
def test_real_archive_counts(globe):
    rec = read_occurrences(ARCHIVE)
    kept, table = nd.clean_records(rec, land=globe, centroid_min_records=5)
    # independent: the headerless core with pandas (lat index 24, lon 25; meta.xml)
    with zipfile.ZipFile(ARCHIVE) as zf, zf.open("occurrence.txt") as fh:
        raw = pd.read_csv(fh, sep="\t", header=None, dtype=str, keep_default_na=False, quoting=csv.QUOTE_NONE)
    empty = (raw[24] == "") | (raw[25] == "")
    lat, lon = pd.to_numeric(raw[24], errors="coerce"), pd.to_numeric(raw[25], errors="coerce")
    zero = ~empty & (lat == 0) & (lon == 0)
    rest = raw[~empty & ~zero]
    pair = rest.groupby([24, 25])[0].transform("size")
    whole = (pd.to_numeric(rest[24]) % 1 == 0) & (pd.to_numeric(rest[25]) % 1 == 0)
    centroid = (pair >= 5) & whole  # no uncertainty column: whole degrees shared by >= 5 records
    left = rest[~centroid]
    dup = left.duplicated([6, 24, 25, 5, 26]).sum()  # name, coordinates, basis, year
    counts = _counts(table)
    assert counts["no coordinates"] == int(empty.sum()) == 102
    assert counts["zero coordinates (0, 0)"] == int(zero.sum()) == 7  # SOURCES.md: 7 at 0,0
    assert counts["centroid-like repeated coordinates"] == int(centroid.sum()) == 11
    assert counts["exact duplicate"] == int(dup) == 5
    assert counts["fossil specimen"] == 0 and counts["living specimen (captive or cultivated)"] == 0
    assert len(kept) == 158 - 102 - 7 - 11 - 5 == 33
    _adds_up(table)
    assert "Darwin Core Archive" in table["note"].iloc[0] and "UTF-8" in table["note"].iloc[0]


def test_real_puma_counts(globe):
    rec = read_occurrences(PUMA)
    kept, table = nd.clean_records(rec, land=globe, taxon=["Puma concolor", "Felis concolor"],
                                   centroid_min_records=5)
    raw = pd.read_csv(PUMA, encoding="latin-1", dtype=str, keep_default_na=False)
    fossil = raw["BasisOfRecord"] == "Fossil"
    captive = ~fossil & raw["Country"].str.contains(r"\bzoo\b|\bcaptive\b", case=False)
    empty = ~fossil & ~captive & ((raw["DecimalLatitude"] == "") | (raw["DecimalLongitude"] == ""))
    left = raw[~fossil & ~captive & ~empty]
    dup = left.duplicated(["ScientificName", "DecimalLatitude", "DecimalLongitude", "BasisOfRecord"]).sum()
    counts = _counts(table)
    assert counts["other taxon"] == 0
    assert counts["fossil specimen"] == int(fossil.sum()) == 27
    assert counts["living specimen (captive or cultivated)"] == int(captive.sum()) == 41
    assert counts["no coordinates"] == int(empty.sum()) == 2549
    assert counts["exact duplicate"] == int(dup) == 102
    assert len(kept) == 3391 - 27 - 41 - 2549 - 102 == 672
    assert not kept["basis"].eq("Fossil").any()
    _adds_up(table)
    assert "Latin-1" in table["note"].iloc[0]


def test_real_multi_species_file_stops_with_one_line(globe):
    with pytest.raises(DataError) as err:
        nd.clean_records(read_occurrences(EBIRD), land=globe)
    msg = str(err.value)
    raw = pd.read_csv(EBIRD, sep="\t", dtype=str, keep_default_na=False, quoting=csv.QUOTE_NONE)
    for name, n in raw["SCIENTIFICNAME"].value_counts().items():
        assert f"{name} ({n})" in msg
    assert "\n" not in msg and len(msg) < 300 and '[species] taxon = "Pipilo maculatus"' in msg
    with pytest.raises(DataError, match=r"2 species: Puma concolor \(3233\), Felis concolor \(158\)"):
        nd.clean_records(read_occurrences(PUMA), land=globe)


def test_real_choice_by_name(globe):
    kept, table = nd.clean_records(read_occurrences(EBIRD), land=globe, taxon="Pipilo maculatus")
    counts = _counts(table)
    assert counts["other taxon"] == 4  # 8 records, 4 of Pipilo maculatus
    # two of them at one locality with the same year and count: one is an exact duplicate
    assert counts["exact duplicate"] == 1 and len(kept) == 3
    assert set(kept["species"]) == {"Pipilo maculatus"}
    _adds_up(table)


def test_real_choice_by_taxon_key_and_folding(globe):
    rec = read_occurrences(ARCHIVE)
    with zipfile.ZipFile(ARCHIVE) as zf, zf.open("occurrence.txt") as fh:
        raw = pd.read_csv(fh, sep="\t", header=None, dtype=str, keep_default_na=False, quoting=csv.QUOTE_NONE)
    # taxonID is index 8, the aggregator's speciesID index 22 (meta.xml)
    chosen = nd.select_taxon(rec, 5213564)
    assert chosen.sum() == (raw[8] == "5213564").sum() == 113
    folded = nd.select_taxon(rec, "5213564", fold_subspecies=True)
    assert folded.sum() == (raw[22] == "5213564").sum() == 158
    # by name, authorship ignored
    assert nd.select_taxon(rec, "Chelonodon fluviatilis").sum() == 43
    with pytest.raises(ConfigError, match="no acceptedScientificName column"):
        nd.select_taxon(rec, "Chelonodon fluviatilis", taxon_field="accepted_name")


def test_real_archive_is_one_species_by_its_species_key(globe):
    # three names, one species key: not a multi-species file
    assert nd.select_taxon(read_occurrences(ARCHIVE), None).all()


# ---------------------------------------------------------------------------- taxon rules
def test_taxon_name_drops_authorship_and_ranks():
    assert nd.taxon_name("Puma concolor couguar (Kerr, 1792)") == "puma concolor couguar"
    assert nd.taxon_name("Puma concolor subsp. couguar") == "puma concolor couguar"
    assert nd.taxon_name("Puma concolor couguar", fold=True) == "puma concolor"
    assert nd.taxon_name("Tetraodon fluviatilis Hamilton, 1822") == "tetraodon fluviatilis"
    assert nd.taxon_name("Aster amellus var. bessarabicus de Candolle") == "aster amellus bessarabicus"


def test_subspecies_folded_on_request(globe):
    rec = _frame(species=["Nivalia demonstrata", "Nivalia demonstrata alpina Auct.", "Nivalia borealis",
                          "Nivalia demonstrata"])
    _, table = nd.clean_records(rec, land=globe, taxon="Nivalia demonstrata")
    assert _counts(table)["other taxon"] == 2
    kept, table = nd.clean_records(rec, land=globe, taxon="Nivalia demonstrata", fold_subspecies=True)
    assert _counts(table)["other taxon"] == 1 and len(kept) == 3
    # species and its subspecies only: one species, no choice needed
    assert nd.select_taxon(rec.iloc[:2], None).all()


def test_choice_by_accepted_name(globe):
    rec = _frame(species=["Felis concolor", "Puma concolor", "Puma concolor", "Lynx rufus"],
                 accepted_name=["Puma concolor (Linnaeus, 1771)"] * 3 + ["Lynx rufus (Schreber, 1777)"])
    _, table = nd.clean_records(rec, land=globe, taxon="Puma concolor", taxon_field="accepted_name")
    assert _counts(table)["other taxon"] == 1


def test_choice_matching_nothing_lists_what_there_is(globe):
    with pytest.raises(DataError, match=r"no record has the scientific name 'Puma concolr'.*Puma concolor \(3233\)"):
        nd.select_taxon(read_occurrences(PUMA), "Puma concolr")


def test_duplicates_are_judged_per_taxon(tmp_path, globe):
    # a herbarium-style export: several species at each locality, underscore-style headers
    path = tmp_path / "herbarium.csv"
    path.write_text("SCIENTIFIC_NAME,DECIMAL_LATITUDE,DECIMAL_LONGITUDE,BASIS_OF_RECORD,YEAR\n"
                    + "".join(f"{sp},45.5,1.5,PreservedSpecimen,1990\n" for sp in
                              ("Aster alpinus", "Aster amellus", "Carex firma", "Aster alpinus")))
    rec = read_occurrences(path)
    _, table = nd.clean_records(rec, land=globe, taxon=["Aster alpinus", "Aster amellus", "Carex firma"])
    assert _counts(table)["exact duplicate"] == 1  # the second Aster alpinus only


# ---------------------------------------------------------------------------- basis rules
def test_fossil_and_living_dropped_and_kept_on_request(globe):
    basis = ["HumanObservation", "FossilSpecimen", "FOSSIL_SPECIMEN", "LivingSpecimen",
             "LIVING_SPECIMEN", "PreservedSpecimen", "HumanObservation", "HumanObservation"]
    rec = _frame(basis=basis, establishment=[""] * 6 + ["managed", ""],
                 locality=[""] * 7 + ["Bronx Zoo, enclosure 4"])
    kept, table = nd.clean_records(rec, land=globe)
    c = _counts(table)
    assert c["fossil specimen"] == 2 and c["living specimen (captive or cultivated)"] == 4
    assert list(kept["basis"]) == ["HumanObservation", "PreservedSpecimen"]
    kept, table = nd.clean_records(rec, land=globe, keep_basis=["fossil"])
    assert _counts(table)["fossil specimen"] == 0 and len(kept) == 4
    kept, table = nd.clean_records(rec, land=globe, keep_basis=["fossil", "living"])
    assert len(kept) == 8
    with pytest.raises(ConfigError, match="keep_basis"):
        nd.clean_records(rec, land=globe, keep_basis=["zoo"])


def test_fossils_with_ages_become_dated_records(tmp_path, globe):
    # ages in years BP, in Ma, or a calendar range far in the past (ISO 8601 expanded years)
    path = tmp_path / "fossils.csv"
    path.write_text(
        "occurrenceID,scientificName,decimalLatitude,decimalLongitude,basisOfRecord,eventDate,ageBP\n"
        "a,Nivalia demonstrata,45.1,1.1,FossilSpecimen,,21000\n"
        "b,Nivalia demonstrata,45.2,1.2,FossilSpecimen,-4150/-3950,\n"
        "c,Nivalia demonstrata,45.3,1.3,FossilSpecimen,1931-05-02,\n"
        "d,Nivalia demonstrata,,,FossilSpecimen,,6000\n"
        "e,Nivalia demonstrata,45.5,1.5,HumanObservation,2001-05-02,\n"
    )
    rec = read_occurrences(path)
    assert rec["age_bp"].iloc[1] == 1950 + 4050  # midpoint of -4150/-3950 is -4050 (astronomical)
    assert rec["age_sd"].iloc[1] == 200 / 4
    assert np.isnan(rec["age_bp"].iloc[2])  # a collection date, not an age
    kept, table = nd.clean_records(rec, land=globe)
    assert _counts(table)["fossil specimen"] == 4 and list(kept["id"]) == ["e"]
    note = table.set_index("reason").loc["fossil specimen", "note"]
    assert note.startswith("2 with an age")
    dated = nd.dated_fossils(rec)
    assert list(dated["age_bp"]) == [21000.0, 6000.0] and list(dated["id"]) == ["a", "b"]
    assert nd.dated_fossils(rec, keep_basis=["fossil"]).empty


def test_fossil_and_captive_never_reach_the_calibration(world):
    ds, rec, _ = world
    rec = rec.copy()
    rec["basis"] = "HumanObservation"
    extra = rec.iloc[:30].copy()
    extra["basis"] = ["FossilSpecimen"] * 15 + ["LivingSpecimen"] * 15
    extra["lon"] = extra["lon"] + 0.013  # distinct points, so they are not duplicates
    both = pd.concat([rec, extra], ignore_index=True)
    f = fit_niche(both, ds, n_background=800, buffer_km=150, cv_folds=3, importance_repeats=0,
                  thin=None, seed=3)
    c = _counts(f.cleaning)
    assert c["fossil specimen"] == 15 and c["living specimen (captive or cultivated)"] == 15
    moved = set(np.round(extra["lon"], 6))
    assert not moved & set(np.round(f.presence["lon"], 6))
    assert int(f.cleaning["n_dropped"].sum()) + len(f.presence) == len(both)


# ---------------------------------------------------------------------------- coordinate rules
def test_no_coordinates_separate_from_unparseable(tmp_path, globe):
    path = tmp_path / "c.csv"
    path.write_text("decimalLatitude,decimalLongitude\n45,1\n,1\n45,\nabc,1\n0,0\n46,2\n")
    kept, table = nd.clean_records(read_occurrences(path), land=globe)
    c = _counts(table)
    assert (c["no coordinates"], c["unparseable coordinates"], c["zero coordinates (0, 0)"]) == (2, 1, 1)
    assert len(kept) == 2
    _adds_up(table)


def test_aggregator_flags(globe):
    flags = ["", "ZERO_COORDINATE", "COORDINATE_INVALID;GEODETIC_DATUM_ASSUMED_WGS84",
             "COUNTRY_COORDINATE_MISMATCH", "GEODETIC_DATUM_ASSUMED_WGS84;COUNTRY_COORDINATE_MISMATCH",
             "COORDINATE_OUT_OF_RANGE", "COORDINATE_REPROJECTION_FAILED"]
    rec = _frame(flags=flags)
    kept, table = nd.clean_records(rec, land=globe)
    row = table.set_index("reason").loc["aggregator flag: invalid coordinates"]
    assert row["n_dropped"] == 4 and len(kept) == 3
    assert "COUNTRY_COORDINATE_MISMATCH 2" in row["note"] and "GEODETIC_DATUM_ASSUMED_WGS84 1" in row["note"]
    kept, table = nd.clean_records(rec, land=globe, drop_flags=["COUNTRY_COORDINATE_MISMATCH"])
    assert _counts(table)["aggregator flag: invalid coordinates"] == 2


def test_centroid_like_coordinates(globe):
    # 6 records at one point with 50 km uncertainty (a province centre), 6 at another point with
    # 10 m (a well-visited site), 5 at whole degrees without uncertainty, 4 at whole degrees
    # (fewer than 5), 1 precise record
    lon = [3.25] * 6 + [4.125] * 6 + [5.0] * 5 + [6.0] * 4 + [7.3]
    lat = [45.5] * 6 + [46.25] * 6 + [47.0] * 5 + [48.0] * 4 + [48.1]
    unc = [50_000.0] * 6 + [10.0] * 6 + [np.nan] * 9 + [30.0]
    rec = pd.DataFrame({"lon": lon, "lat": lat, "uncertainty_m": unc, "species": "Nivalia demonstrata",
                        "year": np.arange(len(lon), dtype=float)})
    assert nd.centroid_like(rec, min_records=5).sum() == 11
    _, table = nd.clean_records(rec, land=globe, centroid_min_records=5)
    assert _counts(table)["centroid-like repeated coordinates"] == 11
    _, table = nd.clean_records(rec, land=globe, centroid_min_records=7)
    assert _counts(table)["centroid-like repeated coordinates"] == 0
    _, table = nd.clean_records(rec, land=globe)  # off unless asked for
    assert "centroid-like repeated coordinates" not in _counts(table)


def test_zero_count_without_status_is_an_absence(globe):
    rec = _frame(status=["present", "", "", "absent"], count=[0.0, 0.0, 3.0, 2.0])
    _, table = nd.clean_records(rec, land=globe)
    assert _counts(table)["status absent"] == 2


# ---------------------------------------------------------------------------- config keys
def test_config_keys_for_records(tmp_path):
    import tomllib

    from timeslice.config import parse_config
    from timeslice.demo_config import render_demo_config
    from timeslice.errors import ConfigError as CfgError

    data = tomllib.loads(render_demo_config("."))
    data["species"].update(taxon=["Puma concolor", "Felis concolor"], fold_subspecies=True)
    data["niche"].update(keep_basis=["fossil"], centroid_min_records=8)
    cfg = parse_config(data, source=tmp_path / "c.toml")
    assert cfg.species.taxon == ["Puma concolor", "Felis concolor"] and cfg.species.taxon_field == "auto"
    assert cfg.niche.keep_basis == ["fossil"] and cfg.niche.centroid_min_records == 8
    data["species"]["taxon"] = 2435099  # a taxon key stays a number
    assert parse_config(data, source=tmp_path / "c.toml").species.taxon == 2435099
    data["niche"]["keep_basis"] = ["zoo"]
    with pytest.raises(CfgError, match="niche.keep_basis"):
        parse_config(data, source=tmp_path / "c.toml")
