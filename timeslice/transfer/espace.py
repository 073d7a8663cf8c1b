"""Every transfer seen in environmental space: how much of the niche each slice offers, and how
much of each slice's climate the model knows.

A niche lives in environmental space; a map of it is a transfer into geography. A slice can
lose suitable area because the niche's climates no longer exist anywhere in it (environmental
availability falls), or because they moved; and a projection is trustworthy only where the
slice's climate lies inside the calibration climate (the analog fraction).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr
from scipy.spatial import cKDTree

from timeslice.errors import DataError

__all__ = ["ANALOG_TOLERANCE_SD", "environment_table", "slice_environment"]

#: Half-width of the box, in calibration-background standard deviations per predictor, within
#: which a slice cell counts as an analog of a presence (our choice: a quarter of a standard
#: deviation is well inside the spread of one niche, well above rounding).
ANALOG_TOLERANCE_SD = 0.25


def slice_environment(
    ds: xr.Dataset,
    *,
    variables: list[str],
    presence: pd.DataFrame,
    background: pd.DataFrame,
    tolerance: float = ANALOG_TOLERANCE_SD,
    block_rows: int = 256,
) -> dict[str, float]:
    """Environmental availability and analog fraction of one prepared slice.

    Parameters
    ----------
    ds : xarray.Dataset
        A prepared slice with the predictors and ``land``.
    variables : list of str
        The model's predictors.
    presence, background : pandas.DataFrame
        The fit's presence and background predictor values (calibration climate).
    tolerance : float
        Box half-width in background standard deviations (:data:`ANALOG_TOLERANCE_SD`).
    block_rows : int
        Latitude rows read at a time (memory is bounded by a block, not the grid).

    Returns
    -------
    dict
        ``environmental_availability``: share of the presences whose climate has an analog
        among the slice's land cells (some cell within `tolerance` standard deviations on every
        predictor); ``analog_fraction``: share of the slice's land area whose climate lies
        inside the calibration range of every predictor (background minimum to maximum);
        ``land_km2``.

    Notes
    -----
    Predictors are standardised by the background standard deviation; the analog search is a
    Chebyshev (L∞) ball query of a k-d tree (:class:`scipy.spatial.cKDTree`).
    """
    from timeslice.grid import cell_area

    missing = [v for v in variables if v not in ds]
    if missing:
        raise DataError(f"environment: slice {ds.attrs.get('slice_label', '?')!r} lacks "
                        f"predictors {missing}")
    bg = background[variables].to_numpy(float)
    sd = np.nanstd(bg, axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    lo, hi = np.nanmin(bg, axis=0), np.nanmax(bg, axis=0)
    pres = presence[variables].to_numpy(float)
    pres = pres[np.all(np.isfinite(pres), axis=1)] / sd
    tree = cKDTree(pres) if len(pres) else None
    found = np.zeros(len(pres), dtype=bool)
    area = cell_area(ds).values
    land = np.asarray(ds["land"].values).astype(bool)
    land_km2 = inside_km2 = 0.0
    ny = ds.sizes["lat"]
    for r0 in range(0, ny, int(block_rows)):
        rows = slice(r0, min(ny, r0 + int(block_rows)))
        block = np.stack([np.asarray(ds[v].isel(lat=rows).values, dtype=float)
                          for v in variables], axis=-1)
        ok = land[rows] & np.all(np.isfinite(block), axis=-1)
        x = block[ok]
        a = area[rows][ok]
        land_km2 += float(a.sum())
        inside_km2 += float(a[np.all((x >= lo) & (x <= hi), axis=1)].sum())
        if tree is not None and len(x) and not found.all():
            cells = cKDTree(x / sd)
            hits = tree.query_ball_tree(cells, r=float(tolerance), p=np.inf)
            found |= np.array([len(h) > 0 for h in hits], dtype=bool)
    return {
        "environmental_availability": float(found.mean()) if len(found) else float("nan"),
        "analog_fraction": inside_km2 / land_km2 if land_km2 > 0 else float("nan"),
        "land_km2": land_km2,
    }


def environment_table(fit, slices: list[xr.Dataset], *,
                      tolerance: float = ANALOG_TOLERANCE_SD) -> pd.DataFrame:
    """:func:`slice_environment` for every prepared slice of a run, one row each.

    Parameters
    ----------
    fit : NicheFit
        The fitted niche (its ``variables``, ``presence`` and ``background``).
    slices : list of xarray.Dataset
        Prepared slices.
    tolerance : float
        Analog tolerance in reference standard deviations.

    Returns
    -------
    pandas.DataFrame
        One row per slice: label, year, model, scenario and the measures of
        :func:`slice_environment`; ``attrs["tolerance_sd"]`` holds `tolerance`.
    """
    rows = []
    for ds in slices:
        res = slice_environment(ds, variables=list(fit.variables), presence=fit.presence,
                                background=fit.background, tolerance=tolerance)
        rows.append({
            "slice": str(ds.attrs.get("slice_label", "")),
            "year": float(ds.attrs.get("year", np.nan)),
            "model": str(ds.attrs.get("model", "")),
            "scenario": str(ds.attrs.get("scenario", "")),
            **res,
        })
    out = pd.DataFrame(rows)
    out.attrs["tolerance_sd"] = float(tolerance)
    return out
