"""Benchmark (run by hand): fit_niche for every algorithm on a ~30 000-cell synthetic world with
300 records, 10 000 background points, 5-fold spatial cross-validation and permutation importance.

    python bench/niche.py [ALGORITHM ...]

Prints wall and CPU seconds per algorithm and the ratio to the 120 s target of the fitting issue.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "niche"))

from niche_world import make_world  # noqa: E402  (test helper, synthetic world with a known niche)

from timeslice.niche import MODEL_NAMES, fit_niche  # noqa: E402

TARGET_S = 120.0


def main(algorithms: list[str]) -> None:
    # 0.1 degree over 20 x 15 degrees = 200 x 150 = 30 000 cells
    ds, rec, _ = make_world(resolution=0.1, lon_min=-40, lon_max=-20, lat_min=40, lat_max=55,
                            n_records=300, seed=3)
    print(f"cells {ds.sizes['lat'] * ds.sizes['lon']}, land {int(ds.land.sum())}, records {len(rec)}")
    print(f"{'algorithm':14s} {'wall s':>8s} {'cpu s':>8s} {'wall/target':>12s} {'cv auc':>7s}")
    for alg in algorithms:
        t0, c0 = time.perf_counter(), time.process_time()
        fit = fit_niche(rec, ds, algorithm=alg, n_background=10000, buffer_km=200, seed=0)
        wall, cpu = time.perf_counter() - t0, time.process_time() - c0
        auc = fit.evaluation.query("summary == 'mean'")["auc"].iloc[0]
        print(f"{alg:14s} {wall:8.1f} {cpu:8.1f} {wall / TARGET_S:12.2f} {auc:7.3f}")


if __name__ == "__main__":
    main(sys.argv[1:] or list(MODEL_NAMES))
