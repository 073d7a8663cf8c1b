"""Maps of the series, fully offline.

Every map draws the slice's own coastline as the 0.5 contour of its ``land`` mask (nothing is
downloaded: no cartopy coastline or Natural Earth feature is ever requested), a labelled
graticule, a scale bar, and a title naming slice, model and scenario. Maps are centred on the
grid's own longitudes, so a region across the 180° meridian (lon 160 ... 200) is drawn as
one piece. Three projections (:data:`PROJECTIONS`): "lonlat" (plain latitude-longitude,
centred on the region, drawn on plain matplotlib axes), "equal_area" (Lambert azimuthal
equal-area centred on the region) and "polar" (Lambert azimuthal equal-area centred on the
nearer pole), both through cartopy; the last two show areas true at every latitude, which
high-latitude studies need. Colours: :mod:`timeslice.report.mapdraw`. Panels of several slices
form a grid with one row per slice or scenario and period and one column per climate model,
one colour bar per row (:mod:`timeslice.report.maplayout`). The format of a figure (PNG, SVG,
PDF) follows its file's suffix (:func:`timeslice.report.figures.save`).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr
from matplotlib.colors import Normalize
from matplotlib.figure import Figure

from timeslice import layers
from timeslice.errors import DataError
from timeslice.grid import grid_edges
from timeslice.report._layers import slice_labels, slice_title
from timeslice.report._output import file_stem
from timeslice.report.figures import figure_file, save
from timeslice.report.mapdraw import (
    CHANGE_COLOURS,
    CONTINUOUS,
    EXDET_COLOURS,
    FIXED_RANGES,
    FLAG_COLOURS,
    REACH_COLOURS,
    REACH_LAYER,
    categorical_style,
    check_layer,
    decorate,
    extend_of,
    flag_colours,
    is_categorical,
    layer_values,
    norm_for,
    outline,
)
from timeslice.report.mapframe import (
    PROJECTIONS,
    MapFrame,
    Projection,
    graticule,
    map_aspect,
    map_axes,
    map_frame,
    nice_length,
    scale_bar,
    set_extent,
)
from timeslice.report.maplayout import panel_layout, single_layout, wrap
from timeslice.report.panelgrid import panel_places, slice_indices

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

# the short names tests and older callers use
_axes = map_axes
_scale_bar = scale_bar
_nice_length = nice_length
_layer = layer_values
_norm = norm_for
_flag_colours = flag_colours
_graticule = graticule
_set_extent = set_extent
_CONTINUOUS = CONTINUOUS

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
    tr = fr.tr(ax)
    if regular and (fr.plain or values.size > _MESH_MAX_CELLS):
        extent = [x[0] - dlon[0] / 2, x[-1] + dlon[0] / 2,
                  lat[0] - dlat[0] / 2, lat[-1] + dlat[0] / 2]
        # on a projected map cartopy resamples the image onto the map (nearest cell, so
        # categories stay categories); exact cell polygons cost minutes on millions of cells
        kw = {} if fr.plain else {"regrid_shape": 1200}
        im = ax.imshow(values, origin="lower", extent=extent, transform=tr, cmap=cmap,
                       norm=norm, interpolation="nearest", zorder=2, **kw)
        if fr.plain:
            set_extent(ax, fr)  # imshow resets the limits to the image
        return im
    if lon.size > 1 and lat.size > 1:
        da = xr.DataArray(values, dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
        lat_b, lon_b = grid_edges(da)
        xe = fr.x(np.append(lon_b[:, 0], lon_b[-1, 1]))
        ye = np.append(lat_b[:, 0], lat_b[-1, 1])
        return ax.pcolormesh(xe, ye, values, cmap=cmap, norm=norm, transform=tr,
                             shading="flat", zorder=2)
    return ax.pcolormesh(x, lat, values, cmap=cmap, norm=norm, transform=tr,
                         shading="nearest", zorder=2)


def _draw(ax, fr: MapFrame, ds, name: str, i: int | None, norm=None):
    """Draw layer `name` for slice `i`; return the mappable (None for none)."""
    values = layer_values(ds, name, i)
    lon, lat = ds["lon"].values, ds["lat"].values
    if is_categorical(name, ds):
        cmap, cnorm, _ = categorical_style(name, ds)
        v = np.where(values >= 0, values, np.nan).astype(float)
        return _raster(ax, fr, lon, lat, v, cmap=cmap, norm=cnorm)
    cmap, _ = CONTINUOUS.get(name, ("cividis", name))
    v = values.astype(float)
    return _raster(ax, fr, lon, lat, v, cmap=cmap, norm=norm or norm_for(name, v, ds))


def _bar_label(name: str) -> str:
    entry = layers.LAYERS.get(name)
    return CONTINUOUS.get(name, ("", getattr(entry, "long_name", name)))[1]


def _legend(fig_or_ax, handles, **kw) -> None:
    if handles:
        fig_or_ax.legend(handles=handles, fontsize=7, framealpha=0.85, **kw)


def _single_figure(ds: xr.Dataset, i: int | None, *, projection: Projection, bar: bool):
    """A figure with one map axes, laid out once: (fig, ax, frame, layout)."""
    fr = map_frame(ds, projection)
    lay = single_layout(map_aspect(fr), bar=bar)
    fig = Figure(figsize=(lay.width, lay.height))
    ax, fr = map_axes(fig, lay.panel(0, 0), ds, i, frame=fr)
    return fig, ax, fr, lay


def _single(ds: xr.Dataset, name: str, i: int | None, path: Path, *, title: str,
            dpi: int, projection: Projection = "lonlat") -> Path:
    categorical = is_categorical(name, ds)
    fig, ax, fr, lay = _single_figure(ds, i, projection=projection, bar=not categorical)
    mappable = _draw(ax, fr, ds, name, i)
    handles = decorate(ax, fr, ds, i, name)
    if categorical:
        handles = categorical_style(name, ds)[2] + handles
    else:
        cax = fig.add_axes(lay.colour_bar(0))
        fig.colorbar(mappable, cax=cax, extend=extend_of(name),
                     label=wrap(_bar_label(name), 0.84 * lay.panel_h))
    _legend(ax, handles, loc="upper right")
    ax.set_title(wrap(title, lay.panel_w, fontsize=9), fontsize=9)
    return save(fig, path, dpi=dpi)


def _panel_norm(ds: xr.Dataset, name: str, idx: list[int]):
    if is_categorical(name, ds):
        return None
    # One colour scale for all panels, from the values of every panel drawn.
    allv = np.concatenate([layer_values(ds, name, i).astype(float).ravel() for i in idx])
    return norm_for(name, allv, ds)


def _row_bars(fig, lay, name: str, ds: xr.Dataset, row_map: dict[int, object],
              row_width: dict[int, int]) -> None:
    """One colour bar right of every row (the same scale in every row)."""
    label = wrap(_bar_label(name), 0.84 * lay.panel_h)
    for r, mappable in row_map.items():
        cax = fig.add_axes(lay.colour_bar(r, row_width[r]))
        bar = fig.colorbar(mappable, cax=cax, extend=extend_of(name))
        bar.set_label(label, fontsize=6)
        bar.ax.tick_params(labelsize=6)
        if name == "agreement" and "n_models" in ds.coords:
            m = max(1, int(np.max(ds["n_models"].values)))
            bar.set_ticks(np.arange(m + 1) / m, labels=[f"{k} of {m}" for k in range(m + 1)])


def _panel(ds: xr.Dataset, name: str, idx: list[int], path: str | os.PathLike, *,
           ncols: int | None, dpi: int, suptitle: str,
           projection: Projection = "lonlat", columns: str | None = None) -> Path:
    """A grid of map panels of layer `name`, laid out once (see :mod:`maplayout`)."""
    if not idx:
        raise DataError(f"maps: no slices to draw for {name!r}")
    places, rows, titles = panel_places(ds, idx, columns, ncols)
    nrows = max(r for r, _ in places.values()) + 1
    ncols = max(c for _, c in places.values()) + 1
    fr = map_frame(ds, projection)
    categorical = is_categorical(name, ds)
    norm = _panel_norm(ds, name, idx)
    lay = panel_layout(nrows, ncols, map_aspect(fr), bar=not categorical, legend_rows=0,
                       row_labels=rows is not None)
    chars = max(len(wrap(t, lay.panel_w).splitlines()) for t in titles.values())
    lay = panel_layout(nrows, ncols, map_aspect(fr), bar=not categorical, legend_rows=0,
                       row_labels=rows is not None, title_lines=min(chars, 3))
    fig = Figure(figsize=(lay.width, lay.height))
    handles: list = []
    axes: dict[int, object] = {}
    row_map: dict[int, object] = {}
    taken = set(places.values())
    for k, i in enumerate(idx):
        r, c = places[i]
        ax, _ = map_axes(fig, lay.panel(r, c), ds, i, frame=fr, left=(c == 0),
                         bottom=(r + 1, c) not in taken)
        axes[i] = ax
        row_map[r] = _draw(ax, fr, ds, name, i, norm=norm)
        h_ = decorate(ax, fr, ds, i, name, scale_bar=(k == 0))
        if len(h_) > len(handles):
            handles = h_
        ax.set_title(wrap(titles[i], lay.panel_w), fontsize=7, pad=2)
    if categorical:
        handles = categorical_style(name, ds)[2] + handles
    # now that the legend is known: its band under the panels, every part in place
    per_row = max(1, min(len(handles), int((lay.width - 0.3) / 2.4))) if handles else 1
    lay = panel_layout(nrows, ncols, map_aspect(fr), bar=not categorical,
                       legend_rows=math.ceil(len(handles) / per_row) if handles else 0,
                       row_labels=rows is not None, title_lines=min(chars, 3))
    fig.set_size_inches(lay.width, lay.height)
    for i, ax in axes.items():
        ax.set_position(lay.panel(*places[i]))
    if not categorical:
        width = {r: 1 + max(c for rr, c in places.values() if rr == r) for r in row_map}
        _row_bars(fig, lay, name, ds, row_map, width)
    if rows is not None:
        for r, text in enumerate(rows):
            x0, y0, _, h = lay.panel(r, 0)
            fig.text(lay.row_label_x(), y0 + h / 2, wrap(text, lay.panel_h), rotation=90,
                     ha="center", va="center", fontsize=7, fontweight="bold")
    if handles:
        fig.legend(handles=handles, fontsize=7, framealpha=0.85, loc="lower center",
                   bbox_to_anchor=(0.5, lay.legend_y()), ncols=per_row)
    fig.suptitle(wrap(suptitle, lay.width - 0.4, fontsize=10), fontsize=10, y=lay.title_y(),
                 va="top")
    return save(fig, Path(path), dpi=dpi)


def slice_maps(
    ds: xr.Dataset,
    out_dir: str | os.PathLike,
    *,
    variable: str = "suitability",
    slices: Sequence[str] | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    figure_format: str = "png",
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
    figure_format : {"png", "svg", "pdf"}, default "png"
        File format (:data:`timeslice.report.figures.FIGURE_FORMATS`).

    Returns
    -------
    list of pathlib.Path
        The PNG files, in slice order.
    """
    check_layer(ds, variable)
    out = Path(out_dir)
    paths = []
    for i in slice_indices(ds, slices):
        label = slice_labels(ds)[i]
        path = figure_file(out / f"{file_stem(variable)}_{file_stem(label)}.png", figure_format)
        title = f"{CONTINUOUS.get(variable, (None, variable))[1].split(' (')[0]} — " \
            f"{slice_title(ds, i)}"
        paths.append(_single(ds, variable, i, path, title=title, dpi=dpi,
                             projection=projection))
    return paths


