"""Regridding between regular lat-lon grids: exact separable conservative remapping and
separable bilinear interpolation, both NaN-aware.

Both methods are products of two sparse 1-D weight matrices, ``out = W_lat · f · W_lonᵀ``,
applied to every 2-D field (one ``xr.apply_ufunc`` over the ``(lat, lon)`` core dimensions).

Longitudes: the source may be global (it wraps), regional within [-180, 180), or regional
across the 180° meridian as readers return it (wrapped and split in two: its columns are
put back in continuous order inside the weights). The target axis is ascending and
continuous and may run past 180 (``timeslice.grid.make_grid``); target longitudes are
matched to the source modulo 360°.
"""

from __future__ import annotations

import warnings
from typing import Literal, TypeVar

import numpy as np
import scipy.sparse as sp
import xarray as xr

from timeslice.errors import DataError
from timeslice.grid import cell_bounds, is_global_lon, lon_order, normalise_lonlat, resolution

__all__ = [
    "apply_weights",
    "bilinear_weights",
    "conservative_weights",
    "regrid",
]

T = TypeVar("T", xr.Dataset, xr.DataArray)

Method = Literal["auto", "conservative", "bilinear"]


def _is_global(lon: np.ndarray) -> bool:
    return is_global_lon(lon)


def _unpermute(w: sp.csr_matrix, order: np.ndarray) -> sp.csr_matrix:
    """Columns of `w` (in continuous source order ``order``) back in the source's own order."""
    if np.array_equal(order, np.arange(order.size)):
        return w
    return w[:, np.argsort(order)].tocsr()


def _overlap_matrix(src_edges: np.ndarray, dst_edges: np.ndarray) -> sp.csr_matrix:
    """Sparse matrix of interval overlaps: ``M[i, j] = |dst_i ∩ src_j|``.

    Edges are ``(n, 2)`` arrays of (lo, hi) with lo < hi, increasing along the array. Each
    target interval meets a contiguous run of source intervals, found by binary search, so
    memory is proportional to the number of overlaps, not to n_dst x n_src.
    """
    s_lo, s_hi = src_edges[:, 0], src_edges[:, 1]
    first = np.searchsorted(s_hi, dst_edges[:, 0], side="right")
    last = np.searchsorted(s_lo, dst_edges[:, 1], side="left")
    counts = np.clip(last - first, 0, None)
    rows = np.repeat(np.arange(dst_edges.shape[0]), counts)
    offsets = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    cols = np.repeat(first, counts) + offsets
    lo = np.maximum(dst_edges[rows, 0], s_lo[cols])
    hi = np.minimum(dst_edges[rows, 1], s_hi[cols])
    ov = hi - lo
    keep = ov > 0
    return sp.csr_matrix(
        (ov[keep], (rows[keep], cols[keep])), shape=(dst_edges.shape[0], src_edges.shape[0])
    )


def _bounds(coord, other, kind: str) -> np.ndarray:
    """Cell edges; a one-point axis takes its cell size from its attrs or the other axis."""
    step = getattr(coord, "attrs", {}).get("resolution")
    if step is None and np.size(coord) == 1 and np.size(other) > 1:
        step = resolution(other)
    return cell_bounds(coord, kind=kind, step=step)


