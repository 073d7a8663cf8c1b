"""Row-block execution for large numpy grids: bounded memory, threads across blocks.

Wrapping in-memory numpy arrays in dask (``from_array``, ``Dataset.chunk``) copies them;
for the fine-grid steps that would double the largest arrays of a run. These helpers write
each block's result straight into preallocated output arrays instead.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

__all__ = ["map_rows"]


def map_rows(func: Callable[[int, int], None], nrows: int, rows: int,
             workers: int | None = None) -> None:
    """Call ``func(r0, r1)`` for consecutive row blocks ``[r0, r1)`` covering ``nrows``.

    `func` writes its own results (into disjoint slices of preallocated arrays). numpy
    releases the GIL in its kernels, so threads overlap on several cores.
    """
    starts = range(0, nrows, max(1, int(rows)))
    n_workers = workers or min(4, os.cpu_count() or 1)
    if n_workers <= 1 or len(starts) <= 1:
        for r0 in starts:
            func(r0, min(r0 + rows, nrows))
        return
    with ThreadPoolExecutor(max_workers=n_workers) as pool:
        futures = [pool.submit(func, r0, min(r0 + rows, nrows)) for r0 in starts]
        for f in futures:
            f.result()
