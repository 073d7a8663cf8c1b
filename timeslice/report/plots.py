"""Plots of the summary table and of the fitted niche (matplotlib, Agg, no pyplot state)."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from timeslice.errors import DataError
from timeslice.io import atomic_path

__all__ = [
    "SCENARIO_COLOURS",
    "area_through_time",
    "centroid_track",
    "gain_loss_bars",
    "response_curves",
    "shift_plot",
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
    target = Path(path)
    with atomic_path(target) as tmp:
        fig.savefig(tmp, format="png", dpi=dpi, bbox_inches="tight")
    return target


def _colours(scenarios) -> dict[str, str]:
    names = sorted({str(s) for s in scenarios})
    return {s: SCENARIO_COLOURS[k % len(SCENARIO_COLOURS)] for k, s in enumerate(names)}


def _baseline_rows(df: pd.DataFrame) -> pd.DataFrame:
    return df[df["scenario"].astype(str) == "baseline"]


def area_through_time(summary: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Suitable area against year per scenario: ensemble median line, min-max band, members.

    Each scenario's chain starts at the baseline slice, so the lines share a starting point.
    Paleo slices (scenario "past") are plotted on the same year axis (CE; negative = BCE),
    with a symmetric-log year axis when the series spans more than 1,000 years.

    Parameters
    ----------
    summary : pandas.DataFrame
        The summary table (columns ``year``, ``model``, ``scenario``, ``suitable_area_km2``).
    path : path-like
        PNG file.
    """
    _need(summary, ("year", "model", "scenario", "suitable_area_km2"), "area_through_time")
    df = summary.copy()
    df["scenario"] = df["scenario"].astype(str)
    base = _baseline_rows(df)
    others = df[df["scenario"] != "baseline"]
    colours = _colours(df["scenario"])
    fig = Figure(figsize=(7.0, 4.0))
    ax = fig.add_subplot(111)
    b_year = float(base["year"].iloc[0]) if len(base) else None
    b_area = float(base["suitable_area_km2"].iloc[0]) if len(base) else None
    for scen, g in others.groupby("scenario", sort=True):
        c = colours[scen]
        for _, m in g.groupby("model", sort=True):
            m = m.sort_values("year")
            x, y = m["year"].to_numpy(float), m["suitable_area_km2"].to_numpy(float)
            if b_year is not None:
                x, y = np.r_[b_year, x], np.r_[b_area, y]
                order = np.argsort(x)
                x, y = x[order], y[order]
            ax.plot(x, y, color=c, alpha=0.35, linewidth=0.8, marker=".", markersize=3)
        stats = g.groupby("year")["suitable_area_km2"].agg(["median", "min", "max"])
        x = stats.index.to_numpy(float)
        med, lo, hi = (stats[k].to_numpy(float) for k in ("median", "min", "max"))
        if b_year is not None:
            x, med, lo, hi = (np.r_[b_year, x], np.r_[b_area, med], np.r_[b_area, lo],
                              np.r_[b_area, hi])
            order = np.argsort(x)
            x, med, lo, hi = x[order], med[order], lo[order], hi[order]
        n_models = g["model"].nunique()
        ax.fill_between(x, lo, hi, color=c, alpha=0.18, linewidth=0)
        ax.plot(x, med, color=c, linewidth=2, label=f"{scen} (median, range of {n_models} "
                f"model{'s' if n_models != 1 else ''})")
    if b_year is not None:
        ax.plot([b_year], [b_area], marker="o", color="black", linestyle="none",
                label="baseline")
    years = df["year"].to_numpy(float)
    if np.ptp(years) > 1000:
        ax.set_xscale("symlog", linthresh=100.0)
    ax.set_xlabel("year (CE; negative = BCE)")
    ax.set_ylabel("suitable area (km²)")
    ax.set_title("Climatically suitable area through time")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7)
    return _save(fig, path, dpi)


