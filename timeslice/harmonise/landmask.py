"""Land, ice and exposed shelf per slice; climate for newly exposed land."""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy.spatial import cKDTree

from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.harmonise.regrid import regrid

__all__ = [
    "STANDARD_LAPSE_RATE",
    "TEMPERATURE_LEVELS",
    "check_lapse_rate",
    "check_mask_options",
    "fill_exposed",
    "filled_attrs",
    "ice_on_grid",
    "land_mask",
    "mask_attrs",
]

#: Temperature lapse rate of the standard atmosphere below 11 km, 6.5 K per km = 0.0065 K m-1
#: (ICAO Doc 7488, Manual of the ICAO Standard Atmosphere, 3rd ed. 1993; ISO 2533:1975).
STANDARD_LAPSE_RATE = 0.0065

#: Variables that are temperature levels (lapse-rate corrected when filled); ranges and
#: seasonality indices (BIO2, BIO3, BIO4, BIO7) and precipitation are copied unchanged.
TEMPERATURE_LEVELS = frozenset(
    {"tasmin", "tasmax", "tas", "bio1", "bio5", "bio6", "bio8", "bio9", "bio10", "bio11"}
)


def _as_dataarray(obj, name: str, what: str) -> xr.DataArray:
    if isinstance(obj, xr.Dataset):
        if name in obj.data_vars:
            return obj[name]
        if len(obj.data_vars) == 1:
            return next(iter(obj.data_vars.values()))
        raise DataError(
            f"`{what}` has no variable {name!r} (found {sorted(map(str, obj.data_vars))}); "
            f"give a DataArray or a Dataset with {name!r}"
        )
    if isinstance(obj, xr.DataArray):
        return obj
    raise DataError(f"`{what}` must be an xarray DataArray or Dataset, got {type(obj).__name__}")


def _ice_fraction(ice: xr.DataArray) -> xr.DataArray:
    units = str(ice.attrs.get("units", "")).strip()
    if units in {"%", "percent"}:
        return ice / 100.0
    if units in {"1", "", "fraction"}:
        vmax = float(ice.max())
        if vmax > 1.0 + 1e-6:
            raise DataError(
                f"`ice` has values up to {vmax:g} but units {units or 'none'!r}; set units "
                "'%' for percentages or give a fraction 0..1"
            )
        return ice
    raise DataError(f"`ice` has units {units!r}; expected '%' or '1' (area fraction)")


def mask_attrs(sea_level: float, ice_threshold: float) -> dict[str, dict[str, str]]:
    """Attributes of the ``land``, ``ice`` and ``exposed_shelf`` masks.

    Parameters
    ----------
    sea_level : float, [m]
        The slice's sea level relative to present.
    ice_threshold : float
        Ice fraction at and above which a cell is ice.

    Returns
    -------
    dict
        Mask name -> attributes (``units``, ``long_name``, ``description``).
    """
    return {
        "land": dict(units="1", long_name="land", description=(
            f"elevation above slice sea level {sea_level:g} m and not ice-covered")),
        "ice": dict(units="1", long_name="ice-covered land",
                    description=f"land-ice area fraction >= {ice_threshold:g}"),
        "exposed_shelf": dict(units="1", long_name="exposed shelf",
                              description="land in this slice that lies below present sea level"),
    }


def filled_attrs(lapse_rate: float) -> dict[str, str]:
    """Attributes of the ``filled`` mask.

    Parameters
    ----------
    lapse_rate : float, [K m-1]
        Lapse rate of the temperature correction.

    Returns
    -------
    dict
    """
    return dict(units="1", long_name="climate filled from nearest baseline land cell",
                description=f"temperatures lapse-rate corrected ({lapse_rate * 1000:g} K per km)")


def check_mask_options(sea_level: float, ice_threshold: float) -> None:
    """Stop with one line on a sea level or ice threshold that cannot be used.

    Parameters
    ----------
    sea_level : float, [m]
        Must be finite.
    ice_threshold : float
        Must be a fraction in [0, 1].

    Returns
    -------
    None
    """
    if not 0.0 <= float(ice_threshold) <= 1.0:
        raise DataError(f"`ice_threshold` must be a fraction in [0, 1], got {ice_threshold}")
    if not np.isfinite(sea_level):
        raise DataError(f"`sea_level` must be a finite number of metres, got {sea_level}")


