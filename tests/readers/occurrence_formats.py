"""Build the aggregators' delivery formats from the rows of the real files in tests/data/occurrences.

No record value is invented: every builder re-packs bytes or rows of a real file (the only new
strings are structural: member names, meta.xml, event identifiers and header spellings).
Independent readings (plain pandas on the same bytes) live here too, so that each test compares
the reader against a reading that shares none of its code.
"""

from __future__ import annotations

import csv
import gzip
import io
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd

DATA = Path(__file__).resolve().parents[1] / "data" / "occurrences"
ARCHIVE = DATA / "gbif-results.zip"
PUMA = DATA / "csv_optional_quotes_puma.csv"
EBIRD = DATA / "ebird.tab.txt"

# column indexes of the archive's core, read off its meta.xml by hand
ARCHIVE_INDEX = {"lat": 24, "lon": 25, "year": 26, "basis": 5, "species": 6}

DWC = "http://rs.tdwg.org/dwc/terms/"


# ---------------------------------------------------------------------------------------------
# independent readings
# ---------------------------------------------------------------------------------------------
def _num(s: pd.Series) -> np.ndarray:
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)


def expected_archive() -> pd.DataFrame:
    """The archive's core read with pandas alone: headerless, tab-separated, no quoting."""
    with zipfile.ZipFile(ARCHIVE) as zf, zf.open("occurrence.txt") as fh:
        raw = pd.read_csv(fh, sep="\t", header=None, dtype=str, keep_default_na=False,
                          quoting=csv.QUOTE_NONE)
    i = ARCHIVE_INDEX
    return pd.DataFrame({"lon": _num(raw[i["lon"]]), "lat": _num(raw[i["lat"]]),
                         "year": _num(raw[i["year"]]), "basis": raw[i["basis"]].to_numpy(),
                         "species": raw[i["species"]].to_numpy()})


def expected_puma() -> pd.DataFrame:
    raw = pd.read_csv(PUMA, encoding="latin-1", dtype=str, keep_default_na=False)
    return pd.DataFrame({"lon": _num(raw["DecimalLongitude"]), "lat": _num(raw["DecimalLatitude"]),
                         "year": np.full(len(raw), np.nan), "basis": raw["BasisOfRecord"].to_numpy(),
                         "species": raw["ScientificName"].to_numpy(), "country": raw["Country"].to_numpy()})


def ebird_raw() -> pd.DataFrame:
    return pd.read_csv(EBIRD, sep="\t", dtype=str, keep_default_na=False, quoting=csv.QUOTE_NONE)


def expected_ebird() -> pd.DataFrame:
    raw = ebird_raw()
    return pd.DataFrame({"lon": _num(raw["DECIMALLONGITUDE"]), "lat": _num(raw["DECIMALLATITUDE"]),
                         "year": _num(raw["YEAR"]), "basis": raw["BASISOFRECORD"].to_numpy(),
                         "species": raw["SCIENTIFICNAME"].to_numpy(),
                         "locality": raw["LOCALITY"].to_numpy()})


def assert_same_records(got: pd.DataFrame, want: pd.DataFrame) -> None:
    """Same count, coordinates, years and basis (NaN where the other is NaN)."""
    assert len(got) == len(want)
    for col in ("lon", "lat", "year"):
        np.testing.assert_array_equal(got[col].to_numpy(dtype=float), want[col].to_numpy(dtype=float),
                                      err_msg=col)
    assert list(got["basis"]) == list(want["basis"])


# ---------------------------------------------------------------------------------------------
# builders
# ---------------------------------------------------------------------------------------------
def _zip(path: Path, members: dict[str, bytes]) -> Path:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, data in members.items():
            zf.writestr(name, data)
    return path


def archive_members() -> dict[str, bytes]:
    with zipfile.ZipFile(ARCHIVE) as zf:
        return {i.filename: zf.read(i.filename) for i in zf.infolist() if not i.is_dir()}


