"""The threaded scheduler runs one BLAS thread per dask thread (no oversubscription)."""

from __future__ import annotations

from threadpoolctl import threadpool_info

from timeslice.transfer.scheduler import scheduler


def _blas_threads() -> set[int]:
    return {i["num_threads"] for i in threadpool_info() if i.get("user_api") == "blas"}


def test_threads_scheduler_limits_blas_to_one_thread():
    with scheduler(threads=2):
        inside = _blas_threads()
    assert inside <= {1}
