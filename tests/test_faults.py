"""The fault suite: every bad input is refused early and plainly, every output folder is whole.

One property throughout: a command (or the config check and reader it starts with) either
succeeds with correct outputs, or stops with one line — a
:class:`~timeslice.errors.TimesliceError`, exit code 2 from the CLI, no traceback, no line
break, at most ``MAX_LINE`` characters — that names the config key or the file; and no file
under a final name is left half-written. Inputs come from hypothesis (mutated configs, record
files, damaged bytes) and from a small corpus of broken NetCDF, GeoTIFF and CSV files built
here (tests/fault_inputs.py). The default run keeps the example counts small; the tests marked
``slow`` run many more and the whole-run cases. Set ``TIMESLICE_FAULT_TALLY=path.json`` to write
the counts (cases, clean errors, correct acceptances, silent acceptances, tracebacks) that
docs/reliability.md reports.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import subprocess
import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from fault_inputs import (
    DELETE,
    demo_mapping,
    geotiff_corpus,
    kill_once_cached,
    mutated,
    netcdf_corpus,
    record_lines,
    small_monthly,
    write_config,
)
from timeslice.cli import MAX_ERROR_LINE, app
from timeslice.config import load_config
from timeslice.demo import generate
from timeslice.errors import InputFileError, TimesliceError
from timeslice.readers import open_climate, read_occurrences

#: Longest acceptable error line (the issue's "under ~400 characters").
MAX_LINE = MAX_ERROR_LINE

TALLY: Counter = Counter()

FAST = settings(max_examples=50, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])
SLOW = settings(max_examples=300, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])


@pytest.fixture(scope="module", autouse=True)
def _write_tally():
    yield
    target = os.environ.get("TIMESLICE_FAULT_TALLY")
    if target:
        old = json.loads(Path(target).read_text()) if Path(target).is_file() else {}
        for k, v in TALLY.items():
            old[k] = old.get(k, 0) + v
        Path(target).write_text(json.dumps(old, indent=1, sort_keys=True))


def _count(part: str, outcome: str) -> None:
    TALLY[f"{part}|{outcome}"] += 1
    TALLY[f"all|{outcome}"] += 1


@pytest.fixture(scope="module")
def world(tmp_path_factory) -> Path:
    """The invented demo at 0.5° (a copy per module; nothing here is real data)."""
    root = tmp_path_factory.mktemp("faults")
    generate(root / "data", resolution=0.5)
    (root / "data" / "a_folder").mkdir()
    return root / "data"


def _clean_line(msg: str, names: list[str]) -> None:
    """The shape every refusal must have."""
    assert "\n" not in msg and "Traceback" not in msg, msg
    assert len(msg) <= MAX_LINE, f"{len(msg)} characters: {msg}"
    assert any(n and n in msg for n in names), f"names none of {names}: {msg}"


def _fail_on_traceback(kind: str, got, part: str) -> None:
    """Count and fail an attempt that ended in a traceback instead of one clean line."""
    if kind == "traceback":
        _count(part, "traceback")
        raise AssertionError(f"traceback {type(got).__name__}: {got}") from got


def _attempt(fn):
    """('ok', value) | ('clean', message) | ('traceback', exception)."""
    try:
        return "ok", fn()
    except TimesliceError as err:
        return "clean", str(err)
    except Exception as err:  # noqa: BLE001 - a traceback is the finding
        return "traceback", err


# --------------------------------------------------------------------------- configs (fast)

#: Hostile values: wrong types, extremes, text that breaks patterns, paths that lead nowhere.
_VALUES = st.one_of(
    st.integers(min_value=-2**70, max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=24),
    st.sampled_from(["", "{", "}", "{model", "{bogus}", "{month:x}", "$x^2$", "21ka/a",
                     "../nowhere.nc", "./a_folder", "./occurrences.csv", "./dem.nc",
                     "2060-2041", "-1", "nan", "envelope", "fixed", "baseline", "1e400"]),
    st.lists(st.one_of(st.integers(-3, 3), st.text(max_size=4)), max_size=3),
    st.dictionaries(st.sampled_from(["tas", "pr", "tasmin", "x", "bio1"]),
                    st.one_of(st.text(max_size=5), st.floats(-2, 2)), max_size=2),
    st.just(DELETE),
)


def _leaves(data, prefix=()) -> list[tuple]:
    out = []
    if isinstance(data, dict):
        for k, v in data.items():
            out += _leaves(v, (*prefix, k)) if isinstance(v, (dict, list)) and v and not (
                isinstance(v, list) and not isinstance(v[0], dict)) else [(*prefix, k)]
    elif isinstance(data, list):
        for i, v in enumerate(data):
            out += _leaves(v, (*prefix, i))
    return out


_BASE = demo_mapping(slices=("21ka", "6ka", "low-forcing/2081-2100"))
#: Every key of the reduced demo config, and keys it leaves at their defaults.
_PATHS = _leaves(_BASE) + [
    ("niche", "threshold_value"), ("niche", "cv_scheme"), ("niche", "calibration"),
    ("niche", "calibration_mask"), ("niche", "background_file"), ("niche", "params"),
    ("niche", "years"), ("niche", "min_records"), ("run", "workers"),
    ("series", "partition_factors"), ("series", "movement_through"),
    ("series", "graph_neighbours"), ("series", "hindcast_max_offset_years"),
    ("climate", "units"), ("climate", "regrid"), ("climate", "ice_threshold"),
    ("output", "projection"), ("transfer", "batch"), ("slices", 0, "between"),
    ("slices", 1, "kind"), ("slices", 0, "units"), ("species", "columns"),
]
#: Keys without which no run can be described.
_REQUIRED = {("climate", "baseline"), ("climate", "elevation"), ("species", "occurrences"),
             ("slices", 0, "name"), ("slices", 0, "file"), ("slices", 0, "age_bp"),
             ("slices", 2, "year")}
#: Keys that hold a path (a missing target must be refused).
_PATH_KEYS = {("climate", "baseline"), ("climate", "elevation"), ("species", "occurrences"),
              ("species", "dated_records"), ("slices", 0, "ice"), ("slices", 0, "file"),
              ("slices", 1, "file"), ("slices", 2, "file"), ("climate", "models", "alder"),
              ("niche", "calibration_mask"), ("niche", "background_file")}


def _must_refuse(path: tuple, value) -> bool:
    """Mutations that no valid config can hold (the oracle for silent acceptance)."""
    if value is DELETE:
        return path in _REQUIRED
    if isinstance(value, float) and not np.isfinite(value):
        return True
    if path in _PATH_KEYS and isinstance(value, str) and value in (
            "../nowhere.nc", "./a_folder", "{", "}", "{model", "{bogus}", "{month:x}"):
        return True
    if path == ("run", "seed") and isinstance(value, int) and not 0 <= value <= 2**32 - 1:
        return True
    if path in (("slices", 2, "period"), ("climate", "baseline_period")) and value == "2060-2041":
        return True
    if path in (("niche", "algorithm"), ("niche", "threshold"), ("series", "reference")) and (
            isinstance(value, str) and value in ("", "{", "$x^2$", "21ka/a", "-1", "nan")):
        return True
    return False


_MUTATION = st.tuples(st.sampled_from(_PATHS), _VALUES)
_TYPO = st.tuples(st.sampled_from([p for p in _PATHS if isinstance(p[-1], str)]),
                  st.sampled_from(["_", "s", "X", "é"]))


def _config_case(world: Path, mutations, typo, part: str) -> None:
    data = _BASE
    refuse = False
    names = ["run.toml", str(world)]  # the config, or an input file it names
    for path, value in mutations:
        if len(path) > 1 and not isinstance(_dig(data, path[:-1]), (dict, list)):
            continue
        try:
            data = mutated(data, path, value)
        except (KeyError, IndexError, TypeError):
            continue
        refuse |= _must_refuse(path, value)
    if typo is not None:
        path, suffix = typo
        node = _dig(data, path[:-1])
        if isinstance(node, dict) and path[-1] in node:
            data = mutated(data, path, DELETE)
            data = mutated(data, (*path[:-1], path[-1] + suffix), 1)
            refuse = True
    cfg_path = write_config(world, data, "run.toml")
    kind, got = _attempt(lambda: load_config(cfg_path).check_files())
    _fail_on_traceback(kind, got, part)
    if kind == "clean":
        _count(part, "clean error")
        _clean_line(got, names)
    elif refuse:
        _count(part, "silent acceptance")
        raise AssertionError(f"accepted a config no run can hold: {mutations} {typo}")
    else:
        _count(part, "accepted")


def _dig(data, path):
    node = data
    for p in path:
        try:
            node = node[p]
        except (KeyError, IndexError, TypeError):
            return None
    return node


@FAST
@given(mutations=st.lists(_MUTATION, min_size=1, max_size=3),
       typo=st.one_of(st.none(), _TYPO))
def test_mutated_configs_are_accepted_or_refused_in_one_line(world, mutations, typo):
    _config_case(world, mutations, typo, "config")


@pytest.mark.slow
@SLOW
@given(mutations=st.lists(_MUTATION, min_size=1, max_size=4),
       typo=st.one_of(st.none(), _TYPO))
def test_mutated_configs_many(world, mutations, typo):
    _config_case(world, mutations, typo, "config")


# The named config cases: each refused at load, naming the key, never suggesting the
# value that was written.
_NAMED = [
    (("slices", 0, "file"), "./models/{model}/{bogus}.nc", "bogus"),
    (("slices", 0, "file"), "./models/{model/21ka.nc", "slices[0].file"),
    (("run", "seed"), -1, "run.seed"),
    (("run", "seed"), 2**32, "run.seed"),
    (("slices", 2, "period"), "2100-2081", "period"),
    (("niche", "algorithm"), "envelop", "niche.algorithm"),
    (("niche", "threshold"), "fixed", "threshold_value"),
    (("series", "reference"), "alder_22ka", "series.reference"),
    (("series", "refugium_window"), ["21 ka"], "series.refugium_window"),
    (("series", "dispersal_rate"), "fast", "series.dispersal_rate"),
    (("niche", "cv_folds"), 1, "niche.cv_folds"),
    (("species", "occurrences"), "./a_folder", "species.occurrences"),
    (("climate", "baseline"), {"files": "./baseline.nc", "units": {"pr": "furlongs"}},
     "furlongs"),
    (("climate", "baseline_year"), float("nan"), "climate.baseline_year"),
    (("niche", "variables"), ["bio99"], "niche.variables"),
    (("niche", "params"), {"bogus": 1}, "niche.params"),
]


@pytest.mark.parametrize("path,value,key", _NAMED, ids=[k for *_, k in _NAMED])
def test_named_config_mistakes_are_refused_at_load(world, path, value, key):
    cfg_path = write_config(world, mutated(_BASE, path, value), "named.toml")
    result = CliRunner().invoke(app, ["run", str(cfg_path), "--out", str(world.parent / "x")])
    assert result.exit_code == 2, result.output
    line = result.output.strip()
    _clean_line(line, [key])
    assert line.count("\n") == 0
    if isinstance(value, str) and "did you mean" in line:
        assert f"did you mean {value!r}" not in line, line
    assert not (world.parent / "x").exists()  # refused before the output folder is made
    _count("named", "clean error")


@pytest.mark.parametrize("a,b", [("21ka/a", "21ka:a"), ("21ka—Ω❄", "21ka")])
def test_labels_with_one_file_name_are_refused_naming_both(world, a, b):
    data = mutated(mutated(_BASE, ("slices", 0, "name"), a), ("slices", 1, "name"), b)
    data["series"]["refugium_window"] = ["1981-2010"]
    with pytest.raises(TimesliceError) as info:
        load_config(write_config(world, data, "labels.toml"))
    msg = str(info.value)
    _clean_line(msg, ["labels.toml"])
    assert f"alder_{a}" in msg and f"alder_{b}" in msg, msg
    _count("named", "clean error")


# ------------------------------------------------------------------------------ record files

_TEXT_CELL = st.text(alphabet="abcxyzNS°'\" -", max_size=6)
_COORD = st.one_of(st.floats(min_value=-190, max_value=370, allow_nan=False), _TEXT_CELL)


@st.composite
def _record_files(draw):
    n = draw(st.integers(0, 12))
    lats = [draw(_COORD) for _ in range(n)]
    lons = [draw(_COORD) for _ in range(n)]
    sep = draw(st.sampled_from([",", ";", "\t", "|"]))
    decimal = draw(st.sampled_from([".", ","])) if sep != "," else "."
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "utf-16", "utf-16-le", "utf-16-be",
                                     "cp1252"]))
    return lats, lons, sep, decimal, encoding


def _cell(v, decimal: str) -> str:
    if isinstance(v, float):
        return f"{v:.5f}".replace(".", decimal)
    return '"' + v.replace('"', '""') + '"' if v else ""


def _expected(v) -> float:
    """What a reader must give for a cell: the number written, NaN for text (pandas and the
    Python float parser agree on "%.5f" output)."""
    return round(v, 5) if isinstance(v, float) else float("nan")


def _records_case(tmp_path, case, part: str) -> None:
    lats, lons, sep, decimal, encoding = case
    header = ["occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude"]
    rows = [sep.join(header)]
    for i, (la, lo) in enumerate(zip(lats, lons)):
        rows.append(sep.join([f"r{i}", "Nivalia demonstrata", _cell(la, decimal),
                              _cell(lo, decimal)]))
    path = tmp_path / "records.csv"
    path.write_bytes(("\n".join(rows) + "\n").encode(encoding))
    kind, got = _attempt(lambda: read_occurrences(path))
    _fail_on_traceback(kind, got, part)
    if kind == "clean":
        # a well-formed table must be read; a refusal here is a false alarm
        _count(part, "clean error")
        raise AssertionError(f"refused a well-formed table: {got}")
    df = got
    # the truth is what was written: the number, or NaN for text (reference: Python float())
    written = [(_expected(la), _expected(lo)) for la, lo in zip(lats, lons)]
    assert len(df) == len(written)
    want = np.array(written, dtype=float).reshape(-1, 2)
    np.testing.assert_allclose(df["lat"].to_numpy(), want[:, 0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(df["lon"].to_numpy(), want[:, 1], rtol=0, atol=1e-9)
    _count(part, "accepted")


@FAST
@given(case=_record_files())
def test_record_files_are_read_as_written(tmp_path, case):
    _records_case(tmp_path, case, "records")


@pytest.mark.slow
@SLOW
@given(case=_record_files())
def test_record_files_many(tmp_path, case):
    _records_case(tmp_path, case, "records")


def _damaged_case(tmp_path, good: bytes, cuts, part: str) -> None:
    data = bytearray(good)
    for kind, at, n in cuts:
        at = at % max(len(data), 1)
        if kind == "truncate":
            del data[at:]
        elif kind == "zero":
            data[at:at + n] = bytes(min(n, len(data) - at))
        elif kind == "insert":
            data[at:at] = bytes((at * 7 + i) % 256 for i in range(n))
    path = tmp_path / "damaged.csv"
    path.write_bytes(bytes(data))
    kind, got = _attempt(lambda: read_occurrences(path))
    _fail_on_traceback(kind, got, part)
    if kind == "clean":
        _count(part, "clean error")
        _clean_line(got, ["damaged.csv"])
    else:
        # read: whatever was readable, as strings turned numbers or NaN, never an exception
        _count(part, "accepted")
        assert {"lon", "lat", "row"} <= set(got.columns)


_CUTS = st.lists(st.tuples(st.sampled_from(["truncate", "zero", "insert"]),
                           st.integers(0, 10**6), st.integers(1, 64)), min_size=1, max_size=3)


@FAST
@given(cuts=_CUTS, zipped=st.booleans())
def test_damaged_record_bytes(tmp_path, cuts, zipped):
    good = record_lines([(48.5, -33.2), (47.6, -31.3), (46.1, -30.0)]).encode()
    if zipped:
        import gzip

        good = gzip.compress(good)
    _damaged_case(tmp_path, good, cuts, "damaged records")


@pytest.mark.slow
@SLOW
@given(cuts=_CUTS, zipped=st.booleans())
def test_damaged_record_bytes_many(tmp_path, cuts, zipped):
    good = record_lines([(48.5 + i / 10, -33.2) for i in range(40)]).encode()
    if zipped:
        import gzip

        good = gzip.compress(good)
    _damaged_case(tmp_path, good, cuts, "damaged records")


_RECORD_CORPUS = {
    "empty.csv": (b"", "is empty"),
    "header_only.csv": (b"decimalLatitude,decimalLongitude\n", None),
    "one_column.csv": (b"just some words\nmore words\n", "no coordinate column"),
    "long_header.csv": ((b"an arbitrary text file with a very long first line " * 40) + b"\n",
                        "no coordinate column"),
    "binary.csv": (bytes(range(256)) * 8, "NUL bytes"),
    "workbook.csv": (None, "Excel workbook"),
    "truncated.csv.gz": (None, "cannot be decompressed"),
    "html.csv": (b"<!DOCTYPE html><html><body>Not found</body></html>\n", "no coordinate"),
    "ragged.csv": (b"decimalLatitude,decimalLongitude\n1,2\n3,4,5,6\n", "line 3"),
}


def _corpus_bytes(name: str, data: bytes | None) -> bytes:
    if name == "workbook.csv":
        import io
        import zipfile

        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w") as zf:
            zf.writestr("[Content_Types].xml", "<Types/>")
            zf.writestr("xl/workbook.xml", "<workbook/>")
        return buf.getvalue()
    if name == "truncated.csv.gz":
        import gzip

        whole = gzip.compress(record_lines([(48.0, -30.0)] * 50).encode())
        return whole[: len(whole) // 2]
    return data


@pytest.mark.parametrize("name", sorted(_RECORD_CORPUS))
def test_broken_record_files(tmp_path, name):
    data, expect = _RECORD_CORPUS[name]
    path = tmp_path / name
    path.write_bytes(_corpus_bytes(name, data))
    kind, got = _attempt(lambda: read_occurrences(path))
    assert kind != "traceback", got
    if expect is None:
        assert kind == "ok" and len(got) == 0
        _count("record corpus", "accepted")
        return
    assert kind == "clean", f"accepted {name}"
    _clean_line(got, [name])
    assert expect in got, got
    assert "arbitrary text file with a very long first line an arbitrary" not in got
    _count("record corpus", "clean error")


def test_utf16_and_decimal_commas_read_like_the_plain_file(world, tmp_path):
    """UTF-16 without a byte-order mark, semicolons and decimal commas: the same records as the
    plain UTF-8 file (reference: pandas.read_csv of the plain file)."""
    plain = world / "occurrences.csv"
    ref = pd.read_csv(plain)
    text = plain.read_text(encoding="utf-8")
    lines = text.splitlines()
    out = [lines[0].replace(",", ";")]
    for line in lines[1:]:
        out.append(";".join(f.replace(".", ",") if f.replace(".", "", 1).lstrip("-").isdigit()
                            and "." in f else f for f in line.split(",")))
    odd = tmp_path / "records_utf16.csv"
    odd.write_bytes(("\n".join(out) + "\n").encode("utf-16-le"))
    got = read_occurrences(odd)
    np.testing.assert_allclose(got["lat"], ref["decimalLatitude"], rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["lon"], ref["decimalLongitude"], rtol=0, atol=1e-9)
    assert "UTF-16-LE" in got.attrs["read"] and "decimal comma" in got.attrs["read"]
    _count("record corpus", "accepted")


# ------------------------------------------------------------------- NetCDF and GeoTIFF corpus


def _climate_case(world: Path, key: tuple, path: Path, expect: str, part: str) -> None:
    data = mutated(_BASE, key, str(path))
    cfg_path = write_config(world, data, "corpus.toml")

    def check():
        cfg = load_config(cfg_path)
        files = cfg.check_files()
        # past the header check the file is read as the run reads it
        name = ".".join(map(str, key))
        inp = {"climate.baseline": cfg.climate.baseline,
               "climate.elevation": cfg.climate.elevation}.get(name, cfg.climate.models["alder"])
        opts = inp.reader_options(cfg.climate.aliases)
        return open_climate(files[name if name in files else "climate.models.alder"],
                            require=["tasmin", "tasmax", "pr"] if "elevation" not in name
                            else None, **opts)

    kind, got = _attempt(check)
    _fail_on_traceback(kind, got, part)
    if kind == "ok":
        _count(part, "silent acceptance")
        raise AssertionError(f"accepted {path.name}")
    _count(part, "clean error")
    _clean_line(got, [path.name])
    import re

    assert re.search(expect, got), got


_NC_NAMES = ["empty.nc", "truncated.nc", "corrupt_middle.nc", "text.nc", "header_only.nc",
             "no_lonlat.nc", "kelvin_as_c.nc", "all_nan.nc"]


@pytest.fixture(scope="module")
def nc_corpus(world):
    return netcdf_corpus(world / "broken_nc", world / "baseline.nc")


@pytest.mark.parametrize("role", [("climate", "baseline"), ("climate", "models", "alder")])
@pytest.mark.parametrize("name", _NC_NAMES)
def test_broken_netcdf(world, nc_corpus, name, role):
    path, expect = nc_corpus[name]
    _climate_case(world, role, path, expect, "netcdf corpus")


@pytest.fixture(scope="module")
def tif_corpus(world):
    return geotiff_corpus(world / "broken_tif")


@pytest.mark.parametrize("name", ["truncated.tif", "not_a.tif", "no_crs.tif", "utm.tif"])
def test_broken_geotiff_elevation(world, tif_corpus, name):
    path, expect = tif_corpus[name]
    _climate_case(world, ("climate", "elevation"), path, expect, "geotiff corpus")


def _field(name: str, value: float, units: str) -> xr.Dataset:
    """One 2-D field on the small grid, with nothing but its units."""
    grid = small_monthly()
    return xr.Dataset({name: (("lat", "lon"), np.full((grid.sizes["lat"], grid.sizes["lon"]),
                                                      value, "float32"), {"units": units})},
                      coords={"lat": grid["lat"], "lon": grid["lon"]})


def test_ice_in_percent_beyond_100_names_the_ice_file(tmp_path):
    _field("sftgif", 500.0, "%").to_netcdf(tmp_path / "ice_500.nc")
    with pytest.raises(TimesliceError) as info:
        open_climate(tmp_path / "ice_500.nc")
    _clean_line(str(info.value), ["ice_500.nc"])
    assert "500" in str(info.value) and "0..100 %" in str(info.value)
    _count("named", "clean error")


def test_all_missing_elevation_is_refused_where_it_is_read(tmp_path):
    _field("elevation", np.nan, "m").to_netcdf(tmp_path / "dem.nc")
    with pytest.raises(TimesliceError, match=r"dem\.nc: 'elevation' has no valid value"):
        open_climate(tmp_path / "dem.nc")
    _count("named", "clean error")


def test_required_variable_present_but_unusable_says_why(tmp_path):
    small_monthly().to_netcdf(tmp_path / "m.nc")
    with pytest.raises(TimesliceError) as info:
        open_climate(tmp_path / "m.nc", require=["tasmin", "tasmax", "pr"],
                     aliases={"tasmin": ["tasmax"]})
    msg = str(info.value)
    assert "'tasmax' is read as 'tasmin'" in msg and "is missing (found" not in msg, msg
    _count("named", "clean error")


def test_eleven_months_is_an_incomplete_year_not_a_period_outside_the_file(tmp_path):
    small_monthly().isel(time=slice(0, 11)).to_netcdf(tmp_path / "eleven.nc")
    for period in (None, "2041-2060"):
        with pytest.raises(TimesliceError) as info:
            open_climate(tmp_path / "eleven.nc", period=period)
        msg = str(info.value)
        assert "only 11 monthly steps" in msg and "missing months [12]" in msg, msg
        assert "outside the file's time range" not in msg
        _count("named", "clean error")


# --------------------------------------------------------------------------- writing faults


def test_full_disk_in_the_stage_cache_is_one_line_and_leaves_no_entry(tmp_path, monkeypatch):
    """netCDF-C reports a full disk as "NetCDF: HDF error" (a RuntimeError, not an OSError)."""
    from timeslice.cache import StageCache

    def full(self, path, *a, **k):
        Path(path).write_bytes(b"\x89HDF\r\n\x1a\n" + bytes(100))  # a partial file first
        raise RuntimeError("NetCDF: HDF error")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", full)
    cache = StageCache(tmp_path / ".cache")
    with pytest.raises(InputFileError) as info:
        cache.store("harmonise", "k", xr.Dataset({"a": ("x", [1.0])}))
    msg = str(info.value)
    _clean_line(msg, [".cache"])
    assert "stage cache" in msg and "free disk space" in msg, msg
    assert not list((tmp_path / ".cache").rglob("*.nc")) and not list(
        (tmp_path / ".cache").rglob("*.part"))
    _count("writing", "clean error")


def test_damaged_cache_entry_is_computed_again(tmp_path):
    from timeslice.cache import StageCache

    cache = StageCache(tmp_path)
    ds = xr.Dataset({"a": ("x", [1.0, 2.0])})
    cache.store("transfer", "k", ds)
    entry = tmp_path / "transfer" / "k.nc"
    entry.write_bytes(entry.read_bytes()[:40])
    with pytest.warns(Warning, match="could not be read"):
        again = cache.dataset("transfer", "k", lambda: ds)
    np.testing.assert_array_equal(again["a"].values, [1.0, 2.0])
    assert xr.open_dataset(entry)["a"].values.tolist() == [1.0, 2.0]
    _count("writing", "accepted")


def test_out_that_cannot_be_created(world, tmp_path):
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    cfg_path = write_config(world, _BASE, "out.toml")
    result = CliRunner().invoke(app, ["run", str(cfg_path), "--out", str(blocker / "sub")])
    assert result.exit_code == 2
    _clean_line(result.output.strip(), ["--out"])
    _count("writing", "clean error")


def test_export_into_a_read_only_run_folder(tmp_path, monkeypatch):
    run = tmp_path / "run"
    run.mkdir()
    (run / "series.nc").write_bytes(b"")
    monkeypatch.setattr(os, "access", lambda p, mode, **k: mode != os.W_OK)
    result = CliRunner().invoke(app, ["export", str(run)])
    assert result.exit_code == 2, result.output
    _clean_line(result.output.strip(), [str(run)])
    assert "not writable" in result.output and not (run / "geotiff").exists()
    _count("writing", "clean error")


def test_an_os_error_on_a_named_file_is_one_line(tmp_path, monkeypatch):
    """A read-only disk met where no stage expected it (here: making the export folder)."""
    import timeslice.commands as pipeline

    def read_only(out, *, fmt="geotiff", variables=None):
        raise OSError(errno.EROFS, "Read-only file system", str(Path(out) / "geotiff"))

    monkeypatch.setattr(pipeline, "run_export", read_only)
    result = CliRunner().invoke(app, ["export", str(tmp_path)])
    assert result.exit_code == 2
    _clean_line(result.output.strip(), ["geotiff"])
    assert "Read-only file system" in result.output
    _count("writing", "clean error")


def test_labels_reach_figures_as_plain_text(tmp_path):
    """matplotlib parses "$...$" as mathematics unless told not to; an unbalanced formula
    raises. A slice label is written as given."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from timeslice.report._output import save_figure

    label = r"6ka $x^$ {a}"
    fig, ax = plt.subplots()
    ax.set_title(label)
    ax.set_xticks([0, 1], [label, "b$"])
    with pytest.raises(ValueError):  # the reference behaviour this guards against
        fig.savefig(tmp_path / "raw.png")
    save_figure(fig, tmp_path / "plain.png", dpi=50)
    assert (tmp_path / "plain.png").stat().st_size > 0
    assert ax.title.get_text() == label and not ax.title.get_parse_math()
    plt.close(fig)
    _count("writing", "accepted")


