"""Figure files (PNG, SVG or PDF at a chosen dpi) and drawing many figures in parallel.

:func:`save` writes a figure once, as laid out (no tight bounding box, which draws every
figure twice), with every text drawn as written. :func:`draw_all` draws a list of figure jobs
in the main process and, when it helps, in worker processes started with the "spawn" method
(safe beside the threads of dask and the BLAS), each held to one BLAS thread.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from timeslice.errors import DataError
from timeslice.report._output import output_path

__all__ = ["FIGURE_FORMATS", "draw_all", "figure_file", "preview_file", "save"]

#: File formats of the figures: raster PNG, or vector SVG / PDF (lines, text and hatching as
#: vectors; cell rasters embedded as images at the figure's dpi).
FIGURE_FORMATS: tuple[str, ...] = ("png", "svg", "pdf")

#: zlib level of the PNG files: 3 writes files ~10 % larger than matplotlib's default 6 at
#: about half the encoding time (measured on the demo's maps).
_PNG_LEVEL = 3


def figure_file(path: str | os.PathLike, figure_format: str = "png") -> Path:
    """`path` with the suffix of `figure_format`.

    Parameters
    ----------
    path : path-like
        A figure file name (any suffix).
    figure_format : {"png", "svg", "pdf"}
        The format.

    Returns
    -------
    pathlib.Path
    """
    if figure_format not in FIGURE_FORMATS:
        raise DataError(f"figures: format must be one of {', '.join(FIGURE_FORMATS)}, got "
                        f"{figure_format!r}")
    return Path(path).with_suffix("." + figure_format)


def preview_file(path: str | os.PathLike) -> Path:
    """The PNG drawn beside a PDF figure for the HTML report (a browser shows no PDF in a page).

    Parameters
    ----------
    path : path-like
        The PDF figure.

    Returns
    -------
    pathlib.Path
        ``name.preview.png`` beside it.
    """
    p = Path(path)
    return p.with_name(p.stem + ".preview.png")


def save(fig, path: str | os.PathLike, *, dpi: int) -> Path:
    """Write `fig` once, in the format of the file's suffix (``.png``, ``.svg``, ``.pdf``).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        A figure laid out already (its size and axes positions are final).
    path : path-like
        Target file; any other suffix is written as PNG.
    dpi : int
        Resolution (pixels per inch of the PNG; of the cell rasters inside SVG and PDF).

    Returns
    -------
    pathlib.Path
        The file written. A PDF gets a PNG preview beside it (:func:`preview_file`).

    Notes
    -----
    Every text is drawn as written: a ``$`` in a slice label is a dollar sign, never the start
    of a formula (matplotlib's ``parse_math`` is switched off for every text).
    """
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.text import Text

    target = Path(path)
    fmt = target.suffix.lstrip(".").lower()
    fmt = fmt if fmt in FIGURE_FORMATS else "png"
    for text in fig.findobj(Text):
        text.set_parse_math(False)
    extra: dict[str, Any] = {}
    if fmt == "png":
        extra["pil_kwargs"] = {"compress_level": _PNG_LEVEL}
    elif fmt == "svg":
        extra["metadata"] = {"Date": None}  # same figure, same file
    with matplotlib.rc_context({"text.parse_math": False, "svg.hashsalt": "timeslice"}):
        if fmt == "pdf":
            FigureCanvasAgg(fig)
            with output_path(preview_file(target)) as tmp:
                fig.savefig(tmp, format="png", dpi=dpi, pil_kwargs={"compress_level": _PNG_LEVEL})
        with output_path(target) as tmp:
            fig.savefig(tmp, format=fmt, dpi=dpi, **extra)
    return target


# ----------------------------------------------------------------------------- in parallel

_SHARED: dict[int, Any] = {}


class _Shared:
    """Stands for a large argument sent once to each worker (not once per figure)."""

    def __init__(self, key: int) -> None:
        self.key = key


def _init_worker(shared: dict[int, Any]) -> None:
    os.environ.setdefault("MPLBACKEND", "Agg")
    try:
        from threadpoolctl import threadpool_limits

        threadpool_limits(1)  # figures need no BLAS threads; two workers on two cores
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        pass
    _SHARED.clear()
    _SHARED.update(shared)


def _resolve(value):
    return _SHARED[value.key] if isinstance(value, _Shared) else value


def _run_job(draw: Callable, args: tuple, kwargs: dict):
    return draw(*(_resolve(a) for a in args), **{k: _resolve(v) for k, v in kwargs.items()})


def _shareable(jobs: Sequence) -> dict[int, Any]:
    """Arguments (datasets, tables) passed to more than one job: sent once per worker."""
    import pandas as pd
    import xarray as xr

    seen: dict[int, Any] = {}
    count: dict[int, int] = {}
    for job in jobs:
        for v in (*job.args, *job.kwargs.values()):
            if isinstance(v, (xr.Dataset, xr.DataArray, pd.DataFrame)):
                seen[id(v)] = v
                count[id(v)] = count.get(id(v), 0) + 1
    return {k: v for k, v in seen.items() if count[k] > 1}


def _swap(job, shared: dict[int, Any]):
    def one(v):
        return _Shared(id(v)) if id(v) in shared else v

    return tuple(one(a) for a in job.args), {k: one(v) for k, v in job.kwargs.items()}


def _pool(processes: int, shared: dict[int, Any]):
    """A pool of spawned workers, started now, or None when processes cannot be started here.

    The workers are started with no ``__main__`` to re-run: every drawing function lives in an
    importable module, and a caller's script without a ``__main__`` guard (or a notebook) must
    not be executed again in each worker.
    """
    import multiprocessing as mp
    import sys
    import types
    from concurrent.futures import ProcessPoolExecutor

    env = {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                          "MKL_NUM_THREADS")}
    main = sys.modules.get("__main__")
    pool = None
    try:
        for k in env:  # inherited by the spawned workers before they import numpy
            os.environ[k] = "1"
        sys.modules["__main__"] = types.ModuleType("__main__")
        pool = ProcessPoolExecutor(max_workers=processes, mp_context=mp.get_context("spawn"),
                                   initializer=_init_worker, initargs=(shared,))
        for fut in [pool.submit(int) for _ in range(processes)]:  # start the workers here
            fut.result(timeout=120)
        return pool
    except Exception:  # noqa: BLE001 - no processes here: draw in this one
        if pool is not None:
            pool.shutdown(wait=False, cancel_futures=True)
        return None
    finally:
        if main is not None:
            sys.modules["__main__"] = main
        for k, v in env.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def draw_all(jobs: Sequence, *, processes: int = 2,
             progress: Callable[[int, int], None] | None = None) -> list:
    """Run every job's ``draw(*args, **kwargs)``; results in the jobs' order.

    Parameters
    ----------
    jobs : sequence
        Objects with ``draw``, ``args``, ``kwargs`` and ``cost`` (a rough relative cost: the
        costliest are handed out first so the processes finish together).
    processes : int
        Drawing processes in all: the main process draws too and ``processes - 1`` workers
        are spawned. 1, a single job, or a platform that cannot start processes: all in the
        main process, one after another.
    progress : callable, optional
        ``progress(done, total)`` after each figure.

    Returns
    -------
    list
        What each job's ``draw`` returned.
    """
    total = len(jobs)
    done = 0
    results: list = [None] * total

    def tick() -> None:
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, total)

    order = sorted(range(total), key=lambda k: -float(getattr(jobs[k], "cost", 1.0)))
    pool = None
    if processes > 1 and total > 1:
        shared = _shareable(jobs)
        pool = _pool(processes - 1, shared)
    if pool is None:
        for k in range(total):
            results[k] = _run_job(jobs[k].draw, jobs[k].args, jobs[k].kwargs)
            tick()
        return results
    return _draw_shared(jobs, order, pool, shared, results, tick)


def _draw_shared(jobs, order, pool, shared, results, tick) -> list:
    """Hand the costliest jobs to the workers, keep two queued each, draw the rest here."""
    from concurrent.futures.process import BrokenProcessPool

    pending: dict = {}
    queue = list(order)
    width = 2 * pool._max_workers
    try:
        while queue or pending:
            while queue and len(pending) < width and pool is not None:
                k = queue.pop(0)
                args, kwargs = _swap(jobs[k], shared)
                pending[pool.submit(_run_job, jobs[k].draw, args, kwargs)] = k
            for fut in [f for f in pending if f.done()]:
                k = pending.pop(fut)
                try:
                    results[k] = fut.result()
                except BrokenProcessPool:
                    # a worker could not start (e.g. a script without a __main__ guard): the
                    # rest here, one after another
                    queue += [k, *pending.values()]
                    pending.clear()
                    pool.shutdown(wait=True, cancel_futures=True)
                    pool = None
                    break
                tick()
            if queue:  # draw the cheapest remaining one here meanwhile
                k = queue.pop()
                results[k] = _run_job(jobs[k].draw, jobs[k].args, jobs[k].kwargs)
                tick()
            elif pending:
                from concurrent.futures import FIRST_COMPLETED, wait

                wait(list(pending), return_when=FIRST_COMPLETED)
    finally:
        if pool is not None:
            pool.shutdown(wait=True, cancel_futures=True)
    return results
