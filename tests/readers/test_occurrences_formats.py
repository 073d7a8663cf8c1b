"""Record files as the aggregators and collections deliver them, read to the same records as an
independent pandas reading of the same bytes (tests/readers/occurrence_formats.py)."""

from __future__ import annotations

import gzip
import zipfile

import numpy as np
import pytest

import occurrence_formats as F
from timeslice.errors import InputFileError
from timeslice.readers.occurrences import header_key, read_dated_records, read_occurrences

# messages are one line under ~300 characters; the tmp path is part of them, so allow for it
MAX_MESSAGE = 300


def _short(err: pytest.ExceptionInfo, path) -> str:
    msg = str(err.value)
    assert "\n" not in msg
    assert len(msg.replace(str(path), "FILE")) < MAX_MESSAGE, msg
    return msg


# --------------------------------------------------------------------------------- real files
def test_real_darwin_core_archive():
    got = read_occurrences(F.ARCHIVE)
    want = F.expected_archive()
    F.assert_same_records(got, want)
    assert len(got) == 158 and int(np.isfinite(got["lat"]).sum()) == 56  # SOURCES.md
    assert list(got["species"]) == list(want["species"])
    assert "Darwin Core Archive, occurrence core occurrence.txt" in got.attrs["read"]
    assert "encoding UTF-8" in got.attrs["read"]
    # headerless core: the row is the line in occurrence.txt
    assert list(got["row"][:3]) == [1, 2, 3]


def test_real_latin1_csv_with_optional_quotes():
    got = read_occurrences(F.PUMA)
    want = F.expected_puma()
    F.assert_same_records(got, want)
    assert len(got) == 3391 and int(np.isfinite(got["lat"]).sum()) == 801  # SOURCES.md
    assert "encoding Latin-1" in got.attrs["read"]
    assert "México" in set(got["country"])  # byte 0xE9 read as Latin-1 e-acute
    assert got.attrs["columns"]["lat"] == "DecimalLatitude"


def test_real_upper_case_tab_file_with_stray_quote():
    got = read_occurrences(F.EBIRD)
    want = F.expected_ebird()
    F.assert_same_records(got, want)
    assert len(got) == 8
    assert 'Hole N" the Rock' in set(got["locality"])  # the stray quote stays inside its field
    assert "tab-separated" in got.attrs["read"]


# --------------------------------------------------------------------------- built formats
def test_archive_with_everything_in_a_subfolder(tmp_path):
    got = read_occurrences(F.archive_in_subfolder(tmp_path))
    F.assert_same_records(got, F.expected_archive())


def test_archive_core_in_a_data_folder(tmp_path):
    got = read_occurrences(F.archive_core_in_data_folder(tmp_path))
    F.assert_same_records(got, F.expected_archive())
    assert "data/occurrence.txt" in got.attrs["read"]


def test_event_core_archive_joins_coordinates_by_event_id(tmp_path):
    got = read_occurrences(F.event_core_archive(tmp_path))
    want = F.expected_ebird()
    F.assert_same_records(got, want)  # coordinates from the parent event, years from the visit
    assert list(got["species"]) == list(want["species"])
    assert "event core event.txt joined to occurrences" in got.attrs["read"]


def test_simple_download_zip_with_one_tab_table(tmp_path):
    got = read_occurrences(F.simple_download_zip(tmp_path))
    F.assert_same_records(got, F.expected_ebird())
    assert "zip with one table 0004567-simple.csv" in got.attrs["read"]
    assert "tab-separated" in got.attrs["read"]  # named .csv, sniffed as tab


@pytest.mark.parametrize("source,name,expected", [
    (F.PUMA, "records.csv.gz", F.expected_puma),
    (F.EBIRD, "records.txt.gz", F.expected_ebird),
])
def test_gzipped_text_is_sniffed_after_decompression(tmp_path, source, name, expected):
    got = read_occurrences(F.gzipped(tmp_path, source, name))
    F.assert_same_records(got, expected())
    assert got.attrs["read"].split(": ")[1].startswith("gzip-compressed delimited text")


def test_latin1_with_first_accent_past_one_megabyte(tmp_path):
    path, first = F.latin1_past_1mb(tmp_path)
    assert first > 1_000_000
    got = read_occurrences(path)
    F.assert_same_records(got, F.expected_latin1_past_1mb(path))
    assert "encoding Latin-1" in got.attrs["read"]
    assert "México" in set(got["country"])


def test_utf8_with_bom(tmp_path):
    got = read_occurrences(F.utf8_bom(tmp_path))
    F.assert_same_records(got, F.expected_puma())
    assert "encoding UTF-8 with BOM" in got.attrs["read"]
    assert "México" in set(got["country"])
    assert got.attrs["columns"]["species"] == "ScientificName"  # BOM not glued to the first name


def test_utf16_with_bom(tmp_path):
    # a spreadsheet's "Unicode text" export: UTF-16 with a byte-order mark, tab-separated
    path = tmp_path / "ebird_utf16.txt"
    path.write_bytes(F.EBIRD.read_text(encoding="utf-8").encode("utf-16"))
    got = read_occurrences(path)
    F.assert_same_records(got, F.expected_ebird())
    assert "encoding UTF-16" in got.attrs["read"]


