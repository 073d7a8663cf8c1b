"""Refugium hypotheses scored side by side against dated records and genetic diversity."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

from timeslice.grid import cell_area, make_grid
from timeslice.series.hypotheses import compare_hypotheses


def _stack():
    g = make_grid(lon_min=0, lon_max=4, lat_min=40, lat_max=44, resolution=1.0)
    s = np.zeros((3, 4, 4), dtype="i1")
    s[0, :2, :] = 1          # baseline: southern half
    s[1, :, :2] = 1          # 21ka: western half
    s[2, :2, :2] = 1         # 6ka: south-west quarter
    return xr.Dataset({"suitable": (("slice", "lat", "lon"), s),
                       "land": (("lat", "lon"), np.ones((4, 4), bool))},
                      coords={"slice": ["baseline", "21ka", "6ka"],
                              "period": ("slice", ["now", "21 ka", "6 ka"]), **g.coords})


def test_two_hypotheses_by_hand():
    ds = _stack()
    # dated records: three in the south-west quarter, one in the north-east
    rec = pd.DataFrame({"lon": [0.5, 1.5, 0.5, 3.5], "lat": [40.5, 41.5, 41.5, 43.5]})
    t, layers = compare_hypotheses(ds, {"lgm_to_now": ["21ka", "baseline"],
                                        "all": ["baseline", "21ka", "6ka"]}, records=rec)
    t = t.set_index("hypothesis")
    area = cell_area(ds).values
    sw = area[:2, :2].sum()
    assert t.loc["lgm_to_now", "refugium_km2"] == pytest.approx(sw)  # south & west = SW
    assert t.loc["all", "refugium_km2"] == pytest.approx(sw)
    assert t.loc["lgm_to_now", "hits"] == 3 and t.loc["lgm_to_now", "n_records"] == 4
    share = sw / area.sum()
    # scipy's exact binomial test as the reference
    assert t.loc["lgm_to_now", "p_value_records"] == pytest.approx(
        stats.binomtest(3, 4, share, alternative="greater").pvalue)
    assert layers["refugium_lgm_to_now"].dims == ("lat", "lon")
    assert float(layers["stability_all"].max()) == 1.0


def test_diversity_scored_per_hypothesis(rng):
    ds = _stack()
    lon, lat = rng.uniform(0.1, 3.9, 30), rng.uniform(40.1, 43.9, 30)
    div = np.where((lon < 2) & (lat < 42), 0.8, 0.2) + rng.normal(0, 0.05, 30)
    sites = pd.DataFrame({"site": range(30), "lon": lon, "lat": lat, "diversity": div})
    t, _ = compare_hypotheses(ds, {"lgm_to_now": ["21ka", "baseline"]}, sites=sites)
    assert t.loc[0, "r_stability_diversity"] > 0.5
    assert 2 < t.loc[0, "n_effective"] <= 30