def conservative_weights(
    src_lat, src_lon, dst_lat, dst_lon
) -> tuple[sp.csr_matrix, sp.csr_matrix, np.ndarray]:
    """Separable exact overlap weights for conservative remapping on the sphere.

    Parameters
    ----------
    src_lat, src_lon : array-like
        Source cell centres (ascending latitudes).
    dst_lat, dst_lon : array-like
        Target cell centres.

    Returns
    -------
    w_lat : sparse (n_dst_lat, n_src_lat)
        Overlap of latitude bands in sin(latitude) (proportional to area on the sphere).
    w_lon : sparse (n_dst_lon, n_src_lon)
        Overlap of longitude intervals in degrees, target longitudes matched modulo 360°
        (a global source wraps; a source across 180° is handled in continuous order).
    dst_area : ndarray (n_dst_lat, n_dst_lon)
        Area of each target cell in the same measure, for the valid-area fraction.

    Notes
    -----
    The area of a lat-lon cell on a sphere is :math:`R^2 \\Delta\\lambda (\\sin\\varphi_2 -
    \\sin\\varphi_1)`, which is a product of a latitude factor and a longitude factor; the
    overlap of two such cells is again a cell, so the area-overlap matrix factorises exactly
    into a latitude and a longitude part (Jones 1999). The outermost row of a pole-to-pole
    source reaches the pole (:func:`timeslice.grid.cell_bounds`), so refining onto a global
    grid fills the polar rows.

    References
    ----------
    Jones, P. W. (1999). First- and second-order conservative remapping schemes for grids
    in spherical coordinates. Monthly Weather Review 127:2204-2210.
    """
    slat = np.sin(np.deg2rad(_bounds(src_lat, src_lon, "lat")))
    dlat = np.sin(np.deg2rad(_bounds(dst_lat, dst_lon, "lat")))
    w_lat = _overlap_matrix(slat, dlat)
    order, slon_c = lon_order(np.asarray(src_lon, dtype=float), source="regrid source")
    slon = _bounds(slon_c, src_lat, "lon")
    dlon = _bounds(dst_lon, dst_lat, "lon")
    # the source spans at most 360°, so its copies one turn east and west never overlap
    # each other: summing them matches target longitudes to the source modulo 360°
    w_lon = sum(
        (_overlap_matrix(slon + shift, dlon) for shift in (-360.0, 0.0, 360.0)),
        start=sp.csr_matrix((dlon.shape[0], slon.shape[0])),
    ).tocsr()
    w_lon = _unpermute(w_lon, order)
    dst_area = np.outer(dlat[:, 1] - dlat[:, 0], dlon[:, 1] - dlon[:, 0])
    return w_lat, w_lon, dst_area


def _linear_1d(src: np.ndarray, dst: np.ndarray, *, periodic: bool) -> sp.csr_matrix:
    """1-D linear interpolation matrix (n_dst, n_src).

    Points between the outermost source centre and the outer cell edge take the edge value
    (edge padding); points beyond the source cell edges get no weight (NaN after
    normalisation). With ``periodic`` the source wraps around 360° (target longitudes taken
    modulo 360°); without it the coordinates are used as given (:func:`_linear_lon` brings
    target longitudes to a regional source's turn first).
    """
    n = src.size
    rows, cols, vals = [], [], []
    if n == 1:
        half = 0.5
        inside = np.abs(dst - src[0]) <= half + 1e-9
        idx = np.nonzero(inside)[0]
        return sp.csr_matrix((np.ones(idx.size), (idx, np.zeros(idx.size, int))), shape=(dst.size, 1))
    step = resolution(src)
    if periodic:
        ext = np.concatenate([[src[-1] - 360.0], src, [src[0] + 360.0]])
        idx_map = np.concatenate([[n - 1], np.arange(n), [0]])
        d = ((dst - ext[0]) % 360.0) + ext[0]
        d = np.where(d > ext[-1], d - 360.0, d)
    else:
        ext = src
        idx_map = np.arange(n)
        d = dst
    lo_edge, hi_edge = ext[0] - (0 if periodic else step / 2), ext[-1] + (0 if periodic else step / 2)
    for i, x in enumerate(d):
        if x < lo_edge - 1e-9 or x > hi_edge + 1e-9:
            continue
        if x <= ext[0]:
            rows.append(i), cols.append(idx_map[0]), vals.append(1.0)
            continue
        if x >= ext[-1]:
            rows.append(i), cols.append(idx_map[-1]), vals.append(1.0)
            continue
        k = int(np.searchsorted(ext, x, side="right") - 1)
        t = (x - ext[k]) / (ext[k + 1] - ext[k])
        rows.extend((i, i)), cols.extend((idx_map[k], idx_map[k + 1])), vals.extend((1 - t, t))
    m = sp.coo_matrix((vals, (rows, cols)), shape=(dst.size, n)).tocsr()
    m.sum_duplicates()
    return m


