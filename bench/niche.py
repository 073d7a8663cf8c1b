"""Benchmark (run by hand): fitting and prediction cost of the niche algorithms.

    python bench/niche.py [--quick] [--algorithms forest,ensemble,point_process,ellipsoid]
                          [--no-fit-niche] [--docs]

On an invented island world with a known niche (tests/niche/niche_world.py; everything is
invented) with 25,000 records and 100,000 background points (``--quick``: 2,000 and 10,000):

- **estimator fit**: ``fit`` of each algorithm on the presence and background rows;
- **fit_niche**: the whole fit stage (cleaning, calibration area, background, screening,
  5-fold spatial block cross-validation, final fit, response curves, permutation importance);
- **prediction**: ``predict_proba`` per land cell, BLAS on one thread;
- **transfer**: :func:`timeslice.transfer.project.project_slice` (suitability, MESS, ExDet) on
  the world's baseline slice in memory.

Times are wall and CPU seconds (all threads of this process). BLAS is held to one thread, so the
only parallel work is the forest's trees (``n_jobs=-1``: one thread per available core). The
expected wall time on 2 idle cores is estimated as the CPU time with the forest's share halved.
Printed ratios are to the goals (fit 60 s, prediction 1 us per cell) and to the ellipsoid
measured in the same run (the floor of the transfer). The load average is printed at the start
and end: on a shared machine read CPU seconds and ratios, not single wall times.
"""

from __future__ import annotations

import argparse
import os
import re
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "niche"))

FIT_GOAL_S = 60.0
PREDICT_GOAL_NS = 1000.0
TRANSFER_GOAL_RATIO = 3.0  # point process vs ellipsoid
SIZES = {
    "full": dict(resolution=0.025, n_records=25000, n_background=100000),
    "quick": dict(resolution=0.1, n_records=2000, n_background=10000),
}
VARIABLES = ["bio1", "bio4", "bio12", "bio15"]
DOCS = ROOT / "docs" / "performance.md"
BEGIN, END = "<!-- niche-bench:begin -->", "<!-- niche-bench:end -->"


def _timed(fn):
    """(result, wall s, CPU s) of one call."""
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w0, time.process_time() - c0


def _world(size: dict):
    """Baseline slice, records, the presence/background rows of the estimator fit, land cells."""
    import numpy as np
    from niche_world import make_world

    ds, rec, _ = make_world(resolution=size["resolution"], n_records=size["n_records"], seed=3)
    A = np.stack([ds[v].values.ravel() for v in VARIABLES], axis=1).astype(float)
    land = ds["land"].values.ravel()
    lat, lon = ds["lat"].values, ds["lon"].values
    step = size["resolution"]
    r = np.clip(np.round((rec["lat"].to_numpy() - lat[0]) / step).astype(int), 0, lat.size - 1)
    c = np.clip(np.round((rec["lon"].to_numpy() - lon[0]) / step).astype(int), 0, lon.size - 1)
    cells = r * lon.size + c
    cells = cells[land[cells]]
    rng = np.random.default_rng(0)
    bg = rng.choice(np.flatnonzero(land), min(size["n_background"], int(land.sum())), replace=False)
    X = np.r_[A[cells], A[bg]]
    y = np.r_[np.ones(cells.size), np.zeros(bg.size)].astype(int)
    return ds, rec, X, y, A[land]


def _estimator(name: str):
    from timeslice.niche import make_model

    return make_model(name, random_state=0)


def _forest_fits(name: str, n_folds: int = 5) -> int:
    """Forest fits inside one fit_niche call (CV folds + final fit), for the idle-wall estimate."""
    return (n_folds + 1) if name in ("forest", "ensemble") else 0


def run(size_name: str, algorithms: list[str], with_fit_niche: bool) -> list[dict]:
    """Measure every algorithm; returns one row per algorithm."""
    import numpy as np
    from threadpoolctl import threadpool_limits

    from timeslice.niche import fit_niche
    from timeslice.transfer.project import project_slice

    size = SIZES[size_name]
    ds, rec, X, y, cells = _world(size)
    print(f"world: {ds.sizes['lon']} x {ds.sizes['lat']} cells, {cells.shape[0]} land; estimator fit on "
          f"{int(y.sum())} presences + {int((y == 0).sum())} background rows, {len(VARIABLES)} predictors",
          flush=True)
    rows = []
    forest_cpu = None
    with threadpool_limits(1):
        for name in algorithms:
            est, wall, cpu = _timed(lambda: _estimator(name).fit(X, y))
            if name == "forest":
                forest_cpu = cpu
            _, _, pcpu = _timed(lambda: est.predict_proba(cells))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                # twice, the second timed: the first pays one-time costs (loading the compiled
                # kernels, first-use imports) that would fall on whichever algorithm runs first
                for _ in range(2):
                    _, twall, tcpu = _timed(lambda: project_slice(
                        est, ds, variables=VARIABLES, reference=_reference(X, y),
                        threshold=0.5).compute())
            row = dict(algorithm=name, fit_wall=wall, fit_cpu=cpu, predict_ns=pcpu / cells.shape[0] * 1e9,
                       transfer_wall=twall, transfer_cpu=tcpu)
            if with_fit_niche:
                fit, fwall, fcpu = _timed(lambda: fit_niche(
                    rec, ds, algorithm=name, n_background=size["n_background"], thin=None, seed=0))
                row.update(niche_wall=fwall, niche_cpu=fcpu,
                           cv_auc=float(fit.evaluation.query("summary == 'mean'")["auc"].iloc[0]))
            rows.append(row)
            print(f"  {name}: fit {wall:.1f} s wall, {cpu:.1f} s CPU; predict {row['predict_ns']:.0f} ns/cell; "
                  f"transfer {tcpu:.1f} s CPU" + (f"; fit_niche {row['niche_wall']:.1f} s wall, "
                                                  f"{row['niche_cpu']:.1f} s CPU" if with_fit_niche else ""),
                  flush=True)
    threads = _threads()
    for row in rows:
        share = forest_cpu if forest_cpu is not None and row["algorithm"] in ("forest", "ensemble") else 0.0
        row["fit_idle2"] = row["fit_cpu"] - share * (1 - 1 / min(2, threads))
        if "niche_cpu" in row:
            fshare = (forest_cpu or 0.0) * _forest_fits(row["algorithm"])
            row["niche_idle2"] = max(row["niche_cpu"] - fshare * (1 - 1 / min(2, threads)), row["niche_cpu"] / 2)
    return rows


