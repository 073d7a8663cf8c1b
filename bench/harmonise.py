"""Benchmark of the harmonise stage against its I/O floor (run by hand; not a test).

An invented 0.5-degree global model slice and its model baseline (K, kg m-2 s-1, noleap,
longitudes 0..360) are downscaled onto an invented fine baseline (degC, mm month-1) of
10, 5 or 2.5 arc-minutes: read + check + delta downscaling + land mask + bioclimatic
variables + write, streamed by blocks of rows (``timeslice.harmonise.write_slice``).

The floor, measured in the same run on the same files, reads every input once (by the same
blocks of rows) and writes an output of the prepared slice's size and kind (19 float layers,
elevation and four masks, compressed the same way), nothing else. Every phase runs in a fresh
process; wall and CPU seconds are those of the work after the imports (imports are printed
apart), peak memory is the process's peak resident set (``resource.getrusage``). Goal
(issue 15): within 2x the floor, peak memory flat across sizes. The machine is shared: quote
the ratios and CPU seconds, with the load average printed beside them.

    python bench/harmonise.py [--sizes 10,5,2.5] [--quick] [--workdir DIR] [--keep]
                              [--docs docs/performance.md]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

_VARS = ("tasmin", "tasmax", "pr")
BEGIN, END = "<!-- harmonise-bench:begin -->", "<!-- harmonise-bench:end -->"


def _grid(minutes: float) -> tuple[np.ndarray, np.ndarray]:
    n = int(round(60 / minutes))
    lat = -90 + (np.arange(180 * n) + 0.5) / n
    lon = -180 + (np.arange(360 * n) + 0.5) / n
    return lat, lon


def _rows(minutes: float) -> int:
    from timeslice.harmonise.prepare import block_rows

    lat, lon = _grid(minutes)
    return block_rows(lat.size, lon.size)[0]


def _make_model_files(folder: Path) -> None:
    import cftime
    import xarray as xr

    rng = np.random.default_rng(7)
    months = np.arange(1, 13)
    clat = -89.75 + 0.5 * np.arange(360)
    clon = 0.25 + 0.5 * np.arange(720)  # raw model convention 0..360
    season = np.sin(2 * np.pi * (months - 4) / 12)[:, None, None]
    lat_term = 30 * np.cos(np.deg2rad(clat))[None, :, None]
    times = [cftime.DatetimeNoLeap(2001, m, 15) for m in months]
    for name, dt, wet in (("model_baseline", 0.0, 1.0), ("model_slice", 3.0, 0.9)):
        tmin = (273.15 - 20 + lat_term + 10 * season * np.sign(clat)[None, :, None] + dt
                + rng.normal(0, 0.5, (12, 360, 720))).astype("f4")
        pr = (wet * rng.gamma(2.0, 1.5, (12, 360, 720)) / 86400).astype("f4")
        dims = ("time", "lat", "lon")
        ds = xr.Dataset(
            {"tasmin": (dims, tmin, {"units": "K", "standard_name": "air_temperature",
                                     "cell_methods": "time: minimum"}),
             "tasmax": (dims, (tmin + 9).astype("f4"),
                        {"units": "K", "standard_name": "air_temperature",
                         "cell_methods": "time: maximum"}),
             "pr": (dims, pr, {"units": "kg m-2 s-1", "standard_name": "precipitation_flux"})},
            coords={"time": ("time", times),
                    "lat": ("lat", clat, {"units": "degrees_north"}),
                    "lon": ("lon", clon, {"units": "degrees_east"})},
        )
        ds["time"].encoding.update(units="days since 2000-01-01", calendar="noleap")
        ds.to_netcdf(folder / f"{name}.nc",
                     encoding={v: {"zlib": True, "complevel": 1} for v in _VARS})


def _fine_block(lat: np.ndarray, lon: np.ndarray, rng):
    """Elevation and the monthly baseline of some rows: invented continents from smooth
    noise, temperature falling with latitude and height, NaN at sea."""
    LON, LAT = np.meshgrid(np.deg2rad(lon), np.deg2rad(lat))
    z = (2000 * np.sin(3 * LON) * np.cos(2 * LAT) + 1500 * np.cos(5 * LON + 1) * np.sin(3 * LAT)
         + 800 * np.sin(7 * LAT + 2 * LON) - 600).astype("f4")
    land = z > 0
    base_t = -20 + 30 * np.cos(LAT) - 0.0065 * np.maximum(z, 0)
    months = np.arange(1, 13)
    season = np.sin(2 * np.pi * (months - 4) / 12)[:, None, None] * np.sign(lat)[None, :, None]
    tmin = np.where(land[None], base_t[None] + 10 * season, np.nan).astype("f4")
    pr = np.where(land[None], rng.gamma(2.0, 40.0, (12,) + z.shape), np.nan).astype("f4")
    return z, {"tasmin": tmin, "tasmax": (tmin + 10).astype("f4"), "pr": pr}


def _make_fine_files(folder: Path, minutes: float) -> None:
    """Fine baseline and elevation written block by block (bounded memory at any size),
    chunked by the blocks of rows the harmonise stage reads."""
    import cftime
    import netCDF4

    lat, lon = _grid(minutes)
    rows = _rows(minutes)
    rng = np.random.default_rng(11)
    fb = netCDF4.Dataset(folder / "fine_baseline.nc", "w", format="NETCDF4")
    dem = netCDF4.Dataset(folder / "dem.nc", "w", format="NETCDF4")
    for nc in (fb, dem):
        for name, values, units in (("lat", lat, "degrees_north"), ("lon", lon, "degrees_east")):
            nc.createDimension(name, values.size)
            var = nc.createVariable(name, "f8", (name,))
            var.units = units
            var[:] = values
    fb.createDimension("time", 12)
    t = fb.createVariable("time", "f8", ("time",))
    t.units, t.calendar = "days since 1990-01-01", "standard"
    t[:] = cftime.date2num([cftime.DatetimeGregorian(1995, m, 15) for m in range(1, 13)],
                           t.units, t.calendar)
    attrs = {"tasmin": dict(units="degC", standard_name="air_temperature",
                            cell_methods="time: minimum"),
             "tasmax": dict(units="degC", standard_name="air_temperature",
                            cell_methods="time: maximum"),
             "pr": dict(units="mm month-1")}
    fvars = {}
    for v in _VARS:
        fvars[v] = fb.createVariable(v, "f4", ("time", "lat", "lon"), zlib=True, complevel=1,
                                     chunksizes=(1, rows, lon.size), fill_value=np.float32(np.nan))
        fvars[v].setncatts(attrs[v])
    elev = dem.createVariable("elevation", "f4", ("lat", "lon"), zlib=True, complevel=1,
                              chunksizes=(rows, lon.size))
    elev.setncatts(dict(units="m", standard_name="height_above_mean_sea_level"))
    for r0 in range(0, lat.size, rows):
        r1 = min(r0 + rows, lat.size)
        z, fields = _fine_block(lat[r0:r1], lon, rng)
        elev[r0:r1, :] = z
        for v in _VARS:
            fvars[v][:, r0:r1, :] = fields[v]
    fb.close()
    dem.close()


def _usage() -> tuple[float, float]:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime, r.ru_maxrss / 1024.0


def _phase_floor(folder: Path, minutes: float) -> dict:
    """Read every input once by blocks of rows; write the prepared slice's layers once."""
    import netCDF4

    t_imp = time.perf_counter()
    cpu0, _ = _usage()
    t0 = time.perf_counter()
    netCDF4.set_chunk_cache(4 * 2**20)  # the readers' cache size
    for name in ("model_baseline", "model_slice"):
        with netCDF4.Dataset(folder / f"{name}.nc") as nc:
            for v in _VARS:
                nc.variables[v][:]
    fb = netCDF4.Dataset(folder / "fine_baseline.nc")
    dem = netCDF4.Dataset(folder / "dem.nc")
    nlat, nlon = fb.dimensions["lat"].size, fb.dimensions["lon"].size
    rows = fb.variables["tasmin"].chunking()[1]
    out = netCDF4.Dataset(folder / "floor_out.nc", "w", format="NETCDF4")
    for name in ("lat", "lon"):
        out.createDimension(name, fb.dimensions[name].size)
        out.createVariable(name, "f8", (name,))[:] = fb.variables[name][:]
    layers = {}
    for i in range(1, 20):
        layers[f"bio{i}"] = out.createVariable(f"bio{i}", "f4", ("lat", "lon"), zlib=True,
                                               complevel=4, shuffle=True,
                                               chunksizes=(rows, nlon), fill_value=np.nan)
    layers["elevation"] = out.createVariable("elevation", "f4", ("lat", "lon"), zlib=True,
                                             complevel=4, shuffle=True, chunksizes=(rows, nlon),
                                             fill_value=np.nan)
    for m in ("land", "ice", "exposed_shelf", "filled"):
        layers[m] = out.createVariable(m, "i1", ("lat", "lon"), zlib=True, complevel=4,
                                       shuffle=True, chunksizes=(rows, nlon))
    for var in layers.values():  # the stage's sink: about one chunk cached per variable
        var.set_var_chunk_cache(size=rows * nlon * var.dtype.itemsize + 2**16, nelems=11,
                                preemption=1.0)
    for r0 in range(0, nlat, rows):
        r1 = min(r0 + rows, nlat)
        block = {v: fb.variables[v][:, r0:r1, :].filled(np.nan) for v in _VARS}
        z = dem.variables["elevation"][r0:r1, :]
        land = np.isfinite(block["tasmin"][0])
        # same size and kind of content as the prepared slice (smooth fields, NaN at sea),
        # so compression costs the same
        for i in range(1, 20):
            layers[f"bio{i}"][r0:r1, :] = block["tasmin"][i % 12] + np.float32(i)
        layers["elevation"][r0:r1, :] = z
        for m in ("land", "ice", "exposed_shelf", "filled"):
            layers[m][r0:r1, :] = land.astype("i1") if m == "land" else np.zeros_like(land, "i1")
    for nc in (fb, dem, out):
        nc.close()
    cpu1, peak = _usage()
    return {"seconds": time.perf_counter() - t0, "cpu_s": cpu1 - cpu0, "peak_mb": peak,
            "import_s": t0 - t_imp}


