"""Broken inputs for the fault suite (tests/test_faults.py): a reduced demo config as a mapping,
a TOML writer for it, and builders of damaged NetCDF, GeoTIFF and record files.

The demo is the invented scenario of :mod:`timeslice.demo`; nothing here is real data.
"""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from timeslice.demo_config import render_demo_config

# ------------------------------------------------------------------------------------ config


def one_model_demo(folder: Path, *, resolution: float = 0.5) -> Path:
    """The invented demo generated in `folder` at `resolution` degrees, its config reduced to
    one invented climate model (fast); returns the path of that config."""
    from timeslice.demo import generate

    generate(folder, resolution=resolution)
    text = "\n".join(line for line in render_demo_config(".").splitlines()
                     if not line.startswith(("birch =", "cedar =")))
    path = folder / "demo.toml"
    path.write_text(text)
    return path



def demo_mapping(*, models: tuple[str, ...] = ("alder",), slices: tuple[str, ...] | None = None,
                 maps: bool = False, report: bool = True) -> dict[str, Any]:
    """The demo config (paths relative to its data folder) reduced to `models` and the slice
    entries named in `slices` (None keeps all), as a mapping."""
    data = tomllib.loads(render_demo_config("."))
    data["climate"]["models"] = {k: v for k, v in data["climate"]["models"].items() if k in models}
    if slices is not None:
        data["slices"] = [s for s in data["slices"] if f"{s['scenario']}/{s['name']}" in slices
                          or s["name"] in slices]
        kept = {f"{s['age_bp'] / 1000:g} ka BP" if "age_bp" in s else s.get("period")
                for s in data["slices"]} | {data["climate"]["baseline_period"]}
        data["series"]["refugium_window"] = [w for w in data["series"]["refugium_window"]
                                             if w in kept]
        hyp = {k: [w for w in v if w in kept] for k, v in data["series"].get("hypotheses", {}).items()}
        data["series"]["hypotheses"] = {k: v for k, v in hyp.items() if v}
    data["output"]["maps"] = maps
    data["output"]["report"] = report
    return data


def _toml_string(text: str) -> str:
    """A TOML basic string (TOML 1.0 section "String"): quote, backslash and control characters
    escaped, everything else literal (the file is UTF-8)."""
    out = ['"']
    for ch in text:
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    out.append('"')
    return "".join(out)


def _toml_key(key: str) -> str:
    bare = key and all(c.isascii() and (c.isalnum() or c in "-_") for c in key)
    return key if bare else _toml_string(key)


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_key(str(k))} = {_toml_value(v)}"
                               for k, v in value.items()) + "}"
    raise TypeError(f"no TOML form for {type(value).__name__}")


def to_toml(data: dict[str, Any]) -> str:
    """TOML text of a config mapping: top-level tables as sections, ``slices`` as an array of
    tables, nested tables inline (round-trips through :mod:`tomllib`)."""
    lines: list[str] = []
    for key, value in data.items():
        if not isinstance(value, (dict, list)) or (isinstance(value, list) and not all(
                isinstance(v, dict) for v in value)) or value == []:
            lines.append(f"{_toml_key(key)} = {_toml_value(value)}")
    for key, value in data.items():
        if isinstance(value, dict):
            lines.append(f"\n[{_toml_key(key)}]")
            for k, v in value.items():
                lines.append(f"{_toml_key(str(k))} = {_toml_value(v)}")
        elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            for entry in value:
                lines.append(f"\n[[{_toml_key(key)}]]")
                for k, v in entry.items():
                    lines.append(f"{_toml_key(str(k))} = {_toml_value(v)}")
    return "\n".join(lines) + "\n"


def write_config(folder: Path, data: dict[str, Any], name: str = "run.toml") -> Path:
    """Write `data` as TOML into `folder` (the demo data folder) and return the path."""
    path = Path(folder) / name
    path.write_text(to_toml(data), encoding="utf-8")
    return path


