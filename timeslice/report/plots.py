"""Plots of the summary table and of the fitted niche (matplotlib, Agg, no pyplot state)."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from timeslice.errors import DataError
from timeslice.report.figures import save

__all__ = [
    "PAST_BEFORE_YEAR",
    "SCENARIO_COLOURS",
    "area_through_time",
    "centroid_track",
    "gain_loss_bars",
    "importance_bars",
    "response_curves",
    "shift_plot",
    "threshold_plot",
]

#: Colour per scenario label, taken in order from the Okabe & Ito (2008) colour-blind-safe
#: set (from memory); scenarios are matched by sorted name so every run with the same
#: labels gets the same colours.
SCENARIO_COLOURS = ("#000000", "#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00",
                    "#56B4E9", "#F0E442")

_SUMMARY_COLUMNS = ("slice", "year", "model", "scenario", "suitable_area_km2", "gain_km2",
                    "loss_km2", "stable_km2")


def _need(df: pd.DataFrame, columns, what: str) -> None:
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"{what}: expected a pandas.DataFrame, got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise DataError(
            f"{what}: table lacks columns {missing}; it has {list(map(str, df.columns))}"
        )
    if df.empty:
        raise DataError(f"{what}: the table has no rows")


def _save(fig: Figure, path: str | os.PathLike, dpi: int) -> Path:
    return save(fig, Path(path), dpi=dpi)


def _margins(fig: Figure, *, left: float = 0.8, right: float = 0.2, top: float = 0.45,
             bottom: float = 0.55, wspace: float = 0.08, hspace: float = 0.45) -> None:
    """Fixed margins in inches (laid out once; no layout engine, no tight bounding box)."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=left / w, right=1 - right / w, top=1 - top / h,
                        bottom=bottom / h, wspace=wspace, hspace=hspace)


def _colours(scenarios) -> dict[str, str]:
    names = sorted({str(s) for s in scenarios})
    return {s: SCENARIO_COLOURS[k % len(SCENARIO_COLOURS)] for k, s in enumerate(names)}


def _baseline_rows(df: pd.DataFrame) -> pd.DataFrame:
    return df[df["scenario"].astype(str) == "baseline"]


#: Slices before this year (CE) are drawn on the "past" panel in thousands of years before
#: present (BP = before 1950 CE, the radiocarbon convention; Stuiver & Polach 1977,
#: Radiocarbon 19:355).
PAST_BEFORE_YEAR = 1850.0


def _is_past(df: pd.DataFrame) -> np.ndarray:
    return (df["scenario"].astype(str).to_numpy() == "past") | (
        df["year"].to_numpy(float) < PAST_BEFORE_YEAR)


def _time_panels(fig: Figure, df: pd.DataFrame, *, rows: int = 1):
    """Axes for a time series that may hold past (ka BP) and future (year CE) slices.

    Returns a list (one per row) of lists of ``(axes, kind)`` with kind "past" or "future".
    Past slices are plotted against ka BP with the axis running from old to young, so time
    flows left to right across both panels; the baseline appears on both.
    """
    past = _is_past(df)
    kinds = [k for k, present in (("past", past.any()), ("future", (~past).any())) if present]
    if df["scenario"].astype(str).eq("baseline").all():
        kinds = ["future"]
    grid = fig.add_gridspec(rows, len(kinds), wspace=0.08)
    out = []
    for r in range(rows):
        row = []
        for c, kind in enumerate(kinds):
            share = row[0][0] if row else None
            ax = fig.add_subplot(grid[r, c], sharey=share)
            if kind == "past":
                ax.invert_xaxis()
            if share is not None:
                ax.tick_params(labelleft=False)
            row.append((ax, kind))
        out.append(row)
    return out


def _x(df: pd.DataFrame, kind: str) -> np.ndarray:
    years = df["year"].to_numpy(float)
    return (1950.0 - years) / 1000.0 if kind == "past" else years


def _rows_for(df: pd.DataFrame, kind: str) -> pd.DataFrame:
    """Rows drawn on a panel: its own slices plus the baseline that starts every chain."""
    past = _is_past(df)
    base = df["scenario"].astype(str).eq("baseline").to_numpy()
    keep = (past if kind == "past" else ~past) | base
    return df[keep]


def _thousands(ax) -> None:
    from matplotlib.ticker import FuncFormatter

    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _p: f"{v:,.0f}"))


