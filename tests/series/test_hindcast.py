"""Hindcast check of dated records."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy.stats import binom, binomtest

from timeslice.errors import DataError, TimesliceWarning
from timeslice.grid import cell_area, make_grid
from timeslice.series.hindcast import assign, check, poisson_binomial_sf, slice_windows


def _paleo(rng=None):
    g = make_grid(lon_min=0, lon_max=10, lat_min=40, lat_max=50, resolution=1.0)
    ny, nx = g.sizes["lat"], g.sizes["lon"]
    s = np.zeros((3, ny, nx), np.int8)
    s[:, :, :5] = 1  # west half suitable
    s[:, 0, :] = -1  # bottom row sea
    return xr.Dataset(
        {"suitable": (("slice", "lat", "lon"), s)},
        coords={"slice": ["21ka", "6ka", "baseline"],
                "year": ("slice", [1950.0 - 21000, 1950.0 - 6000, 1990.0]),
                "lat": g.lat, "lon": g.lon},
    )


def test_slice_windows():
    # midpoints between slice years; outer windows as wide outward as inward
    w = slice_windows([-19050.0, -4050.0, 1990.0])
    np.testing.assert_allclose(w, [[-26550, -11550], [-11550, -1030], [-1030, 5010]])
    w = slice_windows([-19050.0, -4050.0, 1990.0], max_offset_years=2000)
    np.testing.assert_allclose(w[0], [-21050, -17050])


def test_assign_nearest_slice_and_cell():
    ds = _paleo()
    rec = pd.DataFrame({"lon": [1.2, 8.9, 2.0, 2.0], "lat": [45.3, 47.0, 40.5, 45.0],
                        "age_bp": [20000, 5000, 6500, 22000]})
    a = assign(rec, ds)
    assert list(a["slice"]) == ["21ka", "6ka", "6ka", "21ka"]
    assert list(a["status"]) == ["ok", "ok", "not_land", "ok"]
    assert list(a["in_suitable"]) == [True, False, False, True]
    np.testing.assert_allclose(a["offset_years"], [1000, 1000, -500, -1000])


def test_check_against_scipy_binomtest():
    ds = _paleo()
    rec = pd.DataFrame({"lon": [0.5, 1.5, 2.5, 3.5, 6.5, 0.5, 1.5, 7.5],
                        "lat": [45.5, 46.5, 47.5, 48.5, 44.5, 41.5, 42.5, 43.5],
                        "age_bp": [21000, 20500, 21500, 19000, 22000, 6000, 6100, 5900]})
    out = check(rec, ds)
    area = cell_area(ds).values
    s = ds["suitable"].values[0]
    p = area[s == 1].sum() / area[s >= 0].sum()
    row = out.set_index("slice").loc["21ka"]
    assert row["n_records"] == 5 and row["n_hits"] == 4
    assert row["expected_share"] == pytest.approx(p)
    # reference: scipy.stats.binomtest, one-sided (scipy 1.17)
    assert row["p_value"] == pytest.approx(binomtest(4, 5, p, alternative="greater").pvalue)
    allrow = out.set_index("slice").loc["all"]
    assert allrow["n_records"] == 8 and allrow["n_hits"] == 6
    # every slice has the same suitable share here, so the pooled test is binomial too
    assert allrow["p_value"] == pytest.approx(binomtest(6, 8, p, alternative="greater").pvalue)


def test_poisson_binomial_tail():
    # equal p: the binomial upper tail (scipy.stats.binom.sf(k - 1, n, p))
    assert poisson_binomial_sf(3, np.full(10, 0.2)) == pytest.approx(binom.sf(2, 10, 0.2))
    # two trials by hand: P(K >= 1) = 1 - (1 - 0.3)(1 - 0.6) = 0.72 [computed]
    assert poisson_binomial_sf(1, np.array([0.3, 0.6])) == pytest.approx(0.72)
    assert poisson_binomial_sf(2, np.array([0.3, 0.6])) == pytest.approx(0.18)


def test_out_of_window_records_warn_and_skip():
    ds = _paleo()
    rec = pd.DataFrame({"lon": [0.5, 0.5, 0.5], "lat": [45.5, 45.5, 45.5],
                        "age_bp": [21000, 60000, 45000]})
    with pytest.warns(TimesliceWarning, match=r"2 of 3 records skipped.*outside_windows"):
        out = check(rec, ds, source="dated_records.csv")
    assert out.set_index("slice").loc["all", "n_skipped"] == 2


def test_all_records_outside_is_an_error():
    ds = _paleo()
    rec = pd.DataFrame({"lon": [0.5], "lat": [45.5], "age_bp": [90000]})
    with pytest.raises(DataError, match=r"dated_records.csv: none of the 1 records"):
        check(rec, ds, source="dated_records.csv")


def test_bad_record_tables():
    ds = _paleo()
    with pytest.raises(DataError, match=r"missing column\(s\) \['age_bp'\]"):
        check(pd.DataFrame({"lon": [1.0], "lat": [45.0]}), ds, source="x.csv")
    with pytest.raises(DataError, match="non-numeric"):
        check(pd.DataFrame({"lon": [1.0], "lat": [45.0], "age_bp": ["old"]}), ds)
    dup = ds.assign_coords(year=("slice", [0.0, 0.0, 1990.0]))
    with pytest.raises(DataError, match="several slices at year 0"):
        check(pd.DataFrame({"lon": [1.0], "lat": [45.0], "age_bp": [10]}), dup)


def test_ambiguous_ages_flagged():
    ds = _paleo()
    # 6ka window is -11550..-1030 CE; a record at 9000 BP (-7050 CE) with SD 1000 stays inside,
    # with SD 3000 its 2-SD range (-13050..-1050) reaches the 21ka window
    rec = pd.DataFrame({"lon": [0.5, 0.5], "lat": [45.5, 45.5], "age_bp": [9000, 9000],
                        "age_sd": [1000, 3000]})
    a = assign(rec, ds)
    assert list(a["ambiguous"]) == [False, True]
    out = check(rec, ds)
    assert out.set_index("slice").loc["6ka", "n_ambiguous"] == 1