def archive_in_subfolder(tmp: Path) -> Path:
    """The real archive with every member moved under one top folder (as unzipped and re-zipped)."""
    return _zip(tmp / "export.zip", {f"0001234-export/{k}": v for k, v in archive_members().items()})


def archive_core_in_data_folder(tmp: Path) -> Path:
    """meta.xml at the top, the core in ``data/`` and named so by meta.xml's location."""
    members = archive_members()
    meta = members.pop("meta.xml").replace(b"<location>occurrence.txt</location>",
                                           b"<location>data/occurrence.txt</location>")
    members["data/occurrence.txt"] = members.pop("occurrence.txt")
    return _zip(tmp / "core_in_data.zip", {"meta.xml": meta, **members})


def simple_download_zip(tmp: Path, *, source: Path = EBIRD) -> Path:
    """An aggregator "simple" download: one tab-separated table (named .csv) plus citations."""
    members = archive_members()
    return _zip(tmp / "0004567-simple.zip", {
        "0004567-simple.csv": source.read_bytes(),
        "citations.txt": members["citations.txt"],
        "rights.txt": members["rights.txt"],
    })


def gzipped(tmp: Path, source: Path, name: str) -> Path:
    path = tmp / name
    path.write_bytes(gzip.compress(source.read_bytes(), mtime=0))
    return path


def latin1_past_1mb(tmp: Path) -> tuple[Path, int]:
    """The puma rows without accents repeated past 1 MB, then all the real rows (with accents).

    Returns the path and the byte offset of the first non-ASCII byte.
    """
    lines = PUMA.read_bytes().split(b"\r\n")
    header, rows = lines[0], [ln for ln in lines[1:] if ln]
    ascii_rows = [ln for ln in rows if max(ln, default=0) < 0x80]
    body = []
    size = len(header)
    while size < 1_100_000:
        body.extend(ascii_rows)
        size += sum(len(r) + 2 for r in ascii_rows)
    data = b"\r\n".join([header, *body, *rows]) + b"\r\n"
    path = tmp / "latin1_big.csv"
    path.write_bytes(data)
    first = next(i for i, b in enumerate(data) if b >= 0x80)
    return path, first


def expected_latin1_past_1mb(path: Path) -> pd.DataFrame:
    raw = pd.read_csv(path, encoding="latin-1", dtype=str, keep_default_na=False)
    return pd.DataFrame({"lon": _num(raw["DecimalLongitude"]), "lat": _num(raw["DecimalLatitude"]),
                         "year": np.full(len(raw), np.nan), "basis": raw["BasisOfRecord"].to_numpy()})


def utf8_bom(tmp: Path) -> Path:
    """The puma file re-encoded as UTF-8 with a byte-order mark (a spreadsheet's "CSV UTF-8")."""
    path = tmp / "puma_utf8_bom.csv"
    path.write_bytes(b"\xef\xbb\xbf" + PUMA.read_bytes().decode("latin-1").encode("utf-8"))
    return path


#: ebird's UPPER-CASE headers and their Darwin Core term spelling
EBIRD_TERMS = {
    "DECIMALLATITUDE": "decimalLatitude", "DECIMALLONGITUDE": "decimalLongitude",
    "BASISOFRECORD": "basisOfRecord", "YEAR": "year", "SCIENTIFICNAME": "scientificName",
    "INDIVIDUALCOUNT": "individualCount", "COORDINATEUNCERTAINTYINMETERS": "coordinateUncertaintyInMeters",
    "OCCURRENCEID": "occurrenceID",
}


def _underscore(term: str) -> str:
    out = "".join("_" + c if c.isupper() else c for c in term)
    return out.upper().replace("I_D", "ID")


SPELLINGS = {
    "camel": lambda t: t,
    "capitalised": lambda t: t[0].upper() + t[1:],
    "upper": str.upper,
    "underscore": _underscore,
    "dwc_prefix": lambda t: f"dwc:{t}",
    "term_uri": lambda t: DWC + t,
}