def _linear_lon(src: np.ndarray, dst: np.ndarray) -> sp.csr_matrix:
    """Longitude interpolation matrix: periodic for a global source; otherwise in the
    source's continuous order, with target longitudes brought to the source's turn."""
    if _is_global(src):
        return _linear_1d(src, dst, periodic=True)
    order, src_c = lon_order(src, source="regrid source")
    if src_c.size > 1:
        west = src_c[0] - resolution(src_c) / 2
        # only longitudes outside the source's turn move (the rest stay bit for bit)
        off = (dst < west) | (dst >= west + 360.0)
        dst = np.where(off, ((dst - west) % 360.0) + west, dst)
    return _unpermute(_linear_1d(src_c, dst, periodic=False), order)


def _linear_lat(src: np.ndarray, dst: np.ndarray, *, polar: bool) -> sp.csr_matrix:
    """Latitude interpolation matrix; with `polar`, shape (n_dst, n_src + 2).

    Column 0 is a virtual row at the south pole, column n_src + 1 one at the north pole; a
    pole takes part only where the source's outermost cell reaches it
    (:func:`timeslice.grid.cell_bounds`). Between the outermost row's centre and the pole a
    target row is interpolated linearly in latitude between that row and the pole, whose value
    is the mean of the outermost row over all longitudes (a field on the sphere has one value
    at the pole). Without `polar` (regional sources) the outermost row is repeated.
    """
    m = _linear_1d(src, dst, periodic=False)
    if not polar or src.size < 2:
        return m
    edges = cell_bounds(src, kind="lat")
    n = src.size
    rows, cols, vals = [], [], []
    coo = m.tocoo()
    keep = np.ones(coo.nnz, dtype=bool)
    for pole, centre, col, virtual, reached in (
        (-90.0, src[0], 0, 0, edges[0, 0] <= -90.0),
        (90.0, src[-1], n - 1, n + 1, edges[-1, 1] >= 90.0),
    ):
        if not reached or centre == pole:
            continue
        beyond = (dst - centre) * np.sign(pole) > 0
        for i in np.flatnonzero(beyond & (np.abs(dst) <= 90.0)):
            t = (dst[i] - centre) / (pole - centre)  # 0 at the row centre, 1 at the pole
            keep &= coo.row != i
            rows += [i, i]
            cols += [col + 1, virtual]
            vals += [1.0 - t, t]
    out_rows = np.concatenate([coo.row[keep], np.asarray(rows, dtype=int)])
    out_cols = np.concatenate([coo.col[keep] + 1, np.asarray(cols, dtype=int)])
    out_vals = np.concatenate([coo.data[keep], np.asarray(vals, dtype=float)])
    return sp.csr_matrix((out_vals, (out_rows, out_cols)), shape=(dst.size, n + 2))


def bilinear_weights(src_lat, src_lon, dst_lat, dst_lon) -> tuple[sp.csr_matrix, sp.csr_matrix]:
    """Separable bilinear interpolation matrices ``(w_lat, w_lon)``.

    Parameters
    ----------
    src_lat, src_lon : array-like
        Source cell centres (ascending latitudes).
    dst_lat, dst_lon : array-like
        Target cell centres.

    Returns
    -------
    w_lat : scipy.sparse.csr_matrix
        (n_dst_lat, n_src_lat), or n_src_lat + 2 columns with the virtual pole rows.
    w_lon : scipy.sparse.csr_matrix
        (n_dst_lon, n_src_lon).

    Notes
    -----
    Longitudes wrap when the source grid is global. On a global source the polar rows are
    interpolated towards the pole (``w_lat`` then has two more columns, virtual pole rows
    that :func:`apply_weights` fills with the mean of the outermost row); latitudes of
    regional sources (and longitudes of regional grids) are edge-padded up to the source's
    outer cell edges, so polar rows and borders are never NaN.
    """
    src_lat = np.asarray(src_lat, dtype=float)
    src_lon = np.asarray(src_lon, dtype=float)
    w_lat = _linear_lat(src_lat, np.asarray(dst_lat, dtype=float), polar=_is_global(src_lon))
    w_lon = _linear_lon(src_lon, np.asarray(dst_lon, dtype=float))
    return w_lat, w_lon


