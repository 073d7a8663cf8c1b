"""One fused pass over a block of cells, and the row-block runner that drives it.

:func:`compute_block` stacks the finite cells of a block once (:func:`valid_columns`), hands the
stacked matrix to the estimator and to every novelty metric of the :class:`BlockPlan`, and puts
each result back on the block with its fill value. The same function runs inside dask
(:func:`block_ufunc`, one task per chunk) and in :func:`run_row_blocks`, which reads a slice by
whole rows of longitude, computes the blocks on a few threads (the kernels release the GIL) and
writes each block as soon as it is done: no task per variable, memory bounded by the block.
"""

from __future__ import annotations

import math
import os
import threading
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from timeslice.errors import ConfigError
from timeslice.transfer.metrics import NoveltyMetric, OutputLayer
from timeslice.transfer.reference import scatter, valid_columns

__all__ = [
    "BYTES_PER_CELL_FIXED",
    "BYTES_PER_CELL_PER_VAR",
    "DEFAULT_CHUNK_BUDGET_MB",
    "SUITABILITY",
    "SUITABLE",
    "SUITABLE_FILL",
    "BlockPlan",
    "auto_chunks",
    "block_ufunc",
    "compute_block",
    "row_layers",
    "row_threads",
    "rows_per_block",
    "run_row_blocks",
    "stack_rows",
]

#: Code written into ``suitable`` where the cell is not land or has no prediction.
SUITABLE_FILL = np.int8(-1)

#: The estimator's layers: suitability and its thresholded class.
SUITABILITY = OutputLayer("suitability", np.float32)
SUITABLE = OutputLayer("suitable", np.int8, SUITABLE_FILL)

#: Default memory budget per chunk for ``chunks="auto"``, MB (our choice).
DEFAULT_CHUNK_BUDGET_MB = 64.0

# Working memory per cell of one chunk in the fused slice kernel: about 32 bytes per predictor
# (float64 stacks, the valid-cell copy, the estimator's input copy, MESS temporaries) plus
# about 35 bytes of outputs and masks, measured with tracemalloc for 2-16 predictors and the
# ellipsoid estimator (bench/transfer.py prints it first). Rounded up: estimators that expand
# features (splines, hinges) need a larger budget.
BYTES_PER_CELL_PER_VAR = 40
BYTES_PER_CELL_FIXED = 64


@dataclass
class BlockPlan:
    """What to compute for every block of a transfer.

    Parameters
    ----------
    metrics : tuple of NoveltyMetric
        Prepared metrics, in output order.
    predictor : object, optional
        The estimator step: ``predictor.columns(good)`` returns suitability of the finite cells
        (float32) and any further layers named by ``predictor.extra_layers``; None for novelty
        only.
    threshold : float, optional
        With a predictor: suitability at or above which ``suitable`` is 1 (no ``suitable``
        layer when None).
    """

    metrics: tuple[NoveltyMetric, ...]
    predictor: Any = None
    threshold: float | None = None

    def layers(self) -> list[OutputLayer]:
        """Specs of the output layers, in the order :func:`compute_block` returns them.

        Returns
        -------
        list of OutputLayer
        """
        out: list[OutputLayer] = []
        if self.predictor is not None:
            out += [SUITABILITY] + ([] if self.threshold is None else [SUITABLE])
        for m in self.metrics:
            out += list(m.layers)
        if self.predictor is not None:
            out += list(self.predictor.extra_layers)
        return out


def compute_block(x: np.ndarray, land: np.ndarray | None, plan: BlockPlan) -> list[np.ndarray]:
    """Every output layer of one block from one pass over its predictors.

    Parameters
    ----------
    x : numpy.ndarray, shape (k, ...)
        Predictors of the block (reference order) on the first axis.
    land : numpy.ndarray of bool, optional
        Land mask of the block; ``suitable`` is -1 off land.
    plan : BlockPlan
        Metrics and estimator.

    Returns
    -------
    list of numpy.ndarray
        One array of the block's shape (``x.shape[1:]``) per layer of ``plan.layers()``.
    """
    shape = x.shape[1:]
    good, valid = valid_columns(x)
    cols: list[np.ndarray] = []
    extra: tuple[np.ndarray, ...] = ()
    if plan.predictor is not None:
        suit, *extra = plan.predictor.columns(good)
        cols.append(suit)
        if plan.threshold is not None:
            cols.append((suit >= plan.threshold).astype(np.int8))
    for m in plan.metrics:
        cols += list(m.columns(good))
    cols += list(extra)
    out = []
    for spec, values in zip(plan.layers(), cols):
        values = np.asarray(values).astype(spec.dtype, copy=False)
        out.append(scatter(values, valid, spec.fill).reshape(shape))
    if plan.threshold is not None and land is not None:
        np.copyto(out[1], SUITABLE_FILL, where=~np.asarray(land, dtype=bool).reshape(shape))
    return out


