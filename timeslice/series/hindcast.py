"""Hindcast check: do dated (fossil, pollen) records fall in cells the model calls suitable
more often than chance?
"""

from __future__ import annotations

import warnings
from typing import Literal

import numpy as np
import pandas as pd
import xarray as xr
from scipy.stats import binomtest

from timeslice.errors import DataError, TimesliceWarning
from timeslice.grid import cell_area, resolution
from timeslice.series._checks import check_stack, slice_labels, suitable_mask, valid_mask

__all__ = ["assign", "check", "poisson_binomial_sf", "slice_windows"]

#: "Present" of ages in years BP (Stuiver & Polach 1977, Radiocarbon 19:355).
PRESENT_YEAR_CE = 1950.0


def slice_windows(years, *, max_offset_years: float | None = None) -> np.ndarray:
    """Time window of each slice: from the midpoint to its earlier neighbour to the midpoint to
    its later neighbour; the first and last windows reach as far outward as inward.

    Parameters
    ----------
    years : sequence of float
        Slice years CE (distinct).
    max_offset_years : float, optional
        Also cap each window at this distance from its slice.

    Returns
    -------
    numpy.ndarray, shape (n, 2), [years CE]
    """
    y = np.asarray(years, dtype=float)
    order = np.argsort(y)
    ys = y[order]
    if ys.size == 1:
        if max_offset_years is None:
            raise DataError("one slice only: give `max_offset_years` to say which record ages "
                            "it stands for")
        half_lo = half_hi = np.array([float(max_offset_years)])
    else:
        gaps = np.diff(ys) / 2.0
        half_lo = np.concatenate([[gaps[0]], gaps])
        half_hi = np.concatenate([gaps, [gaps[-1]]])
    if max_offset_years is not None:
        half_lo = np.minimum(half_lo, max_offset_years)
        half_hi = np.minimum(half_hi, max_offset_years)
    win = np.stack([ys - half_lo, ys + half_hi], axis=1)
    out = np.empty_like(win)
    out[order] = win
    return out