def series_panel(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    variable: str = "suitability",
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    columns: str | None = "model",
) -> Path:
    """Multi-panel map of `variable` across the slices with one shared colour scale.

    Parameters
    ----------
    ds : xarray.Dataset
        The series.
    path : path-like
        Figure file (PNG, SVG or PDF by its suffix).
    variable : str
        Layer to draw.
    slices : sequence of str, optional
        Slices to draw (default all).
    ncols : int, optional
        Columns without a grid by `columns` (default 3).
    dpi : int
        Resolution.
    projection : {"lonlat", "equal_area", "polar"}
        See :data:`PROJECTIONS`.
    columns : str or None, default "model"
        Slice coordinate whose values are the columns of the panel grid (one row per scenario
        and period); None, or a series without it: the slices in rows of three.

    Returns
    -------
    pathlib.Path
        The figure file.
    """
    check_layer(ds, variable)
    label = CONTINUOUS.get(variable, (None, variable))[1]
    return _panel(ds, variable, slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"{label} across the series", projection=projection,
                  columns=columns)


def change_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    columns: str | None = "model",
) -> Path:
    """Gain / loss / stable / absent against the reference slice, one panel per slice.

    The reference slice (the first, or the one whose ``change`` has no gain and no loss) is
    left out by default. Colours: :data:`CHANGE_COLOURS`.

    Parameters
    ----------
    ds : xarray.Dataset
        The series with ``change``.
    path : path-like
        Figure file (PNG, SVG or PDF by its suffix).
    slices : sequence of str, optional
        Slices to draw.
    ncols : int, optional
        Columns without a grid by `columns`.
    dpi : int
        Resolution.
    projection : {"lonlat", "equal_area", "polar"}
        See :data:`PROJECTIONS`.
    columns : str or None, default "model"
        Slice coordinate whose values are the columns of the panel grid (one row per scenario
        and period); None, or a series without it: the slices in rows of three.

    Returns
    -------
    pathlib.Path
    """
    check_layer(ds, "change")
    idx = slice_indices(ds, slices)
    if slices is None and len(idx) > 1:
        idx = idx[1:]
    return _panel(ds, "change", idx, path, ncols=ncols, dpi=dpi,
                  suptitle="Range change against the reference slice", projection=projection,
                  columns=columns)


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

    Parameters
    ----------
    ds : xarray.Dataset
        The series with the novelty layers.
    path : str or os.PathLike
        The figure file.
    variable : {'mess', 'nt1', 'nt2', 'exdet'}
        Layer drawn (``exdet``: NT1 and NT2 as classes).
    slices : sequence of str, optional
        Slices to draw (default all).
    ncols : int, optional
        Panels per row when no `columns` coordinate is used.
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection.
    columns : str or None
        Coordinate laid out as columns (e.g. ``"model"``).
    """
    if variable not in ("mess", "nt1", "nt2", "exdet"):
        raise DataError("novelty_map: `variable` must be 'mess', 'nt1', 'nt2' or 'exdet', got "
                        f"{variable!r}")
    check_layer(ds, variable)
    title = ("ExDet classes (Mesgaran et al. 2014)" if variable == "exdet"
             else CONTINUOUS[variable][1])
    return _panel(ds, variable, slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
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
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection (``"lonlat"``, equal-area or polar).
    """
    from matplotlib.lines import Line2D

    check_layer(ds, variable)
    if refugium is not None:
        check_layer(ds, refugium)
    # The present-day coastline (first slice) frames the map.
    i0 = 0 if "slice" in ds.dims else None
    fig, ax, fr, lay = _single_figure(ds, i0, projection=projection, bar=True)
    values = layer_values(ds, variable, None)
    mappable = _raster(ax, fr, ds["lon"].values, ds["lat"].values, values.astype(float),
                       cmap=CONTINUOUS["stability"][0], norm=Normalize(0.0, 1.0))
    handles = decorate(ax, fr, ds, i0, "stability")
    ref = layer_values(ds, refugium, None) if refugium is not None else None
    if ref is not None:
        outline(ax, ds, ref.astype(bool), fr, colors="#D55E00", linewidths=1.6)
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
                    r.name, transform=fr.tr(ax), fontsize=7, fontweight="bold",
                    color="#D55E00", ha="left", va="center", zorder=8, path_effects=halo)
    fig.colorbar(mappable, cax=fig.add_axes(lay.colour_bar(0)),
                 label=wrap(CONTINUOUS["stability"][1], 0.84 * lay.panel_h))
    _legend(ax, handles, loc="upper right")
    window = str(ds[variable].attrs.get("slices", "")).split()
    n = len(window) or ds.sizes.get("slice", 0)
    ax.set_title(f"Climatic stability over {n} slices and refugia" if n else
                 "Climatic stability and refugia", fontsize=9)
    return save(fig, Path(path), dpi=dpi)


