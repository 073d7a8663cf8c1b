"""Tiny synthetic stacked series for the series stage."""

from __future__ import annotations

import dask
import numpy as np
import pytest
import xarray as xr

from timeslice.grid import make_grid


def make_stack(
    rng: np.random.Generator,
    *,
    labels=("baseline", "21ka", "6ka", "low_2081-2100"),
    years=(1990.0, -19050.0, -4050.0, 2090.0),
    models=("observed", "alder", "alder", "alder"),
    scenarios=("baseline", "past", "past", "low"),
    lon_min=-10.0,
    lon_max=-4.0,
    lat_min=40.0,
    lat_max=45.0,
    resolution=1.0,
    p_sea=0.2,
) -> xr.Dataset:
    """A stacked series with random suitability, land varying by slice, MESS and ExDet."""
    g = make_grid(lon_min=lon_min, lon_max=lon_max, lat_min=lat_min, lat_max=lat_max,
                  resolution=resolution)
    ns, ny, nx = len(labels), g.sizes["lat"], g.sizes["lon"]
    present_land = rng.random((ny, nx)) > p_sea
    land = np.repeat(present_land[None], ns, axis=0)
    # a few cells flip land status in the non-reference slices (exposed shelf, drowning)
    flips = rng.random((ns, ny, nx)) < 0.1
    flips[0] = False
    land = land ^ flips
    suit = rng.random((ns, ny, nx)).astype(np.float32)
    suit[~land] = np.nan
    suitable = np.where(land, (suit >= 0.5).astype(np.int8), np.int8(-1)).astype(np.int8)
    mess = rng.normal(5, 10, (ns, ny, nx)).astype(np.float32)
    mess[~land] = np.nan
    nt1 = np.minimum(rng.normal(0, 0.2, (ns, ny, nx)), 0).astype(np.float32)
    nt2 = rng.gamma(2, 0.3, (ns, ny, nx)).astype(np.float32)
    nt1[~land] = np.nan
    nt2[~land] = np.nan
    dims = ("slice", "lat", "lon")
    elev = rng.uniform(0, 2500, (ny, nx)).astype(np.float32)
    ds = xr.Dataset(
        {
            "suitability": (dims, suit, {"units": "1", "long_name": "suitability"}),
            "suitable": (dims, suitable, {"units": "1"}),
            "mess": (dims, mess, {"units": "1"}),
            "nt1": (dims, nt1, {"units": "1"}),
            "nt2": (dims, nt2, {"units": "1"}),
            "land": (("lat", "lon"), present_land),
            "elevation": (("lat", "lon"), elev, {"units": "m"}),
            "calibration_area": (("lat", "lon"), present_land & (rng.random((ny, nx)) > 0.3)),
        },
        coords={
            "slice": ("slice", list(labels)),
            "year": ("slice", np.asarray(years, dtype=float)),
            "period": ("slice", [str(int(y)) for y in years]),
            "model": ("slice", list(models)),
            "scenario": ("slice", list(scenarios)),
            "lat": g.lat,
            "lon": g.lon,
        },
    )
    return ds


@pytest.fixture
def stack_factory(rng):
    """Return a function making a small random stacked series (kwargs as `make_stack`)."""

    def _make(**kw):
        return make_stack(rng, **kw)

    return _make


class _CountingScheduler:
    """A dask scheduler that counts and refuses computations (proves laziness)."""

    def __init__(self, max_computes=0):
        self.total = 0
        self.max = max_computes

    def __call__(self, dsk, keys, **kwargs):
        self.total += 1
        if self.total > self.max:
            raise RuntimeError(f"too many dask computations: {self.total} > {self.max}")
        return dask.get(dsk, keys, **kwargs)


@pytest.fixture
def raise_if_dask_computes():
    """Context manager factory: fail if dask computes inside the block."""

    def _ctx(max_computes=0):
        return dask.config.set(scheduler=_CountingScheduler(max_computes))

    return _ctx