# ---------------------------------------------------------------------------------- one run


def _whole(out: Path) -> None:
    """A finished folder: manifest complete, every listed file present, no temporary file."""
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["status"] == "complete"
    for rel in manifest["files"]:
        assert (out / rel).is_file() and (out / rel).stat().st_size > 0, rel
    assert not list(out.rglob("*.part"))


def test_a_run_with_hostile_but_valid_inputs_completes_correctly(world, tmp_path):
    """UTF-16 records with semicolons and decimal commas, a label with "$" maths and
    non-ASCII characters: the run finishes, reads every record (reference: pandas on the plain
    file) and names its map after the label's file stem."""
    ref = pd.read_csv(world / "occurrences.csv")
    plain = (world / "occurrences.csv").read_text(encoding="utf-8").splitlines()
    out_lines = [plain[0].replace(",", ";")]
    for line in plain[1:]:
        out_lines.append(";".join(f.replace(".", ",") if f.replace(".", "", 1).lstrip(
            "-").isdigit() and "." in f else f for f in line.split(",")))
    (world / "odd.csv").write_bytes(("\n".join(out_lines) + "\n").encode("utf-16-le"))
    data = demo_mapping(slices=("6ka",), maps=True)
    data["species"]["occurrences"] = "./odd.csv"
    data["slices"][0]["name"] = "6ka $\\frac$ Ω"
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["run", str(write_config(world, data, "odd.toml")),
                                      "--out", str(out)])
    assert result.exit_code == 0, result.output
    _whole(out)
    cleaning = pd.read_csv(out / "tables" / "cleaning.csv")
    note = cleaning.loc[cleaning["reason"] == "records read", "note"].iloc[0]
    assert f"{len(ref)} records" in note and "decimal comma" in note, note
    drops = dict(zip(cleaning["reason"], cleaning["n_dropped"]))
    assert drops["unparseable coordinates"] == 0 and drops["no coordinates"] == 0
    assert (out / "maps" / "suitability_alder_6ka_frac.png").is_file()  # file_stem of the label
    _count("runs", "accepted")


