"""Builders of tiny CF datasets in raw climate-model conventions (shared by the reader and
harmonise tests)."""

from __future__ import annotations

import cftime
import numpy as np
import xarray as xr


def model_dataset(
    *,
    lon=np.arange(315.5, 345.0, 1.0),
    lat=np.arange(35.5, 60.0, 1.0),
    calendar="noleap",
    years=None,
    descending=False,
    t_units="K",
    pr_units="kg m-2 s-1",
    tmin_c=None,
    pr_mm_day=None,
    seed=1,
):
    """Monthly tasmin/tasmax/pr in model conventions; `years` None gives a 12-step
    climatology (year 2001) else a multi-year series."""
    rng = np.random.default_rng(seed)
    lat = np.asarray(lat, float)
    if descending:
        lat = lat[::-1]
    if years is None:
        years = [2001]
    times = [cftime.datetime(y, m, 15, calendar=calendar) for y in years for m in range(1, 13)]
    nt = len(times)
    shape = (nt, lat.size, np.asarray(lon).size)
    month = np.array([t.month for t in times])
    base = -5 + 10 * np.sin(2 * np.pi * (month - 4) / 12)[:, None, None]
    tmin = base + rng.normal(0, 1, shape) if tmin_c is None else np.broadcast_to(tmin_c, shape)
    tmax = tmin + 8
    prd = rng.gamma(3, 1.0, shape) if pr_mm_day is None else np.broadcast_to(pr_mm_day, shape)
    t_off = 273.15 if t_units == "K" else 0.0
    pr = prd / 86400.0 if pr_units == "kg m-2 s-1" else prd
    dims = ("time", "lat", "lon")
    ds = xr.Dataset(
        {
            "tasmin": (dims, (tmin + t_off).astype("f4"),
                       {"units": t_units, "standard_name": "air_temperature",
                        "cell_methods": "time: minimum"}),
            "tasmax": (dims, (tmax + t_off).astype("f4"),
                       {"units": t_units, "standard_name": "air_temperature",
                        "cell_methods": "time: maximum"}),
            "pr": (dims, pr.astype("f4"), {"units": pr_units, "standard_name": "precipitation_flux"}),
        },
        coords={
            "time": ("time", times),
            "lat": ("lat", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("lon", np.asarray(lon, float), {"units": "degrees_east", "standard_name": "longitude"}),
        },
        attrs={"Conventions": "CF-1.8", "title": "invented test model"},
    )
    ds["time"].encoding.update(units="days since 2000-01-01", calendar=calendar)
    return ds
