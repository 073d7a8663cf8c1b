"""Scale behaviour of the transfer stage: exact counting table, bounded memory, identical
results on every scheduler."""

from __future__ import annotations

import tracemalloc

import dask
import dask.array as da
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from timeslice.errors import ConfigError
from timeslice.transfer import auto_chunks, project_slice, scheduler, set_chunk_cache
from timeslice.transfer.novelty import CountTable
from timeslice.transfer.blocks import BYTES_PER_CELL_FIXED, BYTES_PER_CELL_PER_VAR

VARS = ["bio1", "bio5", "bio12"]  # same as the fixtures in conftest.py


# ------------------------------------------------------------------------ exact count table
# Reference: numpy.searchsorted(side="left") on the sorted reference = number of values
# strictly smaller (the MESS convention of METHODS.md).

def _check_counts(ref: np.ndarray, x: np.ndarray) -> None:
    table = CountTable(np.sort(ref)[:, None])
    got = table.count_smaller(0, x.astype(np.float64))
    exp = np.searchsorted(np.sort(ref), x.astype(np.float64), side="left")
    np.testing.assert_array_equal(got, exp)


def test_count_table_adversarial(rng):
    # Integer values (many ties), values exactly at the reference extremes and on bin edges.
    ref = rng.integers(0, 50, size=2000).astype(float)
    lo, hi = ref.min(), ref.max()
    n_bins = CountTable(np.sort(ref)[:, None]).n_bins
    edges = lo + (hi - lo) * np.arange(n_bins + 1) / n_bins
    x = np.concatenate([
        rng.integers(-5, 55, size=5000).astype(float), [lo, hi, np.nextafter(lo, -1),
        np.nextafter(hi, 99), np.nextafter(lo, 99), np.nextafter(hi, -1)],
        edges, np.nextafter(edges, -np.inf), np.nextafter(edges, np.inf),
    ])
    _check_counts(ref, x)
    # float32 climate against a float64 reference drawn from the same float32 grid
    grid = rng.normal(10, 5, size=20000).astype(np.float32)
    _check_counts(grid[:3000].astype(np.float64), grid)


@settings(max_examples=60, deadline=None)
@given(
    ref=arrays(np.float64, st.integers(2, 60),
               elements=st.floats(-1e6, 1e6, allow_nan=False, allow_subnormal=False)),
    x=arrays(np.float64, st.integers(1, 60),
             elements=st.floats(-2e6, 2e6, allow_nan=False, allow_subnormal=False)),
)
def test_count_table_property(ref, x):
    if np.ptp(ref) == 0:
        ref = np.append(ref, ref[0] + 1.0)
    _check_counts(ref, np.concatenate([x, ref]))


# ------------------------------------------------------------------------------- schedulers

def _layers(model, reference, ds):
    return project_slice(model, ds, variables=VARS, reference=reference, threshold=0.5,
                         clamp=True)


def _assert_bit_identical(a: xr.Dataset, b: xr.Dataset) -> None:
    for v in a.data_vars:
        assert a[v].values.tobytes() == b[v].values.tobytes(), v


def test_local_cluster_threads_equals_threaded(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory(ny=24, nx=30, scale=2.0).chunk({"lat": 8, "lon": 10})
    lazy = _layers(fitted_logistic, reference_df, ds)
    with scheduler(threads=2):
        ref = lazy.compute()
    with scheduler(workers=2, processes=False) as client:
        assert client is not None and len(client.scheduler_info()["workers"]) == 2
        got = lazy.compute()
    _assert_bit_identical(ref, got)
    assert dask.config.get("scheduler", None) != "dask.distributed"  # restored on exit


@pytest.mark.slow
def test_local_cluster_processes_equals_threaded(fitted_logistic, reference_df, slice_factory):
    ds = slice_factory(ny=24, nx=30, scale=2.0).chunk({"lat": 8, "lon": 10})
    lazy = _layers(fitted_logistic, reference_df, ds)
    with scheduler(threads=1):
        ref = lazy.compute()
    with scheduler(workers=2, processes=True) as client:
        caches = client.run(lambda: __import__("netCDF4").get_chunk_cache()[0])
        got = lazy.compute()
    assert set(caches.values()) == {4 * 2**20}
    _assert_bit_identical(ref, got)


def test_scheduler_errors():
    with pytest.raises(ConfigError, match="not both"):
        with scheduler("tcp://127.0.0.1:8786", workers=2):
            pass
    with pytest.raises(ConfigError, match="`workers` must be a positive integer, got 0"):
        with scheduler(workers=0):
            pass
    with pytest.raises(ConfigError, match="`threads`"):
        with scheduler(threads=-1):
            pass
    # a closed local port: refused at once, reported as one line naming the option
    with pytest.raises(ConfigError, match="could not reach the dask scheduler at `scheduler`"):
        with scheduler("tcp://127.0.0.1:9", timeout=1):
            pass


def test_chunk_cache_is_set():
    assert set_chunk_cache()[0] == 4 * 2**20


# --------------------------------------------------------------------------- bounded memory

def test_memory_bounded_by_chunk_budget(fitted_logistic, reference_df):
    # A lazily generated grid whose working set (800 x 700 cells x ~184 B) is about
    # 100 MB, far above a 4 MB chunk budget; peak traced memory must follow the chunks.
    ny, nx = 800, 700
    budget_mb = 4.0
    chunks = auto_chunks({"lat": ny, "lon": nx}, n_variables=len(VARS), budget_mb=budget_mb)
    rs = da.random.RandomState(7)
    data = {
        v: (("lat", "lon"), rs.normal(0.2, 1.5, size=(ny, nx), chunks=(chunks["lat"], chunks["lon"]))
            .astype(np.float32))
        for v in VARS
    }
    ds = xr.Dataset(data, coords={"lat": np.linspace(-60, 80, ny), "lon": np.linspace(-180, 179, nx)})
    out = project_slice(fitted_logistic, ds, variables=VARS, reference=reference_df,
                        threshold=0.5, chunks="auto", chunk_budget_mb=budget_mb)
    means = [out[v].astype("f8").mean() for v in ("suitability", "mess", "nt1", "nt2")]
    whole = ny * nx * (BYTES_PER_CELL_PER_VAR * len(VARS) + BYTES_PER_CELL_FIXED)
    tracemalloc.start()
    try:
        with scheduler(threads=2):
            vals = dask.compute(*means)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    print(f"peak {peak / 1e6:.1f} MB, whole-grid estimate {whole / 1e6:.0f} MB")
    assert all(np.isfinite(v) for v in vals)
    # Generous margin: 2 threads x budget, dask keeping a few chunks in flight, plus overhead.
    assert peak < 12 * budget_mb * 1e6, f"peak {peak / 1e6:.1f} MB for a {budget_mb} MB budget"
    assert peak < whole / 4


def test_count_table_pickles_small_and_rebuilds(rng):
    import pickle

    ref = np.sort(rng.normal(size=(5000, 3)), axis=0)
    table = CountTable(ref)
    blob = pickle.dumps(table)
    assert len(blob) < ref.nbytes + 10_000  # only the sorted reference travels, not the tables
    again = pickle.loads(blob)
    x = rng.normal(0, 1.5, size=2000)
    for i in range(3):
        np.testing.assert_array_equal(again.similarity(i, x), table.similarity(i, x))
    assert pickle.loads(blob) is again  # rebuilt once per process
