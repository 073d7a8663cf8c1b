"""Maps of the series with cartopy, fully offline.

Every map draws the slice's own coastline as the 0.5 contour of its ``land`` mask (nothing is
downloaded: no cartopy coastline or Natural Earth feature is ever requested), a labelled
graticule, a scale bar, and a title naming slice, model and scenario. Continuous layers use
perceptually uniform colour maps that stay readable with colour-vision deficiencies
(matplotlib "viridis" and "cividis"; ColorBrewer "PuOr" for the diverging MESS scale);
gain/loss/stable use the project's categorical palette :data:`CHANGE_COLOURS`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr
from matplotlib.colors import BoundaryNorm, ListedColormap, Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from timeslice.errors import DataError
from timeslice.grid import grid_edges
from timeslice.report._output import output_path
from timeslice.report._layers import LAYERS, slice_labels, slice_title

__all__ = [
    "CHANGE_COLOURS",
    "EXDET_COLOURS",
    "FIXED_RANGES",
    "REACH_COLOURS",
    "change_map",
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

_CONTINUOUS = {
    "suitability": ("viridis", "climatic suitability (0-1)"),
    "stability": ("viridis", "fraction of slices suitable"),
    "mess": ("PuOr", "MESS (< 0: novel climate)"),
    "nt1": ("cividis", "NT1 (< 0: outside the reference range)"),
    "nt2": ("cividis", "NT2 (> 1: novel combination)"),
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


def _nice_length(km: float) -> float:
    """Largest 1-2-5 x 10^k value not above `km`."""
    if km <= 0:
        return 1.0
    exp = math.floor(math.log10(km))
    for m in (5, 2, 1):
        if m * 10**exp <= km:
            return float(m * 10**exp)
    return float(10**exp)


def _scale_bar(ax, lon: np.ndarray, lat: np.ndarray, crs) -> None:
    """Scale bar about a fifth of the map width, length exact at the bar's latitude.

    On the sphere, one degree of longitude at latitude phi spans (pi/180) R cos(phi) km
    (R = authalic radius), so the bar is exact along its own parallel only.
    """
    from timeslice.grid import AUTHALIC_RADIUS_KM

    lon0, lon1 = float(lon.min()), float(lon.max())
    lat0, lat1 = float(lat.min()), float(lat.max())
    y = lat0 + 0.07 * (lat1 - lat0)
    x = lon0 + 0.05 * (lon1 - lon0)
    km_per_deg = math.pi / 180.0 * AUTHALIC_RADIUS_KM * math.cos(math.radians(y))
    length = _nice_length(0.2 * (lon1 - lon0) * km_per_deg)
    dlon = length / km_per_deg
    ax.plot([x, x + dlon], [y, y], color="black", linewidth=3, transform=crs,
            solid_capstyle="butt", zorder=6)
    ax.plot([x, x + dlon], [y, y], color="white", linewidth=1, transform=crs,
            solid_capstyle="butt", zorder=7)
    ax.text(x + dlon / 2, y + 0.02 * (lat1 - lat0), f"{length:g} km", ha="center",
            va="bottom", fontsize=7, transform=crs, zorder=7,
            bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.7, "pad": 1})


def _graticule(ax, crs, west: float, east: float, south: float, north: float, *,
               labels: bool = True) -> None:
    """Labelled graticule from plain axis ticks.

    On PlateCarree the graticule is straight lines, so axis ticks with cartopy's degree
    formatters give the same picture as cartopy's gridliner at a fraction of its drawing cost
    (the gridliner was ~70 % of a map's rendering time in profiling).
    """
    from cartopy.mpl.ticker import LatitudeFormatter, LongitudeFormatter
    from matplotlib.ticker import MaxNLocator

    loc = MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10])
    xt = [t for t in loc.tick_values(west, east) if west <= t <= east]
    yt = [t for t in loc.tick_values(south, north) if south <= t <= north]
    ax.set_xticks(xt, crs=crs)
    ax.set_yticks(yt, crs=crs)
    ax.xaxis.set_major_formatter(LongitudeFormatter())
    ax.yaxis.set_major_formatter(LatitudeFormatter())
    ax.tick_params(labelsize=7, length=2, labelbottom=labels, labelleft=labels)
    for x in xt:
        ax.plot([x, x], [south, north], color="0.5", linewidth=0.4, linestyle=":",
                alpha=0.6, transform=crs, zorder=3)
    for y in yt:
        ax.plot([west, east], [y, y], color="0.5", linewidth=0.4, linestyle=":",
                alpha=0.6, transform=crs, zorder=3)


def _axes(fig: Figure, spec, ds: xr.Dataset, i: int | None, *, labels: bool = True):
    import cartopy.crs as ccrs

    crs = ccrs.PlateCarree()
    ax = fig.add_subplot(spec, projection=crs)
    lat_b, lon_b = grid_edges(ds)
    ax.set_extent([lon_b[0, 0], lon_b[-1, 1], lat_b[0, 0], lat_b[-1, 1]], crs=crs)
    ax.set_facecolor("white")
    _graticule(ax, crs, lon_b[0, 0], lon_b[-1, 1], lat_b[0, 0], lat_b[-1, 1], labels=labels)
    return ax, crs


def _coastline(ax, ds: xr.Dataset, i: int | None, crs) -> str | None:
    """Draw the slice's coastline; return the legend label (None when nothing was drawn).

    With an ``ice`` layer the coastline is the edge of land-or-ice and the ice sheet is
    shaded; without one the land mask's edge runs along coasts and ice margins alike.
    """
    land = _layer(ds, "land", i)
    if land is None:
        return None
    land = land.astype(bool)
    ice = _layer(ds, "ice", i)
    lon, lat = ds["lon"].values, ds["lat"].values
    label = "coastline of the slice"
    if ice is not None and np.any(ice.astype(bool)):
        ice = ice.astype(bool)
        ax.contourf(lon, lat, ice.astype(float), levels=[0.5, 1.5], colors=[_ICE_COLOUR],
                    transform=crs, zorder=1)
        land = land | ice
    elif ice is None:
        label = "land edge (coast or ice margin)"
    if np.any(land) and not np.all(land):
        ax.contour(lon, lat, land.astype(float), levels=[0.5], colors="black",
                   linewidths=0.8, transform=crs, zorder=5)
        return label
    return None


def _outline(ax, ds, mask: np.ndarray | None, crs, **kw) -> None:
    if mask is None:
        return
    m = np.where(np.isfinite(mask.astype(float)), mask.astype(float), 0.0)
    if np.any(m > 0.5) and not np.all(m > 0.5):
        ax.contour(ds["lon"].values, ds["lat"].values, m, levels=[0.5], transform=crs,
                   zorder=5, **kw)


def _hatch_novel(ax, ds, i, crs) -> bool:
    mess = _layer(ds, "mess", i)
    if mess is None:
        return False
    novel = np.where(np.isfinite(mess), mess < 0, False).astype(float)
    if not np.any(novel):
        return False
    ax.contourf(ds["lon"].values, ds["lat"].values, novel, levels=[0.5, 1.5], colors="none",
                hatches=[_NOVEL_HATCH], transform=crs, zorder=4)
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


def _norm(name: str, values: np.ndarray):
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


def _categorical_style(name: str = "change"):
    colours = _CATEGORICAL[name]
    codes = sorted(colours)
    cmap = ListedColormap([colours[c][1] for c in codes])
    norm = BoundaryNorm([c - 0.5 for c in codes] + [codes[-1] + 0.5], cmap.N)
    handles = [Patch(facecolor=colours[c][1], edgecolor="0.3", label=colours[c][0])
               for c in codes]
    return cmap, norm, handles


def _raster(ax, crs, lon: np.ndarray, lat: np.ndarray, values: np.ndarray, *, cmap, norm):
    """Draw cell values: an image for regular grids (exact on PlateCarree, ~5x faster than a
    mesh on a 2000 x 1500 grid), a mesh otherwise. NaN cells stay transparent."""
    dlon, dlat = np.diff(lon), np.diff(lat)
    regular = (lon.size > 1 and lat.size > 1 and np.allclose(dlon, dlon[0], rtol=1e-6)
               and np.allclose(dlat, dlat[0], rtol=1e-6) and dlon[0] > 0 and dlat[0] > 0)
    if regular:
        extent = [lon[0] - dlon[0] / 2, lon[-1] + dlon[0] / 2,
                  lat[0] - dlat[0] / 2, lat[-1] + dlat[0] / 2]
        return ax.imshow(values, origin="lower", extent=extent, transform=crs, cmap=cmap,
                         norm=norm, interpolation="nearest", zorder=2)
    return ax.pcolormesh(lon, lat, values, cmap=cmap, norm=norm, transform=crs,
                         shading="nearest", zorder=2)


def _draw(ax, crs, ds, name: str, i: int | None, norm=None):
    """Draw layer `name` for slice `i`; return the mappable (None for none)."""
    values = _layer(ds, name, i)
    lon, lat = ds["lon"].values, ds["lat"].values
    if name in _CATEGORICAL:
        cmap, cnorm, _ = _categorical_style(name)
        v = np.where(values >= 0, values, np.nan).astype(float)
        return _raster(ax, crs, lon, lat, v, cmap=cmap, norm=cnorm)
    cmap, _ = _CONTINUOUS.get(name, ("cividis", name))
    v = values.astype(float)
    return _raster(ax, crs, lon, lat, v, cmap=cmap, norm=norm or _norm(name, v))


def _decorate(ax, crs, ds, i, name: str, *, scale_bar: bool = True) -> list:
    """Overlays shared by every map; returns legend handles."""
    from matplotlib.lines import Line2D

    handles: list = []
    coast = _coastline(ax, ds, i, crs)
    if coast:
        handles.append(Line2D([], [], color="black", linewidth=0.8, label=coast))
    ice = _layer(ds, "ice", i)
    if ice is not None and np.any(ice.astype(bool)):
        handles.append(Patch(facecolor=_ICE_COLOUR, edgecolor="0.5", label="ice sheet"))
    if name in ("suitability", "mess", "nt1", "nt2", "change", "reach"):
        if _hatch_novel(ax, ds, i, crs):
            handles.append(Patch(facecolor="none", edgecolor="0.2", hatch=_NOVEL_HATCH,
                                 label="novel climate (MESS < 0)"))
    if name == "suitability":
        suitable = _layer(ds, "suitable", i)
        if suitable is not None:
            _outline(ax, ds, suitable == 1, crs, colors="white", linewidths=1.2)
            _outline(ax, ds, suitable == 1, crs, colors="black", linewidths=0.5)
            handles.append(Line2D([], [], color="black", linewidth=0.6,
                                  label="suitable (above threshold)"))
    calib = _layer(ds, "calibration_area", i)
    if calib is not None and name != "stability":
        _outline(ax, ds, calib.astype(bool), crs, colors="#CC79A7", linewidths=1.2,
                 linestyles="dashed")
        handles.append(Line2D([], [], color="#CC79A7", linewidth=1.2, linestyle="--",
                              label="calibration area"))
    if scale_bar:
        _scale_bar(ax, ds["lon"].values, ds["lat"].values, crs)
    return handles


def _save(fig: Figure, path: Path, *, dpi: int) -> Path:
    with output_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi, bbox_inches="tight")
    return path


def _map_size(ds: xr.Dataset, width: float = 6.0) -> tuple[float, float]:
    lon, lat = ds["lon"].values, ds["lat"].values
    aspect = (float(np.ptp(lat)) + 1e-9) / (float(np.ptp(lon)) + 1e-9)
    return width, max(2.5, min(9.0, width * aspect + 1.2))


def _legend(fig_or_ax, handles, **kw) -> None:
    if handles:
        fig_or_ax.legend(handles=handles, fontsize=7, framealpha=0.85, **kw)


def _single(ds: xr.Dataset, name: str, i: int | None, path: Path, *, title: str,
            dpi: int) -> Path:
    fig = Figure(figsize=_map_size(ds))
    ax, crs = _axes(fig, 111, ds, i)
    mappable = _draw(ax, crs, ds, name, i)
    handles = _decorate(ax, crs, ds, i, name)
    if name in _CATEGORICAL:
        handles = _categorical_style(name)[2] + handles
    else:
        fig.colorbar(mappable, ax=ax, shrink=0.8, pad=0.03, extend=_extend(name),
                     label=_CONTINUOUS.get(name, ("", LAYERS.get(name, {}).get("long_name",
                                                                          name)))[1])
    _legend(ax, handles, loc="upper right")
    ax.set_title(title, fontsize=9)
    return _save(fig, path, dpi=dpi)


def _safe(text: str) -> str:
    import re

    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(text)).strip("_") or "unnamed"


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
        paths.append(_single(ds, variable, i, path, title=title, dpi=dpi))
    return paths


def _panel(ds: xr.Dataset, name: str, idx: list[int], path: str | os.PathLike, *,
           ncols: int | None, dpi: int, suptitle: str) -> Path:
    if not idx:
        raise DataError(f"maps: no slices to draw for {name!r}")
    n = len(idx)
    ncols = ncols or min(n, 3)
    nrows = math.ceil(n / ncols)
    w, h = _map_size(ds, width=3.4)
    fig = Figure(figsize=(w * ncols + 0.8, (h - 0.6) * nrows + 0.8), layout="constrained")
    gs = fig.add_gridspec(nrows, ncols)
    if name in _CATEGORICAL:
        norm = None
    else:
        # One colour scale for all panels, from the values of every panel drawn.
        allv = np.concatenate([_layer(ds, name, i).astype(float).ravel() for i in idx])
        norm = _norm(name, allv)
    handles: list = []
    mappable = None
    for k, i in enumerate(idx):
        ax, crs = _axes(fig, gs[k // ncols, k % ncols], ds, i,
                        labels=True)
        mappable = _draw(ax, crs, ds, name, i, norm=norm)
        h_ = _decorate(ax, crs, ds, i, name, scale_bar=(k == 0))
        if len(h_) > len(handles):
            handles = h_
        ax.set_title(slice_title(ds, i), fontsize=8)
    if name in _CATEGORICAL:
        handles = _categorical_style(name)[2] + handles
    else:
        fig.colorbar(mappable, ax=fig.axes, shrink=0.6, extend=_extend(name),
                     label=_CONTINUOUS.get(name, ("", name))[1])
    _legend(fig, handles, loc="outside lower center", ncols=min(4, len(handles)))
    fig.suptitle(suptitle, fontsize=10)
    return _save(fig, Path(path), dpi=dpi)


def series_panel(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: str = "suitability",
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
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
                  suptitle=f"{label} across the series")


def change_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
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
                  suptitle="Range change against the reference slice")


def novelty_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: Literal["mess", "nt1", "nt2", "exdet"] = "mess",
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
) -> Path:
    """Novel climate across the slices, one panel per slice.

    `variable` is "mess" (default; MESS < 0 hatched), "nt1", "nt2", or "exdet": the ExDet
    classes analog / novel combination (NT2 > 1) / outside a univariate range (NT1 < 0), in
    the colours of :data:`EXDET_COLOURS`.
    """
    if variable not in ("mess", "nt1", "nt2", "exdet"):
        raise DataError("novelty_map: `variable` must be 'mess', 'nt1', 'nt2' or 'exdet', got "
                        f"{variable!r}")
    _check(ds, variable)
    title = ("ExDet classes (Mesgaran et al. 2014)" if variable == "exdet"
             else _CONTINUOUS[variable][1])
    return _panel(ds, variable, _slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"Climate novelty: {title}")


def stability_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: str = "stability",
    refugium: str | None = "refugium",
    dpi: int = 110,
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
    """
    from matplotlib.lines import Line2D

    _check(ds, variable)
    if refugium is not None:
        _check(ds, refugium)
    fig = Figure(figsize=_map_size(ds))
    # The present-day coastline (first slice) frames the map.
    i0 = 0 if "slice" in ds.dims else None
    ax, crs = _axes(fig, 111, ds, i0)
    values = _layer(ds, variable, None)
    mappable = _raster(ax, crs, ds["lon"].values, ds["lat"].values, values.astype(float),
                       cmap=_CONTINUOUS["stability"][0], norm=Normalize(0.0, 1.0))
    handles = _decorate(ax, crs, ds, i0, "stability")
    ref = _layer(ds, refugium, None) if refugium is not None else None
    if ref is not None:
        _outline(ax, ds, ref.astype(bool), crs, colors="#D55E00", linewidths=1.6)
        nref = len(str(ds[refugium].attrs.get("slices", "")).split())
        handles.append(Line2D([], [], color="#D55E00", linewidth=1.6,
                              label=f"refugium (suitable in all {nref} slices)" if nref
                              else "refugium (suitable in every slice)"))
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
                  suptitle=f"Suitable and reachable{what}")