def block_ufunc(*blocks: np.ndarray, plan: BlockPlan, with_land: bool) -> tuple[np.ndarray, ...]:
    """:func:`compute_block` in the calling convention of :func:`xarray.apply_ufunc`.

    Parameters
    ----------
    *blocks : numpy.ndarray
        The predictors of one chunk, then the land mask if `with_land`.
    plan : BlockPlan
        Metrics and estimator.
    with_land : bool
        Whether the last block is the land mask.

    Returns
    -------
    numpy.ndarray or tuple of numpy.ndarray
        The layers of ``plan.layers()`` (the array itself when there is one).
    """
    land = None
    if with_land:
        *blocks, land = blocks
    x = np.stack([np.asarray(b) for b in blocks]) if len(blocks) > 1 else np.asarray(blocks[0])[None]
    out = compute_block(x, land, plan)
    return out[0] if len(out) == 1 else tuple(out)  # apply_ufunc: one output, one array


def run_row_blocks(
    n_rows: int,
    rows_per_block: int,
    read: Callable[[int, int], tuple[np.ndarray, np.ndarray | None]],
    write: Callable[[int, int, list[np.ndarray]], None],
    plan: BlockPlan,
    *,
    threads: int = 1,
    io_lock: Any = None,
) -> None:
    """Compute every row block of a slice on `threads` threads, reading and writing in turn.

    Parameters
    ----------
    n_rows : int
        Rows (latitudes) of the slice.
    rows_per_block : int
        Rows per block (>= 1); memory is about ``threads + 1`` blocks.
    read : callable
        ``read(r0, r1)`` returns the predictors of rows r0..r1 as one (k, rows, cols) array and
        the land mask of those rows (or None).
    write : callable
        ``write(r0, r1, layers)`` stores the layers of a block.
    plan : BlockPlan
        Metrics and estimator.
    threads : int
        Blocks computed at the same time.
    io_lock : lock, optional
        Held around every `read` and `write` (HDF5 is not thread-safe); default a new lock.
    """
    lock = io_lock if io_lock is not None else threading.Lock()
    starts = range(0, n_rows, max(int(rows_per_block), 1))

    def one(r0: int) -> None:
        r1 = min(r0 + rows_per_block, n_rows)
        with lock:
            x, land = read(r0, r1)
        layers = compute_block(x, land, plan)
        del x, land
        with lock:
            write(r0, r1, layers)

    from timeslice.transfer.scheduler import one_blas_thread

    # one BLAS thread: the estimator's (n, k) @ (k, k) products gain nothing from more, and
    # several blocks run at once
    with one_blas_thread():
        if threads <= 1:
            for r0 in starts:
                one(r0)
            return
        pending: deque[Future] = deque()
        with ThreadPoolExecutor(max_workers=threads, thread_name_prefix="timeslice-rows") as pool:
            for r0 in starts:
                if len(pending) >= threads + 1:  # bounded: memory follows the block
                    pending.popleft().result()
                pending.append(pool.submit(one, r0))
            while pending:
                pending.popleft().result()


def stack_rows(arrays: Sequence[np.ndarray]) -> np.ndarray:
    """Predictor blocks of one row range as one (k, rows, cols) array (float32 where all are).

    Parameters
    ----------
    arrays : sequence of numpy.ndarray
        One (rows, cols) block per predictor.

    Returns
    -------
    numpy.ndarray
    """
    dtype = np.result_type(*[a.dtype for a in arrays])
    if dtype not in (np.float32, np.float64):
        dtype = np.float64
    out = np.empty((len(arrays),) + arrays[0].shape, dtype=dtype)
    for i, a in enumerate(arrays):
        out[i] = a
    return out


