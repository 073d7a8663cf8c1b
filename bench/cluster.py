"""The same transfer on a dask.distributed LocalCluster of 4 workers and on local threads.

Run by hand (not part of the test suite)::

    python bench/cluster.py               # 10' global grid (2160 x 1080), 6 slices
    python bench/cluster.py --quick       # 30' grid (720 x 360), 3 slices
    python bench/cluster.py --write-docs  # also write the tables into docs/performance.md

One invented data set (smooth correlated float32 predictors, ~30 % land, NaN at sea) is written
as uncompressed NetCDF, one file per slice, and opened lazily (as a run's cached slices are, so
each worker reads its own chunks); one ellipsoid niche is fitted on it. Then, in this order:

* ``floor``: read every predictor value once (netCDF4) and write the 6 output layers once as
  raw float32/int8 files (the least a transfer must move);
* ``threads``: ``timeslice.transfer.project_slice`` on every slice (suitability, suitable,
  MESS, most-dissimilar, NT1, NT2) computed by dask's local threads, then the series written
  as a Zarr store (:func:`timeslice.report.zarr_store.write_store`) and as NetCDF;
* ``cluster``: the same graph on a ``LocalCluster`` of 4 single-threaded worker processes
  (:func:`timeslice.transfer.scheduler.scheduler`), then the Zarr store written by the workers.

The values of both runs are compared byte for byte (every layer, and the two stores read back)
and the run stops if they differ. Printed: wall and CPU seconds (this process and every worker
process), the ratios cluster / threads and run / floor, the CPU per land cell, and the load
average. Only the public API is used (``project_slice``, ``scheduler``, ``write_store``), so the
bench keeps working when the kernel behind them changes.

From the measured CPU per land cell it also prints the cost of a 30" global run over 100
slices on N workers (the model and its assumptions are in docs/performance.md).
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

DOC = Path(__file__).resolve().parents[1] / "docs" / "performance.md"
DOC_BEGIN = "<!-- cluster-bench:begin -->"
DOC_END = "<!-- cluster-bench:end -->"
SIZES = {"quick": (360, 720, 3), "full": (1080, 2160, 6)}  # lat, lon, slices
N_VARS = 8
WORKERS = 4


# ------------------------------------------------------------------------------ data

def invented_slice(nlat: int, nlon: int, s: int, k: int = N_VARS):
    """One invented prepared slice: k correlated float32 predictors, NaN at sea, ``land``.

    Parameters
    ----------
    nlat, nlon : int
        Grid size (global, regular).
    s : int
        Slice index (each slice a little warmer and shifted).
    k : int
        Number of predictors.

    Returns
    -------
    xarray.Dataset
    """
    import xarray as xr

    res = 180.0 / nlat
    lat = -90 + res * (np.arange(nlat) + 0.5)
    lon = -180 + res * (np.arange(nlon) + 0.5)
    la, lo = np.deg2rad(lat)[:, None], np.deg2rad(lon)[None, :]
    land = (np.sin(2 * lo + 1.3) * np.cos(3 * la) + 0.6 * np.sin(5 * lo) * np.sin(4 * la + 0.5)
            + 0.4 * np.cos(7 * lo - 2 * la)) > 0.3
    data = {}
    prev = None
    for i in range(k):
        f = (np.cos(la) * (20 + 3 * i) + 0.4 * s * (1 + 0.1 * i)
             + (2 + i) * np.sin((i + 1) * lo + 0.7 * i + 0.05 * s) * np.cos((i % 3 + 1) * la)
             + 0.8 * np.sin(11 * lo + 13 * la + i)).astype(np.float32)
        if i % 2 and prev is not None:
            f = f + np.float32(0.5) * prev
        prev = f
        data[f"bio{i + 1}"] = (("lat", "lon"), np.where(land, f, np.nan).astype(np.float32))
    ds = xr.Dataset(data, coords={"lat": lat, "lon": lon})
    ds["land"] = (("lat", "lon"), land)
    ds.attrs.update(slice_label=f"s{s}", year=2000.0 + 10 * s, period=f"p{s}", model="gcm",
                    scenario="baseline" if s == 0 else "high")
    return ds


def fitted_niche(ds, seed: int = 1):
    """An ellipsoid niche fitted on presences inside an invented niche and a background.

    Parameters
    ----------
    ds : xarray.Dataset
        The first slice.
    seed : int
        Random seed.

    Returns
    -------
    (estimator, pandas.DataFrame, list of str)
        The fitted model, the background sample (novelty reference) and the predictors.
    """
    import pandas as pd

    from timeslice.niche import EllipsoidNiche

    rng = np.random.default_rng(seed)
    names = [v for v in ds.data_vars if v.startswith("bio")]
    x = np.stack([ds[v].values[ds["land"].values] for v in names], axis=1).astype(np.float64)
    bg = x[rng.choice(x.shape[0], min(10_000, x.shape[0]), replace=False)]
    z = (((x - np.quantile(x, 0.6, axis=0)) / x.std(axis=0)) ** 2).sum(axis=1)
    inside = np.flatnonzero(z < 0.5 * len(names))
    pres = x[rng.choice(inside, min(500, inside.size), replace=False)]
    X = pd.DataFrame(np.vstack([pres, bg]), columns=names)
    y = np.r_[np.ones(len(pres)), np.zeros(len(bg))]
    return EllipsoidNiche().fit(X, y), pd.DataFrame(bg, columns=names), names


# ------------------------------------------------------------------------------ measuring

def _cpu_tree() -> float:
    """User + system CPU seconds of this process, its threads and its live child processes."""
    import psutil  # a dependency of distributed

    me = psutil.Process()
    total = sum(me.cpu_times()[:2])
    for child in me.children(recursive=True):
        try:
            total += sum(child.cpu_times()[:2])
        except psutil.Error:
            pass
    return total


def _on_disk(slices, work: Path):
    """Write the slices as uncompressed NetCDF and open them lazily, as a run's cached slices
    are: each worker then reads its own chunks from the file."""
    import xarray as xr

    opened = []
    for s, ds in enumerate(slices):
        path = work / f"slice_{s}.nc"
        ds.to_netcdf(path, engine="netcdf4")
        opened.append(xr.open_dataset(path, engine="netcdf4", chunks={}))
    return opened


def _floor(paths: list[Path], work: Path) -> dict:
    """Read every predictor value once from the files, write the 6 output layers once."""
    import netCDF4

    t0, c0 = time.perf_counter(), _cpu_tree()
    for s, path in enumerate(paths):
        with netCDF4.Dataset(path) as nc:
            for v in nc.variables:
                if v.startswith("bio"):
                    nc.variables[v][:]
            shape = nc.variables["land"].shape
        for name, dtype in (("suitability", "f4"), ("suitable", "i1"), ("mess", "f4"),
                            ("most_dissimilar", "i2"), ("nt1", "f4"), ("nt2", "f4")):
            np.zeros(shape, dtype=dtype).tofile(work / f"floor_{s}_{name}.bin")
    out = {"wall_s": time.perf_counter() - t0, "cpu_s": _cpu_tree() - c0}
    for p in work.glob("floor_*.bin"):
        p.unlink()
    return out


def _transfer(slices, model, reference, names):
    """The lazy transfers of every slice, computed on the current scheduler."""
    import dask

    from timeslice.transfer.project import project_slice

    lazy = [project_slice(model, ds, variables=names, reference=reference, threshold=0.5,
                          chunks="auto") for ds in slices]
    return list(dask.compute(*lazy, optimize_graph=False))


def _stack(results, slices):
    from timeslice.series.stacking import stack_slices

    parts = [r.assign(land=ds["land"].astype(bool)).assign_attrs(
        {k: ds.attrs[k] for k in ("slice_label", "year", "period", "model", "scenario")})
        for r, ds in zip(results, slices)]
    return stack_slices(parts)


def _timed(fn, *args):
    t0, c0 = time.perf_counter(), _cpu_tree()
    value = fn(*args)
    return value, {"wall_s": time.perf_counter() - t0, "cpu_s": _cpu_tree() - c0}


def _differences(a, b) -> list[str]:
    bad = []
    for name in a.data_vars:
        x, y = np.asarray(a[name].values), np.asarray(b[name].values)
        if x.dtype != y.dtype or x.tobytes() != y.tobytes():
            bad.append(str(name))
    return bad


def measure(size: str, work: Path) -> dict:
    """Floor, threads and cluster runs of one size; values compared byte for byte.

    Parameters
    ----------
    size : {"quick", "full"}
        Grid and slice count.
    work : Path
        Scratch folder for the stores.

    Returns
    -------
    dict
        Timings, sizes and the comparison results.
    """
    from timeslice.report.netcdf import write_series
    from timeslice.report.zarr_store import open_store, write_store
    from timeslice.transfer.scheduler import scheduler

    nlat, nlon, n = SIZES[size]
    made = [invented_slice(nlat, nlon, s) for s in range(n)]
    model, reference, names = fitted_niche(made[0])
    land_cells = int(sum(int(ds["land"].sum()) for ds in made))
    slices = _on_disk(made, work)
    del made
    row = {"size": size, "grid": f"{nlon} x {nlat}", "slices": n, "land_cells": land_cells}
    row["floor"] = _floor([work / f"slice_{s}.nc" for s in range(n)], work)
    with scheduler(threads=os.cpu_count() or 1):
        res_t, row["threads"] = _timed(_transfer, slices, model, reference, names)
        stack_t = _stack(res_t, slices).load()
        _, row["threads_zarr"] = _timed(write_store, stack_t, work / "threads.zarr")
        _, row["threads_nc"] = _timed(write_series, stack_t, work / "threads.nc")
    with scheduler(workers=WORKERS, processes=True) as client:
        client.wait_for_workers(WORKERS)
        res_c, row["cluster"] = _timed(_transfer, slices, model, reference, names)
        stack_c = _stack(res_c, slices).load()
        _, row["cluster_zarr"] = _timed(write_store, stack_c, work / "cluster.zarr")
    row["differ"] = _differences(stack_t, stack_c)
    row["differ_store"] = _differences(open_store(work / "threads.zarr").load(),
                                       open_store(work / "cluster.zarr").load())
    return row


# ------------------------------------------------------------------------------ cost model

#: Assumptions of the 30" global cost table (docs/performance.md says where each comes from).
GLOBAL = {
    "cells": 43200 * 21600,
    "land": 0.30,
    "slices": 100,
    "predictors": 8,
    "bytes_out_per_cell": 4 + 1 + 4 + 2 + 4 + 4,  # suitability, suitable, mess, mod, nt1, nt2
    "worker_mb_s": 200.0,  # sustained read or write per worker, MB/s
    "fs_mb_s": 2000.0,  # shared filesystem, aggregate MB/s
}


def global_cost(ns_per_land_cell: float, workers: int, *, g: dict = GLOBAL) -> dict:
    """Hours of a 30" global run over 100 slices on `workers` workers (on paper).

    Parameters
    ----------
    ns_per_land_cell : float
        CPU per land cell and slice, ns (measured).
    workers : int
        Number of single-threaded workers.
    g : dict
        The assumptions (:data:`GLOBAL`).

    Returns
    -------
    dict
        ``cpu_h`` (total), ``compute_h``, ``read_h``, ``write_zarr_h``, ``write_nc_h`` (wall
        hours of each part), ``zarr_h`` and ``netcdf_h`` (wall hours of the run: compute and
        read overlap, the parallel Zarr write overlaps too; a NetCDF file takes its writes one
        at a time, so its write adds).
    """
    land_cells = g["cells"] * g["land"] * g["slices"]
    cpu_s = land_cells * ns_per_land_cell * 1e-9
    read_mb = g["cells"] * g["slices"] * g["predictors"] * 4 / 1e6
    write_mb = g["cells"] * g["slices"] * g["bytes_out_per_cell"] / 1e6
    bandwidth = min(workers * g["worker_mb_s"], g["fs_mb_s"])
    compute = cpu_s / workers
    read = read_mb / bandwidth
    write_zarr = write_mb / bandwidth
    write_nc = write_mb / g["worker_mb_s"]  # one writer
    return {"cpu_h": cpu_s / 3600, "compute_h": compute / 3600, "read_h": read / 3600,
            "write_zarr_h": write_zarr / 3600, "write_nc_h": write_nc / 3600,
            "zarr_h": max(compute, read + write_zarr) / 3600,
            "netcdf_h": (max(compute, read) + write_nc) / 3600}


# ------------------------------------------------------------------------------ report

def _lines(row: dict) -> list[str]:
    t, c, f = row["threads"], row["cluster"], row["floor"]
    ns = t["cpu_s"] / row["land_cells"] * 1e9
    load = os.getloadavg()
    out = [
        f"cluster bench {row['size']}: grid {row['grid']}, {row['slices']} slices, "
        f"{row['land_cells']:,} land cell-slices, {N_VARS} predictors; "
        f"{os.cpu_count()} cores; load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}",
        f"  floor (read once, write once): {f['wall_s']:.2f} s wall, {f['cpu_s']:.2f} CPU s",
        f"  threads: {t['wall_s']:.2f} s wall, {t['cpu_s']:.2f} CPU s; run / floor ratio "
        f"{t['wall_s'] / f['wall_s']:.1f} wall, {t['cpu_s'] / max(f['cpu_s'], 1e-9):.1f} CPU",
        f"  cluster ({WORKERS} worker processes): {c['wall_s']:.2f} s wall, {c['cpu_s']:.2f} CPU s",
        f"  cluster / threads ratio: {c['wall_s'] / t['wall_s']:.2f} wall, "
        f"{c['cpu_s'] / t['cpu_s']:.2f} CPU",
        f"  Zarr write: threads {row['threads_zarr']['wall_s']:.2f} s "
        f"({row['threads_zarr']['cpu_s']:.2f} CPU s), cluster {row['cluster_zarr']['wall_s']:.2f} s"
        f" ({row['cluster_zarr']['cpu_s']:.2f} CPU s); NetCDF write (one writer) "
        f"{row['threads_nc']['wall_s']:.2f} s; Zarr / NetCDF ratio "
        f"{row['threads_zarr']['wall_s'] / row['threads_nc']['wall_s']:.2f}",
        f"  CPU per land cell and slice (threads): {ns:.0f} ns",
        "  values byte-identical, threads vs cluster: "
        + ("yes (every layer, and the two Zarr stores read back)"
           if not row["differ"] and not row["differ_store"]
           else f"NO: {row['differ'] + row['differ_store']}"),
    ]
    return out


def _cost_table(ns: float) -> str:
    head = ("| workers | CPU h (total) | compute h | read h | Zarr write h | NetCDF write h | "
            "run with Zarr h | run with NetCDF h |\n|---|---|---|---|---|---|---|---|")
    rows = []
    for n in (1, 4, 16, 64, 256):
        c = global_cost(ns, n)
        rows.append(f"| {n} | {c['cpu_h']:.1f} | {c['compute_h']:.2f} | {c['read_h']:.2f} | "
                    f"{c['write_zarr_h']:.2f} | {c['write_nc_h']:.2f} | {c['zarr_h']:.2f} | "
                    f"{c['netcdf_h']:.2f} |")
    return head + "\n" + "\n".join(rows)


def per_cell_ns(rows: list[dict]) -> tuple[float, float]:
    """CPU per land cell and per slice from the threads runs: CPU = slices * a + cells * b.

    Parameters
    ----------
    rows : list of dict
        Results of :func:`measure` (one or two sizes).

    Returns
    -------
    (float, float)
        ``b`` in ns per land cell and slice, and ``a`` in CPU s per slice (0 with one size,
        where ``b`` then also carries the per-slice cost).
    """
    if len(rows) < 2:
        r = rows[0]
        return r["threads"]["cpu_s"] / r["land_cells"] * 1e9, 0.0
    A = np.array([[r["slices"], r["land_cells"]] for r in rows], dtype=float)
    y = np.array([r["threads"]["cpu_s"] for r in rows])
    (a, b), *_ = np.linalg.lstsq(A, y, rcond=None)
    if b <= 0:  # noise: fall back to the larger size's average
        r = max(rows, key=lambda r: r["land_cells"])
        return r["threads"]["cpu_s"] / r["land_cells"] * 1e9, 0.0
    return float(b * 1e9), float(max(a, 0.0))


def table_ns(rows: list[dict]) -> float:
    """CPU per land cell and slice for the cost table: the average of the largest size's threads
    run, set-up included (conservative: at 30 arc-seconds the per-chunk set-up grows with the
    chunk count, so the marginal cost of :func:`per_cell_ns` would understate it).

    Parameters
    ----------
    rows : list of dict
        Results of :func:`measure`.

    Returns
    -------
    float
        ns per land cell and slice.
    """
    r = max(rows, key=lambda r: r["land_cells"])
    return r["threads"]["cpu_s"] / r["land_cells"] * 1e9


def _write_docs(rows: list[dict], load: tuple[float, float, float] | None = None) -> None:
    load = load or os.getloadavg()
    marginal, per_slice = per_cell_ns(rows)
    ns = table_ns(rows)
    lines = [f"Measured {time.strftime('%Y-%m-%d')} on {os.cpu_count()} cores, load average at "
             f"the end {load[0]:.1f}; `python bench/cluster.py`.", "",
             "| size | grid (lon x lat) | slices | floor s (CPU s) | threads s (CPU s) | "
             f"cluster of {WORKERS} s (CPU s) | cluster / threads: wall | CPU | Zarr write "
             "threads / cluster s | NetCDF write s | ns CPU per land cell | identical |",
             "|---|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in rows:
        t, c, f = r["threads"], r["cluster"], r["floor"]
        lines.append(
            f"| {r['size']} | {r['grid']} | {r['slices']} | {f['wall_s']:.2f} ({f['cpu_s']:.2f}) "
            f"| {t['wall_s']:.1f} ({t['cpu_s']:.1f}) | {c['wall_s']:.1f} ({c['cpu_s']:.1f}) | "
            f"{c['wall_s'] / t['wall_s']:.2f} | {c['cpu_s'] / t['cpu_s']:.2f} | "
            f"{r['threads_zarr']['wall_s']:.2f} / {r['cluster_zarr']['wall_s']:.2f} | "
            f"{r['threads_nc']['wall_s']:.2f} | {t['cpu_s'] / r['land_cells'] * 1e9:.0f} | "
            f"{'yes' if not r['differ'] and not r['differ_store'] else 'NO'} |")
    lines += ["", f"30\" global run, 100 slices, from {ns:.0f} ns CPU per land cell and slice "
              f"(the largest size's average, set-up included; the marginal cost fitted across "
              f"the sizes is {marginal:.0f} ns plus {per_slice:.2f} CPU s per slice) and the "
              "assumptions below (wall hours):", "", _cost_table(ns)]
    text = DOC.read_text(encoding="utf-8")
    block = DOC_BEGIN + "\n" + "\n".join(lines) + "\n" + DOC_END
    if DOC_BEGIN in text and DOC_END in text:
        pre, rest = text.split(DOC_BEGIN, 1)
        text = pre + block + rest.split(DOC_END, 1)[1]
    else:
        text = text.rstrip() + "\n\n" + block + "\n"
    DOC.write_text(text, encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    """Run the bench and print its ratios.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default ``sys.argv[1:]``).

    Returns
    -------
    int
        0, or 1 if the two runs' values differ.
    """
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--quick", action="store_true", help="30' grid, 3 slices (a smoke run)")
    p.add_argument("--write-docs", action="store_true", help="write docs/performance.md tables")
    p.add_argument("--workdir", default=None, help="scratch folder (default: a temporary one)")
    args = p.parse_args(argv)
    import warnings

    # the fitted model and the reference sample travel inside the graph; distributed warns
    # about graphs of a few MB
    warnings.filterwarnings("ignore", message="Sending large graph")
    warnings.filterwarnings("ignore", message="Large object of size")
    work = Path(args.workdir or tempfile.mkdtemp(prefix="timeslice-cluster-"))
    work.mkdir(parents=True, exist_ok=True)
    rows = []
    try:
        for size in (["quick"] if args.quick else ["quick", "full"]):
            row = measure(size, work)
            rows.append(row)
            print("\n".join(_lines(row)), flush=True)
            if row["differ"] or row["differ_store"]:
                print("cluster bench: values differ between threads and cluster", file=sys.stderr)
                return 1
    finally:
        if args.workdir is None:
            shutil.rmtree(work, ignore_errors=True)
    marginal, per_slice = per_cell_ns(rows)
    ns = table_ns(rows)
    print(f"30\" global, 100 slices, {ns:.0f} ns CPU per land cell and slice (largest size's "
          f"average; marginal {marginal:.0f} ns + {per_slice:.2f} CPU s per slice); wall hours "
          "by workers:")
    print(_cost_table(ns))
    print(f"peak RSS of this process {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    if args.write_docs:
        _write_docs(rows)
    return 0


if __name__ == "__main__":
    sys.exit(main())
