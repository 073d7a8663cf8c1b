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

__all__ = ["BIO_ATTRS", "BIO_NAMES", "bioclim_kernel", "from_monthly"]

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

# window w covers months w, w+1, w+2 (mod 12), w = 0 is January-February-March
_WINDOWS = (np.arange(12)[:, None] + np.arange(3)[None, :]) % 12


def _pick(values: np.ndarray, index: np.ndarray) -> np.ndarray:
    return np.take_along_axis(values, index[..., None], axis=-1)[..., 0]


def bioclim_kernel(tmin: np.ndarray, tmax: np.ndarray, pr: np.ndarray,
                   tavg: np.ndarray | None = None) -> np.ndarray:
    """Bioclimatic variables on plain arrays with months on the last axis.

    Parameters
    ----------
    tmin, tmax, pr : numpy.ndarray, shape (..., 12)
        Monthly mean daily minimum and maximum temperature (degC) and precipitation (mm).
    tavg : numpy.ndarray, optional
        Monthly mean temperature; default (tmax + tmin) / 2.

    Returns
    -------
    numpy.ndarray, shape (..., 19)
        BIO1 ... BIO19; NaN wherever any input month is NaN.
    """
    tmin = np.asarray(tmin, dtype=np.float64)
    tmax = np.asarray(tmax, dtype=np.float64)
    pr = np.asarray(pr, dtype=np.float64)
    if tavg is None:
        tavg = 0.5 * (tmax + tmin)
    else:
        tavg = np.asarray(tavg, dtype=np.float64)
    bad = ~(np.isfinite(tmin).all(-1) & np.isfinite(tmax).all(-1)
            & np.isfinite(pr).all(-1) & np.isfinite(tavg).all(-1))
    # zero-fill invalid cells so argmax/argmin are defined; they are set to NaN at the end
    tmin, tmax, pr, tavg = (np.where(bad[..., None], 0.0, a) for a in (tmin, tmax, pr, tavg))
    out = np.empty(tavg.shape[:-1] + (19,), dtype=np.float64)
    q_t = tavg[..., _WINDOWS].mean(axis=-1)  # (..., 12)
    q_p = pr[..., _WINDOWS].sum(axis=-1)
    bio5 = tmax.max(-1)
    bio6 = tmin.min(-1)
    bio7 = bio5 - bio6
    bio2 = (tmax - tmin).mean(-1)
    out[..., 0] = tavg.mean(-1)
    out[..., 1] = bio2
    with np.errstate(divide="ignore", invalid="ignore"):
        out[..., 2] = np.where(bio7 > 0, 100.0 * bio2 / np.where(bio7 > 0, bio7, 1.0), np.nan)
    out[..., 3] = 100.0 * tavg.std(axis=-1, ddof=1)
    out[..., 4] = bio5
    out[..., 5] = bio6
    out[..., 6] = bio7
    # np.argmax / argmin return the first occurrence: ties go to the earliest window from January
    out[..., 7] = _pick(q_t, q_p.argmax(-1))
    out[..., 8] = _pick(q_t, q_p.argmin(-1))
    out[..., 9] = q_t.max(-1)
    out[..., 10] = q_t.min(-1)
    out[..., 11] = pr.sum(-1)
    out[..., 12] = pr.max(-1)
    out[..., 13] = pr.min(-1)
    out[..., 14] = 100.0 * pr.std(axis=-1, ddof=1) / (1.0 + pr.mean(-1))
    out[..., 15] = q_p.max(-1)
    out[..., 16] = q_p.min(-1)
    out[..., 17] = _pick(q_p, q_t.argmax(-1))
    out[..., 18] = _pick(q_p, q_t.argmin(-1))
    out[bad] = np.nan
    return out


def from_monthly(
    ds: xr.Dataset,
    *,
    tavg: Literal["minmax", "tas"] = "minmax",
    dtype=np.float32,
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
    if "month" in ds.coords:
        ds = ds.sortby("month")
    args = [ds["tasmin"], ds["tasmax"], ds["pr"]]
    if tavg == "tas":
        args.append(ds["tas"])
    stacked = xr.apply_ufunc(
        bioclim_kernel,
        *args,
        input_core_dims=[["month"]] * len(args),
        output_core_dims=[["bio"]],
        dask="parallelized",
        output_dtypes=[np.float64],
        dask_gufunc_kwargs={"output_sizes": {"bio": 19}},
    )
    out = xr.Dataset(attrs={k: v for k, v in ds.attrs.items()})
    for i, name in enumerate(BIO_NAMES):
        units, long_name, desc = BIO_ATTRS[name]
        da = stacked.isel(bio=i, drop=True).astype(dtype)
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
