"""Where a map is drawn: its frame (extent, centre, projection), axes, graticule and scale bar.

A plain longitude-latitude map of a grid is a plain matplotlib :class:`~matplotlib.axes.Axes`
in degrees (x = longitude - centre longitude, equal aspect), which draws the same picture as
cartopy's plate carrée at a fraction of its cost; the equal-area and polar projections use
cartopy's GeoAxes. Nothing is downloaded either way.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import grid_edges, haversine_km

__all__ = [
    "PROJECTIONS",
    "MapFrame",
    "Projection",
    "extent_frame",
    "graticule",
    "map_aspect",
    "map_axes",
    "map_frame",
    "nice_length",
    "scale_bar",
    "set_extent",
]

Projection = Literal["lonlat", "equal_area", "polar"]

#: Map projections: "lonlat" draws cells as rectangles in longitude and latitude (centred on
#: the region); "equal_area" is the Lambert azimuthal equal-area projection centred on the
#: region; "polar" the same projection centred on the nearer pole (Snyder 1987, USGS Prof.
#: Paper 1395, ch. 24). Both equal-area choices keep areas true at high latitudes.
PROJECTIONS: tuple[str, ...] = ("lonlat", "equal_area", "polar")


@dataclass(frozen=True)
class MapFrame:
    """Where and how a grid is drawn.

    ``data`` is the CRS the layers are drawn in: plate carrée centred on ``lon0``, so that
    x = lon - lon0 stays within [-180, 180] for every cell of the grid (a region across the
    180° meridian, lon 160 ... 200, is one piece); ``proj`` is the map projection. On the
    lon-lat map both are the same plate carrée and the axes are plain matplotlib axes whose
    data coordinates are exactly (x, lat).

    Parameters
    ----------
    west, east, south, north : float
        Outer edges of the grid, degrees (`east` > `west`, continuous across 180°).
    lon0, lat0 : float
        Centre of the map.
    projection : str
        One of :data:`PROJECTIONS`.
    data, proj : cartopy.crs.CRS
        CRS of the drawn values and of the map.
    """

    west: float
    east: float
    south: float
    north: float
    lon0: float
    lat0: float
    projection: str
    data: object
    proj: object

    @property
    def plain(self) -> bool:
        """True on the lon-lat map (plain matplotlib axes, no cartopy)."""
        return self.projection == "lonlat"

    def x(self, lon) -> np.ndarray:
        """Longitudes of the grid's axis as x of the ``data`` CRS.

        Parameters
        ----------
        lon : array_like
            Longitudes on the grid's continuous axis.

        Returns
        -------
        numpy.ndarray
        """
        return np.asarray(lon, dtype=float) - self.lon0

    def tr(self, ax):
        """The ``transform`` that draws values given as (x, lat) on `ax`.

        Parameters
        ----------
        ax : matplotlib.axes.Axes
            Axes made by :func:`map_axes` for this frame.

        Returns
        -------
        matplotlib.transforms.Transform or cartopy.crs.CRS
        """
        return ax.transData if self.plain else self.data

    def lonlat(self, x: float, y: float) -> tuple[float, float]:
        """Longitude (on the grid's continuous axis) and latitude of a map point.

        Parameters
        ----------
        x, y : float
            Map coordinates.

        Returns
        -------
        tuple of float
        """
        import cartopy.crs as ccrs

        if self.plain:
            return float(x) + self.lon0, float(y)
        lon, lat = ccrs.PlateCarree().transform_point(x, y, self.proj)
        return ((lon - self.west) % 360.0) + self.west, lat


def map_frame(ds: xr.Dataset | xr.DataArray, projection: Projection = "lonlat") -> MapFrame:
    """The map frame of a grid: its outer edges, centre and projection.

    Parameters
    ----------
    ds : xarray.Dataset or xarray.DataArray
        Anything with the grid's 1-D ``lat`` and ``lon`` (continuous axis).
    projection : {"lonlat", "equal_area", "polar"}
        See :data:`PROJECTIONS`.

    Returns
    -------
    MapFrame
    """
    if projection not in PROJECTIONS:
        raise DataError(f"maps: `projection` must be one of {', '.join(PROJECTIONS)}, got "
                        f"{projection!r}")
    lat_b, lon_b = grid_edges(ds)
    return extent_frame(float(lon_b[0, 0]), float(lon_b[-1, 1]), float(lat_b[0, 0]),
                        float(lat_b[-1, 1]), projection)


def extent_frame(west: float, east: float, south: float, north: float,
                 projection: Projection = "lonlat") -> MapFrame:
    """The map frame of an extent in degrees (`east` > `west`, continuous across 180°).

    Parameters
    ----------
    west, east, south, north : float
        Edges, degrees.
    projection : {"lonlat", "equal_area", "polar"}
        See :data:`PROJECTIONS`.

    Returns
    -------
    MapFrame
    """
    import cartopy.crs as ccrs

    lon0 = 0.5 * (west + east)
    lat0 = 0.5 * (south + north)
    data = ccrs.PlateCarree(central_longitude=lon0)
    if projection == "lonlat":
        proj = data
    elif projection == "equal_area":
        proj = ccrs.LambertAzimuthalEqualArea(central_longitude=lon0, central_latitude=lat0)
    else:
        pole = 90.0 if lat0 >= 0 else -90.0
        proj = ccrs.LambertAzimuthalEqualArea(central_longitude=lon0, central_latitude=pole)
    return MapFrame(west, east, south, north, lon0, lat0, projection, data, proj)


def _outline_xy(fr: MapFrame, n: int = 61) -> tuple[np.ndarray, np.ndarray]:
    """Points covering the grid (a mesh, edges included) as x (data CRS) and lat: their
    projected bounding box is the drawn map (the outline alone is not enough on a polar map
    of a grid that reaches the far pole, where the boundary collapses)."""
    lon, lat = np.meshgrid(np.linspace(fr.west, fr.east, n), np.linspace(fr.south, fr.north, n))
    return fr.x(lon.ravel()), lat.ravel()


def _projected_box(fr: MapFrame) -> tuple[np.ndarray, np.ndarray]:
    x, y = _outline_xy(fr)
    pts = fr.proj.transform_points(fr.data, x, y)
    ok = np.isfinite(pts[:, 0]) & np.isfinite(pts[:, 1])
    return pts[ok, 0], pts[ok, 1]


def set_extent(ax, fr: MapFrame) -> None:
    """Limit `ax` to the grid of `fr` (equal aspect on the lon-lat map).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes of :func:`map_axes`.
    fr : MapFrame
        The frame.
    """
    if fr.plain:
        ax.set_xlim(fr.x(fr.west), fr.x(fr.east))
        ax.set_ylim(fr.south, fr.north)
        ax.set_aspect("equal", adjustable="box")
        return
    xs, ys = _projected_box(fr)
    padx, pady = 0.02 * np.ptp(xs), 0.02 * np.ptp(ys)
    ax.set_xlim(xs.min() - padx, xs.max() + padx)
    ax.set_ylim(ys.min() - pady, ys.max() + pady)


def map_aspect(fr: MapFrame) -> float:
    """Height over width of the drawn map (degrees on the lon-lat map, projected metres else).

    Parameters
    ----------
    fr : MapFrame
        The frame.

    Returns
    -------
    float
    """
    if fr.plain:
        return (fr.north - fr.south) / (fr.east - fr.west)
    xs, ys = _projected_box(fr)
    return (float(np.ptp(ys)) + 1e-9) / (float(np.ptp(xs)) + 1e-9)


def nice_length(km: float) -> float:
    """Largest 1-2-5 x 10^k value not above `km`.

    Parameters
    ----------
    km : float
        Upper bound.

    Returns
    -------
    float
    """
    if km <= 0:
        return 1.0
    exp = math.floor(math.log10(km))
    for m in (5, 2, 1):
        if m * 10**exp <= km:
            return float(m * 10**exp)
    return float(10**exp)


def _bar_ends(ax, fr: MapFrame) -> tuple[tuple[float, float], tuple[float, float], float]:
    """Ends of the scale bar in map coordinates, and its length in km.

    The bar starts inside the grid near its south-west corner and runs horizontally on the map;
    its end is placed (by bisection) so that the great-circle distance between its two ends
    on the authalic sphere is a round number of km, so the bar is right where it is drawn,
    in any projection and at any latitude.
    """
    x0, x1 = ax.get_xlim()
    lon_s = fr.west + 0.05 * (fr.east - fr.west)
    lat_s = fr.south + 0.07 * (fr.north - fr.south)
    if fr.plain:
        xs, ys = float(fr.x(lon_s)), lat_s
    else:
        xs, ys = fr.proj.transform_point(fr.x(lon_s), lat_s, fr.data)

    def dist(dx: float) -> float:
        lon_e, lat_e = fr.lonlat(xs + dx, ys)
        return float(haversine_km(lon_s, lat_s, lon_e, lat_e))

    span = 0.2 * (x1 - x0)
    length = nice_length(dist(span))
    lo, hi = 0.0, span
    for _ in range(60):  # distance grows with dx along a short horizontal map segment
        mid = 0.5 * (lo + hi)
        if dist(mid) < length:
            lo = mid
        else:
            hi = mid
    return (xs, ys), (xs + 0.5 * (lo + hi), ys), length


def scale_bar(ax, fr: MapFrame) -> None:
    """Scale bar about a fifth of the map width; its ends are `length` km apart on the
    authalic sphere (great circle), wherever and in whatever projection it is drawn.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Map axes with its extent set.
    fr : MapFrame
        The frame.
    """
    (xs, ys), (xe, _), length = _bar_ends(ax, fr)
    y0, y1 = ax.get_ylim()
    kw = {"transform": ax.transData, "solid_capstyle": "butt"}
    ax.plot([xs, xe], [ys, ys], color="black", linewidth=3, zorder=6, gid="scale_bar", **kw)
    ax.plot([xs, xe], [ys, ys], color="white", linewidth=1, zorder=7, **kw)
    ax.text(0.5 * (xs + xe), ys + 0.02 * (y1 - y0), f"{length:g} km", ha="center",
            va="bottom", fontsize=7, transform=ax.transData, zorder=7,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.7, "pad": 1})


def _lon_label(lon: float) -> str:
    w = ((float(lon) + 180.0) % 360.0) - 180.0
    if abs(abs(w) - 180.0) < 1e-9:
        return "180°"
    if abs(w) < 1e-9:
        return "0°"
    return f"{abs(w):g}°{'E' if w > 0 else 'W'}"


def _lat_label(lat: float) -> str:
    if abs(lat) < 1e-9:
        return "0°"
    return f"{abs(lat):g}°{'N' if lat > 0 else 'S'}"


def graticule(ax, fr: MapFrame, *, labels: bool = True, bottom: bool | None = None,
              left: bool | None = None) -> None:
    """Labelled graticule.

    On the lon-lat map the graticule is straight lines at plain axis ticks. Projected maps draw
    densified meridians and parallels with labels at the southern and western edges of the
    grid.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Map axes.
    fr : MapFrame
        The frame.
    labels : bool
        Label the lines at all.
    bottom, left : bool, optional
        Label the meridians (at the bottom) and the parallels (at the left); default `labels`.
        A grid of panels labels only its outer panels.
    """
    from matplotlib.ticker import MaxNLocator

    bottom = labels if bottom is None else bottom
    left = labels if left is None else left
    loc = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10])
    xt = [t for t in loc.tick_values(fr.west, fr.east) if fr.west <= t <= fr.east]
    yt = [t for t in loc.tick_values(fr.south, fr.north) if fr.south <= t <= fr.north]
    line = {"color": "0.5", "linewidth": 0.4, "linestyle": ":", "alpha": 0.6, "zorder": 3}
    if fr.plain:
        _plain_graticule(ax, fr, xt, yt, line, bottom=bottom, left=left)
        return
    dense_lat = np.linspace(fr.south, fr.north, 60)
    dense_lon = np.linspace(fr.west, fr.east, 120)
    text = {"fontsize": 6, "color": "0.25", "transform": fr.data, "zorder": 7}
    for lon in xt:
        ax.plot(fr.x(np.full(dense_lat.size, lon)), dense_lat, transform=fr.data, **line)
        if bottom:
            ax.text(fr.x(lon), fr.south, _lon_label(lon), ha="center", va="top", **text)
    for lat in yt:
        ax.plot(fr.x(dense_lon), np.full(dense_lon.size, lat), transform=fr.data, **line)
        if left:
            ax.text(fr.x(fr.west), lat, _lat_label(lat) + " ", ha="right", va="center",
                    **text)


def _plain_graticule(ax, fr: MapFrame, xt, yt, line: dict, *, bottom: bool,
                     left: bool) -> None:
    """Graticule of plain lon-lat axes: one collection of lines, labels as texts beside the
    frame with short tick marks (no axis ticks: each matplotlib tick is four artists, the
    largest cost of a small map)."""
    from matplotlib.collections import LineCollection

    xs = list(fr.x(xt))
    segs = [[(x, fr.south), (x, fr.north)] for x in xs]
    segs += [[(fr.x(fr.west), y), (fr.x(fr.east), y)] for y in yt]
    ax.add_collection(LineCollection(segs, colors=line["color"], linewidths=line["linewidth"],
                                     linestyles=line["linestyle"], alpha=line["alpha"],
                                     zorder=line["zorder"]), autolim=False)
    ax.set_xticks([])
    ax.set_yticks([])
    text = {"fontsize": 7, "color": "0.15", "clip_on": False}
    ticks = {"color": "black", "linewidth": 0.6, "clip_on": False}
    if bottom:
        tx = ax.get_xaxis_transform()
        ax.add_collection(LineCollection([[(x, 0.0), (x, -0.015)] for x in xs], transform=tx,
                                         **ticks), autolim=False)
        for x, t in zip(xs, xt):
            ax.text(x, -0.025, _lon_label(t), transform=tx, ha="center", va="top", **text)
    if left:
        ty = ax.get_yaxis_transform()
        ax.add_collection(LineCollection([[(0.0, y), (-0.015, y)] for y in yt], transform=ty,
                                         **ticks), autolim=False)
        for y in yt:
            ax.text(-0.025, y, _lat_label(y), transform=ty, ha="right", va="center", **text)


def map_axes(fig, spec, ds: xr.Dataset | xr.DataArray | None, i: int | None = None, *,
             labels: bool = True, projection: Projection = "lonlat",
             frame: MapFrame | None = None, bottom: bool | None = None,
             left: bool | None = None):
    """Map axes on `fig` with the grid's extent and graticule.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure.
    spec : int, SubplotSpec or sequence of 4 floats
        A subplot position, or a rectangle (left, bottom, width, height) in figure fractions.
    ds : xarray.Dataset or xarray.DataArray or None
        The grid (ignored when `frame` is given).
    i : int, optional
        Slice (unused; kept for callers that pass it).
    labels, bottom, left : bool
        Graticule labels (see :func:`graticule`).
    projection : {"lonlat", "equal_area", "polar"}
        See :data:`PROJECTIONS`.
    frame : MapFrame, optional
        A frame computed already.

    Returns
    -------
    (matplotlib.axes.Axes, MapFrame)
        Plain axes on the lon-lat map (with ``projection`` set to the frame's plate carrée, so
        callers can transform points the same way as on a GeoAxes), cartopy GeoAxes otherwise.
    """
    fr = frame if frame is not None else map_frame(ds, projection)
    kw = {} if fr.plain else {"projection": fr.proj}
    if isinstance(spec, (list, tuple)) and len(spec) == 4:
        ax = fig.add_axes(spec, **kw)
    else:
        ax = fig.add_subplot(spec, **kw)
    if fr.plain:
        ax.projection = fr.proj  # the CRS of the axes' data coordinates (x, lat)
    set_extent(ax, fr)
    ax.set_facecolor("white")
    graticule(ax, fr, labels=labels, bottom=bottom, left=left)
    return ax, fr