# ------------------------------------------------------------------------- slow: whole runs


def _run_cli(cfg: Path, out: Path, *args: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "timeslice.cli", *args, str(cfg),
                             "--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE)


_RUN_FAULTS = {
    # name: (mutation of the mapping, expected text in the one line, or None: must succeed)
    "ice in % up to 500": ("ice500", r"ice_500\.nc: ice cover"),
    "elevation all missing": ("dem_nan", r"dem_nan\.nc: 'elevation' has no valid value"),
    "eleven months": ("eleven", r"only 11 monthly steps"),
    "kelvin labelled degC": ("kelvin", r"6ka_K\.nc"),
    "label with maths, maps on": ("label", None),
}


def _run_fault_inputs(world: Path, which: str) -> dict:
    data = demo_mapping(slices=("21ka", "6ka"))
    src = world / "models" / "alder" / "6ka.nc"
    if which == "ice500":
        ice = xr.open_dataset(world / "ice_21ka.nc").load()
        ice["sftgif"] = ice["sftgif"] * 5.0  # % up to 500
        ice.to_netcdf(world / "ice_500.nc")
        data["slices"][0]["ice"] = "./ice_500.nc"
    elif which == "dem_nan":
        dem = xr.open_dataset(world / "dem.nc").load()
        for v in dem.data_vars:
            if dem[v].ndim == 2 and v.endswith("bnds") is False:
                dem[v] = dem[v] * np.nan
        dem.to_netcdf(world / "dem_nan.nc")
        data["climate"]["elevation"] = "./dem_nan.nc"
    elif which == "eleven":
        xr.open_dataset(src).load().isel(time=slice(0, 11)).to_netcdf(world / "6ka_11.nc")
        data["slices"][1]["file"] = "./6ka_11.nc"
    elif which == "kelvin":
        ds = xr.open_dataset(src).load()
        for v in ("tasmin", "tasmax"):
            ds[v].attrs["units"] = "degC"  # the values are in K
        ds.to_netcdf(world / "6ka_K.nc")
        data["slices"][1]["file"] = "./6ka_K.nc"
    elif which == "label":
        data["slices"][1]["name"] = "6ka $x^$ {a}"
        data["output"]["maps"] = True
    return data


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(_RUN_FAULTS))
def test_whole_run_faults(world, tmp_path, name):
    which, expect = _RUN_FAULTS[name]
    cfg = write_config(world, _run_fault_inputs(world, which), f"{which}.toml")
    out = tmp_path / "out"
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    if expect is None:
        assert result.exit_code == 0, result.output
        _whole(out)
        _count("runs", "accepted")
        return
    assert result.exit_code == 2, result.output
    line = result.output.strip().splitlines()[-1]
    _clean_line(line, [Path(p).name for p in ("ice_500.nc", "dem_nan.nc", "6ka_11.nc",
                                              "6ka_K.nc")])
    import re

    assert re.search(expect, line), line
    # nothing under a final name: the manifest says the run did not finish, no temp files
    assert not (out / "series.nc").exists()
    assert not list(out.rglob("*.part"))
    _count("runs", "clean error")


