"""Environmental availability and analog fraction on a hand-worked grid."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from timeslice.grid import make_grid
from timeslice.transfer.espace import slice_environment


def _slice(values, land):
    g = make_grid(lon_min=0, lon_max=2, lat_min=0, lat_max=2, resolution=1.0)
    return xr.Dataset({"bio1": (("lat", "lon"), np.asarray(values, float)),
                       "land": (("lat", "lon"), np.asarray(land, bool))}, coords=g.coords)


def test_hand_worked_availability_and_analog_fraction():
    # background bio1 = 0, 2, 4, 6, 8: SD = sqrt(8) = 2.828 (population SD, numpy default),
    # range 0..8; tolerance 0.25 SD = 0.707 in bio1 units
    background = pd.DataFrame({"bio1": [0.0, 2.0, 4.0, 6.0, 8.0]})
    presence = pd.DataFrame({"bio1": [1.0, 3.0, 5.0, 7.0]})
    # land cells hold 1.5 (within 0.707 of presences 1), 5.2 (of 5) and 9.0 (no presence,
    # outside the calibration range); the fourth cell is sea
    ds = _slice([[1.5, 5.2], [9.0, 3.0]], [[True, True], [True, False]])
    res = slice_environment(ds, variables=["bio1"], presence=presence, background=background)
    # presences 1 and 5 have an analog; 3 lies only in the sea cell and 7 nowhere: 2 of 4
    assert res["environmental_availability"] == pytest.approx(0.5)
    # analog land: the two southern cells (lat 0..1); all land: those plus one northern cell.
    # cell areas R^2 dlon (sin phi2 - sin phi1) with R = 6371.0072 km (Snyder 1987)
    R = 6371.0072
    south = R**2 * np.deg2rad(1.0) * (np.sin(np.deg2rad(1.0)) - 0.0)
    north = R**2 * np.deg2rad(1.0) * (np.sin(np.deg2rad(2.0)) - np.sin(np.deg2rad(1.0)))
    assert res["analog_fraction"] == pytest.approx(2 * south / (2 * south + north), rel=1e-12)
    assert res["land_km2"] == pytest.approx(2 * south + north, rel=1e-12)


def test_blocks_do_not_change_the_answer(rng):
    g = make_grid(lon_min=0, lon_max=10, lat_min=0, lat_max=10, resolution=0.5)
    shape = (g.sizes["lat"], g.sizes["lon"])
    ds = xr.Dataset({"bio1": (("lat", "lon"), rng.normal(10, 3, shape)),
                     "bio12": (("lat", "lon"), rng.normal(800, 100, shape)),
                     "land": (("lat", "lon"), rng.random(shape) > 0.3)}, coords=g.coords)
    bg = pd.DataFrame({"bio1": rng.normal(9, 3, 300), "bio12": rng.normal(820, 90, 300)})
    pres = pd.DataFrame({"bio1": rng.normal(7, 1, 40), "bio12": rng.normal(850, 40, 40)})
    kw = dict(variables=["bio1", "bio12"], presence=pres, background=bg)
    a = slice_environment(ds, block_rows=3, **kw)
    b = slice_environment(ds, block_rows=1000, **kw)
    assert a == pytest.approx(b)
    assert 0 < a["environmental_availability"] <= 1 and 0 < a["analog_fraction"] <= 1


def test_principal_axes_match_scikit_learn(rng):
    # the leading axes of the standardised background: sklearn.decomposition.PCA as reference
    from sklearn.decomposition import PCA

    from timeslice.report.espace import principal_axes

    X = rng.normal(size=(500, 3)) @ np.array([[2.0, 0.5, 0.0], [0.0, 1.0, 0.3], [0.0, 0.0, 0.2]])
    df = pd.DataFrame(X, columns=["a", "b", "c"])
    mean, sd, axes, explained = principal_axes(df, ["a", "b", "c"])
    ref = PCA(n_components=2).fit((X - X.mean(0)) / X.std(0))
    for j in range(2):
        assert abs(float(axes[:, j] @ ref.components_[j])) == pytest.approx(1.0, abs=1e-9)
    np.testing.assert_allclose(explained, ref.explained_variance_ratio_, rtol=1e-9)
