"""Refugium hypotheses compared side by side: each named window scored against the evidence.

A phylogeographer usually holds several refugium hypotheses at once (glacial maximum only,
glacial to present, the whole series...). For each, the refugium and stability layers of its
window are scored against the same evidence: the dated records (how many fall in the
hypothesis' refugium, against the share of land it covers, a one-sided binomial test) and, when
given, the genetic diversity of sampled populations (Dutilleul's modified t-test of stability
against diversity).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd
import xarray as xr
from scipy import stats

from timeslice.errors import DataError

__all__ = ["compare_hypotheses"]


def compare_hypotheses(
    stack: xr.Dataset,
    windows: Mapping[str, list[str]],
    *,
    records: pd.DataFrame | None = None,
    sites: pd.DataFrame | None = None,
) -> tuple[pd.DataFrame, xr.Dataset]:
    """Score named refugium windows against dated records and genetic diversity.

    Parameters
    ----------
    stack : xarray.Dataset
        The stacked series (``suitable`` per slice, ``land``).
    windows : mapping
        Hypothesis name -> slice labels or periods of its window.
    records : pandas.DataFrame, optional
        Dated records (``lon``, ``lat``; any age): each counts as a hit when it lies in the
        hypothesis' refugium.
    sites : pandas.DataFrame, optional
        Sampled populations (:func:`timeslice.series.genetics.read_diversity_table`).

    Returns
    -------
    (table, layers)
        One row per hypothesis: ``hypothesis, slices, refugium_km2, refugium_share_of_land``,
        with records ``n_records, hits, hit_rate, p_value_records`` (binomial, one-sided,
        expected rate = the refugium's share of land), with sites ``r_stability_diversity,
        n_effective, p_value_diversity``. `layers` holds ``refugium_<name>`` and
        ``stability_<name>``.
    """
    from timeslice.grid import cell_area
    from timeslice.series.genetics import modified_t_test, sample_layer
    from timeslice.series.stability import refugium, select_window, stability

    if not windows:
        raise DataError("hypotheses: give at least one named window")
    area = cell_area(stack)
    land = stack["land"] if "land" in stack else (stack["suitable"] >= 0)
    if "slice" in land.dims:
        land = land.any("slice")  # land in any slice of the series
    land_km2 = float(area.where(land.astype(bool)).sum())
    rows, layers = [], {}
    for name, window in windows.items():
        sub = select_window(stack["suitable"], list(window))
        ref = refugium(stack["suitable"], window=list(window))
        stab = stability(sub)
        key = str(name)
        layers[f"refugium_{key}"] = ref.drop_vars([c for c in ref.coords if c not in ("lat", "lon")])
        layers[f"stability_{key}"] = stab.drop_vars([c for c in stab.coords if c not in ("lat", "lon")])
        ref_km2 = float(area.where(ref.astype(bool)).sum())
        share = ref_km2 / land_km2 if land_km2 > 0 else np.nan
        row = {"hypothesis": key, "slices": " ".join(map(str, sub["slice"].values)),
               "refugium_km2": ref_km2, "refugium_share_of_land": share}
        if records is not None and len(records):
            inside = sample_layer(ref.astype(float), records["lon"], records["lat"])
            on_grid = np.isfinite(inside)
            hits = int((inside[on_grid] == 1).sum())
            n = int(on_grid.sum())
            row.update(n_records=n, hits=hits, hit_rate=hits / n if n else np.nan,
                       p_value_records=(float(stats.binomtest(hits, n, share,
                                                              alternative="greater").pvalue)
                                        if n and 0 < share < 1 else np.nan))
        if sites is not None and len(sites):
            s = sample_layer(stab, sites["lon"], sites["lat"])
            ok = np.isfinite(s)
            if ok.sum() >= 5 and np.ptp(s[ok]) > 0:
                res = modified_t_test(s, sites["diversity"], sites["lon"], sites["lat"])
                row.update(r_stability_diversity=res["r"], n_effective=res["n_effective"],
                           p_value_diversity=res["p_value"])
            else:
                row.update(r_stability_diversity=np.nan, n_effective=np.nan,
                           p_value_diversity=np.nan)
        rows.append(row)
    return pd.DataFrame(rows), xr.Dataset(layers)
