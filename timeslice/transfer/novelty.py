"""Novel climate relative to a reference (calibration) sample: MESS and ExDet NT1/NT2.

Both measures compare each target cell with the *reference set*: the background sample drawn
within the model's calibration area (one row per point, one column per predictor). They flag
where a transferred model extrapolates; they say nothing about whether the prediction there is
right.

Each is a :class:`timeslice.transfer.metrics.NoveltyMetric` (:class:`Mess`, :class:`ExDet`):
prepared once from the reference, computed for the stacked finite cells of a block by a compiled
per-cell loop (:mod:`timeslice.transfer.kernels`). The public functions :func:`mess` and
:func:`exdet` run one metric over a Dataset with :func:`xarray.apply_ufunc`
(``dask="parallelized"``: chunked targets stay lazy); a transfer runs them all in the pass of
:func:`timeslice.transfer.project.project_slice`.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import scipy.linalg
import xarray as xr

from timeslice.errors import DataError
from timeslice.transfer.metrics import NoveltyMetric, OutputLayer, register_metric
from timeslice.transfer.reference import (
    REFERENCE_DESCRIPTION,
    ReferenceSet,
    reference_table,
    scatter,
    target_arrays,
    valid_columns,
)

__all__ = [
    "DISSIMILAR_FILL",
    "CountTable",
    "ExDet",
    "Mess",
    "ReferenceSet",
    "combined",
    "count_table_cached",
    "exdet",
    "exdet_parameters",
    "exdet_values",
    "mess",
    "mess_values",
    "reference_table",
]

#: Integer written into ``most_dissimilar`` where a target cell has a missing predictor.
DISSIMILAR_FILL = np.int16(-1)

# --------------------------------------------------------------------------------------- MESS

#: Bins per reference point in the count look-up table (our choice, tuned in bench/transfer.py:
#: a 10,000-point reference gives a 1.3 MB int32 table per variable and leaves about 95 % of
#: target values in empty bins).
_BINS_PER_POINT = 32
_MAX_BINS = 2**20


class CountTable:
    """Exact, mostly O(1) counts of reference values strictly smaller than a target value.

    For each variable, the monotone map ``g(x) = trunc(clip((x - lo) * scale, 0, G - 1))``
    sends the sorted reference values to bins; ``first[j]`` is the number of reference values
    with ``g < j``. Because ``g`` is non-decreasing in floating point too, every reference value
    in a lower bin than ``g(p)`` is smaller than ``p`` and none in a higher bin is; so the count
    is ``first[g(p)]`` exactly whenever the bin of ``p`` holds no reference value, and a binary
    search (``searchsorted(side="left")``) settles the rest. The table stores ``first[j]`` for
    empty bins and ``-(first[j] + 1)`` for occupied ones, so one look-up answers both questions