def auto_chunks(
    sizes: Mapping[str, int],
    *,
    n_variables: int,
    budget_mb: float = DEFAULT_CHUNK_BUDGET_MB,
    dims: tuple[str, str] = ("lat", "lon"),
) -> dict[str, int]:
    """Chunk sizes along `dims` so that one chunk's working memory fits `budget_mb`.

    Parameters
    ----------
    sizes : mapping of str to int
        Dimension sizes of the slice (e.g. ``ds.sizes``).
    n_variables : int
        Number of predictors processed together.
    budget_mb : float
        Working-memory budget per chunk in MB (10⁶ bytes). Each dask thread holds one chunk.
    dims : tuple of str
        The two spatial dims; other dims are kept whole.

    Returns
    -------
    dict
        ``{dim: size}`` for each of `dims` present in `sizes`; whole rows of longitude where they
        fit (rows are contiguous in NetCDF files), otherwise square-ish tiles.
    """
    if not budget_mb > 0:
        raise ConfigError(f"chunk memory budget must be > 0 MB, got {budget_mb}")
    other = 1
    for d, n in sizes.items():
        if d not in dims:
            other *= int(n)
    per_cell = (BYTES_PER_CELL_PER_VAR * max(int(n_variables), 1) + BYTES_PER_CELL_FIXED) * other
    cells = max(int(budget_mb * 1e6 // per_cell), 1)
    ydim, xdim = dims
    ny, nx = int(sizes.get(ydim, 1)), int(sizes.get(xdim, 1))
    if cells >= nx:
        cy, cx = max(min(cells // nx, ny), 1), nx
    else:
        side = max(int(math.isqrt(cells)), 1)
        cy, cx = min(side, ny), min(max(cells // side, 1), nx)
    out = {}
    if ydim in sizes:
        out[ydim] = cy
    if xdim in sizes:
        out[xdim] = cx
    return out


def rows_per_block(n_cols: int, n_variables: int, budget_mb: float) -> int:
    """Whole rows per block of the row-block transfer, so that a block fits `budget_mb`.

    Parameters
    ----------
    n_cols : int
        Cells per row.
    n_variables : int
        Predictors.
    budget_mb : float
        Working-memory budget per block, MB.

    Returns
    -------
    int
        At least 1.
    """
    return auto_chunks({"lat": 1 << 30, "lon": int(n_cols)}, n_variables=n_variables,
                       budget_mb=budget_mb)["lat"] if n_cols else 1


def row_threads() -> int:
    """Threads of the row-block transfer: dask's ``num_workers`` if set, else one per core.

    Returns
    -------
    int
    """
    import dask

    n = dask.config.get("num_workers", None)
    return max(int(n) if n else (os.cpu_count() or 1), 1)


def row_layers(
    arrays: list[xr.DataArray], land: xr.DataArray | None, plan: BlockPlan, budget_mb: float
) -> list[xr.DataArray]:
    """Every layer of an in-memory 2-D slice, computed now by row blocks on a few threads.

    Parameters
    ----------
    arrays : list of xarray.DataArray
        The predictors (numpy backed, 2-D, one dims order), in the reference's order.
    land : xarray.DataArray of bool, optional
        Land mask on the same dims (any order).
    plan : BlockPlan
        Metrics and estimator.
    budget_mb : float
        Working-memory budget per block, MB.

    Returns
    -------
    list of xarray.DataArray
        The layers of ``plan.layers()``, on the predictors' dims and coordinates.
    """
    dims = arrays[0].dims
    values = [np.asarray(a.values) for a in arrays]
    mask = None if land is None else np.asarray(land.transpose(*dims).values)
    ny, nx = values[0].shape
    specs = plan.layers()
    outs = [np.empty((ny, nx), dtype=s.dtype) for s in specs]

    def read(r0: int, r1: int):
        return stack_rows([v[r0:r1] for v in values]), None if mask is None else mask[r0:r1]

    def write(r0: int, r1: int, layers: list[np.ndarray]) -> None:
        for o, layer in zip(outs, layers):
            o[r0:r1] = layer

    run_row_blocks(ny, rows_per_block(nx, len(values), budget_mb), read, write, plan,
                   threads=row_threads(), io_lock=_NoLock())
    coords = {d: arrays[0].coords[d] for d in dims if d in arrays[0].coords}
    return [xr.DataArray(o, dims=dims, coords=coords) for o in outs]


class _NoLock:
    """In-memory reads and writes of distinct rows need no lock."""

    def __enter__(self) -> None:
        return None

    def __exit__(self, *exc: Any) -> None:
        return None