def apply_weights(
    values: np.ndarray,
    w_lat: sp.csr_matrix,
    w_lon: sp.csr_matrix,
    dst_area: np.ndarray | None,
    min_valid_fraction: float,
) -> np.ndarray:
    """Apply separable weights to the last two axes of `values` (NaN-aware).

    Parameters
    ----------
    values : numpy.ndarray, shape (..., n_src_lat, n_src_lon)
        Source fields; NaN marks missing cells.
    w_lat, w_lon : scipy.sparse.csr_matrix
        Weights from :func:`bilinear_weights` or :func:`conservative_weights`; a block of
        target rows is ``w_lat[r0:r1]`` (each target row depends only on its own weights).
    dst_area : numpy.ndarray or None
        Target cell areas (conservative; rows matching `w_lat`), None for bilinear.
    min_valid_fraction : float
        Below this valid share of the weights the result is NaN.

    Returns
    -------
    numpy.ndarray, shape (..., n_dst_lat, n_dst_lon)
        float32 for float32 input, else float64 (computed in float64).
    """
    lead = values.shape[:-2]
    nlat, nlon = values.shape[-2:]
    flat = values.reshape((-1, nlat, nlon))
    out_dtype = np.result_type(values.dtype, np.float32)
    out = np.empty((flat.shape[0], w_lat.shape[0], w_lon.shape[0]), dtype=out_dtype)
    w_lon_t = w_lon.T.tocsr()
    if dst_area is None:
        full = np.outer(np.asarray(w_lat.sum(axis=1)).ravel(), np.asarray(w_lon.sum(axis=1)).ravel())
    else:
        full = dst_area
    # weight sum of a fully valid source, used when a field has no NaN (saves one product)
    all_valid_den = None
    polar = w_lat.shape[1] == nlat + 2
    for k in range(flat.shape[0]):
        f = np.asarray(flat[k], dtype=np.float64)
        if polar:
            f = _with_poles(f)
        valid = np.isfinite(f)
        if valid.all():
            num = np.asarray((w_lat @ f) @ w_lon_t)
            if all_valid_den is None:
                all_valid_den = np.asarray((w_lat @ np.ones_like(f)) @ w_lon_t)
            den = all_valid_den
        else:
            fz = np.where(valid, f, 0.0)
            num = np.asarray((w_lat @ fz) @ w_lon_t)
            den = np.asarray((w_lat @ valid.astype(np.float64)) @ w_lon_t)
        with np.errstate(invalid="ignore", divide="ignore"):
            ok = (den > 0) & (den >= (min_valid_fraction - 1e-12) * full)
            np.divide(num, den, out=num, where=ok)
        num[~ok] = np.nan
        out[k] = num
    return out.reshape(lead + out.shape[-2:])


def _with_poles(f: np.ndarray) -> np.ndarray:
    """`f` with a virtual south-pole row first and a north-pole row last: the NaN-aware
    mean of the outermost row (regular longitudes: every cell of a row has the same area)."""
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an all-NaN row gives a NaN pole
        south = np.nanmean(f[0])
        north = np.nanmean(f[-1])
    return np.concatenate([np.full((1, f.shape[1]), south), f, np.full((1, f.shape[1]), north)])


def _choose(src_lat, src_lon, dst_lat, dst_lon) -> Literal["conservative", "bilinear"]:
    def res(*coords) -> float:
        # a one-point axis has no spacing of its own: use the other axis
        steps = [resolution(c) for c in coords if np.size(c) > 1]
        return max(steps) if steps else 0.0

    rs = res(src_lat, src_lon)
    rd = res(dst_lat, dst_lon)
    return "conservative" if rd >= rs * (1 - 1e-9) else "bilinear"


def _target_coords(target) -> tuple[xr.DataArray, xr.DataArray]:
    if isinstance(target, (xr.Dataset, xr.DataArray)):
        t = target
        if "lat" not in t.coords or "lon" not in t.coords:
            t = normalise_lonlat(t, source="regrid target")
        return t["lat"], t["lon"]
    raise DataError("regrid `target` must be an xarray Dataset or DataArray with lat/lon")


