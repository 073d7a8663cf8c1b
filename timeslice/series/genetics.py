"""Refugium hypotheses against genetic diversity: stability at sampled populations.

Phylogeographers test a refugium map by asking whether populations in stable areas hold more
genetic diversity (Carnaval et al. 2009, Science 323:785). Sampled sites and both variables are
spatially autocorrelated, so the plain Pearson test overstates significance; the modified t-test
of Dutilleul (1993, Biometrics 49:305) replaces the sample size by an effective one estimated
from the autocorrelation of both variables.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr
from scipy import stats

from timeslice.errors import DataError, InputFileError
from timeslice.grid import haversine_km

__all__ = [
    "distance_to_mask_km",
    "modified_t_test",
    "read_diversity_table",
    "sample_layer",
    "stability_vs_diversity",
]


def read_diversity_table(path: str | os.PathLike, *, column: str | None = None) -> pd.DataFrame:
    """Read sampled populations: ``lon``, ``lat`` and one diversity column.

    Parameters
    ----------
    path : path-like
        CSV with ``lon``/``longitude``, ``lat``/``latitude`` and a diversity measure
        (nucleotide or haplotype diversity, allelic richness...).
    column : str, optional
        The diversity column; default: the only numeric column besides lon/lat.

    Returns
    -------
    pandas.DataFrame
        ``site`` (the file's ``site``/``population`` column or the row number), ``lon``,
        ``lat``, ``diversity``; rows with a missing value are refused.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError(f"{p}: diversity table not found; check species.diversity")
    try:
        df = pd.read_csv(p)
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as err:
        raise InputFileError(f"{p}: cannot be read as CSV ({type(err).__name__}); give a "
                             "comma-separated table with lon, lat and a diversity column") from err
    cols = {c.lower().strip(): c for c in df.columns}
    lon = cols.get("lon") or cols.get("longitude") or cols.get("decimallongitude")
    lat = cols.get("lat") or cols.get("latitude") or cols.get("decimallatitude")
    if lon is None or lat is None:
        raise DataError(f"{p}: no lon/lat columns (found {', '.join(map(str, df.columns))[:200]}); "
                        "name them lon and lat")
    if column is None:
        numeric = [c for c in df.columns if c not in (lon, lat)
                   and pd.api.types.is_numeric_dtype(df[c])]
        if len(numeric) != 1:
            raise DataError(f"{p}: say which column holds the diversity measure "
                            f"(species.diversity_column); numeric columns: {numeric}")
        column = numeric[0]
    if column not in df.columns:
        raise DataError(f"{p}: no column {column!r} (found {', '.join(map(str, df.columns))[:200]})")
    site = cols.get("site") or cols.get("population")
    out = pd.DataFrame({
        "site": df[site].astype(str) if site else [str(i + 1) for i in range(len(df))],
        "lon": pd.to_numeric(df[lon], errors="coerce"),
        "lat": pd.to_numeric(df[lat], errors="coerce"),
        "diversity": pd.to_numeric(df[column], errors="coerce"),
    })
    bad = out[["lon", "lat", "diversity"]].isna().any(axis=1)
    if bad.any():
        raise DataError(f"{p}: {int(bad.sum())} row(s) without a numeric lon, lat or {column!r} "
                        f"(first at line {int(np.flatnonzero(bad)[0]) + 2}); fix or remove them")
    if len(out) < 5:
        raise DataError(f"{p}: {len(out)} sites; a correlation needs at least 5")
    out.attrs["diversity_column"] = str(column)
    return out


def sample_layer(layer: xr.DataArray, lon, lat) -> np.ndarray:
    """Value of a (lat, lon) layer in the cell holding each point (NaN off the grid).

    Parameters
    ----------
    layer : xarray.DataArray
        A (lat, lon) layer.
    lon, lat : array_like
        Points, degrees.

    Returns
    -------
    numpy.ndarray of float
        One value per point.
    """
    from timeslice.grid import grid_edges, wrap_lon

    lat_b, lon_b = grid_edges(layer)
    lon = wrap_lon(np.asarray(lon, dtype=float), west=float(lon_b[0, 0]))
    lat = np.asarray(lat, dtype=float)
    iy = np.searchsorted(lat_b[:, 1], lat, side="left")
    ix = np.searchsorted(lon_b[:, 1], lon, side="left")
    ok = (lat >= lat_b[0, 0]) & (lat <= lat_b[-1, 1]) & (lon >= lon_b[0, 0]) & (lon <= lon_b[-1, 1])
    iy, ix = np.minimum(iy, lat_b.shape[0] - 1), np.minimum(ix, lon_b.shape[0] - 1)
    values = np.asarray(layer.transpose("lat", "lon").values, dtype=float)[iy, ix]
    return np.where(ok, values, np.nan)


def distance_to_mask_km(mask: xr.DataArray, lon, lat) -> np.ndarray:
    """Great-circle distance (km) from each point to the nearest cell centre where `mask`.

    Parameters
    ----------
    mask : xarray.DataArray of bool
        A (lat, lon) mask.
    lon, lat : array_like
        Points, degrees.

    Returns
    -------
    numpy.ndarray, [km]
        One distance per point (authalic sphere); NaN everywhere when `mask` is empty.
    """
    m = np.asarray(mask.transpose("lat", "lon").values).astype(bool)
    if not m.any():
        return np.full(np.shape(lon), np.nan)
    la2, lo2 = np.meshgrid(mask["lat"].values, mask["lon"].values, indexing="ij")
    clon, clat = lo2[m], la2[m]
    lon, lat = np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
    out = np.empty(lon.shape)
    for i in range(lon.size):  # sites are few; cells may be many
        out.flat[i] = float(np.min(haversine_km(lon.flat[i], lat.flat[i], clon, clat)))
    return out


def _class_covariance(v: np.ndarray, dist: np.ndarray, classes: np.ndarray) -> np.ndarray:
    """Dutilleul's estimate of the covariance matrix of `v`: the sample autocovariance of the
    distance class of each pair, the variance on the diagonal."""
    n = v.size
    c = v - v.mean()
    prod = np.outer(c, c)
    S = np.zeros((n, n))
    off = ~np.eye(n, dtype=bool)
    for k in np.unique(classes[off]):
        sel = (classes == k) & off
        S[sel] = prod[sel].mean()
    np.fill_diagonal(S, (c @ c) / n)
    return S


def modified_t_test(x, y, lon, lat, *, n_classes: int | None = None,
                    covariances: tuple[np.ndarray, np.ndarray] | None = None) -> dict:
    """Pearson correlation with Dutilleul's (1993) modified t-test for autocorrelated data.

    Parameters
    ----------
    x, y : array-like
        The two variables at n sites.
    lon, lat : array-like
        Site coordinates (degrees); distances are great-circle on the authalic sphere.
    n_classes : int, optional
        Number of equal-width distance classes for the autocovariances; default Sturges'
        rule on the number of pairs, 1 + 3.3 log10(n(n-1)/2) (as advised by Legendre &
        Legendre 2012, Numerical Ecology, 3rd ed.; from memory).
    covariances : (Sx, Sy), optional
        Covariance matrices of x and y to use instead of the estimates (for checks).

    Returns
    -------
    dict
        ``r``, ``n``, ``n_effective``, ``F``, ``df_denominator``, ``p_value`` (two-sided,
        F(1, M - 2)) and ``p_value_naive`` (the plain Pearson test).

    Notes
    -----
    With :math:`B = I - \\tfrac{1}{n}\\mathbf{1}\\mathbf{1}^T` and estimated covariance matrices
    :math:`\\hat\\Sigma_x`, :math:`\\hat\\Sigma_y`, the effective sample size is

    .. math:: \\hat M = 1 + \\frac{\\operatorname{tr}(B\\hat\\Sigma_x)\\,
              \\operatorname{tr}(B\\hat\\Sigma_y)}{\\operatorname{tr}(B\\hat\\Sigma_x B\\hat\\Sigma_y)}

    and :math:`F = (\\hat M - 2)\\, r^2 / (1 - r^2)` follows F(1, M̂ − 2) (Dutilleul 1993,
    Biometrics 49:305; formula from memory). With independent data (Σ ∝ I) M̂ = n and the test
    is the plain Pearson t-test (t² = F).
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    lon, lat = np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y) & np.isfinite(lon) & np.isfinite(lat)
    x, y, lon, lat = x[ok], y[ok], lon[ok], lat[ok]
    n = x.size
    if n < 5:
        raise DataError(f"modified t-test: {n} sites with both values; need at least 5")
    if np.ptp(x) == 0 or np.ptp(y) == 0:
        raise DataError("modified t-test: a variable is constant at the sites; no correlation")
    r, p_naive = stats.pearsonr(x, y)
    if covariances is None:
        dist = haversine_km(lon[:, None], lat[:, None], lon[None, :], lat[None, :])
        pairs = n * (n - 1) // 2
        k = n_classes or int(np.ceil(1 + 3.3 * np.log10(pairs)))
        upper = dist[np.triu_indices(n, 1)]
        edges = np.linspace(0.0, upper.max() * (1 + 1e-12), k + 1)
        classes = np.clip(np.searchsorted(edges, dist, side="right") - 1, 0, k - 1)
        Sx, Sy = _class_covariance(x, dist, classes), _class_covariance(y, dist, classes)
    else:
        Sx, Sy = (np.asarray(c, dtype=float) for c in covariances)
    B = np.eye(n) - np.full((n, n), 1.0 / n)
    BSx, BSy = B @ Sx, B @ Sy
    denom = float(np.trace(BSx @ BSy))
    m = 1.0 + float(np.trace(BSx)) * float(np.trace(BSy)) / denom if denom > 0 else float(n)
    m = float(min(max(m, 3.0), n))  # at least one denominator degree of freedom, at most n
    F = (m - 2.0) * r**2 / (1.0 - r**2) if r**2 < 1 else np.inf
    p = float(stats.f.sf(F, 1.0, m - 2.0))
    return {"r": float(r), "n": int(n), "n_effective": m, "F": float(F),
            "df_denominator": m - 2.0, "p_value": p, "p_value_naive": float(p_naive)}


def stability_vs_diversity(series: xr.Dataset, sites: pd.DataFrame, *,
                           stability: str | None = None,
                           refugium: str | None = None) -> pd.DataFrame:
    """Correlate climatic stability (and distance to the nearest refugium) with diversity.

    Parameters
    ----------
    series : xarray.Dataset
        A summarised series with a stability and a refugium layer on (lat, lon).
    sites : pandas.DataFrame
        From :func:`read_diversity_table`.
    stability, refugium : str, optional
        Layer names; default the refugium window's (``stability_window``,
        ``refugium_window``), else the all-slice layers.

    Returns
    -------
    pandas.DataFrame
        One row per predictor (``stability``, ``distance_to_refugium_km``): ``r``, ``n``,
        ``n_effective``, ``F``, ``df_denominator``, ``p_value`` (Dutilleul 1993) and
        ``p_value_naive``; the per-site values in ``attrs["sites"]``.
    """
    stability = stability or next((v for v in ("stability_window", "stability_all_slices")
                                   if v in series), None)
    refugium = refugium or next((v for v in ("refugium_window", "refugium_all_slices")
                                 if v in series), None)
    if stability is None:
        raise DataError("diversity test: the series has no stability layer")
    lon, lat = sites["lon"].to_numpy(float), sites["lat"].to_numpy(float)
    per_site = sites.copy()
    per_site["stability"] = sample_layer(series[stability], lon, lat)
    rows = []
    if refugium is not None:
        per_site["distance_to_refugium_km"] = distance_to_mask_km(series[refugium], lon, lat)
    for name in ("stability", "distance_to_refugium_km"):
        if name not in per_site or not np.isfinite(per_site[name]).sum() >= 5:
            continue
        if np.ptp(per_site[name].to_numpy(float)[np.isfinite(per_site[name])]) == 0:
            continue
        res = modified_t_test(per_site[name], per_site["diversity"], lon, lat)
        rows.append({"predictor": name, "layer": stability if name == "stability" else refugium,
                     **res})
    out = pd.DataFrame(rows, columns=["predictor", "layer", "r", "n", "n_effective", "F",
                                      "df_denominator", "p_value", "p_value_naive"])
    out.attrs["sites"] = per_site
    return out