@pytest.mark.slow
def test_killed_then_resumed_run_gives_byte_identical_files(world, tmp_path):
    """Two models (so ensemble.nc is written), batch = 1; SIGKILL once some slices are in the
    cache, resume, compare every data file byte for byte with an uninterrupted run."""
    data = demo_mapping(models=("alder", "birch"), slices=("21ka", "6ka",
                                                           "low-forcing/2081-2100"))
    data["transfer"]["batch"] = 1
    cfg = write_config(world, data, "resume.toml")
    ref = _run_cli(cfg, tmp_path / "ref", "run")
    assert ref.wait(timeout=600) == 0, ref.stderr.read().decode()
    out = tmp_path / "killed"
    proc = _run_cli(cfg, out, "run")
    if not kill_once_cached(proc, out, "transfer", entries=2, timeout=600):
        pytest.skip("the run finished before it could be killed")
    again = _run_cli(cfg, out, "run")
    assert again.wait(timeout=600) == 0, again.stderr.read().decode()
    for name in ("series.nc", "ensemble.nc"):
        a, b = (tmp_path / "ref" / name).read_bytes(), (out / name).read_bytes()
        assert a == b, f"{name} differs after a resume"
    _whole(out)
    _count("runs", "accepted")


@pytest.mark.parametrize("text", ['{"inputs": {}, "config": ', '{"inputs": [], "config": {}}',
                                  '{"inputs": {}, "config": []}', "[]", "\x00\x01"])
