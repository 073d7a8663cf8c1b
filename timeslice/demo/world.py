"""The invented world of the demo: landscape, true climate, the plant's known niche, the ice
sheet and the slices' changes, on the model domain at the fine resolution."""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy import ndimage

from timeslice.demo.scenario import (
    CLIMATE,
    FINE_EXTENT,
    ICE_RESOLUTION,
    KM_PER_DEGREE,
    LAPSE_RATE_K_PER_M,
    MODEL_EXTENT,
    MODEL_RESOLUTION,
    MODELS,
    NICHE,
    SEA_LEVEL_21KA,
    SLICES,
)
from timeslice.errors import DataError
from timeslice.grid import make_grid


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


def landscape_params(rng: np.random.Generator) -> dict:
    """Seeded positions and sizes of the invented landforms.

    Parameters
    ----------
    rng : numpy.random.Generator
        The scenario's random stream (advanced by this call).

    Returns
    -------
    dict
        One entry per landform (``main``, ``offshore``, ``bridge``, ``north_massif``,
        ``south_range``, ``east_hills``: centres in degrees, sizes in km, peaks in m) and the
        plane waves of three noises (``coast_noise``, ``relief_noise``, ``climate_noise``).
    """
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


def bio10_bio12(tasmin: np.ndarray, tasmax: np.ndarray, pr: np.ndarray):
    """Mean temperature of the warmest quarter and annual precipitation.

    Quarters are the 12 rolling 3-month windows wrapping December to January, Tavg =
    (Tmax + Tmin)/2 (O'Donnell & Ignizio 2012, USGS Data Series 691). Computed here directly
    so that the generator does not depend on the harmonise stage.

    Parameters
    ----------
    tasmin, tasmax : numpy.ndarray
        Monthly mean daily minimum and maximum temperature, degC, month first (12, ...).
    pr : numpy.ndarray
        Monthly precipitation totals, mm, month first (12, ...).

    Returns
    -------
    bio10 : numpy.ndarray
        Mean temperature of the warmest quarter, degC.
    bio12 : numpy.ndarray
        Annual precipitation, mm.
    """
    tavg = 0.5 * (tasmin + tasmax)
    idx = (np.arange(12)[:, None] + np.arange(3)[None, :]) % 12
    q_t = tavg[idx].mean(axis=1)
    bio10 = q_t.max(axis=0)
    bio12 = pr.sum(axis=0)
    return bio10, bio12


