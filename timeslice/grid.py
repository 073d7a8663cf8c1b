"""Regular latitude-longitude grids: construction, cell bounds, spherical cell areas,
coordinate normalisation and great-circle distances.

Conventions (docs/methods.md): ``lat`` ascending in degrees_north, ``lon`` ascending and
continuous in degrees_east, coordinates at cell centres. A regional grid lies within
[-180, 180) unless it crosses the 180° meridian: then its longitudes run on past 180 (e.g.
160 ... 200) so that neighbouring cells stay neighbours on the axis. A global grid spans 360°
and wraps east-west. Areas are on the authalic sphere.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = [
    "AUTHALIC_RADIUS_KM",
    "cell_area",
    "cell_bounds",
    "continuous_lon",
    "find_lonlat",
    "grid_edges",
    "haversine_km",
    "is_global_lon",
    "lon_order",
    "make_grid",
    "normalise_lonlat",
    "resolution",
    "wrap_lon",
]

#: Authalic (equal-area) radius of the GRS80/WGS84 ellipsoid, 6 371 007.181 m
#: (Moritz 2000, Geodetic Reference System 1980, J. Geodesy 74:128), rounded to 0.1 m.
AUTHALIC_RADIUS_KM = 6371.0072

_LAT_NAMES = ("lat", "latitude", "y", "nav_lat", "rlat")
_LON_NAMES = ("lon", "longitude", "x", "nav_lon", "rlon")


def make_grid(
    *,
    lon_min: float,
    lon_max: float,
    lat_min: float,
    lat_max: float,
    resolution: float,
) -> xr.Dataset:
    """Return an empty Dataset holding a regular cell-centred lat-lon grid.

    Parameters
    ----------
    lon_min, lon_max : float
        Western and eastern outer edges in degrees east. The grid runs eastwards from
        `lon_min` to `lon_max`; a region across the 180° meridian is written either with
        ``lon_max`` past 180 (``160, 200``) or with ``lon_max < lon_min`` (``160, -160``), both
        giving the same continuous axis 160 ... 200. `lon_min` is brought into [-180, 180)
        (``190, 230`` is ``-170, -130``). ``lon_max - lon_min = 360`` is a global grid.
    lat_min, lat_max : float
        Southern and northern outer edges, within [-90, 90].
    resolution : float
        Cell size in degrees (same in both directions).

    Returns
    -------
    xarray.Dataset
        Coordinates ``lat`` (ascending) and ``lon`` (ascending and continuous, starting in
        [-180, 180); past 180 for a region that crosses the 180° meridian).

    Examples
    --------
    >>> g = make_grid(lon_min=170, lon_max=-170, lat_min=60, lat_max=62, resolution=5.0)
    >>> g["lon"].values.tolist()
    [172.5, 177.5, 182.5, 187.5]
    """
    if resolution <= 0:
        raise DataError(f"grid `resolution` must be > 0 degrees, got {resolution}")
    if not (-90.0 <= lat_min < lat_max <= 90.0):
        raise DataError(
            f"grid latitudes {lat_min}..{lat_max} are not an extent within [-90, 90]; give "
            "-90 <= lat_min < lat_max <= 90"
        )
    if lon_min == lon_max:
        raise DataError(
            f"grid extent is empty: lon {lon_min}..{lon_max}; give lon_max east of lon_min "
            "(lon_max = lon_min + 360 for a global grid)"
        )
    shift = 360.0 * np.floor((float(lon_min) + 180.0) / 360.0)
    west = float(lon_min) - shift
    east = float(lon_max) - shift
    while east <= west:  # written with lon_max < lon_min: the region crosses 180°
        east += 360.0
    if east - west > 360.0 + 1e-9:
        raise DataError(
            f"grid longitudes {lon_min}..{lon_max} span {east - west:g}° (more than 360°); "
            "give at most one turn round the globe"
        )
    nlon = int(round((east - west) / resolution))
    nlat = int(round((lat_max - lat_min) / resolution))
    if nlon < 1 or nlat < 1:
        raise DataError(
            f"grid `resolution` {resolution}° is larger than the extent (lon {lon_min}.."
            f"{lon_max}, lat {lat_min}..{lat_max}); give a smaller resolution"
        )
    lon = west + resolution * (np.arange(nlon) + 0.5)
    # the same floating-point steps as grids have always had within [-180, 180) (so their
    # coordinates stay bit for bit), continued past 180 for a region that crosses it
    wrapped = ((lon + 180.0) % 360.0) - 180.0
    lon = np.where(lon >= 180.0, wrapped + 360.0, wrapped)
    lat = lat_min + resolution * (np.arange(nlat) + 0.5)
    ds = xr.Dataset(coords={"lat": ("lat", lat), "lon": ("lon", lon)})
    _set_coord_attrs(ds)
    # kept so that a one-row or one-column grid still knows its cell size
    ds["lat"].attrs["resolution"] = float(resolution)
    ds["lon"].attrs["resolution"] = float(resolution)
    return ds


def wrap_lon(lon, *, west: float = -180.0) -> np.ndarray:
    """Longitudes brought into ``[west, west + 360)`` (degrees, broadcasting).

    Use it to put points (records, centroids) onto the axis of a grid that runs past 180:
    ``wrap_lon(-170.0, west=160.0)`` is 190.

    Parameters
    ----------
    lon : array_like
        Longitudes, degrees.
    west : float
        Western edge of the target axis, degrees.
    """
    a = np.asarray(lon, dtype=float)
    return ((a - west) % 360.0) + west


def is_global_lon(lon) -> bool:
    """True when a regular longitude axis covers the full 360° (it wraps east-west).

    Parameters
    ----------
    lon : array_like
        A regular longitude axis, degrees.
    """
    values = np.asarray(lon, dtype=float)
    if values.size < 2:
        return False
    return abs(values.size * resolution(values) - 360.0) < 1e-6 * 360.0


def lon_order(lon, *, source: str = "input") -> tuple[np.ndarray, np.ndarray]:
    """Order that makes an ascending longitude axis continuous, and the continuous values.

    A regional grid across the 180° meridian, once wrapped to [-180, 180) and sorted, has one
    jump (e.g. ... -171, -170, 160, 161 ...). Starting the axis after the jump and adding 360°
    to what follows 180 gives the continuous axis (160 ... 190). An axis that is already
    continuous is returned unchanged.

    Parameters
    ----------
    lon : array_like
        Ascending longitudes, degrees.
    source : str
        File or input named in an error.

    Returns
    -------
    (order, values)
        ``values = lon[order]`` adjusted by multiples of 360°, ascending with regular steps.

    Raises
    ------
    DataError
        More than one jump, or a jump that wrapping does not close (a gap in the grid).
    """
    v = np.asarray(lon, dtype=float)
    n = v.size
    order = np.arange(n)
    if n < 2:
        return order, v.copy()
    if n == 2:  # two columns: across 180 when the way round through 180 is the shorter step
        if v[0] + 360.0 - v[1] < v[1] - v[0]:
            return order[::-1].copy(), np.array([v[1], v[0] + 360.0])
        return order, v.copy()
    steps = np.diff(v)
    step = float(np.median(steps))
    big = np.flatnonzero(steps > 1.5 * step)
    if big.size == 0:
        return order, v.copy()
    wrap_step = v[0] + 360.0 - v[-1]
    if big.size > 1 or step <= 0 or abs(wrap_step - step) > 0.01 * step:
        gap = int(big[0])
        raise DataError(
            f"{source}: longitudes jump from {v[gap]:g} to {v[gap + 1]:g}, a gap in the grid "
            "that crossing the 180° meridian does not explain; give a grid with regular "
            "longitude steps (one region, or a global grid)"
        )
    k = int(big[0]) + 1
    order = np.concatenate([np.arange(k, n), np.arange(k)])
    values = np.concatenate([v[k:], v[:k] + 360.0])
    return order, values


def continuous_lon(obj, *, source: str = "input"):
    """Put a grid that crosses the 180° meridian on a continuous longitude axis.

    Readers return longitudes in [-180, 180); for a region across 180° that splits the
    region in two. This rolls the ``lon`` dimension so that the axis starts at the region's
    western edge and continues past 180 (coordinate attributes kept). Anything already
    continuous is returned unchanged.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        Data with a ``lon`` dimension in [-180, 180).
    source : str
        File or input named in an error.
    """
    order, values = lon_order(obj["lon"].values, source=source)
    if np.array_equal(order, np.arange(order.size)):
        return obj
    attrs = dict(obj["lon"].attrs)
    out = obj.isel(lon=order).assign_coords(lon=("lon", values))
    out["lon"].attrs.update(attrs)
    return out


def _set_coord_attrs(ds: xr.Dataset | xr.DataArray) -> None:
    ds["lat"].attrs.update(
        standard_name="latitude", long_name="latitude", units="degrees_north", axis="Y"
    )
    ds["lon"].attrs.update(
        standard_name="longitude", long_name="longitude", units="degrees_east", axis="X"
    )


def resolution(coord: xr.DataArray | np.ndarray) -> float:
    """Spacing of a regular 1-D coordinate in degrees (absolute value).

    Parameters
    ----------
    coord : xarray.DataArray or numpy.ndarray
        A regular 1-D coordinate, degrees.
    """
    values = np.asarray(coord, dtype=float)
    if values.size < 2:
        raise DataError("a coordinate with fewer than 2 points has no resolution")
    steps = np.diff(values)
    return float(np.abs(np.median(steps)))


def cell_bounds(
    coord: xr.DataArray | np.ndarray, *, kind: str = "lat", step: float | None = None
) -> np.ndarray:
    """Cell edges of a cell-centred 1-D coordinate, shape ``(n, 2)``.

    Edges are midpoints between centres; the outer edges extend half a step.
    Latitude edges are clipped to [-90, 90], and an outer latitude edge that stops short of
    the pole by less than half a step is moved onto the pole: the outermost row of a global
    grid whose rows are not centred on a regular pole-to-pole lattice (Gaussian grids of
    climate models, first row at e.g. 87.86°) is the polar cap, so the grid covers the
    sphere. A coordinate with a single value needs its cell size: `step`, or a
    ``resolution`` attribute (set by :func:`make_grid`).

    Parameters
    ----------
    coord : xarray.DataArray or numpy.ndarray
        Cell-centred 1-D coordinate, degrees.
    kind : {'lat', 'lon'}
        Latitude edges are clipped to the poles; longitude edges are not.
    step : float, optional
        Cell size for a coordinate with one value (default: its ``resolution`` attribute).
    """
    c = np.asarray(coord, dtype=float)
    if c.size == 1:
        if step is None:
            step = getattr(coord, "attrs", {}).get("resolution")
        if step is None:
            raise DataError(
                f"cannot tell the cell size of a single-value {kind!r} coordinate; give `step` "
                "or a `resolution` attribute in degrees"
            )
        half = 0.5 * float(step)
        edges = np.array([c[0] - half, c[0] + half])
    else:
        mid = 0.5 * (c[1:] + c[:-1])
        edges = np.concatenate(
            [[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]]
        )
    if kind == "lat":
        edges = np.clip(edges, -90.0, 90.0)
        if c.size > 1:
            if edges[0] + 90.0 < 0.5 * abs(c[1] - c[0]):
                edges[0] = -90.0
            if 90.0 - edges[-1] < 0.5 * abs(c[-1] - c[-2]):
                edges[-1] = 90.0
    return np.stack([edges[:-1], edges[1:]], axis=1)


def grid_edges(obj: xr.Dataset | xr.DataArray) -> tuple[np.ndarray, np.ndarray]:
    """Cell edges ``(lat_bounds, lon_bounds)`` in degrees, each of shape ``(n, 2)``.

    A one-row (or one-column) grid takes its cell size from the coordinate's ``resolution``
    attribute, else from the spacing of the other axis (square cells).

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        Data on a regular ``lat``/``lon`` grid.
    """
    lat, lon = obj["lat"], obj["lon"]
    lat_step = lat.attrs.get("resolution", resolution(lon) if lon.size > 1 else None)
    lon_step = lon.attrs.get("resolution", resolution(lat) if lat.size > 1 else None)
    return (
        cell_bounds(lat, kind="lat", step=lat_step),
        cell_bounds(lon, kind="lon", step=lon_step),
    )


def cell_area(obj: xr.Dataset | xr.DataArray) -> xr.DataArray:
    """Area of every grid cell on the authalic sphere.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        Anything with 1-D ``lat`` and ``lon`` coordinates in degrees.

    Returns
    -------
    xarray.DataArray, [km2]
        ``cell_area(lat, lon)``.

    Notes
    -----
    .. math:: A = R^2 \\, \\Delta\\lambda \\, (\\sin\\varphi_2 - \\sin\\varphi_1)

    with :math:`R` = 6371.0072 km and angles in radians.

    References
    ----------
    Snyder, J. P. (1987). Map Projections: A Working Manual. USGS Prof. Paper 1395 (p. 16,
    authalic radius).
    """
    lat_b, lon_b = (np.deg2rad(b) for b in grid_edges(obj))
    band = np.sin(lat_b[:, 1]) - np.sin(lat_b[:, 0])
    dlon = np.abs(lon_b[:, 1] - lon_b[:, 0])
    area = AUTHALIC_RADIUS_KM**2 * np.outer(np.abs(band), dlon)
    out = xr.DataArray(
        area,
        dims=("lat", "lon"),
        coords={"lat": obj["lat"], "lon": obj["lon"]},
        name="cell_area",
        attrs={
            "units": "km2",
            "standard_name": "cell_area",
            "long_name": "grid cell area",
            "description": "area on the authalic sphere, R = 6371.0072 km",
        },
    )
    return out


def find_lonlat(ds: xr.Dataset | xr.DataArray, *, source: str = "input") -> tuple[str, str]:
    """Names of the longitude and latitude coordinates.

    CF attributes first (``standard_name``, ``units``, ``axis``), common names second.
    Raises :class:`DataError` naming `source` when none or several candidates are found.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Data read from a file.
    source : str
        File or input named in an error.
    """
    lon_c, lat_c = [], []
    for name in list(ds.coords) + list(getattr(ds, "data_vars", {})):
        var = ds[name]
        sn = str(var.attrs.get("standard_name", "")).lower()
        un = str(var.attrs.get("units", "")).lower()
        if sn == "longitude" or un in {"degrees_east", "degree_east", "degree_e", "degrees_e"}:
            lon_c.append(name)
        elif sn == "latitude" or un in {"degrees_north", "degree_north", "degree_n", "degrees_n"}:
            lat_c.append(name)
    # common names, in order of preference: the first present wins
    if not lon_c:
        lon_c = [n for n in _LON_NAMES if n in ds.coords or n in ds.dims][:1]
    if not lat_c:
        lat_c = [n for n in _LAT_NAMES if n in ds.coords or n in ds.dims][:1]
    lon_c = list(dict.fromkeys(lon_c))
    lat_c = list(dict.fromkeys(lat_c))
    if len(lon_c) != 1 or len(lat_c) != 1:
        raise DataError(
            f"{source}: cannot tell the longitude/latitude coordinates "
            f"(candidates lon={lon_c or 'none'}, lat={lat_c or 'none'}); "
            "set CF standard_name 'longitude'/'latitude' or map them in the config"
        )
    lon, lat = lon_c[0], lat_c[0]
    if ds[lon].ndim != 1 or ds[lat].ndim != 1:
        raise DataError(
            f"{source}: coordinates {lon!r} and {lat!r} are {ds[lon].ndim}-D; only regular "
            "1-D lat-lon grids are supported (curvilinear or rotated-pole grids must be "
            "remapped first)"
        )
    return lon, lat


def normalise_lonlat(ds: xr.Dataset | xr.DataArray, *, source: str = "input"):
    """Rename coordinates to ``lon``/``lat``, wrap longitudes to [-180, 180), sort both
    ascending. Attributes of the data are kept.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Data read from a file.
    source : str
        File or input named in an error.
    """
    lon, lat = find_lonlat(ds, source=source)
    if lon != "lon" or lat != "lat":
        ds = ds.rename({lon: "lon", lat: "lat"})
    for name in ("lon", "lat"):
        if ds[name].dims != (name,):
            ds = ds.swap_dims({ds[name].dims[0]: name})
    lonv = np.asarray(ds["lon"].values, dtype=float)
    latv = np.asarray(ds["lat"].values, dtype=float)
    for name, v in (("lon", lonv), ("lat", latv)):
        d = np.diff(v)
        if v.size > 1 and not (np.all(d > 0) or np.all(d < 0)):
            raise DataError(
                f"{source}: coordinate {name!r} is not monotonic; sort or repair the file"
            )
    wrapped = ((lonv + 180.0) % 360.0) - 180.0
    attrs = {k: ds[k].attrs for k in ("lon", "lat")}
    ds = ds.assign_coords(lon=("lon", wrapped), lat=("lat", latv))
    ds = ds.sortby("lon").sortby("lat")
    if np.unique(ds["lon"].values).size != ds.sizes["lon"]:
        raise DataError(f"{source}: longitudes overlap after wrapping to [-180, 180)")
    for k in ("lon", "lat"):
        ds[k].attrs.update(attrs[k])
    _set_coord_attrs(ds)
    return ds


def haversine_km(lon1, lat1, lon2, lat2) -> np.ndarray:
    """Great-circle distance in km on the authalic sphere (degrees in, broadcasting).

    Parameters
    ----------
    lon1, lat1 : array_like
        First points, degrees.
    lon2, lat2 : array_like
        Second points, degrees (broadcast against the first).

    References
    ----------
    Sinnott, R. W. (1984). Virtues of the haversine. Sky and Telescope 68:159.
    """
    lon1, lat1, lon2, lat2 = (np.deg2rad(np.asarray(a, dtype=float)) for a in (lon1, lat1, lon2, lat2))
    dlat = lat2 - lat1
    dlon = lon2 - lon1
    a = np.sin(dlat / 2) ** 2 + np.cos(lat1) * np.cos(lat2) * np.sin(dlon / 2) ** 2
    return 2.0 * AUTHALIC_RADIUS_KM * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))