def _phase_full(folder: Path, minutes: float) -> dict:
    t_imp = time.perf_counter()
    from timeslice.harmonise.plausibility import check_fields
    from timeslice.harmonise.prepare import write_slice
    from timeslice.readers import open_climate

    rows = _rows(minutes)
    cpu0, _ = _usage()
    t0 = time.perf_counter()
    lazy = {"lat": rows}
    # the fine grid lazily, by the blocks of rows of the stage; the plausibility check of
    # harmonise streams them too (the reader's own whole-field checks are left out here)
    fb = open_climate(folder / "fine_baseline.nc", chunks=lazy, check=False)
    check_fields(fb, source="fine_baseline.nc")
    dem = open_climate(folder / "dem.nc", chunks=lazy, check=False)
    check_fields(dem, source="dem.nc")
    mb = open_climate(folder / "model_baseline.nc")
    ms = open_climate(folder / "model_slice.nc")
    t_read = time.perf_counter() - t0
    write_slice(folder / "full_out.nc", fine_baseline=fb, elevation=dem, model_slice=ms,
                model_baseline=mb, label="bench", year=2050.0, period="2041-2060",
                model="bench", scenario="bench")
    cpu1, peak = _usage()
    import xarray as xr

    with xr.open_dataset(folder / "full_out.nc") as out:
        n_swapped = int(out.attrs["n_swapped"])
    return {"seconds": time.perf_counter() - t0, "cpu_s": cpu1 - cpu0, "peak_mb": peak,
            "open_s": t_read, "import_s": t0 - t_imp, "n_swapped": n_swapped}


