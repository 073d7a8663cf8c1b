"""Tables: atomic CSV writing, the headers in words the report prints, and the compact
change table (one row per scenario and period) built from the long key-results table."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from timeslice.errors import DataError, InputFileError
from timeslice.report._output import output_path

# change_table, column_header, in_time_order and scope_years are public too (the report
# modules import them); they join __all__ when timeslice.report re-exports them.
__all__ = ["CHANGE_COLUMNS", "COLUMN_HEADERS", "write_csv"]


def write_csv(df: pd.DataFrame, path: str | os.PathLike, *, float_format: str | None = None) -> Path:
    """Write `df` as UTF-8 CSV (no index) to a temporary file and rename it onto `path`.

    Parameters
    ----------
    df : pandas.DataFrame
        The table; its columns become the header row.
    path : path-like
        Target file.
    float_format : str, optional
        printf-style format for floats (default: full precision, so values round-trip).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    if not isinstance(df, pd.DataFrame):
        raise DataError(f"write_csv: expected a pandas.DataFrame for {path}, got {type(df).__name__}")
    target = Path(path)
    if target.is_dir():
        raise InputFileError(f"{target}: is a folder; give a file name ending in .csv")
    with output_path(target) as tmp:
        df.to_csv(tmp, index=False, float_format=float_format, encoding="utf-8", lineterminator="\n")
    return target


# ----------------------------------------------------------------------------- headers