def gain_loss_bars(summary: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Horizontal bars per slice: gain to the right, loss to the left, stable as a marker."""
    _need(summary, _SUMMARY_COLUMNS, "gain_loss_bars")
    df = summary[summary["scenario"].astype(str) != "baseline"].reset_index(drop=True)
    if df.empty:
        df = summary.reset_index(drop=True)
    y = np.arange(len(df))
    fig = Figure(figsize=(7.0, 0.9 + 0.32 * len(df)))
    ax = fig.add_subplot(111)
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
    ax.set_title("Gain and loss of suitable area per slice")
    ax.grid(axis="x", alpha=0.3)
    ax.legend(fontsize=7, loc="lower right")
    return _save(fig, path, dpi)


def centroid_track(summary: pd.DataFrame, path: str | os.PathLike, *, land=None,
                   dpi: int = 110) -> Path:
    """Range centroids on a map, one track per model and scenario from the baseline.

    Parameters
    ----------
    summary : pandas.DataFrame
        Columns ``slice, year, model, scenario, centroid_lat, centroid_lon``.
    land : xarray.DataArray, optional
        Present-day ``land(lat, lon)`` mask whose 0.5 contour is drawn as the coastline
        (never downloaded).
    """
    import cartopy.crs as ccrs

    _need(summary, ("year", "model", "scenario", "centroid_lat", "centroid_lon"),
          "centroid_track")
    df = summary.dropna(subset=["centroid_lat", "centroid_lon"]).copy()
    df["scenario"] = df["scenario"].astype(str)
    colours = _colours(df["scenario"])
    crs = ccrs.PlateCarree()
    fig = Figure(figsize=(6.0, 5.0))
    ax = fig.add_subplot(111, projection=crs)
    if land is not None:
        lv = np.asarray(land.transpose("lat", "lon").values, dtype=float)
        ax.contour(land["lon"].values, land["lat"].values, lv, levels=[0.5], colors="0.3",
                   linewidths=0.8, transform=crs)
        ax.set_extent([float(land.lon.min()), float(land.lon.max()),
                       float(land.lat.min()), float(land.lat.max())], crs=crs)
    base = _baseline_rows(df)
    for (scen, model), g in df[df["scenario"] != "baseline"].groupby(["scenario", "model"]):
        g = pd.concat([base, g]).sort_values("year") if scen != "past" else \
            pd.concat([base, g]).sort_values("year", ascending=False)
        ax.plot(g["centroid_lon"], g["centroid_lat"], color=colours[scen], marker="o",
                markersize=3, linewidth=1, transform=crs, label=f"{scen} / {model}")
        last = g.iloc[-1]
        ax.annotate(str(last.get("slice", "")), (last["centroid_lon"], last["centroid_lat"]),
                    fontsize=6, xytext=(3, 3), textcoords="offset points",
                    transform=crs._as_mpl_transform(ax))
    if len(base):
        ax.plot(base["centroid_lon"], base["centroid_lat"], marker="*", color="black",
                markersize=10, linestyle="none", transform=crs, label="baseline")
    if land is None:
        pad = 0.5
        ax.set_extent([df.centroid_lon.min() - pad, df.centroid_lon.max() + pad,
                       df.centroid_lat.min() - pad, df.centroid_lat.max() + pad], crs=crs)
    gl = ax.gridlines(crs=crs, draw_labels=True, linewidth=0.4, color="0.5", alpha=0.6,
                      linestyle=":")
    gl.top_labels = gl.right_labels = False
    ax.legend(fontsize=6, loc="upper right")
    ax.set_title("Track of the suitable-range centroid", fontsize=9)
    return _save(fig, path, dpi)


def shift_plot(shifts: pd.DataFrame, path: str | os.PathLike, *, dpi: int = 110) -> Path:
    """Latitude and elevation shifts of the suitable range through time.

    Parameters
    ----------
    shifts : pandas.DataFrame
        Columns ``year, model, scenario`` and any of ``centroid_lat`` (degrees north),
        ``mean_elevation_m`` (area-weighted mean elevation of the suitable cells, m);
        one panel per column present.
    """
    _need(shifts, ("year", "model", "scenario"), "shift_plot")
    panels = [(c, lab) for c, lab in (("centroid_lat", "range centroid latitude (°N)"),
                                      ("mean_elevation_m", "mean elevation of suitable "
                                       "cells (m)")) if c in shifts.columns]
    if not panels:
        raise DataError("shift_plot: table needs `centroid_lat` or `mean_elevation_m`")
    df = shifts.copy()
    df["scenario"] = df["scenario"].astype(str)
    colours = _colours(df["scenario"])
    base = _baseline_rows(df)
    fig = Figure(figsize=(7.0, 2.8 * len(panels)), layout="constrained")
    for k, (col, lab) in enumerate(panels):
        ax = fig.add_subplot(len(panels), 1, k + 1)
        for (scen, model), g in df[df["scenario"] != "baseline"].groupby(["scenario", "model"]):
            g = pd.concat([base, g]).sort_values("year")
            ax.plot(g["year"], g[col], color=colours[scen], marker="o", markersize=3,
                    linewidth=1, alpha=0.8, label=f"{scen} / {model}")
        if len(base):
            ax.axhline(float(base[col].iloc[0]), color="black", linewidth=0.8, linestyle=":",
                       label="baseline")
        if np.ptp(df["year"].to_numpy(float)) > 1000:
            ax.set_xscale("symlog", linthresh=100.0)
        ax.set_ylabel(lab, fontsize=8)
        ax.grid(alpha=0.3)
        if k == 0:
            ax.legend(fontsize=6, ncols=2)
    ax.set_xlabel("year (CE; negative = BCE)")
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
    """
    _need(df, ("variable", "value", "suitability", "inside_calibration"), "response_curves")
    variables = list(dict.fromkeys(df["variable"].astype(str)))
    n = len(variables)
    ncols = max(1, min(ncols, n))
    nrows = int(np.ceil(n / ncols))
    fig = Figure(figsize=(3.0 * ncols, 2.4 * nrows), layout="constrained")
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