def _run_phase(phase: str, folder: Path, minutes: float) -> dict:
    proc = subprocess.run(
        [sys.executable, __file__, "--phase", phase, "--workdir", str(folder),
         "--sizes", str(minutes)],
        capture_output=True, text=True,
    )
    if proc.returncode != 0:
        sys.exit(f"bench/harmonise.py: the {phase} phase at {minutes:g}' failed:\n"
                 f"{proc.stderr.strip()[-2000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def _one_size(folder: Path, minutes: float) -> dict:
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / "fine_baseline.nc").exists():
        t = time.perf_counter()
        _make_model_files(folder)
        _make_fine_files(folder, minutes)
        print(f"  generated {minutes:g}' inputs in {time.perf_counter() - t:.0f} s in {folder}",
              flush=True)
    load0 = os.getloadavg()[0]
    floors = [_run_phase("floor", folder, minutes)]
    full = _run_phase("full", folder, minutes)
    floors.append(_run_phase("floor", folder, minutes))  # before and after: file cache warm
    load1 = os.getloadavg()[0]
    floor = {k: min(f[k] for f in floors) for k in ("seconds", "cpu_s", "peak_mb")}
    lat, lon = _grid(minutes)
    return {"minutes": minutes, "cells": lat.size * lon.size, "floor": floor, "full": full,
            "wall_ratio": full["seconds"] / floor["seconds"],
            "cpu_ratio": full["cpu_s"] / floor["cpu_s"], "load": (load0, load1)}