#: Column name -> header in words with its unit, for the tables the report shows. Columns not
#: listed are turned into words by :func:`column_header` (units read from the name's suffix).
COLUMN_HEADERS: dict[str, str] = {
    "slice": "Slice", "year": "Year (CE)", "model": "Climate model", "scenario": "Scenario",
    "period": "Period", "group": "Scenario and period", "chain": "Chain (model, scenario)",
    "suitable_area_km2": "Suitable area (km²)", "gain_km2": "Gain (km²)",
    "loss_km2": "Loss (km²)", "stable_km2": "Stable (km²)",
    "novel_area_km2": "Suitable area in novel climate (km²)",
    "centroid_lat": "Centroid latitude (°N)", "centroid_lon": "Centroid longitude (°E)",
    "centroid_shift_km": "Centroid shift (km)", "centroid_bearing_deg": "Centroid bearing (°)",
    "gain_pct": "Gain (% of reference)", "loss_pct": "Loss (% of reference)",
    "stable_pct": "Stable (% of reference)", "land_km2": "Land (km²)",
    "novel_land_share": "Land in novel climate (share)",
    "gain_novel_share": "Gain in novel climate (share)",
    "loss_novel_share": "Loss in novel climate (share)",
    "environmental_availability": "Environmental availability (share)",
    "analog_fraction": "Land in analog climate (share)",
    "reason": "Reason", "n_dropped": "Records dropped", "note": "Note",
    "summary": "Summary", "fold": "Fold", "threshold": "Threshold (suitability)",
    "auc": "AUC", "boyce": "Boyce index", "tss": "TSS", "omission": "Omission rate",
    "variable": "Variable", "importance_mean": "Importance, mean (drop in AUC)",
    "importance_sd": "Importance, SD (drop in AUC)", "kept": "Kept",
    "max_abs_r": "Largest |r| with a kept variable", "vif": "VIF",
    "role": "Role", "files": "Files", "variables": "Variables", "grid": "Grid",
    "resolution": "Resolution (°)", "lon_range": "Longitude range (°E)",
    "lat_range": "Latitude range (°N)", "units": "Units", "calendar": "Calendar",
    "time_axis": "Time axis", "converted": "Converted", "regridded": "Regridded",
    "downscaled": "Downscaled", "masked": "Masked", "file": "File",
    "sea_level_m": "Sea level (m)", "steps": "Steps", "ice_km2": "Ice (km²)",
    "topic": "Topic", "scope": "Scope", "quantity": "Quantity", "value": "Value",
    "unit": "Unit", "item": "Item", "patch": "Patch", "name": "Name", "area_km2": "Area (km²)",
    "n_cells": "Cells", "analog_share": "In analog climate (share)",
    "chains": "Chains counted", "chains_keeping_whole": "Chains keeping it whole",
    "chains_keeping_part": "Chains keeping part", "kept_share_mean": "Share kept, mean",
    "kept_whole_by": "Kept whole by", "n_models": "Models", "models": "Models",
    "all_models_km2": "Suitable in every model (km²)",
    "majority_km2": "Suitable in a majority (km²)", "any_model_km2": "Suitable in any model (km²)",
    "no_model_km2": "Suitable in no model (km²)", "source": "Source of variance",
    "mean_share": "Variance share, mean", "median_share": "Variance share, median",
    "dominant_area_km2": "Area where dominant (km²)", "hit_rate": "Hit rate",
    "expected_share": "Expected hit rate (suitable share of land)", "p_value": "p-value",
    "rule": "Threshold rule", "rule_of_run": "Rule of the run",
    "change_km2": "Change (km²)", "change_pct": "Change (% of reference)",
    "r": "Correlation r", "F": "F", "df_denominator": "Denominator df",
    "p_value_naive": "p-value, naive", "site": "Site", "lon": "Longitude (°E)",
    "lat": "Latitude (°N)", "diversity": "Genetic diversity", "stability": "Stability (share)",
    "hypothesis": "Hypothesis", "slices": "Slices", "hits": "Hits", "zone": "Zone",
    "n_train_presence": "Training presences", "n_train_background": "Training background",
    "n_test_presence": "Test presences", "n_test_background": "Test background",
    "lat_mean": "Latitude, mean (°N)", "lat_q10": "Latitude, 10th percentile (°N)",
    "lat_q50": "Latitude, median (°N)", "lat_q90": "Latitude, 90th percentile (°N)",
    "elevation_mean_m": "Elevation, mean (m)", "elevation_q10_m": "Elevation, 10th percentile (m)",
    "elevation_q50_m": "Elevation, median (m)", "elevation_q90_m": "Elevation, 90th percentile (m)",
    "analog_area_km2": "Suitable in analog climate (km²)",
    "novel_mess_km2": "Suitable, novel by MESS (km²)",
    "novel_nt1_km2": "Suitable, novel by NT1 (km²)", "novel_nt2_km2": "Suitable, novel by NT2 (km²)",
    "novel_any_km2": "Suitable, novel by any measure (km²)",
    "gain_novel_km2": "Gain in novel climate (km²)", "loss_novel_km2": "Loss in novel climate (km²)",
    "novel_land_km2": "Land in novel climate (km²)",
    **{f"{a}_{q}_km2": f"{w}, {m} (km²)"
       for a, m in (("none", "no movement"), ("limited", "limited movement"),
                    ("unlimited", "unlimited movement"))
       for q, w in (("area", "Range"), ("gain", "Range gained"), ("loss", "Range lost"))},
    "n": "Sites", "n_effective": "Effective sample size", "n_records": "Dated records",
    "n_hits": "Records in suitable cells", "n_ambiguous": "Records ambiguous",
    "n_skipped": "Records skipped", "predictor": "Predictor", "layer": "Layer",
    "distance_to_refugium_km": "Distance to the nearest refugium (km)",
    "refugium_km2": "Refugium (km²)", "refugium_share_of_land": "Refugium (share of land)",
    "p_value_records": "p-value, dated records",
    "r_stability_diversity": "Correlation r, stability and diversity",
    "p_value_diversity": "p-value, diversity", "suitable_biotic_km2": "Suitable under biotic limits (km²)",
    "removed_by_biotic_share": "Removed by biotic limits (share)",
    "gain_biotic_km2": "Gain under biotic limits (km²)",
    "loss_biotic_km2": "Loss under biotic limits (km²)", "zone_km2": "Zone area (km²)",
    "suitable_km2": "Suitable area (km²)", "refugium_share": "Refugium (share of zone)",
    "lat_min": "Latitude, lowest (°N)", "lat_max": "Latitude, highest (°N)",
    "lon_min": "Longitude, lowest (°E)", "lon_max": "Longitude, highest (°E)",
    "elevation_min_m": "Elevation, lowest (m)", "elevation_max_m": "Elevation, highest (m)",
    "exposed_shelf_km2": "Exposed shelf (km²)", "filled_km2": "Filled cells (km²)",
    "mean_suitability_calibration": "Mean suitability, calibration area",
    "mean_change_calibration": "Mean change of suitability, calibration area",
    "weighted_area_km2": "Suitability-weighted area (km²)",
    "weighted_area_change_pct": "Suitability-weighted area change (%)",
    "inside_calibration": "Inside the calibration range", "suitability": "Suitability",
}

