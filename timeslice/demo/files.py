"""Writing the demo files: CF NetCDF climate, elevation, ice and partner layers, CSV records,
GeoJSON reserves and ``truth.json``; every file written atomically and reproducibly (no
timestamps)."""

from __future__ import annotations

import csv
import io as _io
import json
import os
from pathlib import Path

import cftime
import numpy as np
import xarray as xr

from timeslice.demo.scenario import (
    CLIMATE,
    EFFORT,
    HOST_MAX_ELEVATION_M,
    ICE_RESOLUTION,
    LAPSE_RATE_K_PER_M,
    MODEL_RESOLUTION,
    MODELS,
    NICHE,
    SEA_LEVEL_21KA,
    SECONDS_PER_DAY,
    SLICES,
    SPECIES,
    TARGET_GROUP,
    WATER_DENSITY,
)
from timeslice.demo.world import World, ice_grid, slice_change
from timeslice.grid import cell_area
from timeslice.io import atomic_path

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


def write_text(text: str, path: Path) -> None:
    """Write `text` to `path` atomically (UTF-8, ``\\n`` line ends, mode 0644).

    Parameters
    ----------
    text : str
        The content.
    path : pathlib.Path
        Target file (its folder is created if needed).

    Returns
    -------
    None
    """
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8", newline="\n")
        os.chmod(tmp, _FILE_MODE)


def rows_to_csv(rows: list[dict], columns: list[str]) -> str:
    """CSV text of `rows` with the given columns, in that order.

    Parameters
    ----------
    rows : list of dict
        Records (extra keys are left out).
    columns : list of str
        Header and column order.

    Returns
    -------
    str
        The CSV text, ``\\n`` line ends.
    """
    buf = _io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([r[c] for c in columns])
    return buf.getvalue()


def jsonable(obj):
    """`obj` with numpy scalars made plain Python numbers (floats rounded to 6 decimals).

    Parameters
    ----------
    obj : object
        Nested dicts, lists and tuples of numbers and strings.

    Returns
    -------
    object
        The same structure, ready for :func:`json.dumps` (tuples become lists).
    """
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, float)):
        return round(float(obj), 6)
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


# ---------------------------------------------------------------------------------------------
# the files
# ---------------------------------------------------------------------------------------------


def write_climate(w: World, p: dict, out: Path, seed: int) -> dict[str, Path]:
    """Write the gridded files: ``dem.nc``, ``baseline.nc``, ``ice_21ka.nc`` and the models.

    Parameters
    ----------
    w : World
        The invented world.
    p : dict
        Landscape parameters.
    out : pathlib.Path
        Output folder.
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``dem``, ``baseline``, ``ice_21ka`` and ``<model>/<slice>``.
    """
    paths = {"dem": write_dem(w, out / "dem.nc", seed),
             "baseline": write_baseline(w, out / "baseline.nc", seed),
             "ice_21ka": write_ice(p, out / "ice_21ka.nc", seed)}
    paths.update(write_models(w, out / "models", seed))
    return paths


def write_dem(w: World, path: Path, seed: int) -> Path:
    """Write ``dem.nc``: invented elevation, m (negative below present sea level).

    Parameters
    ----------
    w : World
        The invented world.
    path : pathlib.Path
        Target file.
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    pathlib.Path
        `path`.
    """
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
    _write_nc(dem, path, {"elevation": _float_enc()})  # quantised in World
    return path


def write_baseline(w: World, path: Path, seed: int) -> Path:
    """Write ``baseline.nc``: fine monthly climatology, NaN at sea on purpose.

    The shelf must be filled downstream; ``tasmin``, ``tasmax`` in degC, ``pr`` in mm/month,
    with CF climatology bounds (CF 1.8 section 7.4).

    Parameters
    ----------
    w : World
        The invented world.
    path : pathlib.Path
        Target file.
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    pathlib.Path
        `path`.
    """
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