def check_lapse_rate(lapse_rate: float) -> None:
    """Stop with one line on a lapse rate outside 0 .. 0.0098 K m-1 (dry adiabatic).

    Parameters
    ----------
    lapse_rate : float, [K m-1]

    Returns
    -------
    None
    """
    if lapse_rate < 0 or lapse_rate > 0.0098:
        raise DataError(
            f"`lapse_rate` must be between 0 and 0.0098 K m-1 (dry adiabatic), got {lapse_rate}"
        )


def ice_on_grid(ice, target, *, chunks: int | None = None) -> xr.DataArray:
    """Land-ice fraction 0..1 on the grid of `target`.

    Parameters
    ----------
    ice : xarray.DataArray or Dataset
        Ice fraction (units '1' or '%') on any lat-lon grid.
    target : xarray.DataArray or Dataset
        Anything with the target ``lat`` and ``lon``.
    chunks : int, optional
        Lazy result in blocks of this many target rows (see :func:`regrid`).

    Returns
    -------
    xarray.DataArray
        Conservative when coarsening, bilinear when refining; NaN where under half the
        target cell is covered.
    """
    frac = _ice_fraction(_as_dataarray(ice, "ice", "ice"))
    return regrid(frac, target, method="auto", min_valid_fraction=0.5, source="ice",
                  chunks=chunks)


def _fresh_attrs(da: xr.DataArray, **attrs) -> xr.DataArray:
    out = da.copy()
    out.attrs = dict(attrs)
    return out


def land_mask(
    elevation: xr.DataArray | xr.Dataset,
    *,
    sea_level: float = 0.0,
    ice: xr.DataArray | xr.Dataset | None = None,
    ice_threshold: float = 0.5,
) -> xr.Dataset:
    """Land, ice and exposed shelf of one slice.

    Parameters
    ----------
    elevation : xarray.DataArray or Dataset with ``elevation``, [m]
        Elevation relative to present sea level (negative below), on the target grid.
    sea_level : float, [m]
        The slice's sea level relative to present (e.g. -120 at the last glacial maximum).
    ice : xarray.DataArray or Dataset, optional
        Land-ice area fraction (units '1' or '%') on any lat-lon grid; regridded onto the
        elevation grid (conservative when coarsening, bilinear when refining).
    ice_threshold : float
        A cell is ice-covered when its ice fraction is at least this.

    Returns
    -------
    xarray.Dataset
        ``land`` (elevation > sea_level and not ice), ``ice`` (bool), ``exposed_shelf``
        (land and elevation <= 0, i.e. below present sea level); attrs ``land_km2``,
        ``ice_km2``, ``exposed_shelf_km2`` (sums of spherical cell areas).
    """
    elev = _as_dataarray(elevation, "elevation", "elevation")
    check_mask_options(sea_level, ice_threshold)
    above = elev > float(sea_level)
    if ice is not None:
        frac = ice_on_grid(ice, elev)
        ice_b = (frac.fillna(0.0) >= float(ice_threshold)) & above
    else:
        ice_b = xr.zeros_like(above, dtype=bool)
    land = above & ~ice_b
    shelf = land & (elev <= 0.0)
    # masks are derived from elevation but are not heights: start their attributes afresh
    attrs = mask_attrs(sea_level, ice_threshold)
    out = xr.Dataset({
        "land": _fresh_attrs(land, **attrs["land"]),
        "ice": _fresh_attrs(ice_b, **attrs["ice"]),
        "exposed_shelf": _fresh_attrs(shelf, **attrs["exposed_shelf"]),
    })
    for v in out.data_vars:
        out[v] = out[v].astype(bool)
    out.attrs["sea_level"] = float(sea_level)
    area = cell_area(elev)
    for v in ("land", "ice", "exposed_shelf"):
        out.attrs[f"{v}_km2"] = float(area.where(out[v]).sum())
    return out


