"""The stage cache returns exactly what was stored (dtypes, fill values, booleans)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from timeslice.cache import StageCache


def test_roundtrip_keeps_dtypes_and_flags(tmp_path):
    suitable = xr.DataArray(np.array([[1, 0], [-1, 1]], dtype="int8"), dims=("lat", "lon"),
                            attrs={"flag_values": np.array([-1, 0, 1], dtype="int8")})
    suitable.encoding["_FillValue"] = -1
    ds = xr.Dataset({"suitable": suitable,
                     "land": (("lat", "lon"), np.array([[True, True], [False, True]])),
                     "suitability": (("lat", "lon"), np.array([[0.5, np.nan], [0.1, 1.0]], "float32"))})
    cache = StageCache(tmp_path)
    cache.store("transfer", "k", ds)
    back = cache.load("transfer", "k")
    assert back["suitable"].dtype == np.int8 and back["suitable"].values.tolist() == [[1, 0], [-1, 1]]
    assert back["land"].dtype == bool
    np.testing.assert_array_equal(back["suitability"].values, ds["suitability"].values)
    assert cache.hits == ["transfer/k"] and cache.misses == ["transfer/k"]
