"""Occurrence and dated-record readers."""

from __future__ import annotations

import numpy as np
import pytest

from timeslice.errors import InputFileError
from timeslice.readers.occurrences import read_dated_records, read_occurrences

DWC = (
    "occurrenceID,scientificName,decimalLatitude,decimalLongitude,coordinateUncertaintyInMeters,"
    "occurrenceStatus,basisOfRecord,eventDate,year,individualCount\n"
    "a1,Nivalia demonstrata,45.5,-30.25,100,PRESENT,HumanObservation,2001-06-03,2001,2\n"
    "a2,Nivalia demonstrata,not-a-number,-30.0,,present,PreservedSpecimen,1999-07/2000-01,,\n"
    "a3,Nivalia demonstrata,46.0,-31.0,50000,Absent,HumanObservation,2010-05-05,,1\n"
)


def test_darwin_core_columns(tmp_path):
    path = tmp_path / "occ.csv"
    path.write_text(DWC)
    df = read_occurrences(path)
    for col in ("lon", "lat", "uncertainty_m", "status", "basis", "year", "count", "species", "row"):
        assert col in df.columns
    assert df["lon"].iloc[0] == -30.25 and df["lat"].iloc[0] == 45.5
    assert np.isnan(df["lat"].iloc[1])  # unparseable kept as NaN, counted by the cleaner
    assert list(df["status"]) == ["present", "present", "absent"]
    # year from eventDate when the year column is empty (ISO 8601 interval start)
    assert list(df["year"]) == [2001.0, 1999.0, 2010.0]
    assert list(df["row"]) == [2, 3, 4]  # 1-based file line, header is line 1
    assert df["id"].iloc[2] == "a3"


def test_plain_csv_with_mapping_and_tab_delimiter(tmp_path):
    path = tmp_path / "plain.tsv"
    path.write_text("X_WGS84\tY_WGS84\tnote\n10.5\t-20.25\tok\n")
    df = read_occurrences(path, columns={"lon": "X_WGS84", "lat": "Y_WGS84"})
    assert df["lon"].iloc[0] == 10.5 and df["lat"].iloc[0] == -20.25
    assert np.isnan(df["uncertainty_m"].iloc[0])


def test_common_names_ignore_case(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text("Longitude,LATITUDE\n1,2\n")
    df = read_occurrences(path)
    assert (df["lon"].iloc[0], df["lat"].iloc[0]) == (1.0, 2.0)


def test_no_coordinate_columns_names_file_and_columns(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("where,when\nhere,now\n")
    with pytest.raises(InputFileError, match=r"bad\.csv.*no coordinate column.*lon, lat.*file columns are: where, when; "):
        read_occurrences(path)


def test_mapping_to_missing_column_suggests(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text("x_wgs84,y_wgs84\n1,2\n")
    with pytest.raises(InputFileError, match=r"'X_WGS84'.*not in the file.*did you mean 'x_wgs84'"):
        read_occurrences(path, columns={"lon": "X_WGS84", "lat": "y_wgs84"})


def test_mapping_with_unknown_canonical_key(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text("a,b\n1,2\n")
    with pytest.raises(InputFileError, match=r"'longitud'.*did you mean 'lon'"):
        read_occurrences(path, columns={"longitud": "a"})


def test_missing_and_empty_files(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        read_occurrences(tmp_path / "nope.csv")
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    with pytest.raises(InputFileError, match="empty"):
        read_occurrences(empty)


def test_dated_records(tmp_path):
    path = tmp_path / "dated.csv"
    path.write_text(
        "record_id,lon,lat,age_bp,age_sd,material\nf1,-30.5,45.0,21000,400,macrofossil\nf2,330.0,46,6000,,pollen\n"
    )
    df = read_dated_records(path)
    assert list(df.columns[:4]) == ["lon", "lat", "age_bp", "age_sd"]
    assert df["lon"].iloc[1] == -30.0  # 330 E wrapped to [-180, 180)
    assert np.isnan(df["age_sd"].iloc[1])
    assert df["material"].iloc[0] == "macrofossil"


def test_dated_records_bad_age_names_line(tmp_path):
    path = tmp_path / "dated.csv"
    path.write_text("lon,lat,age_bp\n1,2,3\n1,2,old\n")
    with pytest.raises(InputFileError, match=r"dated\.csv: line 3: column 'age_bp' is not a number"):
        read_dated_records(path)


def test_dated_records_without_age(tmp_path):
    path = tmp_path / "dated.csv"
    path.write_text("lon,lat\n1,2\n")
    with pytest.raises(InputFileError, match="no column for age_bp"):
        read_dated_records(path)


def test_row_is_the_file_line_across_blank_lines(tmp_path):
    path = tmp_path / "gaps.csv"
    path.write_text("lon,lat\n1,2\n\n3,4\n")
    df = read_occurrences(path)
    assert list(df["row"]) == [2, 4] and list(df["lon"]) == [1.0, 3.0]


def test_header_only_file_gives_no_records(tmp_path):
    path = tmp_path / "header.csv"
    path.write_text("decimalLongitude,decimalLatitude\n")
    assert len(read_occurrences(path)) == 0