def _label_time(ax, kind: str) -> None:
    ax.set_xlabel("thousand years before present (ka BP)" if kind == "past" else "year (CE)")


def _chains(df: pd.DataFrame, kind: str, value: str):
    """Yield (scenario, model, x, y) per chain, each starting at the baseline."""
    rows = _rows_for(df, kind)
    base = rows[rows["scenario"].astype(str) == "baseline"]
    for (scen, model), g in rows[rows["scenario"].astype(str) != "baseline"].groupby(
            ["scenario", "model"], sort=True):
        g = pd.concat([base, g])
        x = _x(g, kind)
        order = np.argsort(x)
        yield str(scen), str(model), x[order], g[value].to_numpy(float)[order]


def area_through_time(summary: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110,
                      column: str = "suitable_area_km2", ylabel: str = "suitable area (km²)",
                      title: str = "Climatically suitable area through time") -> Path:
    """Suitable area (or another per-slice `column`) through time per scenario: median across
    models, min-max band, members.

    Every chain starts at the baseline slice. Past slices (scenario "past" or before
    :data:`PAST_BEFORE_YEAR`) go on a left panel in ka BP, future ones on a right panel in
    years CE, with one shared area axis; a run with only one kind gets one panel.

    Parameters
    ----------
    summary : pandas.DataFrame
        The summary table (columns ``year``, ``model``, ``scenario``, ``suitable_area_km2``).
    path : path-like
        PNG file.
    column : str
        Column of the table plotted.
    ylabel : str
        Label of the y axis.
    title : str
        Figure title.
    dpi : int
        Resolution, dots per inch.

    Returns
    -------
    pathlib.Path
    """
    _need(summary, ("year", "model", "scenario", column), "area_through_time")
    df = summary.copy()
    df["scenario"] = df["scenario"].astype(str)
    colours = _colours(df["scenario"])
    fig = Figure(figsize=(8.0, 4.2))
    (row,) = _time_panels(fig, df)
    _margins(fig)
    for ax, kind in row:
        rows = _rows_for(df, kind)
        base = rows[rows["scenario"] == "baseline"]
        for scen, _model, x, y in _chains(df, kind, column):
            ax.plot(x, y, color=colours[scen], alpha=0.35, linewidth=0.8, marker=".",
                    markersize=3)
        others = rows[rows["scenario"] != "baseline"]
        for scen, g in others.groupby("scenario", sort=True):
            stats = g.assign(_x=_x(g, kind)).groupby("_x")[column].agg(
                ["median", "min", "max"])
            x = stats.index.to_numpy(float)
            med, lo, hi = (stats[k].to_numpy(float) for k in ("median", "min", "max"))
            if len(base):
                bx, ba = _x(base, kind)[0], float(base[column].iloc[0])
                x, med, lo, hi = np.r_[bx, x], np.r_[ba, med], np.r_[ba, lo], np.r_[ba, hi]
                order = np.argsort(x)
                x, med, lo, hi = x[order], med[order], lo[order], hi[order]
            n_models = g["model"].nunique()
            ax.fill_between(x, lo, hi, color=colours[scen], alpha=0.18, linewidth=0)
            ax.plot(x, med, color=colours[scen], linewidth=2,
                    label=f"{scen}: median and range of {n_models} model"
                          f"{'s' if n_models != 1 else ''}")
        if len(base):
            ax.plot(_x(base, kind), base[column], marker="o", color="black",
                    linestyle="none", label="baseline")
        _label_time(ax, kind)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7)
    ax0 = row[0][0]
    ax0.set_ylabel(ylabel)
    if column.endswith("_km2"):
        _thousands(ax0)
    fig.suptitle(title, fontsize=11)
    return _save(fig, path, dpi)


