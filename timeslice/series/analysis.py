"""Everything the series stage reports, in one call (for the pipeline and the CLI)."""

from __future__ import annotations

import dataclasses
import warnings
from collections.abc import Sequence
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.errors import TimesliceWarning
from timeslice.series._checks import check_stack
from timeslice.series.table import SUMMARY_COLUMNS
from timeslice.series.dispersal import parse_rate
from timeslice.series.ensemble import agreement, agreement_table, factorial, partition
from timeslice.series.ensemble import partition_table
from timeslice.series.hindcast import check as hindcast_check
from timeslice.series.stacking import chains as find_chains
from timeslice.series.summary import movement_table, summarise

__all__ = ["SeriesResult", "analyse_series", "change_by_scope", "change_rows", "key_results"]


@dataclasses.dataclass
class SeriesResult:
    """Outputs of :func:`analyse_series`.

    Parameters
    ----------
    series : xarray.Dataset
        The stacked series with every summary layer (for ``series.nc``).
    ensemble : xarray.Dataset or None
        Agreement and variance partitioning across climate models (for ``ensemble.nc``);
        None with fewer than two models.
    tables : dict of str to pandas.DataFrame
        ``"summary"`` (one row per slice, exactly the summary.csv columns), ``"detail"``
        (the same rows with every detail and movement column) and, where computed,
        ``"movement"``, ``"agreement"``, ``"partition"``, ``"hindcast"``.
    notes : list of str
        What was skipped and why (for the report and the log).
    reference : str or None
        Label of the reference slice that change is measured against.
    window : object
        The refugium window used (slice labels/periods, a year range, or None for all slices).
    """

    series: xr.Dataset
    ensemble: xr.Dataset | None
    tables: dict[str, pd.DataFrame]
    notes: list[str]
    #: label of the reference slice that change is measured against
    reference: str | None = None
    #: the refugium window used (slice labels/periods, a year range, or None for all slices)
    window: object = None


def _models(stack: xr.Dataset) -> list[str]:
    if "model" not in stack.coords:
        return []
    return sorted({str(m) for m in stack["model"].values} - {"observed"})


def _partition_by_period(stack: xr.Dataset, factors: Sequence[str] | None, notes: list[str]):
    if "period" not in stack.coords or "scenario" not in stack.coords:
        notes.append("partition: no period/scenario coordinates; skipped")
        return None
    scen = np.asarray(stack["scenario"].values).astype(str)
    per = np.asarray(stack["period"].values).astype(str)
    future = ~np.isin(scen, ["baseline", "past"])
    results, periods = [], []
    for p in dict.fromkeys(per[future]):
        sub = stack.isel(slice=np.flatnonzero(future & (per == p)))
        if factors is None:
            cand = [f for f in ("algorithm", "model", "scenario")
                    if (f in sub["suitability"].dims and sub.sizes[f] > 1)
                    or (f in sub.coords and sub[f].dims == ("slice",)
                        and len(set(map(str, sub[f].values))) > 1)]
            if len(cand) < 2:
                notes.append(f"partition {p}: fewer than two factors with two or more levels "
                             f"({cand or 'none'}); skipped")
                continue
        else:
            cand = list(factors)
        try:
            design = factorial(sub, factors=cand)
            parts = partition(design, factors=cand)
        except DataError as err:
            if factors is not None:  # asked for explicitly: the user must fix it
                raise
            notes.append(f"partition {p}: skipped ({err})")
            continue
        results.append(parts)
        periods.append(p)
    if not results:
        return None
    srcs = [tuple(r["source"].values) for r in results]
    if len(set(srcs)) > 1:
        notes.append("partition: periods have different factors; only the first kept")
        results, periods = results[:1], periods[:1]
    out = xr.concat(results, dim=xr.DataArray(periods, dims="partition_period",
                                              name="partition_period"),
                    combine_attrs="override")
    return out