def regrid(
    obj: T,
    target: xr.Dataset | xr.DataArray,
    *,
    method: Method | dict[str, Method] = "auto",
    min_valid_fraction: float = 0.5,
    source: str = "input",
    chunks: int | None = None,
) -> T:
    """Regrid onto the lat/lon grid of `target`.

    Parameters
    ----------
    obj : xarray.Dataset or xarray.DataArray
        Data with 1-D ``lat`` (ascending) and ``lon`` coordinates; any other dimensions
        (``month``, ...) are carried through. Variables without lat/lon are kept unchanged.
    target : xarray.Dataset or xarray.DataArray
        Anything carrying the target ``lat`` and ``lon``.
    method : {"auto", "conservative", "bilinear"} or mapping
        ``"auto"``: conservative when the target cells are at least as large as the source
        cells (coarsening), bilinear when refining. A mapping gives a method per variable
        (missing variables use "auto").
    min_valid_fraction : float
        Conservative: minimum fraction of the target cell's area covered by valid source
        cells. Bilinear: minimum sum of the weights of valid neighbours. Below it the
        result is NaN.
    source : str
        Name used in error messages.
    chunks : int, optional
        For numpy-backed input: return a lazy dask result in blocks of this many target
        latitude rows (bounded memory when refining onto a large grid).

    Returns
    -------
    Same type as `obj`, on the target grid, attrs kept.

    Notes
    -----
    Conservative: :math:`\\bar f_I = \\sum_j A_{Ij} f_j / \\sum_j A_{Ij} [f_j \\text{ valid}]`
    with :math:`A_{Ij}` the exact spherical overlap area of target cell :math:`I` and source
    cell :math:`j`. The area-weighted integral over fully covered target cells is conserved.

    References
    ----------
    Jones, P. W. (1999). Monthly Weather Review 127:2204-2210.

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> from timeslice.grid import make_grid
    >>> src = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=4, resolution=1.0)
    >>> f = xr.DataArray(np.arange(16.0).reshape(4, 4), dims=("lat", "lon"),
    ...                  coords={"lat": src.lat, "lon": src.lon})
    >>> dst = make_grid(lon_min=0, lon_max=4, lat_min=0, lat_max=4, resolution=2.0)
    >>> out = regrid(f, dst)  # coarsening: conservative
    >>> out.attrs["regrid_method"], out.shape
    ('conservative', (2, 2))
    >>> bool(abs(float(out[0, 0]) - 2.5) < 0.01)  # area-weighted mean of 0, 1, 4, 5
    True
    """
    if not 0.0 <= float(min_valid_fraction) <= 1.0:
        raise DataError(
            f"`min_valid_fraction` must be in [0, 1], got {min_valid_fraction}"
        )
    obj, slat, slon = _checked_source(obj, source)
    tlat, tlon = _checked_target(target, source)
    weights = _Weights(slat, slon, tlat.values, tlon.values)
    opts = dict(weights=weights, method=method, mvf=float(min_valid_fraction), source=source,
                chunks=chunks, tlat=tlat, tlon=tlon)
    if isinstance(obj, xr.DataArray):
        return _regrid_array(obj, str(obj.name), **opts)
    out = xr.Dataset(
        {str(k): _regrid_array(v, str(k), **opts) for k, v in obj.data_vars.items()},
        attrs=dict(obj.attrs),
    )
    for c in obj.coords:
        if c not in out.coords and "lat" not in obj[c].dims and "lon" not in obj[c].dims:
            out = out.assign_coords({c: obj[c]})
    return out


def _checked_source(obj, source: str):
    """`obj` on ascending lat/lon without gaps, with its coordinates as float arrays."""
    if "lat" not in obj.dims or "lon" not in obj.dims:
        obj = normalise_lonlat(obj, source=source)
    slat = obj["lat"].values.astype(float)
    slon = obj["lon"].values.astype(float)
    if np.any(np.diff(slat) <= 0) or np.any(np.diff(slon) <= 0):
        obj = normalise_lonlat(obj, source=source)
        slat = obj["lat"].values.astype(float)
        slon = obj["lon"].values.astype(float)
    lon_order(slon, source=source)  # a gap in the source (not a crossing of 180°) is refused
    return obj, slat, slon


def _checked_target(target, source: str) -> tuple[xr.DataArray, xr.DataArray]:
    tlat, tlon = _target_coords(target)
    t_order, _ = lon_order(tlon.values, source="regrid target")
    if not np.array_equal(t_order, np.arange(t_order.size)):
        raise DataError(
            f"{source}: the target grid's longitudes jump (a region across 180° wrapped to "
            "[-180, 180)); put it on a continuous axis first (timeslice.grid.continuous_lon)"
        )
    return tlat, tlon


