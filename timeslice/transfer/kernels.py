"""Compiled per-cell loops of the transfer: stacking finite cells, MESS, ExDet NT1/NT2.

Each function makes one pass over the cells of a block with every predictor of a cell in
registers, instead of a dozen vectorised numpy passes per predictor. They are compiled by numba
(``nogil=True``, so the row blocks of :mod:`timeslice.transfer.blocks` run on several threads;
``cache=True``, so a process compiles once per machine). Without ``fastmath`` the compiler keeps
IEEE order of operations (no fused multiply-add, no reassociation): every value is bit-identical
to the numpy formulas they replace, and ``tests/transfer/test_kernels.py`` checks that against
plain numpy on random and edge-case input.

This module imports numba; import it only where a transfer runs (``import timeslice`` and the
command line's ``--help`` stay free of the JIT).
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = ["exdet_cells", "mess_cells", "stack_finite"]

_JIT = {"nogil": True, "cache": True, "fastmath": False}


@njit(**_JIT)
def stack_finite(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The cells of `x` whose every predictor is finite, as float64, and the mask of those cells.

    Parameters
    ----------
    x : numpy.ndarray, shape (k, n)
        Predictors on the first axis (float32 or float64).

    Returns
    -------
    good : numpy.ndarray, shape (k, n_valid), float64
        C-contiguous; cells in their original order.
    valid : numpy.ndarray, shape (n,), bool
        True where every predictor of the cell is finite.
    """
    k, n = x.shape
    valid = np.ones(n, dtype=np.bool_)
    for i in range(k):  # predictor by predictor: contiguous rows
        row = x[i]
        for j in range(n):
            valid[j] &= np.isfinite(row[j])
    n_valid = 0
    for j in range(n):
        n_valid += valid[j]
    good = np.empty((k, n_valid), dtype=np.float64)
    for i in range(k):
        row = x[i]
        c = 0
        for j in range(n):
            if valid[j]:
                good[i, c] = row[j]
                c += 1
    return good, valid


@njit(**_JIT)
def _count_smaller(row: np.ndarray, value: float, lo: int, hi: int) -> int:
    """``searchsorted(row, value, side="left")`` knowing that the answer is in ``lo..hi``."""
    while lo < hi:
        mid = (lo + hi) >> 1
        if row[mid] < value:
            lo = mid + 1
        else:
            hi = mid
    return lo


@njit(**_JIT)
def mess_cells(
    good: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    factor: np.ndarray,
    scale: np.ndarray,
    n_bins: int,
    code: np.ndarray,
    ref_sorted: np.ndarray,
    sim_of_count: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """MESS and the most dissimilar predictor of every cell (the count table of
    :class:`timeslice.transfer.novelty.CountTable`, whose arrays these are).

    Parameters
    ----------
    good : numpy.ndarray, shape (k, n), float64
        Finite predictor values.
    lo, hi : numpy.ndarray, shape (k,)
        Reference minimum and maximum.
    factor : numpy.ndarray, shape (k,)
        ``100 / (hi - lo)``.
    scale : numpy.ndarray, shape (k,)
        Bins per unit of each predictor.
    n_bins : int
        Bins per predictor.
    code : numpy.ndarray, shape (k, n_bins), int32
        Count ``first`` of reference values in lower bins for empty bins, ``-(first + 1)`` for
        occupied ones.
    ref_sorted : numpy.ndarray, shape (k, m)
        Reference values, each row ascending.
    sim_of_count : numpy.ndarray, shape (m + 1,)
        Similarity as a function of the count of smaller reference values.

    Returns
    -------
    mess : numpy.ndarray, shape (n,), float64
    most_dissimilar : numpy.ndarray, shape (n,), int16
        First predictor with the smallest similarity.
    """
    k, n = good.shape
    m = ref_sorted.shape[1]
    top = float(n_bins - 1)
    best = np.full(n, np.inf)
    arg = np.zeros(n, dtype=np.int16)
    # predictor by predictor (one table row stays in cache), cell by cell within
    for i in range(k):
        row, table, low, high = good[i], code[i], lo[i], hi[i]
        for j in range(n):
            x = row[j]
            if x > low and x <= high:  # 0 < f < 100: from the exact count
                g = (x - low) * scale[i]
                if g < 0.0:
                    g = 0.0
                elif g > top:
                    g = top
                b = int(g)
                c = table[b]
                if c < 0:  # the bin holds reference values: search among them only
                    start = -c - 1
                    end = m if b == n_bins - 1 else table[b + 1]
                    if end < 0:
                        end = -end - 1
                    c = _count_smaller(ref_sorted[i], x, start, end)
                s = sim_of_count[c]
            else:  # f = 0 or f = 100: linear in the distance to the range
                s = min(x - low, high - x) * factor[i]
            if s < best[j]:  # strict: the first predictor keeps ties
                best[j] = s
                arg[j] = i
    return best, arg


@njit(**_JIT)
def exdet_cells(
    good: np.ndarray,
    lo: np.ndarray,
    hi: np.ndarray,
    mean: np.ndarray,
    whiten: np.ndarray,
    d2_max: float,
) -> tuple[np.ndarray, np.ndarray]:
    """ExDet NT1 and NT2 of every cell.

    Parameters
    ----------
    good : numpy.ndarray, shape (k, n), float64
        Finite predictor values.
    lo, hi, mean : numpy.ndarray, shape (k,)
        Reference minimum, maximum and mean.
    whiten : numpy.ndarray, shape (k, k)
        Inverse of the lower Cholesky factor of the reference covariance (lower triangular).
    d2_max : float
        Largest squared Mahalanobis distance among the reference points.

    Returns
    -------
    nt1, nt2 : numpy.ndarray, shape (n,), float64
    """
    k, n = good.shape
    nt1 = np.zeros(n, dtype=np.float64)
    nt2 = np.empty(n, dtype=np.float64)
    tile = 512  # cells at a time: the inner loops run over cells, which the compiler vectorises
    centred = np.empty((k, tile), dtype=np.float64)
    z = np.empty(tile, dtype=np.float64)
    d2 = np.empty(tile, dtype=np.float64)
    for j0 in range(0, n, tile):
        t = min(tile, n - j0)
        for i in range(k):
            row, low, high, mu = good[i], lo[i], hi[i], mean[i]
            width = high - low
            for j in range(t):
                x = row[j0 + j]
                d = min(x - low, high - x)
                # adding the zero of a cell inside the range changes nothing
                nt1[j0 + j] += d / width if d < 0.0 else 0.0
                centred[i, j] = x - mu
        for j in range(t):
            d2[j] = 0.0
        for i in range(k):  # z_i = (L^-1 (x - mean))_i, summed in column order, per cell
            w0 = whiten[i, 0]
            for j in range(t):
                z[j] = centred[0, j] * w0
            for m in range(1, i + 1):
                wm = whiten[i, m]
                for j in range(t):
                    z[j] += centred[m, j] * wm
            for j in range(t):
                d2[j] += z[j] * z[j]
        for j in range(t):
            nt2[j0 + j] = d2[j] / d2_max
    return nt1, nt2
