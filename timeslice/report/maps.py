"""Maps of the series with cartopy, fully offline.

Every map draws the slice's own coastline as the 0.5 contour of its ``land`` mask (nothing is
downloaded: no cartopy coastline or Natural Earth feature is ever requested), a labelled
graticule, a scale bar, and a title naming slice, model and scenario. Maps are centred on the
grid's own longitudes, so a region across the 180° meridian (lon 160 ... 200) is drawn as
one piece. Three projections (:data:`PROJECTIONS`): "lonlat" (plain latitude-longitude,
centred on the region), "equal_area" (Lambert azimuthal equal-area centred on the region) and
"polar" (Lambert azimuthal equal-area centred on the nearer pole); the last two show areas
true at every latitude, which high-latitude studies need. Continuous layers use
perceptually uniform colour maps that stay readable with colour-vision deficiencies
(matplotlib "viridis" and "cividis"; ColorBrewer "PuOr" for the diverging MESS scale);
gain/loss/stable use the project's categorical palette :data:`CHANGE_COLOURS`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr
from matplotlib.colors import BoundaryNorm, ListedColormap, Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from timeslice.errors import DataError
from timeslice.grid import AUTHALIC_RADIUS_KM, grid_edges, haversine_km
from timeslice.report._output import file_stem, output_path, save_figure
from timeslice.report._layers import LAYERS, flag_pairs, slice_labels, slice_title

__all__ = [
    "CHANGE_COLOURS",
    "EXDET_COLOURS",
    "FIXED_RANGES",
    "FLAG_COLOURS",
    "PROJECTIONS",
    "REACH_COLOURS",
    "agreement_map",
    "change_map",
    "dominant_source_map",
    "most_dissimilar_map",
    "novelty_map",
    "reach_map",
    "series_panel",
    "slice_maps",
    "stability_map",
]

#: Categorical palette for range change, picked from the colour-blind-safe set of
#: Okabe & Ito (2008), "Color Universal Design" (from memory): code -> (label, hex colour).
#: Not-land cells are left white; the coastline marks them.
CHANGE_COLOURS: dict[int, tuple[str, str]] = {
    0: ("absent", "#E4E4E4"),
    1: ("gain", "#0072B2"),
    2: ("loss", "#E69F00"),
    3: ("stable", "#009E73"),
}

#: ExDet classes (Mesgaran, Cousens & Webber 2014): code -> (label, colour), the colours
#: again from the Okabe & Ito (2008) set (from memory).
EXDET_COLOURS: dict[int, tuple[str, str]] = {
    0: ("analog (NT1 = 0, NT2 <= 1)", "#E4E4E4"),
    1: ("novel combination (NT2 > 1)", "#56B4E9"),
    2: ("outside a univariate range (NT1 < 0)", "#D55E00"),
}
#: Suitable versus reachable (the dispersal layer), code -> (label, colour); Okabe & Ito set.
REACH_COLOURS: dict[int, tuple[str, str]] = {
    0: ("unsuitable", "#E4E4E4"),
    1: ("suitable, not reached", "#F0E442"),
    2: ("suitable and reached", "#0072B2"),
}
_CATEGORICAL = {"change": CHANGE_COLOURS, "exdet": EXDET_COLOURS, "reach": REACH_COLOURS}
#: Colours of categorical layers whose classes are named by their CF flags (the most
#: dissimilar variable, the dominant source of uncertainty), in flag order: the Okabe & Ito
#: (2008) set again (from memory), grey last; more classes than colours repeat them.
FLAG_COLOURS = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
                "#CC79A7", "#999999")
#: Layers drawn as classes named by their own flag_values / flag_meanings.
_FLAG_LAYERS = ("most_dissimilar", "dominant")
_DISAGREE_HATCH = "...."

_CONTINUOUS = {
    "suitability": ("viridis", "climatic suitability (0-1)"),
    "stability": ("viridis", "fraction of slices suitable"),
    "mess": ("PuOr", "MESS (< 0: novel climate)"),
    "nt1": ("cividis", "NT1 (< 0: outside the reference range)"),
    "nt2": ("cividis", "NT2 (> 1: novel combination)"),
    "agreement": ("viridis", "share of climate models in which the cell is suitable"),
}
_NOVEL_HATCH = "////"
_REACH_LAYER = "reachable"
_ICE_COLOUR = "#D6EAF8"


def _check(ds: xr.Dataset, variable: str) -> None:
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"maps: `ds` must be an xarray.Dataset, got {type(ds).__name__}")
    if variable == "reach":
        missing = [v for v in ("suitable", _REACH_LAYER) if v not in ds.data_vars]
        if missing:
            raise DataError(f"maps: the reach map needs layers {missing}; add the dispersal "
                            "layer (timeslice.series.dispersal.reachable) to the series")
    elif variable == "exdet":
        missing = [v for v in ("nt1", "nt2") if v not in ds.data_vars]
        if missing:
            raise DataError(f"maps: the ExDet classes need layers {missing}; run the novelty "
                            "step (timeslice.transfer.novelty.exdet) first")
    elif variable not in ds.data_vars:
        raise DataError(
            f"maps: layer {variable!r} is not in the dataset; choose from "
            f"{sorted(map(str, ds.data_vars))}"
        )
    if "lat" not in ds.dims or "lon" not in ds.dims:
        raise DataError("maps: the dataset needs `lat` and `lon` dimensions")


def _layer(ds: xr.Dataset, name: str, i: int | None) -> np.ndarray | None:
    """2-D values of layer `name` for slice `i` (layers without a slice dim are shared)."""
    if name == "exdet":
        nt1, nt2 = _layer(ds, "nt1", i), _layer(ds, "nt2", i)
        if nt1 is None or nt2 is None:
            return None
        with np.errstate(invalid="ignore"):
            code = np.where(nt1 < 0, 2.0, np.where(nt2 > 1, 1.0, 0.0))
        return np.where(np.isfinite(nt1) & np.isfinite(nt2), code, np.nan)
    if name == "reach":
        suitable, reached = _layer(ds, "suitable", i), _layer(ds, _REACH_LAYER, i)
        if suitable is None or reached is None:
            return None
        code = np.where(suitable == 1, np.where(reached == 1, 2.0, 1.0), 0.0)
        return np.where(suitable >= 0, code, np.nan)
    if name not in ds.data_vars:
        return None
    da = ds[name]
    if "slice" in da.dims:
        if i is None:
            return None
        da = da.isel(slice=i)
    return np.asarray(da.transpose("lat", "lon").values)


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
    180° meridian, lon 160 ... 200, is one piece); ``proj`` is the map projection.
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

    def x(self, lon) -> np.ndarray:
        """Longitudes of the grid's axis as x of the ``data`` CRS."""
        return np.asarray(lon, dtype=float) - self.lon0

    def lonlat(self, x: float, y: float) -> tuple[float, float]:
        """Longitude (on the grid's continuous axis) and latitude of a map point."""
        import cartopy.crs as ccrs

        if self.projection == "lonlat":
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

    Returns
    -------
    MapFrame
    """
    import cartopy.crs as ccrs

    if projection not in PROJECTIONS:
        raise DataError(f"maps: `projection` must be one of {', '.join(PROJECTIONS)}, got "
                        f"{projection!r}")
    lat_b, lon_b = grid_edges(ds)
    return extent_frame(float(lon_b[0, 0]), float(lon_b[-1, 1]), float(lat_b[0, 0]),
                        float(lat_b[-1, 1]), projection)


def extent_frame(west: float, east: float, south: float, north: float,
                 projection: Projection = "lonlat") -> MapFrame:
    """The map frame of an extent in degrees (`east` > `west`, continuous across 180°)."""
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


def _set_extent(ax, fr: MapFrame) -> None:
    if fr.projection == "lonlat":
        ax.set_extent([fr.x(fr.west), fr.x(fr.east), fr.south, fr.north], crs=fr.data)
        return
    x, y = _outline_xy(fr)
    pts = fr.proj.transform_points(fr.data, x, y)
    ok = np.isfinite(pts[:, 0]) & np.isfinite(pts[:, 1])
    xs, ys = pts[ok, 0], pts[ok, 1]
    padx, pady = 0.02 * np.ptp(xs), 0.02 * np.ptp(ys)
    ax.set_xlim(xs.min() - padx, xs.max() + padx)
    ax.set_ylim(ys.min() - pady, ys.max() + pady)


def _nice_length(km: float) -> float:
    """Largest 1-2-5 x 10^k value not above `km`."""
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
    xs, ys = fr.proj.transform_point(fr.x(lon_s), lat_s, fr.data)

    def dist(dx: float) -> float:
        lon_e, lat_e = fr.lonlat(xs + dx, ys)
        return float(haversine_km(lon_s, lat_s, lon_e, lat_e))

    span = 0.2 * (x1 - x0)
    length = _nice_length(dist(span))
    lo, hi = 0.0, span
    for _ in range(60):  # distance grows with dx along a short horizontal map segment
        mid = 0.5 * (lo + hi)
        if dist(mid) < length:
            lo = mid
        else:
            hi = mid
    return (xs, ys), (xs + 0.5 * (lo + hi), ys), length


def _scale_bar(ax, fr: MapFrame) -> None:
    """Scale bar about a fifth of the map width; its ends are `length` km apart on the
    authalic sphere (great circle), wherever and in whatever projection it is drawn."""
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


def _graticule(ax, fr: MapFrame, *, labels: bool = True) -> None:
    """Labelled graticule.

    On the lon-lat map the graticule is straight lines, so plain axis ticks give the same
    picture as cartopy's gridliner at a fraction of its drawing cost (the gridliner was ~70 %
    of a map's rendering time in profiling). Projected maps draw densified meridians and
    parallels with labels at the southern and western edges of the grid.
    """
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    loc = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10])
    xt = [t for t in loc.tick_values(fr.west, fr.east) if fr.west <= t <= fr.east]
    yt = [t for t in loc.tick_values(fr.south, fr.north) if fr.south <= t <= fr.north]
    line = {"color": "0.5", "linewidth": 0.4, "linestyle": ":", "alpha": 0.6, "zorder": 3}
    if fr.projection == "lonlat":
        ax.set_xticks(list(fr.x(xt)), crs=fr.data)
        ax.set_yticks(yt, crs=fr.data)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: _lon_label(v + fr.lon0)))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: _lat_label(v)))
        ax.tick_params(labelsize=7, length=2, labelbottom=labels, labelleft=labels)
        for x in fr.x(xt):
            ax.plot([x, x], [fr.south, fr.north], transform=fr.data, **line)
        for y in yt:
            ax.plot(fr.x([fr.west, fr.east]), [y, y], transform=fr.data, **line)
        return
    dense_lat = np.linspace(fr.south, fr.north, 60)
    dense_lon = np.linspace(fr.west, fr.east, 120)
    text = {"fontsize": 6, "color": "0.25", "transform": fr.data, "zorder": 7}
    for lon in xt:
        ax.plot(fr.x(np.full(dense_lat.size, lon)), dense_lat, transform=fr.data, **line)
        if labels:
            ax.text(fr.x(lon), fr.south, _lon_label(lon), ha="center", va="top", **text)
    for lat in yt:
        ax.plot(fr.x(dense_lon), np.full(dense_lon.size, lat), transform=fr.data, **line)
        if labels:
            ax.text(fr.x(fr.west), lat, _lat_label(lat) + " ", ha="right", va="center",
                    **text)


def _axes(fig: Figure, spec, ds: xr.Dataset, i: int | None, *, labels: bool = True,
          projection: Projection = "lonlat"):
    fr = map_frame(ds, projection)
    ax = fig.add_subplot(spec, projection=fr.proj)
    _set_extent(ax, fr)
    ax.set_facecolor("white")
    _graticule(ax, fr, labels=labels)
    return ax, fr


def _coastline(ax, ds: xr.Dataset, i: int | None, fr: MapFrame) -> str | None:
    """Draw the slice's coastline; return the legend label (None when nothing was drawn).

    With an ``ice`` layer the coastline is the edge of land-or-ice and the ice sheet is
    shaded; without one the land mask's edge runs along coasts and ice margins alike.
    """
    land = _layer(ds, "land", i)
    if land is None:
        return None
    land = land.astype(bool)
    ice = _layer(ds, "ice", i)
    lon, lat = fr.x(ds["lon"].values), ds["lat"].values
    label = "coastline of the slice"
    if ice is not None and np.any(ice.astype(bool)):
        ice = ice.astype(bool)
        ax.contourf(lon, lat, ice.astype(float), levels=[0.5, 1.5], colors=[_ICE_COLOUR],
                    transform=fr.data, zorder=1)
        land = land | ice
    elif ice is None:
        label = "land edge (coast or ice margin)"
    if np.any(land) and not np.all(land):
        ax.contour(lon, lat, land.astype(float), levels=[0.5], colors="black",
                   linewidths=0.8, transform=fr.data, zorder=5)
        return label
    return None


def _outline(ax, ds, mask: np.ndarray | None, fr: MapFrame, **kw) -> None:
    if mask is None:
        return
    m = np.where(np.isfinite(mask.astype(float)), mask.astype(float), 0.0)
    if np.any(m > 0.5) and not np.all(m > 0.5):
        ax.contour(fr.x(ds["lon"].values), ds["lat"].values, m, levels=[0.5], transform=fr.data,
                   zorder=5, **kw)


def _hatch_novel(ax, ds, i, fr: MapFrame) -> bool:
    mess = _layer(ds, "mess", i)
    if mess is None:
        return False
    novel = np.where(np.isfinite(mess), mess < 0, False).astype(float)
    if not np.any(novel):
        return False
    ax.contourf(fr.x(ds["lon"].values), ds["lat"].values, novel, levels=[0.5, 1.5],
                colors="none", hatches=[_NOVEL_HATCH], transform=fr.data, zorder=4)
    return True


#: Fixed colour ranges of the novelty layers, so figures of different runs can be set side by
#: side; values beyond them take the end colours (arrows on the colour bar). MESS is 100 at the
#: reference median and 0 at the edge of the reference range (Elith et al. 2010); NT1 <= 0 with
#: -1 one reference range outside on one variable; NT2 = 1 at the most extreme reference point
#: (Mesgaran et al. 2014). The ranges themselves are the project's choice.
FIXED_RANGES: dict[str, tuple[float, float]] = {
    "suitability": (0.0, 1.0),
    "stability": (0.0, 1.0),
    "mess": (-50.0, 50.0),
    "nt1": (-1.0, 0.0),
    "nt2": (0.0, 3.0),
}


def _norm(name: str, values: np.ndarray, ds: xr.Dataset | None = None):
    if name == "agreement" and ds is not None and "n_models" in ds.coords:
        # k of n models: one colour per count, the colour bar in steps
        n = max(1, int(np.max(ds["n_models"].values)))
        return BoundaryNorm(np.linspace(-0.5 / n, 1 + 0.5 / n, n + 2), 256)
    if name in FIXED_RANGES:
        lo, hi = FIXED_RANGES[name]
        if name == "mess":
            return TwoSlopeNorm(vcenter=0.0, vmin=lo, vmax=hi)
        return Normalize(lo, hi)
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return Normalize(0.0, 1.0)
    lo, hi = np.percentile(finite, [2, 98])
    return Normalize(float(lo), float(hi) if hi > lo else float(lo) + 1.0)


def _extend(name: str) -> str:
    return {"mess": "both", "nt1": "min", "nt2": "max"}.get(name, "neither")


def _flag_colours(ds: xr.Dataset, name: str) -> dict[int, tuple[str, str]]:
    """Classes of a flag layer (values >= 0; negative flags mean no data): code -> (label,
    colour), labels from ``flag_meanings`` ("model_x_scenario" drawn as "model × scenario")."""
    pairs = [(v, m) for v, m in flag_pairs(ds[name]) if v >= 0]
    return {v: (m.replace("_x_", " × ").replace("_", " "), FLAG_COLOURS[k % len(FLAG_COLOURS)])
            for k, (v, m) in enumerate(pairs)}


def _is_categorical(name: str, ds: xr.Dataset | None = None) -> bool:
    return name in _CATEGORICAL or (name in _FLAG_LAYERS and ds is not None and name in ds)


def _categorical_style(name: str = "change", ds: xr.Dataset | None = None):
    colours = _CATEGORICAL[name] if name in _CATEGORICAL else _flag_colours(ds, name)
    codes = sorted(colours)
    cmap = ListedColormap([colours[c][1] for c in codes])
    norm = BoundaryNorm([c - 0.5 for c in codes] + [codes[-1] + 0.5], cmap.N)
    handles = [Patch(facecolor=colours[c][1], edgecolor="0.3", label=colours[c][0])
               for c in codes]
    return cmap, norm, handles


#: Above this many cells a projected map draws the layer as a resampled image, not a mesh.
_MESH_MAX_CELLS = 250_000


def _raster(ax, fr: MapFrame, lon: np.ndarray, lat: np.ndarray, values: np.ndarray, *,
            cmap, norm):
    """Draw cell values. On the lon-lat map a regular grid is an image (exact there, ~5x
    faster than a mesh on a 2000 x 1500 grid); projected maps get a mesh of the cell edges,
    each cell its own quadrilateral, up to :data:`_MESH_MAX_CELLS` cells, and a resampled image
    beyond. NaN cells stay transparent."""
    dlon, dlat = np.diff(lon), np.diff(lat)
    regular = (lon.size > 1 and lat.size > 1 and np.allclose(dlon, dlon[0], rtol=1e-6)
               and np.allclose(dlat, dlat[0], rtol=1e-6) and dlon[0] > 0 and dlat[0] > 0)
    x = fr.x(lon)
    if regular and (fr.projection == "lonlat" or values.size > _MESH_MAX_CELLS):
        extent = [x[0] - dlon[0] / 2, x[-1] + dlon[0] / 2,
                  lat[0] - dlat[0] / 2, lat[-1] + dlat[0] / 2]
        # on a projected map cartopy resamples the image onto the map (nearest cell, so
        # categories stay categories); exact cell polygons cost minutes on millions of cells
        kw = {} if fr.projection == "lonlat" else {"regrid_shape": 1200}
        return ax.imshow(values, origin="lower", extent=extent, transform=fr.data, cmap=cmap,
                         norm=norm, interpolation="nearest", zorder=2, **kw)
    if lon.size > 1 and lat.size > 1:
        da = xr.DataArray(values, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
        lat_b, lon_b = grid_edges(da)
        xe = fr.x(np.append(lon_b[:, 0], lon_b[-1, 1]))
        ye = np.append(lat_b[:, 0], lat_b[-1, 1])
        return ax.pcolormesh(xe, ye, values, cmap=cmap, norm=norm, transform=fr.data,
                             shading="flat", zorder=2)
    return ax.pcolormesh(x, lat, values, cmap=cmap, norm=norm, transform=fr.data,
                         shading="nearest", zorder=2)


def _draw(ax, fr: MapFrame, ds, name: str, i: int | None, norm=None):
    """Draw layer `name` for slice `i`; return the mappable (None for none)."""
    values = _layer(ds, name, i)
    lon, lat = ds["lon"].values, ds["lat"].values
    if _is_categorical(name, ds):
        cmap, cnorm, _ = _categorical_style(name, ds)
        v = np.where(values >= 0, values, np.nan).astype(float)
        return _raster(ax, fr, lon, lat, v, cmap=cmap, norm=cnorm)
    cmap, _ = _CONTINUOUS.get(name, ("cividis", name))
    v = values.astype(float)
    return _raster(ax, fr, lon, lat, v, cmap=cmap, norm=norm or _norm(name, v, ds))


def _decorate(ax, fr: MapFrame, ds, i, name: str, *, scale_bar: bool = True) -> list:
    """Overlays shared by every map; returns legend handles."""
    from matplotlib.lines import Line2D

    handles: list = []
    coast = _coastline(ax, ds, i, fr)
    if coast:
        handles.append(Line2D([], [], color="black", linewidth=0.8, label=coast))
    ice = _layer(ds, "ice", i)
    if ice is not None and np.any(ice.astype(bool)):
        handles.append(Patch(facecolor=_ICE_COLOUR, edgecolor="0.5", label="ice sheet"))
    if name == "agreement":
        handles += _agreement_overlays(ax, ds, i, fr)
    if name in ("suitability", "mess", "nt1", "nt2", "change", "reach", "most_dissimilar"):
        if _hatch_novel(ax, ds, i, fr):
            handles.append(Patch(facecolor="none", edgecolor="0.2", hatch=_NOVEL_HATCH,
                                 label="novel climate (MESS < 0)"))
    if name == "suitability":
        suitable = _layer(ds, "suitable", i)
        if suitable is not None:
            _outline(ax, ds, suitable == 1, fr, colors="white", linewidths=1.2)
            _outline(ax, ds, suitable == 1, fr, colors="black", linewidths=0.5)
            handles.append(Line2D([], [], color="black", linewidth=0.6,
                                  label="suitable (above threshold)"))
    calib = _layer(ds, "calibration_area", i)
    if calib is not None and name != "stability":
        _outline(ax, ds, calib.astype(bool), fr, colors="#CC79A7", linewidths=1.2,
                 linestyles="dashed")
        handles.append(Line2D([], [], color="#CC79A7", linewidth=1.2, linestyle="--",
                              label="calibration area"))
    if scale_bar:
        _scale_bar(ax, fr)
    return handles


def _save(fig: Figure, path: Path, *, dpi: int) -> Path:
    with output_path(path) as tmp:
        save_figure(fig, tmp, dpi=dpi)
    return path


def _map_size(ds: xr.Dataset, width: float = 6.0,
              projection: Projection = "lonlat") -> tuple[float, float]:
    """Figure size whose height follows the drawn map's aspect (degrees on the lon-lat map,
    projected metres otherwise)."""
    fr = map_frame(ds, projection)
    if projection == "lonlat":
        aspect = (fr.north - fr.south) / (fr.east - fr.west)
    else:
        x, y = _outline_xy(fr)
        pts = fr.proj.transform_points(fr.data, x, y)
        ok = np.isfinite(pts[:, 0]) & np.isfinite(pts[:, 1])
        aspect = (float(np.ptp(pts[ok, 1])) + 1e-9) / (float(np.ptp(pts[ok, 0])) + 1e-9)
    return width, max(2.5, min(9.0, width * aspect + 1.2))


def _legend(fig_or_ax, handles, **kw) -> None:
    if handles:
        fig_or_ax.legend(handles=handles, fontsize=7, framealpha=0.85, **kw)


def _single(ds: xr.Dataset, name: str, i: int | None, path: Path, *, title: str,
            dpi: int, projection: Projection = "lonlat") -> Path:
    fig = Figure(figsize=_map_size(ds, projection=projection))
    ax, fr = _axes(fig, 111, ds, i, projection=projection)
    mappable = _draw(ax, fr, ds, name, i)
    handles = _decorate(ax, fr, ds, i, name)
    if _is_categorical(name, ds):
        handles = _categorical_style(name, ds)[2] + handles
    else:
        fig.colorbar(mappable, ax=ax, shrink=0.8, pad=0.03, extend=_extend(name),
                     label=_CONTINUOUS.get(name, ("", LAYERS.get(name, {}).get("long_name",
                                                                          name)))[1])
    _legend(ax, handles, loc="upper right")
    ax.set_title(title, fontsize=9)
    return _save(fig, path, dpi=dpi)


def _safe(text: str) -> str:
    return file_stem(text)


def _slice_indices(ds: xr.Dataset, slices: Sequence[str] | None) -> list[int]:
    if "slice" not in ds.dims:
        return []
    labels = slice_labels(ds)
    if slices is None:
        return list(range(len(labels)))
    missing = [s for s in slices if s not in labels]
    if missing:
        raise DataError(f"maps: slices {missing} are not in the series; choose from {labels}")
    return [labels.index(s) for s in slices]


def slice_maps(
    ds: xr.Dataset,
    out_dir: str | os.PathLike,
    *,
    variable: str = "suitability",
    slices: Sequence[str] | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> list[Path]:
    """One PNG map of `variable` per slice.

    Parameters
    ----------
    ds : xarray.Dataset
        Stacked series with ``land`` (per slice or shared), and ``suitable``, ``mess`` and
        ``calibration_area`` when present (used for the outline, hatching and dashed line).
    out_dir : path-like
        Folder for ``<variable>_<slice>.png``.
    variable : {"suitability", "mess", "nt1", "nt2", "change"} or any layer, default
        "suitability".
    slices : sequence of str, optional
        Labels to draw; default all.
    dpi : int, default 110
    projection : {"lonlat", "equal_area", "polar"}, default "lonlat"
        See :data:`PROJECTIONS`; every map is centred on the grid's own longitudes.

    Returns
    -------
    list of pathlib.Path
        The PNG files, in slice order.
    """
    _check(ds, variable)
    out = Path(out_dir)
    paths = []
    for i in _slice_indices(ds, slices):
        label = slice_labels(ds)[i]
        path = out / f"{_safe(variable)}_{_safe(label)}.png"
        title = f"{_CONTINUOUS.get(variable, (None, variable))[1].split(' (')[0]} — " \
            f"{slice_title(ds, i)}"
        paths.append(_single(ds, variable, i, path, title=title, dpi=dpi,
                             projection=projection))
    return paths


def _grid_places(ds: xr.Dataset, idx: list[int], columns: str
                 ) -> tuple[dict[int, tuple[int, int]], list[str], list[str]]:
    """Panel (row, column) of every slice: columns are the values of slice coordinate
    `columns` (e.g. the climate model), rows the other slice metadata (scenario, period), both
    in order of first appearance; also the row and column labels."""
    keys = [k for k in ("scenario", "period", "model") if k != columns and k in ds.coords
            and ds[k].dims == ("slice",)]

    def row_of(i: int) -> str:
        return " ".join(str(ds[k].values[i]) for k in keys) if keys else slice_labels(ds)[i]

    rows = list(dict.fromkeys(row_of(i) for i in idx))
    cols = list(dict.fromkeys(str(ds[columns].values[i]) for i in idx))
    places: dict[int, tuple[int, int]] = {}
    taken: set[tuple[int, int]] = set()
    for i in idx:
        r = rows.index(row_of(i))
        c = cols.index(str(ds[columns].values[i]))
        if (r, c) in taken:  # two slices share row and column: the grid cannot hold them
            return {}, rows, cols
        taken.add((r, c))
        places[i] = (r, c)
    # every row starts at the left (the baseline's one panel, the past's periods): full rows
    # keep their columns aligned, shorter rows leave no gap at the left
    for r in range(len(rows)):
        mine = sorted((c, i) for i, (rr, c) in places.items() if rr == r)
        for k, (_, i) in enumerate(mine):
            places[i] = (r, k)
    return places, rows, cols


def _panel(ds: xr.Dataset, name: str, idx: list[int], path: str | os.PathLike, *,
           ncols: int | None, dpi: int, suptitle: str,
           projection: Projection = "lonlat", columns: str | None = None) -> Path:
    if not idx:
        raise DataError(f"maps: no slices to draw for {name!r}")
    places: dict[int, tuple[int, int]] = {}
    if columns is not None and columns in ds.coords and ds[columns].dims == ("slice",):
        places, _, cols = _grid_places(ds, idx, columns)
    n = len(idx)
    if places:
        ncols = max(c for _, c in places.values()) + 1
        nrows = max(r for r, _ in places.values()) + 1
    else:
        ncols = ncols or min(n, 3)
        nrows = math.ceil(n / ncols)
        places = {i: (k // ncols, k % ncols) for k, i in enumerate(idx)}
    w, h = _map_size(ds, width=3.4, projection=projection)
    fig = Figure(figsize=(w * ncols + 0.8, (h - 0.6) * nrows + 0.8), layout="constrained")
    gs = fig.add_gridspec(nrows, ncols)
    if _is_categorical(name, ds):
        norm = None
    else:
        # One colour scale for all panels, from the values of every panel drawn.
        allv = np.concatenate([_layer(ds, name, i).astype(float).ravel() for i in idx])
        norm = _norm(name, allv, ds)
    handles: list = []
    mappable = None
    for k, i in enumerate(idx):
        r, c = places[i]
        ax, fr = _axes(fig, gs[r, c], ds, i, labels=True, projection=projection)
        mappable = _draw(ax, fr, ds, name, i, norm=norm)
        h_ = _decorate(ax, fr, ds, i, name, scale_bar=(k == 0))
        if len(h_) > len(handles):
            handles = h_
        ax.set_title(_short_title(ds, i, columns) if columns else slice_title(ds, i),
                     fontsize=8)
    if _is_categorical(name, ds):
        handles = _categorical_style(name, ds)[2] + handles
    else:
        bar = fig.colorbar(mappable, ax=fig.axes, shrink=0.6, extend=_extend(name),
                           label=_CONTINUOUS.get(name, ("", name))[1])
        if name == "agreement" and "n_models" in ds.coords:
            m = max(1, int(np.max(ds["n_models"].values)))
            bar.set_ticks(np.arange(m + 1) / m, labels=[f"{k} of {m}" for k in range(m + 1)])
    _legend(fig, handles, loc="outside lower center", ncols=min(4, len(handles)))
    fig.suptitle(suptitle, fontsize=10)
    return _save(fig, Path(path), dpi=dpi)


def _short_title(ds: xr.Dataset, i: int, columns: str | None) -> str:
    """Panel title in a grid: scenario and period, then the column's value (the model)."""
    parts = [str(ds[k].values[i]) for k in ("scenario", "period")
             if k in ds.coords and ds[k].dims == ("slice",) and k != columns]
    head = " ".join(parts) or slice_labels(ds)[i]
    if columns and columns in ds.coords and ds[columns].dims == ("slice",):
        return f"{head} · {ds[columns].values[i]}"
    return head