class _Weights:
    """The weights of one source/target pair, computed once per method."""

    def __init__(self, slat, slon, tlat, tlon):
        self.coords = (slat, slon, tlat, tlon)
        self.cache: dict[str, tuple] = {}

    def get(self, m: str):
        if m == "auto":
            m = _choose(*self.coords)
        if m not in self.cache:
            if m == "conservative":
                self.cache[m] = conservative_weights(*self.coords)
            elif m == "bilinear":
                self.cache[m] = (*bilinear_weights(*self.coords), None)
            else:
                raise DataError(
                    f"regrid `method` must be 'auto', 'conservative' or 'bilinear', got {m!r}"
                )
        return m, self.cache[m]


def _regrid_array(da: xr.DataArray, name: str, *, weights: _Weights, method, mvf: float,
                  source: str, chunks, tlat, tlon) -> xr.DataArray:
    if "lat" not in da.dims or "lon" not in da.dims:
        return da
    m = method.get(name, "auto") if isinstance(method, dict) else method
    m, (w_lat, w_lon, area) = weights.get(m)
    if w_lat.nnz == 0 or w_lon.nnz == 0:
        slat, slon = weights.coords[:2]
        raise DataError(
            f"{source}: grid (lon {slon.min():g}..{slon.max():g}, lat {slat.min():g}.."
            f"{slat.max():g}) does not overlap the target area (lon {float(tlon.min()):g}.."
            f"{float(tlon.max()):g}, lat {float(tlat.min()):g}..{float(tlat.max()):g}); "
            "give an input that covers it"
        )
    data = da
    if data.dtype == bool or np.issubdtype(data.dtype, np.integer):
        data = data.astype(np.float32)
    if chunks is not None and data.chunks is None:
        res = _blocked(data, w_lat, w_lon, area, mvf, int(chunks))
    else:
        res = _unblocked(data, w_lat, w_lon, area, mvf, tlat.size, tlon.size)
    res = res.assign_coords(lat=tlat.values, lon=tlon.values)
    res = res.transpose(*da.dims)
    res["lat"].attrs.update(tlat.attrs)
    res["lon"].attrs.update(tlon.attrs)
    res.attrs = dict(da.attrs)
    res.attrs["regrid_method"] = m
    res.name = da.name
    return res


def _unblocked(data, w_lat, w_lon, area, mvf, nlat, nlon) -> xr.DataArray:
    """One apply_ufunc over the (lat, lon) core dims; dask input chunked on other dims stays
    lazy."""
    return xr.apply_ufunc(
        apply_weights,
        data,
        input_core_dims=[["lat", "lon"]],
        output_core_dims=[["lat", "lon"]],
        exclude_dims={"lat", "lon"},
        kwargs={"w_lat": w_lat, "w_lon": w_lon, "dst_area": area, "min_valid_fraction": mvf},
        dask="parallelized",
        output_dtypes=[np.result_type(data.dtype, np.float32)],
        dask_gufunc_kwargs={"output_sizes": {"lat": nlat, "lon": nlon}, "allow_rechunk": True},
        keep_attrs=True,
    )


def _blocked(data, w_lat, w_lon, area, mvf, rows) -> xr.DataArray:
    """Lazy output in blocks of `rows` target latitudes (a numpy source is small; the target
    may not be): peak memory is one block, not the whole target grid."""
    import dask
    import dask.array as dsa

    other = [d for d in data.dims if d not in ("lat", "lon")]
    src = data.transpose(*other, "lat", "lon")
    vals = dask.delayed(np.asarray(src.values))
    lead = src.shape[:-2]
    dtype = np.result_type(src.dtype, np.float32)
    blocks = []
    for r0 in range(0, w_lat.shape[0], rows):
        r1 = min(r0 + rows, w_lat.shape[0])
        blk = dask.delayed(apply_weights)(
            vals, w_lat[r0:r1], w_lon, None if area is None else area[r0:r1], mvf
        )
        blocks.append(dsa.from_delayed(blk, shape=lead + (r1 - r0, w_lon.shape[0]), dtype=dtype))
    arr = dsa.concatenate(blocks, axis=-2)
    coords = {d: src[d] for d in other if d in src.coords}
    return xr.DataArray(arr, dims=(*other, "lat", "lon"), coords=coords)
