"""What a map shows: layer values, colours and norms, coastline, outlines, hatching, overlays.

Continuous layers use perceptually uniform colour maps that stay readable with colour-vision
deficiencies (matplotlib "viridis" and "cividis"; ColorBrewer "PuOr" for the diverging MESS
scale), read from the layer table; gain/loss/stable use the project's categorical palette
:data:`CHANGE_COLOURS`. Every function draws on axes made by
:func:`timeslice.report.mapframe.map_axes` through the frame's own transform, so the same code
draws on plain lon-lat axes and on projected GeoAxes.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.colors import BoundaryNorm, ListedColormap, Normalize, TwoSlopeNorm
from matplotlib.patches import Patch

from timeslice.errors import DataError
from timeslice.report._layers import COLOUR_MAPS, flag_pairs
from timeslice.report.mapframe import MapFrame
from timeslice.report.mapframe import scale_bar as draw_scale_bar

__all__ = [
    "CATEGORICAL",
    "CHANGE_COLOURS",
    "CONTINUOUS",
    "EXDET_COLOURS",
    "FIXED_RANGES",
    "FLAG_COLOURS",
    "REACH_COLOURS",
    "agreement_overlays",
    "categorical_style",
    "check_layer",
    "coastline",
    "decorate",
    "extend_of",
    "flag_colours",
    "hatch_novel",
    "is_categorical",
    "isoline",
    "layer_values",
    "norm_for",
    "outline",
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
CATEGORICAL = {"change": CHANGE_COLOURS, "exdet": EXDET_COLOURS, "reach": REACH_COLOURS}
#: Colours of categorical layers whose classes are named by their CF flags (the most
#: dissimilar variable, the dominant source of uncertainty), in flag order: the Okabe & Ito
#: (2008) set again (from memory), grey last; more classes than colours repeat them.
FLAG_COLOURS = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
                "#CC79A7", "#999999")
#: Layers drawn as classes named by their own flag_values / flag_meanings.
FLAG_LAYERS = ("most_dissimilar", "dominant")
DISAGREE_HATCH = "...."

#: (colour map, colour-bar label) of the continuous layers, from the layer table.
CONTINUOUS = COLOUR_MAPS
NOVEL_HATCH = "////"
REACH_LAYER = "reachable"
ICE_COLOUR = "#D6EAF8"


def check_layer(ds: xr.Dataset, variable: str) -> None:
    """Refuse, in one line, a dataset that lacks the layers a map needs.

    Parameters
    ----------
    ds : xarray.Dataset
        The data to draw.
    variable : str
        The layer (or ``"reach"``/``"exdet"`` for the combined maps).
    """
    if not isinstance(ds, xr.Dataset):
        raise DataError(f"maps: `ds` must be an xarray.Dataset, got {type(ds).__name__}")
    if variable == "reach":
        missing = [v for v in ("suitable", REACH_LAYER) if v not in ds.data_vars]
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


def layer_values(ds: xr.Dataset, name: str, i: int | None) -> np.ndarray | None:
    """2-D values of layer `name` for slice `i` (layers without a slice dim are shared).

    Parameters
    ----------
    ds : xarray.Dataset
        The data.
    name : str
        Layer name.
    i : int or None
        Index of the slice.
    """
    if name == "exdet":
        nt1, nt2 = layer_values(ds, "nt1", i), layer_values(ds, "nt2", i)
        if nt1 is None or nt2 is None:
            return None
        with np.errstate(invalid="ignore"):
            code = np.where(nt1 < 0, 2.0, np.where(nt2 > 1, 1.0, 0.0))
        return np.where(np.isfinite(nt1) & np.isfinite(nt2), code, np.nan)
    if name == "reach":
        suitable, reached = layer_values(ds, "suitable", i), layer_values(ds, REACH_LAYER, i)
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

def coastline(ax, ds: xr.Dataset, i: int | None, fr: MapFrame) -> str | None:
    """Draw the slice's coastline; return the legend label (None when nothing was drawn).

    With an ``ice`` layer the coastline is the edge of land-or-ice and the ice sheet is
    shaded; without one the land mask's edge runs along coasts and ice margins alike.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        The panel.
    ds : xarray.Dataset
        Data with ``land`` (per slice or shared).
    i : int or None
        Index of the panel's slice.
    fr : MapFrame
        The map frame.
    """
    land = layer_values(ds, "land", i)
    if land is None:
        return None
    land = land.astype(bool)
    ice = layer_values(ds, "ice", i)
    lon, lat = fr.x(ds["lon"].values), ds["lat"].values
    label = "coastline of the slice"
    if ice is not None and np.any(ice.astype(bool)):
        ice = ice.astype(bool)
        ax.contourf(lon, lat, ice.astype(float), levels=[0.5, 1.5], colors=[ICE_COLOUR],
                    transform=fr.tr(ax), zorder=1)
        land = land | ice
    elif ice is None:
        label = "land edge (coast or ice margin)"
    if np.any(land) and not np.all(land):
        isoline(ax, fr, lon, lat, land.astype(float), colors="black", linewidths=0.8, zorder=5)
        return label
    return None


_LINES: dict[bytes, list] = {}


def _half_lines(x: np.ndarray, y: np.ndarray, z: np.ndarray) -> list:
    """The 0.5 isolines of `z` on (x, y) as a list of (n, 2) arrays, by the same contouring
    algorithm as matplotlib's ``contour`` ("mpl2014"); remembered, since many panels share a
    land mask or an outline."""
    import hashlib

    import contourpy

    key = hashlib.blake2b(b"".join(np.ascontiguousarray(a, dtype=float).tobytes()
                                   for a in (x, y, z)), digest_size=16).digest()
    if key not in _LINES:
        if len(_LINES) > 256:
            _LINES.clear()
        gen = contourpy.contour_generator(x, y, z, name="mpl2014", corner_mask=True,
                                          line_type=contourpy.LineType.SeparateCode)
        _LINES[key] = list(gen.lines(0.5)[0])  # (points, codes): one array per line
    return _LINES[key]


def isoline(ax, fr: MapFrame, x: np.ndarray, y: np.ndarray, z: np.ndarray, **kw) -> None:
    """The 0.5 isoline of `z` (a 0/1 mask) on `ax`.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Map axes.
    fr : MapFrame
        Its frame.
    x, y : numpy.ndarray
        Cell-centre coordinates (x of the data CRS, latitude).
    z : numpy.ndarray
        The mask, 2-D, no NaN.
    **kw
        ``colors``, ``linewidths``, ``linestyles``, ``zorder``.

    Notes
    -----
    On plain lon-lat axes the lines are one collection of the same lines matplotlib's
    ``contour`` draws (computed once per mask); projected maps use ``contour`` itself.
    """
    if not fr.plain:
        ax.contour(x, y, z, levels=[0.5], transform=fr.tr(ax), **kw)
        return
    from matplotlib.collections import LineCollection

    lines = [seg for seg in _half_lines(x, y, z) if len(seg) > 1]
    if lines:
        ax.add_collection(LineCollection(lines, **kw), autolim=False)


def outline(ax, ds, mask: np.ndarray | None, fr: MapFrame, **kw) -> None:
    """Outline of a 0/1 `mask` (nothing when it is empty or full).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Map axes.
    ds : xarray.Dataset
        The grid (``lon``, ``lat``).
    mask : numpy.ndarray or None
        The mask (NaN as 0).
    fr : MapFrame
        The frame.
    **kw
        Line style (``colors``, ``linewidths``, ``linestyles``).
    """
    if mask is None:
        return
    m = np.where(np.isfinite(mask.astype(float)), mask.astype(float), 0.0)
    if np.any(m > 0.5) and not np.all(m > 0.5):
        isoline(ax, fr, fr.x(ds["lon"].values), ds["lat"].values, m, zorder=5, **kw)


def hatch_novel(ax, ds, i, fr: MapFrame) -> bool:
    """Hatch the cells in novel climate (MESS < 0); returns whether any were hatched.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        The panel.
    ds : xarray.Dataset
        Data with ``mess``.
    i : int or None
        Index of the panel's slice.
    fr : MapFrame
        The map frame.
    """
    mess = layer_values(ds, "mess", i)
    if mess is None:
        return False
    novel = np.where(np.isfinite(mess), mess < 0, False).astype(float)
    if not np.any(novel):
        return False
    ax.contourf(fr.x(ds["lon"].values), ds["lat"].values, novel, levels=[0.5, 1.5],
                colors="none", hatches=[NOVEL_HATCH], transform=fr.tr(ax), zorder=4)
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


def norm_for(name: str, values: np.ndarray, ds: xr.Dataset | None = None):
    """Colour normalisation of a continuous layer: fixed for the novelty and suitability
    layers, k-of-n steps for agreement, else the 2-98 % range of the values.

    Parameters
    ----------
    name : str
        Layer name.
    values : numpy.ndarray
        The values drawn.
    ds : xarray.Dataset, optional
        Dataset (its ``n_models`` coordinate for agreement).
    """
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


def extend_of(name: str) -> str:
    """Which ends of a layer's colour bar carry arrows (values beyond the fixed range).

    Parameters
    ----------
    name : str
        Layer name.
    """
    return {"mess": "both", "nt1": "min", "nt2": "max"}.get(name, "neither")


def flag_colours(ds: xr.Dataset, name: str) -> dict[int, tuple[str, str]]:
    """Classes of a flag layer (values >= 0; negative flags mean no data): code -> (label,
    colour), labels from ``flag_meanings`` ("model_x_scenario" drawn as "model × scenario").

    Parameters
    ----------
    ds : xarray.Dataset
        Dataset holding the layer.
    name : str
        Name of the flag layer.
    """
    pairs = [(v, m) for v, m in flag_pairs(ds[name]) if v >= 0]
    return {v: (m.replace("_x_", " × ").replace("_", " "), FLAG_COLOURS[k % len(FLAG_COLOURS)])
            for k, (v, m) in enumerate(pairs)}


def is_categorical(name: str, ds: xr.Dataset | None = None) -> bool:
    """Whether a layer is drawn in classes rather than on a continuous scale.

    Parameters
    ----------
    name : str
        Layer name.
    ds : xarray.Dataset, optional
        Dataset that may hold a flag layer of that name.
    """
    return name in CATEGORICAL or (name in FLAG_LAYERS and ds is not None and name in ds)


def categorical_style(name: str = "change", ds: xr.Dataset | None = None):
    """Colour map, norm and legend handles of a categorical layer.

    Parameters
    ----------
    name : str
        Layer name (a built-in categorical layer or a flag layer of `ds`).
    ds : xarray.Dataset, optional
        Dataset holding a flag layer's ``flag_meanings``.
    """
    colours = CATEGORICAL[name] if name in CATEGORICAL else flag_colours(ds, name)
    codes = sorted(colours)
    cmap = ListedColormap([colours[c][1] for c in codes])
    norm = BoundaryNorm([c - 0.5 for c in codes] + [codes[-1] + 0.5], cmap.N)
    handles = [Patch(facecolor=colours[c][1], edgecolor="0.3", label=colours[c][0])
               for c in codes]
    return cmap, norm, handles

def decorate(ax, fr: MapFrame, ds, i, name: str, *, scale_bar: bool = True) -> list:
    """Overlays shared by every map; returns legend handles.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        The panel.
    fr : MapFrame
        The map frame.
    ds : xarray.Dataset
        The data drawn.
    i : int or None
        Index of the panel's slice.
    name : str
        The layer drawn.
    scale_bar : bool
        Draw a scale bar.
    """
    from matplotlib.lines import Line2D

    handles: list = []
    coast = coastline(ax, ds, i, fr)
    if coast:
        handles.append(Line2D([], [], color="black", linewidth=0.8, label=coast))
    ice = layer_values(ds, "ice", i)
    if ice is not None and np.any(ice.astype(bool)):
        handles.append(Patch(facecolor=ICE_COLOUR, edgecolor="0.5", label="ice sheet"))
    if name == "agreement":
        handles += agreement_overlays(ax, ds, i, fr)
    if name in ("suitability", "mess", "nt1", "nt2", "change", "reach", "most_dissimilar"):
        if hatch_novel(ax, ds, i, fr):
            handles.append(Patch(facecolor="none", edgecolor="0.2", hatch=NOVEL_HATCH,
                                 label="novel climate (MESS < 0)"))
    if name == "suitability":
        suitable = layer_values(ds, "suitable", i)
        if suitable is not None:
            outline(ax, ds, suitable == 1, fr, colors="white", linewidths=1.2)
            outline(ax, ds, suitable == 1, fr, colors="black", linewidths=0.5)
            handles.append(Line2D([], [], color="black", linewidth=0.6,
                                  label="suitable (above threshold)"))
    calib = layer_values(ds, "calibration_area", i)
    if calib is not None and name != "stability":
        outline(ax, ds, calib.astype(bool), fr, colors="#CC79A7", linewidths=1.2,
                 linestyles="dashed")
        handles.append(Line2D([], [], color="#CC79A7", linewidth=1.2, linestyle="--",
                              label="calibration area"))
    if scale_bar:
        draw_scale_bar(ax, fr)
    return handles

def agreement_overlays(ax, ds: xr.Dataset, i, fr: MapFrame) -> list:
    """Majority outline and hatching where the models disagree (some, not all, suitable).

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        The panel.
    ds : xarray.Dataset
        The ensemble dataset.
    i : int
        Index of the panel's slice.
    fr : MapFrame
        The map frame (projection, extent).
    """
    from matplotlib.lines import Line2D

    handles: list = []
    a = layer_values(ds, "agreement", i)
    split = np.where(np.isfinite(a), (a > 0) & (a < 1), False).astype(float)
    if np.any(split):
        ax.contourf(fr.x(ds["lon"].values), ds["lat"].values, split, levels=[0.5, 1.5],
                    colors="none", hatches=[DISAGREE_HATCH], transform=fr.tr(ax), zorder=4)
        handles.append(Patch(facecolor="none", edgecolor="0.2", hatch=DISAGREE_HATCH,
                             label="models disagree (some, not all, suitable)"))
    cons = layer_values(ds, "consensus", i)
    if cons is not None and np.any(cons == 1):
        outline(ax, ds, cons == 1, fr, colors="#D55E00", linewidths=1.2)
        handles.append(Line2D([], [], color="#D55E00", linewidth=1.2,
                              label="majority consensus: suitable in more than half"))
    return handles