def _table(results: list[dict]) -> str:
    lines = [
        "| grid | cells | floor wall s | floor CPU s | floor peak MB | harmonise wall s | "
        "harmonise CPU s | harmonise peak MB | wall / floor | CPU / floor | load avg (1 min) |",
        "|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in results:
        f, h = r["floor"], r["full"]
        lines.append(
            f"| {r['minutes']:g}′ | {r['cells'] / 1e6:.1f} M | {f['seconds']:.1f} | "
            f"{f['cpu_s']:.1f} | {f['peak_mb']:.0f} | {h['seconds']:.1f} | {h['cpu_s']:.1f} | "
            f"{h['peak_mb']:.0f} | {r['wall_ratio']:.2f} | {r['cpu_ratio']:.2f} | "
            f"{r['load'][0]:.1f} → {r['load'][1]:.1f} |")
    return "\n".join(lines)


def _write_docs(path: Path, table: str) -> None:
    text = path.read_text()
    if BEGIN not in text or END not in text:
        sys.exit(f"{path}: no {BEGIN} … {END} markers; add them under the harmonise heading")
    head, rest = text.split(BEGIN, 1)
    _, tail = rest.split(END, 1)
    path.write_text(f"{head}{BEGIN}\n{table}\n{END}{tail}")


def main(argv: list[str] | None = None) -> list[dict]:
    """Run the benchmark and print its table.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    list of dict
        One result per grid size (floor, full run, ratios, load average); empty when run as
        one phase.
    """
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10,5,2.5",
                    help="fine-grid resolutions in arc-minutes, comma-separated")
    ap.add_argument("--quick", action="store_true", help="one small grid (30 arc-minutes)")
    ap.add_argument("--workdir", type=Path, default=None)
    ap.add_argument("--keep", action="store_true", help="keep the generated inputs")
    ap.add_argument("--docs", type=Path, default=None,
                    help="write the table into this file between the harmonise-bench markers")
    ap.add_argument("--phase", choices=["floor", "full"], default=None, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    sizes = [30.0] if args.quick else [float(s) for s in args.sizes.split(",") if s.strip()]
    if args.phase:
        fn = _phase_floor if args.phase == "floor" else _phase_full
        print(json.dumps(fn(args.workdir, sizes[0])))
        return []
    root = args.workdir or Path(tempfile.mkdtemp(prefix="timeslice-bench-"))
    print(f"harmonise bench on {os.cpu_count()} CPUs, load average "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}", flush=True)
    results = []
    for minutes in sizes:
        r = _one_size(root / f"{minutes:g}min", minutes)
        results.append(r)
        h = r["full"]
        print(f"{minutes:g}': floor {r['floor']['seconds']:.1f} s wall {r['floor']['cpu_s']:.1f} "
              f"s CPU {r['floor']['peak_mb']:.0f} MB | harmonise {h['seconds']:.1f} s wall "
              f"{h['cpu_s']:.1f} s CPU {h['peak_mb']:.0f} MB (open+check {h['open_s']:.1f} s; "
              f"imports {h['import_s']:.1f} s not counted) | ratio wall {r['wall_ratio']:.2f} "
              f"CPU {r['cpu_ratio']:.2f} (goal <= 2) | load {r['load'][0]:.1f} -> "
              f"{r['load'][1]:.1f}", flush=True)
    table = _table(results)
    print(table)
    peaks = [r["full"]["peak_mb"] for r in results]
    if len(peaks) > 1:
        print(f"peak memory largest/smallest grid: {max(peaks) / min(peaks):.2f} "
              f"(flat = 1; cells grow {results[-1]['cells'] / results[0]['cells']:.0f}x)")
    if args.docs:
        _write_docs(args.docs, table)
    if not args.keep and args.workdir is None:
        shutil.rmtree(root)
    return results


if __name__ == "__main__":
    main()