def reach_map(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    slices: Sequence[str] | None = None,
    ncols: int | None = None,
    dpi: int = 110,
    projection: Projection = "lonlat",
    columns: str | None = "model",
) -> Path:
    """Suitable versus reachable per slice, novel climate hatched.

    Needs ``suitable`` and the dispersal layer ``reachable`` (-1 not land, 0 not reached,
    1 suitable and reached). Classes: unsuitable; suitable but not reached under the movement
    assumption; suitable and reached (:data:`REACH_COLOURS`). Suitability, reachability and
    novelty stay separate: the hatching marks novel climate whatever the class.

    Parameters
    ----------
    ds : xarray.Dataset
        The series with ``suitable`` and ``reachable``.
    path : str or os.PathLike
        The figure file.
    slices : sequence of str, optional
        Slices to draw (default all).
    ncols : int, optional
        Panels per row when no `columns` coordinate is used.
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection.
    columns : str or None
        Coordinate laid out as columns (default ``"model"``).
    """
    check_layer(ds, "reach")
    movement = ds[REACH_LAYER].attrs.get("movement_assumption")
    what = f" ({movement} movement)" if movement else ""
    return _panel(ds, "reach", slice_indices(ds, slices), path, ncols=ncols, dpi=dpi,
                  suptitle=f"Suitable and reachable{what}", projection=projection,
                  columns=columns)


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

    Parameters
    ----------
    ds : xarray.Dataset
        The series with ``most_dissimilar`` and ``mess``.
    path : str or os.PathLike
        The figure file.
    slices : sequence of str, optional
        Slices to draw (default all).
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection.
    columns : str or None
        Coordinate laid out as columns (default ``"model"``).
    """
    check_layer(ds, "most_dissimilar")
    return _panel(ds, "most_dissimilar", slice_indices(ds, slices), path, ncols=None,
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
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection (``"lonlat"``, equal-area or polar).

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
    :func:`timeslice.series.ensemble.partition`), one panel per future period.

    Parameters
    ----------
    ensemble : xarray.Dataset
        ``ensemble.nc`` with the ``dominant`` layer.
    path : str or os.PathLike
        The figure file.
    land : xarray.DataArray, optional
        Land mask for the coastline.
    dpi : int
        Resolution, dots per inch.
    projection : str
        Map projection.
    """
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
