"""How much the headline hangs on the threshold: areas and change under every threshold rule,
side by side, and change summaries of the continuous suitability that need no threshold.

The suitable area of a slice is the area where suitability reaches a threshold, and the
threshold is a choice (:func:`timeslice.niche.evaluate.threshold`). Here every rule is applied
to the same ``suitability`` layer of every slice, so a reader sees whether the sign and size of
a change survive another reasonable choice; the threshold-free summaries (mean suitability
over the calibration area, suitability-weighted area) need no choice at all.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_area
from timeslice.series._checks import check_label, check_stack, slice_labels

__all__ = [
    "THRESHOLD_COLUMNS",
    "CONTINUOUS_COLUMNS",
    "continuous_change_table",
    "rule_thresholds",
    "sensitivity_summary",
    "threshold_table",
]

#: Columns of :func:`threshold_table`.
THRESHOLD_COLUMNS = (
    "rule", "threshold", "rule_of_run", "slice", "year", "period", "model", "scenario",
    "suitable_area_km2", "change_km2", "change_pct", "gain_km2", "loss_km2",
)
#: Columns of :func:`continuous_change_table`.
CONTINUOUS_COLUMNS = (
    "slice", "year", "period", "model", "scenario", "mean_suitability_calibration",
    "mean_change_calibration", "weighted_area_km2", "weighted_area_change_pct",
)


def rule_thresholds(fit, *, value: float | None = None) -> dict[str, float]:
    """The threshold of every rule from the fit's own training scores.

    Parameters
    ----------
    fit : timeslice.niche.workflow.NicheFit
        The fitted niche (model, presence and background rows with the predictors).
    value : float, optional
        The threshold of the ``fixed`` rule; without it that rule is left out.

    Returns
    -------
    dict of str to float
        ``p10``, ``mtp``, ``max_sss``, ``equal_ss`` (and ``fixed``), each from
        :func:`timeslice.niche.evaluate.threshold` on the scores of
        :func:`timeslice.niche.evaluate.training_scores` (the rows the fit was made on, in the
        fit's order: presences, then background), exactly as the fit chose its own.
    """
    from timeslice.niche import evaluate as nev

    variables = list(fit.variables)
    X = pd.concat([fit.presence[variables], fit.background[variables]], ignore_index=True)
    s = nev.training_scores(fit.model, X)
    n_pres = len(fit.presence)
    pres, back = s[:n_pres], s[n_pres:]
    out = {rule: nev.threshold(pres, back, rule=rule)
           for rule in ("p10", "mtp", "max_sss", "equal_ss")}
    if value is not None:
        out["fixed"] = nev.threshold(pres, back, rule="fixed", value=value)
    return out


def _meta(stack: xr.Dataset, i: int) -> dict:
    row = {}
    for key in ("year", "period", "model", "scenario"):
        if key in stack.coords and stack[key].dims == ("slice",):
            v = stack[key].values[i]
            row[key] = float(v) if key == "year" else str(v)
        else:
            row[key] = np.nan if key == "year" else ""
    return row


def _land_values(stack: xr.Dataset) -> tuple[np.ndarray, np.ndarray]:
    """Suitability (slice, lat, lon) as float with NaN off land, and the land mask."""
    s = np.asarray(stack["suitability"].transpose("slice", "lat", "lon").values, dtype=float)
    if "land" in stack.data_vars:
        land = np.asarray(stack["land"].broadcast_like(stack["suitability"])
                          .transpose("slice", "lat", "lon").values).astype(bool)
    else:
        land = np.isfinite(s)
    return np.where(land, s, np.nan), land


def threshold_table(
    stack: xr.Dataset,
    thresholds: Mapping[str, float],
    *,
    reference: str,
    rule_of_run: str | None = None,
) -> pd.DataFrame:
    """Suitable area and change against the reference slice under each threshold.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitability`` (and ``land``).
    thresholds : mapping of str to float
        Rule name -> threshold (:func:`rule_thresholds`).
    reference : str
        Label of the reference slice.
    rule_of_run : str, optional
        The rule the run's maps use (flagged in the ``rule_of_run`` column).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`THRESHOLD_COLUMNS`, one row per rule and slice: the suitable area
        :math:`A_t = \\sum_{c:\\,s_c \\ge t} a_c` over land cells (cell areas :math:`a_c` on the
        authalic sphere), its change against the reference :math:`A_t - A_{ref}` in km² and
        in % of :math:`A_{ref}` (NaN when :math:`A_{ref}` is 0), gain and loss. Suitability
        and threshold are compared in the layer's precision (float32 in a run), so a cell
        scoring exactly the threshold stays suitable, as in the run's ``suitable`` layer.
    """
    check_stack(stack, required=("suitability",))
    check_label(stack, reference)
    if not thresholds:
        raise DataError("threshold_table: give at least one threshold rule")
    for rule, t in thresholds.items():
        if not np.isfinite(t) or not 0.0 <= float(t) <= 1.0:
            raise DataError(f"threshold_table: threshold of rule {rule!r} must be in [0, 1], "
                            f"got {t}")
    labels = slice_labels(stack)
    ref_i = labels.index(reference)
    area = cell_area(stack).values
    s, _ = _land_values(stack)
    rows = []
    # compared in the layer's own precision: a threshold is a training score, and the cells
    # scoring exactly that value (float64 in the fit) are rounded to float32 in the layer; in
    # float64 they would fall just below their own threshold
    dtype = stack["suitability"].dtype if stack["suitability"].dtype.kind == "f" else np.float64
    s = s.astype(dtype)
    for rule, t in thresholds.items():
        with np.errstate(invalid="ignore"):
            on = np.isfinite(s) & (s >= np.asarray(t, dtype=dtype))
        a_ref = float(area[on[ref_i]].sum())
        for i, label in enumerate(labels):
            a = float(area[on[i]].sum())
            rows.append({
                "rule": rule, "threshold": float(t), "rule_of_run": rule == rule_of_run,
                "slice": label, **_meta(stack, i), "suitable_area_km2": a,
                "change_km2": a - a_ref,
                "change_pct": 100.0 * (a - a_ref) / a_ref if a_ref > 0 else np.nan,
                "gain_km2": float(area[on[i] & ~on[ref_i]].sum()),
                "loss_km2": float(area[~on[i] & on[ref_i]].sum()),
            })
    return pd.DataFrame(rows, columns=list(THRESHOLD_COLUMNS))


def continuous_change_table(stack: xr.Dataset, *, reference: str) -> pd.DataFrame:
    """Threshold-free change: mean suitability over the calibration area and the
    suitability-weighted area, per slice, against the reference slice.

    Parameters
    ----------
    stack : xarray.Dataset
        Stacked series with ``suitability``, ``land`` and ``calibration_area`` (lat, lon);
        without ``calibration_area`` every land cell counts.
    reference : str
        Label of the reference slice.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`CONTINUOUS_COLUMNS`:

        * ``mean_suitability_calibration``: area-weighted mean suitability over the
          calibration-area cells that are land in the slice;
        * ``mean_change_calibration``: area-weighted mean of :math:`s_t - s_{ref}` over the
          calibration-area cells that are land in both (paired, so a change of the coast does
          not pass for a change of climate);
        * ``weighted_area_km2``: :math:`\\sum_c s_c a_c` over land, a threshold-free "expected
          suitable area", and ``weighted_area_change_pct`` its change in % of the reference.
    """
    check_stack(stack, required=("suitability",))
    check_label(stack, reference)
    labels = slice_labels(stack)
    ref_i = labels.index(reference)
    area = cell_area(stack).values
    s, _ = _land_values(stack)
    calib = (np.asarray(stack["calibration_area"].transpose("lat", "lon").values).astype(bool)
             if "calibration_area" in stack.data_vars else np.ones(area.shape, dtype=bool))
    w_ref = float(np.nansum(s[ref_i] * area))
    rows = []
    for i, label in enumerate(labels):
        here = calib & np.isfinite(s[i])
        both = here & np.isfinite(s[ref_i])
        a_here, a_both = area[here].sum(), area[both].sum()
        w = float(np.nansum(s[i] * area))
        rows.append({
            "slice": label, **_meta(stack, i),
            "mean_suitability_calibration": (float((s[i][here] * area[here]).sum() / a_here)
                                             if a_here > 0 else np.nan),
            "mean_change_calibration": (float(((s[i] - s[ref_i])[both] * area[both]).sum()
                                              / a_both) if a_both > 0 else np.nan),
            "weighted_area_km2": w,
            "weighted_area_change_pct": 100.0 * (w - w_ref) / w_ref if w_ref > 0 else np.nan,
        })
    return pd.DataFrame(rows, columns=list(CONTINUOUS_COLUMNS))


def sensitivity_summary(thresholds: pd.DataFrame, continuous: pd.DataFrame, *,
                        reference: str) -> pd.DataFrame:
    """One compact row per scenario and period: the median over models of the change in
    suitable area (%) under each rule beside the threshold-free changes.

    Parameters
    ----------
    thresholds, continuous : pandas.DataFrame
        From :func:`threshold_table` and :func:`continuous_change_table`.
    reference : str
        Label of the reference slice (left out).

    Returns
    -------
    pandas.DataFrame
        ``scenario, period, models``, then ``change % (<rule>, t = <threshold>)`` per rule
        (", run" marks the run's own rule),
        ``spread over rules (pp)`` (highest minus lowest of those medians, percentage
        points), ``mean suitability change (calibration area)`` and ``suitability-weighted
        area change %``. Medians over models, as in the key results.
    """
    t = thresholds[thresholds["slice"] != reference]
    c = continuous[continuous["slice"] != reference]
    keys = ["scenario", "period"]
    order = list(dict.fromkeys(zip(t["scenario"], t["period"])))
    rows = []
    for scen, per in order:
        g = t[(t["scenario"] == scen) & (t["period"] == per)]
        gc = c[(c["scenario"] == scen) & (c["period"] == per)]
        row: dict = {"scenario": scen, "period": per, "models": int(g["slice"].nunique())}
        meds = []
        for rule, gr in g.groupby("rule", sort=False):
            med = float(np.median(gr["change_pct"])) if gr["change_pct"].notna().any() else np.nan
            meds.append(med)
            mark = ", run" if bool(gr["rule_of_run"].iloc[0]) else ""
            row[f"change % ({rule}, t = {gr['threshold'].iloc[0]:.3g}{mark})"] = med
        finite = [m for m in meds if np.isfinite(m)]
        row["spread over rules (pp)"] = max(finite) - min(finite) if finite else np.nan
        row["mean suitability change (calibration area)"] = float(
            np.median(gc["mean_change_calibration"])) if len(gc) else np.nan
        row["suitability-weighted area change %"] = float(
            np.median(gc["weighted_area_change_pct"])) if len(gc) else np.nan
        rows.append(row)
    out = pd.DataFrame(rows)
    return out if not out.empty else pd.DataFrame(columns=keys)
