"""The pipeline's transfer of cached slices goes file to file by row blocks
(:func:`timeslice.transfer.files.project_file`) and gives what the in-memory transfer gives.

Self-consistency check of two paths of this package against each other (the formulas of each
layer are checked against their published definitions elsewhere, in tests/transfer): the
same invented demo world is harmonised and fitted once, then transferred with a cache folder
(streamed from the cached slice files into the transfer entries) and without one (slices in
memory, :func:`timeslice.transfer.project_slice`); every layer must be equal bit for bit.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from fault_inputs import one_model_demo

from timeslice.cache import StageCache
from timeslice.config import load_config
from timeslice.pipeline import fit_stage, harmonise_stage, transfer_stage
from timeslice.transfer import files


@pytest.fixture(scope="module")
def both(tmp_path_factory):
    root = tmp_path_factory.mktemp("streamed_transfer")
    cfg = load_config(one_model_demo(root / "demo_data"))
    cache = StageCache(root / ".cache")
    baseline, slices, _ = harmonise_stage(cfg, cache)
    with warnings.catch_warnings():  # a coarse world: fewer background cells than asked for
        warnings.simplefilter("ignore")
        fit, _ = fit_stage(cfg, baseline, cache)
    calls = []
    original = files.project_file
    files.project_file = lambda *a, **k: calls.append(a[1]) or original(*a, **k)
    try:
        streamed = transfer_stage(cfg, fit, [baseline, *slices], cache)
    finally:
        files.project_file = original
    memory = transfer_stage(cfg, fit, [ds.compute() for ds in (baseline, *slices)],
                            StageCache(None))
    return cache, streamed, memory, calls, len(slices) + 1


def test_cached_slices_are_transferred_file_to_file(both):
    cache, _, _, calls, n_slices = both
    entries = sorted((cache.root / "transfer").glob("*.nc"))
    assert len(entries) == n_slices
    # every slice went from its cached harmonise file through project_file
    assert len(calls) == n_slices
    assert all(str(c).startswith(str(cache.root / "harmonise")) for c in calls)


def test_the_streamed_transfer_equals_the_in_memory_one(both):
    _, streamed, memory, _, _ = both
    assert set(streamed.data_vars) == set(memory.data_vars)
    for v in memory.data_vars:
        a, b = streamed[v].values, memory[v].values
        assert a.dtype == b.dtype, v
        np.testing.assert_array_equal(a, b, err_msg=v)
    for v in ("suitability", "suitable", "mess", "nt1", "nt2"):
        if v in memory:
            for key in ("units", "long_name", "standard_name", "flag_values", "flag_meanings"):
                assert str(streamed[v].attrs.get(key)) == str(memory[v].attrs.get(key)), (v, key)
