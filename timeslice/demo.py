"""Generator of the invented demo scenario.

Everything here is invented: an island landmass in the middle of an ocean, its climate, three
climate models (``alder``, ``birch``, ``cedar``) with their own biases, an ice sheet at 21 ka,
and an invented cold-adapted plant *Nivalia demonstrata* (invented genus) with occurrence and
dated fossil-like records. No real place, species or data set is used.

The scenario is a deterministic function of ``seed`` and ``resolution``: the same arguments give
the same files bit for bit (no timestamps are written). :func:`generate` writes

- ``baseline.nc``: fine monthly climatology ``tasmin``, ``tasmax`` (degC), ``pr`` (mm/month),
  NaN at sea (so the pipeline has to fill exposed shelf);
- ``dem.nc``: ``elevation`` in m (negative below present sea level);
- ``ice_21ka.nc``: ``sftgif`` in % on a 0.5 degree grid;
- ``models/<model>/<slice>.nc``: raw model output on a 1 degree grid (K, kg m-2 s-1,
  longitudes 0..360, ``cedar`` with descending latitude, calendars noleap / 360_day);
- ``occurrences.csv`` (Darwin Core columns), ``dated_records.csv``;
- ``host_plant.nc``, ``populations.csv``, ``reserves.geojson``: an invented host plant the
  species needs, invented sampled populations with a haplotype diversity, two invented
  reserves (for the biotic, genetic and zonal parts of a run);
- ``truth.json``: the niche parameters, the true niche area and what was put in.
"""

from __future__ import annotations

import csv
import datetime as _dt
import hashlib
import io as _io
import json
import os
from pathlib import Path

import cftime
import numpy as np
import xarray as xr
from scipy import ndimage

from timeslice.errors import ConfigError, DataError
from timeslice.grid import cell_area, make_grid
from timeslice.io import atomic_path

__all__ = [
    "CLIMATE",
    "DEFAULT_SEED",
    "EFFORT",
    "FINE_EXTENT",
    "MODELS",
    "MODEL_EXTENT",
    "NICHE",
    "SLICES",
    "SPECIES",
    "TARGET_GROUP",
    "generate",
    "main",
    "presence_probability",
    "sha256_of",
    "write_default",
]

#: Default seed of the committed demo files.
DEFAULT_SEED = 20261201

#: Fine grid extent (lon_min, lon_max, lat_min, lat_max), degrees.
FINE_EXTENT = (-40.0, -20.0, 40.0, 55.0)
#: Coarse climate-model grid extent, degrees (1 degree cells).
MODEL_EXTENT = (-45.0, -15.0, 35.0, 60.0)
MODEL_RESOLUTION = 1.0
ICE_RESOLUTION = 0.5

#: Invented species name (invented genus).
SPECIES = "Nivalia demonstrata"

#: Standard-atmosphere lapse rate below 11 km, K per m (ICAO Doc 7488, ISO 2533:1975).
LAPSE_RATE_K_PER_M = 0.0065
#: Density of liquid water used to turn a mass flux into a depth, kg m-3 (common practice).
WATER_DENSITY = 1000.0
SECONDS_PER_DAY = 86400.0
#: Sea-level drop at 21 ka used by the scenario, m (an invented round value in the range of
#: published estimates, e.g. about -134 m in Lambeck et al. 2014, PNAS 111:15296).
SEA_LEVEL_21KA = -120.0
#: Approximate length of one degree of latitude, km (spherical Earth, R = 6371 km).
KM_PER_DEGREE = 111.195

# ---------------------------------------------------------------------------------------------
# invented scenario parameters
# ---------------------------------------------------------------------------------------------

#: Niche of the invented plant (in bioclimatic terms computed from the monthly fields):
#: Gaussian in the mean temperature of the warmest quarter, logistic in annual precipitation.
NICHE = {
    "bio10_optimum_degC": 8.5,
    "bio10_sd_degC": 2.5,
    "bio12_midpoint_mm": 700.0,
    "bio12_scale_mm": 60.0,
    "presence_threshold": 0.5,
}

#: Invented related species (same invented genus) for a target-group background: their own
#: niches (optimum and SD of bio10 in degC, logistic midpoint of bio12 in mm) and record counts.
#: Sampled with the same effort as the focal species, so that their records share its bias.
TARGET_GROUP = {
    "Nivalia exempli": {"bio10_optimum_degC": 6.0, "bio10_sd_degC": 2.5,
                        "bio12_midpoint_mm": 600.0, "n": 300},
    "Nivalia fictiva": {"bio10_optimum_degC": 10.5, "bio10_sd_degC": 3.0,
                        "bio12_midpoint_mm": 800.0, "n": 300},
    "Nivalia simulata": {"bio10_optimum_degC": 12.5, "bio10_sd_degC": 2.5,
                         "bio12_midpoint_mm": 500.0, "n": 300},
    "Nivalia probata": {"bio10_optimum_degC": 14.5, "bio10_sd_degC": 3.0,
                        "bio12_midpoint_mm": 900.0, "n": 300},
}

#: Relative sampling effort of the occurrence records: base + coast * exp(-d/coast_km)
#: + lowland * exp(-z/lowland_m), times 1 + (55 - lat)/south_deg (more records in the south).
EFFORT = {"base": 0.3, "coast": 1.0, "coast_km": 25.0, "lowland": 0.6, "lowland_m": 400.0,
          "south_deg": 15.0}

#: Invented sea-level climate of the truth.
CLIMATE = {
    "t_sea_40N_degC": 15.0,
    "t_lat_gradient_K_per_deg": 0.75,
}

#: Model biases against the invented truth (baseline runs).
MODELS: dict[str, dict] = {
    "alder": {"calendar": "noleap", "lat_descending": False,
              "dT": 1.2, "dT_per_deg_lat": 0.02, "dtr": 0.4, "pr_factor": 1.10,
              "pr_per_deg_lon": 0.004},
    "birch": {"calendar": "noleap", "lat_descending": False,
              "dT": -0.8, "dT_per_deg_lat": -0.03, "dtr": -0.3, "pr_factor": 0.85,
              "pr_per_deg_lon": -0.003},
    "cedar": {"calendar": "360_day", "lat_descending": True,
              "dT": 0.3, "dT_per_deg_lat": 0.08, "dtr": 0.8, "pr_factor": 1.00,
              "pr_per_deg_lon": 0.006},
}

#: Slices: label -> (scenario, period, year CE, age BP or None, first year, last year of the
#: nominal climatology, per-model change). Change: ``dT`` domain-mean warming (K),
#: ``summer`` seasonal amplitude (K, + in July), ``pr`` annual factor, ``pr_summer`` extra
#: summer factor.
SLICES: dict[str, dict] = {
    # glacial cooling much stronger towards the ice in the north than in the oceanic south,
    # and weaker in summer than in winter
    "21ka": {"scenario": "past", "period": "21ka", "age_bp": 21000, "years": (1, 30),
             "lat_gradient": 0.10, "elevation_gradient": 0.0,
             "change": {"alder": {"dT": -6.2, "summer": 1.0, "pr": 0.65, "pr_summer": 0.0},
                        "birch": {"dT": -5.2, "summer": 0.8, "pr": 0.75, "pr_summer": 0.0},
                        "cedar": {"dT": -5.7, "summer": 0.9, "pr": 0.70, "pr_summer": 0.0}}},
    "6ka": {"scenario": "past", "period": "6ka", "age_bp": 6000, "years": (1, 30),
            "change": {"alder": {"dT": 0.1, "summer": 0.8, "pr": 1.02, "pr_summer": -0.03},
                       "birch": {"dT": 0.0, "summer": 0.6, "pr": 1.04, "pr_summer": -0.02},
                       "cedar": {"dT": 0.2, "summer": 1.0, "pr": 1.00, "pr_summer": -0.05}}},
    "low-forcing_2041-2060": {
        "scenario": "low-forcing", "period": "2041-2060", "age_bp": None, "years": (2041, 2060),
        "change": {"alder": {"dT": 1.5, "summer": 0.2, "pr": 1.02, "pr_summer": -0.04},
                   "birch": {"dT": 1.7, "summer": 0.3, "pr": 0.99, "pr_summer": -0.06},
                   "cedar": {"dT": 1.3, "summer": 0.1, "pr": 1.03, "pr_summer": -0.03}}},
    "low-forcing_2081-2100": {
        "scenario": "low-forcing", "period": "2081-2100", "age_bp": None, "years": (2081, 2100),
        "change": {"alder": {"dT": 2.1, "summer": 0.3, "pr": 1.03, "pr_summer": -0.06},
                   "birch": {"dT": 2.4, "summer": 0.4, "pr": 0.98, "pr_summer": -0.08},
                   "cedar": {"dT": 1.9, "summer": 0.2, "pr": 1.04, "pr_summer": -0.05}}},
    "high-forcing_2041-2060": {
        "scenario": "high-forcing", "period": "2041-2060", "age_bp": None, "years": (2041, 2060),
        "change": {"alder": {"dT": 2.1, "summer": 0.3, "pr": 1.01, "pr_summer": -0.07},
                   "birch": {"dT": 2.3, "summer": 0.4, "pr": 0.97, "pr_summer": -0.09},
                   "cedar": {"dT": 1.9, "summer": 0.2, "pr": 1.02, "pr_summer": -0.06}}},
    "high-forcing_2081-2100": {
        "scenario": "high-forcing", "period": "2081-2100", "age_bp": None, "years": (2081, 2100),
        "change": {"alder": {"dT": 4.2, "summer": 0.7, "pr": 1.00, "pr_summer": -0.14},
                   "birch": {"dT": 4.8, "summer": 0.9, "pr": 0.94, "pr_summer": -0.18},
                   "cedar": {"dT": 3.7, "summer": 0.5, "pr": 1.03, "pr_summer": -0.12}}},
}