(and the compiled kernel searches only the values of that bin).

    Pickling sends only the sorted reference; the tables are rebuilt (once per process) where
    the object is unpickled, e.g. on ``dask.distributed`` workers.

    Parameters
    ----------
    ref_sorted : numpy.ndarray, shape (m, k)
        Reference values, each column sorted ascending.
    """

    __slots__ = ("code", "code2d", "factor", "hi", "lo", "m", "n_bins", "scale", "sim_of_count",
                 "sorted", "span")

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
            # occupied bins: -(first + 1), so that the kernel searches only within the bin
            code[counts > 0] = -code[counts > 0] - 1
            self.code.append(code)
        # S for 0 < f < 100 as a function of the count c: 2f for f <= 50, 2 (100 - f) above,
        # i.e. 200 min(c, m - c) / m with f = 100 c / m. From the integer min, so that counts
        # the formula makes equal (c and m - c) give bit-equal S and ties stay ties.
        c = np.arange(self.m + 1)
        self.sim_of_count = 200.0 * np.minimum(c, self.m - c) / self.m
        self.code2d = np.stack(self.code)  # (k, n_bins) for the compiled kernel
        with np.errstate(divide="ignore"):
            self.factor = 100.0 / self.span

    def kernel_args(self) -> tuple:
        """The arrays :func:`timeslice.transfer.kernels.mess_cells` takes after ``good``.

        Returns
        -------
        tuple
        """
        return (self.lo, self.hi, self.factor, self.scale, self.n_bins, self.code2d,
                self.sorted, self.sim_of_count)

    def __reduce__(self):
        return (count_table_cached, (self.sorted.T.copy(),))

    def _bins(self, i: int, x: np.ndarray) -> np.ndarray:
        g = x - self.lo[i]
        g *= self.scale[i]
        np.clip(g, 0.0, self.n_bins - 1, out=g)
        return g.astype(np.intp)  # non-negative: truncation = floor

    def count_smaller(self, i: int, x: np.ndarray) -> np.ndarray:
        """Number of reference values of variable `i` strictly smaller than each finite `x`.

        Parameters
        ----------
        i : int
            Variable index.
        x : numpy.ndarray
            Finite values.

        Returns
        -------
        numpy.ndarray of int64
        """
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
        """MESS similarity ``S_i`` of each finite `x`, in numpy (the compiled kernel's reference).

        Parameters
        ----------
        i : int
            Variable index.
        x : numpy.ndarray
            Finite values.

        Returns
        -------
        numpy.ndarray of float64
        """
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


_TABLE_CACHE: dict[bytes, CountTable] = {}


def count_table_cached(ref_sorted: np.ndarray) -> CountTable:
    """The :class:`CountTable` of a sorted reference, built once per process and content.

    Every slice of a run shares one reference; unpickling on workers lands here too.

    Parameters
    ----------
    ref_sorted : numpy.ndarray, shape (m, k)
        Reference values, each column sorted ascending.

    Returns
    -------
    CountTable
    """
    key = hashlib.sha1(np.ascontiguousarray(ref_sorted).tobytes()).digest()
    table = _TABLE_CACHE.get(key)
    if table is None:
        if len(_TABLE_CACHE) >= 4:  # a few MB each; a run uses one reference
            _TABLE_CACHE.clear()
        table = _TABLE_CACHE[key] = CountTable(ref_sorted)
    return table


def _flag_name(v: str) -> str:
    """CF flag meanings are blank-separated words."""
    return "_".join(str(v).split()) or "unnamed"


@register_metric
class Mess(NoveltyMetric):
    """MESS (Elith, Kearney & Phillips 2010) and the most dissimilar predictor, per cell.

    Layers ``mess`` (float32) and ``most_dissimilar`` (int16 flags naming the predictors).
    The formula is in the docstring of :func:`mess`.
    """

    name = "mess"
    layers = (OutputLayer("mess", np.float32), OutputLayer("most_dissimilar", np.int16,
                                                          DISSIMILAR_FILL))
    reference = "Elith, Kearney & Phillips 2010"

    def prepare(self, ref: ReferenceSet) -> None:
        """Sort the reference columns and build (or reuse) their count table.

        Parameters
        ----------
        ref : ReferenceSet
            The reference sample.
        """
        self.table = count_table_cached(np.sort(ref.values, axis=0))

    def columns(self, good: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """MESS (float64) and the index of the most dissimilar predictor (int16).

        Parameters
        ----------
        good : numpy.ndarray, shape (k, n)
            Finite predictor values.

        Returns
        -------
        tuple of numpy.ndarray
        """
        from timeslice.transfer.kernels import mess_cells

        return mess_cells(good, *self.table.kernel_args())

    def layer_attrs(self, layer: str, ref: ReferenceSet) -> dict[str, Any]:
        """The layer table's attributes plus the reference; flags naming the predictors.

        Parameters
        ----------
        layer : str
            ``mess`` or ``most_dissimilar``.
        ref : ReferenceSet
            The reference sample.

        Returns
        -------
        dict
        """
        attrs = super().layer_attrs(layer, ref)
        if layer == "most_dissimilar":  # the table leaves the run's classes to the stage
            del attrs["reference_points"]
            attrs["flag_values"] = np.arange(len(ref.variables), dtype=np.int16)
            attrs["flag_meanings"] = " ".join(_flag_name(v) for v in ref.variables)
        return attrs


def mess_values(ref_sorted: np.ndarray, values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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
    ``c = searchsorted(ref, p, side="left")`` (found through :class:`CountTable`, exactly); the
    case tests are made on the integer count (``f <= 50`` is ``2 c <= M``), so they are exact.
    """
    from timeslice.transfer.kernels import mess_cells

    ref_sorted = np.asarray(ref_sorted, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)
    k = ref_sorted.shape[1]
    if values.shape[-1] != k:
        raise ValueError(f"values have {values.shape[-1]} variables, reference has {k}")
    good, valid = valid_columns(np.moveaxis(values.reshape(-1, k), -1, 0))
    m, arg = mess_cells(good, *CountTable(ref_sorted).kernel_args())
    shape = values.shape[:-1]
    return (scatter(m, valid, np.nan).reshape(shape),
            scatter(arg, valid, DISSIMILAR_FILL).reshape(shape))


def _novelty_dataset(metric: NoveltyMetric, reference, target, variables, history: str):
    """One metric over every cell of `target` (lazy for dask targets)."""
    from timeslice.transfer.blocks import BlockPlan, block_ufunc
    ref = reference_table(reference, variables=variables)
    arrays = target_arrays(target, ref.variables, "target")
    metric.prepare(ref)
    plan = BlockPlan(metrics=(metric,))
    specs = plan.layers()
    results = xr.apply_ufunc(
        block_ufunc, *arrays, kwargs={"plan": plan, "with_land": False},
        output_core_dims=[[]] * len(specs), dask="parallelized",
        output_dtypes=[s.dtype for s in specs], keep_attrs=False,
    )
    out = xr.Dataset()
    for spec, da in zip(specs, results):
        da = da.rename(spec.name)
        da.attrs = metric.layer_attrs(spec.name, ref)
        if not np.issubdtype(np.dtype(spec.dtype), np.floating):
            da.encoding["_FillValue"] = spec.fill
        out[spec.name] = da
    out.attrs = {"reference_set": REFERENCE_DESCRIPTION, "variables": " ".join(ref.variables),
                 "history": history}
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

    ``f`` is counted exactly (:class:`CountTable`: a look-up table, and a binary search in the
    sorted reference column where the table cannot decide).

    References
    ----------
    Elith, J., Kearney, M. & Phillips, S. (2010). The art of modelling range-shifting species.
    *Methods in Ecology and Evolution*, 1, 330–342. https://doi.org/10.1111/j.2041-210X.2010.00036.x
    """
    return _novelty_dataset(Mess(), reference, target, variables,
                            "timeslice.transfer.novelty.mess (Elith, Kearney & Phillips 2010)")


# -------------------------------------------------------------------------------------- ExDet


def exdet_parameters(ref: ReferenceSet) -> dict[str, Any]:
    """Reference range, mean, covariance factor and largest distance of ExDet.

    Parameters
    ----------
    ref : ReferenceSet
        The reference sample.

    Returns
    -------
    dict
        ``lo``, ``hi``, ``mean`` (k,), ``chol`` (lower Cholesky factor of the covariance),
        ``whiten`` (its inverse) and ``d2_max`` (float).

    Raises
    ------
    DataError
        The covariance is singular or numerically so (collinear predictors).
    """
    key = hashlib.sha1(ref.values.tobytes()).digest()
    if key not in _EXDET_CACHE:
        if len(_EXDET_CACHE) >= 4:  # every slice of a run shares one reference
            _EXDET_CACHE.clear()
        _EXDET_CACHE[key] = _exdet_parameters(ref)
    return dict(_EXDET_CACHE[key])


_EXDET_CACHE: dict[bytes, dict[str, Any]] = {}


def _exdet_parameters(ref: ReferenceSet) -> dict[str, Any]:
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


@register_metric
class ExDet(NoveltyMetric):
    """ExDet (Mesgaran, Cousens & Webber 2014): univariate (NT1) and combinational (NT2)
    novelty, per cell. The formulas are in the docstring of :func:`exdet`."""

    name = "exdet"
    layers = (OutputLayer("nt1", np.float32), OutputLayer("nt2", np.float32))
    reference = "Mesgaran, Cousens & Webber 2014"

    def prepare(self, ref: ReferenceSet) -> None:
        """Reference range, mean, whitening triangle and largest reference distance.

        Parameters
        ----------
        ref : ReferenceSet
            The reference sample.
        """
        self.params = exdet_parameters(ref)

    def columns(self, good: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """NT1 and NT2 (float64).

        Parameters
        ----------
        good : numpy.ndarray, shape (k, n)
            Finite predictor values.

        Returns
        -------
        tuple of numpy.ndarray
        """
        from timeslice.transfer.kernels import exdet_cells

        p = self.params
        return exdet_cells(good, p["lo"], p["hi"], p["mean"], p["whiten"], p["d2_max"])


def exdet_values(
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
    from timeslice.transfer.kernels import exdet_cells

    values = np.asarray(values, dtype=np.float64)
    k = lo.shape[0]
    if whiten is None:
        whiten = scipy.linalg.solve_triangular(chol, np.eye(k), lower=True)
    good, valid = valid_columns(np.moveaxis(values.reshape(-1, k), -1, 0))
    nt1, nt2 = exdet_cells(good, lo, hi, mean, whiten, d2_max)
    shape = values.shape[:-1]
    return (scatter(nt1, valid, np.nan).reshape(shape),
            scatter(nt2, valid, np.nan).reshape(shape))


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
    return _novelty_dataset(ExDet(), reference, target, variables,
                            "timeslice.transfer.novelty.exdet (Mesgaran, Cousens & Webber 2014)")


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
