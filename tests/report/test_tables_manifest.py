"""CSV tables and the run manifest."""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import pytest

from timeslice.errors import DataError, InputFileError
from timeslice.report.manifest import hash_file, read_manifest, write_manifest
from timeslice.report.tables import write_csv


def test_csv_round_trip(summary_df, tmp_path):
    path = write_csv(summary_df, tmp_path / "out" / "summary.csv")
    back = pd.read_csv(path)
    assert list(back.columns) == list(summary_df.columns)
    pd.testing.assert_frame_equal(back, summary_df, check_dtype=False)
    with pytest.raises(DataError, match="DataFrame"):
        write_csv([1, 2], tmp_path / "x.csv")


def test_sha256_known_vectors(tmp_path):
    # FIPS 180-2, Appendix B.1: SHA-256("abc").
    p = tmp_path / "abc.txt"
    p.write_bytes(b"abc")
    assert hash_file(p) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    # Multi-chunk read agrees with hashlib in one go (reference: Python hashlib).
    big = tmp_path / "big.bin"
    data = bytes(range(256)) * 5000
    big.write_bytes(data)
    assert hash_file(big, chunk_size=1000) == hashlib.sha256(data).hexdigest()
    with pytest.raises(InputFileError, match="missing.nc"):
        hash_file(tmp_path / "missing.nc")


def test_manifest_contents_and_verify(tmp_path):
    inp = tmp_path / "occ.csv"
    inp.write_text("a,b\n1,2\n")
    info = {
        "config": {"species": "Nivalia demonstrata", "buffer_km": 200.0},
        "config_path": tmp_path / "demo.toml",
        "inputs": [inp],
        "seed": 42,
        "timings": {"harmonise": 1.5, "niche": 0.25},
        "command": ["timeslice", "run", "demo.toml"],
    }
    path = write_manifest(info, tmp_path / "manifest.json")
    data = json.loads(path.read_text())
    assert data["seed"] == 42 and data["timings"]["niche"] == 0.25
    rec = data["inputs"][str(inp.resolve())]
    assert rec["sha256"] == hashlib.sha256(b"a,b\n1,2\n").hexdigest()
    assert rec["bytes"] == 8
    assert data["versions"]["numpy"] and data["versions"]["xarray"]
    assert data["command"] == ["timeslice", "run", "demo.toml"]
    assert data["config_path"] == str(tmp_path / "demo.toml")
    assert read_manifest(path)["config"]["buffer_km"] == 200.0
    inp.write_text("changed\n")
    with pytest.raises(InputFileError, match="occ.csv.*changed"):
        read_manifest(path)
    assert read_manifest(path, verify=False)["seed"] == 42


def test_manifest_bad_files(tmp_path):
    with pytest.raises(InputFileError, match="no such manifest"):
        read_manifest(tmp_path / "m.json")
    bad = tmp_path / "m.json"
    bad.write_text("{not json")
    with pytest.raises(InputFileError, match="not a JSON manifest"):
        read_manifest(bad)


def test_manifest_relative_inputs_resolve(tmp_path, monkeypatch):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "dem.nc").write_bytes(b"xyz")
    monkeypatch.chdir(tmp_path)
    path = write_manifest({"inputs": ["data/dem.nc"]}, tmp_path / "m.json")
    monkeypatch.chdir("/")
    data = read_manifest(path)  # verifies from another working directory
    assert str(tmp_path / "data" / "dem.nc") in data["inputs"]
    assert data["working_directory"] == str(tmp_path)


def test_unwritable_output_is_one_clear_error(summary_df, tmp_path):
    import os

    from timeslice.report.html import ReportContext, write_report

    with pytest.raises(InputFileError, match="is a folder"):
        write_report(ReportContext(), tmp_path)
    if os.geteuid() == 0:
        pytest.skip("running as root: permissions do not stop writing")
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        with pytest.raises(InputFileError, match="could not write"):
            write_csv(summary_df, locked / "summary.csv")
    finally:
        locked.chmod(0o700)


def test_disk_full_is_one_clear_error(summary_df, tmp_path, monkeypatch):
    import errno

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(pd.DataFrame, "to_csv", full)
    target = tmp_path / "summary.csv"
    target.write_text("old\n")
    with pytest.raises(InputFileError, match="summary.csv: could not write.*free some disk"):
        write_csv(summary_df, target)
    assert target.read_text() == "old\n"
    assert not list(tmp_path.glob("*.part"))