def test_damaged_manifest_is_refused_in_one_line(tmp_path, text):
    (tmp_path / "manifest.json").write_text(text, encoding="utf-8")
    result = CliRunner().invoke(app, ["rerun", str(tmp_path / "manifest.json")])
    assert result.exit_code == 2, result.output
    _clean_line(result.output.strip(), ["manifest.json"])
    _count("writing", "clean error")


# ------------------------------------------------------------- slow: whole runs, hypothesis

#: Keys a run reads after the config check, with values a user might write: plausible, odd or
#: wrong in ways only the data can tell.
_RUN_VALUES = {
    ("niche", "buffer_km"): st.sampled_from([1.0, 50.0, 5000.0]),
    ("niche", "n_background"): st.sampled_from([1, 50, 100000]),
    ("niche", "min_records"): st.sampled_from([1, 400, 100000]),
    ("niche", "cv_folds"): st.sampled_from([2, 30, 500]),
    ("niche", "cv_block_km"): st.sampled_from([1.0, 2000.0]),
    ("niche", "thin"): st.sampled_from(["none", 5.0, 500.0]),
    ("niche", "threshold"): st.sampled_from(["p10", "mtp", "max_sss"]),
    ("niche", "calibration"): st.sampled_from(["buffer", "hull_buffer"]),
    ("niche", "screen_max_r"): st.sampled_from([0.01, 1.0]),
    ("niche", "uncertainty_max_m"): st.sampled_from([1.0, 1e7]),
    ("niche", "years"): st.sampled_from([[1000, 1100], [1900, 2100]]),
    ("transfer", "clamp"): st.booleans(),
    ("series", "graph_neighbours"): st.sampled_from([8, 16]),
    ("series", "movement_through"): st.sampled_from(["land", "suitable", "any"]),
    ("series", "dispersal_rate"): st.sampled_from(["0 km/kyr", "1e9 km/kyr", "5 m/yr"]),
    ("slices", 0, "sea_level"): st.sampled_from([-5000.0, 0.0, 300.0]),
    ("climate", "ice_threshold"): st.sampled_from([0.0, 1.0]),
    ("climate", "pr_floor"): st.sampled_from([0.0, 1000.0]),
    ("climate", "lapse_rate"): st.sampled_from([0.0, 0.5]),
}


