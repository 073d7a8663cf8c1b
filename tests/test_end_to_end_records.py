"""A whole `timeslice run` on occurrence records as the aggregators deliver them: a Darwin Core
Archive zip and a simple-download zip named directly in the config, both built from the reduced
demo's own rows (tests/test_end_to_end.py runs the same demo from its CSV)."""

from __future__ import annotations

import csv
import io
import zipfile
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

from timeslice.cli import app
from timeslice.demo import generate
from timeslice.demo_config import render_demo_config

DWC = "http://rs.tdwg.org/dwc/terms/"
TERMS = ["occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude",
         "coordinateUncertaintyInMeters", "occurrenceStatus", "basisOfRecord", "eventDate", "year",
         "individualCount"]

# two reduced-demo runs sharing one cache: about 30 s, so in the default suite


def _config(data, occurrences: str, *, dated: bool) -> str:
    text = render_demo_config(str(data))
    text = "\n".join(l for l in text.splitlines() if not l.startswith(("birch =", "cedar =")))
    text = text.replace("maps = true", "maps = false")
    text = text.replace(f'occurrences = "{data}/occurrences.csv"', f'occurrences = "{occurrences}"')
    if not dated:
        text = text.replace(f'dated_records = "{data}/dated_records.csv"\n', "")
    return text


def _archive(data, path):
    """Headerless tab-separated core named by meta.xml, in a sub-folder, with the demo's dated
    records added as fossil specimens dated by a calendar range (age ± 2 sd, ISO 8601 years)."""
    occ = pd.read_csv(data / "occurrences.csv", dtype=str, keep_default_na=False)
    dated = pd.read_csv(data / "dated_records.csv")
    fossils = pd.DataFrame({
        "occurrenceID": dated["record_id"], "scientificName": occ["scientificName"].iloc[0],
        "decimalLatitude": dated["lat"].astype(str), "decimalLongitude": dated["lon"].astype(str),
        "coordinateUncertaintyInMeters": "", "occurrenceStatus": "present",
        "basisOfRecord": "FossilSpecimen",
        "eventDate": [f"{1950 - (a + 2 * s):.0f}/{1950 - (a - 2 * s):.0f}"
                      for a, s in zip(dated["age_bp"], dated["age_sd"].fillna(0))],
        "year": "", "individualCount": "",
    })
    rows = pd.concat([occ[TERMS], fossils[TERMS]], ignore_index=True)
    core = rows.to_csv(sep="\t", header=False, index=False, quoting=csv.QUOTE_NONE, lineterminator="\n")
    fields = "".join(f'<field index="{i}" term="{DWC}{t}"/>' for i, t in enumerate(TERMS))
    meta = ('<archive xmlns="http://rs.tdwg.org/dwc/text/"><core encoding="UTF-8" '
            'fieldsTerminatedBy="\\t" linesTerminatedBy="\\n" fieldsEnclosedBy="" ignoreHeaderLines="0" '
            f'rowType="{DWC}Occurrence"><files><location>data/occurrence.txt</location></files>'
            f'<id index="0"/>{fields}</core></archive>')
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("meta.xml", meta)
        zf.writestr("data/occurrence.txt", core)
        zf.writestr("metadata.xml", "<eml/>")
        zf.writestr("citations.txt", "demo")
    return len(occ), len(fossils)


def _simple(data, path):
    occ = pd.read_csv(data / "occurrences.csv", dtype=str, keep_default_na=False)
    buf = io.StringIO()
    occ.to_csv(buf, sep="\t", index=False, quoting=csv.QUOTE_NONE, lineterminator="\n")
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("0001234-260101120000000.csv", buf.getvalue())
        zf.writestr("citations.txt", "demo")
        zf.writestr("rights.txt", "demo")
    return len(occ)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    root = tmp_path_factory.mktemp("records_e2e")
    data = root / "demo_data"
    generate(data, resolution=0.5)
    return root, data


def test_run_on_a_darwin_core_archive_and_a_simple_download(demo):
    root, data = demo
    out = root / "out"  # one folder: the second run reuses the harmonised slices
    n_occ, n_fossil = _archive(data, root / "dwca.zip")
    cfg = root / "archive.toml"
    cfg.write_text(_config(data, str(root / "dwca.zip"), dated=False))
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    a = pd.read_csv(out / "tables" / "cleaning.csv", keep_default_na=False)
    rows = a.set_index("reason")
    assert "Darwin Core Archive, occurrence core data/occurrence.txt" in rows.loc["records read", "note"]
    assert rows.loc["fossil specimen", "n_dropped"] == n_fossil
    assert rows.loc["fossil specimen", "note"].startswith(f"{n_fossil} with an age")
    # the fossils were handed to the hindcast check instead (no dated_records file in this config)
    hind = pd.read_csv(out / "tables" / "series_hindcast.csv")
    assert len(hind) > 0
    man = pd.read_json(out / "manifest.json", typ="series")
    assert str(root / "dwca.zip") in man["inputs"]
    assert (out / "report.html").is_file()

    n = _simple(data, root / "simple.zip")
    assert n == n_occ
    cfg = root / "simple.toml"
    cfg.write_text(_config(data, str(root / "simple.zip"), dated=True))
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 0, result.output
    b = pd.read_csv(out / "tables" / "cleaning.csv", keep_default_na=False).set_index("reason")
    assert "zip with one table 0001234-260101120000000.csv" in b.loc["records read", "note"]
    assert "tab-separated" in b.loc["records read", "note"]
    # the same demo records in both deliveries: the same drops, rule by rule
    same = [r for r in b.index if r not in ("records read", "fossil specimen")]
    pd.testing.assert_series_equal(rows.loc[same, "n_dropped"], b.loc[same, "n_dropped"])
    assert b.loc["fossil specimen", "n_dropped"] == 0
    assert int(b["n_dropped"].sum()) < n_occ
    html = (out / "report.html").read_text()
    assert f"{n_occ} read" in html  # the methods paragraph counts the records read


def test_multi_species_file_stops_the_run_with_one_line(demo):
    root, data = demo
    ebird = Path(__file__).resolve().parent / "data" / "occurrences" / "ebird.tab.txt"
    cfg = root / "multi.toml"
    cfg.write_text(_config(data, str(ebird), dated=True))
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(root / "out")])
    assert result.exit_code == 2, result.output
    lines = [l for l in result.stderr.splitlines() if l.strip()]
    assert len(lines) == 1 and "ebird.tab.txt" in lines[0]
    assert "5 species: Pipilo maculatus (4)" in lines[0] and "[species] taxon" in lines[0]