def _reference(X, y):
    import pandas as pd

    return pd.DataFrame(X[y == 0], columns=VARIABLES)


def _threads() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover
        return os.cpu_count() or 1


def table(rows: list[dict], size_name: str, load: tuple[float, float]) -> str:
    """The results as a Markdown table with ratios, and a line on how they were measured."""
    ell = next((r for r in rows if r["algorithm"] == "ellipsoid"), None)
    size = SIZES[size_name]
    head = (f"Measured {time.strftime('%Y-%m-%d')} on {_threads()} cores, `python bench/niche.py"
            f"{' --quick' if size_name == 'quick' else ''}`: {size['n_records']:,} records drawn on the "
            f"invented world, {size['n_background']:,} background points, {len(VARIABLES)} predictors, BLAS "
            f"on one thread, the forest's trees on {_threads()} threads; load average {load[0]:.1f} at the "
            f"start, {load[1]:.1f} at the end. CPU s are all threads of the process; \"idle 2-core wall\" "
            "is CPU s with the forest's share halved (an estimate).\n\n")
    cols = ["algorithm", "fit wall s", "fit CPU s", "fit idle 2-core wall s", "fit / 60 s",
            "predict ns/cell", "predict / 1 µs", "transfer CPU s", "transfer / ellipsoid"]
    with_niche = any("niche_cpu" in r for r in rows)
    if with_niche:
        cols += ["fit_niche wall s", "fit_niche CPU s", "fit_niche idle 2-core wall s", "fit_niche / 60 s",
                 "CV AUC"]
    out = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    for r in rows:
        vals = [r["algorithm"], f"{r['fit_wall']:.1f}", f"{r['fit_cpu']:.1f}", f"{r['fit_idle2']:.1f}",
                f"{r['fit_idle2'] / FIT_GOAL_S:.2f}", f"{r['predict_ns']:.0f}",
                f"{r['predict_ns'] / PREDICT_GOAL_NS:.2f}", f"{r['transfer_cpu']:.1f}",
                f"{r['transfer_cpu'] / ell['transfer_cpu']:.2f}" if ell else "n/a"]
        if with_niche:
            vals += [f"{r.get('niche_wall', float('nan')):.1f}", f"{r.get('niche_cpu', float('nan')):.1f}",
                     f"{r.get('niche_idle2', float('nan')):.1f}",
                     f"{r.get('niche_idle2', float('nan')) / FIT_GOAL_S:.2f}", f"{r.get('cv_auc', float('nan')):.3f}"]
        out.append("| " + " | ".join(vals) + " |")
    return head + "\n".join(out) + "\n"


def write_docs(text: str) -> None:
    """Put `text` between the niche-bench markers of docs/performance.md."""
    doc = DOCS.read_text()
    if BEGIN not in doc:
        raise SystemExit(f"{DOCS}: no {BEGIN} marker; add the niche section first")
    new = re.sub(re.escape(BEGIN) + ".*?" + re.escape(END), BEGIN + "\n" + text.replace("\\", "\\\\") + END,
                 doc, flags=re.S)
    DOCS.write_text(new)


def main(argv: list[str] | None = None) -> int:
    """Run the benchmark; returns the exit status.

    Parameters
    ----------
    argv : list of str, optional
        Command-line arguments (default ``sys.argv[1:]``).

    Returns
    -------
    int
        0.
    """
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="2,000 records and 10,000 background points")
    ap.add_argument("--algorithms", default="ellipsoid,point_process,forest,ensemble",
                    help="comma-separated algorithm names (the ellipsoid is the floor of the ratios)")
    ap.add_argument("--no-fit-niche", action="store_true", help="skip the whole-stage fit_niche timing")
    ap.add_argument("--docs", action="store_true", help="write the table into docs/performance.md")
    args = ap.parse_args(argv)
    algorithms = [a.strip() for a in args.algorithms.split(",") if a.strip()]
    size_name = "quick" if args.quick else "full"
    load0 = os.getloadavg()[0]
    print(f"load average at start {load0:.1f} ({_threads()} cores)", flush=True)
    rows = run(size_name, algorithms, with_fit_niche=not args.no_fit_niche)
    load1 = os.getloadavg()[0]
    text = table(rows, size_name, (load0, load1))
    print(text)
    if args.docs:
        write_docs(text)
        print(f"wrote {DOCS}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
