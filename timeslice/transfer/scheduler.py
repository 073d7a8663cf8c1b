"""Where the dask graph of a run is computed: local threads (default), an existing
``dask.distributed`` scheduler, or a local cluster started on request.

The graph is the same in every case; only the executor changes, and results are bit-identical
(every chunk is computed by the same numpy code, whatever runs it). A local cluster costs
several hundred MB of memory when idle and gave no speed-up on a 2-core machine, so it is never
the default.

Every executor gets the small netCDF chunk cache of :func:`set_chunk_cache`: netCDF-C's default
(64 MiB per open variable) makes peak memory grow with the number of variables read at once.
"""

from __future__ import annotations

import contextlib
import logging
from collections.abc import Iterator
from typing import Any

import dask

from timeslice.errors import ConfigError

__all__ = ["NETCDF_CHUNK_CACHE_BYTES", "get_client", "one_blas_thread", "scheduler", "set_chunk_cache"]

#: netCDF chunk-cache size per variable, bytes (our choice, measured: 8 variables peaked at
#: 1.27 GB with the 64 MiB default and 0.37 GB with 4 MiB).
NETCDF_CHUNK_CACHE_BYTES = 4 * 2**20

#: Seconds to wait for an existing scheduler before giving up.
CONNECT_TIMEOUT_S = 10


def set_chunk_cache(size: int = NETCDF_CHUNK_CACHE_BYTES) -> tuple[int, int, float]:
    """Set the netCDF-C chunk cache for variables opened from now on in this process.

    Parameters
    ----------
    size : int
        Cache size in bytes per open variable.

    Returns
    -------
    tuple
        The cache settings now in force ``(size, nelems, preemption)``.
    """
    import netCDF4

    netCDF4.set_chunk_cache(int(size))
    return netCDF4.get_chunk_cache()


@contextlib.contextmanager
def one_blas_thread() -> Iterator[None]:
    """One BLAS thread per dask thread for the block.

    dask already runs one task per core; a BLAS that also starts one thread per core inside
    each task (the Mahalanobis products of the ellipsoid and ExDet) oversubscribes the cores.
    Measured here (2 cores, load ~2.3): the ellipsoid's prediction of 4 million cells x 8
    predictors on dask threads took 1.21-1.31 CPU s with OpenBLAS's default 2 threads per task
    and 0.25-0.28 CPU s with one.
    """
    try:
        from threadpoolctl import threadpool_limits  # a scikit-learn dependency
    except ImportError:  # pragma: no cover - scikit-learn always brings it
        yield
        return
    with threadpool_limits(limits=1, user_api="blas"):
        yield


def _check_workers(workers: Any) -> int | None:
    if workers is None:
        return None
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise ConfigError(f"`workers` must be a positive integer, got {workers!r}")
    return workers


def get_client(
    address: str | None = None,
    workers: int | None = None,
    *,
    processes: bool = True,
    threads_per_worker: int = 1,
    chunk_cache: int = NETCDF_CHUNK_CACHE_BYTES,
    timeout: float = CONNECT_TIMEOUT_S,
):
    """Return a ``distributed.Client`` for `address` or a new local cluster, or None for threads.

    Parameters
    ----------
    address : str, optional
        Address of a running ``dask.distributed`` scheduler (``tcp://host:8786``). Nothing is
        started; the same graph is sent there. Workers must have ``timeslice`` installed.
    workers : int, optional
        Start a local cluster of this many workers (only when `address` is None).
    processes : bool
        Local cluster workers as processes (True) or threads of this process (False).
    threads_per_worker : int
        Threads of each local worker.
    chunk_cache : int
        netCDF chunk cache per variable in bytes, set on the client process and every worker.
    timeout : float
        Seconds to wait for the scheduler at `address`.

    Returns
    -------
    distributed.Client or None
        None means: use dask's local threaded scheduler (the default). The caller closes a
        returned client (and, for a local cluster, ``client.cluster``); :func:`scheduler` does
        both.

    Raises
    ------
    ConfigError
        Both `address` and `workers` given, a bad worker count, or an unreachable scheduler.
    """
    workers = _check_workers(workers)
    set_chunk_cache(chunk_cache)
    if address is not None and workers is not None:
        raise ConfigError(
            "give either `scheduler` (the address of a running dask scheduler) or `workers` "
            f"(start a local cluster), not both (got {address!r} and {workers})"
        )
    if address is None and workers is None:
        return None
    from distributed import Client, LocalCluster

    if address is not None:
        if not isinstance(address, str) or not address.strip():
            raise ConfigError(f"`scheduler` must be an address like 'tcp://host:8786', got {address!r}")
        try:
            client = Client(address, timeout=timeout)
        except (OSError, TimeoutError, ValueError) as err:
            raise ConfigError(
                f"could not reach the dask scheduler at `scheduler` = {address!r} within "
                f"{timeout:g} s ({type(err).__name__}); start it, check the address, or "
                "leave `scheduler` unset to use local threads"
            ) from err
    else:
        if isinstance(threads_per_worker, bool) or not isinstance(threads_per_worker, int) \
                or threads_per_worker < 1:
            raise ConfigError(
                f"`threads_per_worker` must be a positive integer, got {threads_per_worker!r}"
            )
        cluster = LocalCluster(
            n_workers=workers,
            threads_per_worker=threads_per_worker,
            processes=processes,
            dashboard_address=None,  # no web server: nothing listens beyond the cluster itself
            silence_logs=logging.WARNING,
        )
        client = Client(cluster)
    # On the workers there are now; a worker joining later keeps netCDF's default cache.
    client.run(set_chunk_cache, int(chunk_cache))
    return client


@contextlib.contextmanager
def scheduler(
    address: str | None = None,
    workers: int | None = None,
    *,
    threads: int | None = None,
    processes: bool = True,
    chunk_cache: int = NETCDF_CHUNK_CACHE_BYTES,
    timeout: float = CONNECT_TIMEOUT_S,
) -> Iterator[Any]:
    """Context manager computing every dask graph inside it on the chosen executor.

    Parameters
    ----------
    address : str, optional
        Running ``dask.distributed`` scheduler to send graphs to.
    workers : int, optional
        Start a local cluster of this many single-threaded workers for the block.
    threads : int, optional
        Number of local threads (default: dask's choice, one per core); only without
        `address` and `workers`.
    processes : bool
        Local cluster workers as processes (True) or threads (False).
    chunk_cache : int
        netCDF chunk cache per variable, bytes.
    timeout : float
        Seconds to wait for the scheduler at `address`.

    Yields
    ------
    distributed.Client or None
        The client while it is the default scheduler, or None for threads.

    Examples
    --------
    >>> from timeslice.transfer.scheduler import scheduler
    >>> with scheduler(threads=2) as client:
    ...     print(client)
    None
    """
    if threads is not None:
        if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
            raise ConfigError(f"`threads` must be a positive integer, got {threads!r}")
        if address is not None or workers is not None:
            raise ConfigError("`threads` applies to the local threaded scheduler only; drop it "
                              "when giving `scheduler` or `workers`")
    client = get_client(
        address, workers, processes=processes, chunk_cache=chunk_cache, timeout=timeout
    )
    if client is None:
        opts: dict[str, Any] = {"scheduler": "threads"}
        if threads is not None:
            opts["num_workers"] = threads
        with dask.config.set(**opts), one_blas_thread():
            yield None
        return
    cluster = client.cluster if address is None else None
    try:
        with client.as_current():
            yield client
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
