"""Novel climate relative to a reference (calibration) sample: MESS and ExDet NT1/NT2.

Both measures compare each target cell with the *reference set*: the background sample drawn
within the model's calibration area (one row per point, one column per predictor). They flag
where a transferred model extrapolates; they say nothing about whether the prediction there is
right.

The kernels (:func:`_mess_kernel`, :func:`_exdet_kernel`) work on plain numpy arrays with the
variables on the last axis; the public functions hand every variable of the target to one
:func:`xarray.apply_ufunc` call with ``dask="parallelized"``, so chunked (dask) targets stay lazy
and each chunk is processed independently.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import scipy.linalg
import xarray as xr

from timeslice.errors import DataError

__all__ = ["ReferenceSet", "combined", "exdet", "mess", "reference_table"]

#: Text written into output attributes to say what the reference set is.
REFERENCE_DESCRIPTION = "background sample within the calibration area"

#: Integer written into ``most_dissimilar`` where a target cell has a missing predictor.
DISSIMILAR_FILL = np.int16(-1)


class ReferenceSet:
    """A validated reference sample: variable names and a float64 ``(n_points, n_vars)`` array.

    Built by :func:`reference_table`; carried between the public functions so that validation
    happens once.
    """

    __slots__ = ("values", "variables")

    def __init__(self, values: np.ndarray, variables: tuple[str, ...]) -> None:
        self.values = values
        self.variables = variables

    @property
    def n_points(self) -> int:
        """Number of reference points."""
        return int(self.values.shape[0])


def reference_table(
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    *,
    variables: Sequence[str] | None = None,
    name: str = "reference",
) -> ReferenceSet:
    """Validate a reference sample and return it as a :class:`ReferenceSet`.

    Parameters
    ----------
    reference : pandas.DataFrame or xarray.Dataset or ReferenceSet
        One column per variable (DataFrame), or one data variable per predictor along a single
        ``point`` dimension (Dataset).
    variables : sequence of str, optional
        Variables to use, in this order. Default: every column (DataFrame) or every data
        variable (Dataset) of `reference`.
    name : str
        How to call the argument in error messages.

    Returns
    -------
    ReferenceSet

    Raises
    ------
    DataError
        A variable is missing, not numeric or holds NaN/inf; fewer than 2 points; or a variable
        has zero range (every reference point has the same value).
    """
    if isinstance(reference, ReferenceSet):
        if variables is None or tuple(variables) == reference.variables:
            return reference
        reference = pd.DataFrame(reference.values, columns=list(reference.variables))
    if isinstance(reference, xr.Dataset):
        dims = set(reference.dims)
        if dims != {"point"}:
            raise DataError(
                f"`{name}` Dataset must have exactly one dimension `point`, got {sorted(dims)}; "
                "pass a DataFrame with one column per variable instead"
            )
        available = list(reference.data_vars)
        getter = lambda v: np.asarray(reference[v].values)  # noqa: E731 - reference is small
    elif isinstance(reference, pd.DataFrame):
        available = [str(c) for c in reference.columns]
        getter = lambda v: reference[v].to_numpy()  # noqa: E731
    else:
        raise DataError(
            f"`{name}` must be a pandas DataFrame (one column per variable) or an xarray Dataset "
            f"with a `point` dimension, got {type(reference).__name__}"
        )
    if variables is None:
        variables = available
    variables = tuple(str(v) for v in variables)
    if not variables:
        raise DataError(f"`{name}` has no variables; pass at least one predictor column")
    missing = [v for v in variables if v not in available]
    if missing:
        raise DataError(
            f"`{name}` has no variable {missing[0]!r} (has {available}); "
            "sample the background for every predictor of the model"
        )
    columns = []
    for v in variables:
        col = getter(v)
        if not np.issubdtype(col.dtype, np.number) or np.issubdtype(col.dtype, np.complexfloating):
            raise DataError(f"`{name}` variable {v!r} must be numeric, got dtype {col.dtype}")
        col = col.astype(np.float64)
        bad = int(np.count_nonzero(~np.isfinite(col)))
        if bad:
            raise DataError(
                f"`{name}` variable {v!r} has {bad} missing or infinite values; "
                "drop background points without climate before using them as reference"
            )
        columns.append(col)
    values = np.stack(columns, axis=1) if columns else np.empty((0, 0))
    if values.shape[0] < 2:
        raise DataError(
            f"`{name}` has {values.shape[0]} points; at least 2 are needed (more than "
            "1,000 background points are common practice)"
        )
    span = values.max(axis=0) - values.min(axis=0)
    for v, s in zip(variables, span):
        if not s > 0:
            raise DataError(
                f"`{name}` variable {v!r} has zero range (every reference value is "
                f"{values[0, variables.index(v)]:g}); drop it from the predictors"
            )
    return ReferenceSet(np.ascontiguousarray(values), variables)


def _target_arrays(target: xr.Dataset, variables: Sequence[str], name: str) -> list[xr.DataArray]:
    if not isinstance(target, xr.Dataset):
        raise DataError(
            f"`{name}` must be an xarray Dataset with one data variable per predictor, "
            f"got {type(target).__name__}"
        )
    missing = [v for v in variables if v not in target.data_vars]
    if missing:
        raise DataError(
            f"`{name}` has no variable {missing[0]!r} (has {sorted(map(str, target.data_vars))}); "
            "every reference variable must be present in the target slice"
        )
    arrays = [target[v] for v in variables]
    dims0 = arrays[0].dims
    for v, a in zip(variables, arrays):
        if set(a.dims) != set(dims0):
            raise DataError(
                f"`{name}` variable {v!r} has dims {a.dims}, expected {dims0} like "
                f"{variables[0]!r}; put every predictor on the same grid"
            )
    return arrays


def _valid_columns(blocks: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray | None]:
    """Finite cells of same-shape blocks as a float64 ``(k, n_valid)`` matrix, and their mask
    (None when every cell is finite). Cells with any missing predictor are never copied."""
    flat = [np.asarray(b).reshape(-1) for b in blocks]
    valid = np.isfinite(flat[0])
    for f in flat[1:]:
        valid &= np.isfinite(f)
    if valid.all():
        good = np.empty((len(flat), flat[0].size), dtype=np.float64)
        for i, f in enumerate(flat):
            good[i] = f
        return good, None
    good = np.empty((len(flat), int(np.count_nonzero(valid))), dtype=np.float64)
    for i, f in enumerate(flat):
        good[i] = f[valid]
    return good, valid


# --------------------------------------------------------------------------------------- MESS

#: Bins per reference point in the count look-up table (our choice, tuned in bench/transfer.py:
#: a 10,000-point reference gives a 1.3 MB int32 table per variable and leaves about 95 % of
#: target values in empty bins).
_BINS_PER_POINT = 32
_MAX_BINS = 2**20


class _CountTable:
    """Exact, mostly O(1) counts of reference values strictly smaller than a target value.

    For each variable, the monotone map ``g(x) = trunc(clip((x - lo) * scale, 0, G - 1))``
    sends the sorted reference values to bins; ``first[j]`` is the number of reference values
    with ``g < j``. Because ``g`` is non-decreasing in floating point too, every reference value
    in a lower bin than ``g(p)`` is smaller than ``p`` and none in a higher bin is; so the count
    is ``first[g(p)]`` exactly whenever the bin of ``p`` holds no reference value, and a binary
    search (``searchsorted(side="left")``) settles the rest. The table stores ``first[j]`` for
    empty bins and ``-1`` for occupied ones, so one look-up answers both questions.

    Pickling sends only the sorted reference; the tables are rebuilt (once per process) where
    the object is unpickled, e.g. on ``dask.distributed`` workers.
    """

    __slots__ = ("code", "hi", "lo", "m", "n_bins", "scale", "sim_of_count", "sorted", "span")

    def __init__(self, ref_sorted: np.ndarray) -> None:
        ref_sorted = np.asarray(ref_sorted, dtype=np.float64)
        self.sorted = np.ascontiguousarray(ref_sorted.T)  # (k, m), rows ascending
        self.m = ref_sorted.shape[0]
        self.lo = self.sorted[:, 0].copy()
        self.hi = self.sorted[:, -1].copy()
        self.span = self.hi - self.lo
        self.n_bins = int(min(max(_BINS_PER_POINT * self.m, 1024), _MAX_BINS))
        with np.errstate(divide="ignore", invalid="ignore"):
            self.scale = np.where(self.span > 0, self.n_bins / self.span, 0.0)
        self.code = []
        for i in range(self.sorted.shape[0]):
            counts = np.bincount(self._bins(i, self.sorted[i]), minlength=self.n_bins)
            first = np.cumsum(counts) - counts  # reference values in lower bins
            code = first.astype(np.int32)
            code[counts > 0] = -1
            self.code.append(code)
        # S for 0 < f < 100 as a function of the count c: 2f for f <= 50, 2 (100 - f) above,
        # i.e. 200 min(c, m - c) / m with f = 100 c / m. From the integer min, so that counts
        # the formula makes equal (c and m - c) give bit-equal S and ties stay ties.
        c = np.arange(self.m + 1)
        self.sim_of_count = 200.0 * np.minimum(c, self.m - c) / self.m

    def __reduce__(self):
        return (_count_table_cached, (self.sorted.T.copy(),))

    def _bins(self, i: int, x: np.ndarray) -> np.ndarray:
        g = x - self.lo[i]
        g *= self.scale[i]
        np.clip(g, 0.0, self.n_bins - 1, out=g)
        return g.astype(np.intp)  # non-negative: truncation = floor

    def count_smaller(self, i: int, x: np.ndarray) -> np.ndarray:
        """Number of reference values of variable `i` strictly smaller than each finite `x`."""
        c = np.zeros(x.shape, dtype=np.int64)
        c[x > self.hi[i]] = self.m
        inside = (x > self.lo[i]) & (x <= self.hi[i])
        xi = x[inside]
        ci = self.code[i][self._bins(i, xi)].astype(np.int64)
        ambiguous = ci < 0
        if ambiguous.any():
            ci[ambiguous] = np.searchsorted(self.sorted[i], xi[ambiguous], side="left")
        c[inside] = ci
        return c

    def similarity(self, i: int, x: np.ndarray) -> np.ndarray:
        """MESS similarity ``S_i`` of each finite `x` (float64)."""
        lo, hi = self.lo[i], self.hi[i]
        # f = 0 (x <= lo) and f = 100 (x > hi) in one expression: 100 min(x - lo, hi - x) / span
        s = np.minimum(x - lo, hi - x)
        s *= 100.0 / self.span[i]
        inside = x > lo
        inside &= x <= hi  # here 0 < f < 100
        c = self.code[i][self._bins(i, x)]
        ambiguous = c < 0
        ambiguous &= inside
        if ambiguous.any():
            c[ambiguous] = np.searchsorted(self.sorted[i], x[ambiguous], side="left")
        np.copyto(s, self.sim_of_count[c], where=inside)
        return s


_TABLE_CACHE: dict[bytes, _CountTable] = {}


def _count_table_cached(ref_sorted: np.ndarray) -> _CountTable:
    """The :class:`_CountTable` of a sorted reference, built once per process and content
    (every slice of a run shares one reference; unpickling on workers lands here too)."""
    import hashlib

    key = hashlib.sha1(np.ascontiguousarray(ref_sorted).tobytes()).digest()
    table = _TABLE_CACHE.get(key)
    if table is None:
        if len(_TABLE_CACHE) >= 4:  # a few MB each; a run uses one reference
            _TABLE_CACHE.clear()
        table = _TABLE_CACHE[key] = _CountTable(ref_sorted)
    return table


def _mess_columns(table: _CountTable, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """MESS and argmin for finite columns ``cols`` of shape (k, n)."""
    n = cols.shape[1]
    best = np.full(n, np.inf)
    arg = np.zeros(n, dtype=np.int16)
    for i in range(cols.shape[0]):  # loop over variables only (k is small); cells are vectorised
        s = table.similarity(i, cols[i])
        better = s < best  # strict: the first variable keeps ties
        np.copyto(best, s, where=better)
        np.copyto(arg, np.int16(i), where=better)
    return best, arg


def _mess_kernel(ref_sorted: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """MESS and most-dissimilar variable for an array of target points.

    Parameters
    ----------
    ref_sorted : numpy.ndarray, shape (M, k)
        Reference values, each column sorted ascending.
    values : numpy.ndarray, shape (..., k)
        Target values, variables on the last axis.

    Returns
    -------
    mess : numpy.ndarray, shape (...), float64
        NaN where any variable of the point is not finite.
    most_dissimilar : numpy.ndarray, shape (...), int16
        Index of the variable with the smallest similarity (first on ties); -1 where ``mess``
        is NaN.

    Notes
    -----
    The percentage of reference values strictly smaller than ``p`` is ``f = 100 c / M`` with
    ``c = searchsorted(ref, p, side="left")`` (found through :class:`_CountTable`, exactly); the
    case tests are made on the integer count (``f <= 50`` is ``2 c <= M``), so they are exact.
    """
    ref_sorted = np.asarray(ref_sorted, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)
    k = ref_sorted.shape[1]
    if values.shape[-1] != k:
        raise ValueError(f"values have {values.shape[-1]} variables, reference has {k}")
    flat = values.reshape(-1, k)
    good, valid = _valid_columns([flat[:, i] for i in range(k)])
    mess_v, dissimilar_v = _mess_columns(_CountTable(ref_sorted), good)
    out_shape = values.shape[:-1]
    return (
        _scatter(mess_v, valid, np.nan).reshape(out_shape),
        _scatter(dissimilar_v, valid, DISSIMILAR_FILL).reshape(out_shape),
    )


def _mess_block(*blocks: np.ndarray, table: _CountTable) -> tuple[np.ndarray, np.ndarray]:
    shape = np.shape(blocks[0])
    good, valid = _valid_columns(blocks)
    mess_v, dissimilar_v = _mess_columns(table, good)
    return (
        _scatter(mess_v.astype(np.float32), valid, np.float32(np.nan)).reshape(shape),
        _scatter(dissimilar_v, valid, DISSIMILAR_FILL).reshape(shape),
    )


def _scatter(values: np.ndarray, valid: np.ndarray | None, fill: Any) -> np.ndarray:
    """Values of the valid cells back onto all cells (`fill` elsewhere)."""
    if valid is None:
        return values
    out = np.full(valid.shape, fill, dtype=values.dtype)
    out[valid] = values
    return out


def mess(
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    target: xr.Dataset,
    *,
    variables: Sequence[str] | None = None,
) -> xr.Dataset:
    r"""Multivariate environmental similarity surface (MESS) of `target` against `reference`.

    Parameters
    ----------
    reference : pandas.DataFrame or xarray.Dataset
        Reference sample, one column (or ``point``-dimensioned data variable) per predictor:
        the background sample within the calibration area.
    target : xarray.Dataset
        The same variables on any dims, typically ``(lat, lon)``; numpy or dask backed.
    variables : sequence of str, optional
        Variables to compare, in this order (it fixes the codes of ``most_dissimilar``).
        Default: every variable of `reference`.

    Returns
    -------
    xarray.Dataset
        ``mess`` (float32, [1]): the smallest similarity over variables; negative where at least
        one variable lies outside the reference range. ``most_dissimilar`` (int16): index of
        the most dissimilar variable, with CF ``flag_values``/``flag_meanings`` naming the variables and
        -1 (``_FillValue``) where a predictor is missing. NaN in any predictor gives NaN.

    Notes
    -----
    For variable :math:`i` with reference minimum :math:`m_i`, maximum :math:`M_i` and
    :math:`f_i` the percentage of reference values strictly smaller than :math:`p_i`:

    .. math::

        S_i = \begin{cases}
            100\,(p_i - m_i)/(M_i - m_i) & f_i = 0\\
            2 f_i & 0 < f_i \le 50\\
            2\,(100 - f_i) & 50 < f_i < 100\\
            100\,(M_i - p_i)/(M_i - m_i) & f_i = 100
        \end{cases}
        \qquad \mathrm{MESS} = \min_i S_i .

    ``f`` is found by binary search in each sorted reference column, :math:`O(N \log M)` for
    :math:`N` cells and :math:`M` reference points.

    References
    ----------
    Elith, J., Kearney, M. & Phillips, S. (2010). The art of modelling range-shifting species.
    *Methods in Ecology and Evolution*, 1, 330–342. https://doi.org/10.1111/j.2041-210X.2010.00036.x
    """
    ref = reference_table(reference, variables=variables)
    arrays = _target_arrays(target, ref.variables, "target")
    table = _count_table_cached(np.sort(ref.values, axis=0))
    mess_da, dissimilar_da = xr.apply_ufunc(
        _mess_block,
        *arrays,
        kwargs={"table": table},
        output_core_dims=[[], []],
        dask="parallelized",
        output_dtypes=[np.float32, np.int16],
        keep_attrs=False,
    )
    _set_mess_attrs(mess_da, dissimilar_da, ref)
    out = xr.Dataset({"mess": mess_da.rename("mess"),
                      "most_dissimilar": dissimilar_da.rename("most_dissimilar")})
    out.attrs = {
        "reference_set": REFERENCE_DESCRIPTION,
        "variables": " ".join(ref.variables),
        "history": "timeslice.transfer.novelty.mess (Elith, Kearney & Phillips 2010)",
    }
    return out


def _set_mess_attrs(mess_da: xr.DataArray, dissimilar_da: xr.DataArray, ref: ReferenceSet) -> None:
    """CF attributes of the MESS layers (in place)."""
    names = " ".join(_flag_name(v) for v in ref.variables)
    mess_da.attrs = {
        "units": "1",
        "long_name": "multivariate environmental similarity",
        "description": (
            "MESS (Elith et al. 2010): smallest univariate similarity over the predictors; "
            "100 at the reference median, 0 at the edge of the reference range, negative "
            "outside it (novel climate: suitability there is extrapolated and not to be trusted)"
        ),
        "reference_set": REFERENCE_DESCRIPTION,
        "reference_points": ref.n_points,
    }
    dissimilar_da.attrs = {
        "units": "1",
        "long_name": "most dissimilar variable",
        "description": (
            "index of the predictor with the smallest MESS similarity (first in order on ties); "
            "-1 where a predictor is missing"
        ),
        "flag_values": np.arange(len(ref.variables), dtype=np.int16),
        "flag_meanings": names,
        "reference_set": REFERENCE_DESCRIPTION,
    }
    dissimilar_da.encoding["_FillValue"] = DISSIMILAR_FILL


def _flag_name(v: str) -> str:
    """CF flag meanings are blank-separated words."""
    return "_".join(str(v).split()) or "unnamed"


# -------------------------------------------------------------------------------------- ExDet


def _exdet_columns(params: dict, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """NT1 and NT2 for finite columns ``cols`` of shape (k, n)."""
    lo, hi, mean = params["lo"], params["hi"], params["mean"]
    whiten = params["whiten"]
    k, n = cols.shape
    nt1 = np.zeros(n)
    centred = np.empty_like(cols)
    for i in range(k):
        x = cols[i]
        d = np.minimum(x - lo[i], hi[i] - x)
        np.minimum(d, 0.0, out=d)
        d /= hi[i] - lo[i]
        nt1 += d
        np.subtract(x, mean[i], out=centred[i])
    # z = L^-1 (x - mean) row by row with the lower-triangular inverse (no BLAS threads inside
    # dask threads, and the same summation order whatever the chunk or thread count)
    d2 = np.zeros(n)
    z = np.empty(n)
    tmp = np.empty(n)
    for i in range(k):
        np.multiply(centred[0], whiten[i, 0], out=z)
        for j in range(1, i + 1):
            np.multiply(centred[j], whiten[i, j], out=tmp)
            z += tmp
        np.multiply(z, z, out=tmp)
        d2 += tmp
    return nt1, d2 / params["d2_max"]


def _exdet_kernel(
    lo: np.ndarray,
    hi: np.ndarray,
    mean: np.ndarray,
    chol: np.ndarray,
    d2_max: float,
    values: np.ndarray,
    whiten: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """NT1 and NT2 for an array of target points.

    Parameters
    ----------
    lo, hi : numpy.ndarray, shape (k,)
        Reference minimum and maximum per variable.
    mean : numpy.ndarray, shape (k,)
        Reference mean.
    chol : numpy.ndarray, shape (k, k)
        Lower Cholesky factor ``L`` of the reference covariance, ``C = L L^T``.
    d2_max : float
        Largest squared Mahalanobis distance among the reference points.
    values : numpy.ndarray, shape (..., k)
        Target values, variables on the last axis.
    whiten : numpy.ndarray, shape (k, k), optional
        ``L^-1``; computed from `chol` by a triangular solve when not given.

    Returns
    -------
    nt1, nt2 : numpy.ndarray, shape (...), float64
        NaN where any variable of the point is not finite.
    """
    values = np.asarray(values, dtype=np.float64)
    k = lo.shape[0]
    out_shape = values.shape[:-1]
    if whiten is None:
        whiten = scipy.linalg.solve_triangular(chol, np.eye(k), lower=True)
    params = {"lo": lo, "hi": hi, "mean": mean, "whiten": whiten, "d2_max": d2_max}
    flat = values.reshape(-1, k)
    good, valid = _valid_columns([flat[:, i] for i in range(k)])
    nt1, nt2 = _exdet_columns(params, good)
    return (
        _scatter(nt1, valid, np.nan).reshape(out_shape),
        _scatter(nt2, valid, np.nan).reshape(out_shape),
    )


def _exdet_block(*blocks: np.ndarray, params: dict) -> tuple[np.ndarray, np.ndarray]:
    shape = np.shape(blocks[0])
    good, valid = _valid_columns(blocks)
    nt1, nt2 = _exdet_columns(params, good)
    nan32 = np.float32(np.nan)
    return (
        _scatter(nt1.astype(np.float32), valid, nan32).reshape(shape),
        _scatter(nt2.astype(np.float32), valid, nan32).reshape(shape),
    )


def _exdet_params(ref: ReferenceSet) -> dict:
    x = ref.values
    mean = x.mean(axis=0)
    # Sample covariance (n - 1); NT2 is a ratio of distances, so the divisor cancels.
    cov = np.atleast_2d(np.cov(x, rowvar=False))
    try:
        chol = scipy.linalg.cholesky(cov, lower=True)
    except np.linalg.LinAlgError as err:
        raise DataError(
            f"`reference` covariance of {list(ref.variables)} is singular (a predictor is a "
            "linear combination of others); drop one of the collinear variables"
        ) from err
    # collinearity judged on the correlation matrix: predictors in very different units
    # (mm and °C x 100) make the covariance ill-conditioned without being collinear
    sd = np.sqrt(np.diag(cov))
    cond = np.linalg.cond(cov / np.outer(sd, sd))
    if not np.isfinite(cond) or cond > 1e12:
        raise DataError(
            f"`reference` covariance of {list(ref.variables)} is numerically singular "
            f"(condition number {cond:.3g}); drop one of the collinear variables"
        )
    whiten = scipy.linalg.solve_triangular(chol, np.eye(chol.shape[0]), lower=True)
    z = whiten @ (x - mean).T  # the same arithmetic as for target cells
    d2_ref = np.einsum("ij,ij->j", z, z)
    return {
        "lo": x.min(axis=0),
        "hi": x.max(axis=0),
        "mean": mean,
        "chol": chol,
        "whiten": whiten,
        "d2_max": float(d2_ref.max()),
    }


def _set_exdet_attrs(nt1: xr.DataArray, nt2: xr.DataArray, ref: ReferenceSet) -> None:
    """CF attributes of the ExDet layers (in place)."""
    nt1.attrs = {
        "units": "1",
        "long_name": "univariate novelty (ExDet NT1)",
        "description": (
            "sum over predictors of the distance outside the reference range, in units of "
            "that range (Mesgaran et al. 2014); 0 inside every range, negative outside "
            "(extrapolation: flagged, not trusted)"
        ),
        "reference_set": REFERENCE_DESCRIPTION,
        "reference_points": ref.n_points,
    }
    nt2.attrs = {
        "units": "1",
        "long_name": "combinational novelty (ExDet NT2)",
        "description": (
            "squared Mahalanobis distance from the reference mean over the largest one among "
            "reference points (Mesgaran et al. 2014); above 1 the combination of predictor "
            "values is outside the reference"
        ),
        "reference_set": REFERENCE_DESCRIPTION,
        "reference_points": ref.n_points,
    }


def exdet(
    reference: pd.DataFrame | xr.Dataset | ReferenceSet,
    target: xr.Dataset,
    *,
    variables: Sequence[str] | None = None,
) -> xr.Dataset:
    r"""Extrapolation detection (ExDet): univariate (NT1) and combinational (NT2) novelty.

    Parameters
    ----------
    reference : pandas.DataFrame or xarray.Dataset
        Reference sample (background within the calibration area), one column per predictor.
    target : xarray.Dataset
        The same variables on any dims; numpy or dask backed.
    variables : sequence of str, optional
        Variables to use. Default: every variable of `reference`.

    Returns
    -------
    xarray.Dataset
        ``nt1`` (float32, [1], :math:`\le 0`; 0 inside every univariate reference range) and
        ``nt2`` (float32, [1], :math:`\ge 0`; above 1 a combination of values not seen in the
        reference). NaN where a predictor is missing.

    Notes
    -----
    With reference minimum :math:`m_i`, maximum :math:`M_i`, mean :math:`\bar x` and covariance
    :math:`C`:

    .. math::

        \mathrm{NT1}(p) = \sum_i \frac{\min(p_i - m_i,\; M_i - p_i,\; 0)}{M_i - m_i},
        \qquad
        \mathrm{NT2}(p) = \frac{D^2(p)}{\max_{r} D^2(r)},
        \quad D^2(x) = (x - \bar x)^\top C^{-1} (x - \bar x),

    the maximum taken over the reference points :math:`r`. :math:`D^2` is computed as
    :math:`\lVert L^{-1}(x - \bar x)\rVert^2` with the Cholesky factor :math:`C = L L^\top`
    (a triangular solve, no matrix inverse). The covariance divisor (n − 1 here) cancels in the
    ratio.

    References
    ----------
    Mesgaran, M. B., Cousens, R. D. & Webber, B. L. (2014). Here be dragons: a tool for
    quantifying novelty due to covariate range and correlation change when projecting species
    distribution models. *Diversity and Distributions*, 20, 1147–1159.
    https://doi.org/10.1111/ddi.12209
    """
    ref = reference_table(reference, variables=variables)
    arrays = _target_arrays(target, ref.variables, "target")
    params = _exdet_params(ref)
    nt1, nt2 = xr.apply_ufunc(
        _exdet_block,
        *arrays,
        kwargs={"params": params},
        output_core_dims=[[], []],
        dask="parallelized",
        output_dtypes=[np.float32, np.float32],
        keep_attrs=False,
    )
    _set_exdet_attrs(nt1, nt2, ref)
    out = xr.Dataset({"nt1": nt1.rename("nt1"), "nt2": nt2.rename("nt2")})
    out.attrs = {
        "reference_set": REFERENCE_DESCRIPTION,
        "variables": " ".join(ref.variables),
        "history": "timeslice.transfer.novelty.exdet (Mesgaran, Cousens & Webber 2014)",
    }
    return out


def combined(nt1: xr.DataArray, nt2: xr.DataArray) -> xr.DataArray:
    """The single ExDet novelty layer: NT1 where NT1 < 0, else NT2.

    Parameters
    ----------
    nt1, nt2 : xarray.DataArray
        Outputs of :func:`exdet`.

    Returns
    -------
    xarray.DataArray, [1]
        Negative: outside a univariate range; 0..1: inside the reference; above 1: novel
        combination. NaN where either input is NaN.

    References
    ----------
    Mesgaran, M. B., Cousens, R. D. & Webber, B. L. (2014). *Diversity and Distributions*, 20,
    1147–1159.
    """
    out = xr.where(nt1 < 0, nt1, nt2).where(nt1.notnull() & nt2.notnull())
    out = out.astype(np.float32).rename("exdet")
    out.attrs = {
        "units": "1",
        "long_name": "combined novelty (ExDet)",
        "description": (
            "NT1 where NT1 < 0 (outside a univariate range), else NT2 (above 1: novel "
            "combination); Mesgaran et al. 2014"
        ),
        "reference_set": REFERENCE_DESCRIPTION,
    }
    return out
