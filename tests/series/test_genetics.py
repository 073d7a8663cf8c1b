"""Stability against genetic diversity: Dutilleul's modified t-test and site sampling."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats

from timeslice.errors import DataError
from timeslice.grid import haversine_km, make_grid
from timeslice.series.genetics import (
    distance_to_mask_km,
    modified_t_test,
    read_diversity_table,
    sample_layer,
    stability_vs_diversity,
)


def _sites(rng, n=40):
    return rng.uniform(-10, 10, n), rng.uniform(40, 50, n)


def test_independent_covariance_gives_the_plain_pearson_test(rng):
    # with Sigma proportional to I the effective size is n and F = t^2: the p-value is
    # scipy.stats.pearsonr's (two-sided)
    lon, lat = _sites(rng)
    x, y = rng.normal(size=40), rng.normal(size=40)
    y = y + 0.4 * x
    n = x.size
    res = modified_t_test(x, y, lon, lat, covariances=(2.0 * np.eye(n), 0.5 * np.eye(n)))
    r, p = stats.pearsonr(x, y)
    assert res["n_effective"] == pytest.approx(n)
    assert res["r"] == pytest.approx(r)
    assert res["p_value"] == pytest.approx(p, rel=1e-9)


def test_equicorrelated_covariance_effective_size_by_hand(rng):
    # Sigma = (1 - rho) I + rho J: B J = 0, so B Sigma = (1 - rho) B and M = 1 + (n - 1) = n
    # (a shared offset does not reduce the information on the correlation)
    lon, lat = _sites(rng, 20)
    n = 20
    S = 0.6 * np.eye(n) + 0.4 * np.ones((n, n))
    x, y = rng.normal(size=n), rng.normal(size=n)
    assert modified_t_test(x, y, lon, lat, covariances=(S, S))["n_effective"] == pytest.approx(n)


def test_autocorrelated_fields_have_fewer_effective_sites(rng):
    # two independent smooth fields sampled at many close sites: the naive test is far too
    # confident, the modified test is not (common practice; Dutilleul 1993)
    n = 80
    lon, lat = _sites(rng, n)
    d = haversine_km(lon[:, None], lat[:, None], lon[None, :], lat[None, :])
    C = np.exp(-d / 400.0)  # exponential covariance, range 400 km
    L = np.linalg.cholesky(C + 1e-9 * np.eye(n))
    false_naive = false_mod = 0
    m_eff = []
    for _ in range(60):
        x, y = L @ rng.normal(size=n), L @ rng.normal(size=n)
        res = modified_t_test(x, y, lon, lat)
        m_eff.append(res["n_effective"])
        false_naive += res["p_value_naive"] < 0.05
        false_mod += res["p_value"] < 0.05
    assert np.median(m_eff) < 0.5 * n
    assert false_mod < false_naive
    assert false_mod / 60 < 0.15  # near the nominal 5 % (loose: 60 draws)


def test_independent_sites_keep_about_n(rng):
    lon, lat = _sites(rng, 60)
    m = [modified_t_test(rng.normal(size=60), rng.normal(size=60), lon, lat)["n_effective"]
         for _ in range(20)]
    assert 0.7 * 60 < np.median(m) <= 60


def _series():
    g = make_grid(lon_min=0, lon_max=10, lat_min=40, lat_max=50, resolution=1.0)
    lat2, lon2 = np.meshgrid(g.lat.values, g.lon.values, indexing="ij")
    stab = np.clip((lat2 - 40) / 10.0, 0, 1)
    ref = (lat2 > 48) & (lon2 > 4)
    return xr.Dataset({"stability_window": (("lat", "lon"), stab),
                       "refugium_window": (("lat", "lon"), ref)}, coords=g.coords)


def test_sampling_and_distance_by_hand():
    ds = _series()
    # (2.5, 45.5) lies in the cell centred there; a point off the grid is NaN
    v = sample_layer(ds["stability_window"], [2.5, 20.0], [45.5, 45.5])
    assert v[0] == pytest.approx(0.55) and np.isnan(v[1])
    # refugium cells are lon > 4, lat > 48: the nearest centre to (2.5, 49.5) is (4.5, 49.5)
    d = distance_to_mask_km(ds["refugium_window"], [2.5, 6.5], [49.5, 48.5])
    assert d[0] == pytest.approx(float(haversine_km(2.5, 49.5, 4.5, 49.5)))
    assert d[1] == 0.0


def test_stability_vs_diversity_table(tmp_path, rng):
    ds = _series()
    lon, lat = rng.uniform(0.2, 9.8, 30), rng.uniform(40.2, 49.8, 30)
    div = 0.2 + 0.5 * (lat - 40) / 10 + rng.normal(0, 0.02, 30)  # diversity rises with stability
    path = tmp_path / "pops.csv"
    pd.DataFrame({"population": [f"p{i}" for i in range(30)], "lon": lon, "lat": lat,
                  "hd": div}).to_csv(path, index=False)
    sites = read_diversity_table(path)
    assert sites.attrs["diversity_column"] == "hd"
    table = stability_vs_diversity(ds, sites).set_index("predictor")
    assert table.loc["stability", "r"] > 0.9
    assert table.loc["distance_to_refugium_km", "r"] < 0
    assert table.loc["stability", "n_effective"] <= 30
    with pytest.raises(DataError, match="say which column"):
        pd.DataFrame({"lon": lon, "lat": lat, "a": div, "b": div}).to_csv(path, index=False)
        read_diversity_table(path)
