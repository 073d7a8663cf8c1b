"""Property tests of the niche stage's invariants (hypothesis)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from timeslice.grid import haversine_km
from timeslice.niche import evaluate as ev
from timeslice.niche.data import thin

scores = arrays(np.float64, st.integers(1, 40), elements=st.floats(0, 1, allow_nan=False))


@settings(max_examples=30, deadline=None)
@given(p=scores, b=scores)
def test_auc_is_antisymmetric_and_bounded(p, b):
    a = ev.auc(p, b)
    assert 0.0 <= a <= 1.0
    assert abs(a + ev.auc(b, p) - 1.0) < 1e-12  # ranks are symmetric


@settings(max_examples=30, deadline=None)
@given(p=scores, b=scores, t=st.floats(0, 1))
def test_tss_bounded_and_thresholds_in_range(p, b, t):
    assert -1.0 <= ev.tss(p, b, t) <= 1.0
    for rule in ("mtp", "p10", "max_sss"):
        thr = ev.threshold(p, b, rule=rule)
        assert min(p.min(), b.min()) <= thr <= max(p.max(), b.max())
    assert ev.threshold(p, rule="mtp") <= ev.threshold(p, rule="p10")


@settings(max_examples=25, deadline=None)
@given(p=scores, b=scores)
def test_boyce_is_a_correlation(p, b):
    r = ev.boyce(p, b)
    assert np.isnan(r) or -1.0 - 1e-12 <= r <= 1.0 + 1e-12


@settings(max_examples=15, deadline=None)
@given(
    seed=st.integers(0, 2**31 - 1),
    n=st.integers(2, 120),
    d=st.floats(5.0, 300.0),
)
def test_thinning_leaves_no_close_pair(seed, n, d):
    rng = np.random.default_rng(seed)
    rec = pd.DataFrame({"lon": rng.uniform(-20, 20, n), "lat": rng.uniform(-60, 60, n)})
    out = thin(rec, min_distance_km=d, seed=seed, repeats=2)
    assert 1 <= len(out) <= n
    if len(out) > 1:
        i, j = np.triu_indices(len(out), 1)
        lon, lat = out["lon"].to_numpy(), out["lat"].to_numpy()
        assert haversine_km(lon[i], lat[i], lon[j], lat[j]).min() >= d * (1 - 1e-9)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), k=st.integers(2, 6), scheme=st.sampled_from(["random", "checkerboard"]))
def test_folds_are_labels_in_range(seed, k, scheme):
    rng = np.random.default_rng(seed)
    lon, lat = rng.uniform(-30, 30, 300), rng.uniform(-50, 50, 300)
    f = ev.spatial_folds(lon, lat, block_km=200, n_folds=k, seed=seed, scheme=scheme)
    assert f.shape == (300,) and f.min() >= 0 and f.max() < k
