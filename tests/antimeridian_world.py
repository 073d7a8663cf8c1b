"""An invented study across the 180° meridian, written as files the way they ship.

Two invented landmasses face each other over a shallow strait that lies on the 180° meridian;
at 21 ka BP (sea level -120 m) the shelf between them is dry and joins them. An invented
cold-adapted plant lives where the warmest quarter is cool. Every number here is made up; the
shapes are chosen so that a misplaced longitude shows:

* the observed baseline is on a 0.5° grid written with longitudes 165.25 ... 194.75 (the
  0..360 convention of many regional files); the elevation on a 0.25° grid written with
  longitudes wrapped to [-180, 180) and sorted (the region split in two, as readers return it);
* the two invented climate models are global 2.5° grids in 0..360, in K and kg m-2 s-1, noleap,
  with a warming that varies with longitude, ``3 + 2 cos(lon - 190°)`` K in 2090 for "tundra"
  (0.6 of it for "taiga"), so a change field shifted in longitude would be caught;
* the records are written with longitudes in [-180, 180), on both sides of 180°.

The test reads the known answer from :func:`warming_2090` and :func:`true_elevation`.
"""

from __future__ import annotations

from pathlib import Path

import cftime
import numpy as np
import xarray as xr

#: The study region: 165E .. 165W (written 165 .. -165 in the config), 56N .. 72N.
WEST, EAST, SOUTH, NORTH, RES = 165.0, 195.0, 56.0, 72.0, 0.5
MODEL_RES = 2.5
SEA_LEVEL_21KA = -120.0
NOLEAP_DAYS = np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float)


def warming_2090(lon, lat) -> np.ndarray:
    """Invented 2090 minus model-baseline temperature change, K (same in every month)."""
    lon = np.asarray(lon, dtype=float)
    return 3.0 + 2.0 * np.cos(np.deg2rad(lon - 190.0)) + 0.0 * np.asarray(lat, dtype=float)


def true_elevation(lon, lat) -> np.ndarray:
    """Invented elevation (m, relative to present sea level) at any (lon, lat), lon in any turn."""
    lon = np.mod(np.asarray(lon, dtype=float), 360.0)
    lat = np.asarray(lat, dtype=float)
    shelf = np.where(lat > 58.5, -45.0, -45.0 - 900.0 * (58.5 - lat))
    west = 1700.0 * np.exp(-(((lon - 172.0) / 3.5) ** 2 + ((lat - 65.0) / 4.0) ** 2))
    east = 1400.0 * np.exp(-(((lon - 189.5) / 3.5) ** 2 + ((lat - 65.5) / 4.0) ** 2))
    return shelf + 1.25 * (west + east)


def _temperature(lon, lat, z) -> np.ndarray:
    """Invented monthly mean temperature, degC, shape (12, ...)."""
    month = np.arange(1, 13).reshape((12,) + (1,) * np.ndim(lat))
    season = 14.0 * np.sin(2 * np.pi * (month - 4.5) / 12)
    # linear in latitude over the region, held at its 30N value further south (plausible
    # everywhere on the models' global grids)
    mean = 4.0 - 0.7 * (np.clip(lat, 30.0, 90.0) - 60.0) - 0.0065 * np.maximum(z, 0.0)
    return mean + season + 0.0 * np.asarray(lon)


def _precipitation(lon, lat, z) -> np.ndarray:
    month = np.arange(1, 13).reshape((12,) + (1,) * np.ndim(lat))
    return (45.0 + 25.0 * np.cos(2 * np.pi * (month - 8) / 12)
            + 0.02 * np.maximum(z, 0.0) + 0.0 * np.asarray(lon))


def _cf_coords(lon, lat, time_units="days since 2000-01-01", calendar="standard"):
    starts = [cftime.datetime(2000, m, 1, calendar=calendar) for m in range(1, 13)]
    ends = [cftime.datetime(2000 + (m == 12), m % 12 + 1, 1, calendar=calendar)
            for m in range(1, 13)]
    s = np.asarray(cftime.date2num(starts, time_units, calendar=calendar))
    e = np.asarray(cftime.date2num(ends, time_units, calendar=calendar))
    return {
        "time": ("time", 0.5 * (s + e), {"standard_name": "time", "units": time_units,
                                         "calendar": calendar, "axis": "T"}),
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north", "axis": "Y"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east", "axis": "X"}),
    }


def _write(ds: xr.Dataset, path: Path) -> Path:
    enc = {v: {"_FillValue": np.float32(1e20), "dtype": "float32"} for v in ds.data_vars}
    for c in ds.coords:
        enc[c] = {"_FillValue": None}
    ds.to_netcdf(path, encoding=enc)
    return path


def _baseline(path: Path) -> Path:
    lon = np.arange(WEST + RES / 2, EAST, RES)  # 165.25 .. 194.75: 0..360 convention
    lat = np.arange(SOUTH + RES / 2, NORTH, RES)
    LAT, LON = np.meshgrid(lat, lon, indexing="ij")
    z = true_elevation(LON, LAT)
    tas = _temperature(LON, LAT, z)
    land = (z > 0)[None]
    dims = ("time", "lat", "lon")
    ds = xr.Dataset(
        {
            "tasmin": (dims, np.where(land, tas - 4.0, np.nan), {"units": "degC",
                                                                 "standard_name": "air_temperature"}),
            "tasmax": (dims, np.where(land, tas + 4.0, np.nan), {"units": "degC",
                                                                 "standard_name": "air_temperature"}),
            "pr": (dims, np.where(land, _precipitation(LON, LAT, z), np.nan),
                   {"units": "mm/month", "long_name": "monthly precipitation total"}),
        },
        coords=_cf_coords(lon, lat),
        attrs={"title": "invented observed climatology across 180 degrees", "Conventions": "CF-1.8"},
    )
    return _write(ds, path)


