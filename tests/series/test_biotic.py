"""Biotic limits: constrained layers beside the abiotic ones, areas by hand."""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area, make_grid
from timeslice.series.biotic import biotic_layers, biotic_table


def _stack():
    g = make_grid(lon_min=0, lon_max=4, lat_min=40, lat_max=42, resolution=1.0)
    suit = np.array([[[1, 1, 0, -1], [1, 1, 1, 0]],
                     [[1, 0, 0, -1], [1, 1, 0, 0]]], dtype="i1")
    suitability = np.where(suit == 1, 0.8, np.where(suit == 0, 0.2, np.nan))
    return xr.Dataset({"suitable": (("slice", "lat", "lon"), suit),
                       "suitability": (("slice", "lat", "lon"), suitability)},
                      coords={"slice": ["baseline", "a"], "year": ("slice", [2000.0, 2050.0]),
                              "model": ("slice", ["observed", "m"]),
                              "scenario": ("slice", ["baseline", "s"]), **g.coords})


def test_partner_and_excluding_competitor():
    ds = _stack()
    partner = xr.DataArray(np.array([[1, 1, 1, 1], [0, 1, 1, 1]]), dims=("lat", "lon"),
                           coords={"lat": ds.lat, "lon": ds.lon})
    comp = xr.DataArray(np.array([[0, 1, 0, 0], [0, 0, 0, 0]]), dims=("lat", "lon"),
                        coords={"lat": ds.lat, "lon": ds.lon})
    out = biotic_layers(ds, partner=partner, competitor=comp)
    b = out["suitable_biotic"].values
    # baseline: suitable (0,0) (0,1) (1,0) (1,1) (1,2); partner removes (1,0); competitor (0,1)
    assert b[0].tolist() == [[1, 0, 0, -1], [0, 1, 1, 0]]
    assert (ds["suitable"].values == _stack()["suitable"].values).all()  # abiotic untouched
    t, ref = biotic_table(ds, out, reference="baseline", window=["baseline", "a"])
    area = cell_area(ds).values
    assert t.loc[0, "suitable_biotic_km2"] == pytest.approx(area[0, 0] + area[1, 1] + area[1, 2])
    assert t.loc[0, "suitable_area_km2"] == pytest.approx(area[0, :2].sum() + area[1, :3].sum())
    # slice a: suitable (0,0) (1,0) (1,1); biotic: (0,0) (1,1)
    assert ref.values.tolist() == [[True, False, False, False], [False, True, False, False]]
    assert 0 < t.loc[1, "removed_by_biotic_share"] < 1


def test_reducing_competitor_rethresholds():
    ds = _stack()
    comp = xr.DataArray(np.ones((2, 4)), dims=("lat", "lon"), coords={"lat": ds.lat, "lon": ds.lon})
    out = biotic_layers(ds, competitor=comp, competitor_effect=0.5, threshold=0.5)
    # 0.8 x 0.5 = 0.4 < 0.5: nothing stays suitable where the competitor is everywhere
    assert int((out["suitable_biotic"] == 1).sum()) == 0
    out = biotic_layers(ds, competitor=comp, competitor_effect=0.9, threshold=0.5)
    assert (out["suitable_biotic"].values == ds["suitable"].values).all()
    with pytest.raises(DataError, match="competitor_effect"):
        biotic_layers(ds, competitor=comp, competitor_effect=1.5, threshold=0.5)
    with pytest.raises(DataError, match="partner or a competitor"):
        biotic_layers(ds)