def analyse_series(
    stack: xr.Dataset,
    *,
    reference: str = "baseline",
    window=None,
    rate: str | None = None,
    through: Literal["land", "suitable", "any"] = "land",
    neighbours: Literal[8, 16] = 8,
    factors: Sequence[str] | None = None,
    records: pd.DataFrame | None = None,
    records_source: str = "dated records",
    max_offset_years: float | None = None,
    rate_key: str = "rate",
) -> SeriesResult:
    """Summarise a stacked series fully: change, stability, refugia, movement, ensembles,
    hindcast.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series (see docs/architecture.md).
    reference : str, default "baseline"
        Label of the reference slice for gain/loss/stable.
    window : list of slice labels or (year_min, year_max), optional
        Refugium window (e.g. ``(-19050, 2000)`` for 21 ka BP to the present).
    rate : str, optional
        Spread rate with units for limited movement and dynamic stability.
    through, neighbours
        Movement rule and graph (see :func:`timeslice.series.dispersal.reachable`).
    factors : sequence of str, optional
        Ensemble factors for the variance partitioning; default: those of ``algorithm``,
        ``model``, ``scenario`` with at least two levels, per future period. Given explicitly,
        a factor with one level is an error.
    records : pandas.DataFrame, optional
        Dated records (``lon``, ``lat``, ``age_bp``) for the hindcast check, run on every paleo
        chain (one per model).
    records_source : str
        File name for messages.
    max_offset_years : float, optional
        Cap on |record year − slice year| in the hindcast.
    rate_key : str, default "rate"
        Name of the rate setting in error messages (e.g. ``"series.dispersal_rate"``).

    Returns
    -------
    SeriesResult
        The summarised series, the ensemble layers (two models or more), the tables by
        name, and notes on what was skipped.
    """
    check_stack(stack)
    if rate is not None:
        parse_rate(rate, name=rate_key)  # fail early, naming the setting
    notes: list[str] = []
    series, summary = summarise(stack, reference=reference, chains="auto", detail=True,
                                window=window, rate=rate, through=through,
                                neighbours=neighbours)
    tables: dict[str, pd.DataFrame] = {"summary": summary[SUMMARY_COLUMNS], "detail": summary}
    chain_map = find_chains(stack, reference=reference)
    if chain_map:
        tables["movement"] = movement_table(stack, reference=reference, chains=chain_map,
                                            rate=rate, through=through, neighbours=neighbours)
    if rate is None:
        notes.append("movement: no rate given; limited movement and dynamic stability skipped")
    ensemble = None
    if len(_models(stack)) >= 2:
        agree = agreement(stack)
        tables["agreement"] = agreement_table(agree)
        ensemble = agree
        if "suitability" in stack.data_vars:
            parts = _partition_by_period(stack, factors, notes)
            if parts is not None:
                ensemble = xr.merge([agree, parts.rename({"share": "variance_share"})],
                                    combine_attrs="drop_conflicts")
                rows = []
                for p in parts["partition_period"].values:
                    t = partition_table(parts.sel(partition_period=p))
                    t.insert(0, "period", str(p))
                    rows.append(t)
                tables["partition"] = pd.concat(rows, ignore_index=True)
    else:
        notes.append("ensemble: fewer than two climate models; agreement and partitioning "
                     "skipped")
    if records is not None:
        tables["hindcast"] = _hindcast(stack, chain_map, records, records_source,
                                       max_offset_years, notes)
    return SeriesResult(series=series, ensemble=ensemble, tables=tables, notes=notes,
                        reference=reference, window=window)