_UNIT_SUFFIXES = (("_km2", "km²"), ("_km", "km"), ("_m", "m"), ("_deg", "°"), ("_pct", "%"),
                  ("_share", "share"))


def column_header(name: object) -> str:
    """A table column's header in words with its unit: ``suitable_area_km2`` -> "Suitable area
    (km²)".

    Parameters
    ----------
    name : object
        The column name (a table's own name, e.g. ``gain_km2``).

    Returns
    -------
    str
        The header of :data:`COLUMN_HEADERS`; else the name in words, the unit read from its
        suffix (``_km2`` km², ``_km``, ``_m``, ``_deg`` °, ``_pct`` %, ``_share``) and a
        leading ``n_`` read as "Number of". A name that is words already (it has a space) is
        returned as it is, its first letter capitalised.
    """
    text = str(name)
    if text in COLUMN_HEADERS:
        return COLUMN_HEADERS[text]
    if " " in text or "_" not in text:
        return text[:1].upper() + text[1:]
    unit = ""
    for suffix, words in _UNIT_SUFFIXES:
        if text.endswith(suffix) and len(text) > len(suffix):
            text, unit = text[: -len(suffix)], words
            break
    if text.startswith("n_"):
        text = "number of " + text[2:]
    words = text.replace("_", " ").strip()
    words = words[:1].upper() + words[1:]
    return f"{words} ({unit})" if unit else words


# ----------------------------------------------------------------------------- change table

#: The quantities of the key-results table the change table reads, by its column.
_MEDIAN = "change in suitable area, median over models"
_LOW = "change in suitable area, lowest model"
_HIGH = "change in suitable area, highest model"

#: Columns of :func:`change_table`, in order.
CHANGE_COLUMNS: tuple[str, ...] = (
    "Scenario", "Period", "Models", "Loss (km², mean of models)", "Gain (km², mean of models)",
    "Net change (km², median of models)", "Model range of net change (km²)",
    "Net change (% of reference area, median)", "Model range of net change (%)",
    "Land in novel climate (%, mean of models)",
)


def scope_years(table) -> dict[str, float]:
    """The year of each "scenario period" scope of a key-results table, for time order.

    Parameters
    ----------
    table : pandas.DataFrame or xarray.Dataset
        Per-slice rows (columns) or a series (slice coordinates) with ``scenario`` and
        ``year``, and ``period`` if there is one (else the year names the period, as in
        :func:`timeslice.series.analysis.change_rows`).

    Returns
    -------
    dict of str to float
        Scope -> the earliest year of its slices; empty when `table` lacks the columns.
    """
    if table is None:
        return {}
    if hasattr(table, "data_vars"):  # a series: its slice coordinates
        if not {"scenario", "year"} <= set(table.coords):
            return {}
        cols = {c: table[c].values for c in ("scenario", "year", "period") if c in table.coords}
        table = pd.DataFrame(cols)
    if not isinstance(table, pd.DataFrame) or not {"scenario", "year"} <= set(table.columns):
        return {}
    years = pd.to_numeric(table["year"], errors="coerce")
    out: dict[str, float] = {}
    for scope, y in zip(_scope_labels(table), years):
        if pd.notna(y):
            out[scope] = min(out.get(scope, float(y)), float(y))
    return out


def in_time_order(scopes, years: dict[str, float] | None = None) -> list:
    """`scopes` (strings, or tuples whose first item is the scope) sorted by year, oldest
    first; scopes of the same year, or without one, keep their order (those without last).

    Parameters
    ----------
    scopes : sequence
        Scope strings ("scenario period") or tuples starting with one.
    years : dict of str to float, optional
        :func:`scope_years`; without it the order is kept.

    Returns
    -------
    list
    """
    items = list(scopes)
    if not years:
        return items

    def key(pair):
        k, item = pair
        scope = item[0] if isinstance(item, tuple) else item
        y = years.get(str(scope))
        return (0, y, k) if y is not None else (1, 0.0, k)

    return [item for _, item in sorted(enumerate(items), key=key)]


