"""Stage cache entries come back lazily: chunked, file-backed, with the values that were stored.

The checks compare against the stored arrays themselves (exact equality, numpy), so they need no
outside reference. The overwrite-while-open check relies on POSIX rename semantics (an open file
keeps its data after another file is renamed onto its name; documented for rename(2)); it is
skipped where the platform does not give them.
"""

from __future__ import annotations

import sys

import dask.array as da
import numpy as np
import pytest
import xarray as xr

from timeslice.cache import StageCache


def _flags() -> xr.Dataset:
    suitable = xr.DataArray(np.array([[1, 0, -1], [-1, 1, 0]], dtype="int8"), dims=("lat", "lon"),
                            attrs={"flag_values": np.array([-1, 0, 1], dtype="int8")})
    suitable.encoding["_FillValue"] = -1
    return xr.Dataset(
        {"suitable": suitable,
         "land": (("lat", "lon"), np.array([[True, True, False], [False, True, True]])),
         "suitability": (("lat", "lon"), np.array([[0.5, np.nan, 0.25], [0.1, 1.0, 0.0]], "f4"))},
        coords={"lat": ("lat", [10.0, 11.0], {"units": "degrees_north"}),
                "lon": ("lon", [1.0, 2.0, 3.0], {"units": "degrees_east"})},
        attrs={"slice_label": "now"},
    )


def _is_lazy(var: xr.DataArray) -> bool:
    return isinstance(var.data, da.Array)


def test_a_stored_entry_comes_back_lazy_with_the_same_values(tmp_path):
    ds = _flags()
    cache = StageCache(tmp_path)
    back = cache.store("transfer", "k", ds)
    for got in (back, cache.load("transfer", "k")):
        assert all(_is_lazy(got[v]) for v in ("suitable", "land", "suitability"))
        # the int8 flag layer keeps its -1 (read raw, not masked to NaN)
        assert got["suitable"].dtype == np.int8
        assert got["suitable"].values.tolist() == [[1, 0, -1], [-1, 1, 0]]
        assert got["land"].dtype == bool
        np.testing.assert_array_equal(got["land"].values, ds["land"].values)
        np.testing.assert_array_equal(got["suitability"].values, ds["suitability"].values)
        # coordinates carry the attributes they were stored with (no fill value added)
        assert dict(got["lat"].attrs) == {"units": "degrees_north"}
        assert got.attrs["slice_label"] == "now"
    assert cache.misses == ["transfer/k"] and cache.hits == ["transfer/k"]


def test_a_lazy_result_is_written_chunk_by_chunk_and_reads_back_equal(tmp_path):
    ds = _flags().chunk({"lat": 1})
    assert _is_lazy(ds["suitability"])
    back = StageCache(tmp_path).dataset("harmonise", "k", lambda: ds)
    np.testing.assert_array_equal(back["suitability"].values, ds["suitability"].values)
    np.testing.assert_array_equal(back["land"].values, ds["land"].values)


def test_a_hit_does_not_compute_and_is_lazy(tmp_path):
    StageCache(tmp_path).dataset("harmonise", "k", _flags)

    def fail():
        raise AssertionError("a cached entry was computed again")

    cache = StageCache(tmp_path)
    hit = cache.dataset("harmonise", "k", fail)
    assert _is_lazy(hit["suitability"]) and cache.hits == ["harmonise/k"] and not cache.misses


def test_without_a_cache_folder_the_computed_value_is_returned_in_memory():
    ds = _flags().chunk({"lat": 1})
    got = StageCache(None).dataset("harmonise", "k", lambda: ds)
    assert not _is_lazy(got["suitability"])
    np.testing.assert_array_equal(got["suitable"].values, ds["suitable"].values)


@pytest.mark.skipif(sys.platform == "win32", reason="needs POSIX rename onto an open file")
def test_force_overwrites_an_entry_that_is_still_open(tmp_path):
    old = _flags()
    opened = StageCache(tmp_path).dataset("transfer", "k", lambda: old)  # open, not yet read
    new = old.assign(suitability=old["suitability"] * 0 + 0.75)
    forced = StageCache(tmp_path, force=True)
    again = forced.dataset("transfer", "k", lambda: new)
    assert forced.misses == ["transfer/k"]
    np.testing.assert_array_equal(again["suitability"].values, new["suitability"].values)
    # the dataset opened before the overwrite still reads the file it opened
    np.testing.assert_array_equal(opened["suitability"].values, old["suitability"].values)
    fresh = StageCache(tmp_path).load("transfer", "k")
    np.testing.assert_array_equal(fresh["suitability"].values, new["suitability"].values)
    assert not list((tmp_path / "transfer").glob("*.part"))