def _hindcast(stack: xr.Dataset, chain_map, records: pd.DataFrame, records_source: str,
              max_offset_years: float | None, notes: list[str]) -> pd.DataFrame:
    """The hindcast check on every paleo chain; a warning repeated by every chain once."""
    paleo = {k: v for k, v in chain_map.items()
             if "scenario" in stack.coords
             and str(stack["scenario"].sel(slice=v[0]).values) == "past"}
    if not paleo:
        raise DataError(f"{records_source}: the series has no past slices to check dated "
                        "records against; add paleo slices or leave the records out")
    rows = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", TimesliceWarning)
        for name, labels in paleo.items():
            t = hindcast_check(records, stack.sel(slice=labels), source=records_source,
                               max_offset_years=max_offset_years)
            t.insert(0, "chain", name)
            rows.append(t)
    # the same records are skipped in every chain: say so once
    for msg in dict.fromkeys(str(w.message) for w in caught
                             if issubclass(w.category, TimesliceWarning)):
        # stacklevel 3: the caller of analyse_series
        warnings.warn(msg, TimesliceWarning, stacklevel=3)
        notes.append(f"hindcast: {msg}")
    for w in caught:
        if not issubclass(w.category, TimesliceWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    return pd.concat(rows, ignore_index=True)


def change_rows(detail: pd.DataFrame, *, reference: str,
                periods: dict[str, str] | None = None) -> list[dict]:
    """Headline change rows from a per-slice summary: the one place these numbers come from.

    Parameters
    ----------
    detail : pandas.DataFrame
        Per-slice summary (``slice``, ``year``, ``scenario``, ``suitable_area_km2``; optional
        ``period`` and the novel-share columns of the detail table).
    reference : str
        Label of the reference slice.
    periods : dict, optional
        Slice label -> period text (default: the ``period`` column, else the year).

    Returns
    -------
    list of dict
        Rows ``topic, scope, quantity, value, unit``: the reference's suitable area; per
        scenario and period the change in suitable area in % of the reference area,
        :math:`100 (A_t - A_{ref}) / A_{ref}` (median, lowest and highest model), the number of
        models, and the mean over models of the shares of land, of the gain and of the loss in
        novel climate.
    """
    rows: list[dict] = []

    def add(topic, scope, quantity, value, unit):
        rows.append({"topic": topic, "scope": scope, "quantity": quantity,
                     "value": float(value), "unit": unit})

    if detail is None or detail.empty or reference not in set(map(str, detail["slice"])):
        return rows
    d = detail.assign(slice=detail["slice"].astype(str), scenario=detail["scenario"].astype(str))
    a0 = float(d.loc[d["slice"] == reference, "suitable_area_km2"].iloc[0])
    add("reference", reference, "suitable area", a0, "km2")
    if periods is None and "period" in d:
        periods = dict(zip(d["slice"], d["period"].astype(str)))
    periods = periods or {}
    d = d.assign(period=[periods.get(x, f"{y:g}") for x, y in zip(d["slice"], d["year"])])
    d = d[d["slice"] != reference]
    for (scen, per), g in d.groupby(["scenario", "period"], sort=False):
        scope = f"{scen} {per}"
        if a0 > 0:
            pct = 100.0 * (g["suitable_area_km2"].to_numpy(float) - a0) / a0
            add("change", scope, "change in suitable area, median over models",
                np.median(pct), "%")
            add("change", scope, "change in suitable area, lowest model", pct.min(), "%")
            add("change", scope, "change in suitable area, highest model", pct.max(), "%")
        add("change", scope, "models", len(g), "1")
        for col, words in (("novel_land_share", "share of land in novel climate"),
                           ("gain_novel_share", "share of the gain in novel climate"),
                           ("loss_novel_share", "share of the loss in novel climate")):
            if col in g and g[col].notna().any():
                add("novelty", scope, words, g[col].mean(), "1")
    return rows


def change_by_scope(results: pd.DataFrame) -> list[tuple[str, dict[str, float]]]:
    """The change and novelty rows of a key-results table grouped by scope (scenario and
    period), in table order: ``[(scope, {quantity: value}), ...]``, only scopes with a change.

    The report cards, the report's findings and the command line read their numbers here.

    Parameters
    ----------
    results : pandas.DataFrame
        A key-results table (:func:`key_results`).

    Returns
    -------
    list of (str, dict of str to float)
        Scope and its quantities, in table order.
    """
    if results is None or results.empty:
        return []
    k = results[results["topic"].isin(["change", "novelty"])]
    out = []
    for scope in dict.fromkeys(k.loc[k["topic"] == "change", "scope"]):
        sub = k[k["scope"] == scope].drop_duplicates("quantity")
        values = dict(zip(sub["quantity"], sub["value"].astype(float)))
        if "change in suitable area, median over models" in values:
            out.append((str(scope), values))
    return out


def key_results(result: SeriesResult, *, horizon: str | None = None) -> pd.DataFrame:
    """The headline numbers of a series, one row each, for reports and logs.

    Parameters
    ----------
    result : SeriesResult
        From :func:`analyse_series`.
    horizon : str, optional
        Future period to report (default: the latest future period in the series).

    Returns
    -------
    pandas.DataFrame
        Columns ``topic, scope, quantity, value, unit``: the reference slice's suitable area;
        per scenario and period the change in suitable area in % of the reference area
        (median, lowest and highest model, :math:`100 (A_t - A_{ref}) / A_{ref}`) and the mean
        over models of the shares of land, of the gain and of the loss in novel climate;
        refugium area per paleo chain and
        over the window; per scenario at the horizon, the mean over models of the area lost and
        gained under each movement assumption and of the share of the gain in novel climate;
        the area where every model / a majority agrees; the mean variance share of each
        source; the pooled hindcast hit rate, expected share and p-value per paleo chain.
        Means over models are plain means (each model one vote).
    """
    from timeslice.grid import cell_area

    rows: list[dict] = []

    def add(topic, scope, quantity, value, unit):
        rows.append({"topic": topic, "scope": scope, "quantity": quantity,
                     "value": float(value), "unit": unit})

    series = result.series
    area = cell_area(series)
    if result.reference is not None:
        periods = (dict(zip(map(str, series["slice"].values), map(str, series["period"].values)))
                   if "period" in series.coords else None)
        rows += change_rows(result.tables.get("detail"), reference=result.reference,
                            periods=periods)
    if "refugium_chain" in series:
        scen = dict(zip(map(str, series["slice"].values),
                        map(str, series["scenario"].values))) if "scenario" in series.coords \
            else {}
        for chain, slices in zip(series["chain"].values, series["chain_slices"].values):
            if scen.get(str(slices).split()[0]) == "past":
                ref = series["refugium_chain"].sel(chain=chain)
                add("refugia", str(chain), "refugium area", float((area * ref).sum()), "km2")
    if "refugium_window" in series:
        add("refugia", "window, all models", "refugium area",
            float((area * series["refugium_window"]).sum()), "km2")
    if "refugium_window_analog" in series:
        add("refugia", "window, all models", "refugium area in analog climate",
            float((area * series["refugium_window_analog"]).sum()), "km2")
    detail = result.tables.get("detail")
    if detail is not None and "period" in series.coords:
        period = dict(zip(map(str, series["slice"].values), map(str, series["period"].values)))
        d = detail.assign(period=[period.get(str(s), "") for s in detail["slice"]])
        future = d[~d["scenario"].isin(["baseline", "past"])]
        if horizon is None and not future.empty:
            horizon = str(future.sort_values("year")["period"].iloc[-1])
        for scen, g in future[future["period"] == horizon].groupby("scenario", sort=False):
            scope = f"{scen} {horizon}"
            add("change", scope, "suitable area lost", g["loss_km2"].mean(), "km2")
            add("change", scope, "suitable area gained", g["gain_km2"].mean(), "km2")
            for a, words in (("none", "no movement"), ("limited", "limited movement"),
                             ("unlimited", "unlimited movement")):
                if f"{a}_loss_km2" in g:
                    add("movement", scope, f"range lost, {words}",
                        g[f"{a}_loss_km2"].mean(), "km2")
                    add("movement", scope, f"range gained, {words}",
                        g[f"{a}_gain_km2"].mean(), "km2")
    agree = result.tables.get("agreement")
    if agree is not None:
        for _, r in agree.iterrows():
            scope = f"{r.get('scenario', '')} {r.get('period', '')}".strip()
            add("agreement", scope, "area suitable in every model", r["all_models_km2"], "km2")
            add("agreement", scope, "area suitable in a majority of models",
                r["majority_km2"], "km2")
    part = result.tables.get("partition")
    if part is not None:
        for _, r in part.iterrows():
            add("uncertainty", str(r["period"]), f"variance share: {r['source']}",
                r["mean_share"], "1")
    hind = result.tables.get("hindcast")
    if hind is not None:
        for _, r in hind[hind["slice"] == "all"].iterrows():
            add("hindcast", str(r["chain"]), "hit rate of dated records", r["hit_rate"], "1")
            add("hindcast", str(r["chain"]), "suitable share of land (expected)",
                r["expected_share"], "1")
            add("hindcast", str(r["chain"]), "one-sided p-value", r["p_value"], "1")
    return pd.DataFrame(rows, columns=["topic", "scope", "quantity", "value", "unit"])