def gain_loss_bars(summary: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Horizontal bars per slice: gain to the right, loss to the left, stable as a marker.

    Parameters
    ----------
    summary : pandas.DataFrame
        One row per slice (summary.csv).
    path : str or os.PathLike
        The figure file.
    dpi : int
        Resolution, dots per inch.
    """
    _need(summary, _SUMMARY_COLUMNS, "gain_loss_bars")
    df = summary[summary["scenario"].astype(str) != "baseline"].reset_index(drop=True)
    if df.empty:
        df = summary.reset_index(drop=True)
    y = np.arange(len(df))
    fig = Figure(figsize=(7.0, 1.2 + 0.32 * len(df)))
    ax = fig.add_subplot(111)
    _margins(fig, left=2.6, top=0.4, bottom=0.55)
    ax.barh(y, df["gain_km2"].to_numpy(float), color="#0072B2", label="gain")
    ax.barh(y, -df["loss_km2"].to_numpy(float), color="#E69F00", label="loss")
    net = df["gain_km2"].to_numpy(float) - df["loss_km2"].to_numpy(float)
    ax.plot(net, y, marker="|", color="black", linestyle="none", markersize=10,
            label="net change")
    ax.axvline(0, color="black", linewidth=0.8)
    ax.set_yticks(y, [f"{s} ({m}, {c})" for s, m, c in
                      zip(df["slice"], df["model"], df["scenario"])], fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("area against the reference slice (km²)")
    from matplotlib.ticker import FuncFormatter

    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _p: f"{v:,.0f}"))
    ax.set_title("Gain and loss of suitable area per slice")
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
    return _save(fig, path, dpi)


def centroid_track(summary: pd.DataFrame, path: str | os.PathLike, *, land=None,
                   dpi: int = 110, projection: str = "lonlat") -> Path:
    """Range centroids on a map, one track per model and scenario from the baseline.

    Parameters
    ----------
    summary : pandas.DataFrame
        Columns ``slice, year, model, scenario, centroid_lat, centroid_lon``.
    land : xarray.DataArray, optional
        Present-day ``land(lat, lon)`` mask whose 0.5 contour is drawn as the coastline
        (never downloaded); it also sets the map's extent, centred on the grid's own
        longitudes (a grid across 180° is one piece).
    projection : {"lonlat", "equal_area", "polar"}
        As for the maps (:data:`timeslice.report.maps.PROJECTIONS`).
    path : str or os.PathLike
        The figure file.
    dpi : int
        Resolution, dots per inch.
    """
    from timeslice.grid import wrap_lon
    from timeslice.report.mapframe import extent_frame, map_axes, map_frame

    _need(summary, ("year", "model", "scenario", "centroid_lat", "centroid_lon"),
          "centroid_track")
    df = summary.dropna(subset=["centroid_lat", "centroid_lon"]).copy()
    df["scenario"] = df["scenario"].astype(str)
    colours = _colours(df["scenario"])
    if land is not None:
        fr = map_frame(land, projection)
    else:
        # a square-ish window around the track, at least 2 degrees across, centred on the
        # track's own longitudes (continuous across 180°)
        lon = wrap_lon(df["centroid_lon"].to_numpy(), west=float(df["centroid_lon"].iloc[0]) - 180)
        lat_c = float(df.centroid_lat.mean())
        half_lat = max(1.0, 0.6 * float(np.ptp(df.centroid_lat)),
                       0.6 * float(np.ptp(lon)) * np.cos(np.radians(lat_c)))
        half_lon = half_lat / max(np.cos(np.radians(lat_c)), 0.2)
        lon_c = float(lon.mean())
        fr = extent_frame(lon_c - half_lon, lon_c + half_lon, max(-90.0, lat_c - half_lat),
                          min(90.0, lat_c + half_lat), projection)
    # centroids are reported in [-180, 180): onto the frame's continuous longitudes
    df["x"] = fr.x(wrap_lon(df["centroid_lon"].to_numpy(), west=fr.west))
    fig = Figure(figsize=(6.0, 5.0))
    ax, fr = map_axes(fig, [0.1, 0.07, 0.85, 0.85], None, frame=fr)
    crs = fr.tr(ax)
    if land is not None:
        lv = np.asarray(land.transpose("lat", "lon").values, dtype=float)
        ax.contour(fr.x(land["lon"].values), land["lat"].values, lv, levels=[0.5], colors="0.3",
                   linewidths=0.8, transform=crs)
    base = _baseline_rows(df)
    seen: set[str] = set()
    for (scen, _model), g in df[df["scenario"] != "baseline"].groupby(["scenario", "model"]):
        # every chain runs away from the baseline: back in time for the past, forward else
        g = pd.concat([base, g.sort_values("year", ascending=(scen != "past"))])
        n = df.loc[df["scenario"] == scen, "model"].nunique()
        ax.plot(g["x"], g["centroid_lat"], color=colours[scen], marker="o",
                markersize=3, linewidth=1, transform=crs,
                label=None if scen in seen else f"{scen} ({n} model{'s' if n != 1 else ''})")
        ax.plot(g["x"].iloc[-1:], g["centroid_lat"].iloc[-1:], color=colours[scen],
                marker="s", markersize=5, linestyle="none", transform=crs)
        seen.add(scen)
    if len(base):
        ax.plot(base["x"], base["centroid_lat"], marker="*", color="black",
                markersize=10, linestyle="none", transform=crs, label="baseline")
    ax.legend(fontsize=7, loc="upper right", title="squares: last slice", title_fontsize=6)
    ax.set_title("Track of the area-weighted centroid of the suitable range", fontsize=9)
    return _save(fig, path, dpi)


#: Candidate columns of the shift plot: (median column, low, high, axis label). The
#: quantile columns are those of ``timeslice.series.change.change_table(detail=True)``.
_SHIFT_PANELS = (
    (("lat_q50", "lat_q10", "lat_q90"), ("centroid_lat", None, None),
     "latitude of suitable cells (°N)"),
    (("elevation_q50_m", "elevation_q10_m", "elevation_q90_m"),
     ("elevation_mean_m", None, None), "elevation of suitable cells (m)"),
)


def shift_plot(shifts: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Latitude and elevation shifts of the suitable range through time.

    Parameters
    ----------
    shifts : pandas.DataFrame
        Columns ``year, model, scenario`` and, for latitude, ``lat_q50`` (with ``lat_q10`` and
        ``lat_q90`` drawn as a band: area-weighted quantiles over suitable cells) or
        ``centroid_lat``; for elevation ``elevation_q50_m`` (with ``elevation_q10_m``,
        ``elevation_q90_m``) or ``elevation_mean_m``. One row of panels per quantity present;
        past and future slices on separate panels as in :func:`area_through_time`.
    path : str or os.PathLike
        The figure file.
    dpi : int
        Resolution, dots per inch.

    Returns
    -------
    pathlib.Path
    """
    _need(shifts, ("year", "model", "scenario"), "shift_plot")
    panels = []
    for first, fallback, label in _SHIFT_PANELS:
        for cols in (first, fallback):
            if cols[0] in shifts.columns and shifts[cols[0]].notna().any():
                band = cols[1:] if all(c in shifts.columns for c in cols[1:] if c) and cols[1] \
                    else (None, None)
                panels.append((cols[0], band, label))
                break
    if not panels:
        raise DataError(
            "shift_plot: table needs `lat_q50` or `centroid_lat`, or `elevation_q50_m` or "
            "`elevation_mean_m` (change_table(detail=True) gives the quantiles)"
        )
    df = shifts.copy()
    df["scenario"] = df["scenario"].astype(str)
    colours = _colours(df["scenario"])
    fig = Figure(figsize=(8.0, 2.9 * len(panels) + 0.4))
    rows = _time_panels(fig, df, rows=len(panels))
    _margins(fig, hspace=0.35)
    for (col, (lo, hi), label), row in zip(panels, rows):
        for ax, kind in row:
            seen: set[str] = set()
            for scen, _model, x, y in _chains(df, kind, col):
                n = df.loc[df["scenario"] == scen, "model"].nunique()
                ax.plot(x, y, color=colours[scen], marker="o", markersize=3, linewidth=1,
                        alpha=0.8, label=None if scen in seen else
                        f"{scen} ({n} model{'s' if n != 1 else ''})")
                seen.add(scen)
            if lo and hi:
                sub = _rows_for(df, kind)
                base = sub[sub["scenario"] == "baseline"]
                if len(base):
                    bx = _x(base, kind)[0]
                    ax.errorbar([bx], [float(base[col].iloc[0])],
                                yerr=[[float(base[col].iloc[0] - base[lo].iloc[0])],
                                      [float(base[hi].iloc[0] - base[col].iloc[0])]],
                                color="black", capsize=3, linewidth=1,
                                label="baseline (median, 10-90 % of suitable area)")
            ax.grid(alpha=0.3)
            _label_time(ax, kind)
        row[0][0].set_ylabel(label, fontsize=8)
        for ax, _kind in row:
            ax.legend(fontsize=6)
    fig.suptitle("Latitude and elevation shifts of the suitable range", fontsize=10)
    return _save(fig, path, dpi)


def response_curves(df: pd.DataFrame, path: str | os.PathLike, *, ncols: int = 3,
                    title: str = "Response curves", dpi: int = 110) -> Path:
    """Response curves, one panel per variable, the calibration range shaded.

    Parameters
    ----------
    df : pandas.DataFrame
        Long table with columns ``variable, value, suitability, inside_calibration``
        (bool: the value lies within the range seen in the calibration area). Outside that
        range the curve is an extrapolation and drawn dashed.
    path : str or os.PathLike
        The figure file.
    ncols : int
        Panels per row.
    title : str
        Figure title.
    dpi : int
        Resolution, dots per inch.
    """
    _need(df, ("variable", "value", "suitability", "inside_calibration"), "response_curves")
    variables = list(dict.fromkeys(df["variable"].astype(str)))
    n = len(variables)
    ncols = max(1, min(ncols, n))
    nrows = int(np.ceil(n / ncols))
    fig = Figure(figsize=(3.0 * ncols, 2.4 * nrows + 0.3))
    _margins(fig, left=0.6, top=0.45, bottom=0.35, wspace=0.3, hspace=0.5)
    for k, var in enumerate(variables):
        ax = fig.add_subplot(nrows, ncols, k + 1)
        g = df[df["variable"].astype(str) == var].sort_values("value")
        x = g["value"].to_numpy(float)
        y = g["suitability"].to_numpy(float)
        inside = g["inside_calibration"].to_numpy(bool)
        if inside.any():
            ax.axvspan(x[inside].min(), x[inside].max(), color="#56B4E9", alpha=0.25,
                       linewidth=0, label="calibration range")
        ax.plot(x, np.where(inside, y, np.nan), color="#0072B2", linewidth=1.6,
                label="inside calibration")
        ax.plot(x, np.where(inside, np.nan, y), color="#0072B2", linewidth=1.0,
                linestyle="--", label="extrapolated")
        ax.set_ylim(-0.02, 1.02)
        ax.set_title(var, fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(alpha=0.3)
        if k % ncols == 0:
            ax.set_ylabel("suitability", fontsize=8)
        if k == 0:
            ax.legend(fontsize=6)
    fig.suptitle(title, fontsize=9)
    return _save(fig, path, dpi)


def importance_bars(importance: pd.DataFrame, path: str | os.PathLike, *,
                    dpi: int = 110) -> Path:
    """Permutation importance of each predictor as horizontal bars, largest on top, with
    ±1 SD over the repeats as error bars.

    Parameters
    ----------
    importance : pandas.DataFrame
        ``variable, importance_mean, importance_sd`` (the fit's ``importance`` table: the drop
        in training AUC when the predictor is shuffled).
    path : path-like
        PNG file.
    dpi : int
        Resolution, dots per inch.
    """
    _need(importance, ("variable", "importance_mean"), "importance_bars")
    df = importance.dropna(subset=["importance_mean"])
    if df.empty:
        raise DataError("importance_bars: no importance values (importance_repeats = 0?)")
    df = df.sort_values("importance_mean", ascending=False).reset_index(drop=True)
    y = np.arange(len(df))
    sd = df["importance_sd"].to_numpy(float) if "importance_sd" in df else None
    fig = Figure(figsize=(6.5, 1.4 + 0.35 * len(df)))
    ax = fig.add_subplot(111)
    _margins(fig, left=1.4, top=0.4, bottom=0.6)
    ax.barh(y, df["importance_mean"].to_numpy(float), xerr=sd, color="#0072B2",
            error_kw={"ecolor": "0.3", "capsize": 3, "linewidth": 0.8})
    ax.set_yticks(y, [str(v) for v in df["variable"]], fontsize=8)
    ax.invert_yaxis()
    ax.axvline(0, color="black", linewidth=0.8)
    ax.set_xlabel("drop in training AUC when the predictor is shuffled (±1 SD over repeats)")
    ax.set_title("Permutation importance of the predictors", fontsize=10)
    ax.grid(axis="x", alpha=0.3)
    return _save(fig, path, dpi)


def threshold_plot(thresholds: pd.DataFrame, path: str | os.PathLike, *,
                   reference: str, dpi: int = 110) -> Path:
    """Change in suitable area (%) per scenario and period under every threshold rule, median
    over models as a marker and the model range as a line, rules side by side.

    Parameters
    ----------
    thresholds : pandas.DataFrame
        :func:`timeslice.series.thresholds.threshold_table`.
    path : path-like
        PNG file.
    reference : str
        Label of the reference slice (left out).
    dpi : int
        Resolution, dots per inch.
    """
    _need(thresholds, ("rule", "threshold", "slice", "scenario", "period", "change_pct"),
          "threshold_plot")
    df = thresholds[thresholds["slice"].astype(str) != str(reference)]
    if df.empty:
        raise DataError("threshold_plot: no slice besides the reference")
    groups = list(dict.fromkeys(zip(df["scenario"].astype(str), df["period"].astype(str))))
    rules = list(dict.fromkeys(df["rule"]))
    fig = Figure(figsize=(7.5, 1.6 + 0.45 * len(groups)))
    ax = fig.add_subplot(111)
    _margins(fig, left=1.8, top=0.4, bottom=0.65)
    step = 0.8 / max(1, len(rules))
    colours = ("#000000", "#0072B2", "#D55E00", "#009E73", "#CC79A7")
    for k, rule in enumerate(rules):
        sub = df[df["rule"] == rule]
        t = float(sub["threshold"].iloc[0])
        run = " (run)" if "rule_of_run" in sub and bool(sub["rule_of_run"].iloc[0]) else ""
        for j, (scen, per) in enumerate(groups):
            g = sub[(sub["scenario"].astype(str) == scen) & (sub["period"].astype(str) == per)]
            v = g["change_pct"].to_numpy(float)
            v = v[np.isfinite(v)]
            if not v.size:
                continue
            yy = j - 0.4 + step * (k + 0.5)
            ax.plot([v.min(), v.max()], [yy, yy], color=colours[k % len(colours)],
                    linewidth=1.2)
            ax.plot([np.median(v)], [yy], marker="o", color=colours[k % len(colours)],
                    markersize=4, label=f"{rule}{run}, t = {t:.3g}" if j == 0 else None)
    ax.set_yticks(np.arange(len(groups)), [f"{s}, {p}" for s, p in groups], fontsize=8)
    ax.invert_yaxis()
    ax.axvline(0, color="black", linewidth=0.8)
    ax.set_xlabel("change in suitable area against the reference (%): median (dot) and range "
                  "over models")
    ax.set_title("How much the change depends on the threshold rule", fontsize=10)
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=7, loc="best")
    return _save(fig, path, dpi)


def diversity_plot(sites: pd.DataFrame, table: pd.DataFrame, stability,
                   path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Sampled populations against the refugium hypothesis: diversity against stability
    (with Pearson r and Dutilleul's modified-t p-value) and the sites on the stability map.

    Parameters
    ----------
    sites : pandas.DataFrame
        Per site ``lon``, ``lat``, ``diversity``, ``stability`` (the diversity-sites table).
    table : pandas.DataFrame
        The diversity test table (``predictor``, ``r``, ``p_value``, ``n_effective``).
    stability : xarray.DataArray
        The stability layer the sites were read from, ``(lat, lon)``.
    path : path-like
        PNG file.
    """
    _need(sites, ("lon", "lat", "diversity", "stability"), "diversity_plot")
    fig = Figure(figsize=(9.0, 3.8))
    ax1, ax2 = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1, 1.25]})
    fig.subplots_adjust(left=0.08, right=0.95, bottom=0.15, top=0.86, wspace=0.3)
    ax1.scatter(sites["stability"], sites["diversity"], s=14, c="k")
    row = table.set_index("predictor").loc["stability"] if "stability" in set(table["predictor"]) else None
    if row is not None:
        ax1.set_title(f"r = {row['r']:.2f}, p = {row['p_value']:.3g} "
                      f"(modified t, effective n {row['n_effective']:.1f})", fontsize=8)
    ax1.set_xlabel("stability at the site (share of the window's slices suitable)", fontsize=8)
    ax1.set_ylabel("genetic diversity", fontsize=8)
    ax1.grid(alpha=0.3)
    lon, lat = stability["lon"].values, stability["lat"].values
    mesh = ax2.pcolormesh(lon, lat, np.asarray(stability.transpose("lat", "lon").values),
                          cmap="viridis", vmin=0, vmax=1, shading="nearest")
    ax2.scatter(sites["lon"], sites["lat"], s=18, c=sites["diversity"], cmap="magma",
                edgecolors="white", linewidths=0.6)
    ax2.set_aspect(1.0 / max(np.cos(np.deg2rad(float(np.mean(lat)))), 0.1))
    ax2.set_title("sites (colour: diversity) over stability", fontsize=8)
    ax2.tick_params(labelsize=7)
    from matplotlib.ticker import MaxNLocator

    ax2.xaxis.set_major_locator(MaxNLocator(5))
    fig.colorbar(mesh, ax=ax2, shrink=0.8, label="stability")
    fig.suptitle("Refugium hypothesis against genetic diversity", fontsize=10)
    return _save(fig, path, dpi)
