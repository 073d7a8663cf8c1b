"""The 19 bioclimatic variables from a monthly climatology.

Definitions of O'Donnell & Ignizio (2012); conventions pinned in docs/methods.md:
quarters are the 12 rolling 3-month windows wrapping December to January, quarter
temperature is the mean and quarter precipitation the sum of its months, ties go to the
first window counted from January (JFM); standard deviations use the n - 1 divisor; BIO15
has 1 + mean in its denominator.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import xarray as xr

from timeslice.errors import DataError

__all__ = ["BIO_ATTRS", "BIO_NAMES", "bioclim_kernel", "bioclim_rows", "from_monthly"]

BIO_NAMES = tuple(f"bio{i}" for i in range(1, 20))

_T = "degC"
_P = "mm"
#: (units, long_name, description) of each output.
BIO_ATTRS: dict[str, tuple[str, str, str]] = {
    "bio1": (_T, "annual mean temperature", "mean over months of Tavg = (Tmax + Tmin) / 2"),
    "bio2": (_T, "mean diurnal range", "mean over months of (Tmax - Tmin)"),
    "bio3": ("%", "isothermality", "100 * BIO2 / BIO7"),
    "bio4": ("0.01 K", "temperature seasonality",
             "100 * standard deviation (n - 1 divisor) of monthly Tavg, i.e. degC x 100"),
    "bio5": (_T, "max temperature of warmest month", "maximum over months of Tmax"),
    "bio6": (_T, "min temperature of coldest month", "minimum over months of Tmin"),
    "bio7": (_T, "temperature annual range", "BIO5 - BIO6"),
    "bio8": (_T, "mean temperature of wettest quarter",
             "mean Tavg of the 3-month window (wrapping) with the largest precipitation"),
    "bio9": (_T, "mean temperature of driest quarter",
             "mean Tavg of the 3-month window (wrapping) with the smallest precipitation"),
    "bio10": (_T, "mean temperature of warmest quarter",
              "largest 3-month (wrapping) mean of Tavg"),
    "bio11": (_T, "mean temperature of coldest quarter",
              "smallest 3-month (wrapping) mean of Tavg"),
    "bio12": (_P, "annual precipitation", "sum of monthly precipitation"),
    "bio13": (_P, "precipitation of wettest month", "maximum monthly precipitation"),
    "bio14": (_P, "precipitation of driest month", "minimum monthly precipitation"),
    "bio15": ("%", "precipitation seasonality",
              "100 * standard deviation (n - 1 divisor) of monthly P / (1 + mean monthly P)"),
    "bio16": (_P, "precipitation of wettest quarter", "largest 3-month (wrapping) sum of P"),
    "bio17": (_P, "precipitation of driest quarter", "smallest 3-month (wrapping) sum of P"),
    "bio18": (_P, "precipitation of warmest quarter",
              "3-month (wrapping) sum of P of the window with the largest mean Tavg"),
    "bio19": (_P, "precipitation of coldest quarter",
              "3-month (wrapping) sum of P of the window with the smallest mean Tavg"),
}


def _pick(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    """values[index[j], j] for a (12, n) array and an (n,) index."""
    return np.take_along_axis(values, index[None, :], axis=0)[0]


def _sd(x: np.ndarray) -> np.ndarray:
    """Standard deviation over axis 0 with the n - 1 divisor."""
    dev = x - x.mean(axis=0)
    return np.sqrt(np.einsum("ij,ij->j", dev, dev) / (x.shape[0] - 1))


def bioclim_kernel(tmin: np.ndarray, tmax: np.ndarray, pr: np.ndarray,
                   tavg: np.ndarray | None = None, *, dtype=np.float64) -> np.ndarray:
    """Bioclimatic variables on plain arrays with months on the last axis.

    Parameters
    ----------
    tmin, tmax, pr : numpy.ndarray, shape (..., 12)
        Monthly mean daily minimum and maximum temperature (degC) and precipitation (mm).
    tavg : numpy.ndarray, optional
        Monthly mean temperature; default (tmax + tmin) / 2.
    dtype : numpy dtype
        Output dtype (computation is in float64).

    Returns
    -------
    numpy.ndarray, shape (..., 19)
        BIO1 ... BIO19; NaN wherever any input month is NaN.
    """
    lead = np.shape(tmin)[:-1]
    arrays = [tmin, tmax, pr] + ([] if tavg is None else [tavg])
    # months first and only the complete cells: reductions over 12 contiguous rows are
    # vectorised across cells, and sea cells (NaN) cost nothing
    flat = [np.asarray(a, dtype=np.float64).reshape(-1, 12) for a in arrays]
    ok = np.ones(flat[0].shape[0], dtype=bool)
    for a in flat:
        ok &= np.isfinite(a).all(axis=1)
    out = np.full((flat[0].shape[0], 19), np.nan, dtype=dtype)
    if ok.any():
        cols = [np.ascontiguousarray(a[ok].T) for a in flat]
        out[ok] = _bioclim_columns(*cols).T
    return out.reshape(lead + (19,))


def _bioclim_columns(tmin, tmax, pr, tavg=None) -> np.ndarray:
    """The 19 variables for (12, n) arrays of complete cells; returns (19, n)."""
    if tavg is None:
        tavg = 0.5 * (tmax + tmin)
    n = tmin.shape[1]
    out = np.empty((19, n), dtype=np.float64)
    # window w = months w, w+1, w+2 (mod 12), via the year extended by January and February
    ext_t = np.concatenate([tavg, tavg[:2]], axis=0)
    ext_p = np.concatenate([pr, pr[:2]], axis=0)
    q_t = (ext_t[:12] + ext_t[1:13] + ext_t[2:]) / 3.0
    q_p = ext_p[:12] + ext_p[1:13] + ext_p[2:]
    bio5 = tmax.max(axis=0)
    bio6 = tmin.min(axis=0)
    bio7 = bio5 - bio6
    bio2 = (tmax - tmin).mean(axis=0)
    out[0] = tavg.mean(axis=0)
    out[1] = bio2
    with np.errstate(divide="ignore", invalid="ignore"):
        out[2] = np.where(bio7 > 0, 100.0 * bio2 / np.where(bio7 > 0, bio7, 1.0), np.nan)
    out[3] = 100.0 * _sd(tavg)
    out[4] = bio5
    out[5] = bio6
    out[6] = bio7
    # argmax / argmin return the first occurrence: ties go to the earliest window from January
    out[7] = _pick(q_t, q_p.argmax(axis=0))
    out[8] = _pick(q_t, q_p.argmin(axis=0))
    out[9] = q_t.max(axis=0)
    out[10] = q_t.min(axis=0)
    out[11] = pr.sum(axis=0)
    out[12] = pr.max(axis=0)
    out[13] = pr.min(axis=0)
    out[14] = 100.0 * _sd(pr) / (1.0 + pr.mean(axis=0))
    out[15] = q_p.max(axis=0)
    out[16] = q_p.min(axis=0)
    out[17] = _pick(q_p, q_t.argmax(axis=0))
    out[18] = _pick(q_p, q_t.argmin(axis=0))
    return out


def from_monthly(
    ds: xr.Dataset,
    *,
    tavg: Literal["minmax", "tas"] = "minmax",
    dtype=np.float32,
    block_rows: int | None = None,
) -> xr.Dataset:
    """Bioclimatic variables ``bio1`` ... ``bio19`` from a monthly climatology.

    Parameters
    ----------
    ds : xarray.Dataset
        ``tasmin``, ``tasmax`` (degC) and ``pr`` (mm month-1) on a ``month`` dimension of
        length 12 (and optionally ``tas``).
    tavg : {"minmax", "tas"}
        Monthly mean temperature as (Tmax + Tmin)/2 (default, per the definitions) or the
        ``tas`` variable.
    dtype : numpy dtype
        Output dtype (default float32).
    block_rows : int, optional
        For numpy-backed input on (month, lat, lon): compute in blocks of this many latitude
        rows, on threads, straight into contiguous output arrays (bounded memory on large
        grids). Dask-backed input always goes through one ``xr.apply_ufunc``.

    Returns
    -------
    xarray.Dataset
        ``bio1`` ... ``bio19`` with ``units``, ``long_name`` and ``description``; degC, mm,
        % (BIO3, BIO15) and 0.01 K (BIO4, i.e. degC x 100).

    Notes
    -----
    With :math:`T_m = (T^{max}_m + T^{min}_m)/2`, quarters :math:`Q_w = \\{w, w+1, w+2\\}
    \\bmod 12`, :math:`\\bar T_{Q} = \\tfrac13 \\sum_{m\\in Q} T_m`,
    :math:`P_{Q} = \\sum_{m\\in Q} P_m`:

    .. math::

        BIO4 = 100\\, s(T_m), \\quad BIO15 = 100\\, s(P_m) / (1 + \\bar P), \\quad
        s(x) = \\sqrt{\\tfrac{1}{11}\\sum_m (x_m - \\bar x)^2}

    BIO3 is NaN where BIO7 = 0.

    References
    ----------
    O'Donnell, M. S. & Ignizio, D. A. (2012). Bioclimatic predictors for supporting
    ecological applications in the conterminous United States. U.S. Geological Survey
    Data Series 691.
    """
    missing = [v for v in ("tasmin", "tasmax", "pr") if v not in ds.data_vars]
    if tavg == "tas" and "tas" not in ds.data_vars:
        missing.append("tas")
    if missing:
        raise DataError(
            f"bioclimatic variables need {missing} (found {sorted(map(str, ds.data_vars))}); "
            "give monthly tasmin, tasmax and pr"
        )
    if "month" not in ds.dims or ds.sizes["month"] != 12:
        raise DataError(
            f"bioclimatic variables need a `month` dimension of length 12, got dims "
            f"{dict(ds.sizes)}; reduce the time axis to a monthly climatology first"
        )
    if "month" in ds.coords and np.any(np.diff(ds["month"].values) < 0):
        ds = ds.sortby("month")  # copies: only when needed
    args = [ds["tasmin"], ds["tasmax"], ds["pr"]]
    if tavg == "tas":
        args.append(ds["tas"])
    if block_rows is not None and all(a.chunks is None for a in args) and "lat" in ds.dims:
        return _blocked(ds, args, int(block_rows), np.dtype(dtype))
    stacked = xr.apply_ufunc(
        bioclim_kernel,
        *args,
        input_core_dims=[["month"]] * len(args),
        output_core_dims=[["bio"]],
        dask="parallelized",
        kwargs={"dtype": np.dtype(dtype)},
        output_dtypes=[np.dtype(dtype)],
        dask_gufunc_kwargs={"output_sizes": {"bio": 19}, "allow_rechunk": True},
    )
    layers = {name: stacked.isel(bio=i, drop=True) for i, name in enumerate(BIO_NAMES)}
    return _finish(ds, layers)


def _finish(ds: xr.Dataset, layers: dict[str, xr.DataArray]) -> xr.Dataset:
    out = xr.Dataset(attrs={k: v for k, v in ds.attrs.items()})
    for name in BIO_NAMES:
        units, long_name, desc = BIO_ATTRS[name]
        da = layers[name]
        da.attrs = {"units": units, "long_name": long_name, "description": desc}
        out[name] = da
    if "month" in out.coords:
        out = out.drop_vars("month")
    out.attrs["history"] = (
        (str(ds.attrs.get("history", "")) + "\n").lstrip()
        + "bio1-bio19 from monthly climatology (O'Donnell & Ignizio 2012; wrapping quarters, "
        "n-1 SD, BIO15 with 1 + mean)"
    )
    return out


def bioclim_rows(tmin: np.ndarray, tmax: np.ndarray, pr: np.ndarray,
                 tavg: np.ndarray | None = None, *, dtype=np.float32) -> np.ndarray:
    """Bioclimatic variables of a block of grid rows with months on the first axis.

    Parameters
    ----------
    tmin, tmax, pr : numpy.ndarray, shape (12, rows, lon)
        Monthly mean daily minimum and maximum temperature (degC) and precipitation (mm).
    tavg : numpy.ndarray, optional
        Monthly mean temperature; default (tmax + tmin) / 2.
    dtype : numpy dtype
        Output dtype (computation is in float64).

    Returns
    -------
    numpy.ndarray, shape (19, rows, lon)
        BIO1 ... BIO19; NaN wherever any input month is NaN. The same numbers as
        :func:`bioclim_kernel` on those cells.
    """
    arrays = [tmin, tmax, pr] + ([] if tavg is None else [tavg])
    _, nrow, nlon = arrays[0].shape
    cols = [np.asarray(a, dtype=np.float64).reshape(12, -1) for a in arrays]
    ok = np.ones(cols[0].shape[1], dtype=bool)
    for c in cols:
        ok &= np.isfinite(c).all(axis=0)
    res = np.full((19, cols[0].shape[1]), np.nan, dtype=dtype)
    if ok.any():
        res[:, ok] = _bioclim_columns(*[c[:, ok] for c in cols])
    return res.reshape(19, nrow, nlon)


def _blocked(ds: xr.Dataset, args: list[xr.DataArray], rows: int, dtype) -> xr.Dataset:
    from timeslice.harmonise.rowblocks import map_rows

    other = [d for d in args[0].dims if d not in ("month", "lat", "lon")]
    if other:
        raise DataError(
            f"blocked bioclimatic computation needs (month, lat, lon) fields, got dims "
            f"{args[0].dims}; leave `block_rows` unset"
        )
    arrays = [np.asarray(a.transpose("month", "lat", "lon").values) for a in args]
    _, nlat, nlon = arrays[0].shape
    outs = np.empty((19, nlat, nlon), dtype=dtype)

    def block(r0: int, r1: int) -> None:
        outs[:, r0:r1, :] = bioclim_rows(*[a[:, r0:r1, :] for a in arrays], dtype=dtype)

    map_rows(block, nlat, rows)
    template = args[0].isel(month=0, drop=True).transpose("lat", "lon")
    layers = {name: template.copy(data=outs[i]) for i, name in enumerate(BIO_NAMES)}
    return _finish(ds, layers)