def series_panel(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: str = "suitability",
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> Path:
    """Multi-panel map of `variable` across the slices with one shared colour scale.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    _check(ds, variable)
    label = _CONTINUOUS.get(variable, (None, variable))[1]
    return _panel(ds, variable, _slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"{label} across the series", projection=projection)


def change_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> Path:
    """Gain / loss / stable / absent against the reference slice, one panel per slice.

    The reference slice (the first, or the one whose ``change`` has no gain and no loss) is
    left out by default. Colours: :data:`CHANGE_COLOURS`.
    """
    _check(ds, "change")
    idx = _slice_indices(ds, slices)
    if slices is None and len(idx) > 1:
        idx = idx[1:]
    return _panel(ds, "change", idx, path, ncols=ncols, dpi=dpi,
                  suptitle="Range change against the reference slice", projection=projection)


def novelty_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: Literal["mess", "nt1", "nt2", "exdet"] = "mess",
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    columns: str | None = None,
) -> Path:
    """Novel climate across the slices, one panel per slice.

    `variable` is "mess" (default; MESS < 0 hatched), "nt1", "nt2", or "exdet": the ExDet
    classes analog / novel combination (NT2 > 1) / outside a univariate range (NT1 < 0), in
    the colours of :data:`EXDET_COLOURS`. With ``columns="model"`` the panels form a grid:
    one column per climate model, one row per scenario and period, short titles.
    """
    if variable not in ("mess", "nt1", "nt2", "exdet"):
        raise DataError("novelty_map: `variable` must be 'mess', 'nt1', 'nt2' or 'exdet', got "
                        f"{variable!r}")
    _check(ds, variable)
    title = ("ExDet classes (Mesgaran et al. 2014)" if variable == "exdet"
             else _CONTINUOUS[variable][1])
    return _panel(ds, variable, _slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"Climate novelty: {title}", projection=projection, columns=columns)


def stability_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: str = "stability",
    refugium: str | None = "refugium",
    dpi: int = 110,
    projection: Projection = "lonlat",
    patches=None,
) -> Path:
    """Stability (fraction of slices suitable) with refugia (suitable in every slice) outlined.

    Parameters
    ----------
    ds : xarray.Dataset
        Summarised series with `variable` and `refugium` on ``(lat, lon)``.
    path : path-like
        PNG file.
    variable, refugium : str
        Layer names, e.g. ``"stability_past"`` / ``"refugium_past"`` for a named window;
        `refugium` None draws no outline.
    patches : pandas.DataFrame, optional
        The refugium's patch table (:func:`timeslice.series.patches.patch_table`): the five
        largest patches are named on the map beside their centroids (R1 the largest).
    """
    from matplotlib.lines import Line2D

    _check(ds, variable)
    if refugium is not None:
        _check(ds, refugium)
    fig = Figure(figsize=_map_size(ds, projection=projection))
    # The present-day coastline (first slice) frames the map.
    i0 = 0 if "slice" in ds.dims else None
    ax, fr = _axes(fig, 111, ds, i0, projection=projection)
    values = _layer(ds, variable, None)
    mappable = _raster(ax, fr, ds["lon"].values, ds["lat"].values, values.astype(float),
                       cmap=_CONTINUOUS["stability"][0], norm=Normalize(0.0, 1.0))
    handles = _decorate(ax, fr, ds, i0, "stability")
    ref = _layer(ds, refugium, None) if refugium is not None else None
    if ref is not None:
        _outline(ax, ds, ref.astype(bool), fr, colors="#D55E00", linewidths=1.6)
        nref = len(str(ds[refugium].attrs.get("slices", "")).split())
        handles.append(Line2D([], [], color="#D55E00", linewidth=1.6,
                              label=f"refugium (suitable in all {nref} slices)" if nref
                              else "refugium (suitable in every slice)"))
    if patches is not None and len(patches):
        from timeslice.grid import wrap_lon

        from matplotlib import patheffects

        step = float(np.median(np.diff(ds["lon"].values))) if ds.sizes["lon"] > 1 else 0.0
        halo = [patheffects.withStroke(linewidth=2, foreground="white")]
        for r in patches.head(5).itertuples(index=False):
            # beside the patch, not on it, so the outline stays visible
            ax.text(fr.x(wrap_lon(r.centroid_lon, west=fr.west)) + 1.5 * step, r.centroid_lat,
                    r.name, transform=fr.data, fontsize=7, fontweight="bold",
                    color="#D55E00", ha="left", va="center", zorder=8, path_effects=halo)
    fig.colorbar(mappable, ax=ax, shrink=0.8, pad=0.03, label=_CONTINUOUS["stability"][1])
    _legend(ax, handles, loc="upper right")
    window = str(ds[variable].attrs.get("slices", "")).split()
    n = len(window) or ds.sizes.get("slice", 0)
    ax.set_title(f"Climatic stability over {n} slices and refugia" if n else
                 "Climatic stability and refugia", fontsize=9)
    return _save(fig, Path(path), dpi=dpi)


def reach_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> Path:
    """Suitable versus reachable per slice, novel climate hatched.

    Needs ``suitable`` and the dispersal layer ``reachable`` (-1 not land, 0 not reached,
    1 suitable and reached). Classes: unsuitable; suitable but not reached under the movement
    assumption; suitable and reached (:data:`REACH_COLOURS`). Suitability, reachability and
    novelty stay separate: the hatching marks novel climate whatever the class.
    """
    _check(ds, "reach")
    movement = ds[_REACH_LAYER].attrs.get("movement_assumption")
    what = f" ({movement} movement)" if movement else ""
    return _panel(ds, "reach", _slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"Suitable and reachable{what}", projection=projection)


def most_dissimilar_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    columns: str | None = "model",
) -> Path:
    """The most dissimilar variable per slice (the predictor that sets MESS), novel climate
    hatched.

    Where MESS < 0 this is the predictor that lies outside the reference range: the variable
    to look at when deciding how far to trust the projection there. Classes are named by the
    layer's ``flag_meanings``; colours :data:`FLAG_COLOURS`. The panels form a grid with one
    column per value of `columns` (default the climate model).
    """
    _check(ds, "most_dissimilar")
    return _panel(ds, "most_dissimilar", _slice_indices(ds, slices), path, ncols=None,
                  dpi=dpi, suptitle="Most dissimilar variable (the predictor that sets MESS; "
                  "hatched: novel climate, MESS < 0)", projection=projection, columns=columns)


def _as_panels(ens: xr.Dataset, dim: str, names: Sequence[str],
               land: xr.DataArray | None) -> xr.Dataset:
    """Ensemble layers on `dim` as a pseudo-series on ``slice`` (the panels), with a land
    mask for the coastline: `land` when given, else where the first layer has a value."""
    out = ens[list(names)].rename({dim: "slice"})
    labels = [str(v) for v in ens[dim].values]
    out = out.assign_coords(slice=("slice", labels))
    if land is not None:
        out["land"] = land.astype(bool).reset_coords(drop=True)
    else:
        out["land"] = np.isfinite(out[names[0]].astype(float))
    return out


def _agreement_overlays(ax, ds: xr.Dataset, i, fr: MapFrame) -> list:
    """Majority outline and hatching where the models disagree (some, not all, suitable)."""
    from matplotlib.lines import Line2D

    handles: list = []
    a = _layer(ds, "agreement", i)
    split = np.where(np.isfinite(a), (a > 0) & (a < 1), False).astype(float)
    if np.any(split):
        ax.contourf(fr.x(ds["lon"].values), ds["lat"].values, split, levels=[0.5, 1.5],
                    colors="none", hatches=[_DISAGREE_HATCH], transform=fr.data, zorder=4)
        handles.append(Patch(facecolor="none", edgecolor="0.2", hatch=_DISAGREE_HATCH,
                             label="models disagree (some, not all, suitable)"))
    cons = _layer(ds, "consensus", i)
    if cons is not None and np.any(cons == 1):
        _outline(ax, ds, cons == 1, fr, colors="#D55E00", linewidths=1.2)
        handles.append(Line2D([], [], color="#D55E00", linewidth=1.2,
                              label="majority consensus: suitable in more than half"))
    return handles


def agreement_map(
    ensemble: xr.Dataset,
    path: str | os.PathLike,
    *,
    land: xr.DataArray | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> Path:
    """Model agreement per scenario and period: the share of climate models in which the cell
    is suitable (one colour per count of models), the majority consensus outlined, and
    hatching where the models disagree.

    Parameters
    ----------
    ensemble : xarray.Dataset
        From :func:`timeslice.series.ensemble.agreement` (``agreement``, ``consensus`` on
        ``group``, with ``scenario``, ``period`` and ``n_models``).
    path : path-like
        PNG file.
    land : xarray.DataArray, optional
        Land mask (lat, lon) for the coastline; default: where any model has land.

    Returns
    -------
    pathlib.Path
    """
    if not isinstance(ensemble, xr.Dataset) or "agreement" not in ensemble:
        raise DataError("agreement_map: `ensemble` must be the Dataset of "
                        "timeslice.series.ensemble.agreement (with `agreement`)")
    names = [v for v in ("agreement", "consensus") if v in ensemble]
    ds = _as_panels(ensemble, "group", names, land)
    idx = list(range(ds.sizes["slice"]))
    n = int(np.max(ensemble["n_models"].values)) if "n_models" in ensemble.coords else 0
    return _panel(ds, "agreement", idx, path, ncols=None, dpi=dpi, projection=projection,
                  columns="scenario" if "scenario" in ds.coords else None,
                  suptitle=f"Agreement of {n} climate models on suitable climate" if n
                  else "Agreement of climate models on suitable climate")


def dominant_source_map(
    ensemble: xr.Dataset,
    path: str | os.PathLike,
    *,
    land: xr.DataArray | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
) -> Path:
    """The dominant source of uncertainty per cell and period: the factor (or interaction)
    with the largest share of the suitability variance (``dominant`` of
    :func:`timeslice.series.ensemble.partition`), one panel per future period."""
    if not isinstance(ensemble, xr.Dataset) or "dominant" not in ensemble:
        raise DataError("dominant_source_map: `ensemble` has no `dominant` layer; it needs "
                        "the variance partitioning (two factors with two or more levels)")
    dim = [d for d in ensemble["dominant"].dims if d not in ("lat", "lon")]
    da = ensemble["dominant"] if dim else ensemble["dominant"].expand_dims(partition_period=1)
    dim = dim[0] if dim else "partition_period"
    ds = _as_panels(da.to_dataset(name="dominant"), dim, ["dominant"], land)
    ds["dominant"].attrs = dict(ensemble["dominant"].attrs)
    idx = list(range(ds.sizes["slice"]))
    return _panel(ds, "dominant", idx, path, ncols=None, dpi=dpi, projection=projection,
                  suptitle="Dominant source of uncertainty in suitability (largest variance "
                  "share)")