@pytest.mark.parametrize("spelling", sorted(F.SPELLINGS))
def test_header_spellings(tmp_path, spelling):
    path = F.ebird_with_headers(tmp_path, spelling)
    got = read_occurrences(path)
    F.assert_same_records(got, F.expected_ebird())
    np.testing.assert_array_equal(got["count"], F.ebird_raw()["INDIVIDUALCOUNT"].astype(float))


def test_header_key_spellings():
    keys = {header_key(s) for s in ("decimalLatitude", "DecimalLatitude", "DECIMALLATITUDE",
                                     "DECIMAL_LATITUDE", "dwc:decimalLatitude",
                                     "http://rs.tdwg.org/dwc/terms/decimalLatitude", " decimal latitude ")}
    assert keys == {"decimallatitude"}


def test_columns_mapping_still_wins(tmp_path):
    path = F.ebird_with_headers(tmp_path, "camel")
    got = read_occurrences(path, columns={"lat": "VERBATIMLATITUDE", "lon": "VERBATIMLONGITUDE"})
    assert got.attrs["columns"]["lat"] == "VERBATIMLATITUDE"


def test_dated_records_from_a_gzip(tmp_path):
    path = tmp_path / "dated.csv.gz"
    path.write_bytes(gzip.compress(b"record_id,lon,lat,age_bp\nf1,-30.5,45.0,21000\n"))
    assert read_dated_records(path)["age_bp"].tolist() == [21000.0]


# --------------------------------------------------------------------------------- messages
def test_zip_without_a_recognisable_core(tmp_path):
    members = F.archive_members()
    path = tmp_path / "two_tables.zip"
    with zipfile.ZipFile(path, "w") as zf:
        zf.writestr("a.txt", F.EBIRD.read_bytes())
        zf.writestr("b.txt", F.EBIRD.read_bytes())
        for name in list(members)[:20]:
            if name.endswith(".xml") and name != "meta.xml":
                zf.writestr(name, members[name])
    with pytest.raises(InputFileError, match="zip without a recognisable core: no meta.xml and 2 tables") as err:
        read_occurrences(path)
    _short(err, path)


def test_zip_of_metadata_only(tmp_path):
    members = F.archive_members()
    path = tmp_path / "metadata_only.zip"
    with zipfile.ZipFile(path, "w") as zf:
        for name, data in members.items():
            if name.startswith("dataset/"):
                zf.writestr(name, data)
    n = sum(1 for name in members if name.startswith("dataset/"))
    with pytest.raises(InputFileError, match=rf"no \.csv/\.txt/\.tsv table among {n} files") as err:
        read_occurrences(path)
    _short(err, path)


def test_meta_xml_naming_a_missing_core(tmp_path):
    members = F.archive_members()
    members["meta.xml"] = members["meta.xml"].replace(b"occurrence.txt", b"occurrences.tsv")
    path = tmp_path / "broken.zip"
    with zipfile.ZipFile(path, "w") as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    with pytest.raises(InputFileError, match="meta.xml names the file 'occurrences.tsv', which is not in the zip") as err:
        read_occurrences(path)
    _short(err, path)


def test_missing_coordinate_names_the_nearest_column(tmp_path):
    text = F.EBIRD.read_text(encoding="utf-8").replace("DECIMALLATITUDE", "DECIMALLATTITUDE", 1)
    path = tmp_path / "renamed.txt"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputFileError, match=r"no coordinate column for lat .*nearest file column 'DECIMALLATTITUDE'") as err:
        read_occurrences(path)
    _short(err, path)


def test_line_with_extra_field_names_line_and_delimiter(tmp_path):
    lines = F.PUMA.read_bytes().split(b"\r\n")
    lines[5] = lines[5] + b",extra"
    path = tmp_path / "ragged.csv"
    path.write_bytes(b"\r\n".join(lines))
    with pytest.raises(InputFileError, match=r"line 6 has 15 fields where the header has 14 \(comma-separated") as err:
        read_occurrences(path)
    _short(err, path)


def test_truncated_gzip(tmp_path):
    data = gzip.compress(F.EBIRD.read_bytes())
    path = tmp_path / "cut.txt.gz"
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(InputFileError, match="gzip-compressed but cannot be decompressed") as err:
        read_occurrences(path)
    _short(err, path)


def test_event_core_without_occurrences(tmp_path):
    with zipfile.ZipFile(F.event_core_archive(tmp_path)) as zf:
        meta = zf.read("meta.xml").decode()
        event = zf.read("event.txt")
    meta = meta[: meta.index("<extension")] + "</archive>"
    path = tmp_path / "events_only.zip"
    with zipfile.ZipFile(path, "w") as zf:
        zf.writestr("meta.xml", meta)
        zf.writestr("event.txt", event)
    with pytest.raises(InputFileError, match="event core and no occurrence file") as err:
        read_occurrences(path)
    _short(err, path)


def test_spreadsheet_is_named(tmp_path):
    path = tmp_path / "records.xlsx"
    with zipfile.ZipFile(path, "w") as zf:
        zf.writestr("[Content_Types].xml", "<Types/>")
        zf.writestr("xl/workbook.xml", "<workbook/>")
    with pytest.raises(InputFileError, match="an Excel workbook.*save the sheet as CSV") as err:
        read_occurrences(path)
    _short(err, path)


def test_real_archive_reads_without_the_old_member_listing():
    # a multi-file zip used to fail with a line listing every member
    assert len(read_occurrences(F.ARCHIVE)) == 158
