"""Tables are stage cache entries of their own (CSV with their dtypes), not JSON in attributes.

The unit checks compare a table with itself after the round trip (exact equality). The
harmonise check runs the stage on a small invented demo world twice, with and without a cache
folder, and asks for identical prepared values and input tables; the elevation check compares
the prepared baseline with the layer table (:mod:`timeslice.layers`), whose name follows the
CF standard name table (``surface_altitude``: the height of the surface above the geoid, for
terrain; from the CF table's description, quoted from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from fault_inputs import one_model_demo

from timeslice.cache import StageCache
from timeslice.config import load_config
from timeslice.layers import spec
from timeslice.pipeline import harmonise_stage


def _table() -> pd.DataFrame:
    return pd.DataFrame({
        "slice": ["baseline", "21ka", "6ka"],
        "period": ["1981-2010", "1-30", ""],            # text that looks like numbers or nothing
        "area_km2": [1 / 3, np.nan, 2.5e-12],
        "cells": np.array([1, 2, 3], dtype="int32"),
        "share": np.array([0.1, 0.2, 0.3], dtype="float32"),
        "filled": [True, False, True],
    })


def test_a_table_comes_back_with_its_dtypes_and_exact_values(tmp_path):
    cache = StageCache(tmp_path)
    first = cache.table("harmonise", "k", _table)
    again = cache.table("harmonise", "k", lambda: pytest.fail("computed again"))
    pd.testing.assert_frame_equal(first, _table())
    pd.testing.assert_frame_equal(again, _table(), check_exact=True)
    assert again["period"].tolist() == ["1981-2010", "1-30", ""]
    assert cache.misses == ["harmonise/k.csv"] and cache.hits == ["harmonise/k.csv"]
    assert (tmp_path / "harmonise" / "k.csv").is_file()


def test_an_empty_table_and_force(tmp_path):
    cache = StageCache(tmp_path)
    assert cache.table("s", "empty", pd.DataFrame).empty
    assert StageCache(tmp_path).table("s", "empty", lambda: pytest.fail("computed")).empty
    forced = StageCache(tmp_path, force=True)
    forced.table("s", "empty", lambda: _table())
    assert forced.misses == ["s/empty.csv"]
    pd.testing.assert_frame_equal(StageCache(tmp_path).table("s", "empty", pd.DataFrame), _table())


def test_a_damaged_table_entry_is_computed_again(tmp_path):
    cache = StageCache(tmp_path)
    cache.table("s", "k", _table)
    (tmp_path / "s" / "k.csv").write_text("not a table")
    with pytest.warns(Warning, match="could not be read"):
        back = StageCache(tmp_path).table("s", "k", _table)
    pd.testing.assert_frame_equal(back, _table())


def test_without_a_cache_folder_the_table_is_computed_each_time():
    calls = []
    cache = StageCache(None)
    for _ in range(2):
        cache.table("s", "k", lambda: calls.append(1) or _table())
    assert len(calls) == 2


@pytest.fixture(scope="module")
def harmonised(tmp_path_factory):
    root = tmp_path_factory.mktemp("table_cache")
    cfg = load_config(one_model_demo(root / "demo_data"))
    cached = harmonise_stage(cfg, StageCache(root / ".cache"))
    rerun = StageCache(root / ".cache")
    again = harmonise_stage(cfg, rerun)
    assert rerun.hits and not rerun.misses  # slices and their tables all reused
    assert sum(h.endswith(".csv") for h in rerun.hits) == len(again[1]) + 1
    plain = harmonise_stage(cfg, StageCache(None))
    return cached, again, plain


def test_harmonise_with_a_cache_gives_what_it_gives_without(harmonised):
    (b0, s0, t0), (b1, s1, t1), (b2, s2, t2) = harmonised
    for name in ("inputs", "slice_land"):
        pd.testing.assert_frame_equal(t0[name], t2[name], check_exact=True)
        pd.testing.assert_frame_equal(t1[name], t2[name], check_exact=True)
    for lazy, rerun, mem in zip([b0, *s0], [b1, *s1], [b2, *s2]):
        assert set(lazy.data_vars) == set(mem.data_vars)
        for v in mem.data_vars:
            assert lazy[v].chunks is not None and rerun[v].chunks is not None, v
            np.testing.assert_array_equal(lazy[v].values, mem[v].values, err_msg=v)
            np.testing.assert_array_equal(rerun[v].values, mem[v].values, err_msg=v)
        # the input table is its own cache entry, not an attribute of the slice
        assert "input_rows" not in lazy.attrs and "input_rows" not in mem.attrs


def test_the_prepared_elevation_is_named_as_in_the_layer_table(harmonised):
    (baseline, slices, _), _, (plain, _, _) = harmonised
    layer = spec("elevation")
    assert layer.standard_name == "surface_altitude"
    for ds in (baseline, plain, *slices):
        attrs = ds["elevation"].attrs
        assert attrs["standard_name"] == layer.standard_name
        assert attrs["units"] == layer.units and attrs["long_name"] == layer.long_name
