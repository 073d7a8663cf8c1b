"""A synthetic world with a known niche, as a prepared baseline slice (test helper)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.grid import make_grid


def make_world(
    *,
    seed: int = 7,
    resolution: float = 0.2,
    lon_min: float = -10.0,
    lon_max: float = 10.0,
    lat_min: float = 40.0,
    lat_max: float = 50.0,
    n_records: int = 200,
    niche_sd: tuple[float, float] = (2.0, 250.0),
):
    """A prepared baseline slice with a known niche, and records sampled from it.

    Returns (baseline Dataset, records DataFrame in the canonical reader format, truth DataArray
    of the true suitability 0..1).
    """
    rng = np.random.default_rng(seed)
    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max, resolution=resolution)
    lon2, lat2 = np.meshgrid(g.lon.values, g.lat.values)
    x = (lon2 - lon_min) / (lon_max - lon_min)
    y = (lat2 - lat_min) / (lat_max - lat_min)
    # an island: elevation high in the middle, a mountain chain, sea round the edges
    elev = 2500 * np.exp(-(((x - 0.5) / 0.32) ** 2 + ((y - 0.5) / 0.3) ** 2))
    elev += 1500 * np.exp(-(((x - 0.3) / 0.07) ** 2 + ((y - 0.55) / 0.25) ** 2))
    elev -= 400
    land = elev > 0
    bio1 = 16 - 0.7 * (lat2 - lat_min) - 6.5 * elev / 1000 + rng.normal(0, 0.2, elev.shape)
    bio12 = 700 + 1600 * x + rng.normal(0, 20, elev.shape)
    bio4 = 600 + 40 * (x - 0.5) + rng.normal(0, 15, elev.shape)
    bio5 = bio1 + 9 + rng.normal(0, 0.4, elev.shape)  # strongly correlated with bio1
    bio15 = 30 + 20 * y + rng.normal(0, 2, elev.shape)
    truth = np.exp(-0.5 * (((bio1 - 4.0) / niche_sd[0]) ** 2 + ((bio12 - 1500) / niche_sd[1]) ** 2))
    data = {}
    for name, arr, units in (
        ("bio1", bio1, "degC"),
        ("bio4", bio4, "degC"),
        ("bio5", bio5, "degC"),
        ("bio12", bio12, "mm"),
        ("bio15", bio15, "%"),
    ):
        data[name] = (("lat", "lon"), np.where(land, arr, np.nan).astype(np.float32), {"units": units})
    ds = xr.Dataset(data, coords={"lat": g.lat, "lon": g.lon})
    ds["land"] = (("lat", "lon"), land)
    ds["ice"] = (("lat", "lon"), np.zeros_like(land))
    ds["elevation"] = (("lat", "lon"), elev.astype(np.float32), {"units": "m"})
    ds.attrs.update(slice_label="baseline", year=1985.0, period="1971-2000", model="observed", scenario="baseline")
    truth_da = xr.DataArray(np.where(land, truth, np.nan), dims=("lat", "lon"), coords={"lat": g.lat, "lon": g.lon})
    # records: cells drawn in proportion to the true suitability, jittered inside the cell
    p = np.where(land, truth, 0.0).ravel()
    cells = rng.choice(p.size, size=n_records, replace=True, p=p / p.sum())
    r, c = np.unravel_index(cells, land.shape)
    lon = g.lon.values[c] + rng.uniform(-0.45, 0.45, n_records) * resolution
    lat = g.lat.values[r] + rng.uniform(-0.45, 0.45, n_records) * resolution
    records = pd.DataFrame(
        {
            "lon": lon,
            "lat": lat,
            "uncertainty_m": rng.choice([10.0, 100.0, 1000.0], n_records),
            "status": "present",
            "basis": "HumanObservation",
            "year": rng.integers(1980, 2020, n_records).astype(float),
            "count": 1.0,
            "species": "Testia synthetica",
            "row": np.arange(2, n_records + 2),
        }
    )
    return ds, records, truth_da