def mutated(data: dict[str, Any], path: tuple, value: Any) -> dict[str, Any]:
    """A deep copy of `data` with the key at `path` (section, [index,] key) set to `value`,
    or removed when `value` is :data:`DELETE`."""
    out = copy.deepcopy(data)
    node = out
    for part in path[:-1]:
        node = node[part]
    if value is DELETE:
        node.pop(path[-1], None)
    else:
        node[path[-1]] = value
    return out


class _Delete:
    def __repr__(self) -> str:
        return "DELETE"


DELETE = _Delete()

# ------------------------------------------------------------------------------- NetCDF corpus


def small_monthly(*, lat=(40.25, 54.75), lon=(-39.75, -20.25), n=(6, 8), kelvin=False) -> xr.Dataset:
    """A CF 12-step climatology of tasmin, tasmax (degC or K) and pr (mm month-1) on a regular
    grid, with values in the plausible range."""
    lats = np.linspace(*lat, n[0])
    lons = np.linspace(*lon, n[1])
    month = np.arange(1, 13)
    season = 8 * np.sin(2 * np.pi * (month - 4) / 12)[:, None, None]
    tmin = np.broadcast_to(2.0 + season, (12, n[0], n[1])).astype("float32")
    tmax = tmin + 7.0
    off = 273.15 if kelvin else 0.0
    unit = "K" if kelvin else "degC"
    time = xr.DataArray(np.arange(12) * 30.0 + 15.0, dims="time",
                        attrs={"units": "days since 2001-01-01", "calendar": "360_day",
                               "standard_name": "time"})
    dims = ("time", "lat", "lon")
    return xr.Dataset(
        {"tasmin": (dims, tmin + off, {"units": unit, "standard_name": "air_temperature",
                                       "cell_methods": "time: minimum"}),
         "tasmax": (dims, tmax + off, {"units": unit, "standard_name": "air_temperature",
                                       "cell_methods": "time: maximum"}),
         "pr": (dims, np.full((12, n[0], n[1]), 80.0, "float32"), {"units": "mm month-1"})},
        coords={"time": time,
                "lat": ("lat", lats, {"units": "degrees_north", "standard_name": "latitude"}),
                "lon": ("lon", lons, {"units": "degrees_east", "standard_name": "longitude"})},
    )


