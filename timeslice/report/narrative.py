"""Plain-language text for the report: the methods paragraph and the key findings.

Everything here is built from the recorded choices of a run (explicit arguments, not the config
object), so the text states exactly what was done, with the citation of each method.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["findings", "methods_paragraph", "resolution_note"]

_THRESHOLDS = {
    "p10": "the 10th-percentile training presence (Pearson et al. 2007, J. Biogeogr. 34:102)",
    "mtp": "the minimum training presence (Pearson et al. 2007, J. Biogeogr. 34:102)",
    "max_sss": "maximum sensitivity + specificity (Liu et al. 2005, Ecography 28:385)",
    "equal_ss": "equal sensitivity and specificity (Liu et al. 2005, Ecography 28:385)",
    "fixed": "a fixed value",
}


def methods_paragraph(
    *,
    species: str,
    fit_params: Mapping[str, Any],
    n_slices: int,
    models: Sequence[str],
    scenarios: Sequence[str],
    reference: str,
    clamp: bool,
    evaluation: pd.DataFrame | None = None,
    window: Sequence[str] | tuple[float, float] | None = None,
    cell_km: float | None = None,
) -> str:
    """One paragraph stating every choice of the run with its citation.

    `n_slices` counts the transferred slices without the observed baseline; `window` is the
    refugium window actually used (slice labels or periods, a year range, or None for every
    slice).

    Parameters
    ----------
    species : str
        Species name.
    fit_params : mapping
        The fit's parameters (algorithm, threshold, background, calibration, screening).
    n_slices : int
        Number of slices projected onto.
    models : sequence of str
        Climate models.
    scenarios : sequence of str
        Scenarios.
    reference : str
        Label of the reference slice.
    clamp : bool
        Whether predictors were clamped to the calibration range.
    evaluation : pandas.DataFrame, optional
        Spatial cross-validation scores.
    window : sequence of str or (float, float), optional
        The refugium window.
    cell_km : float, optional
        Typical cell size, km (for the resolution note).
    """
    p = dict(fit_params)
    from timeslice.niche.registry import methods_text

    algo = methods_text(str(p.get("algorithm")))
    rule = _THRESHOLDS.get(str(p.get("threshold_rule")), str(p.get("threshold_rule")))
    variables = ", ".join(p.get("variables", []))
    thin = p.get("thin")
    thin_txt = (
        "thinned to one record per grid cell" if thin == "cell"
        else f"thinned to a minimum spacing of {thin} km" if thin else "not thinned"
    )
    ev = _evaluation_text(evaluation, p)
    cal_txt, back_txt = _calibration_texts(p)
    if window is None:
        win_txt = "every slice of the series"
    elif isinstance(window, tuple) and len(window) == 2:
        win_txt = f"every slice from year {window[0]:g} to {window[1]:g} CE"
    else:
        win_txt = "the slices " + ", ".join(f"'{w}'" for w in window)
    models_txt = f"{len(models)} model{'s' if len(models) != 1 else ''}"
    scen_txt = (f"scenario{'s' if len(scenarios) != 1 else ''}: {', '.join(scenarios)}"
                if scenarios else "no scenarios")
    slices_txt = f"{n_slices} slice{'s' if n_slices != 1 else ''}"
    return (
        f"Occurrence records of {species} ({p.get('n_records_input')} read, "
        f"{p.get('n_records_used')} used after cleaning) were {thin_txt}. The calibration area was "
        f"{cal_txt}; {back_txt}. Bioclimatic variables were computed from monthly climatologies following "
        f"O'Donnell & Ignizio (2012, USGS Data Series 691) and screened for collinearity "
        f"(|r| ≤ {p.get('screen_max_r')}, VIF ≤ {p.get('screen_max_vif')}), keeping {variables}. "
        f"The niche was modelled with {algo}; the suitable/unsuitable threshold was {rule} "
        f"(value {float(p.get('threshold', np.nan)):.3f}).{ev} Climate-model slices "
        f"({slices_txt} besides the observed baseline, from {models_txt}: {', '.join(models)}; "
        f"{scen_txt}) were downscaled by the change-factor method against each model's "
        f"own baseline (Hay, Wilby & Leavesley 2000; Ramirez-Villegas & Jarvis 2010) with the "
        f"precipitation safeguards of Navarro-Racines et al. (2020); each slice has its own land "
        f"mask from the DEM, its sea level and its ice. The niche was transferred to every slice "
        f"{'with predictors clamped to the calibration range' if clamp else 'without clamping'}; "
        f"novel climate was flagged with MESS (Elith, Kearney & Phillips 2010) and ExDet NT1/NT2 "
        f"(Mesgaran, Cousens & Webber 2014) against the background sample. Areas are sums of cell "
        f"areas on the authalic sphere; gain, loss and stability are relative to the slice "
        f"'{reference}'; a refugium is a cell suitable in {win_txt} of every model (Carnaval & "
        f"Moritz 2008; Graham et al. 2010)."
        + (f" {resolution_note(cell_km)}" if cell_km is not None else "")
    )


def _evaluation_text(evaluation, p: dict) -> str:
    """The cross-validation sentence of the methods paragraph ("" without scores)."""
    ev = ""
    if evaluation is not None and "summary" in evaluation and "auc" in evaluation:
        mean = evaluation[evaluation["summary"] == "mean"]
        sd = evaluation[evaluation["summary"] == "sd"]
        if len(mean):
            ev = (
                f" Spatial block cross-validation ({p.get('cv_folds')} folds, blocks of "
                f"{p.get('cv_block_km')} km; Roberts et al. 2017, Ecography 40:913) gave AUC "
                f"{float(mean['auc'].iloc[0]):.3f} ± {float(sd['auc'].iloc[0]):.3f} and continuous "
                f"Boyce index {float(mean['boyce'].iloc[0]):.2f} (Hirzel et al. 2006)."
            )
    return ev


def _calibration_texts(p: dict) -> tuple[str, str]:
    """The calibration-area and background clauses of the methods paragraph."""
    cal = str(p.get("calibration", "buffer"))
    cal_txt = {
        "buffer": f"a {p.get('buffer_km')} km geodesic buffer around the records on land",
        "hull_buffer": (f"the convex hull of the records widened by a {p.get('buffer_km')} km "
                        "geodesic buffer, on land"),
        "mask": "the calibration mask given in the configuration, on land",
    }.get(cal, cal)
    if str(p.get("background", "")).startswith("target-group"):
        back_txt = (f"{p.get('n_background')} background points were taken from the "
                    "target-group file given (records of related species sampled the same way, "
                    "which carries their sampling bias into the background; Phillips et al. "
                    "2009, Ecol. Appl. 19:181)")
    else:
        back_txt = (f"{p.get('n_background')} background cells were drawn from it in proportion "
                    "to their area on the sphere")
    return cal_txt, back_txt


def resolution_note(cell_km: float) -> str:
    """What the Eltonian-noise hypothesis implies at a grid's cell size, as one sentence.

    The hypothesis (Soberón & Nakamura 2009, PNAS 106:19644; Soberón 2007, Ecol. Lett.
    10:1115) holds that biotic interactions shape distributions mostly at fine grain and
    fade in coarse-grained, broad-extent maps; it names no sharp cell size. The bands here
    (below ~10 km, 10-50 km, above ~50 km) are our reading of it (common practice, from memory).

    Parameters
    ----------
    cell_km : float
        Typical cell size, km.
    """
    size = f"{cell_km:,.0f} km" if cell_km >= 10 else f"{cell_km:.1f} km"
    if cell_km < 10:
        implied = ("at this fine grain competitors, hosts and mutualists can still shape where "
                   "the species occurs, so the climatic projection may over-predict the range "
                   "more than at coarse grain")
    elif cell_km <= 50:
        implied = ("at this intermediate grain biotic interactions may still matter locally; "
                   "read suitable cells as climatically possible, not occupied")
    else:
        implied = ("at this coarse grain biotic effects tend to fade into noise, so the "
                   "climatic niche is the main control the map can show; interactions still "
                   "matter within each cell")
    return (f"Cells are about {size} across; by the Eltonian-noise hypothesis (Soberón & "
            f"Nakamura 2009; Soberón 2007) {implied}.")


def findings(results: pd.DataFrame, years: Mapping[str, float] | None = None) -> list[str]:
    """Short sentences with the headline numbers of a run, for the top of the report.

    Every number is read from the key-results table (:func:`timeslice.series.key_results`),
    the same rows the report cards, ``tables/key_results.csv`` and the command line show.

    Parameters
    ----------
    results : pandas.DataFrame
        The key-results table (:func:`timeslice.series.analysis.key_results`).
    years : mapping of str to float, optional
        Year of each scenario-period scope (:func:`timeslice.report.tables.scope_years`): the
        change sentences in time order, oldest first (else in table order).

    Returns
    -------
    list of str
        The reference area, the refugia, then one sentence per scenario and period.
    """
    from timeslice.report.tables import in_time_order

    out: list[str] = []
    if results is None or results.empty:
        return out
    k = results
    ref = k[k["topic"] == "reference"]
    if len(ref):
        out.append(f"Suitable area in the reference slice '{ref['scope'].iloc[0]}': "
                   f"{float(ref['value'].iloc[0]):,.0f} km².")
    win = k[(k["topic"] == "refugia") & (k["quantity"] == "refugium area")
            & k["scope"].str.startswith("window")]
    if len(win):
        out.append(f"Refugia (suitable in every slice of the window, in every model): "
                   f"{float(win['value'].iloc[0]):,.0f} km².")
    from timeslice.series.analysis import change_by_scope

    for scope, g in in_time_order(change_by_scope(k), dict(years or {})):
        n = int(g.get("models", 1))
        text = f"{scope}: suitable area {g['change in suitable area, median over models']:+.0f} %"
        if n > 1:
            text += (f" (median of {n} models, range {g['change in suitable area, lowest model']:+.0f}"
                     f" to {g['change in suitable area, highest model']:+.0f} %)")
        land = g.get("share of land in novel climate")
        if land is not None and np.isfinite(land):
            text += f"; {100 * land:.0f} % of the land in novel climate"
        out.append(text + ".")
    return out
