"""Stability of suitability through a series, and refugia.

A cell that is not land in a slice counts as not suitable in that slice (suitability 0), so a
cell drowned or under ice at any time in the window cannot be a refugium. Cells that are land
in no slice are NaN (fractions, sums) or False (refugium).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import xarray as xr

from timeslice import layers
from timeslice.errors import DataError
from timeslice.series._checks import check_dataarray, is_suitable, is_valid

__all__ = [
    "DEFAULT_EPS",
    "dynamic_stability",
    "geometric_mean",
    "minimum_suitability",
    "refugium",
    "select_window",
    "stability",
    "static_stability",
]

#: Floor on suitability before taking logarithms (so ln 0 is finite); a project convention.
DEFAULT_EPS = 1e-6


def _check_dim(da: xr.DataArray, dim: str, name: str) -> None:
    if dim not in da.dims:
        raise DataError(f"`{name}` has no dimension {dim!r} (has {list(da.dims)}); pass `dim=`")
    if da.sizes[dim] == 0:
        raise DataError(f"`{name}` has no slices along {dim!r}; give at least one slice")


def _ever_land(suitable: xr.DataArray, dim: str) -> xr.DataArray:
    return is_valid(suitable).any(dim)


def stability(suitable: xr.DataArray, *, dim: str = "slice") -> xr.DataArray:
    """Fraction of slices in which a cell is suitable.

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers with dim `dim`: 1 suitable, 0 not, -1/NaN not land.
    dim : str, default "slice"
        Dimension over which to count.

    Returns
    -------
    xarray.DataArray, [1]
        ``stability`` in [0, 1]; NaN where the cell is land in no slice.

    Notes
    -----
    .. math:: F(j) = \\frac{1}{T} \\sum_{t=1}^{T} [s_t(j) = 1]

    over all :math:`T` slices (a slice where the cell is not land counts as not suitable).
    """
    check_dataarray(suitable, name="suitable", dims=())
    _check_dim(suitable, dim, "suitable")
    frac = is_suitable(suitable).mean(dim).astype(np.float32)
    out = frac.where(_ever_land(suitable, dim))
    out.name = "stability"
    out.attrs = {"valid_range": np.array([0.0, 1.0], dtype=np.float32)}
    return layers.stamp(out, description=(
        f"share of the {suitable.sizes[dim]} slices along '{dim}' in which the cell is "
        "suitable; not-land slices count as not suitable; NaN where never land"))


def select_window(obj, window=None, *, dim: str = "slice"):
    """Select the slices of a window: all (None), a list of labels, or a year range.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        Anything with dim `dim` (and a ``year`` coordinate for a year range).
    window : None, sequence of str, or (float, float)
        Slice labels or periods (a period selects every slice with it, e.g. all models'
        ``"21 ka BP"``), or ``(year_min, year_max)`` in years CE, inclusive (a slice *a* years
        BP has year 1950 − a, so 21 ka BP → present is ``(-19050, 2000)``).
    dim : str
        Name of the slice dimension.

    Returns
    -------
    same type as `obj`, with only the window's slices (in their original order).
    """
    if window is None:
        return obj
    if dim not in obj.dims:
        raise DataError(f"no dimension {dim!r} to select a window from (has {list(obj.dims)})")
    if isinstance(window, str):
        window = [window]
    window = list(window)
    if len(window) == 2 and all(isinstance(v, (int, float, np.number)) and not isinstance(v, bool)
                                for v in window):
        if "year" not in obj.coords:
            raise DataError("a year-range window needs a 'year' coordinate on the slices; "
                            "give slice labels instead")
        lo, hi = sorted(float(v) for v in window)
        years = np.asarray(obj["year"].values, dtype=float)
        keep = (years >= lo) & (years <= hi)
        if not keep.any():
            raise DataError(
                f"window years {lo:g}..{hi:g} contain no slice (slice years "
                f"{sorted(years.tolist())}); widen the window"
            )
        return obj.isel({dim: np.flatnonzero(keep)})
    labels = [str(v) for v in obj[dim].values] if dim in obj.coords else []
    periods = ([str(v) for v in obj["period"].values]
               if "period" in obj.coords and obj["period"].dims == (dim,) else [])
    wanted = [str(w) for w in window]
    unknown = [w for w in wanted if w not in labels and w not in periods]
    if unknown or not wanted:
        raise DataError(
            f"`window`: unknown slice label(s) or period(s) {unknown}; choose slice labels "
            f"from {labels}" + (f" or periods from {sorted(set(periods))}" if periods else "")
        )
    keep = [i for i, lab in enumerate(labels)
            if lab in wanted or (periods and periods[i] in wanted)]
    return obj.isel({dim: keep})


def refugium(
    suitable: xr.DataArray,
    *,
    dim: str = "slice",
    window=None,
    analog: xr.DataArray | None = None,
) -> xr.DataArray:
    """Cells suitable in every slice along `dim` (climatic refugia).

    Parameters
    ----------
    suitable : xarray.DataArray
        Suitable layers with dim `dim`.
    dim : str, default "slice"
    window : None, sequence of str, or (float, float), optional
        Slices to require (see :func:`select_window`); all slices if omitted.
    analog : xarray.DataArray of bool, optional
        True where the slice's climate is analog (inside the calibration range); if given, a
        refugium must be suitable *and* analog in every slice of the window.

    Returns
    -------
    xarray.DataArray of bool
        ``refugium``: True where suitable in all slices.

    References
    ----------
    Carnaval, A. C., & Moritz, C. (2008). Historical climate modelling predicts patterns of
    current biodiversity in the Brazilian Atlantic forest. J. Biogeogr. 35:1187-1201.
    Graham, C. H., Moritz, C., & Williams, S. E. (2006). Habitat history improves prediction of
    biodiversity in rainforest fauna. PNAS 103:632-636.
    """
    check_dataarray(suitable, name="suitable", dims=())
    _check_dim(suitable, dim, "suitable")
    suitable = select_window(suitable, window, dim=dim)
    ok = is_suitable(suitable)
    if analog is not None:
        check_dataarray(analog, name="analog", dims=())
        ok = ok & select_window(analog, window, dim=dim).astype(bool)
    out = ok.all(dim)
    out.name = "refugium_analog" if analog is not None else "refugium"
    labels = " ".join(map(str, suitable[dim].values)) if dim in suitable.coords else ""
    out.attrs = {"slices": labels}
    return layers.stamp(out, description=(
        f"true where suitable{' and analog (not novel)' if analog is not None else ''} "
        f"in every one of the {suitable.sizes[dim]} slices along '{dim}'"))


def _log_floor(suitability: xr.DataArray, eps: float) -> xr.DataArray:
    # Not-land (NaN) counts as suitability 0, i.e. ln(eps).
    return np.log(np.maximum(suitability.fillna(0.0), eps))


def _check_suitability(suitability: xr.DataArray, dim: str, eps: float) -> None:
    check_dataarray(suitability, name="suitability", dims=())
    _check_dim(suitability, dim, "suitability")
    if not (isinstance(eps, (int, float)) and 0 < eps < 1):
        raise DataError(f"`eps` must be a number in (0, 1), got {eps!r}")


def static_stability(
    suitability: xr.DataArray, *, dim: str = "slice", eps: float = DEFAULT_EPS
) -> xr.DataArray:
    """Static stability: sum over slices of the log of suitability.

    Parameters
    ----------
    suitability : xarray.DataArray
        Continuous suitability in [0, 1] with dim `dim`; NaN = not land (taken as 0).
    dim : str, default "slice"
    eps : float, default 1e-6
        Floor on suitability before the logarithm.

    Returns
    -------
    xarray.DataArray, [1]
        ``static_stability`` (≤ 0; 0 = suitability 1 in every slice); NaN where never land.

    Notes
    -----
    .. math:: \\mathrm{SS}(j) = \\sum_{t=1}^{T} \\ln \\max(S_t(j), \\varepsilon)

    References
    ----------
    Graham, C. H., VanDerWal, J., Phillips, S. J., Moritz, C., & Williams, S. E. (2010).
    Dynamic refugia and species persistence: tracking spatial shifts in habitat through time.
    Ecography 33:1062-1069.
    """
    _check_suitability(suitability, dim, eps)
    out = _log_floor(suitability, eps).sum(dim).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "static_stability"
    out.attrs = {"eps": float(eps)}
    return layers.stamp(out, description=(
            f"sum over {suitability.sizes[dim]} slices of ln(max(S, {eps:g})); "
            "not-land counts as S = 0"))


def geometric_mean(
    suitability: xr.DataArray, *, dim: str = "slice", eps: float = DEFAULT_EPS
) -> xr.DataArray:
    """Geometric mean suitability through the series.

    Parameters
    ----------
    suitability : xarray.DataArray
        Suitability through the series, NaN where not land.
    dim : str, default "slice"
        The slice dimension.
    eps : float, default DEFAULT_EPS
        Floor of the suitability inside the logarithm.

    Returns
    -------
    xarray.DataArray, [1]
        ``geometric_mean_suitability`` in [eps, 1]; NaN where never land.

    Notes
    -----
    .. math:: G(j) = \\exp\\Big(\\frac{1}{T}\\sum_{t=1}^{T} \\ln \\max(S_t(j), \\varepsilon)\\Big)
              = \\exp(\\mathrm{SS}(j) / T)

    References
    ----------
    Graham, C. H., VanDerWal, J., Phillips, S. J., Moritz, C., & Williams, S. E. (2010).
    Ecography 33:1062-1069.
    """
    _check_suitability(suitability, dim, eps)
    out = np.exp(_log_floor(suitability, eps).mean(dim)).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "geometric_mean_suitability"
    out.attrs = {"eps": float(eps)}
    return layers.stamp(out, description=(
            f"exp(mean over {suitability.sizes[dim]} slices of ln(max(S, {eps:g}))); "
            "not-land counts as S = 0"))


def minimum_suitability(suitability: xr.DataArray, *, dim: str = "slice") -> xr.DataArray:
    """Lowest suitability of a cell through the series (not land counts as 0).

    Parameters
    ----------
    suitability : xarray.DataArray
        Suitability through the series, NaN where not land.
    dim : str, default "slice"
        The slice dimension.

    Returns
    -------
    xarray.DataArray, [1]
        ``minimum_suitability`` in [0, 1]; NaN where never land.
    """
    check_dataarray(suitability, name="suitability", dims=())
    _check_dim(suitability, dim, "suitability")
    out = suitability.fillna(0.0).min(dim).astype(np.float32)
    out = out.where(suitability.notnull().any(dim))
    out.name = "minimum_suitability"
    out.attrs = {}
    return layers.stamp(out, description=(
        f"minimum over {suitability.sizes[dim]} slices; not-land counts as 0"))


def _half_widths(lat: np.ndarray, lon: np.ndarray, d_km: float) -> np.ndarray:
    """m[i, i2]: cells (i2, j + k) with |k| <= m lie within `d_km` of (i, j); -1 if none.

    From the haversine formula solved for the longitude difference:
    sin²(Δλ/2) <= (sin²(d/2R) − sin²(Δφ/2)) / (cos φ cos φ2).
    """
    from timeslice.grid import AUTHALIC_RADIUS_KM, resolution

    nx = lon.size
    dlon = np.deg2rad(resolution(lon)) if nx > 1 else 2 * np.pi
    phi = np.deg2rad(lat)
    half = min(d_km / (2 * AUTHALIC_RADIUS_KM), np.pi / 2)
    h = np.sin(half) ** 2 - np.sin((phi[None, :] - phi[:, None]) / 2) ** 2
    c = np.cos(phi)[:, None] * np.cos(phi)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = np.where(c > 0, h / c, np.inf)
    tol = 1e-12
    m = np.full(h.shape, -1, dtype=np.int64)
    ok = h >= -tol
    full = ok & (s2 >= 1.0)
    part = ok & ~full
    dl = 2 * np.arcsin(np.sqrt(np.clip(s2[part], 0.0, 1.0)))
    m[part] = np.floor(dl / dlon + 1e-9).astype(np.int64)
    m[full] = nx
    return np.minimum(m, nx)


def _neighbour_max(field: np.ndarray, widths: np.ndarray, *, wrap: bool) -> np.ndarray:
    """Max of `field` over each cell's great-circle neighbourhood.

    A sparse table of row-wise window maxima (levels 2**k) answers every window
    [j - m, j + m] with two look-ups; vectorised over source rows and columns, looped over
    target rows so memory stays at one (rows x columns) block.
    """
    ny, nx = field.shape
    if wrap:
        base = np.concatenate([field, field, field], axis=1)  # windows wrap in longitude
        off = nx
    else:
        base = field
        off = 0
    width = base.shape[1]
    levels = [base]
    k = 1
    # only the levels the widest window needs: a short distance keeps the table small
    need = int(min(2 * max(int(widths.max()), 0) + 1, width))
    while 2 * k <= need:
        prev = levels[-1]
        nxt = np.full_like(prev, -np.inf)
        nxt[:, : width - k] = np.maximum(prev[:, : width - k], prev[:, k:])
        levels.append(nxt)
        k *= 2
    table = np.stack(levels)  # (K, ny, width); table[k][:, j] = max(base[:, j:j+2**k])
    row_max = field.max(axis=1)
    j = np.arange(nx)
    out = np.full(field.shape, -np.inf)
    for i in range(ny):
        rows = np.flatnonzero(widths[i] >= 0)
        if rows.size == 0:
            continue
        m = widths[i, rows]
        whole = m >= (nx // 2 if wrap else nx)
        if whole.any():
            out[i] = np.maximum(out[i], row_max[rows[whole]].max())
        rows, m = rows[~whole], m[~whole]
        if rows.size == 0:
            continue
        lo = j[None, :] - m[:, None] + off
        hi = j[None, :] + m[:, None] + off
        if not wrap:
            lo = np.maximum(lo, 0)
            hi = np.minimum(hi, nx - 1)
        length = hi - lo + 1
        lev = np.floor(np.log2(length)).astype(np.int64)
        r = np.broadcast_to(rows[:, None], lo.shape)
        a = table[lev, r, lo]
        b = table[lev, r, hi - (1 << lev) + 1]
        out[i] = np.maximum(out[i], np.maximum(a, b).max(axis=0))
    return out


def _dynamic_kernel(logs: np.ndarray, distances: np.ndarray, lat, lon, wrap: bool) -> np.ndarray:
    acc = logs[0].copy()
    cache: dict[float, np.ndarray] = {}
    for t in range(1, logs.shape[0]):
        d = float(distances[t])
        if d > 0:
            if d not in cache:
                cache[d] = _half_widths(lat, lon, d)
            acc = logs[t] + _neighbour_max(acc, cache[d], wrap=wrap)
        else:
            acc = logs[t] + acc
    return acc


def dynamic_stability(
    suitability: xr.DataArray,
    *,
    distance_km: float | Sequence[float] | None = None,
    rate: str | None = None,
    dim: str = "slice",
    eps: float = DEFAULT_EPS,
) -> xr.DataArray:
    """Dispersal-aware stability: the best log-suitability path through the series.

    Parameters
    ----------
    suitability : xarray.DataArray
        Continuous suitability ``(slice, lat, lon)`` of one chain in time order; NaN not land
        (taken as 0).
    distance_km : float or sequence of float, optional
        Dispersal distance between consecutive slices (one number, or one per slice with the
        first ignored). 0 gives static stability.
    rate : str, optional
        Instead of `distance_km`: a rate with units (``"500 km/kyr"``), times |Δyear| of the
        ``year`` coordinate.
    dim : str, default "slice"
    eps : float, default 1e-6

    Returns
    -------
    xarray.DataArray, [1]
        ``dynamic_stability`` (≤ 0) at the last slice; NaN where never land.

    Notes
    -----
    .. math:: a_0(j) = \\ln \\max(S_0(j), \\varepsilon), \\qquad
              a_t(j) = \\ln \\max(S_t(j), \\varepsilon) + \\max_{k: d(k, j) \\le D_t} a_{t-1}(k)

    with :math:`d` the great-circle distance between cell centres on the authalic sphere
    (barriers are not considered here; see :mod:`timeslice.series.dispersal` for paths through
    land). With :math:`D_t = 0` the neighbourhood is the cell itself and the result equals
    static stability. The result is the log-suitability of the best sequence of cells ending in
    :math:`j` with each move no longer than the step distance.

    References
    ----------
    Graham, C. H., VanDerWal, J., Phillips, S. J., Moritz, C., & Williams, S. E. (2010).
    Dynamic refugia and species persistence: tracking spatial shifts in habitat through time.
    Ecography 33:1062-1069. (The recursion is this project's formalisation of their idea.)
    """
    from timeslice.series.dispersal import parse_rate, step_distances

    _check_suitability(suitability, dim, eps)
    check_dataarray(suitability, name="suitability", dims=(dim, "lat", "lon"))
    da = suitability.transpose(dim, "lat", "lon")
    ns = da.sizes[dim]
    if (distance_km is None) == (rate is None):
        raise DataError("give exactly one of `distance_km` or `rate` for dynamic stability")
    if rate is not None:
        if "year" not in da.coords:
            raise DataError("`suitability` has no 'year' coordinate to turn `rate` into "
                            "distances; give `distance_km` instead")
        dist = step_distances(da["year"].values, parse_rate(rate))
    else:
        dist = np.asarray(distance_km, dtype=float)
        if dist.ndim == 0:
            dist = np.full(ns, float(dist))
        if dist.shape != (ns,) or np.any(~np.isfinite(dist[1:])) or np.any(dist[1:] < 0):
            raise DataError(f"`distance_km` must be one number >= 0 or {ns} of them, "
                            f"got {distance_km!r}")
    lat = np.asarray(da["lat"].values, float)
    lon = np.asarray(da["lon"].values, float)
    from timeslice.grid import is_global_lon

    logs = np.asarray(_log_floor(da, eps).values, dtype=float)
    acc = _dynamic_kernel(logs, dist, lat, lon, is_global_lon(lon))
    out = xr.DataArray(acc.astype(np.float32), dims=("lat", "lon"),
                       coords={"lat": da["lat"], "lon": da["lon"]})
    out = out.where(da.notnull().any(dim))
    out.name = "dynamic_stability"
    out.attrs = {"step_distance_km": dist.astype(float), "eps": float(eps)}
    return layers.stamp(out, description=(
            f"a_t = ln(max(S_t, {eps:g})) + max of a_(t-1) within the step distance "
            "(great-circle between cell centres); value at the last slice"))