def niche_probability(bio10: np.ndarray, bio12: np.ndarray) -> np.ndarray:
    """Known presence probability of the invented plant from its two bioclimatic predictors.

    Parameters
    ----------
    bio10 : numpy.ndarray
        Mean temperature of the warmest quarter, degC.
    bio12 : numpy.ndarray
        Annual precipitation, mm.

    Returns
    -------
    numpy.ndarray
        Gaussian in `bio10` times logistic in `bio12` (parameters in :data:`NICHE`), 0..1.
    """
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
        p = xr.apply_ufunc(niche_probability, climate["bio10"], climate["bio12"],
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
        b10, b12 = bio10_bio12(np.moveaxis(tn, -1, 0), np.moveaxis(tx, -1, 0),
                               np.moveaxis(pr, -1, 0))
        return niche_probability(b10, b12)

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


def quantise(a: np.ndarray, lsd: int) -> np.ndarray:
    """Round to a power-of-two step no coarser than 10**-lsd, as float32.

    As netCDF4's ``least_significant_digit``: trailing mantissa bits become zero, so zlib
    compresses well and the stored values are known exactly before writing.

    Parameters
    ----------
    a : numpy.ndarray
        Values to round.
    lsd : int
        Decimal digits to keep (the step is the largest power of two <= 10**-lsd).

    Returns
    -------
    numpy.ndarray of float32
        The rounded values.
    """
    scale = 2.0 ** np.ceil(np.log2(10.0**lsd))
    return (np.around(a * scale) / scale).astype(np.float32)


# ---------------------------------------------------------------------------------------------
# the world on the fine grid, ice and slice changes
# ---------------------------------------------------------------------------------------------


class World:
    """The invented truth on the model domain at the fine resolution, and the fine sub-box.

    Parameters
    ----------
    p : dict
        Landscape parameters (:func:`landscape_params`).
    res : float
        Fine cell size, degrees.
    k : int
        Fine cells per model cell along each axis (``MODEL_RESOLUTION / res``).

    Attributes
    ----------
    blon, blat, bz, bice : numpy.ndarray
        Coordinates, elevation (m) and 21 ka ice mask on the whole model domain.
    truth : dict of str to numpy.ndarray
        Monthly ``tasmin``, ``tasmax`` (degC) and ``pr`` (mm/month) on the model domain.
    lon, lat, z, ice, land, dist : numpy.ndarray
        The fine sub-box: coordinates, elevation, ice, land mask and distance to the coast (km).
    fine : dict of str to numpy.ndarray
        The truth on the fine sub-box, quantised as stored in ``baseline.nc``.
    clon, clat, coarse, czpos, cice : numpy.ndarray or dict
        The model grid (1 degree): coordinates, area-weighted block means of the truth, of the
        elevation above sea level and of the ice fraction.
    """

    def __init__(self, p: dict, res: float, k: int):
        self.res, self.k = res, k
        big = make_grid(lon_min=MODEL_EXTENT[0], lon_max=MODEL_EXTENT[1],
                        lat_min=MODEL_EXTENT[2], lat_max=MODEL_EXTENT[3], resolution=res)
        self.blon, self.blat = big["lon"].values, big["lat"].values
        blon2, blat2 = np.meshgrid(self.blon, self.blat)
        # quantised as stored (1/16 m), so that land masks from dem.nc match the truth
        self.bz = quantise(_elevation(blon2, blat2, p), 1).astype(np.float64)
        self.truth = _truth_climate(self.blon, self.blat, self.bz, res, p)
        self.bice = _ice_on(self.blon, self.blat, p)
        fx = (self.blon > FINE_EXTENT[0]) & (self.blon < FINE_EXTENT[1])
        fy = (self.blat > FINE_EXTENT[2]) & (self.blat < FINE_EXTENT[3])
        self.lon, self.lat = self.blon[fx], self.blat[fy]
        self.z = self.bz[np.ix_(fy, fx)]
        self.ice = self.bice[np.ix_(fy, fx)]
        self.land = self.z > 0
        # quantised as stored, so that truth.json and presence_probability(baseline.nc) agree
        self.fine = {v: quantise(a[:, fy][:, :, fx], 2) for v, a in self.truth.items()}
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


def ice_grid(p: dict):
    """The 0.5 degree ice mask as written to ``ice_21ka.nc``.

    Parameters
    ----------
    p : dict
        Landscape parameters (the ice covers the northern massif).

    Returns
    -------
    lon, lat : numpy.ndarray
        Cell centres of the ice grid, degrees.
    ice : numpy.ndarray of bool
        True under the ice sheet, (lat, lon).
    """
    ig = make_grid(lon_min=FINE_EXTENT[0], lon_max=FINE_EXTENT[1], lat_min=FINE_EXTENT[2],
                   lat_max=FINE_EXTENT[3], resolution=ICE_RESOLUTION)
    ilon, ilat = ig["lon"].values, ig["lat"].values
    ilon2, ilat2 = np.meshgrid(ilon, ilat)
    return ilon, ilat, _ice_shape(ilon2, ilat2, p) > _ICE_LEVEL


def _ice_on(lon: np.ndarray, lat: np.ndarray, p: dict) -> np.ndarray:
    """Ice on a finer grid: each cell takes the 0.5 degree ice cell it lies in (the grids
    nest), so the truth sees the same ice as a pipeline reading ice_21ka.nc."""
    _, _, ice = ice_grid(p)
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


def slice_change(spec: dict, ch: dict, lat2, zpos, ice, *, norm=None):
    """Monthly temperature change and precipitation factor of one slice.

    Parameters
    ----------
    spec : dict
        The slice (an entry of :data:`SLICES`).
    ch : dict
        The model's change (``dT``, ``summer``, ``pr``, ``pr_summer``).
    lat2, zpos, ice : numpy.ndarray
        Latitude (degrees), elevation above sea level (m) and ice fraction on the target grid.
    norm : float, optional
        Mean of the change pattern to divide by (default: its mean on the target grid).

    Returns
    -------
    dT : numpy.ndarray
        Temperature change, K, (12, lat, lon).
    fac : numpy.ndarray
        Precipitation factor, (12, lat, lon).
    """
    dT = ch["dT"] * _pattern(spec, lat2, zpos, norm) + ch["summer"] * _SUMMER
    if spec["period"] == "21ka":
        dT = dT - 3.0 * ice  # extra cooling over the ice sheet
    dry_south = 1.0 + 0.5 * (47.5 - lat2) / 12.5
    fac = ch["pr"] * (1.0 + ch["pr_summer"] * np.clip(_SUMMER, 0, None) * dry_south)
    return dT, fac


def true_21ka(w: World):
    """Invented true 21 ka climate on the fine grid (mean of the models' changes).

    Exposed shelf takes the climate of the nearest present land cell with the lapse-rate
    correction (ICAO standard atmosphere, 6.5 K/km).

    Parameters
    ----------
    w : World
        The invented world.

    Returns
    -------
    clim : dict of str to numpy.ndarray
        Monthly ``tasmin``, ``tasmax`` (degC) and ``pr`` (mm/month) at 21 ka.
    land21 : numpy.ndarray of bool
        Land at 21 ka: above the lowered sea level and not under ice.
    """
    spec = SLICES["21ka"]
    ch = {key: float(np.mean([spec["change"][m][key] for m in MODELS]))
          for key in ("dT", "summer", "pr", "pr_summer")}
    clat2 = np.broadcast_to(w.clat[:, None], w.czpos.shape)
    norm = float(_pattern(spec, clat2, w.czpos, 1.0).mean())
    lat2 = np.broadcast_to(w.lat[:, None], w.z.shape)
    dT, fac = slice_change(spec, ch, lat2, np.maximum(w.z, 0.0), w.ice.astype(float),
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
