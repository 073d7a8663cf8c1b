"""Tiny synthetic stacked series and summary tables for the report tests.

The shapes follow the pinned "stacked series" contract (dims ``(slice, lat, lon)``, slice
coordinates ``year``, ``period``, ``model``, ``scenario``); the values are invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from timeslice.grid import cell_area, haversine_km, make_grid

SLICES = [
    # label, year, period, model, scenario
    ("baseline", 1985.0, "1971-2000", "observed", "baseline"),
    ("alder_21ka", 1950.0 - 21000.0, "21ka", "alder", "past"),
    ("alder_low_2050", 2050.0, "2041-2060", "alder", "low-forcing"),
    ("alder_low_2090", 2090.0, "2081-2100", "alder", "low-forcing"),
    ("birch_low_2050", 2050.0, "2041-2060", "birch", "low-forcing"),
    ("birch_high_2090", 2090.0, "2081-2100", "birch", "high-forcing"),
]


def make_series(n_slices: int = 4, nlat: int = 12, nlon: int = 16, seed: int = 7) -> xr.Dataset:
    """A small stacked series with every layer the report stage reads."""
    rng = np.random.default_rng(seed)
    g = make_grid(lon_min=-40.0, lon_max=-40.0 + nlon * 0.5, lat_min=40.0,
                  lat_max=40.0 + nlat * 0.5, resolution=0.5)
    rows = SLICES[:n_slices]
    lat2, lon2 = np.meshgrid(np.arange(nlat), np.arange(nlon), indexing="ij")
    r2 = ((lat2 - nlat / 2) / (nlat / 2.4)) ** 2 + ((lon2 - nlon / 2) / (nlon / 2.4)) ** 2
    land = r2 < 1.0
    elevation = np.where(land, 2000.0 * (1 - r2), -500.0).astype("float32")
    shape = (len(rows), nlat, nlon)
    suit = np.empty(shape, dtype="float32")
    for i in range(len(rows)):
        centre = nlat / 2 + (i - 1) * 0.8
        s = np.exp(-(((lat2 - centre) / 3.0) ** 2 + ((lon2 - nlon / 2) / 4.0) ** 2))
        suit[i] = np.clip(s + rng.normal(0, 0.03, s.shape), 0, 1)
    suit[:, ~land] = np.nan
    suitable = np.where(land, (suit >= 0.4).astype("int8"), np.int8(-1)).astype("int8")
    mess = np.where(land, 20.0 - 6.0 * np.arange(len(rows))[:, None, None]
                    + rng.normal(0, 5, shape), np.nan).astype("float32")
    nt1 = np.where(land, np.minimum(mess / 100.0, 0.0), np.nan).astype("float32")
    nt2 = np.where(land, rng.uniform(0, 1.5, shape), np.nan).astype("float32")
    mod = np.where(land, rng.integers(0, 3, shape), -1).astype("int16")
    ref = suitable[0]
    change = np.full(shape, -1, dtype="int8")
    for i in range(len(rows)):
        s = suitable[i]
        c = np.zeros(s.shape, dtype="int8")
        c[(s == 1) & (ref == 0)] = 1
        c[(s == 0) & (ref == 1)] = 2
        c[(s == 1) & (ref == 1)] = 3
        change[i] = np.where(land, c, -1)
    suit_b = np.where(suitable == 1, 1.0, 0.0)
    stability = np.where(land, suit_b.mean(axis=0), np.nan).astype("float32")
    refugium = land & (suitable == 1).all(axis=0)
    calib = land & (r2 < 0.5)
    dims3 = ("slice", "lat", "lon")
    ds = xr.Dataset(
        {
            "suitability": (dims3, suit, {"units": "1", "long_name": "climatic suitability"}),
            "suitable": (dims3, suitable),
            "mess": (dims3, mess, {"units": "1"}),
            "most_dissimilar": (dims3, mod, {
                "flag_values": np.array([0, 1, 2], dtype="int16"),
                "flag_meanings": "bio1 bio12 bio6",
                "long_name": "most dissimilar variable"}),
            "nt1": (dims3, nt1),
            "nt2": (dims3, nt2),
            "change": (dims3, change),
            "land": (dims3, np.broadcast_to(land, shape).copy()),
            "elevation": (("lat", "lon"), elevation, {"units": "m"}),
            "calibration_area": (("lat", "lon"), calib),
            "stability": (("lat", "lon"), stability),
            "refugium": (("lat", "lon"), refugium),
        },
        coords={
            "slice": ("slice", [r[0] for r in rows]),
            "year": ("slice", np.array([r[1] for r in rows])),
            "period": ("slice", [r[2] for r in rows]),
            "model": ("slice", [r[3] for r in rows]),
            "scenario": ("slice", [r[4] for r in rows]),
            "lat": g.lat,
            "lon": g.lon,
        },
        attrs={"threshold": 0.4, "threshold_rule": "p10"},
    )
    return ds


def make_summary(ds: xr.Dataset) -> pd.DataFrame:
    """Summary table in the pinned summary.csv columns, computed directly from `ds`."""
    area = cell_area(ds).values
    rows = []
    ref = ds["suitable"].values[0] == 1
    lat2, lon2 = np.meshgrid(ds.lat.values, ds.lon.values, indexing="ij")
    c0 = None
    for i, label in enumerate(ds.slice.values):
        s = ds["suitable"].values[i] == 1
        a = area[s].sum()
        w = area * s
        clat = float((w * lat2).sum() / w.sum())
        clon = float((w * lon2).sum() / w.sum())
        if c0 is None:
            c0 = (clat, clon)
        # contract: suitable area whose climate is novel (MESS < 0)
        novel = area[s & (ds["mess"].values[i] < 0)].sum()
        rows.append({
            "slice": str(label), "year": float(ds.year.values[i]),
            "model": str(ds.model.values[i]), "scenario": str(ds.scenario.values[i]),
            "suitable_area_km2": a, "gain_km2": area[s & ~ref].sum(),
            "loss_km2": area[~s & ref].sum(), "stable_km2": area[s & ref].sum(),
            "novel_area_km2": novel, "centroid_lat": clat, "centroid_lon": clon,
            "centroid_shift_km": float(haversine_km(c0[1], c0[0], clon, clat)),
        })
    return pd.DataFrame(rows)


@pytest.fixture
def series_ds() -> xr.Dataset:
    return make_series()


@pytest.fixture
def series_big() -> xr.Dataset:
    return make_series(n_slices=6)


@pytest.fixture
def summary_df(series_big) -> pd.DataFrame:
    return make_summary(series_big)


@pytest.fixture(autouse=True)
def no_network(monkeypatch):
    """Every report test runs with outgoing connections refused: nothing may download.

    Connections to this machine's loopback address stay open: a local dask cluster's workers
    talk to their scheduler over it, and nothing can be fetched from there.
    """
    import ipaddress
    import socket

    def _loopback(address) -> bool:
        host = address[0] if isinstance(address, tuple) else None
        if host is None:  # a Unix socket path: local by definition
            return isinstance(address, (str, bytes))
        try:
            return ipaddress.ip_address(host).is_loopback
        except ValueError:
            return host == "localhost"

    connect, connect_ex, create = (socket.socket.connect, socket.socket.connect_ex,
                                   socket.create_connection)

    def _guard(original):
        def call(*args, **kwargs):
            address = args[1] if original is not create else args[0]
            if _loopback(address):
                return original(*args, **kwargs)
            raise OSError("network access is not allowed in the report tests")
        return call

    monkeypatch.setattr(socket.socket, "connect", _guard(connect))
    monkeypatch.setattr(socket.socket, "connect_ex", _guard(connect_ex))
    monkeypatch.setattr(socket, "create_connection", _guard(create))