def _elevation(path: Path) -> Path:
    lon = np.arange(WEST - 1 + 0.125, EAST + 1, 0.25)  # a margin beyond the region
    lat = np.arange(SOUTH - 1 + 0.125, NORTH + 1, 0.25)
    wrapped = ((lon + 180.0) % 360.0) - 180.0
    order = np.argsort(wrapped)  # split at 180, as a reader of a [-180, 180) file gives it
    LAT, LON = np.meshgrid(lat, lon[order], indexing="ij")
    ds = xr.Dataset(
        {"elevation": (("lat", "lon"), true_elevation(LON, LAT),
                       {"units": "m", "standard_name": "height_above_mean_sea_level"})},
        coords={k: v for k, v in _cf_coords(wrapped[order], lat).items() if k != "time"},
    )
    return _write(ds, path)


def _model(path: Path, *, offset_c: float, pr_factor: float, warming: float, model_bias: float):
    lon = np.arange(0.0, 360.0, MODEL_RES)
    lat = np.arange(-90 + MODEL_RES / 2, 90, MODEL_RES)
    LAT, LON = np.meshgrid(lat, lon, indexing="ij")
    z = np.zeros_like(LAT)  # a model's own smooth orography: flat in this invented world
    tas = _temperature(LON, LAT, z) + model_bias + offset_c
    tas = tas + warming * warming_2090(LON, LAT)
    flux = _precipitation(LON, LAT, z) * pr_factor / (NOLEAP_DAYS[:, None, None] * 86400.0)
    dims = ("time", "lat", "lon")
    ds = xr.Dataset(
        {
            "tasmin": (dims, tas - 5.0 + 273.15, {"units": "K", "standard_name": "air_temperature"}),
            "tasmax": (dims, tas + 5.0 + 273.15, {"units": "K", "standard_name": "air_temperature"}),
            "pr": (dims, flux, {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"}),
        },
        coords=_cf_coords(lon, lat, calendar="noleap"),
        attrs={"title": "invented global model climatology", "Conventions": "CF-1.8"},
    )
    return _write(ds, path)


def _records(path: Path, *, n: int = 160, seed: int = 11) -> Path:
    """Presence records of the invented plant: where the warmest quarter is 4..11 degC."""
    rng = np.random.default_rng(seed)
    lon = np.arange(WEST + RES / 2, EAST, RES)
    lat = np.arange(SOUTH + RES / 2, NORTH, RES)
    LAT, LON = np.meshgrid(lat, lon, indexing="ij")
    z = true_elevation(LON, LAT)
    warm = _temperature(LON, LAT, z)[5:8].mean(axis=0)  # Jun-Aug
    ok = (z > 0) & (warm > 4.0) & (warm < 11.0)
    idx = rng.choice(np.flatnonzero(ok), size=n, replace=False)
    plon = LON.ravel()[idx] + rng.uniform(-0.2, 0.2, n)
    plat = LAT.ravel()[idx] + rng.uniform(-0.2, 0.2, n)
    plon = ((plon + 180.0) % 360.0) - 180.0  # as records are published: [-180, 180)
    lines = ["species,decimalLongitude,decimalLatitude,year"]
    lines += [f"Borealis inventa,{x:.5f},{y:.5f},2001" for x, y in zip(plon, plat)]
    path.write_text("\n".join(lines) + "\n")
    return path


def write_world(folder: Path, *, projection: str = "polar") -> Path:
    """Write the files and a config; return the config path."""
    folder.mkdir(parents=True, exist_ok=True)
    _baseline(folder / "obs_baseline.nc")
    _elevation(folder / "elevation.nc")
    # "taiga" warms by 0.6 of "tundra"'s pattern and is colder at 21 ka: the models disagree
    for name, bias, scale, lgm in (("tundra", 1.0, 1.0, -8.0), ("taiga", -1.5, 0.6, -10.0)):
        (folder / name).mkdir(exist_ok=True)
        _model(folder / name / "historical.nc", offset_c=0.0, pr_factor=1.0, warming=0.0,
               model_bias=bias)
        _model(folder / name / "ssp_2090.nc", offset_c=0.0, pr_factor=1.1, warming=scale,
               model_bias=bias)
        _model(folder / name / "lgm.nc", offset_c=lgm, pr_factor=0.7, warming=0.0,
               model_bias=bias)
    _records(folder / "records.csv")
    cfg = folder / "beringia.toml"
    cfg.write_text(f"""# invented study across the 180 degree meridian
[run]
name = "Borealis inventa across 180 (invented)"
seed = 7

[grid]
lon_min = 165
lon_max = -165
lat_min = {SOUTH}
lat_max = {NORTH}
resolution = {RES}

[climate]
baseline = "obs_baseline.nc"
elevation = "elevation.nc"
baseline_period = "1991-2020"
baseline_year = 2005

[climate.models]
tundra = "tundra/historical.nc"
taiga = "taiga/historical.nc"

[[slices]]
name = "21ka"
file = "{{model}}/lgm.nc"
scenario = "past"
age_bp = 21000
sea_level = {SEA_LEVEL_21KA}

[[slices]]
name = "2090"
file = "{{model}}/ssp_2090.nc"
scenario = "warm"
period = "2081-2100"
year = 2090

[species]
name = "Borealis inventa"
occurrences = "records.csv"

[niche]
algorithm = "ellipsoid"
variables = ["bio10", "bio12"]
buffer_km = 600.0
n_background = 1500
cv_folds = 3
cv_block_km = 150.0

[series]
dispersal_rate = "20 km/kyr"

[output]
maps = true
geotiff = true
report = false
projection = "{projection}"
""")
    return cfg