_BASELINE_YEARS = (1981, 2010)
_OBS_TIME_UNITS = "days since 1950-01-01 00:00:00"
_MODEL_TIME_UNITS = "days since 0001-01-01 00:00:00"
_MONTH_DAYS = {
    "noleap": np.array([31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float),
    "360_day": np.full(12, 30.0),
}

#: Demo files are plain data meant to be shared (temporary files start as 0600).
_FILE_MODE = 0o644

# CF 1.8 section 7.4 climatological statistics: a month of each year, then over the years
_CM_TMIN = "time: minimum within days time: mean over days time: mean over years"
_CM_TMAX = "time: maximum within days time: mean over days time: mean over years"
_CM_PR = "time: mean within years time: mean over years"

_TITLE = "timeslice invented demo scenario"
_COMMENT = (
    "Invented data: no real place, species, climate model or observation. "
    "Generated reproducibly by timeslice.demo.generate."
)


# ---------------------------------------------------------------------------------------------
# landscape
# ---------------------------------------------------------------------------------------------


def _noise_params(rng: np.random.Generator, n_octaves: int = 5, n_waves: int = 6) -> list:
    """Random plane waves for a resolution-independent fractal noise (amplitude ~1)."""
    waves = []
    for k in range(n_octaves):
        wavelength_km = 400.0 / 2**k
        amp = 0.5**k
        for _ in range(n_waves):
            theta = rng.uniform(0, 2 * np.pi)
            phase = rng.uniform(0, 2 * np.pi)
            waves.append((amp / np.sqrt(n_waves), wavelength_km, theta, phase))
    return waves


def _noise(xkm: np.ndarray, ykm: np.ndarray, waves: list) -> np.ndarray:
    out = np.zeros(np.broadcast(xkm, ykm).shape)
    for amp, wl, theta, phase in waves:
        out += amp * np.cos(2 * np.pi * (xkm * np.cos(theta) + ykm * np.sin(theta)) / wl + phase)
    return out


def _km(lon: np.ndarray, lat: np.ndarray, lon0: float, lat0: float):
    """Local east/north distances (km) from (lon0, lat0); equirectangular, good to ~1 %."""
    x = (lon - lon0) * KM_PER_DEGREE * np.cos(np.deg2rad(lat))
    y = (lat - lat0) * KM_PER_DEGREE
    return x, y


def _landscape_params(rng: np.random.Generator) -> dict:
    """Seeded positions and sizes of the invented landforms."""
    j = lambda s: float(rng.uniform(-s, s))  # noqa: E731  (small seeded jitter)
    return {
        "main": {"lon": -30.5 + j(0.3), "lat": 47.8 + j(0.2), "ax_km": 330 + j(15),
                 "ay_km": 580 + j(20)},
        "offshore": {"lon": -24.3 + j(0.15), "lat": 45.0 + j(0.15), "r_km": 62.0},
        "bridge": {"lon0": -27.6, "lat0": 45.6, "lon1": -24.3, "lat1": 45.0,
                   "width_km": 42.0, "height": 0.42},
        "north_massif": {"lon": -30.6 + j(0.2), "lat": 50.3 + j(0.15), "sx_km": 65.0,
                         "sy_km": 115.0, "peak_m": 2450 + j(100)},
        "south_range": {"lon": -31.6 + j(0.2), "lat": 45.3 + j(0.15), "sx_km": 42.0,
                        "sy_km": 150.0, "peak_m": 1750 + j(100)},
        "east_hills": {"lon": -27.9 + j(0.2), "lat": 47.6 + j(0.2), "sx_km": 55.0,
                       "sy_km": 70.0, "peak_m": 700 + j(60)},
        "coast_noise": _noise_params(rng),
        "relief_noise": _noise_params(rng),
        "climate_noise": _noise_params(rng, n_octaves=3),
    }


def _seg_distance(x, y, x0, y0, x1, y1):
    dx, dy = x1 - x0, y1 - y0
    t = np.clip(((x - x0) * dx + (y - y0) * dy) / (dx * dx + dy * dy), 0.0, 1.0)
    return np.hypot(x - (x0 + t * dx), y - (y0 + t * dy))


def _elevation(lon2: np.ndarray, lat2: np.ndarray, p: dict) -> np.ndarray:
    """Elevation (m) of the invented landscape at cell centres (2-D lon/lat arrays)."""
    m = p["main"]
    x, y = _km(lon2, lat2, m["lon"], m["lat"])
    r2 = (x / m["ax_km"]) ** 2 + (y / m["ay_km"]) ** 2
    g_main = np.exp(-(r2**1.5))
    o = p["offshore"]
    xo, yo = _km(lon2, lat2, o["lon"], o["lat"])
    g_off = np.exp(-((xo**2 + yo**2) / o["r_km"] ** 2))
    b = p["bridge"]
    xb0, yb0 = _km(np.float64(b["lon0"]), np.float64(b["lat0"]), m["lon"], m["lat"])
    xb1, yb1 = _km(np.float64(b["lon1"]), np.float64(b["lat1"]), m["lon"], m["lat"])
    d = _seg_distance(x, y, xb0, yb0, xb1, yb1)
    g_bridge = b["height"] * np.exp(-((d / b["width_km"]) ** 2))
    s = np.maximum(np.maximum(g_main, g_off), g_bridge)
    s = s + 0.06 * _noise(x, y, p["coast_noise"]) * np.exp(-((s - 0.5) ** 2) / 0.02)

    land_factor = np.clip((s - 0.5) / 0.06, 0.0, 1.0)
    z_land = 650.0 * (s - 0.5) / 0.5
    for key in ("north_massif", "south_range", "east_hills"):
        q = p[key]
        xq, yq = _km(lon2, lat2, q["lon"], q["lat"])
        z_land = z_land + q["peak_m"] * np.exp(-((xq / q["sx_km"]) ** 2) - (yq / q["sy_km"]) ** 2)
    relief = _noise(x, y, p["relief_noise"])
    z_land = z_land * land_factor + 120.0 * relief * land_factor * (0.4 + z_land / 2500.0)
    # soft ceiling: summits stay below 3000 m whatever the seed
    z_land = np.where(z_land > 2400.0, 2400.0 + 600.0 * np.tanh((z_land - 2400.0) / 600.0),
                      z_land)
    z_land = np.maximum(z_land, 2.0)

    z_shelf = -150.0 * (0.5 - s) / 0.3
    z_deep = -150.0 - 3500.0 * (0.2 - s) / 0.2
    z = np.where(s >= 0.5, z_land, np.where(s >= 0.2, z_shelf, z_deep))
    return z


# ---------------------------------------------------------------------------------------------
# climate
# ---------------------------------------------------------------------------------------------


def _coast_distance_km(land: np.ndarray, lat: np.ndarray, res: float) -> np.ndarray:
    """Distance of every land cell to the nearest sea cell, km (0 at sea)."""
    dy = res * KM_PER_DEGREE
    dx = res * KM_PER_DEGREE * float(np.cos(np.deg2rad(np.mean(lat))))
    return ndimage.distance_transform_edt(land, sampling=(dy, dx))


def _upwind_barrier(z: np.ndarray, lat: np.ndarray, res: float, *, decay_km: float) -> np.ndarray:
    """Highest terrain upwind (west), decaying eastward with e-folding length `decay_km`."""
    dx = res * KM_PER_DEGREE * np.cos(np.deg2rad(lat))  # per row
    keep = np.exp(-dx / decay_km)
    zpos = np.maximum(z, 0.0)
    out = np.empty_like(zpos)
    run = np.zeros(z.shape[0])
    for i in range(z.shape[1]):
        run = np.maximum(zpos[:, i], run * keep)
        out[:, i] = run
    return out


def _truth_climate(lon: np.ndarray, lat: np.ndarray, z: np.ndarray, res: float,
                   p: dict) -> dict[str, np.ndarray]:
    """Monthly (12, lat, lon) tasmin, tasmax (degC) and pr (mm/month), defined everywhere."""
    lon2, lat2 = np.meshgrid(lon, lat)
    land = z > 0
    zc = np.maximum(z, 0.0)
    dist = _coast_distance_km(land, lat, res)
    x, y = _km(lon2, lat2, -30.0, 47.5)
    wobble = _noise(x, y, p["climate_noise"])

    # sea-level annual mean temperature by latitude (invented), then the standard lapse rate
    c = CLIMATE
    t_sea = c["t_sea_40N_degC"] - c["t_lat_gradient_K_per_deg"] * (lat2 - 40.0) + 0.25 * wobble
    t_annual = t_sea - LAPSE_RATE_K_PER_M * zc
    amplitude = 3.5 + 4.0 * (1.0 - np.exp(-dist / 120.0))  # continentality
    dtr = 5.0 + 5.0 * (1.0 - np.exp(-dist / 80.0))
    month = np.arange(1, 13)[:, None, None]
    # warmest in July inland, a little later at the coast (ocean lag); the peak stays within
    # (7.1, 7.4] so that no two rolling quarters tie
    continental = 1.0 - np.exp(-dist / 120.0)
    t_peak = 7.4 - 0.3 * continental
    season = np.cos(2 * np.pi * (month - t_peak[None]) / 12.0)
    tas = t_annual[None] + amplitude[None] * season
    dtr_m = dtr[None] * (1.0 + 0.15 * season)
    tasmax = tas + 0.5 * dtr_m
    tasmin = tas - 0.5 * dtr_m

    # precipitation: westerly moisture, orographic lift on windward slopes, rain shadow in lee
    p_annual = 1050.0 + 250.0 * (lat2 - 40.0) / 15.0 + 60.0 * wobble
    dz_dx = np.gradient(zc, axis=1) / (res * KM_PER_DEGREE * np.cos(np.deg2rad(lat2)))  # m/km
    windward = np.clip(dz_dx, 0.0, 30.0)
    barrier = _upwind_barrier(z, lat, res, decay_km=160.0)
    shadow = np.exp(-0.8 * np.maximum(barrier - zc, 0.0) / 1000.0)
    inland = np.exp(-dist / 900.0)
    p_annual = p_annual * (1.0 + 0.35 * zc / 1000.0 + 0.025 * windward) * shadow * inland
    # seasonality: wet winters at the coast (westerly storms), a summer maximum inland and on
    # the mountains (convection); peak month in [0.8, 6.7], never half-way between two months
    convective = np.clip(0.5 * (1.0 - np.exp(-dist / 100.0)) + 0.5 * np.minimum(zc / 1500.0, 1.0),
                         0.0, 1.0)
    p_peak = 0.8 + 5.9 * convective
    p_amp = 0.40 - 0.25 * convective
    p_season = 1.0 + p_amp[None] * np.cos(2 * np.pi * (month - p_peak[None]) / 12.0)
    pr = p_annual[None] / 12.0 * p_season
    return {"tasmin": tasmin, "tasmax": tasmax, "pr": pr}


def _bio10_bio12(tasmin: np.ndarray, tasmax: np.ndarray, pr: np.ndarray):
    """Mean temperature of the warmest quarter and annual precipitation.

    Quarters are the 12 rolling 3-month windows wrapping December to January, Tavg =
    (Tmax + Tmin)/2 (O'Donnell & Ignizio 2012, USGS Data Series 691). Computed here directly
    so that the generator does not depend on the harmonise stage.
    """
    tavg = 0.5 * (tasmin + tasmax)
    idx = (np.arange(12)[:, None] + np.arange(3)[None, :]) % 12
    q_t = tavg[idx].mean(axis=1)
    bio10 = q_t.max(axis=0)
    bio12 = pr.sum(axis=0)
    return bio10, bio12


def _presence_probability(bio10: np.ndarray, bio12: np.ndarray) -> np.ndarray:
    n = NICHE
    g = np.exp(-0.5 * ((bio10 - n["bio10_optimum_degC"]) / n["bio10_sd_degC"]) ** 2)
    lgt = 1.0 / (1.0 + np.exp(-(bio12 - n["bio12_midpoint_mm"]) / n["bio12_scale_mm"]))
    return g * lgt


_KELVIN = {"K", "kelvin", "degK", "degrees_K", "degree_K"}


def presence_probability(climate: xr.Dataset) -> xr.DataArray:
    r"""Known presence probability of the invented plant for any climate.

    Parameters
    ----------
    climate : xarray.Dataset
        Either ``bio10`` (degC) and ``bio12`` (mm), e.g. a prepared slice, or monthly
        ``tasmin``, ``tasmax`` (degC) and ``pr`` (mm per month) along a ``month`` or ``time``
        dimension of length 12 (a ``time`` axis is taken in file order, January first),
        e.g. ``demo_data/baseline.nc`` or the canonical output of
        :func:`timeslice.readers.open_climate`. Dask-backed inputs stay lazy.

    Returns
    -------
    xarray.DataArray, [1]
        ``true_presence_probability`` in 0..1 (NaN where the climate is missing).

    Raises
    ------
    timeslice.errors.DataError
        Variables missing, no 12-step month axis, or temperatures in kelvin.

    Notes
    -----
    .. math:: p = \exp\left(-\tfrac12\left(\tfrac{B_{10} - \mu}{\sigma}\right)^2\right)
              \left(1 + \exp\left(-\tfrac{B_{12} - m}{s}\right)\right)^{-1}

    with :math:`B_{10}` the mean temperature of the warmest rolling quarter (wrapping
    December-January) and :math:`B_{12}` the annual precipitation (O'Donnell, M. S. &
    Ignizio, D. A. 2012. Bioclimatic predictors for supporting ecological applications in the
    conterminous United States. USGS Data Series 691), and the parameters of :data:`NICHE`.
    The true niche is :math:`p \ge` ``NICHE["presence_threshold"]``.
    """
    if not isinstance(climate, xr.Dataset):
        raise DataError(f"`climate` must be an xarray.Dataset, got {type(climate).__name__}")
    attrs = {"units": "1", "long_name": "known presence probability of the invented plant",
             "description": "exp(-0.5*((bio10-opt)/sd)^2) / (1 + exp(-(bio12-mid)/scale)), "
                            "parameters in timeslice.demo.NICHE"}
    if "bio10" in climate and "bio12" in climate:
        p = xr.apply_ufunc(_presence_probability, climate["bio10"], climate["bio12"],
                           dask="parallelized", output_dtypes=[np.float64])
        return p.rename("true_presence_probability").assign_attrs(attrs)
    missing = [v for v in ("tasmin", "tasmax", "pr") if v not in climate]
    if missing:
        found = ", ".join(map(str, climate.data_vars)) or "none"
        raise DataError(
            f"`climate` lacks {', '.join(missing)} (found {found}); "
            "give bio10 and bio12, or monthly tasmin, tasmax and pr"
        )
    dim = next((d for d in ("month", "time") if climate.sizes.get(d) == 12), None)
    if dim is None:
        raise DataError(
            f"`climate` needs a `month` or `time` dimension of length 12, got dims "
            f"{dict(climate.sizes)}; reduce it to a 12-month climatology first"
        )
    for v in ("tasmin", "tasmax"):
        if str(climate[v].attrs.get("units", "degC")).strip() in _KELVIN:
            raise DataError(f"`climate.{v}` is in kelvin; convert to degC first "
                            "(timeslice.readers.open_climate does)")
    if dim == "month":
        climate = climate.sortby("month")
    if climate.chunks:  # the month axis must be whole in every chunk
        climate = climate.chunk({dim: -1})

    def kernel(tn, tx, pr):
        b10, b12 = _bio10_bio12(np.moveaxis(tn, -1, 0), np.moveaxis(tx, -1, 0),
                                np.moveaxis(pr, -1, 0))
        return _presence_probability(b10, b12)

    p = xr.apply_ufunc(kernel, climate["tasmin"], climate["tasmax"], climate["pr"],
                       input_core_dims=[[dim]] * 3, dask="parallelized",
                       output_dtypes=[np.float64])
    return p.rename("true_presence_probability").assign_attrs(attrs)


def _block_mean(a: np.ndarray, k: int, weights_lat: np.ndarray) -> np.ndarray:
    """Area-weighted mean over k x k blocks of the last two axes."""
    *lead, ny, nx = a.shape
    w = np.broadcast_to(weights_lat[:, None], (ny, nx))
    aw = (a * w).reshape(*lead, ny // k, k, nx // k, k).sum(axis=(-3, -1))
    ww = w.reshape(ny // k, k, nx // k, k).sum(axis=(-3, -1))
    return aw / ww


# ---------------------------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------------------------


def _global_attrs(seed: int, **extra) -> dict:
    attrs = {
        "Conventions": "CF-1.8",
        "title": _TITLE,
        "institution": "none (invented)",
        "source": f"timeslice.demo.generate, seed {seed}",
        "comment": _COMMENT,
        # fixed text, no timestamp: the files must be reproducible bit for bit
        "history": f"created by timeslice.demo.generate(seed={seed})",
    }
    attrs.update(extra)
    return attrs


def _coord_vars(lon: np.ndarray, lat: np.ndarray, *, res: float) -> dict:
    lon_b = np.stack([lon - res / 2, lon + res / 2], axis=1)
    # bounds run in the direction of the coordinate (descending latitudes stay descending)
    sign = 1.0 if lat.size < 2 or lat[-1] > lat[0] else -1.0
    lat_b = np.stack([lat - sign * res / 2, lat + sign * res / 2], axis=1)
    coords = {
        "lat": ("lat", lat, {"standard_name": "latitude", "long_name": "latitude",
                             "units": "degrees_north", "axis": "Y", "bounds": "lat_bnds"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "long_name": "longitude",
                             "units": "degrees_east", "axis": "X", "bounds": "lon_bnds"}),
    }
    bnds = {"lat_bnds": (("lat", "bnds"), lat_b), "lon_bnds": (("lon", "bnds"), lon_b)}
    return coords, bnds


def _time_vars(calendar: str, years: tuple[int, int], units: str):
    """Mid-month times of the first year and CF climatology bounds spanning `years`."""
    y0, y1 = years
    cal = "standard" if calendar == "standard" else calendar
    starts = [cftime.datetime(y0, m, 1, calendar=cal) for m in range(1, 13)]
    nexts = [cftime.datetime(y0 + (m == 12), m % 12 + 1, 1, calendar=cal) for m in range(1, 13)]
    s = cftime.date2num(starts, units, calendar=cal)
    e = cftime.date2num(nexts, units, calendar=cal)
    mid = 0.5 * (np.asarray(s) + np.asarray(e))
    ends = [cftime.datetime(y1 + (m == 12), m % 12 + 1, 1, calendar=cal) for m in range(1, 13)]
    bnd = np.stack([np.asarray(s), np.asarray(cftime.date2num(ends, units, calendar=cal))], axis=1)
    time = ("time", mid.astype("float64"),
            {"standard_name": "time", "long_name": "time", "units": units, "calendar": calendar,
             "axis": "T", "climatology": "climatology_bnds"})
    return time, (("time", "bnds"), bnd.astype("float64"))


def _write_nc(ds: xr.Dataset, path: Path, encoding: dict) -> None:
    for name in ds.variables:
        encoding.setdefault(name, {})
        encoding[name].setdefault("_FillValue", None)
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=encoding)
        os.chmod(tmp, _FILE_MODE)


def _float_enc(lsd: int | None = None) -> dict:
    enc = {"dtype": "float32", "zlib": True, "complevel": 6, "shuffle": True,
           "_FillValue": np.float32(1.0e20)}
    if lsd is not None:
        enc["least_significant_digit"] = lsd
    return enc


def _quantise(a: np.ndarray, lsd: int) -> np.ndarray:
    """Round to a power-of-two step no coarser than 10**-lsd (as netCDF4's
    ``least_significant_digit``), as float32: trailing mantissa bits become zero, so zlib
    compresses well and the stored values are known exactly before writing."""
    scale = 2.0 ** np.ceil(np.log2(10.0**lsd))
    return (np.around(a * scale) / scale).astype(np.float32)


def _write_text(text: str, path: Path) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")
        os.chmod(tmp, _FILE_MODE)


# ---------------------------------------------------------------------------------------------
# records
# ---------------------------------------------------------------------------------------------

_DWC_COLUMNS = [
    "occurrenceID", "scientificName", "decimalLatitude", "decimalLongitude",
    "coordinateUncertaintyInMeters", "occurrenceStatus", "basisOfRecord", "eventDate", "year",
    "individualCount",
]


def _random_date(rng: np.random.Generator) -> tuple[str, int]:
    start = _dt.date(1950, 1, 1).toordinal()
    end = _dt.date(2020, 12, 31).toordinal()
    d = _dt.date.fromordinal(int(rng.integers(start, end + 1)))
    return d.isoformat(), d.year


def _sample_points(rng, weights: np.ndarray, lon: np.ndarray, lat: np.ndarray, res: float,
                   n: int) -> tuple[np.ndarray, np.ndarray]:
    w = weights.ravel() / weights.sum()
    idx = rng.choice(w.size, size=n, replace=True, p=w)
    iy, ix = np.unravel_index(idx, weights.shape)
    plon = lon[ix] + rng.uniform(-0.45, 0.45, n) * res
    plat = lat[iy] + rng.uniform(-0.45, 0.45, n) * res
    return plon, plat


def _effort(z: np.ndarray, dist: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Relative sampling effort: coasts, lowland "roads" (valleys) and the south (EFFORT)."""
    e = EFFORT
    lat2 = np.broadcast_to(lat[:, None], z.shape)
    return (e["base"] + e["coast"] * np.exp(-dist / e["coast_km"])
            + e["lowland"] * np.exp(-np.maximum(z, 0) / e["lowland_m"])) \
        * (1.0 + (55.0 - lat2) / e["south_deg"])


_UNCERTAINTY_M = np.array([10, 25, 50, 100, 250, 1000, 2000, 5000])
_BASIS = ["HumanObservation", "HumanObservation", "HumanObservation", "PreservedSpecimen",
          "MachineObservation"]


def _presence_rows(rng, plon, plat, kind: str = "clean") -> list[dict]:
    rows = []
    for i in range(plon.size):
        date, year = _random_date(rng)
        rows.append({
            "decimalLatitude": f"{plat[i]:.5f}", "decimalLongitude": f"{plon[i]:.5f}",
            "coordinateUncertaintyInMeters": str(int(rng.choice(_UNCERTAINTY_M))),
            "occurrenceStatus": "present",
            "basisOfRecord": _BASIS[int(rng.integers(len(_BASIS)))],
            "eventDate": date, "year": str(year),
            "individualCount": str(int(rng.integers(1, 25))),
            "_kind": kind,
        })
    return rows


def _target_group(rng, w) -> list[dict]:
    """Clean presence records of the invented related species, with the focal effort."""
    b10, b12 = _bio10_bio12(**w.fine)
    effort = _effort(w.z, w.dist, w.lat)
    rows: list[dict] = []
    for name, q in TARGET_GROUP.items():
        p = np.exp(-0.5 * ((b10 - q["bio10_optimum_degC"]) / q["bio10_sd_degC"]) ** 2) \
            / (1.0 + np.exp(-(b12 - q["bio12_midpoint_mm"]) / NICHE["bio12_scale_mm"]))
        weights = np.where(w.land, p * effort, 0.0)
        plon, plat = _sample_points(rng, weights, w.lon, w.lat, w.res, q["n"])
        for r in _presence_rows(rng, plon, plat):
            r["scientificName"] = name
            rows.append(r)
    order = rng.permutation(len(rows))
    rows = [rows[i] for i in order]
    for k, r in enumerate(rows, start=1):
        r["occurrenceID"] = f"urn:timeslice-demo:target-group:{k:05d}"
    return rows


def _occurrences(rng, *, lon, lat, res, z, prob, dist, n_clean: int) -> tuple[list, dict]:
    lon2, lat2 = np.meshgrid(lon, lat)
    weights = np.where(z > 0, prob * _effort(z, dist, lat), 0.0)
    plon, plat = _sample_points(rng, weights, lon, lat, res, n_clean)
    rows = _presence_rows(rng, plon, plat)

    def clone(kind: str) -> dict:
        r = dict(rows[int(rng.integers(n_clean))])
        r["_kind"] = kind
        return r

    bad_counts = {"swapped_lat_lon": 5, "zero_coordinates": 3, "at_sea": 5,
                  "exact_duplicate": 5, "absent": 4, "huge_uncertainty": 3}
    bad = []
    for _ in range(bad_counts["swapped_lat_lon"]):
        r = clone("swapped_lat_lon")
        r["decimalLatitude"], r["decimalLongitude"] = r["decimalLongitude"], r["decimalLatitude"]
        bad.append(r)
    for _ in range(bad_counts["zero_coordinates"]):
        r = clone("zero_coordinates")
        r["decimalLatitude"], r["decimalLongitude"] = "0.00000", "0.00000"
        bad.append(r)
    sea = (z < -300.0) & (np.abs(lon2 + 30.0) < 9.0) & (np.abs(lat2 - 47.5) < 6.5)
    slon, slat = _sample_points(rng, sea.astype(float), lon, lat, res,
                                bad_counts["at_sea"])
    for i in range(bad_counts["at_sea"]):
        r = clone("at_sea")
        r["decimalLatitude"], r["decimalLongitude"] = f"{slat[i]:.5f}", f"{slon[i]:.5f}"
        bad.append(r)
    for _ in range(bad_counts["absent"]):
        r = clone("absent")
        r["occurrenceStatus"] = "absent"
        r["individualCount"] = "0"
        bad.append(r)
    for _ in range(bad_counts["huge_uncertainty"]):
        r = clone("huge_uncertainty")
        r["coordinateUncertaintyInMeters"] = str(int(rng.choice([50000, 75000, 120000])))
        bad.append(r)
    # ids first, so that exact duplicates repeat the id as well
    allrows = rows + bad
    order = rng.permutation(len(allrows))
    allrows = [allrows[i] for i in order]
    for k, r in enumerate(allrows, start=1):
        r["occurrenceID"] = f"urn:timeslice-demo:nivalia:{k:05d}"
        r["scientificName"] = SPECIES
    dups = [dict(allrows[int(i)]) for i in rng.choice(
        [k for k, r in enumerate(allrows) if r["_kind"] == "clean"],
        size=bad_counts["exact_duplicate"], replace=False)]
    for r in dups:
        r["_kind"] = "exact_duplicate"
    for r in dups:
        pos = int(rng.integers(len(allrows) + 1))
        allrows.insert(pos, r)
    return allrows, bad_counts


def _rows_to_csv(rows: list[dict], columns: list[str]) -> str:
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([r[c] for c in columns])
    return buf.getvalue()


def _dated_records(rng, *, lon, lat, res, z, prob, prob21) -> list[dict]:
    """Invented fossil-like records: glacial ones on the exposed shelf and in the southern
    lowlands where the true 21 ka niche lies, Holocene ones at mid elevations in the present
    niche. Ages are chosen so that each record is nearest in time to the 21 ka or the 6 ka
    slice."""
    lon2, lat2 = np.meshgrid(lon, lat)
    shelf = (z <= 0) & (z > SEA_LEVEL_21KA)
    low_south = (z > 0) & (z < 500) & (lat2 < 47.0)
    montane = (z > 400) & (z < 1800)
    plans = [("exposed shelf", shelf, prob21, 3, (17000, 22000)),
             ("southern lowland", low_south, prob21, 4, (15000, 21500)),
             ("montane", montane, prob, 5, (4000, 9000))]
    materials = ["pollen", "macrofossil", "seed", "leaf fragment"]
    out = []
    for kind, mask, pr_, n, (a0, a1) in plans:
        wts = np.where(mask, 0.02 + pr_**2, 0.0)
        if wts.sum() == 0:  # very coarse test grids
            wts = np.where(z > SEA_LEVEL_21KA, 1.0, 0.0)
        plon, plat = _sample_points(rng, wts, lon, lat, res, n)
        for i in range(n):
            age = float(np.round(rng.uniform(a0, a1), -1))
            sd = float(np.round(30 + 0.02 * age * rng.uniform(0.5, 1.5), 0))
            out.append({"lon": f"{plon[i]:.4f}", "lat": f"{plat[i]:.4f}",
                        "age_bp": f"{age:.0f}", "age_sd": f"{sd:.0f}",
                        "material": materials[int(rng.integers(len(materials)))],
                        "_setting": kind})
    order = np.argsort([-float(r["age_bp"]) for r in out], kind="stable")
    out = [out[i] for i in order]
    for k, r in enumerate(out, start=1):
        r["record_id"] = f"DR{k:03d}"
    return out


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


def _check_resolution(resolution: float) -> int:
    try:
        r = float(resolution)
    except (TypeError, ValueError):
        raise ConfigError(f"demo `resolution` must be a number of degrees, got {resolution!r}") \
            from None
    k = round(MODEL_RESOLUTION / r) if r > 0 else 0
    if r <= 0 or k < 1 or abs(k * r - MODEL_RESOLUTION) > 1e-9 or r > 0.5:
        raise ConfigError(
            f"demo `resolution` must divide 1 degree evenly and be at most 0.5 "
            f"(e.g. 0.1, 0.25, 0.5), got {resolution!r}"
        )
    return k


def generate(out_dir: str | os.PathLike, *, seed: int = DEFAULT_SEED,
             resolution: float = 0.1, target_group: bool = False) -> dict[str, Path]:
    """Write the invented demo scenario to `out_dir`.

    Parameters
    ----------
    out_dir : path
        Folder to write into (created if missing). Existing demo files are replaced
        atomically (temporary name, then rename); other files are left alone.
    seed : int
        Seed of every random choice; the same seed and resolution give identical bytes.
    resolution : float
        Fine-grid cell size in degrees; must divide 1 degree and be at most 0.5 (0.1 for
        the committed demo; 0.25 or 0.5 for quick tests).
    target_group : bool
        Also write ``target_group.csv``: Darwin Core records of four invented related species
        (:data:`TARGET_GROUP`) sampled with the same effort as the focal species, for a
        bias-matched (target-group) background. Off by default; the other files do not
        change when it is switched on.

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``baseline``, ``dem``, ``ice_21ka``, ``occurrences``, ``dated_records``,
        ``truth`` and ``<model>/<slice>`` (e.g. ``alder/baseline``, ``cedar/21ka``), and
        ``target_group`` when asked for.

    Raises
    ------
    timeslice.errors.ConfigError
        `seed` not an integer, `resolution` not usable, or `out_dir` an existing file.

    Notes
    -----
    Temperature falls with elevation at the standard-atmosphere lapse rate,

    .. math:: T(z) = T_0(\\varphi) - \\Gamma z, \\quad \\Gamma = 6.5\\ \\mathrm{K\\,km^{-1}}

    (ICAO 1993, Manual of the ICAO Standard Atmosphere, Doc 7488/3). Precipitation fluxes
    in the model files are depths per month divided by the month's length in the model's
    calendar (CF Conventions 1.8, section 4.4.1) and multiplied by the density of water,
    1000 kg m-3. The presence probability of the invented plant is

    .. math:: p = \\exp\\left(-\\tfrac12\\left(\\tfrac{B_{10} - \\mu}{\\sigma}\\right)^2\\right)
              \\left(1 + \\exp\\left(-\\tfrac{B_{12} - m}{s}\\right)\\right)^{-1}

    with :math:`B_{10}` the mean temperature of the warmest quarter and :math:`B_{12}` the
    annual precipitation (O'Donnell & Ignizio 2012, USGS Data Series 691), parameters in
    :data:`NICHE`.

    Examples
    --------
    >>> paths = generate(tmp_path, resolution=0.5)  # doctest: +SKIP
    >>> sorted(paths)[:3]  # doctest: +SKIP
    ['alder/21ka', 'alder/6ka', 'alder/baseline']
    """
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool):
        raise ConfigError(f"demo `seed` must be an integer, got {seed!r}")
    k = _check_resolution(resolution)
    res = MODEL_RESOLUTION / k
    from timeslice.io import writable_folder

    out = writable_folder(out_dir, what="demo output folder")
    rng = np.random.default_rng(seed)
    p = _landscape_params(rng)
    w = _World(p, res, k)
    paths: dict[str, Path] = {}
    paths["dem"] = _write_dem(w, out / "dem.nc", seed)
    paths["baseline"] = _write_baseline(w, out / "baseline.nc", seed)
    paths["ice_21ka"] = _write_ice(p, out / "ice_21ka.nc", seed)
    paths.update(_write_models(w, out / "models", seed))

    prob = np.where(w.land, _presence_probability(*_bio10_bio12(**w.fine)), 0.0)
    clim21, land21 = _true_21ka(w)
    prob21 = np.where(land21, _presence_probability(*_bio10_bio12(**clim21)), 0.0)
    n_clean = 480
    occ_rows, bad_counts = _occurrences(rng, lon=w.lon, lat=w.lat, res=res, z=w.z, prob=prob,
                                        dist=w.dist, n_clean=n_clean)
    paths["occurrences"] = out / "occurrences.csv"
    _write_text(_rows_to_csv(occ_rows, _DWC_COLUMNS), paths["occurrences"])
    dated = _dated_records(rng, lon=w.lon, lat=w.lat, res=res, z=w.z, prob=prob, prob21=prob21)
    paths["dated_records"] = out / "dated_records.csv"
    _write_text(_rows_to_csv(dated, ["record_id", "lon", "lat", "age_bp", "age_sd", "material"]),
                paths["dated_records"])

    # invented partner, sampled populations and reserves: their own stream of random numbers,
    # so the other files stay the same
    paths.update(_write_extras(w, out, seed, prob=prob, prob21=prob21))

    if target_group:
        # its own stream of random numbers, so the other files stay the same
        tg_rows = _target_group(np.random.default_rng([int(seed), 2]), w)
        paths["target_group"] = out / "target_group.csv"
        _write_text(_rows_to_csv(tg_rows, _DWC_COLUMNS), paths["target_group"])

    area = cell_area(xr.Dataset(coords={"lat": ("lat", w.lat), "lon": ("lon", w.lon)})).values
    thr = NICHE["presence_threshold"]
    suitable, suitable21 = w.land & (prob >= thr), land21 & (prob21 >= thr)
    shelf21 = land21 & ~w.land
    km2 = lambda m: round(float(area[m].sum()), 1)  # noqa: E731
    n_bad = sum(bad_counts.values())
    truth_doc = {
        "description": "Known parameters of the invented demo scenario (for checks). "
                       "Areas in km2 are sums of spherical cell areas (timeslice.grid.cell_area).",
        "seed": int(seed),
        "resolution_deg": res,
        "species": SPECIES,
        "niche": {
            **NICHE,
            "formula": "p = exp(-0.5*((bio10 - opt)/sd)^2) / (1 + exp(-(bio12 - mid)/scale)); "
                       "suitable where p >= presence_threshold",
            "bio10": "mean of (tasmin+tasmax)/2 over the warmest rolling 3-month window "
                     "(wrapping December-January), degC",
            "bio12": "annual precipitation total, mm",
        },
        "true_niche_area_km2": km2(suitable),
        "true_niche_cells": int(suitable.sum()),
        "true_21ka": {
            "description": "the niche under the invented true 21 ka climate: the mean of the "
                           "three models' changes on the fine grid, land above -120 m and "
                           "not under ice, shelf climate from the nearest present land cell "
                           "with the lapse-rate correction",
            "niche_area_km2": km2(suitable21),
            "niche_area_on_exposed_shelf_km2": km2(suitable21 & shelf21),
            "stable_with_baseline_km2": km2(suitable21 & suitable),
        },
        "land_area_km2": km2(w.land),
        "land_cells": int(w.land.sum()),
        "land_area_21ka_km2": km2(land21),
        "shelf_exposed_at_21ka_km2": km2(shelf21),
        "sea_level_21ka_m": SEA_LEVEL_21KA,
        "lapse_rate_K_per_km": LAPSE_RATE_K_PER_M * 1000.0,
        "max_elevation_m": round(float(w.z.max()), 1),
        "climate": CLIMATE,
        "sampling_effort": EFFORT,
        "records": {"clean": n_clean, "bad": {**bad_counts}, "total": n_clean + n_bad,
                    "bad_fraction": round(n_bad / (n_clean + n_bad), 4)},
        "dated_records": {"n": len(dated),
                          "settings": {r["record_id"]: r["_setting"] for r in dated}},
        "models": MODELS,
        "slices": SLICES,
        "landscape": {k2: v for k2, v in p.items() if not k2.endswith("noise")},
    }
    if target_group:
        truth_doc["target_group"] = TARGET_GROUP
    paths["truth"] = out / "truth.json"
    _write_text(json.dumps(_jsonable(truth_doc), indent=2, sort_keys=True) + "\n", paths["truth"])
    return paths


class _World:
    """The invented truth on the model domain at the fine resolution, and the fine sub-box."""

    def __init__(self, p: dict, res: float, k: int):
        self.res, self.k = res, k
        big = make_grid(lon_min=MODEL_EXTENT[0], lon_max=MODEL_EXTENT[1],
                        lat_min=MODEL_EXTENT[2], lat_max=MODEL_EXTENT[3], resolution=res)
        self.blon, self.blat = big["lon"].values, big["lat"].values
        blon2, blat2 = np.meshgrid(self.blon, self.blat)
        # quantised as stored (1/16 m), so that land masks from dem.nc match the truth
        self.bz = _quantise(_elevation(blon2, blat2, p), 1).astype(np.float64)
        self.truth = _truth_climate(self.blon, self.blat, self.bz, res, p)
        self.bice = _ice_on(self.blon, self.blat, p)
        fx = (self.blon > FINE_EXTENT[0]) & (self.blon < FINE_EXTENT[1])
        fy = (self.blat > FINE_EXTENT[2]) & (self.blat < FINE_EXTENT[3])
        self.lon, self.lat = self.blon[fx], self.blat[fy]
        self.z = self.bz[np.ix_(fy, fx)]
        self.ice = self.bice[np.ix_(fy, fx)]
        self.land = self.z > 0
        # quantised as stored, so that truth.json and presence_probability(baseline.nc) agree
        self.fine = {v: _quantise(a[:, fy][:, :, fx], 2) for v, a in self.truth.items()}
        self.dist = _coast_distance_km(self.land, self.lat, res)
        cg = make_grid(lon_min=MODEL_EXTENT[0], lon_max=MODEL_EXTENT[1],
                       lat_min=MODEL_EXTENT[2], lat_max=MODEL_EXTENT[3],
                       resolution=MODEL_RESOLUTION)
        self.clon, self.clat = cg["lon"].values, cg["lat"].values
        wlat = np.cos(np.deg2rad(self.blat))
        self.coarse = {v: _block_mean(a, k, wlat) for v, a in self.truth.items()}
        self.czpos = _block_mean(np.maximum(self.bz, 0.0), k, wlat)
        self.cice = _block_mean(self.bice.astype(float), k, wlat)


_ICE_LEVEL = 0.35
_MONTH = np.arange(1, 13)[:, None, None]
_SUMMER = np.cos(2 * np.pi * (_MONTH - 7.0) / 12.0)  # +1 in July, -1 in January


def _ice_grid(p: dict):
    """The 0.5 degree ice mask (lon, lat, bool) as written to ice_21ka.nc."""
    ig = make_grid(lon_min=FINE_EXTENT[0], lon_max=FINE_EXTENT[1], lat_min=FINE_EXTENT[2],
                   lat_max=FINE_EXTENT[3], resolution=ICE_RESOLUTION)
    ilon, ilat = ig["lon"].values, ig["lat"].values
    ilon2, ilat2 = np.meshgrid(ilon, ilat)
    return ilon, ilat, _ice_shape(ilon2, ilat2, p) > _ICE_LEVEL


def _ice_on(lon: np.ndarray, lat: np.ndarray, p: dict) -> np.ndarray:
    """Ice on a finer grid: each cell takes the 0.5 degree ice cell it lies in (the grids
    nest), so the truth sees the same ice as a pipeline reading ice_21ka.nc."""
    _, _, ice = _ice_grid(p)
    iy = np.floor((lat - FINE_EXTENT[2]) / ICE_RESOLUTION).astype(int)
    ix = np.floor((lon - FINE_EXTENT[0]) / ICE_RESOLUTION).astype(int)
    oky = (iy >= 0) & (iy < ice.shape[0])
    okx = (ix >= 0) & (ix < ice.shape[1])
    out = np.zeros((lat.size, lon.size), dtype=bool)
    out[np.ix_(oky, okx)] = ice[np.ix_(iy[oky], ix[okx])]
    return out


def _ice_shape(lon2, lat2, p: dict) -> np.ndarray:
    """Smooth ice-sheet footprint around the northern massif (> _ICE_LEVEL = ice)."""
    q = p["north_massif"]
    xq, yq = _km(lon2, lat2, q["lon"], q["lat"])
    return np.exp(-((xq / (2.6 * q["sx_km"])) ** 2) - (yq / (1.7 * q["sy_km"])) ** 2)


def _pattern(spec: dict, lat2: np.ndarray, zpos: np.ndarray, norm: float | None = None):
    """Spatial pattern of a slice's temperature change (mean 1 over the model domain)."""
    g = 1.0 + spec.get("lat_gradient", 0.01) * (lat2 - 47.5) \
        + spec.get("elevation_gradient", 0.15) * zpos / 1000.0
    return g / (g.mean() if norm is None else norm)


def _slice_change(spec: dict, ch: dict, lat2, zpos, ice, *, norm=None):
    """Monthly temperature change (K) and precipitation factor of one slice."""
    dT = ch["dT"] * _pattern(spec, lat2, zpos, norm) + ch["summer"] * _SUMMER
    if spec["period"] == "21ka":
        dT = dT - 3.0 * ice  # extra cooling over the ice sheet
    dry_south = 1.0 + 0.5 * (47.5 - lat2) / 12.5
    fac = ch["pr"] * (1.0 + ch["pr_summer"] * np.clip(_SUMMER, 0, None) * dry_south)
    return dT, fac


def _true_21ka(w: _World):
    """Invented true 21 ka climate on the fine grid (mean of the models' changes)."""
    spec = SLICES["21ka"]
    ch = {key: float(np.mean([spec["change"][m][key] for m in MODELS]))
          for key in ("dT", "summer", "pr", "pr_summer")}
    clat2 = np.broadcast_to(w.clat[:, None], w.czpos.shape)
    norm = float(_pattern(spec, clat2, w.czpos, 1.0).mean())
    lat2 = np.broadcast_to(w.lat[:, None], w.z.shape)
    dT, fac = _slice_change(spec, ch, lat2, np.maximum(w.z, 0.0), w.ice.astype(float),
                            norm=norm)
    land21 = (w.z > SEA_LEVEL_21KA) & ~w.ice
    idx = ndimage.distance_transform_edt(~w.land, return_distances=False, return_indices=True)
    iy, ix = idx
    lapse = LAPSE_RATE_K_PER_M * (w.z[iy, ix] - w.z)  # shelf is lower, so warmer
    clim = {}
    for v in ("tasmin", "tasmax"):
        clim[v] = w.fine[v][:, iy, ix] + lapse[None] + dT * (1.04 if v == "tasmin" else 0.96)
    clim["pr"] = w.fine["pr"][:, iy, ix] * fac
    return clim, land21


def _write_dem(w: _World, path: Path, seed: int) -> Path:
    coords, bnds = _coord_vars(w.lon, w.lat, res=w.res)
    dem = xr.Dataset(
        {"elevation": (("lat", "lon"), w.z.astype("float32"), {
            "standard_name": "height_above_mean_sea_level", "long_name": "surface elevation",
            "units": "m", "positive": "up",
            "description": "invented terrain and bathymetry relative to present sea level; "
                           "negative values are below sea level"}),
         **bnds},
        coords=coords, attrs=_global_attrs(seed),
    )
    _write_nc(dem, path, {"elevation": _float_enc()})  # quantised in _World
    return path


def _write_baseline(w: _World, path: Path, seed: int) -> Path:
    """Fine monthly climatology, NaN at sea on purpose (the shelf must be filled downstream)."""
    coords, bnds = _coord_vars(w.lon, w.lat, res=w.res)
    time, clim_b = _time_vars("standard", _BASELINE_YEARS, _OBS_TIME_UNITS)
    dims = ("time", "lat", "lon")
    mask = w.land[None]
    longs = {"tasmin": "mean daily minimum near-surface air temperature",
             "tasmax": "mean daily maximum near-surface air temperature"}
    cms = {"tasmin": _CM_TMIN, "tasmax": _CM_TMAX}
    data = {v: (dims, np.where(mask, w.fine[v], np.nan).astype("float32"),
                {"standard_name": "air_temperature", "long_name": longs[v], "units": "degC",
                 "cell_methods": cms[v]})
            for v in ("tasmin", "tasmax")}
    data["pr"] = (dims, np.where(mask, w.fine["pr"], np.nan).astype("float32"), {
        "standard_name": "lwe_precipitation_rate", "long_name": "monthly precipitation total",
        "units": "mm/month", "comment": "depth of liquid water per calendar month",
        "cell_methods": _CM_PR})
    base = xr.Dataset({**data, "climatology_bnds": clim_b, **bnds},
                      coords={**coords, "time": time},
                      attrs=_global_attrs(seed, model="observed", scenario="baseline",
                                          period=f"{_BASELINE_YEARS[0]}-{_BASELINE_YEARS[1]}",
                                          note="values over sea are missing on purpose"))
    _write_nc(base, path, {v: _float_enc() for v in ("tasmin", "tasmax", "pr")})  # quantised
    return path


#: The invented host plant of the demo (a required partner): present on land below this
#: elevation, m (invented).
HOST_MAX_ELEVATION_M = 1400.0


def _write_extras(w: _World, out: Path, seed: int, *, prob: np.ndarray,
                  prob21: np.ndarray) -> dict[str, Path]:
    """Invented data for the tests beyond the climate niche: a host plant the species needs
    (``host_plant.nc``), sampled populations with a haplotype diversity that rises where the
    niche was suitable both at 21 ka and today (``populations.csv``), and two reserves
    (``reserves.geojson``). All invented."""
    rng = np.random.default_rng([int(seed), 3])
    paths: dict[str, Path] = {}
    coords, bnds = _coord_vars(w.lon, w.lat, res=w.res)
    host = np.where(w.land, (w.z < HOST_MAX_ELEVATION_M).astype("float32"), np.nan)
    ds = xr.Dataset(
        {"host_presence": (("lat", "lon"), host.astype("float32"), {
            "units": "1", "long_name": "presence of the invented host plant Hospes fictus",
            "description": f"invented: present on land below {HOST_MAX_ELEVATION_M:g} m, the "
                           "same in every slice"}), **bnds},
        coords=coords, attrs=_global_attrs(seed))
    paths["host_plant"] = out / "host_plant.nc"
    _write_nc(ds, paths["host_plant"], {"host_presence": _float_enc()})
    # populations: 24 sites where the species occurs today (p >= 0.2), diversity from the
    # invented history (stable since 21 ka: higher)
    lat2, lon2 = np.meshgrid(w.lat, w.lon, indexing="ij")
    cand = np.flatnonzero((w.land & (prob >= 0.2)).ravel())
    pick = np.sort(rng.choice(cand, min(24, cand.size), replace=False))
    stable = np.minimum(prob, prob21).ravel()[pick]
    hd = np.clip(0.15 + 0.6 * stable + rng.normal(0.0, 0.04, pick.size), 0.0, 1.0)
    rows = [{"population": f"P{i + 1:02d}", "lon": round(float(lon2.ravel()[j]), 4),
             "lat": round(float(lat2.ravel()[j]), 4), "haplotype_diversity": round(float(h), 3)}
            for i, (j, h) in enumerate(zip(pick, hd))]
    paths["populations"] = out / "populations.csv"
    _write_text(_rows_to_csv(rows, ["population", "lon", "lat", "haplotype_diversity"]),
                paths["populations"])
    # reserves: boxes on whole half degrees (edges on cell edges at any demo resolution)
    zmax = np.unravel_index(np.argmax(np.where(w.land, w.z, -np.inf)), w.z.shape)
    cx, cy = np.floor(w.lon[zmax[1]] * 2) / 2, np.floor(w.lat[zmax[0]] * 2) / 2
    land_lat = w.lat[w.land.any(axis=1)]
    land_lon = w.lon[w.land.any(axis=0)]
    sx, sy = np.ceil(land_lon.min() * 2) / 2, np.ceil(land_lat.min() * 2) / 2
    boxes = {"Highland Reserve": (cx - 1.0, cy - 1.0, cx + 1.0, cy + 1.0),
             "Southwest Coast Reserve": (sx, sy, sx + 1.5, sy + 1.0)}
    feats = [{"type": "Feature", "properties": {"name": name},
              "geometry": {"type": "Polygon", "coordinates": [[
                  [x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]]}}
             for name, (x0, y0, x1, y1) in boxes.items()]
    paths["reserves"] = out / "reserves.geojson"
    _write_text(json.dumps({"type": "FeatureCollection", "name": "invented reserves",
                            "features": _jsonable(feats)}, indent=1) + "\n", paths["reserves"])
    return paths


def _write_ice(p: dict, path: Path, seed: int) -> Path:
    ilon, ilat, ice_mask = _ice_grid(p)
    sftgif = np.where(ice_mask, 100.0, 0.0)
    icoords, ibnds = _coord_vars(ilon, ilat, res=ICE_RESOLUTION)
    ice = xr.Dataset(
        {"sftgif": (("lat", "lon"), sftgif.astype("float32"), {
            "standard_name": "land_ice_area_fraction", "long_name": "land ice area fraction",
            "units": "%", "description": "invented ice sheet over the northern highland "
                                         "massif and a margin at 21 ka BP"}),
         **ibnds},
        coords=icoords, attrs=_global_attrs(seed, period="21ka", age_bp=21000),
    )
    _write_nc(ice, path, {"sftgif": _float_enc()})
    return path


def _write_models(w: _World, folder: Path, seed: int) -> dict[str, Path]:
    clon2, clat2 = np.meshgrid(w.clon, w.clat)
    paths = {}
    for mname, mb in MODELS.items():
        days = _MONTH_DAYS[mb["calendar"]][:, None, None]
        bias_t = mb["dT"] + mb["dT_per_deg_lat"] * (clat2 - 47.5)
        bias_p = mb["pr_factor"] * (1.0 + mb["pr_per_deg_lon"] * (clon2 + 30.0))
        mbase = {
            "tasmin": w.coarse["tasmin"] + bias_t - 0.5 * mb["dtr"],
            "tasmax": w.coarse["tasmax"] + bias_t + 0.5 * mb["dtr"],
            "pr": w.coarse["pr"] * bias_p,
        }
        entries = [("baseline", None, {"scenario": "baseline", "period": "1981-2010",
                                       "years": _BASELINE_YEARS, "age_bp": None})]
        entries += [(lab, spec["change"][mname], spec) for lab, spec in SLICES.items()]
        for label, ch, spec in entries:
            if ch is None:
                fields = mbase
            else:
                dT, fac = _slice_change(spec, ch, clat2, w.czpos, w.cice)
                fields = {"tasmin": mbase["tasmin"] + dT * 1.04,
                          "tasmax": mbase["tasmax"] + dT * 0.96,
                          "pr": mbase["pr"] * fac}
            paths[f"{mname}/{label}"] = _write_model_file(
                folder / mname / f"{label}.nc", fields, w.clon, w.clat, days,
                model=mname, calendar=mb["calendar"], lat_descending=mb["lat_descending"],
                scenario=spec["scenario"], period=spec["period"], years=spec["years"],
                age_bp=spec["age_bp"], seed=seed)
    return paths


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return round(float(obj), 6)
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def _write_model_file(path: Path, fields: dict, clon, clat, days, *, model, calendar,
                      lat_descending, scenario, period, years, age_bp, seed) -> Path:
    """One raw model climatology: K, kg m-2 s-1, lon 0..360, optional descending lat."""
    lon360 = np.mod(clon, 360.0)
    tmin = fields["tasmin"] + 273.15
    tmax = fields["tasmax"] + 273.15
    flux = fields["pr"] * WATER_DENSITY / 1000.0 / (days * SECONDS_PER_DAY)  # mm -> kg m-2 s-1
    lat = clat
    if lat_descending:
        lat = clat[::-1]
        tmin, tmax, flux = tmin[:, ::-1], tmax[:, ::-1], flux[:, ::-1]
    coords, bnds = _coord_vars(lon360, lat, res=MODEL_RESOLUTION)
    time, clim_b = _time_vars(calendar, years, _MODEL_TIME_UNITS)
    dims = ("time", "lat", "lon")
    extra = {"model": model, "scenario": scenario, "period": period}
    if age_bp is not None:
        extra["age_bp"] = int(age_bp)
        extra["note"] = "paleo slice: the time axis carries nominal model years"
    ds = xr.Dataset(
        {
            "tasmin": (dims, tmin.astype("float32"), {
                "standard_name": "air_temperature",
                "long_name": "daily minimum near-surface air temperature", "units": "K",
                "cell_methods": _CM_TMIN}),
            "tasmax": (dims, tmax.astype("float32"), {
                "standard_name": "air_temperature",
                "long_name": "daily maximum near-surface air temperature", "units": "K",
                "cell_methods": _CM_TMAX}),
            "pr": (dims, flux.astype("float32"), {
                "standard_name": "precipitation_flux", "long_name": "precipitation",
                "units": "kg m-2 s-1", "cell_methods": _CM_PR}),
            "climatology_bnds": clim_b,
            **bnds,
        },
        coords={**coords, "time": time},
        attrs=_global_attrs(seed, **extra),
    )
    _write_nc(ds, path, {v: _float_enc() for v in ("tasmin", "tasmax", "pr")})
    return path


def _repo_demo_dir() -> Path:
    return Path(__file__).resolve().parent.parent / "demo_data"


def write_default(out_dir: str | os.PathLike | None = None) -> dict[str, Path]:
    """Regenerate the committed demo files (``demo_data/`` in the repository by default)."""
    return generate(_repo_demo_dir() if out_dir is None else out_dir)


def sha256_of(paths: dict[str, Path]) -> dict[str, str]:
    """SHA-256 of every written file, for reproducibility checks."""
    return {k: hashlib.sha256(Path(v).read_bytes()).hexdigest() for k, v in sorted(paths.items())}


def main(argv: list[str] | None = None) -> int:
    """``python -m timeslice.demo [OUT_DIR]``: regenerate the demo files."""
    import sys

    args = sys.argv[1:] if argv is None else argv
    paths = write_default(args[0] if args else None)
    total = sum(Path(v).stat().st_size for v in paths.values())
    print(f"wrote {len(paths)} files ({total / 1e6:.2f} MB) to {Path(paths['dem']).parent}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
