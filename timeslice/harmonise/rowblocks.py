"""Row-block execution for large numpy grids: bounded memory, threads across blocks.

Wrapping in-memory numpy arrays in dask (``from_array``, ``Dataset.chunk``) copies them;
for the fine-grid steps that would double the largest arrays of a run. These helpers write
each block's result straight into preallocated output arrays instead.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor

__all__ = ["map_rows", "row_blocks"]


def row_blocks(nrows: int, rows: int) -> list[tuple[int, int]]:
    """Consecutive row ranges ``[r0, r1)`` of at most `rows` rows covering ``nrows``.

    Parameters
    ----------
    nrows : int
        Rows of the grid.
    rows : int
        Rows per block (at least 1 is used).

    Returns
    -------
    list of (int, int)
        ``(r0, r1)`` pairs in order.
    """
    step = max(1, int(rows))
    return [(r0, min(r0 + step, nrows)) for r0 in range(0, nrows, step)]


def map_rows(func: Callable[[int, int], None], nrows: int, rows: int,
             workers: int | None = None) -> None:
    """Call ``func(r0, r1)`` for consecutive row blocks ``[r0, r1)`` covering ``nrows``.

    `func` writes its own results (into disjoint slices of preallocated arrays). numpy
    releases the GIL in its kernels, so threads overlap on several cores.

    Parameters
    ----------
    func : callable
        ``func(r0, r1)``, called once per block.
    nrows : int
        Rows of the grid.
    rows : int
        Rows per block.
    workers : int, optional
        Threads (default: up to 4, at most the number of CPUs).

    Returns
    -------
    None
    """
    blocks = row_blocks(nrows, rows)
    n_workers = workers or min(4, os.cpu_count() or 1)
    if n_workers <= 1 or len(blocks) <= 1:
        for r0, r1 in blocks:
            func(r0, r1)
        return
    with ThreadPoolExecutor(max_workers=n_workers) as pool:
        futures = [pool.submit(func, r0, r1) for r0, r1 in blocks]
        for f in futures:
            f.result()
