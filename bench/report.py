"""Benchmark of the report stage on the invented demo (run by hand; not a test).

Generates the invented demo scenario, runs it end to end in a fresh process (as ``timeslice
demo`` does) and measures, in CPU seconds (user + system, this process and every child process
it waited for, so figures drawn by worker processes count):

- **demo**: the whole run (imports, harmonise, fit, transfer, summarise, report);
- **report**: the report stage alone (``timeslice.report.assemble.write_outputs``: data files,
  tables, vectors, maps, plots, GeoTIFFs, HTML) and its share of the demo run;
- **floor**: the same figures drawn with plain matplotlib in the same process right after the
  run (one ``imshow`` and one land contour per map panel, a colour bar per map figure, a few
  lines per plot panel, the same dpi, saved without a tight bounding box, one process) - what
  the figures cost at the least - and the ratio of the report's figure drawing to it.

Goals (issue 15, goal 3): the demo in <= 25 CPU s, the report <= 15 % of it. The load average is
printed with the numbers: the machine is shared, so compare CPU seconds and ratios, not wall.

    python bench/report.py [--quick] [--resolution DEG] [--repeat N] [--workdir DIR]
                           [--write-docs] [--keep]

``--quick`` runs the demo at 0.25 degrees (about 6x fewer cells) once.
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

DOC_BEGIN = "<!-- report-bench:begin -->"
DOC_END = "<!-- report-bench:end -->"


def _cpu() -> float:
    """CPU seconds of this process and of its waited-for children (user + system)."""
    s = resource.getrusage(resource.RUSAGE_SELF)
    c = resource.getrusage(resource.RUSAGE_CHILDREN)
    return s.ru_utime + s.ru_stime + c.ru_utime + c.ru_stime


# ------------------------------------------------------------------------------ the floor

def _plain_map(fig, n: int, ncols: int, values, land, extent) -> None:
    import numpy as np

    nrows = -(-n // ncols)
    axes = fig.subplots(nrows, ncols, squeeze=False)
    im = None
    for k, ax in enumerate(axes.ravel()):
        if k >= n:
            ax.set_visible(False)
            continue
        im = ax.imshow(values, origin="lower", extent=extent, cmap="viridis",
                       interpolation="nearest")
        ax.contour(np.linspace(extent[0], extent[1], land.shape[1]),
                   np.linspace(extent[2], extent[3], land.shape[0]), land, levels=[0.5],
                   colors="black", linewidths=0.8)
        ax.set_title(f"panel {k + 1}", fontsize=8)
    fig.colorbar(im, ax=axes.ravel().tolist(), shrink=0.6)


def _plain_plot(fig, n: int) -> None:
    import numpy as np

    x = np.linspace(0, 1, 50)
    for k in range(n):
        ax = fig.add_subplot(1, n, k + 1)
        for j in range(6):
            ax.plot(x, np.sin(x * (j + 1)), marker=".")
        ax.set_title(f"plot {k + 1}", fontsize=8)
        ax.legend([f"line {j}" for j in range(6)], fontsize=6)


def floor(spec: list[tuple[str, int]], series, folder: Path, dpi: int) -> dict:
    """Draw `spec` ((kind, panels) per figure: kind "map" or "plot") with plain matplotlib.

    Parameters
    ----------
    spec : list of (str, int)
        The figures of the run.
    series : xarray.Dataset
        The run's series (its first suitability and land layers are drawn on every panel).
    folder : Path
        Where the PNG files go (deleted afterwards).
    dpi : int
        Resolution, as the report.

    Returns
    -------
    dict
        ``cpu_s`` and ``wall_s``.
    """
    import numpy as np
    from matplotlib.figure import Figure

    folder.mkdir(parents=True, exist_ok=True)
    v = np.asarray(series["suitability"].isel(slice=0).transpose("lat", "lon").values, float)
    land = np.asarray(series["land"].isel(slice=0).transpose("lat", "lon").values, float)
    lon, lat = series["lon"].values, series["lat"].values
    extent = [float(lon[0]), float(lon[-1]), float(lat[0]), float(lat[-1])]
    aspect = (extent[3] - extent[2]) / (extent[1] - extent[0])
    t0, c0 = time.perf_counter(), _cpu()
    for k, (kind, n) in enumerate(spec):
        ncols = min(n, 3)
        if kind == "map":
            fig = Figure(figsize=(3.4 * ncols + 0.8, 3.4 * aspect * -(-n // ncols) + 0.8))
            _plain_map(fig, n, ncols, v, land, extent)
        else:
            fig = Figure(figsize=(8.0, 4.0))
            _plain_plot(fig, n)
        fig.savefig(folder / f"floor_{k:02d}.png", dpi=dpi)
    out = {"cpu_s": _cpu() - c0, "wall_s": time.perf_counter() - t0}
    shutil.rmtree(folder, ignore_errors=True)
    return out


def figure_spec(series, fit, analysis) -> list[tuple[str, int]]:
    """(kind, panels) of every figure the report of this run draws (see report.assemble)."""
    n = int(series.sizes["slice"])
    spec = [("map", 1)] * n + [("map", 1), ("map", n - 1)] + [("map", n)] * 3
    if "most_dissimilar" in series:
        spec.append(("map", n))
    ens = getattr(analysis, "ensemble", None)
    if ens is not None and "agreement" in ens:
        spec.append(("map", int(ens.sizes.get("group", 1))))
    if ens is not None and "dominant" in ens:
        spec.append(("map", 2))
    if "reachable_limited" in series:
        spec.append(("map", 2))
    spec += [("plot", 2), ("plot", 2), ("plot", 2), ("plot", 1), ("map", 1), ("plot", 4)]
    if fit.response is not None:
        spec.append(("plot", int(fit.response["variable"].nunique())))
    spec += [("plot", 1), ("plot", 1), ("plot", 2)]
    return spec


# ------------------------------------------------------------------------------ one run

def _child(args: argparse.Namespace) -> None:
    """Run the demo in this (fresh) process; print one JSON line of measurements."""
    c_start, t_start = _cpu(), time.perf_counter()
    import timeslice.report.assemble as assemble
    from timeslice.commands import run as run_pipeline
    from timeslice.config import load_config
    from timeslice.demo_config import write_config

    seen: dict = {}
    inner = assemble.write_outputs

    def timed(opts, **kw):
        c0, t0 = _cpu(), time.perf_counter()
        paths = inner(opts, **kw)
        seen.update(cpu=_cpu() - c0, wall=time.perf_counter() - t0, series=kw["series"],
                    fit=kw["fit"], analysis=kw.get("analysis"))
        return paths

    assemble.write_outputs = timed
    data = Path(args.data)
    cfg = load_config(write_config(data / "demo.toml"))
    out = Path(args.out)
    result = run_pipeline(cfg, out, force=True)
    run_cpu, run_wall = _cpu() - c_start, time.perf_counter() - t_start
    spec = figure_spec(seen["series"], seen["fit"], seen["analysis"])
    fl = floor(spec, seen["series"], out / "_floor", dpi=110)
    draw = result.timings.get("report_figures_cpu")
    print(json.dumps({
        "run_cpu": run_cpu, "run_wall": run_wall, "report_cpu": seen["cpu"],
        "report_wall": seen["wall"], "floor_cpu": fl["cpu_s"], "floor_wall": fl["wall_s"],
        "figures": len(spec), "figures_cpu": draw, "timings": result.timings,
    }))


def _spawn(args: argparse.Namespace, data: Path, out: Path) -> dict:
    c0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    proc = subprocess.run(
        [sys.executable, __file__, "--child", "--data", str(data), "--out", str(out)],
        check=True, capture_output=True, text=True, env={**os.environ, "PYTHONHASHSEED": "0"})
    c1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    res = json.loads(proc.stdout.strip().splitlines()[-1])
    # the whole process minus the floor drawn after the run: the demo as `timeslice demo` runs it
    res["process_cpu"] = ((c1.ru_utime - c0.ru_utime) + (c1.ru_stime - c0.ru_stime)
                          - res["floor_cpu"])
    return res


def _table(rows: list[dict], resolution: float) -> str:
    head = ("| demo resolution | demo run CPU s (whole process) | report CPU s | report share "
            "| figures | figure floor CPU s | report / floor | report wall s | load average |\n"
            "|---|---|---|---|---|---|---|---|---|\n")
    lines = []
    for r in rows:
        lines.append(
            f"| {resolution:g}° | {r['process_cpu']:.1f} | {r['report_cpu']:.1f} | "
            f"{100 * r['report_cpu'] / r['process_cpu']:.0f} % | {r['figures']} | "
            f"{r['floor_cpu']:.1f} | {r['report_cpu'] / r['floor_cpu']:.2f} | "
            f"{r['report_wall']:.1f} | {r['load']:.1f} |")
    return head + "\n".join(lines)


def _write_docs(text: str) -> None:
    from timeslice.io import atomic_path

    doc = Path(__file__).resolve().parents[1] / "docs" / "performance.md"
    old = doc.read_text() if doc.exists() else "# Performance\n"
    if DOC_BEGIN in old and DOC_END in old:
        pre, rest = old.split(DOC_BEGIN, 1)
        post = rest.split(DOC_END, 1)[1]
    else:
        pre, post = old.rstrip() + "\n\n## Report stage\n\n", "\n"
    with atomic_path(doc) as tmp:
        tmp.write_text(pre + DOC_BEGIN + "\n" + text + "\n" + DOC_END + post)


def main(argv: list[str] | None = None) -> None:
    """Measure the report stage of the demo and print (optionally write) the table.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default ``sys.argv[1:]``).
    """
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--quick", action="store_true", help="demo at 0.25 degrees, one repeat")
    p.add_argument("--resolution", type=float, default=None,
                   help="demo cell size in degrees (default 0.1, as `timeslice demo`)")
    p.add_argument("--repeat", type=int, default=1, help="runs; the one with least CPU is kept")
    p.add_argument("--workdir", default=None)
    p.add_argument("--write-docs", action="store_true")
    p.add_argument("--keep", action="store_true")
    p.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--data", help=argparse.SUPPRESS)
    p.add_argument("--out", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.child:
        _child(args)
        return
    res = args.resolution or (0.25 if args.quick else 0.1)
    work = Path(args.workdir or tempfile.mkdtemp(prefix="timeslice-report-bench-"))
    data = work / f"demo_data_{res:g}"
    if not (data / "baseline.nc").exists():
        from timeslice.demo import generate

        t0 = time.perf_counter()
        generate(data, resolution=res)
        print(f"demo data at {res:g}° ready in {time.perf_counter() - t0:.1f} s", flush=True)
    best = None
    for k in range(1 if args.quick else max(1, args.repeat)):
        r = _spawn(args, data, work / f"run_{k}")
        r["load"] = os.getloadavg()[0]
        print(f"run {k + 1}: demo {r['process_cpu']:.1f} CPU s, report {r['report_cpu']:.1f} "
              f"CPU s ({100 * r['report_cpu'] / r['process_cpu']:.0f} %), floor "
              f"{r['floor_cpu']:.1f} CPU s, load {r['load']:.1f}", flush=True)
        if best is None or r["process_cpu"] < best["process_cpu"]:
            best = r
    table = _table([best], res)
    print(table)
    print("stage wall s:", json.dumps(best["timings"]))
    if args.write_docs:
        import platform

        text = (f"Measured {time.strftime('%Y-%m-%d')} on {os.cpu_count()} cores "
                f"({platform.processor() or platform.machine()}), least CPU of "
                f"{1 if args.quick else max(1, args.repeat)} run(s); `python bench/report.py"
                f"{' --quick' if args.quick else ''}`.\n\n" + table)
        _write_docs(text)
    if not args.keep and args.workdir is None:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