def change_table(results: pd.DataFrame | None,
                 summary: pd.DataFrame | None = None) -> pd.DataFrame:
    """One row per scenario and period with the change in suitable area, from the long
    key-results table (:func:`timeslice.series.analysis.key_results`).

    Parameters
    ----------
    results : pandas.DataFrame
        Key results: ``topic, scope, quantity, value, unit``.
    summary : pandas.DataFrame, optional
        The per-slice summary (``slice, year, scenario, period, gain_km2, loss_km2``): rows in
        time order (oldest first, :func:`scope_years`), and loss and gain for the periods the
        key results give none of.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`CHANGE_COLUMNS`. Net change in km² is the key results' change in % of
        the reference area times that area over 100 (the median, lowest and highest model);
        the ranges are written "lowest to highest". Loss and gain are the mean over models:
        the key results' rows where they have them (the last future period), else the mean of
        the summary's ``loss_km2`` / ``gain_km2`` over the scope's slices (the same mean),
        else empty. Empty table when there is no change row.
    """
    from timeslice.series.analysis import change_by_scope

    if results is None or results.empty or "topic" not in results.columns:
        return pd.DataFrame(columns=list(CHANGE_COLUMNS))
    ref = results[results["topic"] == "reference"]
    a0 = float(ref["value"].iloc[0]) if len(ref) else float("nan")
    means = _summary_means(summary)
    rows = []
    for scope, g in in_time_order(change_by_scope(results), scope_years(summary)):
        scen, _, per = scope.partition(" ") if " " in scope else ("", "", scope)
        own = results[(results["topic"] == "change") & (results["scope"] == scope)]
        got = {**means.get(scope, {}), **dict(zip(own["quantity"], own["value"].astype(float)))}
        med, low, high = g[_MEDIAN], g.get(_LOW, g[_MEDIAN]), g.get(_HIGH, g[_MEDIAN])
        land = g.get("share of land in novel climate", float("nan"))
        rows.append({
            "Scenario": scen, "Period": per, "Models": int(g.get("models", 1)),
            "Loss (km², mean of models)": got.get("suitable area lost", float("nan")),
            "Gain (km², mean of models)": got.get("suitable area gained", float("nan")),
            "Net change (km², median of models)": med * a0 / 100.0,
            "Model range of net change (km²)": _range(low * a0 / 100.0, high * a0 / 100.0,
                                                      "{:+,.0f}"),
            "Net change (% of reference area, median)": med,
            "Model range of net change (%)": _range(low, high, "{:+.0f}"),
            "Land in novel climate (%, mean of models)": 100.0 * land,
        })
    return pd.DataFrame(rows, columns=list(CHANGE_COLUMNS))


def _summary_means(summary: pd.DataFrame | None) -> dict[str, dict[str, float]]:
    """Scope -> mean over its slices of loss and gain, from a per-slice summary."""
    need = {"scenario", "year", "gain_km2", "loss_km2"}
    if not isinstance(summary, pd.DataFrame) or not need <= set(summary.columns):
        return {}
    out = {}
    for scope, g in summary.groupby(_scope_labels(summary).to_numpy(), sort=False):
        out[str(scope)] = {"suitable area lost": float(g["loss_km2"].mean()),
                           "suitable area gained": float(g["gain_km2"].mean())}
    return out


def _scope_labels(table: pd.DataFrame) -> pd.Series:
    """The "scenario period" scope of each row of a per-slice table (the year names the
    period where the table has no ``period``, as in the key results)."""
    periods = (table["period"].astype(str) if "period" in table.columns
               else pd.to_numeric(table["year"], errors="coerce").map(lambda y: f"{y:g}"))
    return table["scenario"].astype(str) + " " + periods


def _range(low: float, high: float, fmt: str) -> str:
    if not (np.isfinite(low) and np.isfinite(high)):
        return ""
    return f"{fmt.format(low)} to {fmt.format(high)}"