def fill_exposed(
    climate: xr.Dataset,
    land: xr.DataArray,
    elevation: xr.DataArray,
    *,
    lapse_rate: float = STANDARD_LAPSE_RATE,
    inplace: bool = False,
) -> xr.Dataset:
    """Give land cells without baseline climate the climate of the nearest cell that has it.

    Parameters
    ----------
    climate : xarray.Dataset
        Monthly ``tasmin``, ``tasmax`` (degC), ``pr`` (mm month-1), or bioclimatic layers
        ``bio1``..``bio19``, NaN where unknown. Every variable with ``lat`` and ``lon`` is filled.
    land : xarray.DataArray of bool
        The slice's land mask.
    elevation : xarray.DataArray, [m]
        Elevation of every cell (also of the cells filled).
    lapse_rate : float, [K m-1]
        Temperature decrease with height.
    inplace : bool
        Write the filled values into `climate`'s own (numpy) arrays instead of copies; for
        callers that own `climate` (saves one copy of the grid).

    Returns
    -------
    xarray.Dataset
        `climate` with the gaps on land filled, plus ``filled`` (bool).

    Notes
    -----
    The donor is the nearest cell with complete climate by chord distance between unit
    vectors :math:`(\\cos\\varphi\\cos\\lambda, \\cos\\varphi\\sin\\lambda, \\sin\\varphi)`
    (same order as great-circle distance). Temperatures (``tasmin``, ``tasmax``, ``tas`` and
    the temperature levels BIO1, BIO5, BIO6, BIO8-BIO11) are corrected for the elevation
    difference, :math:`T = T_{donor} - \\Gamma (z - z_{donor})`; precipitation and the
    temperature ranges and seasonality indices (BIO2-BIO4, BIO7) are copied.

    References
    ----------
    ICAO (1993). Manual of the ICAO Standard Atmosphere, Doc 7488, 3rd ed.
    """
    check_lapse_rate(lapse_rate)
    spatial = [v for v in climate.data_vars
               if "lat" in climate[v].dims and "lon" in climate[v].dims and v != "filled"]
    if not spatial:
        raise DataError("`climate` has no variable on (lat, lon) to fill")
    land = land.astype(bool)

    def complete(v):
        da = climate[v].notnull()
        other = [d for d in da.dims if d not in ("lat", "lon")]
        return (da.all(other) if other else da).transpose("lat", "lon")

    have = xr.concat([complete(v) for v in spatial], dim="v").all("v")
    need = np.asarray((land & ~have).values)
    filled = xr.DataArray(need, dims=("lat", "lon"),
                          coords={"lat": climate["lat"], "lon": climate["lon"]})
    out = climate.copy()
    if need.any():
        donors = np.asarray(have.values)
        if not donors.any():
            raise DataError("`climate` has no cell with complete climate to fill from")
        lat = np.deg2rad(climate["lat"].values)
        lon = np.deg2rad(climate["lon"].values)
        LAT, LON = np.meshgrid(lat, lon, indexing="ij")
        xyz = np.stack([np.cos(LAT) * np.cos(LON), np.cos(LAT) * np.sin(LON), np.sin(LAT)], -1)
        tree = cKDTree(xyz[donors])
        _, idx = tree.query(xyz[need])
        di, dj = np.nonzero(donors)
        ni, nj = np.nonzero(need)
        si, sj = di[idx], dj[idx]
        z = np.asarray(elevation.transpose("lat", "lon").values, dtype=float)
        dz = z[ni, nj] - z[si, sj]
        for v in spatial:
            dims = climate[v].dims
            lead = [d for d in dims if d not in ("lat", "lon")]
            da = climate[v].transpose(*lead, "lat", "lon")
            arr = da.values
            if not (inplace and arr.flags.writeable and np.shares_memory(arr, climate[v].values)):
                arr = np.array(arr, copy=True)
            vals = arr[..., si, sj]
            if v in TEMPERATURE_LEVELS:
                vals = vals - lapse_rate * dz
            arr[..., ni, nj] = vals
            out[v] = da.copy(data=arr).transpose(*dims)
            out[v].attrs = dict(climate[v].attrs)
    out["filled"] = filled.assign_attrs(**filled_attrs(lapse_rate))
    return out