def ebird_with_headers(tmp: Path, spelling: str) -> Path:
    """ebird's rows under one header spelling of the Darwin Core terms."""
    text = EBIRD.read_text(encoding="utf-8")
    header, rest = text.split("\n", 1)
    fn = SPELLINGS[spelling]
    cols = [fn(EBIRD_TERMS[c]) if c in EBIRD_TERMS else c for c in header.split("\t")]
    path = tmp / f"ebird_{spelling}.txt"
    path.write_text("\t".join(cols) + "\n" + rest, encoding="utf-8")
    return path


def event_core_archive(tmp: Path) -> Path:
    """An event-core archive built from ebird's rows.

    Parent events (one per locality) carry the coordinates and locality; each sampling event
    (one per record) carries the date and points to its parent; the occurrence extension holds
    the taxon, basis and count and points to its sampling event by eventID. meta.xml gives the
    event file a header line and column terms; the occurrence file is headerless.
    """
    raw = ebird_raw()
    sites = list(dict.fromkeys(zip(raw["LOCALITY"], raw["DECIMALLATITUDE"], raw["DECIMALLONGITUDE"])))
    site_id = {s: f"site{k + 1}" for k, s in enumerate(sites)}
    ev_lines: list[str] = []

    class _Tab:  # tab-separated, no quoting: the values hold a stray double quote
        @staticmethod
        def writerow(values) -> None:
            ev_lines.append("\t".join(map(str, values)))

    w = _Tab()
    w.writerow(["eventID", "parentEventID", "year", "month", "day", "locality", "decimalLatitude",
                "decimalLongitude"])
    for (loc, la, lo), sid in site_id.items():
        w.writerow([sid, "", "", "", "", loc, la, lo])
    occ = io.StringIO()
    wo = csv.writer(occ, delimiter=",", lineterminator="\n", quoting=csv.QUOTE_MINIMAL)
    for k, r in raw.iterrows():
        eid = f"visit{k + 1}"
        w.writerow([eid, site_id[(r["LOCALITY"], r["DECIMALLATITUDE"], r["DECIMALLONGITUDE"])],
                    r["YEAR"], r["MONTH"], r["DAY"], "", "", ""])
        wo.writerow([eid, r["OCCURRENCEID"], r["SCIENTIFICNAME"], r["BASISOFRECORD"], r["INDIVIDUALCOUNT"]])
    ev_terms = ["eventID", "parentEventID", "year", "month", "day", "locality", "decimalLatitude",
                "decimalLongitude"]
    ev_fields = "".join(f'<field index="{i}" term="{DWC}{t}"/>' for i, t in enumerate(ev_terms))
    occ_terms = ["eventID", "occurrenceID", "scientificName", "basisOfRecord", "individualCount"]
    occ_fields = "".join(f'<field index="{i}" term="{DWC}{t}"/>' for i, t in enumerate(occ_terms))
    meta = (
        '<archive xmlns="http://rs.tdwg.org/dwc/text/">'
        f'<core encoding="UTF-8" fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" fieldsEnclosedBy="" '
        f'ignoreHeaderLines="1" rowType="{DWC}Event"><files><location>event.txt</location></files>'
        f'<id index="0"/>{ev_fields}</core>'
        f'<extension encoding="UTF-8" fieldsTerminatedBy="," linesTerminatedBy="\\n" fieldsEnclosedBy="&quot;" '
        f'ignoreHeaderLines="0" rowType="{DWC}Occurrence"><files><location>occurrence.txt</location></files>'
        f'<coreid index="0"/>{occ_fields}</extension></archive>'
    )
    return _zip(tmp / "event_core.zip", {"meta.xml": meta.encode(), "event.txt": ("\n".join(ev_lines) + "\n").encode(),
                                         "occurrence.txt": occ.getvalue().encode()})