def netcdf_corpus(folder: Path, like: Path) -> dict[str, tuple[Path, str]]:
    """Damaged or unusable NetCDF files, built from the good file `like`.

    Returns name -> (path, what the refusal must say: a regular expression).
    """
    folder.mkdir(parents=True, exist_ok=True)
    good = like.read_bytes()
    out: dict[str, tuple[Path, str]] = {}

    def put(name: str, data: bytes, expect: str) -> None:
        p = folder / name
        p.write_bytes(data)
        out[name] = (p, expect)

    put("empty.nc", b"", r"empty|cannot be read|not a|damaged")
    put("truncated.nc", good[: len(good) // 3], r"damaged|incomplete|cannot be read")
    mid = len(good) // 2
    put("corrupt_middle.nc", good[:mid] + bytes(4096) + good[mid + 4096:],
        r"damaged|incomplete|cannot be read")
    put("text.nc", b"lat,lon,tas\n1,2,3\n", r"cannot be read|not a|NetCDF")
    put("header_only.nc", good[:512], r"damaged|incomplete|cannot be read")
    ds = small_monthly()
    ds.drop_vars(["lat", "lon"]).rename({"lat": "y", "lon": "x"}).to_netcdf(folder / "no_lonlat.nc")
    out["no_lonlat.nc"] = (folder / "no_lonlat.nc", r"latitude/longitude")
    small_monthly(kelvin=True).assign(
        tasmin=lambda d: d["tasmin"].assign_attrs(units="degC"),
        tasmax=lambda d: d["tasmax"].assign_attrs(units="degC")).to_netcdf(folder / "kelvin_as_c.nc")
    out["kelvin_as_c.nc"] = (folder / "kelvin_as_c.nc", r"Kelvin|K\b|273|implausible")
    nan = small_monthly()
    for v in nan.data_vars:
        nan[v] = nan[v] * np.nan
    nan.to_netcdf(folder / "all_nan.nc")
    out["all_nan.nc"] = (folder / "all_nan.nc", r"no valid|all missing|NaN|no data|missing")
    return out


# ------------------------------------------------------------------------------ GeoTIFF corpus


def geotiff_corpus(folder: Path) -> dict[str, tuple[Path, str]]:
    """Damaged or unusable GeoTIFF elevation files. Returns name -> (path, expected regex)."""
    import rasterio
    from rasterio.transform import from_origin

    folder.mkdir(parents=True, exist_ok=True)
    out: dict[str, tuple[Path, str]] = {}
    z = np.linspace(0, 900, 30 * 40, dtype="float32").reshape(30, 40)
    prof = dict(driver="GTiff", height=30, width=40, count=1, dtype="float32",
                transform=from_origin(-40.0, 55.0, 0.5, 0.5))
    good = folder / "good.tif"
    with rasterio.open(good, "w", crs="EPSG:4326", **prof) as dst:
        dst.write(z, 1)
    data = good.read_bytes()
    (folder / "truncated.tif").write_bytes(data[: len(data) // 2])
    out["truncated.tif"] = (folder / "truncated.tif", r"cannot be read|damaged|incomplete")
    (folder / "not_a.tif").write_bytes(b"hello, this is not an image\n" * 4)
    out["not_a.tif"] = (folder / "not_a.tif", r"cannot be read|not a|GeoTIFF|raster")
    with rasterio.open(folder / "no_crs.tif", "w", **prof) as dst:
        dst.write(z, 1)
    out["no_crs.tif"] = (folder / "no_crs.tif", r"CRS|coordinate reference|crs")
    projected = dict(prof, transform=from_origin(500000.0, 5500000.0, 1000.0, 1000.0))
    with rasterio.open(folder / "utm.tif", "w", crs="EPSG:32633", **projected) as dst:
        dst.write(z, 1)
    out["utm.tif"] = (folder / "utm.tif", r"projected|EPSG:32633|UTM|lat-lon|latitude")
    return out


# ------------------------------------------------------------------------------- record files

#: Header of the demo's occurrence file (Darwin Core terms).
RECORD_HEADER = ("occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude",
                 "coordinateUncertaintyInMeters", "occurrenceStatus", "basisOfRecord", "year")


def record_lines(records: list[tuple[float, float]], *, sep: str = ",",
                 decimal: str = ".") -> str:
    """A record table of (lat, lon) pairs in the demo's columns."""
    rows = [sep.join(RECORD_HEADER)]
    for i, (lat, lon) in enumerate(records, start=1):
        la, lo = f"{lat:.5f}".replace(".", decimal), f"{lon:.5f}".replace(".", decimal)
        rows.append(sep.join([f"rec{i}", "Nivalia demonstrata", la, lo, "50", "present",
                              "HumanObservation", "2005"]))
    return "\n".join(rows) + "\n"


def kill_once_cached(proc, out: Path, stage: str, entries: int, timeout: float) -> bool:
    """SIGKILL the run `proc` once `entries` entries of `stage` are in ``out/.cache``.

    Returns False when the run finished before it could be killed (the caller skips), True
    after the kill (the process has exited).
    """
    import signal
    import time

    deadline = time.time() + timeout
    folder = out / ".cache" / stage
    while time.time() < deadline:
        done = list(folder.glob("*.nc")) if folder.is_dir() else []
        if len(done) >= entries or proc.poll() is not None:
            break
        time.sleep(0.05)
    if proc.poll() is not None:
        return False
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=30)
    return True