@pytest.mark.slow
@settings(max_examples=12, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(changes=st.lists(st.sampled_from(sorted(_RUN_VALUES, key=str)), min_size=1, max_size=3,
                        unique=True).flatmap(
    lambda keys: st.tuples(*[st.tuples(st.just(k), _RUN_VALUES[k]) for k in keys])))
def test_whole_runs_exit_0_with_a_whole_folder_or_2_with_one_line(world, tmp_path_factory,
                                                                  changes):
    data = demo_mapping(slices=("21ka", "6ka"))
    for path, value in changes:
        data = mutated(data, path, value)
    cfg = write_config(world, data, "hyp_run.toml")
    out = tmp_path_factory.mktemp("hyp_run")
    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out)])
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        _count("runs", "traceback")
        raise AssertionError(f"traceback for {changes}") from result.exception
    if result.exit_code == 0:
        _whole(out)
        _count("runs", "accepted")
        return
    assert result.exit_code == 2, result.output
    line = result.output.strip().splitlines()[-1]
    _clean_line(line, ["hyp_run.toml", str(world)])
    assert not list(out.rglob("*.part"))
    manifest = out / "manifest.json"
    if manifest.is_file():
        assert json.loads(manifest.read_text())["status"] == "incomplete"
    _count("runs", "clean error")