def write_extras(w: World, out: Path, seed: int, *, prob: np.ndarray,
                 prob21: np.ndarray) -> dict[str, Path]:
    """Invented data beyond the climate niche: host plant, populations and reserves.

    A host plant the species needs (``host_plant.nc``), sampled populations with a haplotype
    diversity that rises where the niche was suitable both at 21 ka and today
    (``populations.csv``), and two reserves (``reserves.geojson``). All invented; drawn from
    their own random stream, so the other files stay the same.

    Parameters
    ----------
    w : World
        The invented world.
    out : pathlib.Path
        Output folder.
    seed : int
        Seed of the scenario.
    prob, prob21 : numpy.ndarray
        Known presence probability today and at 21 ka on the fine grid.

    Returns
    -------
    dict of str to pathlib.Path
        ``host_plant``, ``populations`` and ``reserves``.
    """
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
    write_text(rows_to_csv(rows, ["population", "lon", "lat", "haplotype_diversity"]),
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
    write_text(json.dumps({"type": "FeatureCollection", "name": "invented reserves",
                            "features": jsonable(feats)}, indent=1) + "\n", paths["reserves"])
    return paths


def write_ice(p: dict, path: Path, seed: int) -> Path:
    """Write ``ice_21ka.nc``: the invented 21 ka ice sheet as ``sftgif`` in % on 0.5 degrees.

    Parameters
    ----------
    p : dict
        Landscape parameters.
    path : pathlib.Path
        Target file.
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    pathlib.Path
        `path`.
    """
    ilon, ilat, ice_mask = ice_grid(p)
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


def write_models(w: World, folder: Path, seed: int) -> dict[str, Path]:
    """Write the raw output of the three invented climate models, one file per model and slice.

    Parameters
    ----------
    w : World
        The invented world.
    folder : pathlib.Path
        The ``models`` folder (``<model>/<slice>.nc`` below it).
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    dict of str to pathlib.Path
        Keys ``<model>/<slice>`` (e.g. ``cedar/21ka``).
    """
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
                dT, fac = slice_change(spec, ch, clat2, w.czpos, w.cice)
                fields = {"tasmin": mbase["tasmin"] + dT * 1.04,
                          "tasmax": mbase["tasmax"] + dT * 0.96,
                          "pr": mbase["pr"] * fac}
            paths[f"{mname}/{label}"] = write_model_file(
                folder / mname / f"{label}.nc", fields, w.clon, w.clat, days,
                model=mname, calendar=mb["calendar"], lat_descending=mb["lat_descending"],
                scenario=spec["scenario"], period=spec["period"], years=spec["years"],
                age_bp=spec["age_bp"], seed=seed)
    return paths


def write_model_file(path: Path, fields: dict, clon, clat, days, *, model, calendar,
                     lat_descending, scenario, period, years, age_bp, seed) -> Path:
    """Write one raw model climatology: K, kg m-2 s-1, lon 0..360, optionally descending lat.

    Precipitation depths (mm per month) become fluxes by dividing by the month's length in the
    model's calendar and multiplying by the density of water (CF 1.8 section 4.4.1).

    Parameters
    ----------
    path : pathlib.Path
        Target file.
    fields : dict of str to numpy.ndarray
        Monthly ``tasmin``, ``tasmax`` (degC) and ``pr`` (mm/month) on the model grid.
    clon, clat : numpy.ndarray
        Model grid cell centres, degrees (longitudes -180..180, latitudes ascending).
    days : numpy.ndarray
        Length of each month in the model's calendar, days, (12, 1, 1).
    model, calendar, scenario, period : str
        Attributes of the file and the CF calendar of its time axis.
    lat_descending : bool
        Store latitudes north to south.
    years : tuple of int
        First and last year of the climatology bounds.
    age_bp : int or None
        Age of a past slice, years before present.
    seed : int
        Seed of the scenario (recorded in the global attributes).

    Returns
    -------
    pathlib.Path
        `path`.
    """
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


def truth_document(w: World, p: dict, *, seed: int, prob: np.ndarray, prob21: np.ndarray,
                   land21: np.ndarray, bad_counts: dict, n_clean: int, dated: list[dict],
                   target_group: bool) -> dict:
    """The content of ``truth.json``: what was put into the scenario and the true niche areas.

    Parameters
    ----------
    w : World
        The invented world on the fine grid.
    p : dict
        Landscape parameters (:func:`timeslice.demo.world.landscape_params`).
    seed : int
        Seed of the scenario.
    prob, prob21 : numpy.ndarray
        Known presence probability on the fine grid today and under the true 21 ka climate.
    land21 : numpy.ndarray of bool
        Land at 21 ka (above the lowered sea level, not under ice).
    bad_counts : dict of str to int
        Number of planted bad records of each kind.
    n_clean : int
        Number of clean occurrence records.
    dated : list of dict
        The dated records (with their ``_setting``).
    target_group : bool
        Whether the target-group records were written.

    Returns
    -------
    dict
        The document (numbers still numpy scalars where computed; see :func:`jsonable`).
    """
    area = cell_area(xr.Dataset(coords={"lat": ("lat", w.lat), "lon": ("lon", w.lon)})).values
    thr = NICHE["presence_threshold"]
    suitable, suitable21 = w.land & (prob >= thr), land21 & (prob21 >= thr)
    shelf21 = land21 & ~w.land
    km2 = lambda m: round(float(area[m].sum()), 1)  # noqa: E731
    n_bad = sum(bad_counts.values())
    doc = {
        "description": "Known parameters of the invented demo scenario (for checks). "
                       "Areas in km2 are sums of spherical cell areas (timeslice.grid.cell_area).",
        "seed": int(seed),
        "resolution_deg": w.res,
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
        doc["target_group"] = TARGET_GROUP
    return doc
