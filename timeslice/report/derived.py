"""Tables derived from a summarised series for the report: refugium patches and the threshold
sensitivity (one call for the pipeline's report stage)."""

from __future__ import annotations

import pandas as pd
import xarray as xr

__all__ = ["derived_tables"]


def derived_tables(
    series: xr.Dataset,
    *,
    fit,
    reference: str,
    threshold_value: float | None = None,
    refugium: str | None = None,
) -> tuple[dict[str, pd.DataFrame], tuple[xr.DataArray, pd.DataFrame] | None]:
    """Patch and threshold tables of a run.

    Parameters
    ----------
    series : xarray.Dataset
        The summarised series (loaded).
    fit : timeslice.niche.workflow.NicheFit
        The fit, for the training scores every threshold rule is computed from.
    reference : str
        Label of the reference slice.
    threshold_value : float, optional
        The ``fixed`` rule's threshold (``niche.threshold_value``); without it that rule is
        left out.
    refugium : str, optional
        Refugium layer to cut into patches (default
        :func:`timeslice.series.patches.refugium_layer`).

    Returns
    -------
    (dict of str to pandas.DataFrame, (labels, table) or None)
        Tables ``refugium_patches`` (when the series has a refugium layer),
        ``threshold_sensitivity`` (every rule x slice), ``suitability_change`` (threshold-free,
        per slice) and ``threshold_summary`` (one row per scenario and period); and the patch
        labels with their table for the vector export.
    """
    from timeslice.series.patches import refugium_layer, refugium_patches
    from timeslice.series.thresholds import (
        continuous_change_table,
        rule_thresholds,
        sensitivity_summary,
        threshold_table,
    )

    tables: dict[str, pd.DataFrame] = {}
    patches = None
    layer = refugium or refugium_layer(series)
    if layer is not None and layer in series.data_vars:
        patches = refugium_patches(series, layer=layer)
        tables["refugium_patches"] = patches[1]
    if "suitability" in series.data_vars:
        rules = rule_thresholds(fit, value=threshold_value)
        run_rule = str(getattr(fit, "params", {}).get("threshold_rule", ""))
        thr = threshold_table(series, rules, reference=reference, rule_of_run=run_rule)
        cont = continuous_change_table(series, reference=reference)
        tables["threshold_sensitivity"] = thr
        tables["suitability_change"] = cont
        tables["threshold_summary"] = sensitivity_summary(thr, cont, reference=reference)
    return tables, patches
