"""Benchmark of the harmonise stage (run by hand; not a test).

An invented 0.5-degree global model slice and its model baseline (K, kg m-2 s-1, noleap,
longitudes 0..360) are downscaled onto an invented 10-arc-minute (2160 x 1080) fine baseline:
read + regrid + delta downscaling + land mask + bioclimatic variables + write.

Printed: wall time and peak resident memory of the full run, and of an I/O floor measured in
the same run (reading the same inputs and writing an output of the same size, nothing else),
and their ratio. Goal: within 3x of the floor, peak memory under 2 GB.

    python bench/harmonise.py [--workdir DIR] [--keep]
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def _make_inputs(folder: Path) -> None:
    import cftime
    import xarray as xr

    rng = np.random.default_rng(7)
    months = np.arange(1, 13)
    # coarse global model grid, 0.5 degree, longitudes 0..360 (raw model convention)
    clat = -89.75 + 0.5 * np.arange(360)
    clon = 0.25 + 0.5 * np.arange(720)
    season = np.sin(2 * np.pi * (months - 4) / 12)[:, None, None]
    lat_term = 30 * np.cos(np.deg2rad(clat))[None, :, None]
    times = [cftime.DatetimeNoLeap(2001, m, 15) for m in months]
    for name, dt, wet in (("model_baseline", 0.0, 1.0), ("model_slice", 3.0, 0.9)):
        tmin = (273.15 - 20 + lat_term + 10 * season * np.sign(clat)[None, :, None] + dt
                + rng.normal(0, 0.5, (12, 360, 720))).astype("f4")
        tmax = (tmin + 9).astype("f4")
        pr = (wet * rng.gamma(2.0, 1.5, (12, 360, 720)) / 86400).astype("f4")
        dims = ("time", "lat", "lon")
        ds = xr.Dataset(
            {"tasmin": (dims, tmin, {"units": "K", "standard_name": "air_temperature",
                                     "cell_methods": "time: minimum"}),
             "tasmax": (dims, tmax, {"units": "K", "standard_name": "air_temperature",
                                     "cell_methods": "time: maximum"}),
             "pr": (dims, pr, {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"})},
            coords={"time": ("time", times),
                    "lat": ("lat", clat, {"units": "degrees_north"}),
                    "lon": ("lon", clon, {"units": "degrees_east"})},
        )
        ds["time"].encoding.update(units="days since 2000-01-01", calendar="noleap")
        enc = {v: {"zlib": True, "complevel": 1} for v in ("tasmin", "tasmax", "pr")}
        ds.to_netcdf(folder / f"{name}.nc", encoding=enc)
    # fine baseline 10 arc-minutes, invented continents from smooth noise
    flat = -90 + (np.arange(1080) + 0.5) / 6
    flon = -180 + (np.arange(2160) + 0.5) / 6
    LON, LAT = np.meshgrid(np.deg2rad(flon), np.deg2rad(flat))
    z = (2000 * np.sin(3 * LON) * np.cos(2 * LAT) + 1500 * np.cos(5 * LON + 1) * np.sin(3 * LAT)
         + 800 * np.sin(7 * LAT + 2 * LON) - 600).astype("f4")
    land = z > 0
    dems = xr.Dataset(
        {"elevation": (("lat", "lon"), z, {"units": "m", "standard_name": "height_above_mean_sea_level"})},
        coords={"lat": ("lat", flat, {"units": "degrees_north"}),
                "lon": ("lon", flon, {"units": "degrees_east"})},
    )
    dems.to_netcdf(folder / "dem.nc", encoding={"elevation": {"zlib": True, "complevel": 1}})
    base_t = (-20 + 30 * np.cos(LAT) - 0.0065 * np.maximum(z, 0)).astype("f4")
    ftime = [cftime.DatetimeGregorian(1995, m, 15) for m in months]
    fseason = np.sin(2 * np.pi * (months - 4) / 12)[:, None, None] * np.sign(flat)[None, :, None]
    tmin = np.where(land[None], base_t[None] + 10 * fseason, np.nan).astype("f4")
    tmax = (tmin + 10).astype("f4")
    pr = np.where(land[None], rng.gamma(2.0, 40.0, (12, 1080, 2160)), np.nan).astype("f4")
    dims = ("time", "lat", "lon")
    fb = xr.Dataset(
        {"tasmin": (dims, tmin, {"units": "degC", "standard_name": "air_temperature",
                                 "cell_methods": "time: minimum"}),
         "tasmax": (dims, tmax, {"units": "degC", "standard_name": "air_temperature",
                                 "cell_methods": "time: maximum"}),
         "pr": (dims, pr, {"units": "mm month-1"})},
        coords={"time": ("time", ftime),
                "lat": ("lat", flat, {"units": "degrees_north"}),
                "lon": ("lon", flon, {"units": "degrees_east"})},
    )
    fb["time"].encoding.update(units="days since 1990-01-01", calendar="standard")
    enc = {v: {"zlib": True, "complevel": 1, "chunksizes": (1, 1080, 2160)}
           for v in ("tasmin", "tasmax", "pr")}
    fb.to_netcdf(folder / "fine_baseline.nc", encoding=enc)


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _cpu_s() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def _phase_floor(folder: Path) -> dict:
    """Read every input fully and write an output of the prepared-slice size, nothing else."""
    import netCDF4
    import xarray as xr

    netCDF4.set_chunk_cache(4 * 2**20)
    t0 = time.perf_counter()
    for name in ("model_baseline", "model_slice", "fine_baseline", "dem"):
        with xr.open_dataset(folder / f"{name}.nc") as ds:
            for v in ds.data_vars:
                ds[v].load()
    with xr.open_dataset(folder / "dem.nc") as dem:
        coords = {"lat": dem["lat"].values, "lon": dem["lon"].values}
    out = xr.Dataset(coords=coords)
    # same size and similar content (smooth fields, NaN at sea) as the prepared slice, so
    # compression costs the same
    with xr.open_dataset(folder / "fine_baseline.nc") as fb:
        months = [fb["tasmin"].isel(time=i % 12).values for i in range(12)]
    for i in range(1, 20):
        out[f"bio{i}"] = (("lat", "lon"), months[i % 12] + np.float32(i))
    land = np.isfinite(months[0]).astype("i1")
    for v in ("land", "ice", "exposed_shelf", "filled"):
        out[v] = (("lat", "lon"), land)
    with xr.open_dataset(folder / "dem.nc") as dem:
        out["elevation"] = (("lat", "lon"), dem["elevation"].values)
    enc = {v: {"zlib": True, "complevel": 4} for v in out.data_vars}
    out.to_netcdf(folder / "floor_out.nc", encoding=enc)
    return {"seconds": time.perf_counter() - t0, "peak_mb": _peak_mb(), "cpu_s": _cpu_s()}


def _phase_full(folder: Path) -> dict:
    from timeslice.harmonise import prepare_slice, write_prepared
    from timeslice.readers import open_climate

    t0 = time.perf_counter()
    fb = open_climate(folder / "fine_baseline.nc")
    dem = open_climate(folder / "dem.nc")
    mb = open_climate(folder / "model_baseline.nc")
    ms = open_climate(folder / "model_slice.nc")
    t_read = time.perf_counter() - t0
    out = prepare_slice(fine_baseline=fb, elevation=dem, model_slice=ms, model_baseline=mb,
                        label="bench", year=2050.0, period="2041-2060", model="bench",
                        scenario="bench")
    t_prep = time.perf_counter() - t0 - t_read
    write_prepared(out, folder / "full_out.nc")
    return {"seconds": time.perf_counter() - t0, "read_s": t_read, "prepare_s": t_prep,
            "peak_mb": _peak_mb(), "cpu_s": _cpu_s(), "n_swapped": int(out.attrs["n_swapped"])}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", type=Path, default=None)
    ap.add_argument("--keep", action="store_true", help="keep the generated inputs")
    ap.add_argument("--phase", choices=["floor", "full"], default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.phase:
        res = _phase_floor(args.workdir) if args.phase == "floor" else _phase_full(args.workdir)
        print(json.dumps(res))
        return
    folder = args.workdir or Path(tempfile.mkdtemp(prefix="timeslice-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / "fine_baseline.nc").exists():
        t = time.perf_counter()
        _make_inputs(folder)
        print(f"generated inputs in {time.perf_counter() - t:.1f} s in {folder}")
    results = {}
    for phase in ("floor", "full", "floor"):  # floor twice: warm and cold file cache
        proc = subprocess.run(
            [sys.executable, __file__, "--phase", phase, "--workdir", str(folder)],
            capture_output=True, text=True, check=True,
        )
        results.setdefault(phase, []).append(json.loads(proc.stdout.strip().splitlines()[-1]))
    floor = min(r["seconds"] for r in results["floor"])
    floor_cpu = min(r["cpu_s"] for r in results["floor"])
    full = results["full"][0]
    print(f"I/O floor : {floor:7.2f} s wall  {floor_cpu:7.2f} s CPU   "
          f"peak {max(r['peak_mb'] for r in results['floor']):7.0f} MB")
    print(f"full run  : {full['seconds']:7.2f} s wall  {full['cpu_s']:7.2f} s CPU   "
          f"peak {full['peak_mb']:7.0f} MB (read {full['read_s']:.2f} s, prepare "
          f"{full['prepare_s']:.2f} s; CPU includes interpreter start and imports)")
    print(f"ratio full/floor: wall {full['seconds'] / floor:.2f}, CPU {full['cpu_s'] / floor_cpu:.2f} "
          f"(goal <= 3); peak {full['peak_mb'] / 1024:.2f} GB (goal < 2)")
    if not args.keep and args.workdir is None:
        shutil.rmtree(folder)


if __name__ == "__main__":
    main()