def _nearest_index(coord: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nearest cell index along a regular ascending coordinate; False where outside the grid."""
    res = resolution(coord) if coord.size > 1 else 1.0
    idx = np.clip(np.rint((values - coord[0]) / res).astype(int), 0, coord.size - 1)
    inside = np.abs(values - coord[idx]) <= res / 2 + 1e-9
    return idx, inside


def assign(
    records: pd.DataFrame,
    stack: xr.Dataset,
    *,
    max_offset_years: float | None = None,
    source: str = "dated records",
) -> pd.DataFrame:
    """Assign each dated record to the slice nearest in time and look up its cell.

    Parameters
    ----------
    records : pandas.DataFrame
        Columns ``lon``, ``lat`` (degrees), ``age_bp`` (years before 1950); ``age_sd`` optional.
    stack : xarray.Dataset
        One chain's slices (distinct ``year`` values) with ``suitable``.
    max_offset_years : float, optional
        Largest allowed |record year − slice year| (see :func:`slice_windows`).
    source : str
        Name used in messages (the file name).

    Returns
    -------
    pandas.DataFrame
        The records plus ``year`` (CE), ``slice``, ``offset_years``, ``status`` ("ok",
        "outside_windows", "off_grid", "not_land"), ``in_suitable`` (bool) and ``ambiguous``
        (bool: age ± 2 ``age_sd`` reaches into another slice's window).
    """
    check_stack(stack)
    if not isinstance(records, pd.DataFrame):
        raise DataError(f"{source}: records must be a table (pandas.DataFrame)")
    missing = [c for c in ("lon", "lat", "age_bp") if c not in records.columns]
    if missing:
        raise DataError(f"{source}: missing column(s) {missing}; the dated-record table needs "
                        "lon, lat and age_bp (years before 1950)")
    if "year" not in stack.coords:
        raise DataError("the stack has no slice coordinate 'year'; hindcasts need slice years")
    years = np.asarray(stack["year"].values, dtype=float)
    labels = slice_labels(stack)
    uniq, counts = np.unique(years, return_counts=True)
    if (counts > 1).any():
        y = uniq[counts > 1][0]
        same = [lab for lab, yy in zip(labels, years) if yy == y]
        raise DataError(f"several slices at year {y:g} ({same}); pass one chain (one model) "
                        "to the hindcast check")
    out = records.copy()
    age = pd.to_numeric(out["age_bp"], errors="coerce").to_numpy(dtype=float)
    lon = pd.to_numeric(out["lon"], errors="coerce").to_numpy(dtype=float)
    lat = pd.to_numeric(out["lat"], errors="coerce").to_numpy(dtype=float)
    if not np.isfinite(age).all() or not np.isfinite(lon).all() or not np.isfinite(lat).all():
        bad = int((~(np.isfinite(age) & np.isfinite(lon) & np.isfinite(lat))).sum())
        raise DataError(f"{source}: {bad} record(s) have a missing or non-numeric lon, lat or "
                        "age_bp; fix or remove them")
    rec_year = PRESENT_YEAR_CE - age
    win = slice_windows(years, max_offset_years=max_offset_years)
    inside = (rec_year[:, None] >= win[None, :, 0]) & (rec_year[:, None] <= win[None, :, 1])
    dist = np.abs(rec_year[:, None] - years[None, :])
    dist = np.where(inside, dist, np.inf)
    k = np.argmin(dist, axis=1)
    in_win = np.isfinite(dist[np.arange(k.size), k])
    from timeslice.grid import grid_edges, wrap_lon

    # records come in [-180, 180); a grid across 180 runs on past it (e.g. 165..195)
    lon = wrap_lon(lon, west=float(grid_edges(stack)[1][0, 0]))
    iy, ok_y = _nearest_index(np.asarray(stack["lat"].values, float), lat)
    ix, ok_x = _nearest_index(np.asarray(stack["lon"].values, float), lon)
    suit = np.asarray(stack["suitable"].transpose("slice", "lat", "lon").values)
    cell = suit[k, iy, ix]
    status = np.where(~in_win, "outside_windows",
                      np.where(~(ok_x & ok_y), "off_grid",
                               np.where(~valid_mask(cell), "not_land", "ok")))
    out["year"] = rec_year
    out["slice"] = np.where(in_win, np.asarray(labels, dtype=object)[k], None)
    out["offset_years"] = np.where(in_win, rec_year - years[k], np.nan)
    out["status"] = status
    out["in_suitable"] = (status == "ok") & suitable_mask(cell)
    # a record whose age +- 2 SD reaches into another slice's window could belong there
    if "age_sd" in out.columns:
        sd = pd.to_numeric(out["age_sd"], errors="coerce").to_numpy(dtype=float)
        sd = np.where(np.isfinite(sd), np.abs(sd), 0.0)
        lo, hi = rec_year - 2 * sd, rec_year + 2 * sd
        overlaps = (lo[:, None] <= win[None, :, 1]) & (hi[:, None] >= win[None, :, 0])
        out["ambiguous"] = in_win & (overlaps.sum(axis=1) > 1)
    else:
        out["ambiguous"] = False
    return out


def poisson_binomial_sf(k: int, p: np.ndarray) -> float:
    """P(K >= k) for a sum K of independent Bernoulli(p_i) trials (exact, by convolution).

    With all p_i equal this is the binomial upper tail (``scipy.stats.binom.sf(k - 1, n, p)``).

    Parameters
    ----------
    k : int
        Number of successes.
    p : array_like
        Success probability of each trial.

    Returns
    -------
    float
        The upper-tail probability.

    Examples
    --------
    >>> round(poisson_binomial_sf(1, [0.3, 0.6]), 6)  # 1 - 0.7 * 0.4
    0.72
    """
    pmf = np.array([1.0])
    for pi in np.asarray(p, dtype=float):
        pmf = np.convolve(pmf, [1.0 - pi, pi])
    return float(min(1.0, pmf[int(k):].sum())) if k > 0 else 1.0


def check(
    records: pd.DataFrame,
    stack: xr.Dataset,
    *,
    max_offset_years: float | None = None,
    alternative: Literal["greater", "two-sided", "less"] = "greater",
    source: str = "dated records",
) -> pd.DataFrame:
    """Hit rate of dated records in suitable cells against the suitable share of land.

    Parameters
    ----------
    records, stack, max_offset_years, source
        As :func:`assign`.
    alternative : {"greater", "two-sided", "less"}, default "greater"
        "greater": more hits than expected by chance (the one-sided test).

    Returns
    -------
    pandas.DataFrame
        One row per slice with records, and a last row ``slice = "all"``: ``n_records``,
        ``n_hits``, ``hit_rate``, ``expected_share`` (suitable area / land area of the slice),
        ``p_value``, ``n_ambiguous`` (records whose age ± 2 SD reaches another window; they
        stay assigned to the nearest slice), ``n_skipped`` (outside every window, off the grid
        or not land).

    Warns
    -----
    TimesliceWarning
        When some records are skipped (the message says how many and why).

    Notes
    -----
    Under the null hypothesis a record falls in a suitable cell with probability equal to the
    suitable share of the slice's land area, :math:`p_s = A_{suit,s} / A_{land,s}`. Per slice,
    hits :math:`k_s \\sim \\mathrm{Bin}(n_s, p_s)` and the p-value is the exact binomial test
    (:func:`scipy.stats.binomtest`; Clopper & Pearson 1934, Biometrika 26:404 for the interval).
    Over all slices the hits follow a Poisson-binomial distribution with one :math:`p_s` per
    record; its exact upper tail is the pooled one-sided p-value (two-sided and "less" pool with
    the binomial at the mean p, an approximation).
    """
    table = assign(records, stack, max_offset_years=max_offset_years, source=source)
    n_all = len(table)
    ok = table["status"] == "ok"
    if not ok.any():
        counts = table["status"].value_counts().to_dict()
        raise DataError(
            f"{source}: none of the {n_all} records can be checked ({counts}); slice years "
            f"are {sorted(np.asarray(stack['year'].values, float).tolist())} CE — check the "
            "ages (years BP) or widen `max_offset_years`"
        )
    skipped = table.loc[~ok, "status"].value_counts().to_dict()
    if skipped:
        warnings.warn(
            f"{source}: {sum(skipped.values())} of {n_all} records skipped ({skipped})",
            TimesliceWarning,
            stacklevel=2,
        )
    area = cell_area(stack).values
    suit = np.asarray(stack["suitable"].transpose("slice", "lat", "lon").values)
    labels = slice_labels(stack)
    years = np.asarray(stack["year"].values, dtype=float)
    rows, p_rec = [], []
    for s, lab in enumerate(labels):
        sel = table.loc[ok & (table["slice"] == lab)]
        if sel.empty:
            continue
        land_a = area[valid_mask(suit[s])].sum()
        p = float(area[suitable_mask(suit[s])].sum() / land_a) if land_a > 0 else np.nan
        n, hits = len(sel), int(sel["in_suitable"].sum())
        res = binomtest(hits, n, p, alternative=alternative)
        rows.append({"slice": lab, "year": years[s], "n_records": n, "n_hits": hits,
                     "hit_rate": hits / n, "expected_share": p, "p_value": float(res.pvalue),
                     "n_ambiguous": int(sel["ambiguous"].sum())})
        p_rec.extend([p] * n)
    n_tot = int(ok.sum())
    hits_tot = int(table.loc[ok, "in_suitable"].sum())
    if alternative == "greater":
        p_all = poisson_binomial_sf(hits_tot, np.asarray(p_rec))
    else:
        p_all = float(binomtest(hits_tot, n_tot, float(np.mean(p_rec)),
                                alternative=alternative).pvalue)
    rows.append({"slice": "all", "year": np.nan, "n_records": n_tot, "n_hits": hits_tot,
                 "hit_rate": hits_tot / n_tot, "expected_share": float(np.mean(p_rec)),
                 "p_value": p_all, "n_ambiguous": int(table.loc[ok, "ambiguous"].sum())})
    out = pd.DataFrame(rows)
    out["n_skipped"] = 0
    out.loc[out["slice"] == "all", "n_skipped"] = n_all - n_tot
    out.attrs["alternative"] = alternative
    return out
